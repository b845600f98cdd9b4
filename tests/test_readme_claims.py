"""The audit as a test: README claims of the form "topdrift does X", each beside the tests that
check it, by name. A claim in CHECKED must still be in the README (word for word, whitespace
aside) and every test named for it must exist; a claim the README makes without a test of its
own is listed in UNCHECKED with the reason, so that it is visible rather than silently trusted.
Short and honest, not exhaustive: the README says more than this lists."""

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

CHECKED = [
    (
        "bad input: one line on stderr naming what is wrong",
        [
            "test_fuzz_cases.py::test_bad_case_files_exit_2_with_one_line_and_write_nothing",
            "test_fuzz_cases.py::test_installed_command_prints_one_line_and_no_traceback",
            "test_cli_run.py::test_bad_input_exits_2_and_leaves_no_file",
            "test_sweep.py::test_bad_sweep_file_exits_2_with_one_line_and_no_file",
            "test_plots.py::test_plot_bad_input_exits_2_with_one_line",
            "test_pick.py::test_bad_input_exits_2_with_one_line",
            "test_gate.py::test_invalid_baseline_exits_2",
        ],
    ),
    (
        "`keeps` names what it keeps **to the bit**",
        [
            "test_keeps.py::test_keeps_what_it_claims_and_no_more",
            "test_keeps.py::test_every_form_claims_what_keeps_says",
        ],
    ),
    (
        "Tests measure the order of convergence of every fixed-step method",
        [
            "test_rk_explicit.py::test_measured_order_is_four",
            "test_splitting.py::test_measured_order",
            "test_gauss.py::test_measured_order",
            "test_processed.py::test_processed_output_has_the_effective_order",
            "test_adaptive_orders.py::test_our_tableaux_at_fixed_steps",
            "test_adaptive_orders.py::test_scipy_tableaux_at_fixed_steps",
            "test_adaptive_orders.py::test_scipy_error_against_tolerance",
            "test_independent_references.py::test_taylor_reference_agrees_with_mpmath_odefun",
        ],
    ),
    (
        "The processed splittings' coefficients meet their effective-order conditions",
        [
            "test_processed.py::test_effective_order_on_matrices",
            "test_processed.py::test_kernel_alone_has_order_two",
        ],
    ),
    (
        "The composition coefficients are the published ones",
        ["test_compositions.py::test_local_error_order_on_random_matrices"],
    ),
    (
        "a step that would pass an output time is shortened to end on it",
        [
            "test_gbs.py::test_error_is_proportional_to_the_tolerance_lagrange_top",
            "test_gbs.py::test_error_is_proportional_to_the_tolerance_asymmetric_body",
            "test_gbs.py::test_samples_land_on_the_output_times_and_cost_about_one_step_each",
        ],
    ),
    (
        "scipy's step-size control and initial step",
        [
            "test_rk_adaptive.py::test_steps_and_end_state_match_scipy",
            "test_rk_adaptive.py::test_default_first_step_and_dense_output_match_scipy",
        ],
    ),
    (
        "A plug-in that fails to load is reported on stderr and left out",
        ["test_plugin_method.py::test_a_broken_plugin_warns_and_leaves_the_built_ins"],
    ),
    (
        "to the same bits in every dataset as a run that never stopped",
        [
            "test_cli_run.py::test_sigkill_then_resume_gives_the_same_bytes",
            "test_faults.py::test_signal_mid_run_then_resume_gives_the_same_bytes",
            "test_reference.py::test_resume_repeats_the_same_bits",
            "test_invariants_that_apply.py::test_the_integral_resumes_to_the_same_bits",
        ],
    ),
    (
        "is refused by `--resume` with one line",
        [
            "test_invariants_that_apply.py::test_a_checkpoint_of_the_older_layout_is_refused_in_one_line"
        ],
    ),
    (
        "A metric of a quantity that is no invariant of the case's body is null",
        [
            "test_invariants_that_apply.py::test_p_psi_is_a_metric_only_where_it_is_an_invariant",
            "test_counted_and_ranked.py::test_energy_ranking_leaves_out_a_method_that_keeps_the_energy",
        ],
    ),
    (
        "every run records it (`invariants/kovalevskaya`) and measures it (`kovalevskaya_rel_max`)",
        [
            "test_invariants_that_apply.py::test_a_kovalevskaya_run_records_and_measures_the_integral",
            "test_gate.py::test_the_kovalevskaya_integral_and_force_evaluations_are_gated",
        ],
    ),
    (
        "It is null, and `energy_drift_unknown` says why",
        [
            "test_timescales.py::test_drift_law_unknown_over_too_few_flips_and_bounded_over_many",
            "test_timescales.py::test_drift_fit_needs_enough_samples_in_its_window",
            "test_timescales.py::test_library_horizons_carry_a_drift_law",
        ],
    ),
    (
        "samples further apart than half of it alias that motion, and the run says so",
        [
            "test_timescales.py::test_samples_too_far_apart_are_noted",
            "test_counted_and_ranked.py::test_aliasing_warning_names_the_interval_and_the_period",
        ],
    ),
    (
        "for a free body the period of its body angular momentum",
        ["test_timescales.py::test_free_body_period_against_an_integration"],
    ),
    (
        "`force_evals` (force, that is torque, evaluations",
        [
            "test_counted_and_ranked.py::test_force_evaluations_are_the_kicks_of_a_splitting_and_every_rhs_otherwise",
            "test_splitting.py::test_counters",
            "test_rk_adaptive.py::test_counters_are_the_kernels",
        ],
    ),
    (
        "is not\n  ranked by it",
        [
            "test_counted_and_ranked.py::test_energy_ranking_leaves_out_a_method_that_keeps_the_energy",
            "test_counted_and_ranked.py::test_pick_by_energy_does_not_rank_a_method_that_keeps_it",
        ],
    ),
    (
        "A long run, whose path winds round the\n  vertical more than twice",
        [
            "test_counted_and_ranked.py::test_a_long_axis_path_is_drawn_as_first_turn_and_error_path",
            "test_counted_and_ranked.py::test_error_path_components",
        ],
    ),
    (
        "the datasets of every run are the same\nbytes with `--jobs 1`, `--jobs 2` or on a cluster",
        [
            "test_sweep_dask.py::test_scheduler_sweep_writes_the_bytes_of_a_local_one",
            "test_sweep.py::test_a_sweep_run_is_the_run_topdrift_run_makes",
        ],
    ),
    (
        "a sweep that is complete runs nothing and leaves the file\nbyte-for-byte as it was",
        ["test_sweep.py::test_second_sweep_runs_nothing_and_leaves_the_file_alone"],
    ),
    (
        "tests/test_gate.py plants exactly this on a three-run sweep of its own",
        [
            "test_gate.py::test_planted_coefficient_error_drops_the_order",
            "test_gate.py::test_planted_regression_fails_naming_run_and_metric",
        ],
    ),
]

