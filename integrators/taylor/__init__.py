"""A Taylor-series method of adaptive order and step for the body form (kernel.py, methods.py)."""
