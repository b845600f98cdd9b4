"""First-order engine schemes, the steps real-time engines take (kernel.py, methods.py)."""
