"""The run-file format (HDF5): its one writer and one reader."""
