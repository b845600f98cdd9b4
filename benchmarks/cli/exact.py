"""`topdrift exact CASE --at T [T ...] [--json]`: the exact solution of a Lagrange-top case at the
times asked, as check values for a user's own code.

Each time is a double taken as exact; phi and psi come folded to [-pi, pi] with their whole
turns (unfolded = folded + 2 pi turns), theta, the figure axis in space, the attitude
quaternion (scalar first, body to space, from the folded angles: compare it up to sign) and the
angular momentum about the pivot in body axes. Rad, s, kg m^2/s.
"""

from __future__ import annotations

import json
import math
import re


def add_parser(sub) -> None:
    p = sub.add_parser(
        "exact",
        help="the exact solution of a Lagrange-top case at given times (check values)",
        description="The exact solution of a Lagrange-top case at the times given: theta, phi "
        "and psi folded to [-pi, pi] with their whole turns, the figure axis, the quaternion "
        "and the body-frame momentum.",
    )
    p.add_argument("case", metavar="CASE", help="a case file or the name of a library case")
    p.add_argument(
        "--at",
        metavar="T",
        nargs="+",
        required=True,
        help="times in s, 0 <= T <= 1e15, each taken as an exact double",
    )
    p.add_argument("--json", action="store_true", help="print the JSON contract")
    # argparse takes only -1 and -0.5 for negative numbers and reads -1e3 or -inf as an option
    # name; widened here (this parser has no option that looks like a number), so that every bad
    # time reaches parse_times and is refused with its own message.
    if hasattr(p, "_negative_number_matcher"):
        p._negative_number_matcher = _NEGATIVE_NUMBER
    p.set_defaults(func=run)


_NEGATIVE_NUMBER = re.compile(r"^-(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$|^-(inf|infinity|nan)$", re.I)


def parse_times(values: list[str]) -> list[float]:
    """The --at values as doubles, or a UserError naming the first bad one."""
    from topdrift.benchmarks.errors import UserError
    from topdrift.models.exact import MAX_TIME

    out = []
    for text in values:
        try:
            t = float(text)
        except ValueError:
            raise UserError(f"--at: {text!r} is not a number (a time in s)") from None
        if not math.isfinite(t):
            raise UserError(f"--at: {text!r} is not a finite time")
        if t < 0.0:
            raise UserError(f"--at: {text!r} is negative; the exact solution starts at t = 0")
        if t > MAX_TIME:
            raise UserError(
                f"--at: {text!r} is beyond 1e15 s, where a double time is known to no better "
                "than 0.125 s"
            )
        out.append(t)
    return out


def exact_samples(case, times: list[float]) -> tuple[object, dict]:
    """(the exact motion, the JSON document) for a loaded case."""
    import numpy as np

    from topdrift.benchmarks.errors import UserError
    from topdrift.models import FORM_BODY
    from topdrift.models.exact import ExactUnavailable, LagrangeTop

    try:
        top = LagrangeTop.from_state(case.body, FORM_BODY, case.body_state())
    except ExactUnavailable as exc:
        raise UserError(f"{case.name}: no closed form for this case: {exc}") from None
    s = top.sample(np.array(times, dtype=np.float64))
    a = s.angles
    samples = [
        {
            "t": times[k],
            "theta": float(a.theta[k]),
            "phi": float(a.phi[k]),
            "psi": float(a.psi[k]),
            "phi_turns": int(a.phi_turns[k]),
            "psi_turns": int(a.psi_turns[k]),
            "axis": [float(v) for v in s.axis[k]],
            "quaternion": [float(v) for v in s.quaternion[k]],
            "momentum": [float(v) for v in s.momentum[k]],
        }
        for k in range(len(times))
    ]
    return top, {"case": case.name, "samples": samples}


def run(args) -> int:
    from topdrift.benchmarks.cases.library import load_case

    times = parse_times(args.at)
    top, doc = exact_samples(load_case(args.case), times)
    if args.json:
        print(json.dumps(doc, indent=2, allow_nan=False))
    else:
        print(render(doc, top))
    return 0


def _vec(v) -> str:
    return "(" + ", ".join(repr(float(x)) for x in v) + ")"


def render(doc: dict, top) -> str:
    """The samples as blocks a person can read, every number to its last digit (repr)."""
    period = top.nutation_period
    when = f"nutation period {period!r} s" if math.isfinite(period) else "no nutation"
    out = [
        f"case {doc['case']}: exact {top.motion} motion, {when}",
        "angles in rad, phi and psi folded to [-pi, pi] (unfolded = folded + 2 pi turns);",
        "quaternion scalar first, body to space; momentum about the pivot, body axes, kg m^2/s",
    ]
    for s in doc["samples"]:
        out += [
            "",
            f"t = {s['t']!r} s",
            f"  theta       {s['theta']!r}",
            f"  phi         {s['phi']!r}  turns {s['phi_turns']}",
            f"  psi         {s['psi']!r}  turns {s['psi_turns']}",
            f"  axis        {_vec(s['axis'])}",
            f"  quaternion  {_vec(s['quaternion'])}",
            f"  momentum    {_vec(s['momentum'])}",
        ]
    return "\n".join(out)
