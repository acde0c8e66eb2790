"""Synthesising a circuit: E-series values, textbook cascade formulas and the design search."""
