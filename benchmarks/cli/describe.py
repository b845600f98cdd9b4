"""`topdrift describe CASE [--json]` / `topdrift describe --demo [--json]`: the body, the start in
both state forms, its invariants and, for a Lagrange top, a summary of the exact motion."""

from __future__ import annotations

import json
import math
import textwrap

KIND_TEXT = {
    "lagrange": "Lagrange top: symmetric, centre of mass on the figure axis (exactly solvable)",
    "lagrange-gyrostat": "Lagrange gyrostat: symmetric, centre of mass and rotor on the figure "
    "axis (exactly solvable)",
    "gyrostat": "gyrostat: a heavy body carrying a rotor off the figure axis of a symmetric body",
    "kovalevskaya": "Kovalevskaya top: I1 = I2 = 2 I3, centre of mass in the equatorial plane",
    "free": "free body: centre of mass at the pivot, no gravity torque",
    "symmetric": "symmetric heavy top with its centre of mass off the figure axis",
    "asymmetric": "asymmetric heavy top",
    "gravity-gradient": "rigid body about its centre of mass in the gravity gradient of a circular "
    "orbit (attitude relative to the orbit frame)",
    "plugin-field": "rigid body about its centre of mass in a plug-in field (inertial axes)",
}


def add_parser(sub) -> None:
    p = sub.add_parser(
        "describe", help="show a case: body, start in both forms, invariants, exact motion"
    )
    p.add_argument("case", nargs="?", help="a case file or the name of a library case")
    p.add_argument("--demo", action="store_true", help="describe the demo-wheel case")
    p.add_argument("--json", action="store_true", help="print the JSON contract")
    p.add_argument(
        "--reference",
        action="store_true",
        help="for a case with no exact solution, build its extended-precision reference over "
        "the case's horizon if it is not cached yet (seconds), and show its verified accuracy",
    )
    p.set_defaults(func=run)


def run(args) -> int:
    from topdrift.benchmarks.cases.library import DEMO_CASE, load_case
    from topdrift.benchmarks.errors import UserError

    if args.demo and args.case:
        raise UserError("describe: give a CASE or --demo, not both")
    if not args.demo and not args.case:
        raise UserError("describe: give a CASE (a file or a library name) or --demo")
    from topdrift.benchmarks.cases.description import summarise

    case = load_case(DEMO_CASE if args.demo else args.case)
    info = summarise(case)
    if info["exact"] is None:
        info["reference"] = reference_summary(case, build=args.reference, quiet=args.json)
    if args.json:
        print(json.dumps(info, indent=2, allow_nan=False))
    else:
        print(render(info))
    return 0


def reference_summary(case, build: bool, quiet: bool) -> dict:
    """What a case with no exact solution is measured against: its extended-precision reference
    over the case's horizon, read from the cache (or built, when asked), with its verified
    accuracy; {"built": False, ...} when it is not cached and not asked for."""
    from topdrift.benchmarks.run.case_reference import case_reference, provider_for
    from topdrift.benchmarks.run.reference_cache import cache_dir

    ref = case_reference(case, build=build, quiet=quiet)
    if ref is None:
        provider, _ = provider_for(case.body)
        return {
            "built": False,
            "exact": bool(provider is not None and provider.exact),
            "cache": str(cache_dir()),
            "how": "built on first use by `topdrift pick`, or by `topdrift describe CASE "
            "--reference`",
        }
    return {
        "built": True,
        "exact": ref.exact,
        "cached": ref.cached,
        "cache": str(cache_dir()),
        "provider": ref.provider,
        "method": ref.method,
        "horizon": float(ref.times[-1]),
        "samples": int(ref.times.shape[0]),
        "accuracy": ref.accuracy,
        "parting": ref.parting,
        "cost": ref.cost,
    }


def _g(x: float | None, digits: int = 6) -> str:
    return "-" if x is None else f"{x:.{digits}g}"


def _vec(v) -> str:
    return "(" + ", ".join(_g(x) for x in v) + ")"


def _table(rows: list[tuple[str, ...]], indent: str = "  ") -> list[str]:
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    return [
        indent + "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
        for r in rows
    ]


