"""Loop operators, flow and cooling on anisotropic lattices (spacing= of instantonkit.lattice.operators,
instantonkit.lattice.smoothing, instantonkit.lattice.stability)."""

import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg as sla

import instantonkit as ik
from instantonkit.engine.fields import evaluate
from instantonkit.lattice import operators as ops
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice import stability as st
from instantonkit.lattice import staples
from instantonkit.lattice import starts as lat
from instantonkit.lattice.forces import loop_force
from instantonkit.lattice.rectangles import ORDERED_PLANES

XI2 = (1.0, 1.0, 1.0, 0.5)  # a_t = a_s / 2


def smooth_links(shape, a, amp=0.4):
    """Links exp(a_mu A_mu(x)) of a smooth periodic SU(2) potential: A_mu = amp sum_k cos(2 pi x_k / l_k + phase)
    times a generator that depends on (mu, k) (non-abelian), l_k = L_k a_k the box."""
    a = np.asarray(a, float)
    x = np.moveaxis(np.indices(shape), 0, -1) * a
    gens = -0.5j * np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])
    out = np.empty(tuple(shape) + (4, 2, 2), dtype=np.complex128)
    for mu in range(4):
        pot = 0.0
        for k in range(4):
            wave = amp * np.cos(2 * np.pi * x[..., k] / (shape[k] * a[k]) + 0.7 * mu + 1.3 * k)
            pot = pot + wave[..., None, None] * gens[(mu + k) % 3]
        out[..., mu, :, :] = np.asarray(sm._expm_su(jnp.asarray(a[mu] * pot)))
    return out


# -- operators on a BPST start with a_t = a_s / 2 ----------------------------------------------------------


@pytest.fixture(scope="module")
def stretched():
    """An open regular-gauge BPST start (rho = 1) at a_s = 0.5, a_t = 0.25 (xi = 2), 10^3 x 20 sites (+-2.25 rho)."""
    a = np.array([0.5, 0.5, 0.5, 0.25])
    shape = (10, 10, 10, 20)
    origin = -a * (np.array(shape) - 1) / 2
    field = ik.bpst(size=1.0).with_gauge("regular")
    return field, lat.lattice_links(field, shape, tuple(a), origin=origin, boundary="open"), a, origin


def sampled_action(field, op, shape, a, origin):
    """The continuum action the loops stand for, sampled at their centres: sum_i c_i sum_{ordered planes} V
    sum_corners s(x + e a / 2) / 12 (the midpoint rule of the scan's 'sampled' reference, instantonkit.lattice.scan,
    with a per-direction spacing; each plane's share of an O(4)-symmetric density is s / 6)."""
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in shape], indexing="ij"), axis=-1).reshape(-1, 4)
    total = 0.0
    for m, n, c in op.terms:
        for mu, nu in ORDERED_PLANES:
            e = np.zeros(4)
            e[mu], e[nu] = m, n
            keep = np.all(idx <= np.asarray(shape) - 1 - e, axis=1)
            pts = origin + a * (idx[keep] + e / 2)
            total += float(c) / 12 * np.prod(a) * float(np.sum(evaluate(field, pts, "action_density")))
    return total


def _deviation(stretched, name):
    field, u, a, origin = stretched
    op = ops.OPERATOR_PRESETS[name]
    val = ops.operator_action(u, op, spacing=tuple(a), boundary="open")
    return val / sampled_action(field, op, u.shape[:4], a, origin) - 1.0


def test_anisotropic_wilson_action_has_the_mean_square_spacing_as_its_a2_term(stretched):
    # S_W / S = 1 - (1/5) (a / rho)^2 for a BPST instanton (Garcia Perez, Gonzalez-Arroyo, Snippe, van Baal,
    # Nucl. Phys. B 413 (1994) 535, from memory).  A plaquette of plane (mu, nu) errs by (a_mu^2 D_mu^2 + a_nu^2
    # D_nu^2) F / 24 (its flux is the mean of F over the cell; common practice), every plane carries the same
    # share of the O(4)-symmetric density, so (a / rho)^2 -> the mean of a_d^2 over the four directions
    # (derivation); measured -0.0422 against -0.0406, the rest a^4
    dev = _deviation(stretched, "wilson")
    a = stretched[2]
    assert dev == pytest.approx(-0.2 * np.mean(a**2), rel=0.1)


