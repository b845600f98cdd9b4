"""The step grid: the runner's steps per sample interval, and the one rule every fixed-step
family, the ensembles and the runner share (integrators/base.py): a step that divides the
interval up to floating-point noise is taken as dividing it."""

import pytest

from topdrift.benchmarks.cases.library import library_cases
from topdrift.benchmarks.run.runner import steps_per_interval
from topdrift.integrators import GRID_RTOL, MethodRefused, grid_steps, whole_steps


def test_ratio_a_hair_above_a_whole_number_is_that_number():
    interval = 200.0 / 10000  # 0.02
    assert interval / 1e-5 != 2000.0  # 2000.0000000000002 in binary floating point
    assert steps_per_interval(interval, 1e-5) == 2000


def test_a_real_remainder_rounds_the_count_up():
    assert steps_per_interval(0.05, 3e-4) == 167  # the step shrinks to 0.05 / 167
    assert steps_per_interval(0.05, 0.2) == 1  # a step longer than the interval is cut to it


# --- the one grid rule (integrators/base.py) --------------------------------------------------


def _span_rule(span: float, h: float):
    """The same tolerance measured in time instead of in steps: |span - k h| against
    GRID_RTOL max(|span|, h). An independent formulation; the two differ only within about 1e-7
    relative of the tolerance itself (measured), never on a run's sample interval."""
    k = round(span / h)
    return k if abs(span - k * h) <= GRID_RTOL * max(abs(span), h) else None


@pytest.mark.parametrize("case", library_cases(), ids=lambda c: c.name)
def test_every_sample_interval_of_the_library_is_on_the_grid(case):
    for horizon, n in ((case.horizon, case.samples), (1.0, 51)):
        interval = horizon / (n - 1)
        for requested in (1e-5, 3e-4, 1e-3, 2e-3, 5.11e-3, 1.25e-2):
            per = steps_per_interval(interval, requested)
            h = interval / per
            t_prev = 0.0
            for k in range(1, n):
                tk = horizon if k == n - 1 else horizon * k / (n - 1)  # RunPlan.sample_time
                span = tk - t_prev
                assert whole_steps(span, h) == per == _span_rule(span, h)
                for off in (0.5, 0.25, 1e-3):  # a fraction of a step off: refused by both
                    if off <= 10.0 * GRID_RTOL * per:
                        # below the rule's resolution of GRID_RTOL steps per step of the span:
                        # 1e-3 of a 1e-5 s step in a gravity-gradient case's 36 s interval
                        # (3.6e6 steps) is 3e-10 of the span, which the rule takes as noise
                        continue
                    assert whole_steps(span + off * h, h) is None
                    assert _span_rule(span + off * h, h) is None
                t_prev = tk


def test_grid_steps_refuses_with_one_message():
    assert grid_steps("m", 0.0, 0.1 + 0.2, 1e-3) == 300
    assert grid_steps("m", 0.3, 0.0, 1e-3) == -300  # the sign is the direction
    for bad in (0.0105, float("inf"), float("nan")):
        with pytest.raises(MethodRefused, match="m: t = .* is not on the step grid.*whole number"):
            grid_steps("m", 0.0, bad, 1e-3)
