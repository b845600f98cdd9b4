"""The `topdrift` command line: the entry point and one module per command."""
