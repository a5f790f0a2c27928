"""Loop operators on twisted tori (instantonkit.lattice.twisted_operators) and twisted flow and cooling with any
loop operator's action (instantonkit.lattice.twisted_flow, instantonkit.lattice.staples)."""

import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg as sla
from _references import haar_links, noisy_links
from hypothesis import given
from hypothesis import strategies as st

from instantonkit.lattice import observables as obs
from instantonkit.lattice import operators as ops
from instantonkit.lattice import rectangles, staples, thermal
from instantonkit.lattice import twist as tw
from instantonkit.lattice import twisted_flow as tf
from instantonkit.lattice import twisted_operators as to
from instantonkit.lattice.forces import loop_force

TWIST = {(1, 2): 1, (3, 4): 1}
ZERO = np.zeros((4, 4), dtype=int)


#: Haar-random SU(2) links on 4^4 (every twisted loop far from 1).
RANDOM_4 = haar_links((4, 4, 4, 4), 2, seed=5)


@pytest.fixture(scope="module")
def rough():
    """A rough twisted 4^4 SU(2) lattice: the constant flux times random noise."""
    return noisy_links(tw.constant_flux_links((4, 4, 4, 4)), 0.3, seed=1)


def constant_flux_charge(op, shape):
    """The lattice charge of a loop operator on the constant flux of `constant_flux_links` (SU(2)).

    Derivation: every twisted e x f leaf of plane 12 is exp(-i e f phi12 T), T = sigma_3 / 2, phi12 = 2 pi /
    (L1 L2) (the twisted plaquettes are constant, tests/test_twist.py, and a twisted loop is the product of the
    twisted plaquettes it encloses), so the e x f clover over its area is i sigma_3 sin(e f phi12 / 2) / (e f)
    against the continuum a^2 F12 = i sigma_3 phi12 / 2: F^{(m, n)}_12 = sinc(m n / (L1 L2)) F12 (numpy's
    sinc x = sin(pi x) / (pi x)), likewise plane 34, the other planes 0.  With Q = 1/2 in the continuum
    ('t Hooft, Commun. Math. Phys. 81 (1981) 267, from memory): combine 'density' gives
    Q = (1/2) sum_i c_i sinc(m n / L1 L2) sinc(m n / L3 L4), combine 'field' (1/2) [sum c sinc(. / L1 L2)]
    [sum c sinc(. / L3 L4)].  The clover (one term, c = 1) is test_twist's two sincs.
    """
    x12, x34 = 1.0 / (shape[0] * shape[1]), 1.0 / (shape[2] * shape[3])
    terms = [(m * n, float(c)) for m, n, c in op.terms]
    if op.combine == "density":
        return 0.5 * sum(c * np.sinc(k * x12) * np.sinc(k * x34) for k, c in terms)
    return 0.5 * sum(c * np.sinc(k * x12) for k, c in terms) * sum(c * np.sinc(k * x34) for k, c in terms)


def constant_flux_action(op, shape):
    """The lattice action of a loop operator on the constant flux (SU(2)): every e x f loop of plane 12 is
    exp(-i e f phi12 T), so N - Re tr W = 2 (1 - cos(e f phi12 / 2)); each term counts both orientations in both
    ordered planes with weight c / (m n)^2: S = sum_i c_i / (m n)^2 4 V [2 - cos(pi m n / L1 L2) - cos(pi m n /
    L3 L4)] (the Wilson case is the issue's 4 V [2 - cos(pi / N1 N2) - cos(pi / N3 N4)], tests/test_twist.py)."""
    vol = float(np.prod(shape))
    x12, x34 = np.pi / (shape[0] * shape[1]), np.pi / (shape[2] * shape[3])
    return sum(
        float(c) / (m * n) ** 2 * 4.0 * vol * (2.0 - np.cos(m * n * x12) - np.cos(m * n * x34)) for m, n, c in op.terms
    )


# -- the twisted operators against the twisted Wilson action and clover ---------------------------------------


def test_a_zero_twist_gives_the_untwisted_operators_bit_for_bit(rough):
    assert to.twisted_operator_action(rough, ZERO, "symanzik") == ops.operator_action(rough, "symanzik")
    assert np.array_equal(
        to.twisted_operator_charge_density(rough, ZERO, "symanzik"), ops.operator_charge_density(rough, "symanzik")
    )
    assert np.array_equal(
        to.twisted_operator_field_strength(rough, ZERO, "clover"), ops.operator_field_strength(rough, "clover")
    )
    assert to.twisted_operator_charge(rough, ZERO, "symanzik") == ops.operator_charge(rough, "symanzik")


