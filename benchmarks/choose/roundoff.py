"""Round-off at the limit: how the energy error grows with the number of steps when the step is
small enough that truncation is below round-off.

An ensemble of perturbed starts is advanced together (integrators/ensemble.py); at log-spaced
step counts the relative energy error of every member is taken, and its root mean square over
the ensemble is fitted against the step count on log-log axes. Round-off that behaves like
independent random errors gives an exponent of 1/2 (Brouwer's law: D. Brouwer, "On the
accumulation of errors in numerical integration", Astron. J. 46 (1937) 149; E. Hairer,
R. I. McLachlan and A. Razakarivony, "Achieving Brouwer's law with implicit Runge-Kutta
methods", BIT 48 (2008) 231); systematic rounding gives up to 1 (linear drift).
"""

from __future__ import annotations

import math

import numpy as np

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.perturbed import perturbed_starts
from topdrift.integrators import get as get_method
from topdrift.integrators.ensemble import EnsembleStepper
from topdrift.models import form_code
from topdrift.models.body import P_INV1, P_INV2, P_INV3, P_MGX, P_MGY, P_MGZ
from topdrift.models.invariants import INV_ENERGY, N_INVARIANTS, invariants

FIT_DECADES = 2.0  # the exponent is fitted over the last two decades of step counts


def _energies(form: int, Y: np.ndarray, p: np.ndarray) -> np.ndarray:
    out = np.empty(N_INVARIANTS)
    e = np.empty(Y.shape[0])
    for j in range(Y.shape[0]):
        invariants(form, Y[j], p, out)
        e[j] = out[INV_ENERGY]
    return e


def energy_precise(form: int, y: np.ndarray, low: np.ndarray | None, p: np.ndarray):
    """The energy of the state y + low in 40-digit arithmetic (mpmath), so that the round-off
    of evaluating it (about 1e-16 relative in float64) does not hide the round-off of the
    integration. Body form: the quadratic form m.I^-1 m / 2 + M g chi.Gamma(q) with Gamma the
    unnormalised quadratic of q, which the Euler-Poisson equations keep for any |q| and which
    Gauss-Legendre methods keep exactly up to round-off."""
    import mpmath as mp

    with mp.workdps(40):
        v = [
            mp.mpf(float(a)) + (mp.mpf(float(b)) if low is not None else 0)
            for a, b in zip(y, low if low is not None else y, strict=True)
        ]
        P = [mp.mpf(float(x)) for x in p]
        if form == 0:
            th, pphi, pth, ppsi = v[1], v[3], v[4], v[5]
            s, c = mp.sin(th), mp.cos(th)
            a = pphi - ppsi * c
            e = (pth**2 * P[P_INV1] + a * a * P[P_INV1] / (s * s) + ppsi**2 * P[P_INV3]) / 2
            return e + P[P_MGZ] * c
        q0, q1, q2, q3, m1, m2, m3 = v
        g1 = 2 * (q1 * q3 - q0 * q2)
        g2 = 2 * (q2 * q3 + q0 * q1)
        g3 = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
        t = (m1 * m1 * P[P_INV1] + m2 * m2 * P[P_INV2] + m3 * m3 * P[P_INV3]) / 2
        return t + P[P_MGX] * g1 + P[P_MGY] * g2 + P[P_MGZ] * g3


def fit_exponent(n: np.ndarray, rms: np.ndarray, decades: float = FIT_DECADES):
    """Least-squares slope of log rms against log n over the last `decades` of n."""
    keep = (n >= n[-1] / 10.0**decades) & (rms > 0)
    if keep.sum() < 3:
        return None, None
    x, y = np.log10(n[keep]), np.log10(rms[keep])
    slope, _ = np.polyfit(x, y, 1)
    return float(slope), (int(n[keep][0]), int(n[keep][-1]))


def roundoff_study(
    case,
    method,
    step: float,
    *,
    starts: int = 16,
    steps: float = 1e7,
    points: int = 40,
    spread: float = 1e-6,
    form: str | None = None,
    seed: int = 20261201,
) -> dict:
    # A method name, or a Method object (the round-off benchmark's unregistered contrast).
    m = get_method(method) if isinstance(method, str) else method
    method = m.name
    if not (isinstance(step, float) and math.isfinite(step) and step > 0):
        raise UserError(f"--step: must be a positive finite number, got {step!r}")
    if starts < 2:
        raise UserError(f"--starts: an ensemble needs at least 2 starts, got {starts}")
    steps = int(steps)
    if steps < 1000:
        raise UserError(f"--steps: need at least 1000 steps for a fit, got {steps}")
    form = form or m.default_form(case.body)
    m.check(case.body, form, {"step": step})
    code = form_code(form)
    p = case.body.params()
    Y0 = perturbed_starts(case, form, starts, spread, seed)
    ens = EnsembleStepper(m, code, p, 0.0, Y0, step)
    e0 = [energy_precise(code, Y0[j], None, p) for j in range(starts)]
    n_at = np.unique(np.round(np.geomspace(100, steps, points)).astype(np.int64))
    rms = []
    # The signed mean beside the RMS: a bias shared by the members (a systematic rounding) shows
    # as |mean| close to the RMS, a random walk as |mean| about RMS / sqrt(starts).
    mean = []
    for k in n_at:
        status = ens.advance_to(float(k) * step)
        if np.any(status != 0):
            bad = int(np.argmax(status != 0))
            raise UserError(
                f"{case.name}: member {bad} stopped (status {int(status[bad])}) "
                f"before step {k}; choose a smaller step"
            )
        low = ens.low_parts()
        err = np.array(
            [
                float(
                    (energy_precise(code, ens.y[j], None if low is None else low[j], p) - e0[j])
                    / abs(e0[j])
                )
                for j in range(starts)
            ]
        )
        rms.append(math.sqrt(float(np.mean(err * err))))
        mean.append(float(np.mean(err)))
    rms = np.array(rms)
    exponent, fit_range = fit_exponent(n_at.astype(float), rms)
    return {
        "case": case.name,
        "method": method,
        "form": form,
        "step": step,
        "starts": starts,
        "steps": steps,
        "spread": spread,
        "exponent": exponent,
        "energy_evaluation": "40-digit mpmath of the state (plus the Kahan terms not yet added)",
        "fit_range": fit_range,
        "n": n_at.tolist(),
        "rms_energy_error": rms.tolist(),
        "mean_energy_error": mean,
    }


def plot_roundoff(results: list[dict], path) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(7.0, 4.8), layout="constrained")
    for r in results:
        n = np.array(r["n"], dtype=float)
        rms = np.array(r["rms_energy_error"])
        label = (
            f"{r['method']} ({r['form']}): exponent {r['exponent']:.2f}"
            if r["exponent"] is not None
            else r["method"]
        )
        ax.loglog(n, rms, "o-", ms=3, label=label)
    n = np.array(results[0]["n"], dtype=float)
    ref = np.array(results[0]["rms_energy_error"])
    mid = len(n) // 2
    for slope, style in ((0.5, ":"), (1.0, "--")):
        ax.loglog(
            n, ref[mid] * (n / n[mid]) ** slope, "k" + style, lw=0.8, label=f"slope {slope:g}"
        )
    r0 = results[0]
    ax.set_xlabel("steps N")
    ax.set_ylabel("RMS relative energy error over the ensemble")
    ax.set_title(f"{r0['case']}: round-off growth, h = {r0['step']:g} s, {r0['starts']} starts")
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    fig.savefig(path, dpi=120)
    plt.close(fig)