def _angle(x: float) -> str:
    return f"{x:.6g} rad ({math.degrees(x):.6g} deg)"


def _rate(x: float) -> str:
    return f"{x:.6g} rad/s ({x * 60 / (2 * math.pi):.6g} rpm)"


def _field_rows(field, plugin, b) -> list[tuple[str, str, str]]:
    if plugin:
        rows = [("field", plugin["kind"], plugin["description"])]
        for key, value in field["table"].items():
            shown = _vec(value) if isinstance(value, list) else _g(value)
            rows.append((key, shown, plugin["keys"].get(key, "")))
        rows.append(
            (
                "torque",
                "a gradient" if plugin["conservative"] else "no gradient",
                "keeps " + (", ".join(plugin["keeps"]) or "no invariant"),
            )
        )
        return rows
    if field:
        return [("field", field["kind"], ""), ("orbit rate", _g(field["orbit_rate"]), "rad/s  (n)")]
    return [("gravity", _g(b["gravity"]), "m/s^2")]


def render(info: dict) -> str:
    c = info["case"]
    out = [f"case {c['name']}"]
    if c["path"]:
        out.append(f"  file     {c['path']}")
    out += ["  " + line for line in textwrap.wrap(c["description"], 96)]
    out.append(f"  horizon  {_g(c['horizon'])} s, {c['samples']} samples (both ends included)")
    if c["run"]:
        out.append("  run      " + ", ".join(f"{k} {v}" for k, v in c["run"].items()))

    b = info["body"]
    field = b.get("field")
    out += ["", "body", f"  {KIND_TEXT[info['kind']]}"]
    out += _table(
        [
            ("mass", _g(b["mass"]), "kg"),
            (
                "I1",
                _g(b["inertia"][0]),
                "kg m^2  (about the " + ("centre of mass)" if field else "pivot)"),
            ),
            ("I2", _g(b["inertia"][1]), "kg m^2"),
            ("I3", _g(b["inertia"][2]), "kg m^2"),
            ("com", _vec(b["com"]), "m  (body axes)"),
        ]
        + _field_rows(field, info.get("plugin_field"), b)
        + (
            [("rotor", _vec(b["rotor"]), "kg m^2/s  (body axes, relative to the body)")]
            if "rotor" in b
            else []
        )
    )

    w = info["wheel"]
    if w is not None:
        rows = [("part", "mass kg", "com m", "axial kg m^2", "transverse kg m^2")]
        for p in w["parts"]:
            rows.append(
                (p["name"], _g(p["mass"]), _g(p["com"]), _g(p["axial"]), _g(p["transverse"]))
            )
        t = w["totals"]
        rows.append(("total", _g(t["mass"]), _g(t["com"]), _g(t["axial"]), _g(t["transverse"])))
        out += ["", "wheel parts (moments about the pivot; com along the axle)"]
        out += _table(rows)

    s = info["start"]
    a, r = s["angles"], s["rates"]
    out += ["", "start"]
    out += _table(
        [
            ("theta", _angle(a["theta"]), "theta_rate", _rate(r["theta_rate"])),
            ("phi", _angle(a["phi"]), "phi_rate", _rate(r["phi_rate"])),
            ("psi", _angle(a["psi"]), "psi_rate", _rate(r["psi_rate"])),
        ]
    )
    out += _table(
        [
            ("body form", f"q = {_vec(s['body']['q'])}"),
            ("", f"m = {_vec(s['body']['m'])} kg m^2/s"),
        ]
    )
    e = s["euler"]
    if e is not None:
        out += _table(
            [
                ("euler form", f"(phi, theta, psi) = {_vec([e['phi'], e['theta'], e['psi']])} rad"),
                (
                    "",
                    f"(p_phi, p_theta, p_psi) = {_vec([e['p_phi'], e['p_theta'], e['p_psi']])}"
                    " kg m^2/s",
                ),
            ]
        )
    else:
        out.append(f"  euler form  none: {s['euler_unavailable']}")

    inv = info["invariants"]
    plugin = info.get("plugin_field")
    conserved_psi = info["kind"] in ("lagrange", "lagrange-gyrostat") or bool(
        plugin and "p_psi" in plugin["keeps"]
    )
    gyro = "rotor" in b
    rows = []
    if inv["energy"] is None:
        rows.append(("energy", "null", "(the field's torque is no gradient: not conserved)"))
    else:
        rows.append(
            (
                "energy",
                _g(inv["energy"], 10),
                "J"
                + ("  (shell kinetic + potential)" if gyro else "")
                + ("  (Jacobi integral of the orbit frame)" if field and not plugin else "")
                + ("  (kinetic + the field's potential)" if plugin else ""),
            )
        )
    if inv["p_phi"] is not None:
        rows.append(("p_phi", _g(inv["p_phi"], 10), "kg m^2/s  (L . e_z)"))
    if inv["p_psi"] is not None:
        rows.append(
            (
                "p_psi",
                _g(inv["p_psi"], 10),
                "kg m^2/s  (L . e3"
                + (" = I3 w3 + h3)" if gyro else ")")
                + ("" if conserved_psi else ", not conserved for this body"),
            )
        )
    if inv.get("kovalevskaya") is not None:
        rows.append(("kovalevskaya", _g(inv["kovalevskaya"], 10), "s^-4  (Kovalevskaya integral)"))
    out += ["", "invariants"] + _table(rows)

    x = info["exact"]
    if x is not None:
        out += ["", "exact motion"]
        out += _table(
            [
                ("motion", str(x["motion"]), ""),
                ("theta min", _angle(x["theta_min"]) if x["theta_min"] is not None else "-", ""),
                ("theta max", _angle(x["theta_max"]) if x["theta_max"] is not None else "-", ""),
                ("nutation period", _g(x["nutation_period"]), "s"),
                ("precession per period", _g(x["precession_per_period"]), "rad"),
                ("mean precession rate", _g(x["mean_precession_rate"]), "rad/s"),
            ]
            + (
                # p_psi^2 - 4 I1 M g l with the rotor's share in p_psi: > 0, stable upright
                [
                    (
                        "sleeping margin",
                        _g(x["sleeping_margin"]),
                        "kg^2 m^4/s^2  (p_psi^2 - 4 I1 M g l)",
                    )
                ]
                if gyro and x.get("sleeping_margin") is not None
                else []
            )
            + (
                [("mean spin rate", _g(x["mean_spin_rate"]), "rad/s")]
                if "mean_spin_rate" in x
                else []
            )
        )
    elif "exact_unavailable" in info:
        out += ["", f"exact motion  unavailable: {info['exact_unavailable']}"]
    r = info.get("reference")
    if r is not None:
        # a closed form evaluated at high precision is the exact motion, not a stand-in for it
        head = "exact motion in closed form" if r["exact"] else "no exact solution"
        out += ["", f"reference ({head})"]
        if not r["built"]:
            out += [f"  not built yet: {r['how']} (cache {r['cache']})"]
        else:
            a, c = r["accuracy"], r["cost"]
            # a closed form is evaluated at each time (two precisions), an integration steps
            stepped = c["steps"] or c["check_steps"]
            two = "integrations" if stepped else "evaluations"
            steps = (
                f"{int(c['steps'])} + {int(c['check_steps'])} steps"
                if stepped
                else "no steps (evaluated at each time)"
            )
            out += [f"  {r['method']}"]
            out += _table(
                [
                    ("over", f"{_g(r['horizon'])} s, {r['samples']} samples", ""),
                    ("verified accuracy, figure axis", f"{a['axis']:.2g}", "rad"),
                    ("verified accuracy, attitude", f"{a['attitude']:.2g}", "rad"),
                    ("verified accuracy, momentum", f"{a['momentum']:.2g}", "(relative)"),
                    (f"parting of the two {two}", f"{r['parting']['axis']:.2g}", "rad"),
                    ("cost", f"{steps}, {c['wall_s'] + c['check_wall_s']:.2g} s", ""),
                    ("cache", r["cache"] + (" (read)" if r["cached"] else " (built now)"), ""),
                ]
            )
    return "\n".join(out)
