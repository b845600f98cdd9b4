"""Lie-group generalized-alpha on the body form (kernel.py, methods.py): the multibody codes'
implicit scheme with numerical damping set by its spectral radius at infinity, rho_inf."""
