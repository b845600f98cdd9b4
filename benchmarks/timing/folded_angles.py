"""What folding the Euler form's angles buys on a long run: the phase error of phi and psi
against the exact solution, folded (the default) against unfolded (Stepper.keep_angles_unfolded),
at log-spaced step counts out to 10^9 steps.

    python benchmarks/timing/folded_angles.py [--max-steps 1e9] [--case demo-wheel]
        [--method leapfrog:1e-4 --method leapfrog-kl8:1e-3] [--json FILE] [--cost]
    python benchmarks/timing/folded_angles.py --method dop853:1e-13 [--max-time 1e5]

Each method runs twice from the case's start in the Euler form, once folding phi and psi every
step with the whole turns counted beside the state, once letting them grow; both are advanced to
every checkpoint N (1e3, 1e4, ... max-steps) and compared there with the exact Lagrange-top
solution, whose angles are folded with exact turns (models/exact.py). For a method with a
tolerance (rk45, dop853) the number after the colon is rtol (atol = rtol / 100), and the
checkpoints are times, 1 s, 10 s, ... max-time, with the steps each run took beside them (the
two take the same steps: the step control sees the angles with their turns put back). The
errors are taken from folded angles plus the turn difference
(benchmarks/run/metrics.angle_difference), so the comparison itself adds nothing at any horizon.
Not a test: a billion steps take minutes (the leapfrog at about 40-90 ns a step, an order-8
composition about 15 times that, dop853 at rtol 1e-13 about 1 us a step and 290 steps a second
of the demo wheel).
"""

from __future__ import annotations

import argparse
import json
import math
import platform
import sys
import time

import numpy as np

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.run.metrics import angle_difference, axis_angle
from topdrift.integrators import C_STEPS, get
from topdrift.models import FORM_EULER
from topdrift.models.exact import LagrangeTop
from topdrift.models.quaternion import figure_axis, from_euler
from topdrift.models.turns import true_angle

DEFAULT_METHODS = ("leapfrog:1e-4", "leapfrog-kl8:1e-3")
ATOL_PER_RTOL = 1e-2  # an adaptive method's atol, from its rtol


def _settings(method, value: float) -> dict:
    """The method's settings from the number after the colon: a step, or rtol."""
    if method.info.control == "tolerance":
        return {"rtol": value, "atol": value * ATOL_PER_RTOL}
    return {"step": value}


def _angles(st) -> tuple[float, int, float, float, int]:
    """(phi, phi_turns, theta, psi, psi_turns) of a stepper, folded by 2 pi with whole turns."""
    k = st.turns if st.turns.shape[0] == 2 else np.zeros(2, dtype=np.int64)
    phi, n_phi = true_angle(float(st.y[0]), float(k[0]))
    psi, n_psi = true_angle(float(st.y[2]), float(k[1]))
    return phi, int(n_phi), float(st.y[1]), psi, int(n_psi)


def _errors(st, top: LagrangeTop, t: float) -> dict:
    phi, n_phi, theta, psi, n_psi = _angles(st)
    ex = top.folded(np.array([t]))
    d_phi = angle_difference(phi, ex.phi[0], n_phi - int(ex.phi_turns[0]))
    d_psi = angle_difference(psi, ex.psi[0], n_psi - int(ex.psi_turns[0]))
    axis = np.array([figure_axis(*from_euler(phi, theta, psi))])
    return {
        "phi": abs(float(d_phi)),
        "psi": abs(float(d_psi)),
        "axis": float(axis_angle(axis, ex.axis())[0]),
        "psi_unfolded_size": abs(psi + 2 * math.pi * n_psi),
    }


def checkpoints(max_steps: int) -> list[int]:
    out, n = [], 1000
    while n < max_steps:
        out.append(n)
        n *= 10
    return [*out, max_steps]


def time_checkpoints(max_time: float) -> list[float]:
    out, t = [], 1.0
    while t < max_time:
        out.append(t)
        t *= 10.0
    return [*out, max_time]


