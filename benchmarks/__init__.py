"""The suite: cases, the runner, metrics, the HDF5 store, analysis, plots, the gate and the CLI."""
