"""Sweeps: the sweep-file schema, settings ladders, the executor (local pool or Dask) and
the shipped sweeps."""
