"""The regression gate: the baseline file, recording and measuring a grid, the reference
workload for timings, and the comparison."""
