"""Run files (HDF5): the format's names and messages, the checks every command's file passes,
the one reader, the one writer, and the one handler of failed writes."""
