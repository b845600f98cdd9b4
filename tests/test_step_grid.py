"""The runner's step grid: a step that divides the sample interval up to floating-point noise
is taken as dividing it."""

from topdrift.benchmarks.run.runner import steps_per_interval


def test_ratio_a_hair_above_a_whole_number_is_that_number():
    interval = 200.0 / 10000  # 0.02
    assert interval / 1e-5 != 2000.0  # 2000.0000000000002 in binary floating point
    assert steps_per_interval(interval, 1e-5) == 2000


def test_a_real_remainder_rounds_the_count_up():
    assert steps_per_interval(0.05, 3e-4) == 167  # the step shrinks to 0.05 / 167
    assert steps_per_interval(0.05, 0.2) == 1  # a step longer than the interval is cut to it
