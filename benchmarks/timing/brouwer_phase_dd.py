"""Brouwer's second law below double precision: the phase round-off of the compensated
Gauss-Legendre methods, measured on each member's whole compensated state (value plus its
carried rounding) against a 40-digit reference.

    python benchmarks/timing/brouwer_phase_dd.py [--method gauss4-kahan] [--step 1e-7]
                                                 [--steps 1e7] [--starts 16] [--points 24]
                                                 [--json OUT]

Why a second phase study. `topdrift roundoff` (and brouwer.py) compare each member's attitude,
rounded to doubles, with the double-precision exact solution: two attitudes known to about
1e-16 rad. gauss4-kahan's phase round-off, R = rho h^2 N^(3/2) with rho about 8e-15 s^-2, rises
above that floor and above its truncation, T = kappa h^5 N with kappa about 1e7 s^-5, only
beyond some 1e9 steps (docs/ensembles-and-roundoff.md). Here the floor is gone: the member's
state is taken as the double-double it is (the compensated methods carry the rounding of every
update beside the state), and the exact motion is the tests' independent quadrature reference
(tests/exact_reference.py: mpmath tanh-sinh quadrature at 40 digits, Goldstein, Classical
Mechanics, sec. 5.7; no code of topdrift.models.exact). With the floor below 1e-30, a step of
1e-7 s keeps R above T by a factor 0.8 sqrt(N) (80 at N = 1e4) and the law shows over N = 1e5
to 1e7.

What keeps the model the same on both sides, so that only round-off is left: the top's moments
are powers of two (1/I exact in the kernels), M g l is the kernels' own double, and every start
has the quaternion (1, 1, 1, 1)/2, whose norm is exactly 1 (the body-form equations move a
quaternion of norm 1 +- 2e-16 as a top of weight M g l |q|^2; this one has none of that). The
members differ in their body momentum m, by a relative spread of 1e-6 (our own demo numbers).

Time: N h is taken exactly (as a double plus its remainder). The attitude error is the angle of
R_exact^T R, from its antisymmetric part (sin of the angle; an arccos of the trace near 1 loses
half the digits). The fit is the round-off study's: least squares over the last two decades.
Target 1.5 +- 0.15 (Brouwer, Astron. J. 46 (1937) 149); exit 1 if missed.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import mpmath as mp
import numpy as np

from topdrift.benchmarks.choose.roundoff import fit_exponent
from topdrift.integrators import get as get_method
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import FORM_BODY, RigidBody
from topdrift.models.body import P_MGZ

TESTS = Path(__file__).resolve().parents[2] / "tests"
TARGET, TOLERANCE = 1.5, 0.15
DIGITS = 40
# Demo numbers of our own: a toy top with moments that are powers of two, lying horizontal
# (q = (1, 1, 1, 1)/2 puts its axis at theta = 90 deg), spinning at about 160 rad/s.
BODY = RigidBody(mass=0.25, inertia=(2.0**-12, 2.0**-12, 2.0**-13), com=(0.0, 0.0, 2.0**-5))
Q0 = (0.5, 0.5, 0.5, 0.5)
M0 = (2.0e-4, -1.0e-4, 0.02)  # body angular momentum (kg m^2/s): m3 / I3 = 164 rad/s
SPREAD = 1e-12
SEED = 20261203


def starts(n: int, spread: float) -> np.ndarray:
    rng = np.random.default_rng(SEED)
    rows = []
    for j in range(n):
        m = np.array(M0) * (1.0 + (0.0 if j == 0 else spread) * rng.standard_normal(3))
        rows.append(np.concatenate([Q0, m]))
    return np.array(rows)


def rotation(q):
    """R(q) (body to space) of a quaternion given as mpf, normalised first."""
    n = mp.sqrt(sum(v * v for v in q))
    q0, q1, q2, q3 = (v / n for v in q)
    return mp.matrix(
        [
            [1 - 2 * (q2**2 + q3**2), 2 * (q1 * q2 - q0 * q3), 2 * (q1 * q3 + q0 * q2)],
            [2 * (q1 * q2 + q0 * q3), 1 - 2 * (q1**2 + q3**2), 2 * (q2 * q3 - q0 * q1)],
            [2 * (q1 * q3 - q0 * q2), 2 * (q2 * q3 + q0 * q1), 1 - 2 * (q1**2 + q2**2)],
        ]
    )


def rz(a):
    c, s = mp.cos(a), mp.sin(a)
    return mp.matrix([[c, -s, 0], [s, c, 0], [0, 0, 1]])


def rx(a):
    c, s = mp.cos(a), mp.sin(a)
    return mp.matrix([[1, 0, 0], [0, c, -s], [0, s, c]])


def error_vector(ra, rb):
    """The small rotation from ra to rb as a vector in space axes: the axial vector of the
    antisymmetric part of ra^T rb is 2 sin(angle) times the axis in ra's body axes; ra turns it
    into space axes, where the members' vectors can be averaged."""
    d = ra.T * rb
    v = mp.matrix([d[2, 1] - d[1, 2], d[0, 2] - d[2, 0], d[1, 0] - d[0, 1]]) / 2
    return ra * v


