"""The figure axis of a case's extended-precision reference for the axis-path figure, when the
runs drawn have no exact solution: without it the figure could only show the runs seen from the
first of them. Taken only when every run drawn is of one case text, horizon and sample count
(the reference is built at those sample times; cached, see run/case_reference.py)."""

from __future__ import annotations

import numpy as np

from topdrift.benchmarks.cases.schema import parse_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.case_reference import case_reference

LABEL = "extended-precision reference"
# Every name a reference provider gives its reference (run/case_reference.py), for the plots to
# know the truth drawn: the field's reference is computed in double precision.
LABELS = (LABEL, "double-precision reference")


def reference_axis(runs: list[dict]) -> tuple[np.ndarray, str] | None:
    """(axes at the runs' sample times, a legend label naming its verified accuracy), or None
    when the runs have an exact solution or no single reference fits them all."""
    if not runs or any(r.get("exact_euler") is not None for r in runs):
        return None
    recs = [r["record"] for r in runs]
    texts = {rec.get("case_toml") for rec in recs}
    horizons = {rec["settings"].get("horizon") for rec in recs}
    samples = {rec.get("samples") for rec in recs}
    if len(texts) != 1 or len(horizons) != 1 or len(samples) != 1:
        return None
    (text,), (horizon,), (n,) = texts, horizons, samples
    if not text or horizon is None or n is None or int(n) < 2:
        return None
    try:
        case = parse_case(text, f"{recs[0].get('case')} (the run's case text)")
        ref = case_reference(case, float(horizon), int(n))
    except UserError:
        return None  # the figure still shows the runs against each other
    longest = max(len(r["t"]) for r in runs)
    for r in runs:  # the runs' own times, to the bit, or no reference
        if not np.array_equal(np.asarray(r["t"]), ref.times[: len(r["t"])]):
            return None
    return ref.axes()[:longest], f"{ref.label} (verified to {ref.accuracy['axis']:.2g} rad)"
