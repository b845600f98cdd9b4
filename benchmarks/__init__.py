"""The suite: cases, the runner, metrics, the HDF5 store, analysis, plots, the gate and the CLI."""

# Not imported here: the models, which point numba's kernel cache at this code's folder
# (models/kernel_cache.py). The pytest plugin imports this package and must stay light; the
# two modules here that compile kernels (run/sampling.py, gate/reference_workload.py) import
# topdrift.models themselves before they import numba.