def norm(v):
    return mp.sqrt(sum(x * x for x in v))


def angle_between(ra, rb):
    """The rotation angle of ra^T rb, from the antisymmetric part of ra^T rb: 2 sin(angle)."""
    return mp.asin(min(mp.mpf(1), norm(error_vector(ra, rb))))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--method", default="gauss4-kahan")
    ap.add_argument("--step", type=float, default=1e-7)
    ap.add_argument("--steps", type=float, default=1e7)
    ap.add_argument("--starts", type=int, default=16)
    ap.add_argument("--points", type=int, default=24)
    ap.add_argument("--spread", type=float, default=SPREAD, help="relative spread of m")
    ap.add_argument("--json", metavar="OUT")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(TESTS))
    from exact_reference import QuadratureTop
    from per_step import cpu_name  # this folder's (a script's own folder is on sys.path)

    mp.mp.dps = DIGITS
    method = get_method(args.method)
    if not method.info.compensated:
        print(f"{args.method}: not compensated; it has no rounding to carry", file=sys.stderr)
        return 2
    p = BODY.params()
    y0 = starts(args.starts, args.spread)
    i1, i3 = BODY.inertia[0], BODY.inertia[2]
    tops = [QuadratureTop(i1, i3, p[P_MGZ], y, form="body", digits=DIGITS) for y in y0]
    ens = EnsembleStepper(method, FORM_BODY, p, 0.0, y0, args.step)
    h = mp.mpf(args.step)
    n_at = np.unique(np.round(np.geomspace(1000, args.steps, args.points)).astype(np.int64))
    rms, apart = [], []
    t_start = time.perf_counter()
    # The convention check: at t = 0 the two attitudes agree to the working digits.
    worst = 0.0
    for j, top in enumerate(tops):
        th, ph, ps = top.at(0.0)
        rq = rotation([mp.mpf(float(v)) for v in y0[j, :4]])
        worst = max(worst, float(angle_between(rz(ph) * rx(th) * rz(ps), rq)))
    print(f"start: largest angle between the state's and the reference's attitude {worst:.2g}")
    if worst > 1e-30:
        print("the reference does not read the starts as the kernels do", file=sys.stderr)
        return 1
    for k in n_at:
        while ens.n < k:
            status = ens.advance_to(float(min(int(k), ens.n + (1 << 16))) * args.step)
            if np.any(status != 0):
                print(f"a member stopped (status {status.max()}) before step {k}", file=sys.stderr)
                return 1
        low = ens.low_parts()
        t_exact = int(k) * h
        t_hi = float(t_exact)
        t_lo = float(t_exact - mp.mpf(t_hi))
        vecs = []
        for j, top in enumerate(tops):
            q = [mp.mpf(float(ens.y[j, i])) + mp.mpf(float(low[j, i])) for i in range(4)]
            th, ph, ps = top.at(t_hi, t_lo)
            vecs.append(error_vector(rz(ph) * rx(th) * rz(ps), rotation(q)))
        kk = len(vecs)
        mean = sum(vecs[1:], vecs[0]) / kk
        r = float(mp.sqrt(mp.fsum(norm(v) ** 2 for v in vecs) / kk))
        # the spread about the members' mean, unbiased: what the members do not share
        r_apart = float(mp.sqrt(mp.fsum(norm(v - mean) ** 2 for v in vecs) / (kk - 1)))
        rms.append(r)
        apart.append(r_apart)
        took = time.perf_counter() - t_start
        print(
            f"N = {int(k):>10d}   RMS attitude error {r:.3e} rad   about the mean {r_apart:.3e}"
            f"   |mean| {float(norm(mean)):.3e}   ({took:.0f} s)"
        )
        sys.stdout.flush()
    total_exponent, _ = fit_exponent(n_at.astype(float), np.array(rms))
    exponent, fit_range = fit_exponent(n_at.astype(float), np.array(apart))
    ok = exponent is not None and abs(exponent - TARGET) <= TOLERANCE
    cpu = cpu_name()
    print(
        f"{args.method}: {args.starts} starts (spread {args.spread:g}), {args.steps:.3g} steps "
        f"of {args.step:g} s; RMS error exponent {total_exponent:.3f}; phase round-off exponent "
        f"(spread about the mean) {exponent:.3f} over N = {fit_range[0]} .. {fit_range[1]} "
        f"(target {TARGET} +- {TOLERANCE}): {'met' if ok else 'MISSED'}; CPU {cpu}"
    )
    if args.json:
        doc = {
            "method": args.method,
            "step": args.step,
            "steps": args.steps,
            "starts": args.starts,
            "n": n_at.tolist(),
            "spread": args.spread,
            "rms_phase_error": rms,
            "rms_about_mean": apart,
            "total_exponent": total_exponent,
            "phase_exponent": exponent,
            "phase_fit_range": fit_range,
            "reference": "tests/exact_reference.py QuadratureTop, 40 digits",
        }
        Path(args.json).write_text(json.dumps(doc, indent=1))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
