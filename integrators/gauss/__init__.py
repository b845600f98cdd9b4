"""Gauss-Legendre collocation: the tableaux and the implicit kernel."""