def test_anisotropic_symanzik_action_is_closer_to_the_continuum_than_wilson(stretched):
    # sum c (m^2 + n^2) = 0 cancels the a_mu^2 and a_nu^2 terms separately (both orientations of each rectangle
    # carry the same coefficient; module docstring of instantonkit.lattice.operators), so at xi = 2 only a^4 is
    # left (Luescher and Weisz, Commun. Math. Phys. 97 (1985) 59, for the isotropic case, from memory); measured
    # -0.0047 against Wilson's -0.0422
    assert abs(_deviation(stretched, "symanzik")) < 0.2 * abs(_deviation(stretched, "wilson"))


@pytest.mark.long
def test_anisotropic_five_loop_action_has_neither_a2_nor_a4_term(stretched):
    # de Forcrand, Garcia Perez, Stamatescu, Nucl. Phys. B 499 (1997) 409 (from memory): no a^2 and a^4 terms;
    # measured -3.9e-4 at a_s / rho = 0.5, a_t / rho = 0.25
    assert abs(_deviation(stretched, "5li")) < 1e-3


# -- the flow in physical units ------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def smooth():
    return smooth_links((4, 4, 4, 4), XI2)


def test_one_spacing_flows_in_physical_time_with_the_bits_of_lattice_units(smooth):
    # t and step in units of length^2: spacing a runs the lattice-unit flow to t / a^2 (0.02 / 0.25 = 0.08 exactly)
    u1, r1 = sm.gradient_flow(smooth, 0.04, 0.02, spacing=0.5)
    u2, r2 = sm.gradient_flow(smooth, 0.16, 0.08)
    assert np.array_equal(u1, u2)
    assert np.array_equal(r1.time, 0.25 * r2.time)


def test_four_equal_spacings_flow_bit_for_bit_as_one_number(smooth):
    u1, r1 = sm.gradient_flow(smooth, 0.04, 0.02, spacing=0.5)
    u2, r2 = sm.gradient_flow(smooth, 0.04, 0.02, spacing=(0.5, 0.5, 0.5, 0.5))
    assert np.array_equal(u1, u2) and np.array_equal(r1.action, r2.action)


def test_anisotropic_flow_of_a_smooth_start_lowers_the_action(smooth):
    _, rec = sm.gradient_flow(smooth, 0.06, 0.02, spacing=XI2)
    assert np.all(np.diff(rec.action) < 0)
    assert np.all(np.isnan(rec.size))


def test_anisotropic_force_is_the_flow_of_the_continuum_normalised_action(smooth):
    # dV_mu / dt = -(a_mu^2 / V) (dS)_mu V (gradient_flow's docstring), so d/ds S(exp(s X) U_mu) = (V / a_mu^2)
    # 2 tr(X Z) for the Lie derivative (Luescher, JHEP 08 (2010) 071, section 2, from memory, at a = 1); a central
    # difference with scipy's expm for the Symanzik action at spacings (1, 0.8, 1.2, 0.5)
    a = np.array([1.0, 0.8, 1.2, 0.5])
    op = ops.OPERATOR_PRESETS["symanzik"]
    u = jnp.asarray(smooth)
    omega = jnp.asarray(staples.staple_weights(op.terms, a))
    rng = np.random.default_rng(3)
    x = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = 0.5 * (x - x.conj().T)
    x = x - np.trace(x) / 2 * np.eye(2)
    for site, mu in (((1, 2, 3, 0), 3),):
        z = -np.asarray(
            sm._traceless_antihermitian(u[site + (mu,)] @ staples.weighted_staple(u, mu, op.pairs, omega)[site])
        )

        def s(t, site=site, mu=mu):
            v = smooth.copy()
            v[site + (mu,)] = sla.expm(t * x) @ v[site + (mu,)]
            return ops.operator_action(v, op, spacing=tuple(a))

        h = 1e-4
        fd = (s(h) - s(-h)) / (2 * h)
        want = np.prod(a) / a[mu] ** 2 * 2.0 * np.real(np.trace(x @ z))
        assert fd == pytest.approx(want, rel=1e-6, abs=1e-9)


