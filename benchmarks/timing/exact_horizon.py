"""The exact solution's figure-axis error at long horizons, against an independent 40-digit
computation: the table of issue 13 measured with today's code.

    python benchmarks/timing/exact_horizon.py [--periods 1e2 1e4 1e6 1e8] [--json OUT]

Two symmetric tops of our own, both started mid-nutation (theta_rate != 0), one unidirectional
and one with loops: the tops "unidirectional" and "loops, mid-nutation" of
tests/test_exact_ulps.py, taken from there so that the test and this table measure the same
motions. The reference is the tests' quadrature reference (tests/exact_reference.py:
tanh-sinh quadrature at 40 digits of dt, phidot dt and psidot dt, Goldstein, Classical
Mechanics, sec. 5.7; it shares no code with models/exact.py). At each horizon n nutation periods
(the time n * period rounded to a double, taken as exact by both sides), the figure axis of the
exact solution, (sin phi sin theta, -cos phi sin theta, cos theta) in doubles from its folded
angles, is compared with the reference's axis in 40 digits by the angle between them,
atan2(|a x b|, a . b). Not a test (tests/test_exact_ulps.py bounds every angle at 2e-15 rad);
this prints the numbers. A few seconds (the reference inverts each time by quadrature).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

TESTS = Path(__file__).resolve().parents[2] / "tests"
TOP_NAMES = {"top 1 (unidirectional)": "unidirectional", "top 2 (loops)": "loops, mid-nutation"}


def axis_error(top, ref, t: float) -> float:
    """Angle (rad) between the exact solution's figure axis at t and the reference's."""
    import mpmath as mp
    import numpy as np

    got = top.axis(np.array([t]))[0]
    with mp.workdps(ref.digits):
        theta, phi, _, _, _ = ref.folded(t)
        b = [mp.sin(phi) * mp.sin(theta), -mp.cos(phi) * mp.sin(theta), mp.cos(theta)]
        a = [mp.mpf(float(v)) for v in got]
        cross = [a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0]]
        dot = sum(x * y for x, y in zip(a, b, strict=True))
        return float(mp.atan2(mp.sqrt(sum(c * c for c in cross)), dot))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--periods", type=float, nargs="+", default=[1e2, 1e4, 1e6, 1e8])
    ap.add_argument("--json", metavar="OUT", help="write the table here as JSON")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(TESTS))
    from exact_reference import QuadratureTop
    from per_step import cpu_name  # this folder's (a script's own folder is on sys.path)
    from test_exact_ulps import TOPS

    from topdrift.models import FORM_EULER
    from topdrift.models.exact import LagrangeTop

    print(f"CPU: {cpu_name()}; horizons in nutation periods")
    rows = {}
    for label, name in TOP_NAMES.items():
        (body, form, y), _motion = TOPS[name]
        p = body.params()
        t0 = time.perf_counter()
        top = LagrangeTop.from_state(body, form, y)
        ref = QuadratureTop(p[0], p[2], p[8], y, "euler" if form == FORM_EULER else "body")
        errs = [axis_error(top, ref, float(n * top.nutation_period)) for n in args.periods]
        rows[label] = {
            "motion": top.motion,
            "nutation_period_s": top.nutation_period,
            "axis_error_rad": errs,
            "seconds": time.perf_counter() - t0,
        }
    head = " | ".join(f"{n:.0e}".replace("e+0", "e").replace("e+", "e") for n in args.periods)
    print(f"| horizon (nutation periods) | {head} |")
    print("| --- |" + " --- |" * len(args.periods))
    for label, r in rows.items():
        print(
            f"| {label}, axis error (rad) | "
            + " | ".join(f"{e:.1e}" for e in r["axis_error_rad"])
            + " |"
        )
    for label, r in rows.items():
        print(
            f"{label}: {r['motion']}, period {r['nutation_period_s']:.6g} s "
            f"({r['seconds']:.0f} s to measure)"
        )
    if args.json:
        with open(args.json, "w") as f:
            json.dump({"periods": args.periods, "tops": rows}, f, indent=2)
    return 0


if __name__ == "__main__":
    sys.exit(main())
