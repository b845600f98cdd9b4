"""Extended-precision references for cases with no closed form: a Taylor-series integration of
the body-form equations in double-double arithmetic (taylor_dd.py), and the reference built from
two such integrations with its own error estimate (reference.py). Not a method family (nothing
here is registered): it is what the methods are measured against."""
