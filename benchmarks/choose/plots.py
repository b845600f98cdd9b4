"""Figures of stored runs: work-precision, invariant drift, theta against the exact solution, and
the figure axis's path seen from above. matplotlib with the Agg backend: files only, no display.

Each function takes what analysis.py and run_reader.py return and writes one PNG. Legends sit
outside the axes so that they never cover data; every axis names its quantity and unit.
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # before pyplot: no display, ever

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from topdrift.benchmarks.choose import analysis  # noqa: E402
from topdrift.benchmarks.choose.figure_files import save_png  # noqa: E402
from topdrift.benchmarks.choose.reference_path import LABELS as REFERENCE_LABELS  # noqa: E402
from topdrift.benchmarks.choose.reference_path import reference_axis  # noqa: E402

DPI = 110
_MARKERS = ("o", "s", "^", "v", "D", "P", "X", "<", ">", "p", "h", "*")


def styles(labels: list[str]) -> dict[str, tuple]:
    """A (colour, marker) per label, fixed by the sorted labels, so that a method keeps its look
    in every figure of a report."""
    labels = sorted(set(labels))
    cmap = plt.get_cmap("tab10" if len(labels) <= 10 else "tab20")
    n = cmap.N
    return {lab: (cmap(i % n), _MARKERS[i % len(_MARKERS)]) for i, lab in enumerate(labels)}


def run_styles(runs: list[dict]) -> dict[str, tuple]:
    """(colour, marker) per run label for figures of several runs: the colour of the run's series
    (as in the work-precision figure of the same runs), lighter for cheaper runs of the series,
    so that runs of one method read as one family, coarse to fine."""
    base = styles([r.get("series", r["label"]) for r in runs])
    fam: dict[str, list[dict]] = {}
    for r in runs:
        fam.setdefault(r.get("series", r["label"]), []).append(r)
    out = {}
    for ser, members in fam.items():
        color, marker = base[ser]
        members = sorted(members, key=lambda r: r.get("rank", 0.0))
        n = len(members)
        for i, r in enumerate(members):
            w = 0.0 if n == 1 else 0.5 * (n - 1 - i) / (n - 1)  # 0: full colour, the finest run
            rgb = tuple((1.0 - w) * c + w for c in matplotlib.colors.to_rgb(color))
            out[r["label"]] = (rgb, marker)
    return out


def _log_ticks(ax) -> None:
    """Readable tick labels on log axes: on an axis spanning less than a few decades, majors at
    1, 2 and 5 per decade instead of matplotlib's labelled minors (which run into each other as
    10^x labels); minors never labelled."""
    from matplotlib.ticker import (
        FuncFormatter,
        LogFormatterSciNotation,
        LogLocator,
        MaxNLocator,
        NullFormatter,
    )

    for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
        if scale != "log":
            continue
        lo, hi = sorted(axis.get_view_interval())
        if not (lo > 0.0 and hi > lo):
            continue
        span = math.log10(hi / lo)
        if span < 0.7:
            # Too narrow for 1-2-5 ticks: a few evenly spaced values, labelled short.
            axis.set_major_locator(MaxNLocator(nbins=4))
            axis.set_major_formatter(FuncFormatter(_short_number))
        elif span < 2.5:
            axis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
            axis.set_major_formatter(
                LogFormatterSciNotation(labelOnlyBase=False, minor_thresholds=(math.inf, math.inf))
            )
        axis.set_minor_formatter(NullFormatter())


def _short_number(v, _pos=None) -> str:
    """2.4e-4 rather than 0.00024 or 2.40e-04."""
    if not v:
        return "0"
    mant, exp = f"{v:.2e}".split("e")
    mant = mant.rstrip("0").rstrip(".")
    return f"{mant}e{int(exp)}"


def _save(fig, out) -> Path:
    for ax in fig.get_axes():
        _log_ticks(ax)
    fig.tight_layout()  # after the ticks are final, so that their labels get room
    try:
        return save_png(fig, out, dpi=DPI, bbox_inches="tight")
    finally:
        plt.close(fig)


def _legend_right(fig, handles, labels, title=None):
    # Outside the axes, to the right: it can never cover a curve. bbox_inches="tight" keeps it.
    ncol = 1 if len(labels) <= 16 else 2
    fig.legend(
        handles,
        labels,
        loc="upper left",
        bbox_to_anchor=(1.0, 0.95),
        frameon=False,
        fontsize="small",
        ncol=ncol,
        title=title,
        title_fontsize="small",
    )


def work_precision(
    records: list[dict],
    case: str,
    out,
    error: str = "axis",
    costs: tuple[str, ...] = ("wall", "force"),
) -> Path:
    """Error against cost on log-log axes, one panel per cost measure. Per series: the Pareto
    front as line + filled markers, dominated runs as hollow markers; under them, in grey, the
    front across all series."""
    frs = [analysis.frontiers(records, case, error, c) for c in costs]
    labels = frs[0].labels
    sty = styles(list(labels.values()))
    fig, axes = plt.subplots(
        1, len(costs), figsize=(5.2 * len(costs), 4.4), sharey=True, squeeze=False
    )
    handles: dict[str, object] = {}
    for ax, fr in zip(axes[0], frs, strict=True):
        over = [p for p in fr.overall if p.error > 0.0]
        if over:
            (h,) = ax.plot(
                [p.cost for p in over],
                [p.error for p in over],
                color="0.8",
                lw=6,
                solid_capstyle="round",
                zorder=1,
            )
            handles.setdefault("front across methods", h)
        for key in sorted(fr.points, key=lambda k: labels.get(k, k[0])):
            lab = labels.get(key, key[0])
            color, marker = sty[lab]
            front = [p for p in fr.per_series[key] if p.error > 0.0]
            on_front = {p.run_id for p in front}
            off = [p for p in fr.points[key] if p.run_id not in on_front and p.error > 0.0]
            (h,) = ax.plot(
                [p.cost for p in front],
                [p.error for p in front],
                color=color,
                marker=marker,
                ms=5,
                lw=1.3,
                zorder=3,
            )
            inv = analysis.ERROR_INVARIANT.get(error)
            if inv is not None and analysis.series_keeps(key, inv):
                lab = f"{lab} (keeps the {inv} by construction: its error is rounding)"
            handles.setdefault(lab, h)
            if off:
                ax.plot(
                    [p.cost for p in off],
                    [p.error for p in off],
                    ls="none",
                    marker=marker,
                    ms=5,
                    mfc="none",
                    mec=color,
                    zorder=2,
                )
        name, qty, unit = analysis.COSTS[fr.cost]
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel(f"{qty} ({unit})")
        ax.grid(True, which="major", alpha=0.3)
        if not fr.points:
            ax.text(
                0.5,
                0.5,
                "no ok run with this error and cost",
                ha="center",
                va="center",
                transform=ax.transAxes,
            )
    e_name, e_qty, e_unit = analysis.ERRORS[error]
    axes[0][0].set_ylabel(f"{e_qty} ({e_unit})")
    fig.suptitle(f"{case}: work-precision, {e_qty}")
    if handles:
        _legend_right(
            fig,
            list(handles.values()),
            list(handles.keys()),
            title="filled: Pareto front; hollow: dominated",
        )
    skipped = sum(
        1 for r in analysis.case_records(records, case) if r.get("status") != analysis.STATUS_OK
    )
    if skipped:
        fig.text(
            0.01,
            -0.02,
            f"{skipped} run(s) not ok are left out",
            fontsize="small",
            ha="left",
            va="top",
        )
    return _save(fig, out)


def run_label(series_label: str, record: dict) -> str:
    text = f"{series_label} {analysis.knob_text(record.get('settings') or {})}"
    status = record.get("status")
    return text if status == analysis.STATUS_OK else f"{text} ({status})"


def _after_start(t: np.ndarray, y: np.ndarray):
    """Samples with t > 0 (log axes) and y > 0; None when y is zero throughout."""
    keep = t > 0.0
    t, y = t[keep], y[keep]
    pos = y > 0.0
    if not np.any(pos):
        return None
    return t[pos], y[pos]


def invariant_errors(s: dict) -> dict[str, np.ndarray]:
    """|E - E0|/|E0|, |p_phi - p_phi0|/|L0|, |p_psi - p_psi0|/|L0| of one run's samples,
    with L0 the norm of the start's angular momentum (the metrics' scales), and |K - K0|/|K0| of
    Kovalevskaya's integral where the run has it. p_psi is left out where it is no invariant of
    the run's body (its metric is null). A zero E0, L0 or K0 falls back to 1 so that nothing
    divides by zero."""
    e0 = s["energy"][0]
    l0 = float(np.linalg.norm(s["momentum"][0]))
    es = abs(e0) if e0 != 0.0 else 1.0
    ls = l0 if l0 > 0.0 else 1.0
    out = {
        "energy": np.abs(s["energy"] - e0) / es,
        "p_phi": np.abs(s["p_phi"] - s["p_phi"][0]) / ls,
    }
    if is_invariant(s, "p_psi"):
        out["p_psi"] = np.abs(s["p_psi"] - s["p_psi"][0]) / ls
    k = s.get("kovalevskaya")
    if k is not None and len(k):
        ks = abs(k[0]) if k[0] != 0.0 else 1.0
        out["kovalevskaya"] = np.abs(k - k[0]) / ks
    return out


def is_invariant(s: dict, name: str) -> bool:
    """Whether a quantity is an invariant of the run's body, as its metrics say (a metric that
    is no invariant of the body is null; files from before that rule have a number)."""
    metrics = (s.get("record") or {}).get("metrics") or {}
    key = {"p_psi": "p_psi_rel_max", "kovalevskaya": "kovalevskaya_rel_max"}[name]
    if name == "kovalevskaya":
        return s.get("kovalevskaya") is not None
    return key not in metrics or metrics[key] is not None


_INVARIANT_AXES = (
    ("energy", "|E - E0| / |E0| (1)"),
    ("p_phi", "|p_phi - p_phi0| / |L0| (1)"),
    ("p_psi", "|p_psi - p_psi0| / |L0| (1)"),
    ("kovalevskaya", "|K - K0| / |K0| (1)"),
)


def aliasing_warning(runs: list[dict]) -> str:
    """A warning when the samples of a run shown are further apart than half the fastest period
    of its case (the sampling theorem, common practice): that motion is aliased in the figure
    (a 3.3 s nutation sampled every 100 s draws a clean, false slow wave). "" otherwise."""
    for r in runs:
        fastest = ((r.get("record") or {}).get("metrics") or {}).get("fastest_period")
        t = r["t"]
        if not isinstance(fastest, (int, float)) or fastest <= 0.0 or t.size < 2:
            continue
        dt = float(t[1] - t[0])
        if dt > 0.5 * fastest:
            return (
                f"WARNING: samples every {dt:.3g} s, more than half the fastest period of the "
                f"motion ({fastest:.3g} s): it is aliased here; what looks like a slow wave may "
                "not be one (run with more --samples)"
            )
    return ""


def _warn(fig, text: str) -> None:
    if text:
        # Above everything, in red: a misleading figure must say so where it is seen first.
        import textwrap

        fig.text(
            0.5,
            1.0,
            "\n".join(textwrap.wrap(text, 90)),
            ha="center",
            va="bottom",
            color="#b00000",
            fontsize="small",
            fontweight="bold",
        )


def drift(runs: list[dict], case: str, out) -> Path:
    """Invariant errors against time, log-log, three panels. runs: load_series dicts with a
    'label'. A run that keeps an invariant to the bit has nothing to draw on a log axis; the
    panel says so instead."""
    sty = run_styles(runs)
    runs = sorted(runs, key=lambda r: (r.get("series", r["label"]), r.get("rank", 0.0)))
    errors = {r["label"]: invariant_errors(r) for r in runs}
    panels = [(k, lab) for k, lab in _INVARIANT_AXES if k != "kovalevskaya"]
    if any("kovalevskaya" in e for e in errors.values()):
        panels.append(_INVARIANT_AXES[-1])
    fig, axes = plt.subplots(
        len(panels), 1, figsize=(7.0, 2.67 * len(panels)), sharex=True, squeeze=False
    )
    axes = axes[:, 0]
    handles = {}
    for ax, (key, ylabel) in zip(axes, panels, strict=True):
        exact_kept = []
        missing = []
        for r in runs:
            color, _ = sty[r["label"]]
            if key not in errors[r["label"]]:
                missing.append(r["label"])
                continue
            got = _after_start(r["t"], errors[r["label"]][key])
            if got is None:
                exact_kept.append(r["label"])
                continue
            (h,) = ax.plot(got[0], got[1], color=color, lw=1.0)
            handles.setdefault(r["label"], h)
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_ylabel(ylabel)
        ax.grid(True, which="major", alpha=0.3)
        if missing and len(missing) == len(runs):
            ax.set_yscale("linear")
            ax.set_yticks([])
            ax.text(
                0.5,
                0.5,
                f"{key} is no invariant of this body: no error to draw (metric: -)",
                transform=ax.transAxes,
                ha="center",
                va="center",
            )
        elif len(exact_kept) == len(runs):
            ax.set_yscale("linear")  # no data: no log decades to pretend
            ax.set_yticks([])
            ax.text(
                0.5,
                0.5,
                "zero throughout in every run shown (kept to the bit):\n"
                "nothing to draw on a log axis",
                transform=ax.transAxes,
                ha="center",
                va="center",
            )
        elif exact_kept:
            # Above the panel, not inside it: a note inside could cover a curve.
            ax.set_title(
                f"zero throughout (kept to the bit), not drawn: {len(exact_kept)} of "
                f"{len(runs)} runs",
                loc="left",
                fontsize="small",
            )
    axes[-1].set_xlabel(_time_label(runs))
    fig.suptitle(f"{case}: invariant errors" + (f", {runs[0]['label']}" if len(runs) == 1 else ""))
    _warn(fig, aliasing_warning(runs))
    if handles and len(runs) > 1:
        _legend_right(fig, list(handles.values()), list(handles.keys()))
    return _save(fig, out)


def theta(runs: list[dict], case: str, out) -> Path:
    """theta(t) with the exact solution (upper panel) and the difference (lower panel): signed
    and linear for one run, |difference| on a log axis for several, whose errors span decades."""
    sty = run_styles(runs)
    runs = sorted(runs, key=lambda r: (r.get("series", r["label"]), r.get("rank", 0.0)))
    exact = next((r for r in runs if r["exact_euler"] is not None), None)
    fig, (ax, axd) = plt.subplots(
        2, 1, figsize=(7.5, 6.5), sharex=True, gridspec_kw={"height_ratios": [3, 2]}
    )
    handles = {}
    if exact is not None:
        # On top of the runs, thin and dashed, so that it shows wherever a run strays from it.
        (h,) = ax.plot(
            exact["t"],
            np.degrees(exact["exact_euler"][:, 1]),
            color="black",
            lw=1.0,
            ls=(0, (4, 3)),
            zorder=5,
        )
        handles["exact"] = h
    single = len(runs) == 1
    for r in runs:
        color, _ = sty[r["label"]]
        (h,) = ax.plot(r["t"], np.degrees(r["euler"][:, 1]), color=color, lw=0.9, zorder=2)
        handles.setdefault(r["label"], h)
        if r["exact_euler"] is None:
            continue
        d = r["euler"][:, 1] - r["exact_euler"][:, 1]
        if single:
            axd.plot(r["t"], d, color=color, lw=0.9)
        else:
            got = _after_start(r["t"] + 1.0, np.abs(d))  # keep t = 0; linear time axis
            if got is not None:
                axd.plot(got[0] - 1.0, got[1], color=color, lw=0.9)
    ax.set_ylabel("theta, tilt from vertical (deg)")
    ax.ticklabel_format(axis="y", useOffset=False)  # read 79.996, not 8e1 + offset
    ax.grid(True, alpha=0.3)
    axd.set_xlabel(_time_label(runs))
    axd.grid(True, alpha=0.3)
    if exact is None:
        axd.text(
            0.5,
            0.5,
            "no exact solution for this case",
            ha="center",
            va="center",
            transform=axd.transAxes,
        )
        axd.set_ylabel("theta - theta_exact (rad)")
    elif single:
        axd.set_ylabel("theta - theta_exact (rad)")
        axd.ticklabel_format(axis="y", style="sci", scilimits=(-2, 3))
    else:
        axd.set_yscale("log")
        axd.set_ylabel("|theta - theta_exact| (rad)")
    fig.suptitle(
        f"{case}: tilt theta against the exact solution"
        + (f", {runs[0]['label']}" if single else "")
    )
    _warn(fig, aliasing_warning(runs))
    _legend_right(fig, list(handles.values()), list(handles.keys()))
    return _save(fig, out)


def _sampling(runs: list[dict]) -> str:
    """How far apart the samples are: a motion faster than the samples (a nutation, say) is
    aliased in any figure drawn from them, and the reader should know."""
    t = runs[0]["t"] if runs else np.zeros(0)
    if t.size > 2:
        d = np.diff(t)
        if np.allclose(d, d[0], rtol=1e-9, atol=0.0):
            return f"samples every {d[0]:.3g} s"
        return "samples not uniform"
    return ""


def _time_label(runs: list[dict]) -> str:
    s = _sampling(runs)
    return f"t (s); {s}" if s else "t (s)"


def axis_from_quaternion(q: np.ndarray) -> np.ndarray:
    """R e3 for rows of scalar-first unit quaternions (third column of the rotation matrix)."""
    q0, q1, q2, q3 = q[:, 0], q[:, 1], q[:, 2], q[:, 3]
    x = 2.0 * (q1 * q3 + q0 * q2)
    y = 2.0 * (q2 * q3 - q0 * q1)
    z = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
    return np.stack((x, y, z), axis=1)


def axis_from_euler(e: np.ndarray) -> np.ndarray:
    """R e3 for rows of z-x-z Euler angles (phi, theta, psi): Rz(phi) Rx(theta) e3."""
    phi, th = e[:, 0], e[:, 1]
    return np.stack((np.sin(th) * np.sin(phi), -np.sin(th) * np.cos(phi), np.cos(th)), axis=1)


# A path that winds round the vertical more often than this fills the disc: the whole path says
# nothing about the error, so the figure shows the error path instead (axis_path).
LONG_PATH_TURNS = 2.0
ERROR_PATH_SHADES = 12  # the error path is drawn light to dark, start to end


def path_turns(a: np.ndarray) -> np.ndarray:
    """Turns round the vertical so far, per sample, from the unwrapped azimuth of the path."""
    az = np.unwrap(np.arctan2(a[:, 1], a[:, 0]))
    return np.abs(az - az[0]) / (2.0 * math.pi)


def error_path(a: np.ndarray, ref: np.ndarray) -> np.ndarray:
    """The axis a seen from the reference axis ref (rows of unit vectors): the components of
    a - ref along the precession (e_h, horizontal, the direction of growing azimuth) and along
    the tilt away from the vertical (e_h x ref), in rad for small errors. (n, 2)."""
    ez = np.array([0.0, 0.0, 1.0])
    h = np.cross(np.broadcast_to(ez, ref.shape), ref)
    norm = np.linalg.norm(h, axis=1)
    upright = norm == 0.0
    h[upright] = (1.0, 0.0, 0.0)  # on the vertical: any horizontal direction will do
    norm[upright] = 1.0
    h /= norm[:, None]
    tilt = np.cross(h, ref)
    d = a - ref
    return np.stack((np.einsum("ij,ij->i", d, h), np.einsum("ij,ij->i", d, tilt)), axis=1)


def _is_truth(label: str) -> bool:
    """The path drawn as the truth: the exact solution's, or the case reference's."""
    return label == "exact" or label.startswith(REFERENCE_LABELS)


def axis_path(runs: list[dict], case: str, out) -> Path:
    """The figure axis R e3 projected on the horizontal plane, seen from above, inside the unit
    circle (the horizon: the axis lying flat); the exact path dashed where there is one.

    Whole paths of different runs usually lie on top of each other, so a second panel zooms on
    the end of the paths, where the error has grown most: there the runs separate. A long run
    (the path winds round the vertical more than LONG_PATH_TURNS times) fills the disc: then the
    first panel shows the first turn only, and the second the error path, each run's axis seen
    from the exact one (or from the first run's where there is no exact solution)."""
    sty = run_styles(runs)
    runs = sorted(runs, key=lambda r: (r.get("series", r["label"]), r.get("rank", 0.0)))
    fig, (ax, az) = plt.subplots(1, 2, figsize=(11.5, 5.6))
    tt = np.linspace(0.0, 2.0 * math.pi, 400)
    ax.plot(np.cos(tt), np.sin(tt), color="0.5", lw=1.0)
    ax.plot([0.0], [0.0], marker="+", color="0.5", ms=10)
    handles = {}
    paths = []  # (label, xy path, colour, style)
    for r in runs:
        color, _ = sty[r["label"]]
        paths.append((r["label"], axis_from_quaternion(r["quaternion"]), color, "-"))
    exact = next((r for r in runs if r["exact_euler"] is not None), None)
    if exact is not None:
        paths.append(("exact", axis_from_euler(exact["exact_euler"]), "black", (0, (4, 3))))
    else:
        found = reference_axis(runs)  # no exact solution: the case's extended-precision one
        if found is not None:
            paths.append((found[1], found[0], "black", (0, (4, 3))))
    truth = bool(paths) and _is_truth(paths[-1][0])
    ref = paths[-1] if truth else (paths[0] if paths else None)
    turns = float(path_turns(ref[1])[-1]) if ref is not None and len(ref[1]) > 1 else 0.0
    long_run = turns > LONG_PATH_TURNS
    first = slice(None)
    if long_run:
        n_first = int(np.searchsorted(path_turns(ref[1]), 1.0)) + 1
        first = slice(0, n_first)
    for label, a, color, ls in paths:
        lw = 1.0 if _is_truth(label) else 0.9
        (h,) = ax.plot(
            a[first, 0],
            a[first, 1],
            color=color,
            lw=lw,
            ls=ls,
            zorder=5 if _is_truth(label) else 2,
        )
        handles.setdefault(label, h)
    if paths:
        a0 = paths[0][1]
        handles["start"] = ax.plot(
            [a0[0, 0]], [a0[0, 1]], marker="o", color="black", ms=6, ls="none", zorder=6
        )[0]
        handles["end"] = az.plot([], [], marker="s", color="black", ms=5, ls="none")[0]
    ax.set_aspect("equal")
    ax.set_xlim(-1.08, 1.08)
    ax.set_ylim(-1.08, 1.08)
    ax.set_xlabel("x component of figure axis R e3 (1)")
    ax.set_ylabel("y component of figure axis R e3 (1)")
    ax.grid(True, alpha=0.3)
    if long_run:
        ax.set_title(
            f"first turn of {turns:.0f} round the vertical (the whole path fills the disc)\n"
            f"{_sampling(runs)}",
            fontsize="medium",
        )
        _error_paths(az, paths, ref)
    else:
        ax.set_title(
            f"whole path; unit circle: axis horizontal\n{_sampling(runs)}", fontsize="medium"
        )
        _zoom_on_ends(az, paths)
    fig.suptitle(
        f"{case}: figure axis seen from above" + (f", {runs[0]['label']}" if len(runs) == 1 else "")
    )
    _warn(fig, aliasing_warning(runs))
    _legend_right(fig, list(handles.values()), list(handles.keys()))
    return _save(fig, out)


def _error_paths(az, paths, ref) -> None:
    """Every run's axis seen from the reference axis over the whole run: the error path, which a
    whole-path drawing of a long run hides in a filled disc."""
    ref_label, ref_axis = ref[0], ref[1]
    drawn = 0
    for label, a, color, ls in paths:
        if label == ref_label:
            continue
        n = min(len(a), len(ref_axis))
        d = error_path(a[:n], ref_axis[:n])
        # Light early, full colour late: the error grows, and where it grows to shows.
        rgb = np.array(matplotlib.colors.to_rgb(color))
        cuts = np.linspace(0, n - 1, ERROR_PATH_SHADES + 1).astype(int)
        for k in range(ERROR_PATH_SHADES):
            w = 0.8 * (1.0 - k / (ERROR_PATH_SHADES - 1))
            seg = d[cuts[k] : cuts[k + 1] + 1]
            az.plot(seg[:, 0], seg[:, 1], color=tuple((1 - w) * rgb + w), lw=0.6, ls=ls, zorder=2)
        az.plot([d[-1, 0]], [d[-1, 1]], marker="s", color=color, ms=5, ls="none", zorder=6)
        drawn += 1
    az.plot([0.0], [0.0], marker="+", color="black", ms=12, zorder=7)
    name = (
        "the exact axis"
        if ref_label == "exact"
        else "the reference axis"
        if _is_truth(ref_label)
        else f"the axis of {ref_label}"
    )
    if not drawn:
        az.text(
            0.5,
            0.5,
            "no exact solution and a single run:\nno reference to measure the path against",
            ha="center",
            va="center",
            transform=az.transAxes,
        )
    az.set_aspect("equal", adjustable="datalim")
    az.ticklabel_format(style="sci", scilimits=(-3, 3))
    az.set_xlabel("error along the precession (rad)")
    az.set_ylabel("error in tilt, away from the vertical (rad)")
    az.grid(True, alpha=0.3)
    az.set_title(
        f"error path, seen from {name} (+)\nlight to dark: start to end; squares: the end",
        fontsize="medium",
    )


def _zoom_on_ends(az, paths) -> None:
    """The last stretch of every path, in offsets from the reference end point (the exact one if
    drawn, else the first run's), scaled to show the spread of the end points."""
    if not paths:
        return
    ref = paths[-1][1][-1] if _is_truth(paths[-1][0]) else paths[0][1][-1]
    ends = np.array([a[-1, :2] for _, a, _, _ in paths]) - ref[:2]
    w = 1.6 * float(np.max(np.abs(ends))) if ends.size else 0.0
    if not w > 0.0:
        w = 1e-12  # every end point the same: a window of round-off size
    for label, a, color, ls in paths:
        d = a[:, :2] - ref[:2]
        near = np.all(np.abs(d) <= 3.0 * w, axis=1)
        out_idx = np.nonzero(~near)[0]
        # The final stretch inside the window, with the sample before it so that the line runs
        # in from the edge; earlier visits (a path that comes round again) are left out.
        k = max(int(out_idx[-1]), 0) if out_idx.size else 0
        seg = d[k:]
        az.plot(
            seg[:, 0],
            seg[:, 1],
            color=color,
            lw=1.0 if _is_truth(label) else 0.9,
            ls=ls,
            marker=".",
            ms=3,
            zorder=5 if _is_truth(label) else 2,
        )
        az.plot([d[-1, 0]], [d[-1, 1]], marker="s", color=color, ms=5, ls="none", zorder=6)
    az.set_xlim(-w, w)
    az.set_ylim(-w, w)
    az.set_aspect("equal")
    az.ticklabel_format(style="sci", scilimits=(-3, 3))
    last = paths[-1][0]
    ref_name = "exact" if last == "exact" else "reference" if _is_truth(last) else "first run's"
    az.set_xlabel(f"x offset from the {ref_name} end point (1)")
    az.set_ylabel(f"y offset from the {ref_name} end point (1)")
    az.grid(True, alpha=0.3)
    az.set_title("zoom on the end points (squares)", fontsize="medium")
