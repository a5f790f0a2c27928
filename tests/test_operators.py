"""Loop operators (instantonkit.lattice.operators): published coefficients, agreement with the 1x1 and 1x1 + 2x2
measurements, anisotropic spacings, flow and cooling with their actions, and bad input."""

from fractions import Fraction

import numpy as np
import pytest
from _references import force_finite_difference, noisy_links

import instantonkit as ik
from instantonkit.lattice import operators as ops
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice import stability as st
from instantonkit.lattice import starts as lat
from instantonkit.lattice import threads
from instantonkit.lattice.forces import loop_force

F = Fraction


@pytest.fixture(scope="module")
def rough():
    """A rough periodic 4^4 SU(2) lattice (a BPST start times random SU(2) noise)."""
    return noisy_links(lat.lattice_links(ik.bpst(size=1.5), (4,) * 4, 1.0), 0.3, 1)


@pytest.fixture(scope="module")
def open_start():
    """An open regular-gauge 8^4 BPST start at rho/a = 2 (centre in the middle of a hypercube)."""
    return lat.lattice_links(ik.bpst(size=2.0).with_gauge("regular"), (8,) * 4, 1.0, boundary="open")


# -- published coefficients (exact rational arithmetic) ----------------------------------------------------


@pytest.mark.parametrize("name", sorted(ops.OPERATOR_PRESETS))
def test_every_preset_is_normalised_to_the_continuum_exactly(name):
    # sum_i c_i = 1: every m x n term tends to c_i times the continuum (module docstring; common practice)
    moments = ops.OPERATOR_PRESETS[name].moments()
    assert isinstance(moments["sum"], Fraction) and moments["sum"] == 1


@pytest.mark.parametrize("name,c1", [("symanzik", F(-1, 12)), ("iwasaki", F("-0.331")), ("dbw2", F("-1.4069"))])
def test_rectangle_actions_satisfy_c0_plus_8_c1_equal_1(name, c1):
    # Luescher and Weisz, Commun. Math. Phys. 97 (1985) 59 (from memory): c0 + 8 c1 = 1; c1 = -1/12 tree-level
    # Symanzik, -0.331 Iwasaki (UTHEP-118, 1983), -1.4069 DBW2 (Takaishi, Phys. Rev. D 54 (1996) 1050); c1 from memory
    terms = {(m, n): c for m, n, c in ops.OPERATOR_PRESETS[name].terms}
    c0, rect = terms[(1, 1)], terms[(1, 2)] / 8
    assert rect == c1
    assert c0 + 8 * rect == 1


def test_tree_level_symanzik_action_has_no_a2_term():
    # Luescher and Weisz 1985 (from memory): c1 = -1/12 removes the tree-level a^2 term, sum c (m^2 + n^2) = 0
    assert ops.OPERATOR_PRESETS["symanzik"].moments()["a2"] == 0


def test_five_loop_action_coefficients_and_their_sum_rules():
    # de Forcrand, Garcia Perez, Stamatescu, Nucl. Phys. B 499 (1997) 409 (from memory): c5 = 1/20 gives
    # c1 = 65/36, c2 = -11/45, c3 (1x2) = -32/45, c4 (1x3) = 1/10; no tree-level a^2 and a^4 terms
    op = ops.OPERATOR_PRESETS["5li"]
    terms = {(m, n): c for m, n, c in op.terms}
    assert terms == {(1, 1): F(65, 36), (2, 2): F(-11, 45), (1, 2): F(-32, 45), (1, 3): F(1, 10), (3, 3): F(1, 20)}
    assert op.moments() == {"sum": 1, "a2": 0, "a4": 0, "a4_mixed": 0}


@pytest.mark.parametrize(
    "name,k",
    [
        ("3loop", {(1, 1): F(3, 2), (2, 2): F(-3, 20), (3, 3): F(1, 90)}),
        ("5loop", {(1, 1): F(65, 36), (2, 2): F(-11, 180), (1, 2): F(-16, 45), (1, 3): F(1, 30), (3, 3): F(1, 180)}),
    ],
)
def test_improved_field_strengths_match_the_published_clover_coefficients(name, k):
    # Bilson-Thompson, Leinweber, Williams, Ann. Phys. 304 (2003) 1 (from memory): F = sum k_i C^{(m x n)} with
    # unnormalised clovers C^{m x n} -> m n F, so sum k m n = 1 and c = k m n; the five-loop set is the k5 = 1/180
    # member of k1 = 19/9 - 55 k5, k2 = 1/36 - 16 k5, k3 = -32/45 + 64 k5, k4 = 1/15 - 6 k5
    op = ops.OPERATOR_PRESETS[name]
    assert {(m, n): c / (m * n) for m, n, c in op.terms} == k
    assert sum(v * m * n for (m, n), v in k.items()) == 1
    assert op.moments()["a2"] == 0 and op.moments()["a4"] == 0 and op.moments()["a4_mixed"] == 0
    assert op.combine == "field"