def test_the_twisted_wilson_preset_is_the_twisted_wilson_action(rough):
    assert to.twisted_operator_action(rough, TWIST, "wilson") == pytest.approx(
        tw.twisted_wilson_action(rough, TWIST), rel=1e-12
    )


def test_the_anisotropic_twisted_wilson_preset_weights_each_twisted_plaquette_by_its_plane(rough):
    # the anisotropic Wilson action beta sum_p w_p (1 - Re tr U_p / N), w = a_rho a_sigma / (a_mu a_nu)
    # (instantonkit.lattice.thermal; Karsch, Nucl. Phys. B 205 (1982) 285, from memory), with the twisted plaquettes
    a = (1.0, 0.8, 1.2, 0.5)
    want = 4.0 * np.sum((1.0 - tw.twisted_plaquette_traces(rough, TWIST)) * thermal.plane_weights(a))
    assert to.twisted_operator_action(rough, TWIST, "wilson", spacing=a) == pytest.approx(want, rel=1e-12)


def test_stretched_time_keeps_the_twisted_charge(rough):
    # V q is unchanged by the spacings (every term eps F F holds each direction once; tests/test_operators.py)
    q = to.twisted_operator_charge(rough, TWIST, "symanzik")
    assert to.twisted_operator_charge(rough, TWIST, "symanzik", spacing=(1.0, 1.0, 1.0, 1.7)) == pytest.approx(
        q, rel=1e-12
    )


def test_the_twisted_clover_preset_is_the_twisted_clover(rough):
    # two implementations: twist.py corrects the four clovers around each corner plaquette; here every leaf that
    # holds the corner is rebuilt with its factor (every plane twisted, the corner moved)
    twist = {(1, 2): 1, (1, 3): 1, (1, 4): 1, (2, 3): 1, (2, 4): 1, (3, 4): 1}
    c = (0, 1, 2, 0)
    f = to.twisted_operator_field_strength(rough, twist, "clover", corner=c)
    assert np.max(np.abs(f - tw.twisted_clover_field_strength(rough, twist, corner=c))) < 1e-13
    q = to.twisted_operator_charge_density(rough, twist, "clover", corner=c)
    assert np.max(np.abs(q - tw.twisted_clover_charge_density(rough, twist, corner=c))) < 1e-14


def _moved(u, n, plane, c):
    """U_mu on the sheet (c_mu, c_nu) times z_mu nu = exp(2 pi i / n): the twist n_mu nu = 1 moves from c to c - e_nu."""
    mu, nu = plane
    v = u.copy()
    sl: list = [slice(None)] * 4
    sl[mu], sl[nu] = c[mu], c[nu]
    v[tuple(sl) + (mu,)] *= np.exp(2j * np.pi / n)
    moved = list(c)
    moved[nu] = (c[nu] - 1) % u.shape[nu]
    return v, tuple(moved)


def test_moving_the_twist_by_a_singular_gauge_transformation_leaves_every_twisted_loop(rough):
    # U_mu on the sheet (c_mu, c_nu) times z_mu nu moves the twist of plane (mu, nu) from c to c - e_nu ('t Hooft,
    # Nucl. Phys. B 153 (1979) 141, from memory: only the twist tensor is physical); the twisted m x n loops are
    # products of twisted plaquettes, so every operator's action and charge density stay
    c = (1, 3, 2, 3)
    v, moved = _moved(rough, 2, (0, 1), c)
    assert to.twisted_operator_action(v, TWIST, "symanzik", corner=moved) == pytest.approx(
        to.twisted_operator_action(rough, TWIST, "symanzik", corner=c), rel=1e-13
    )
    np.testing.assert_allclose(
        to.twisted_operator_charge_density(v, TWIST, "symanzik", corner=moved),
        to.twisted_operator_charge_density(rough, TWIST, "symanzik", corner=c),
        atol=1e-13,
    )


@given(st.sampled_from(obs.PLANES), st.tuples(*[st.integers(0, 3)] * 4))
def test_moving_a_single_plane_twist_leaves_the_twisted_symanzik_action(plane, c):
    # the same singular gauge transformation for every plane and corner ('t Hooft 1979, from memory): U_mu on the
    # sheet (c_mu, c_nu) times z = -1 moves the twist from c to c - e_nu; the 1x2 loops of either orientation
    # that hold the old or the new corner change their factor and their links together
    u = RANDOM_4
    twist = {(plane[0] + 1, plane[1] + 1): 1}
    v, moved = _moved(u, 2, plane, c)
    assert to.twisted_operator_action(v, twist, "symanzik", corner=moved) == pytest.approx(
        to.twisted_operator_action(u, twist, "symanzik", corner=c), rel=1e-13
    )


