"""Specification of the geometry of the instanton moduli space: bosonic zero modes, the L^2 metric by two
routes, its volume form and its geodesics.

External values (each named again beside its check):
* k = 1 SU(2): g = 8 pi^2 (dX^2 + 2 |dy|^2), y = Lambda, |y| = rho (Dorey, Hollowood, Khoze, Mattis,
  Phys. Rep. 371 (2002) 231, section 2; from memory);
* the dimension of the moduli space, 8k for SU(2) and 4kN for SU(N) (Atiyah, Hitchin, Drinfeld, Manin,
  Phys. Lett. A 65 (1978) 185; common practice);
* the one-instanton SU(2) measure 2^10 pi^6 g^-8 rho^3 drho d^4x (Bernard, Phys. Rev. D 19 (1979) 3013;
  from memory).
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np
import pytest

from instantonkit.adhm import metric as mm
from instantonkit.adhm import tangent as tg
from instantonkit.adhm.moduli import bpst, random_adhm
from instantonkit.adhm.quaternionic import ADHMData
from instantonkit.adhm.tangent import global_gauge_directions
from instantonkit.adhm.unitary_moduli import random_unitary_adhm
from instantonkit.core import quaternion as qt
from instantonkit.core.conventions import LEVI_CIVITA, point_to_quaternion

EIGHT_PI2 = 8.0 * np.pi**2
X0 = np.array([0.31, -0.22, 0.47, 0.13])


@jax.jit
def _covariant(data, t, x):
    modes = lambda y: tg.modes_at(data, t, y)  # noqa: E731
    dm = modes(x)
    a = data.potential(x)
    d = jnp.moveaxis(jax.jacfwd(modes)(x), -1, 1)
    return d + jnp.einsum("uab,mvbc->muvac", a, dm) - jnp.einsum("mvab,ubc->muvac", dm, a)


def _covariant_derivatives(data, t, x):
    """(m, mu, nu, N, N): D_mu delta A_nu = d_mu delta A_nu + [A_mu, delta A_nu] by jax.jacfwd."""
    return np.asarray(_covariant(data, jnp.asarray(t), jnp.asarray(x)))


@functools.cache
def _basis_derivatives(kind):
    data = random_adhm(2, seed=1) if kind == "su2_k2" else random_unitary_adhm(1, 3, seed=1)
    return _covariant_derivatives(data, mm.tangent_basis(data), X0)


# -- zero modes ---------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["su2_k2", "su3_k1"])
def test_zero_modes_are_in_background_gauge(kind):
    # D_mu delta A_mu = 0 for horizontal, constraint-preserving variations (DHKM 2002, from memory)
    dd = _basis_derivatives(kind)
    assert np.max(np.abs(np.einsum("muuab->mab", dd))) < 1e-10


@pytest.mark.parametrize("kind", ["su2_k2", "su3_k1"])
def test_zero_modes_solve_linearised_self_duality(kind):
    # delta F = D_mu dA_nu - D_nu dA_mu is self-dual (conventions: instantons are self-dual), so its
    # anti-self-dual part delta F - *delta F vanishes
    dd = _basis_derivatives(kind)
    df = dd - np.swapaxes(dd, 1, 2)
    dual = 0.5 * np.einsum("uvrs,mrsab->muvab", LEVI_CIVITA, df)
    assert np.max(np.abs(df)) > 1e-3  # not trivially zero
    assert np.max(np.abs(df - dual)) < 1e-10


def test_anti_instanton_zero_modes_are_anti_self_dual_in_background_gauge():
    # chirality -1 (conjugate data): the linearised equation is anti-self-duality, delta F + *delta F = 0
    data = random_adhm(2, seed=1).conjugate()
    dd = _covariant_derivatives(data, mm.tangent_basis(data), X0)
    df = dd - np.swapaxes(dd, 1, 2)
    dual = 0.5 * np.einsum("uvrs,mrsab->muvab", LEVI_CIVITA, df)
    assert np.max(np.abs(np.einsum("muuab->mab", dd))) < 1e-10
    assert np.max(np.abs(df + dual)) < 1e-10 < np.max(np.abs(df))


def test_unprojected_variations_leave_background_gauge():
    # the O(k) direction matters: a constraint-preserving but not horizontal variation violates D.dA = 0
    data = random_adhm(2, seed=1)
    t = mm.tangent_basis(data)
    t[0] += np.asarray(tg.orbit_directions(data))[0]
    dd = _covariant_derivatives(data, t, X0)
    assert np.max(np.abs(np.einsum("muuab->mab", dd))) > 1e-4


def test_translation_zero_mode_is_the_field_strength():
    # independent route: B -> B + p(s) 1 gives A(x - s), whose background-gauge form is
    # -d_mu A_nu + D_nu A_mu = -F_mu nu (common practice)
    data = random_adhm(2, seed=1)
    mu = 2
    shift = np.zeros(4)
    shift[mu] = 1.0
    db = np.zeros((2, 2, 4))
    db[0, 0] = db[1, 1] = point_to_quaternion(shift)
    t = np.concatenate([np.zeros(8), db.ravel()])[None]
    pts = X0 + np.random.default_rng(0).normal(size=(5, 4))
    modes = tg.bosonic_zero_modes(data, t, pts)[:, 0]  # (5, 4, 2, 2)
    f = np.asarray(jax.jit(jax.vmap(data.field_strength))(jnp.asarray(pts)))
    assert np.max(np.abs(modes + f[:, mu])) < 1e-12


def test_zero_modes_on_a_point_set_have_the_leading_shape_and_are_antihermitian():
    data = random_adhm(2, seed=1)
    t = mm.tangent_basis(data)[:1]
    out = tg.bosonic_zero_modes(data, t, np.zeros((2, 3, 4)) + X0)
    assert out.shape == (2, 3, 1, 4, 2, 2)
    assert np.max(np.abs(out + np.conj(np.swapaxes(out, -1, -2)))) < 1e-14


# -- the metric ---------------------------------------------------------------------------------------

K1_RHO = 1.3
K1 = bpst((0.1, 0.2, 0.3, 0.4), K1_RHO)
# g = 8 pi^2 (dX^2 + 2 |dy|^2) (DHKM 2002, from memory) in (X, rho, theta): |dy|^2 = drho^2 + rho^2 |dtheta|^2 at theta = 0
K1_EXPECTED = EIGHT_PI2 * np.diag([1, 1, 1, 1, 2, 2 * K1_RHO**2, 2 * K1_RHO**2, 2 * K1_RHO**2])


def test_k1_algebraic_metric_is_the_flat_cone_metric():
    g = mm.moduli_metric(K1).metric
    assert np.max(np.abs(g - K1_EXPECTED)) < 1e-10


def test_k1_integral_metric_is_the_flat_cone_metric():
    res = mm.moduli_metric(K1, route="integral", rtol=1e-8)
    assert res.error < 1e-6 * EIGHT_PI2
    assert np.max(np.abs(res.metric - K1_EXPECTED)) < 1e-6 * EIGHT_PI2


@pytest.mark.long
def test_k2_routes_agree_to_the_integral_error():
    data = random_adhm(2, seed=3)
    alg = mm.moduli_metric(data).metric
    res = mm.moduli_metric(data, route="integral", rtol=1e-8)
    assert np.max(np.abs(res.metric - alg)) <= res.error
    assert np.max(np.abs(res.metric - alg)) < 1e-8 * np.max(np.abs(alg)) * 10


@pytest.mark.long
def test_k3_routes_agree_to_the_integral_error():
    data = random_adhm(3, seed=2)
    alg = mm.moduli_metric(data).metric
    res = mm.moduli_metric(data, route="integral", rtol=1e-7)
    assert np.max(np.abs(res.metric - alg)) <= res.error


@pytest.mark.long
def test_su3_routes_agree_to_the_integral_error():
    data = random_unitary_adhm(1, 3, seed=4)
    alg = mm.moduli_metric(data).metric
    res = mm.moduli_metric(data, route="integral", rtol=1e-7)
    assert np.max(np.abs(res.metric - alg)) <= res.error


@pytest.mark.parametrize(
    ("k", "rank", "unitary"), [(1, 1, False), (2, 1, False), (3, 1, False), (2, 2, False), (2, 3, True)]
)
def test_tangent_space_has_the_moduli_dimension(k, rank, unitary):
    # 8k for SU(2), 4k(n + 1) for Sp(n), 4kN for SU(N) (AHDM 1978; common practice)
    data = random_unitary_adhm(k, rank, seed=5) if unitary else random_adhm(k, rank, seed=5)
    want = 4 * k * rank if unitary else 4 * k * (rank + 1)
    assert mm.tangent_basis(data).shape[0] == want


def test_k2_metric_is_positive_definite_of_rank_8k():
    g = mm.moduli_metric(random_adhm(2, seed=6)).metric
    ev = np.linalg.eigvalsh(g)
    assert g.shape == (16, 16)
    assert ev[0] > 1e-6 * ev[-1]


def test_removing_the_global_gauge_orbit_leaves_rank_8k_minus_3():
    g = mm.moduli_metric(random_adhm(2, seed=6), global_gauge="remove").metric
    ev = np.linalg.eigvalsh(g)
    assert int(np.sum(ev > 1e-8 * ev[-1])) == 13


@pytest.mark.parametrize(
    ("data", "count"), [(K1, 3), (random_adhm(1, 2, seed=0), 10), (random_unitary_adhm(2, 3, seed=0), 8)]
)
def test_global_gauge_orbit_has_the_dimension_of_the_group(data, count):
    # dim SU(2) = 3, dim Sp(2) = 10, dim SU(3) = 8 (common practice)
    assert np.asarray(global_gauge_directions(data)).shape[0] == count


def test_global_gauge_rotation_of_one_instanton_has_norm_16_pi2_rho2():
    # d Lambda = u Lambda for a unit imaginary u: |dy|^2 = rho^2, so g = 8 pi^2 * 2 rho^2 (DHKM 2002, from memory)
    t = np.asarray(global_gauge_directions(K1))
    g = mm.moduli_metric(K1).metric
    res = mm.moduli_metric(K1)
    basis = res.tangents
    coef = np.linalg.lstsq(basis.T, t.T, rcond=None)[0]  # the gauge directions in the chart's coordinates
    norms = np.einsum("ai,ab,bi->i", coef, g, coef)
    assert np.max(np.abs(norms - 16 * np.pi**2 * K1_RHO**2)) < 1e-9 * norms[0]


def _rotated_chart(chart, orth, q):
    """The standard chart followed by an O(k) rotation and a global gauge rotation of the data (jax)."""

    def fn(p):
        d = chart(p)
        lam = qt.qmat_mul(jnp.asarray(q)[None, None], jnp.einsum("nja,jk->nka", d.lam, orth))
        b = jnp.einsum("ji,jla,lk->ika", orth, d.B, orth)
        return ADHMData(lam, b)

    return fn


def test_metric_is_invariant_under_ok_and_global_gauge_rotations():
    data = random_adhm(2, seed=7)
    chart = mm.StandardChart.of(data)
    c, s = np.cos(0.7), np.sin(0.7)
    orth = np.array([[c, -s], [s, c]])
    q = np.array([0.5, 0.5, -0.5, 0.5])
    g0 = mm.moduli_metric(chart).metric
    g1 = mm.moduli_metric(_rotated_chart(chart, orth, q), chart.params).metric
    assert np.max(np.abs(g1 - g0)) < 1e-9 * np.max(np.abs(g0))


def test_separated_pair_approaches_the_sum_of_two_single_metrics():
    # far apart, the metric becomes block diagonal with two k = 1 blocks (the pair's corrections fall)
    def deviation(distance):
        centres = np.array([[0, 0, 0, 0], [distance, 0, 0, 0.0]])
        chart = mm.StandardChart.at(centres, [1.0, 0.8], [[1, 0, 0, 0], [0, 0.6, 0.8, 0]])
        g = mm.moduli_metric(chart).metric
        singles = [
            mm.moduli_metric(mm.StandardChart.at(c, r, o)).metric
            for c, r, o in zip(centres, [1.0, 0.8], [[1, 0, 0, 0], [0, 0.6, 0.8, 0]])
        ]
        order = np.r_[0:4, 8, 10:13, 4:8, 9, 13:16]  # (X1, rho1, theta1, X2, rho2, theta2)
        block = np.zeros((16, 16))
        block[:8, :8], block[8:, 8:] = singles
        return np.max(np.abs(g[np.ix_(order, order)] - block)) / EIGHT_PI2

    near, far = deviation(6.0), deviation(24.0)
    assert far < near / 10  # the corrections fall like (rho / distance)^2: 1/16 here


# -- the measure --------------------------------------------------------------------------------------


@pytest.mark.parametrize("rho", [0.7, 1.9])
def test_k1_measure_has_the_collective_coordinate_constant(rho):
    # sqrt(det g) = (8 pi^2)^2 (16 pi^2)^2 rho^3 = 2^14 pi^8 rho^3 in (X, rho, theta) at theta = 0.
    # Bernard, Phys. Rev. D 19 (1979) 3013 (from memory): the zero-mode Jacobian of one SU(2) instanton
    # gives the measure 2^10 pi^6 g^-8 rho^3 drho d^4x.  Derivation of the comparison: with coupling g
    # the metric is g_ij / g^2 (S = 8 pi^2 / g^2), each of the 8 modes carries 1 / sqrt(2 pi), and the
    # orientations fill S^3 / Z_2 (Lambda ~ -Lambda, O(1)) of volume pi^2 in theta at the identity, so
    # 2^14 pi^8 rho^3 * g^-8 * (2 pi)^-4 * pi^2 = 2^10 pi^6 g^-8 rho^3.
    measure = mm.moduli_measure(bpst((0.0, 0.0, 0.0, 0.0), rho))
    assert measure / rho**3 == pytest.approx(2.0**14 * np.pi**8, rel=1e-12)
    assert measure / rho**3 * (2 * np.pi) ** -4 * np.pi**2 == pytest.approx(2.0**10 * np.pi**6, rel=1e-12)


def test_metric_dimension_of_the_measure_is_8k():
    res = mm.moduli_metric(random_adhm(2, seed=6))
    assert res.metric.shape == (16, 16) and res.measure > 0


# -- geodesics ----------------------------------------------------------------------------------------


def test_k1_size_geodesic_is_a_straight_line():
    # the cone metric 8 pi^2 (dX^2 + 2 |dy|^2) is flat in y: a radial geodesic has rho(t) = rho0 + v t
    chart = mm.StandardChart.at(np.zeros(4), 1.0)
    v = np.zeros(8)
    v[4], v[0] = 0.3, 0.2
    path = mm.moduli_geodesic(chart, v, t_final=1.0, samples=5)
    assert np.max(np.abs(path.params[:, 4] - (1.0 + 0.3 * path.times))) < 1e-8
    assert np.max(np.abs(path.params[:, 0] - 0.2 * path.times)) < 1e-8
    assert np.ptp(path.speed2) < 1e-8 * path.speed2[0]


# -- bad input ----------------------------------------------------------------------------------------


def test_chart_leaving_the_constraint_surface_is_refused():
    data = random_adhm(2, seed=9)
    b_fixed = jnp.asarray(data.B)

    def off_surface(p):  # moves Lambda but keeps B: the constraint breaks to first order
        return ADHMData(jnp.asarray(data.lam) * (1.0 + p[0] * jnp.array([1.0, 0.3])[None, :, None]), b_fixed)

    with pytest.raises(ValueError, match="leaves the ADHM constraint surface"):
        mm.moduli_metric(off_surface, np.zeros(1))


def test_chart_off_the_constraint_surface_at_its_point_is_refused():
    def off(p):  # B = p(a) with a Lambda whose columns are not orthogonal in the quaternionic sense
        lam = jnp.array([[[1.0, 0.0, 0.0, 0.0], [0.0, 1.0, 0.0, 0.0]]]) * p[0]
        return ADHMData(lam, jnp.array([[[0.0, 0, 0, 0], [0, 0, 0, 0]], [[0, 0, 0, 0], [3.0, 0, 0, 0]]]))

    with pytest.raises(ValueError, match="chart.params. gave no valid ADHM data: ADHM constraint violated"):
        mm.moduli_metric(off, np.array([1.0]))


def test_zero_size_data_is_refused():
    lam = np.zeros((1, 2, 4))
    lam[0, 0, 0] = 1.0
    data = ADHMData(lam, np.array([[[0, 0, 0, 0], [0, 0, 0, 0]], [[0, 0, 0, 0], [2.0, 0, 0, 0]]]))
    with pytest.raises(ValueError, match="instanton 1 has zero size"):
        mm.moduli_metric(data)


def test_point_like_instanton_in_a_rotated_frame_is_refused():
    # Lambda = [u, u], B = p(a) 1: an O(2) rotation by 45 degrees gives the columns [sqrt 2 u, 0], a zero size
    lam = np.zeros((1, 2, 4))
    lam[0, :, 0] = 1.0
    b = np.zeros((2, 2, 4))
    b[0, 0] = b[1, 1] = point_to_quaternion(np.array([0.5, 0.0, 0.0, 0.0]))
    with pytest.raises(ValueError, match="point-like"):
        mm.moduli_metric(ADHMData(lam, b))


def test_coincident_centres_are_refused():
    with pytest.raises(ValueError, match="centers"):
        mm.StandardChart.at(np.zeros((2, 4)), 1.0)


def test_bad_route_is_refused():
    with pytest.raises(ValueError, match="route"):
        mm.moduli_metric(K1, route="numerical")


def test_tangents_of_the_wrong_shape_are_refused():
    with pytest.raises(ValueError, match="tangents must have shape"):
        tg.bosonic_zero_modes(K1, np.zeros((2, 5)), X0)


def test_zero_modes_at_a_singular_point_of_the_gauge_name_the_point():
    # the singular gauge of one instanton is singular at its centre (common practice)
    t = mm.tangent_basis(K1)[:1]
    with pytest.raises(ValueError, match="not finite at point 1"):
        tg.bosonic_zero_modes(K1, t, np.stack([X0, [0.1, 0.2, 0.3, 0.4]]))
