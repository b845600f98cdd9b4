"""Energy that Lie-group generalized-alpha removes per nutation period, against rho_inf.

    python benchmarks/timing/galpha_damping.py [--step H] [--periods N]

A Lagrange top of our own (demo numbers) in the body form, run with lie-galpha at each rho_inf
over N nutation periods (the period from the exact solution, models/exact.py); printed: the
relative energy change per period (the slope of a straight line fitted to the relative energy
error over the run, times the period: the bounded oscillation of the error averages out), and
the largest relative energy error. rho_inf = 1 removes none (its error is bounded, of order h^2);
below 1 the loss grows as rho_inf falls and as the step grows against the motion's time scales.
"""

from __future__ import annotations

import argparse

import numpy as np

from topdrift.integrators import ST_OK, get
from topdrift.models import FORM_BODY, RigidBody, body_state, invariants_of
from topdrift.models.exact import LagrangeTop

BODY = RigidBody(mass=1.0, inertia=(1.0, 1.0, 0.6), com=(0.0, 0.0, 0.1))
START = (0.0, 1.0, 0.0, 0.3, 0.5, 5.0)
RHOS = (1.0, 0.95, 0.9, 0.8, 0.6, 0.3, 0.0)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--step", type=float, default=0.01)
    ap.add_argument("--periods", type=int, default=100)
    a = ap.parse_args(argv)
    y0 = body_state(BODY, *START)
    period = float(LagrangeTop.from_state(BODY, FORM_BODY, y0).nutation_period)
    e0 = invariants_of(FORM_BODY, y0, BODY.params())["energy"]
    samples = 20 * a.periods
    t_end = a.periods * period
    h = (t_end / samples) / max(1, round((t_end / samples) / a.step))
    print(f"Lagrange top, nutation period {period:.6g} s, h = {h:.6g} s, {a.periods} periods")
    print(f"{'rho_inf':>8} {'dE/E per period':>16} {'max |dE/E|':>12}")
    for rho in RHOS:
        st = get("lie-galpha").start(FORM_BODY, BODY.params(), 0.0, y0, {"step": h, "rho_inf": rho})
        times = np.linspace(t_end / samples, t_end, samples)
        errors = []
        for t in times:
            if st.advance_to(t) != ST_OK:
                raise SystemExit(f"rho_inf = {rho}: stopped at t = {st.t_fail}")
            e = invariants_of(FORM_BODY, st.y, BODY.params())["energy"]
            errors.append((e - e0) / abs(e0))
        worst = float(np.max(np.abs(errors)))
        per = float(np.polyfit(times, errors, 1)[0]) * period
        print(f"{rho:8.2f} {per:16.3e} {worst:12.3e}")


if __name__ == "__main__":
    main()