@pytest.mark.long
def test_moving_the_twist_leaves_twisted_loops_that_wrap_round_the_torus():
    # as above in SU(3), with loops of side 2 on extents 2 (they wrap once round the torus: the edge case of the
    # module's corner rule) and side 3 on extents 4
    u = haar_links((4, 2, 4, 2), 3, seed=11)
    twist = {(1, 2): 1, (3, 4): 2}
    c = (1, 1, 3, 1)
    v, moved = _moved(u, 3, (0, 1), c)
    for op in ("symanzik", {(1, 1): 2, (2, 2): -1}):
        assert to.twisted_operator_action(v, twist, op, corner=moved) == pytest.approx(
            to.twisted_operator_action(u, twist, op, corner=c), rel=1e-13
        )
    np.testing.assert_allclose(
        to.twisted_operator_charge_density(v, twist, "symanzik", corner=moved),
        to.twisted_operator_charge_density(u, twist, "symanzik", corner=c),
        atol=1e-13,
    )


# -- the constant flux ----------------------------------------------------------------------------------------


def test_constant_flux_charge_of_the_symanzik_operator_is_the_sum_of_sincs():
    # every preset: test_constant_flux_action_and_charge_of_every_preset (long)
    op = ops.OPERATOR_PRESETS["symanzik"]
    q = to.twisted_operator_charge(tw.constant_flux_links((4, 4, 4, 4)), TWIST, op)
    assert q == pytest.approx(constant_flux_charge(op, (4, 4, 4, 4)), rel=1e-13)


def test_constant_flux_action_of_the_symanzik_operator_is_the_sum_of_cosines():
    op = ops.OPERATOR_PRESETS["symanzik"]
    s = to.twisted_operator_action(tw.constant_flux_links((4, 4, 4, 4)), TWIST, op)
    assert s == pytest.approx(constant_flux_action(op, (4, 4, 4, 4)), rel=1e-12)


@pytest.mark.long
def test_improved_charges_approach_one_half_closer_than_the_clover():
    # Q -> 1/2 ('t Hooft 1981, from memory).  A constant field has no derivative terms, so the lattice error is
    # the sincs' curvature, -phi^2 sum c (m n)^2 / 6 per plane (constant_flux_charge; phi ~ a^2): 1 for the
    # clover, -1 for Symanzik, -4 for eps0, 0 for 3loop, 5li and 5loop (their a4_mixed moment), whose error is
    # O(phi^4) = O(a^8) (then the large loops' flux, not a, sets it on the smallest lattices).  Measured (k^4
    # lattices): clover -6.4e-3, -1.27e-3, -4.0e-4 at k = 4, 6, 8; 3loop 5.7e-3, 2.4e-4, 2.4e-5; 5loop 3.0e-3,
    # 1.3e-4, 1.3e-5; 5li 6.7e-3, 3.2e-4, 3.4e-5
    devs = {}
    for k in (4, 6):
        u = tw.constant_flux_links((k,) * 4)
        devs[k] = [abs(to.twisted_operator_charge(u, TWIST, name) - 0.5) for name in ("clover", "3loop")]
    assert devs[6][1] < devs[4][1] and devs[6][0] < devs[4][0]
    assert devs[4][1] < devs[4][0] and devs[6][1] < 0.25 * devs[6][0]


@pytest.mark.long
@pytest.mark.parametrize("name", sorted(ops.OPERATOR_PRESETS))
def test_constant_flux_action_and_charge_of_every_preset(name):
    shape = (4, 6, 6, 4)
    op = ops.OPERATOR_PRESETS[name]
    u = tw.constant_flux_links(shape)
    assert to.twisted_operator_charge(u, TWIST, op) == pytest.approx(constant_flux_charge(op, shape), rel=1e-13)
    assert to.twisted_operator_action(u, TWIST, op) == pytest.approx(constant_flux_action(op, shape), rel=1e-12)


@pytest.mark.long
def test_charges_without_a4_mixed_term_approach_one_half_as_a_to_the_eighth():
    # sum c (m n)^2 = 0 for 3loop, 5li and 5loop (the a4_mixed moment of test_operators.py; Bilson-Thompson et al.
    # 2003, de Forcrand et al. 1997, from memory): the error falls as phi^4 ~ k^-8 on k^4 lattices, against k^-4
    # for the clover
    for name in ("3loop", "5li", "5loop"):
        d6, d8 = (abs(to.twisted_operator_charge(tw.constant_flux_links((k,) * 4), TWIST, name) - 0.5) for k in (6, 8))
        c8 = abs(to.twisted_operator_charge(tw.constant_flux_links((8,) * 4), TWIST, "clover") - 0.5)
        assert d6 / d8 == pytest.approx((8 / 6) ** 8, rel=0.1)
        assert d8 < 0.1 * c8


