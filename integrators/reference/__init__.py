"""scipy.integrate's solvers behind topdrift's method contract."""