def measure(
    case_name: str, method: str, value: float, max_steps: int, max_time: float = 1e4
) -> list[dict]:
    """Rows of errors at the checkpoints; value is the step, or rtol for a method with a
    tolerance (whose checkpoints are times up to max_time)."""
    case = load_case(case_name)
    y0 = case.state(FORM_EULER)
    params = case.body.params()
    top = LagrangeTop.from_state(case.body, "euler", y0)
    m = get(method)
    settings = _settings(m, value)
    folded = m.start(FORM_EULER, params, 0.0, y0, dict(settings))
    unfolded = m.start(FORM_EULER, params, 0.0, y0, dict(settings))
    unfolded.keep_angles_unfolded()
    adaptive = "rtol" in settings
    if adaptive:
        times = time_checkpoints(max_time)
        label = f"rtol={value:g}"
    else:
        times = [n * value for n in checkpoints(max_steps)]
        label = f"h={value:g}"
    rows = []
    for t in times:
        row = {"t": t}
        for kind, st in (("folded", folded), ("unfolded", unfolded)):
            c0 = time.perf_counter()
            status = st.advance_to(t)
            if status != 0:
                raise SystemExit(f"{method}: status {status} at t = {st.t}")
            row[kind] = _errors(st, top, t)
            row[kind]["seconds"] = time.perf_counter() - c0
            row[kind]["steps"] = int(st.counters[C_STEPS])
        n = row["folded"]["steps"]
        row["steps"] = n
        rows.append(row)
        f, u = row["folded"], row["unfolded"]
        print(
            f"{method:14s} {label} N={n:.2e} t={t:.3g} s  psi {u['psi_unfolded_size']:.3g} rad  "
            f"phase error psi: folded {f['psi']:.3e} unfolded {u['psi']:.3e}  "
            f"phi: folded {f['phi']:.3e} unfolded {u['phi']:.3e}  "
            f"axis: folded {f['axis']:.3e} unfolded {u['axis']:.3e}",
            flush=True,
        )
    return rows


def cost(case_name: str, method: str, value: float, steps: int, rounds: int = 7) -> float:
    """The time per step folded over unfolded, the two interleaved in this process, round by
    round (the median of the rounds' ratios): what the two compares per angle cost. For a
    method with a tolerance (value is rtol), the time per accepted step over a stretch of
    time that takes about `steps` steps."""
    case = load_case(case_name)
    y0 = case.state(FORM_EULER)
    params = case.body.params()
    m = get(method)
    settings = _settings(m, value)
    if "rtol" in settings:
        probe = m.start(FORM_EULER, params, 0.0, y0, dict(settings))
        probe.advance_to(1.0)
        warm, span = 1.0, steps / max(1, int(probe.counters[C_STEPS]))
    else:
        warm, span = 10 * value, steps * value
    ratios = []
    for _ in range(rounds):
        times = {}
        for unfolded in (False, True):
            st = m.start(FORM_EULER, params, 0.0, y0, dict(settings))
            if unfolded:
                st.keep_angles_unfolded()
            st.advance_to(warm)  # compiled and warm
            n0 = int(st.counters[C_STEPS])
            c0 = time.perf_counter()
            st.advance_to(warm + span)
            times[unfolded] = (time.perf_counter() - c0) / (int(st.counters[C_STEPS]) - n0)
        ratios.append(times[False] / times[True])
    return float(np.median(ratios))


def _cpu() -> str:
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--max-steps", type=float, default=1e9)
    ap.add_argument(
        "--max-time", type=float, default=1e4, help="last time (s) of a method with a tolerance"
    )
    ap.add_argument("--case", default="demo-wheel")
    ap.add_argument("--method", action="append", help="NAME:STEP (repeatable)")
    ap.add_argument("--json", help="write the rows to this file")
    ap.add_argument(
        "--cost", action="store_true", help="only time folded against unfolded (10^6 steps)"
    )
    args = ap.parse_args(argv)
    max_steps = int(args.max_steps)
    if max_steps < 1000:
        print("folded_angles: --max-steps must be at least 1000", file=sys.stderr)
        return 2
    if args.cost:
        for spec in args.method or DEFAULT_METHODS:
            name, _, step = spec.partition(":")
            r = cost(args.case, name, float(step), 10**6)
            print(f"{name}: time per step folded / unfolded = {r:.3f} ({_cpu()})")
        return 0
    out = {"case": args.case, "cpu": _cpu(), "runs": []}
    for spec in args.method or DEFAULT_METHODS:
        name, _, step = spec.partition(":")
        rows = measure(args.case, name, float(step), max_steps, args.max_time)
        out["runs"].append({"method": name, "step_or_rtol": float(step), "rows": rows})
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(out, fh, indent=1)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