CHECKED += [
    (
        "The axis error never exceeds the attitude error.",
        ["test_pick.py::test_attitude_target_is_met_against_an_independent_attitude"],
    ),
    (
        "reports `axis_angle_max` 0 and `attitude_angle_max` 2.01 rad, the spin phase lost",
        ["test_attitude.py::test_attitude_catches_the_lost_spin_phase_the_axis_error_misses"],
    ),
    (
        "`sleeping-above` with rk4 at h = 0.01 s gives `psi_abs_max` 3.14",
        ["test_attitude.py::test_near_the_pole_psi_errors_mislead_and_the_attitude_does_not"],
    ),
]

UNCHECKED = [
    (
        "Timings of runs this short are\nmachine- and load-dependent",
        "a caution, not a claim a test can hold",
    ),
]


def _readme() -> str:
    # The README and the reference pages it links to (docs/*.md): the claims moved with the text.
    pages = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
    return " ".join(" ".join(p.read_text(encoding="utf-8").split()) for p in pages)


def _flat(text: str) -> str:
    return " ".join(text.split())


def _tests_in(module: str) -> set[str]:
    tree = ast.parse((ROOT / "tests" / module).read_text(encoding="utf-8"))
    return {
        n.name for n in tree.body if isinstance(n, ast.FunctionDef) and n.name.startswith("test")
    }


@pytest.mark.parametrize(
    "claim,tests", CHECKED, ids=[re.sub(r"\W+", "-", c[:40]) for c, _ in CHECKED]
)
def test_each_claim_is_in_the_readme_and_its_tests_exist(claim, tests):
    assert _flat(claim) in _readme(), f"the README no longer says: {claim!r}"
    assert tests, f"a checked claim names no test: {claim!r}"
    for ref in tests:
        module, name = ref.split("::")
        assert name in _tests_in(module), f"{ref}: no such test (claim {claim!r})"


@pytest.mark.parametrize(
    "claim,why", UNCHECKED, ids=[re.sub(r"\W+", "-", c[:40]) for c, _ in UNCHECKED]
)
def test_unchecked_claims_are_still_made_and_say_why(claim, why):
    # Listed so that they are seen; a claim that is dropped from the README leaves this list too.
    assert _flat(claim) in _readme(), f"the README no longer says: {claim!r}; drop it here"
    assert why
