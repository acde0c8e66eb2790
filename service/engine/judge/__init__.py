"""Judging a circuit: as-built figures, build checks, noise, supply ripple, Monte Carlo, response curves."""
