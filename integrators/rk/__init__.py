"""Runge-Kutta methods: Butcher tableaux, the packed form the kernels read, the fixed-step
and the embedded adaptive kernels."""