def test_anisotropic_wilson_flow_frequency_is_four_times_the_sum_of_inverse_squares():
    # the Wilson kernel M = delta sum k^2 - k k (k_mu = 2 sin(p_mu / 2) / a_mu) has the transverse eigenvalue
    # sum_mu k_mu^2, largest at p = (pi, ...): 4 sum 1 / a_mu^2 (16 / a^2 isotropic; derivation, common practice
    # for a = 1)
    a = (1.0, 1.0, 1.0, 0.5)
    assert st.operator_flow_frequency("wilson", spacing=a) == pytest.approx(4 * (3 + 4), rel=1e-12)
    assert st.flow_step_bound(spacing=0.5) == pytest.approx(0.25 * st.flow_step_bound(), rel=1e-12)


@pytest.mark.long
def test_anisotropic_symanzik_flow_frequency_matches_power_iteration_of_its_force():
    # as tests/test_operators.py's isotropic check: at p = (pi, pi, pi, pi) the 1x2 loops' flux vanishes and the
    # plaquette weight c0 = 5/3 is left, so lambda_max = (5/3) 4 sum 1 / a_mu^2 = 140/3 at (1, 1, 1, 0.5)
    op = ops.OPERATOR_PRESETS["symanzik"]
    assert st.operator_flow_frequency(op, spacing=XI2) == pytest.approx(140.0 / 3.0, rel=1e-12)
    omega = jnp.asarray(staples.staple_weights(op.terms, np.asarray(XI2)))
    rng = np.random.default_rng(0)
    x = np.asarray(sm._traceless_antihermitian(rng.normal(size=(4,) * 4 + (4, 2, 2)) + 0j))
    lam = 0.0
    for _ in range(40):
        y = -np.asarray(loop_force(sm._expm_su(1e-7 * x), op.pairs, omega)) / 1e-7
        lam = float(np.linalg.norm(y) / np.linalg.norm(x))
        x = y / np.linalg.norm(y)
    assert lam == pytest.approx(140.0 / 3.0, rel=1e-3)


@pytest.mark.long
def test_anisotropic_symanzik_flow_and_cooling_lower_their_action(smooth):
    _, rec = sm.gradient_flow(smooth, 0.06, 0.01, action="symanzik", spacing=XI2)
    assert np.all(np.diff(rec.action) < 0)
    _, rec = sm.cool(smooth, 3, action="symanzik", spacing=XI2)
    assert np.all(np.diff(rec.action) < 0)


@pytest.mark.long
def test_anisotropic_cooling_lowers_the_wilson_action(smooth):
    _, rec = sm.cool(smooth, 3, spacing=XI2)
    assert np.all(np.diff(rec.action) < 0) and np.all(rec.action == rec.wilson_action)


def test_anisotropic_flow_refuses_a_step_beyond_its_bound(smooth):
    # Wilson at (1, 1, 1, 0.5): lambda_max = 28, bound 2.5127 / 28 = 0.0897 (above)
    with pytest.raises(ValueError, match=r"stability bound 0\.0897"):
        sm.gradient_flow(smooth, 0.2, 0.1, spacing=XI2)


# -- bad spacings ----------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "spacing,err,match",
    [
        ((1.0, 1.0, 1.0), ValueError, r"spacing must be one number or four .* found 3 values"),
        ((1.0, 0.0, 1.0, 1.0), ValueError, r"spacing\[1\] must be > 0; found 0\.0"),
        ((1.0, 1.0, float("nan"), 1.0), ValueError, r"spacing\[2\]"),
        (-0.5, ValueError, r"spacing must be > 0; found -0\.5"),
        (True, TypeError, "spacing"),
    ],
)
def test_flow_and_cooling_refuse_a_bad_spacing(smooth, spacing, err, match):
    with pytest.raises(err, match=match):
        sm.gradient_flow(smooth, 0.02, 0.01, spacing=spacing)
    with pytest.raises(err, match=match):
        sm.cool(smooth, 1, spacing=spacing)
    with pytest.raises(err, match=match):
        st.flow_step_bound(spacing=spacing)


@pytest.mark.parametrize(
    "spacing,match",
    [
        ((1.0, 1.0, 1.0), r"spacing must have shape \(4,\); found \(3,\)"),
        ((1.0, np.nan, 1.0, 1.0), "spacing must be finite"),
    ],
)
def test_operator_charge_and_field_strength_refuse_a_bad_spacing(smooth, spacing, match):
    with pytest.raises(ValueError, match=match):
        ops.operator_charge(smooth, "clover", spacing=spacing)
    with pytest.raises(ValueError, match=match):
        ops.operator_field_strength(smooth, "5loop", spacing=spacing)