@pytest.mark.parametrize("eps", [F(1), F(0), F(-1), F(1, 3)])
def test_epsilon_action_is_normalised(eps):
    # (4 - eps)/3 + 16 (eps - 1)/48 = 1 (Garcia Perez, Gonzalez-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994)
    # 535, from memory), and its a^2 coefficient -(1/10) sum c (m^2 + n^2) is -eps/5 (same paper)
    op = ops.epsilon_action(eps)
    assert op.moments()["sum"] == 1
    assert op.action_a2() == pytest.approx(-float(eps) / 5.0, abs=1e-15)


# -- the mechanism reproduces the existing measurements -----------------------------------------------------


def test_wilson_preset_is_the_wilson_action(rough):
    assert ops.operator_action(rough, "wilson") == pytest.approx(lat.wilson_action(rough), rel=1e-13)


@pytest.mark.parametrize("eps", [1.0, 0.0, -1.0])
def test_epsilon_action_equals_improved_action(rough, eps):
    assert ops.operator_action(rough, ops.epsilon_action(eps)) == pytest.approx(
        sm.improved_action(rough, eps), rel=1e-12
    )


def test_open_actions_equal_the_open_loop_actions(open_start):
    u = open_start
    assert ops.operator_action(u, "wilson", boundary="open") == pytest.approx(
        lat.wilson_action(u, boundary="open"), rel=1e-12
    )
    want = sm.improved_action(u, -1.0, boundary="open")
    assert ops.operator_action(u, ops.epsilon_action(-1.0), boundary="open") == pytest.approx(want, rel=1e-12)


def test_clover_preset_is_the_clover_field_strength_and_charge(rough):
    f = ops.operator_field_strength(rough, "clover")
    assert np.max(np.abs(f - lat.clover_field_strength(rough))) < 1e-14
    assert ops.operator_charge(rough, "clover") == pytest.approx(lat.clover_charge(rough), rel=1e-12, abs=1e-13)


def test_two_by_two_operator_is_the_two_by_two_loop_charge_over_16(rough):
    # loop_clover_charge(size=2) is in lattice units (-> 2^4 Q); the operator's 2x2 clover is divided by its area
    q = ops.operator_charge(rough, ops.loop_operator({(2, 2): 1}))
    assert 16.0 * q == pytest.approx(sm.loop_clover_charge(rough, 2), rel=1e-12, abs=1e-13)


def test_eps0_density_charge_is_the_improved_charge(open_start):
    u = open_start
    q = ops.operator_charge_density(u, "eps0", boundary="open")
    want = sm.improved_charge_density(u, boundary="open")
    assert np.array_equal(np.isnan(q), np.isnan(want))
    assert np.nanmax(np.abs(q - want)) < 1e-13


def test_blocks_of_planes_give_the_whole_lattice_result(rough, monkeypatch):
    # a plane's loops never leave it, so cutting the other two axes into chunks and blocks (one site each here)
    # must not change a measurement beyond rounding (the default cuts hold the 4^4 lattice in one block)
    whole = (ops.operator_action(rough, "symanzik"), ops.operator_charge_density(rough, "eps0"))
    monkeypatch.setattr(ops, "CHUNK_SITES", 1)
    monkeypatch.setattr(ops, "BLOCK_SITES", 1)
    cut = (ops.operator_action(rough, "symanzik"), ops.operator_charge_density(rough, "eps0"))
    assert cut[0] == pytest.approx(whole[0], rel=1e-12)
    assert np.max(np.abs(cut[1] - whole[1])) < 1e-12 * np.max(np.abs(whole[1]))