# -- staples, force, flow and cooling --------------------------------------------------------------------------


def test_weighted_staples_without_phases_are_the_rectangle_staples(rough):
    op = ops.OPERATOR_PRESETS["symanzik"]
    u = jnp.asarray(rough)
    w = np.array([float(c) / (m * n) ** 2 for m, n, c in op.terms])
    omega = jnp.asarray(staples.staple_weights(op.terms, np.ones(4)))
    want = np.asarray(rectangles.staple(u, 1, op.pairs, w))
    assert np.max(np.abs(np.asarray(staples.weighted_staple(u, 1, op.pairs, omega)) - want)) < 1e-13


def test_phased_plaquette_staples_are_the_twisted_wilson_staples(rough):
    u = jnp.asarray(rough)
    tensor = tw.twist_tensor(TWIST, 2)
    c = (3, 3, 3, 3)
    z = tf._factor_fields(tensor, u.shape[:4], 2, c)
    ph = {k: jnp.asarray(v) for k, v in staples.phase_fields(tensor, u.shape[:4], 2, c, ((1, 1),)).items()}
    omega = jnp.asarray(staples.staple_weights(((1, 1, 1),), np.ones(4)))
    for mu in (0, 2):
        want = np.asarray(tf._twisted_staple(u, mu, z))
        assert np.max(np.abs(np.asarray(staples.weighted_staple(u, mu, ((1, 1),), omega, ph)) - want)) < 1e-13


def test_the_twisted_operator_force_is_minus_the_lie_derivative_of_the_twisted_action(rough):
    # Z = -g0^2 dS (Luescher, JHEP 08 (2010) 071, section 2, from memory): d/ds S(exp(s X) U) = 2 tr(X Z), against a
    # central difference with scipy's expm on a link whose 1x2 loops hold the corner plaquette of plane 12
    op = ops.OPERATOR_PRESETS["symanzik"]
    tensor = tw.twist_tensor(TWIST, 2)
    c = (3, 3, 3, 3)
    ph = staples.phase_fields(tensor, (4, 4, 4, 4), 2, c, op.pairs)
    omega = staples.staple_weights(op.terms, np.ones(4))
    z = np.asarray(loop_force(rough, op.pairs, omega, ph))
    rng = np.random.default_rng(2)
    x = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = 0.5 * (x - x.conj().T)
    x = x - np.trace(x) / 2 * np.eye(2)
    site, mu = (2, 3, 1, 0), 0

    def s(t):
        v = rough.copy()
        v[site + (mu,)] = sla.expm(t * x) @ v[site + (mu,)]
        return to.twisted_operator_action(v, TWIST, op)

    h = 1e-4
    fd = (s(h) - s(-h)) / (2 * h)
    assert fd == pytest.approx(2.0 * np.real(np.trace(x @ z[site + (mu,)])), rel=1e-6, abs=1e-9)


@pytest.mark.long
def test_the_twisted_flow_with_the_wilson_preset_is_the_twisted_wilson_flow():
    u = noisy_links(tw.constant_flux_links((4, 2, 2, 4)), 0.4, seed=1)
    v1, r1 = tf.twisted_flow(u, TWIST, 0.1, 0.05)
    v2, r2 = tf.twisted_flow(u, TWIST, 0.1, 0.05, action="wilson")
    assert np.max(np.abs(v1 - v2)) < 1e-13
    np.testing.assert_allclose(r2.wilson_action, r1.wilson_action, rtol=1e-12)
    assert r2.operator == "wilson" and r1.operator == ""


@pytest.mark.long
def test_the_twisted_flow_in_physical_time_has_the_bits_of_lattice_units():
    u = noisy_links(tw.constant_flux_links((4, 2, 2, 4)), 0.4, seed=1)
    v1, r1 = tf.twisted_flow(u, TWIST, 0.025, 0.0125, spacing=0.5)
    v2, r2 = tf.twisted_flow(u, TWIST, 0.1, 0.05)
    assert np.array_equal(v1, v2) and np.array_equal(r1.time, 0.25 * r2.time)


