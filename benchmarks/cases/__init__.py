"""Case files: the TOML schema, units, the shipped case library and what `describe`
reports of a case."""
