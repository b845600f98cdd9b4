"""Splitting methods: composition tables with their sources and the kernels that
compose the exact sub-flows."""
