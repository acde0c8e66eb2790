"""Judging a circuit: as-built figures, build checks and verdict, noise, supply ripple,
Monte Carlo and response curves."""
