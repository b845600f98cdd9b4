"""The suite: cases, the runner, metrics, the HDF5 store, analysis, plots, the gate and the CLI."""

# The models first: they point numba's kernel cache at this code's folder (kernel_cache.py).
import topdrift.models  # noqa: F401, I001
