"""Running a case: the runner and its sampling kernel, metrics, in-memory runs, ensembles,
progress lines."""
