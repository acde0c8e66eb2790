"""Solving the circuit: the chain solver, general modified nodal analysis and corner search."""