def test_chunks_on_several_threads_give_the_same_bits(rough, monkeypatch):
    # the chunks of a plane run on WORKERS threads and their results are taken in chunk order, so the thread
    # count changes no bit of a measurement (common practice: a parallel map must not change the answer)
    monkeypatch.setattr(ops, "CHUNK_SITES", 1)

    def measure():
        return (
            ops.operator_action(rough, "5li"),
            ops.operator_field_strength(rough, "3loop"),
            ops.operator_charge_density(rough, "5li"),
            ops.operator_charge_density(rough, "5loop"),
        )

    monkeypatch.setattr(threads, "WORKERS", 1)
    one = measure()
    monkeypatch.setattr(threads, "WORKERS", 3)
    three = measure()
    assert one[0] == three[0]
    for x, y in zip(one[1:], three[1:], strict=True):
        assert np.array_equal(x, y)


# -- anisotropic spacings --------------------------------------------------------------------------------


def test_stretched_time_keeps_the_charge(open_start):
    # the links of f(x) at spacing a are those of g(x) = f(x1, x2, x3, x4 / xi) at spacings (a, a, a, xi a); the
    # charge is topological, Q_g = Q_f, and on the lattice every term eps F F holds one time plane, so V q is unchanged
    q = ops.operator_charge(open_start, "5loop", boundary="open")
    assert ops.operator_charge(open_start, "5loop", spacing=(1.0, 1.0, 1.0, 1.7), boundary="open") == pytest.approx(
        q, rel=1e-12
    )


def test_stretched_time_scales_space_and_time_planes_of_the_action(open_start):
    # S_g = xi S_space + S_time / xi (V / (a_mu a_nu)^2 = xi for space planes, 1/xi for time planes); the start's
    # centre sits in the middle of a hypercube, so its six planes carry equal action (the BPST density is O(4)
    # symmetric; Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) and S_g = (xi + 1/xi)/2 S_f
    xi = 1.7
    s = ops.operator_action(open_start, "symanzik", boundary="open")
    got = ops.operator_action(open_start, "symanzik", spacing=(2.0, 2.0, 2.0, 2.0 * xi), boundary="open")
    assert got == pytest.approx(0.5 * (xi + 1.0 / xi) * s, rel=1e-12)


# -- flow and cooling with a loop operator's action ---------------------------------------------------------


def test_operator_force_is_minus_the_lie_derivative_of_its_action(rough):
    # Z = -g0^2 dS (Luescher, JHEP 08 (2010) 071, section 2, from memory): d/ds S(exp(s X) U) = 2 tr(X Z), against a
    # central finite difference with scipy's expm on one link, for the tree-level Symanzik action (1x1 and 1x2 loops)
    op = ops.OPERATOR_PRESETS["symanzik"]
    pairs, omega, _ = sm._operator_terms(op)
    z = loop_force(rough, pairs, omega)
    fd, want = force_finite_difference(rough, z, lambda v: ops.operator_action(v, op))
    assert fd == pytest.approx(want, rel=1e-6, abs=1e-9)


@pytest.mark.long
def test_wilson_preset_flow_is_the_wilson_flow(rough):
    a, ra = sm.gradient_flow(rough, 0.06, 0.02)
    b, rb = sm.gradient_flow(rough, 0.06, 0.02, action="wilson")
    assert np.max(np.abs(a - b)) < 1e-13
    assert rb.action == pytest.approx(ra.action, rel=1e-13)
    assert rb.operator == "wilson" and np.isnan(rb.eps)


@pytest.mark.long
def test_eps0_preset_cooling_is_the_eps0_cooling(rough):
    # both sweeps use the 8 colours (n_mu mod 2, sum_{nu != mu} n_nu mod 4), so the same updates in the same order
    a, ra = sm.cool(rough, 2, eps=0.0)
    b, rb = sm.cool(rough, 2, action="eps0")
    assert np.max(np.abs(a - b)) < 1e-12
    assert rb.action == pytest.approx(ra.action, rel=1e-12)


@pytest.mark.parametrize("eps", [1.0, 0.0, -1.0])
def test_operator_flow_frequency_of_the_eps_family_is_max_flow_frequency(eps):
    # max_flow_frequency is checked against power iteration of the force in tests/test_link_checks.py
    assert st.operator_flow_frequency(ops.epsilon_action(eps)) == pytest.approx(st.max_flow_frequency(eps), rel=1e-12)


