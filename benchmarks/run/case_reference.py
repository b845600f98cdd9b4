"""The reference of a case with no closed form in the runs: built in extended precision by a
provider (the exact free flow in closed form for a body with no torque, else the double-double
Taylor integration, both in integrators/extended), with its own error estimate, cached on disk
(reference_cache.py) and built with a progress line.

Providers are tried in order; the first that takes the case builds its reference. A provider
is a name, the settings that decide its numbers (they key the cache) and two functions: why it
does not take a body (None when it does) and the build (body, body-form start, sample times,
progress) -> an object with times, states (n, 7 body-form rows), accuracy and parting (dicts of
ACCURACY_KEYS), cost (dict of COST_KEYS) and method (text). The exact free flow goes first,
refusing every body with a torque; the Taylor integration takes every other body in uniform
gravity, and scipy's DOP853 at two tolerances a body in the gravity gradient.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run import reference_cache
from topdrift.benchmarks.run.runner import samples_for_horizon
from topdrift.integrators.extended import field_reference, free_closed_form
from topdrift.integrators.extended import reference as extended
from topdrift.models.quaternion import figure_axis


@dataclass(frozen=True)
class Provider:
    name: str
    settings: dict  # name, version and settings: what the numbers depend on (the cache key)
    refuses: Callable[[object], str | None]
    build: Callable  # (body, y0, times, progress) -> a reference (see the module docstring)
    # The method family it belongs to: a candidate of that family is not judged against it.
    family: str = ""
    # What its progress line counts, filled with the count done: "integration: {n} steps".
    progress_words: str = "integration: {n} steps"
    # True for a provider that evaluates the body's exact motion (a closed form), not an
    # integration: what is said of the case is then "exact motion", not "no exact solution".
    exact: bool = False
    # What the reference is called where it is used (pick's note).
    label: str = "extended-precision reference"


TAYLOR_DD = Provider(
    name="taylor-dd",
    settings={
        "name": "taylor-dd",
        "version": 1,
        "main": extended.MAIN.as_dict(),
        "check": extended.CHECK.as_dict(),
        "estimate_factor": repr(extended.ESTIMATE_FACTOR),
    },
    # the body-form equations hold for every body in uniform gravity; its double-double series
    # (integrators/extended/taylor_dd.py) has no rotor terms
    refuses=lambda body: (
        "its series has no rotor terms"
        if body.has_rotor
        else None
        if body.uniform_gravity
        else f"its series is of uniform gravity, not of the {body.field.kind} field"
    ),
    build=lambda body, y0, times, progress: extended.verified_reference(body, y0, times, progress),
)

# The exact motion of a torque-free body (models/free_exact_mp.py), evaluated at every sample time
# at two precisions. It is no integration method, so it belongs to a family of its own that no
# candidate is of; it keys the cache by its own name and precisions.
FREE_CLOSED_FORM = Provider(
    name="free-closed-form",
    settings={
        "name": "free-closed-form",
        "version": 1,
        "main_dps": free_closed_form.MAIN_DPS,
        "check_dps": free_closed_form.CHECK_DPS,
        "estimate_factor": repr(extended.ESTIMATE_FACTOR),
    },
    refuses=free_closed_form.refuses,
    build=lambda body, y0, times, progress: free_closed_form.verified_reference(
        body, y0, times, progress
    ),
    family="closed-form-free-flow",
    progress_words="evaluation: {n} times",
    exact=True,
)

# A body in another field than uniform gravity (the gravity gradient): scipy's DOP853 on the
# body-form equations at two tolerances, in double precision (field_reference.py).
FIELD_DOP853 = Provider(
    name="field-dop853",
    settings={
        "name": "field-dop853",
        "version": 1,
        "main_rtol": repr(field_reference.MAIN_RTOL),
        "check_rtol": repr(field_reference.CHECK_RTOL),
        "estimate_factor": repr(extended.ESTIMATE_FACTOR),
    },
    refuses=field_reference.refuses,
    build=lambda body, y0, times, progress: field_reference.verified_reference(
        body, y0, times, progress
    ),
    family=field_reference.FAMILY,
    progress_words="integration: {n} evaluations",
    label="double-precision reference",
)

PROVIDERS: list[Provider] = [FREE_CLOSED_FORM, TAYLOR_DD, FIELD_DOP853]


@dataclass
class CaseReference:
    case: str
    provider: str
    method: str
    times: np.ndarray
    states: np.ndarray  # (n, 7) body-form states at the sample times
    accuracy: dict  # verified accuracy: axis, attitude (rad), momentum (relative)
    parting: dict
    cost: dict
    cached: bool
    family: str = ""
    notes: list[str] = field(default_factory=list)
    exact: bool = False  # the provider's flag: the exact motion itself, at high precision
    label: str = "extended-precision reference"  # the provider's name for it

    def axes(self) -> np.ndarray:
        return np.array([figure_axis(*row[:4]) for row in self.states])

    def accuracy_text(self) -> str:
        a = self.accuracy
        return (
            f"verified accuracy {a['axis']:.2g} rad (figure axis), {a['attitude']:.2g} rad "
            f"(attitude) over {self.times[-1]:g} s"
        )

    def cost_text(self) -> str:
        c = self.cost
        if not c["steps"] and not c["check_steps"]:
            wall = c["wall_s"] + c["check_wall_s"]
            return f"no steps (evaluated at each time), {wall:.2g} s to build"
        return (
            f"{int(c['steps'])} + {int(c['check_steps'])} steps, "
            f"{c['wall_s'] + c['check_wall_s']:.2g} s to build"
        )


def sample_times(horizon: float, samples: int) -> np.ndarray:
    """The times a run samples at (RunPlan.sample_time, the same arithmetic)."""
    t = np.array([horizon * k / (samples - 1) for k in range(samples)], dtype=np.float64)
    t[-1] = horizon
    return t


class BuildProgress:
    """One line on stderr while a reference builds (its two integrations or evaluations one after
    the other, each half of the work): redrawn in place on a terminal, a line at each quarter
    otherwise."""

    def __init__(
        self, label: str, stream=None, quiet: bool = False, words: str = "integration: {n} steps"
    ):
        self.label = label
        self.words = words
        self.stream = stream if stream is not None else sys.stderr
        self.tty = self.stream.isatty()
        self.quiet = quiet
        self._next = 0.25

    def __call__(self, which: str, frac: float, steps: int, seconds: float) -> None:
        if self.quiet:
            return
        done = 0.5 * frac if which == "reference" else 0.5 + 0.5 * frac
        line = (
            f"{self.label}: building, {100 * done:3.0f}% ({which} {self.words.format(n=steps)} "
            f"in {seconds:.1f} s)"
        )
        if self.tty:
            self.stream.write(f"\r{line}\x1b[K" + ("\n" if done >= 1.0 else ""))
        elif done >= self._next:
            self.stream.write(line + "\n")
            self._next = (int(done * 4) + 1) / 4
        self.stream.flush()


def provider_for(body) -> tuple[Provider | None, list[str]]:
    why = []
    for p in PROVIDERS:
        reason = p.refuses(body)
        if reason is None:
            return p, why
        why.append(f"{p.name}: {reason}")
    return None, why


def case_reference(
    case,
    horizon: float | None = None,
    samples: int | None = None,
    *,
    build: bool = True,
    quiet: bool = False,
    stream=None,
) -> CaseReference | None:
    """The case's reference at its run sample times over `horizon` (default the case's; the
    samples by the horizon rule of every command unless given), read from the cache or built
    (and cached) when `build`; None when not cached and not `build`. Raises UserError when no
    provider takes the case or the build fails."""
    horizon = case.horizon if horizon is None else float(horizon)
    samples = samples_for_horizon(case, horizon) if samples is None else int(samples)
    provider, why = provider_for(case.body)
    if provider is None:
        raise UserError(f"{case.name}: no reference provider takes this body ({'; '.join(why)})")
    y0 = np.ascontiguousarray(case.body_state(), dtype=np.float64)
    times = sample_times(horizon, samples)
    key = reference_cache.reference_key(
        case.toml_text, case.body, y0, horizon, samples, provider.settings
    )
    hit = reference_cache.load(key, times)
    if hit is not None:
        return CaseReference(
            case.name, provider.name, hit["method"], hit["times"], hit["states"],
            hit["accuracy"], hit["parting"], hit["cost"], cached=True, family=provider.family,
            exact=provider.exact, label=provider.label,
        )  # fmt: skip
    if not build:
        return None
    progress = BuildProgress(f"reference for {case.name}", stream, quiet, provider.progress_words)
    t0 = time.perf_counter()
    try:
        ref = provider.build(case.body, y0, times, progress)
    except extended.ReferenceFailed as exc:
        raise UserError(f"{case.name}: the reference could not be built: {exc}") from None
    out = CaseReference(
        case.name, provider.name, ref.method, ref.times, ref.states, dict(ref.accuracy),
        dict(ref.parting), dict(ref.cost), cached=False, family=provider.family,
        exact=provider.exact, label=provider.label,
    )  # fmt: skip
    note = reference_cache.store(key, ref)
    if note:
        out.notes.append(note)
    if not quiet:
        s = stream if stream is not None else sys.stderr
        s.write(
            f"reference for {case.name}: built in {time.perf_counter() - t0:.1f} s, "
            f"{out.accuracy_text()}" + (f"; {note}" if note else "") + "\n"
        )
        s.flush()
    return out
