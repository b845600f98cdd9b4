"""Extrapolation: Gragg-Bulirsch-Stoer of adaptive order and step (kernel.py, methods.py)."""
