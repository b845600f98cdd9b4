"""The runs a `topdrift run` command line asks for: one plan per case, the options filled in
from each case file's own `[run]` suggestions where the command line is silent."""

from __future__ import annotations

from dataclasses import dataclass

from topdrift.benchmarks.cases.library import load_case
from topdrift.benchmarks.errors import UserError
from topdrift.benchmarks.run.runner import RunPlan, plan_run
from topdrift.benchmarks.stopping import Interrupted
from topdrift.integrators import get as get_method


@dataclass(frozen=True)
class Request:
    """What the command line gave (None: not given)."""

    method: str | None = None
    step: float | None = None
    rtol: float | None = None
    atol: float | None = None
    form: str | None = None
    horizon: float | None = None
    samples: int | None = None


def plan_case(spec: str, req: Request) -> RunPlan:
    """One case's plan: the request, then the case's own defaults where the request is silent
    (its form only when its method is the one run)."""
    case = load_case(spec)
    d = case.run
    method = req.method or d.get("method")
    if method is None:
        raise UserError(f"{spec}: no method; give --method NAME (see `topdrift methods`)")
    control = get_method(method).info.control
    explicit = any(v is not None for v in (req.step, req.rtol, req.atol))
    if control == "step":
        step = req.step if explicit else d.get("step")
        rtol, atol = req.rtol, req.atol
    else:
        step = req.step
        rtol = req.rtol if explicit else d.get("rtol")
        atol = req.atol if explicit else d.get("atol")
    form = req.form or (d.get("form") if method == d.get("method") else None)
    return plan_run(
        case,
        method,
        step=step,
        rtol=rtol,
        atol=atol,
        form=form,
        horizon=req.horizon,
        samples=req.samples,
    )


def plan_cases(specs: list[str], req: Request) -> list[RunPlan]:
    """Every case's plan, in order; a stop while planning says how far it got."""
    plans: list[RunPlan] = []
    try:
        for spec in specs:
            plans.append(plan_case(spec, req))
    except Interrupted as exc:
        raise exc.saying(
            f"{len(plans)} of {len(specs)} run(s) planned, none started; nothing written"
        ) from None
    return plans


def plan_ensembles(
    plans: list[RunPlan], members: int, spread: float, lanes: bool | None = None
) -> dict:
    """Each plan as an ensemble of `members` starts (run/ensemble.py), by its new run id;
    `lanes` as plan_ensemble's."""
    from topdrift.benchmarks.run.ensemble import plan_ensemble

    out = {}
    for p in plans:
        ep = plan_ensemble(p, members, spread, lanes)
        out[ep.run_id] = ep
    return out
