"""Constrained mechanics on the rotation group (kernel.py, methods.py): RATTLE on the rotation
matrix, the attitude's orthogonality held as a constraint with its multiplier."""