def test_symanzik_flow_frequency_matches_power_iteration_of_its_force():
    # the linearised flow X -> -Z(exp(d X)) / d about the trivial field on 4^4 (momenta 0, pi/2, pi) by power
    # iteration of the operator's own force; 80/3 = 16 (5/3) at p = (pi, pi, pi, pi), where the 1x2 loops' flux
    # D_2(pi/2)^2 = 4 cos^2(pi/2) vanishes and only the plaquette weight c0 = 5/3 is left
    op = ops.OPERATOR_PRESETS["symanzik"]
    assert st.operator_flow_frequency(op) == pytest.approx(80.0 / 3.0, rel=1e-12)
    pairs, omega, _ = sm._operator_terms(op)
    rng = np.random.default_rng(0)
    x = np.asarray(sm._traceless_antihermitian(rng.normal(size=(4,) * 4 + (4, 2, 2)) + 0j))
    lam = 0.0
    for _ in range(40):
        y = -np.asarray(loop_force(sm._expm_su(1e-7 * x), pairs, omega)) / 1e-7
        lam = float(np.linalg.norm(y) / np.linalg.norm(x))
        x = y / np.linalg.norm(y)
    assert lam == pytest.approx(80.0 / 3.0, rel=1e-3)


def test_dbw2_flow_refuses_a_step_beyond_its_bound(rough):
    # the DBW2 action's large rectangle weight (c1 = -1.4069) raises lambda_max far above the Wilson 16
    bound = st.flow_step_bound(action="dbw2")
    assert bound < st.flow_step_bound() / 5
    with pytest.raises(ValueError, match="stability bound.*dbw2"):
        sm.gradient_flow(rough, 0.1, 0.05, action="dbw2")


# -- bad input ---------------------------------------------------------------------------------------------


def test_a_set_that_is_not_normalised_is_refused():
    with pytest.raises(ValueError, match="must sum to 1.*found sum 3/2"):
        ops.loop_operator({(1, 1): F(1), (1, 2): F(1, 2)})


def test_a_float_set_off_by_more_than_rounding_is_refused():
    with pytest.raises(ValueError, match="must sum to 1"):
        ops.loop_operator({(1, 1): 3.648, (1, 2): -2.647})


@pytest.mark.parametrize(
    "coefficients,err,match",
    [
        ({(1, 2): 0.5, (2, 1): 0.5}, ValueError, "given twice"),
        ({(1, 0): 1}, ValueError, "sides must lie in"),
        ({(1, 1.0): 1}, TypeError, "two integers"),
        ({(1, 1): True}, TypeError, "real number"),
        ({(1, 1): float("nan")}, ValueError, "finite"),
        ({(1, 1): 0}, ValueError, "at least one loop"),
        ("wilson-ish", TypeError, "mapping"),
    ],
)
def test_bad_coefficient_sets_are_refused(coefficients, err, match):
    with pytest.raises(err, match=match):
        ops.loop_operator(coefficients)


def test_unknown_preset_and_combine_are_refused():
    with pytest.raises(ValueError, match="operator must be one of"):
        ops.get_operator("plaquette-ish")
    with pytest.raises(ValueError, match="combine"):
        ops.loop_operator({(1, 1): 1}, combine="both")


def test_loops_longer_than_the_lattice_are_refused():
    u = lat.lattice_links(ik.bpst(size=1.0), (2, 2, 2, 2), 1.0)
    with pytest.raises(ValueError, match="side 3, longer than the smallest lattice extent 2"):
        ops.operator_action(u, "5li")


def test_bad_spacing_and_boundary_are_refused(rough):
    with pytest.raises(ValueError, match="spacing"):
        ops.operator_action(rough, "wilson", spacing=(1.0, 1.0, -1.0, 1.0))
    with pytest.raises(TypeError, match="spacing"):
        ops.operator_action(rough, "wilson", spacing=True)
    with pytest.raises(ValueError, match="boundary"):
        ops.operator_charge(rough, "clover", boundary="twisted-ish")


def test_eps_and_action_together_are_refused(rough):
    with pytest.raises(ValueError, match="give eps or action, not both"):
        sm.gradient_flow(rough, 0.02, 0.01, eps=0.0, action="symanzik")


def test_cooling_with_long_loops_needs_extents_divisible_by_four():
    u = lat.lattice_links(ik.bpst(size=1.5), (6,) * 4, 1.0)
    with pytest.raises(ValueError, match="divisible by 4; found shape"):
        sm.cool(u, 1, action="symanzik")
