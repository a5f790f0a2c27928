"""Shared pytest set-up: hypothesis profiles (JIT compiles are slow, so no deadlines, few examples), long checks."""

import os

import pytest
from hypothesis import HealthCheck, settings

# "ci" (default): small and deterministic enough for the full suite to stay fast.
settings.register_profile(
    "ci",
    max_examples=15,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
# "dev": more examples for local bug hunting (HYPOTHESIS_PROFILE=dev).
settings.register_profile("dev", max_examples=200, deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


# Parametrised checks whose variants repeat one property on more data (more instantons, other groups,
# gauges or wrappers).  The default run keeps the listed variants, one representative per property (two
# where a check has five or more), chosen as the cheapest in a measured run of the whole suite; the
# other variants run with INSTANTONKIT_LONG=1 like the checks marked ``long``.  Node ids are relative
# to tests/.
DEFAULT_VARIANTS = {
    "test_unitary_zero_modes.py::test_modes_solve_the_dirac_equation": ("su3_k3-frame", "su3_k3-traceless"),
    "test_unitary_zero_modes.py::test_phase_gradient_is_the_u1_part": ("su3_k3", "su3_k2_regular"),
    "test_lattice.py::test_adhm_generator_batch_equals_the_contracted_potential": ("singular--1-1", "regular--1-1"),
    "test_unitary_adhm.py::test_moduli_count_is_4kN": ("3-3", "3-1"),
    "test_unitary_adhm.py::test_closed_form_potential_is_u_dag_du": ("3",),
    "test_lattice.py::test_adhm_potential_equals_the_derivative_of_the_frame": ("k2-anti", "k3-regular"),
    "test_lattice.py::test_unitary_generator_batch_equals_the_contracted_potential": ("2-regular",),
    "test_unitary_zero_modes.py::test_phase_nodes_converge": ("su3_k2",),
    "test_unitary_zero_modes.py::test_frame_modes_are_the_default_modes_without_the_phase": ("su4_k2",),
    "test_zero_modes.py::test_modes_are_orthonormal": ("2-2-64-14",),
    "test_unitary_adhm.py::test_closed_form_density_matches_osborn_and_autodiff": ("3",),
    "test_unitary_zero_modes.py::test_n2_modes_are_the_quaternionic_modes_up_to_the_gauge_relation": ("1",),
    "test_transforms.py::test_wrappers_forward_the_batch_densities_of_the_wrapped_field": ("parity",),
    "test_lattice.py::test_wrapped_generator_batch_equals_the_contracted_potential": ("window",),
    "test_lattice.py::test_closed_link_hooks_are_asked_of_the_field_and_forwarded_by_exact_wrappers": ("gauged",),
    "test_unitary_zero_modes.py::test_gram_closed_form_equals_the_modes_and_minus_box_f": ("su3_k3",),
    "test_zero_modes.py::test_dirac_equation_holds_pointwise_by_autodiff": ("bpst", "k2"),
    "test_lattice.py::test_bpst_closed_form_link_equals_magnus_quadrature": ("regular-1",),
    "test_adhm_fields.py::test_rank_one_and_exact_routes_agree": ("2",),
    "test_unitary_adhm.py::test_quaternionic_data_give_the_same_field": ("1",),
    "test_unitary_lattice.py::test_wilson_action_and_clover_charge_approach_the_continuum_as_a_squared": ("sizes1",),
    "test_adhm_fields.py::test_autodiff_field_is_self_dual": ("SU2-k2",),
    "test_zero_modes.py::test_gram_closed_form_matches_the_modes": ("bpst", "k2"),
    "test_records.py::test_transformed_field_round_trips_through_its_record": ("translated", "parity"),
    "test_adhm_fields.py::test_osborn_formula": ("Sp2-k2",),
    "test_unitary_adhm.py::test_total_charge_is_k_by_the_volume_rule": ("1",),
    "test_unitary_adhm.py::test_self_dual_with_q_equal_s_over_8pi2": ("1",),
    "test_unitary_zero_modes.py::test_n2_data_reproduce_the_quaternionic_zero_mode_densities": ("1",),
    "test_zero_modes.py::test_density_is_minus_box_trace_f_over_four_pi_squared": ("anti_regular_k2",),
    "test_unitary_adhm.py::test_total_charge_is_k_to_1e_10_by_osborn_flux": ("1",),
    "test_adhm.py::test_random_adhm_passes_validation_to_1e_12": ("2-1", "1-2"),
    "test_adhm_fields.py::test_gram_from_split_b_matches_delta_dag_delta": ("2",),
    "test_checks.py::test_thooft_charge_is_the_number_of_poles": ("3",),
    "test_integrals.py::test_osborn_route_gives_q_equal_k_to_1e_10_with_an_honest_error": ("1",),
    "test_unitary_adhm.py::test_delta_gram_is_block_diagonal_for_valid_data": ("2",),
    "test_unitary_adhm.py::test_potential_is_antihermitian_and_traceless": ("1",),
}


def _default_variant_skips(items) -> list:
    """The items to skip by default under DEFAULT_VARIANTS.

    When none of a check's kept variants was collected (renamed parameters, or a ``-k`` selection), none of
    its variants is skipped: a stale entry costs time, never coverage.
    """
    seen: dict = {}
    for item in items:
        base, _, param = item.nodeid.partition("[")
        key = base.split("tests/", 1)[-1]
        if param and key in DEFAULT_VARIANTS:
            seen.setdefault(key, []).append((param[:-1], item))
    out = []
    for key, variants in seen.items():
        kept = set(DEFAULT_VARIANTS[key])
        if kept & {p for p, _ in variants}:
            out += [item for p, item in variants if p not in kept]
    return out


def pytest_collection_modifyitems(config, items):
    """Skip the checks marked ``long`` (a minute or more each) and the variants beyond DEFAULT_VARIANTS
    unless INSTANTONKIT_LONG is set."""
    if os.environ.get("INSTANTONKIT_LONG"):
        return
    skip = pytest.mark.skip(reason="set INSTANTONKIT_LONG=1 (minutes)")
    for item in items:
        if "long" in item.keywords:
            item.add_marker(skip)
    variant = pytest.mark.skip(reason="another variant of this check runs by default; INSTANTONKIT_LONG=1 runs all")
    for item in _default_variant_skips(items):
        item.add_marker(variant)