@pytest.mark.long
def test_an_anisotropic_twisted_flow_lowers_its_action():
    u = noisy_links(tw.constant_flux_links((4, 2, 2, 4)), 0.4, seed=1)
    _, rec = tf.twisted_flow(u, TWIST, 0.06, 0.02, spacing=(1.0, 1.0, 1.0, 0.5))
    assert np.all(np.diff(rec.action) < 0) and np.array_equal(rec.action, rec.wilson_action)


@pytest.mark.long
def test_twisted_symanzik_flow_lowers_its_action():
    u = noisy_links(tw.constant_flux_links((4, 2, 2, 4)), 0.4, seed=1)
    _, rec = tf.twisted_flow(u, TWIST, 0.1, 0.02, action="symanzik")
    assert np.all(np.diff(rec.action) < 0)


@pytest.mark.long
def test_twisted_symanzik_cooling_of_a_rough_start_ends_near_the_constant_flux():
    # L1 L2 = L3 L4: the constant flux is the self-dual minimum of the twisted action, S = 4 pi^2 ('t Hooft 1981,
    # from memory); its Symanzik action on this lattice is constant_flux_action (40.16 on 4^4)
    u = noisy_links(tw.constant_flux_links((4, 4, 4, 4)), 0.4, seed=1)
    _, rec = tf.twisted_cool(u, TWIST, 20, action="symanzik", every=5)
    assert np.all(np.diff(rec.action) <= 0)
    target = constant_flux_action(ops.OPERATOR_PRESETS["symanzik"], (4, 4, 4, 4))
    assert rec.action[-1] == pytest.approx(target, rel=0.02)
    assert rec.clover_charge[-1] == pytest.approx(0.5, abs=0.02)


@pytest.mark.long
def test_cooling_an_improved_action_on_an_asymmetric_torus_finds_a_fractional_instanton():
    # as tests/test_twist.py's Wilson-cooling check (L1 L2 = 16 != L3 L4 = 64: the constant flux is not self-dual,
    # S = 2 pi^2 (4 + 1/4); van Baal, Commun. Math. Phys. 85 (1982) 529, from memory), with the five-loop improved
    # action, whose a^2 and a^4 terms vanish, so the lump is not pushed to shrink and stays near the continuum
    # S = 4 pi^2, Q = 1/2.  Measured after 300 sweeps (stable from sweep 150 on): S_5li / 4 pi^2 = 1.0005,
    # S_W / 4 pi^2 = 0.962; Q_5li = 0.498, Q_5loop = 0.4997, Q_3loop = 0.501, Q_clover = 0.428; peak q 14 times
    # the mean
    shape = (4, 4, 8, 8)
    u = noisy_links(tw.constant_flux_links(shape), 0.1, seed=0)
    cooled, rec = tf.twisted_cool(u, TWIST, 300, action="5li", every=50)
    assert rec.action[0] > 1.9 * 4 * np.pi**2
    assert np.all(np.diff(rec.action) <= 0)
    assert rec.action[-1] / (4 * np.pi**2) == pytest.approx(1.0, abs=0.005)
    assert to.twisted_operator_charge(cooled, TWIST, "5li") == pytest.approx(0.5, abs=0.01)
    q = to.twisted_operator_charge_density(cooled, TWIST, "5li")
    assert q.max() > 10 * q.mean()


# -- bad input -----------------------------------------------------------------------------------------------


def test_twisted_operators_refuse_loops_longer_than_the_lattice():
    with pytest.raises(ValueError, match="side 3, longer than the smallest lattice extent 2"):
        to.twisted_operator_action(tw.constant_flux_links((2, 2, 2, 2)), TWIST, "5li")


def test_twisted_operators_name_a_bad_twist_entry(rough):
    with pytest.raises(ValueError, match=r"n_12 .* out of range for SU\(2\)"):
        to.twisted_operator_charge(rough, {(1, 2): 2}, "clover")


def test_twisted_operators_refuse_a_bad_spacing(rough):
    with pytest.raises(ValueError, match="spacing must be one number or four"):
        to.twisted_operator_action(rough, TWIST, "wilson", spacing=(1.0, 1.0))
    with pytest.raises(ValueError, match=r"spacing\[2\]"):
        to.twisted_operator_charge(rough, TWIST, "clover", spacing=(1.0, 1.0, float("nan"), 1.0))


def test_twisted_cooling_with_rectangles_needs_extents_divisible_by_four():
    with pytest.raises(ValueError, match="divisible by 4; found shape"):
        tf.twisted_cool(tw.constant_flux_links((4, 2, 2, 4)), TWIST, 1, action="symanzik")
