"""Lie-group Runge-Kutta methods on the body form (kernel.py, methods.py): the attitude moves
only by quaternion exponentials, so |q| = 1 by construction, with no renormalisation."""
