"""Specification of ADHM data as fields: BPST values, multi-instanton self-duality, Osborn's formula,
charge signs and the invariances of the densities.

All point sets have N_POINTS points so that each compiled kernel is reused across tests.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.linalg
import scipy.stats
import sympy as sp
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.adhm import _kxk
from instantonkit.core import quaternion as qt

N_POINTS = 16
PARITY = np.array([-1.0, -1.0, -1.0, 1.0])  # P = diag(-1, -1, -1, 1)
FEW = settings(max_examples=10, deadline=None)

# eps_{mu nu rho sigma} with eps_1234 = +1, built by sympy (independent of conventions.LEVI_CIVITA).
EPS = np.array(
    [[[[float(sp.LeviCivita(a, b, c, d)) for d in range(4)] for c in range(4)] for b in range(4)] for a in range(4)]
)


def s_from_f(f):
    """s = -1/2 sum_{mu nu} tr F_mu nu F_mu nu (conventions module); f: (M, 4, 4, N, N) -> (M,)."""
    return -0.5 * np.real(np.einsum("pmnij,pmnji->p", f, f))


def q_from_f(f):
    """q = -1/(32 pi^2) eps_{mu nu rho sigma} tr F_mu nu F_rho sigma (conventions module) -> (M,)."""
    return -np.real(np.einsum("mnrs,pmnij,prsji->p", EPS, f, f)) / (32.0 * np.pi**2)


def dual_of(f):
    """(*F)_mu nu = 1/2 eps_{mu nu rho sigma} F_rho sigma; f: (M, 4, 4, N, N)."""
    return 0.5 * np.einsum("mnrs,prsij->pmnij", EPS, f)


def invariants(f):
    """Gauge invariants tr(F_mu nu F_rho sigma); f: (M, 4, 4, N, N) -> (M, 4, 4, 4, 4) complex."""
    return np.einsum("pmnij,prsji->pmnrs", f, f)


def rel_err(a, b):
    """max |a - b| / max |b|."""
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b))) / np.max(np.abs(np.asarray(b))))


def points_near(data, seed):
    """N_POINTS points ~ centre + scale * N(0, 1) from the data's integration hint; (N_POINTS, 4)."""
    centre, scale = data.hint()
    return centre + scale * np.random.default_rng(seed).normal(size=(N_POINTS, 4))


# -- BPST through ADHM ---------------------------------------------------------------------------------

BPST_CENTER = np.array([0.3, -0.2, 0.5, 0.1])
BPST_SIZE = 0.8
BPST_ORIENTATION = np.array([0.5, 0.5, -0.5, 0.5])


def bpst_s(x):
    # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4 / (|x - a|^2 + rho^2)^4.
    return 48 * BPST_SIZE**4 / (np.sum((x - BPST_CENTER) ** 2, axis=-1) + BPST_SIZE**2) ** 4


@pytest.fixture(scope="module")
def bpst_points():
    return BPST_CENTER + np.random.default_rng(1).normal(size=(N_POINTS, 4))


GAUGES = ["singular", "regular"]
METHODS = ["auto", "closed", "autodiff"]


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("gauge", GAUGES)
def test_bpst_action_density(gauge, method, bpst_points):
    # Belavin, Polyakov, Schwartz, Tyupkin 1975 (bpst_s above).
    data = ik.bpst(BPST_CENTER, BPST_SIZE, BPST_ORIENTATION).with_gauge(gauge)
    s = ik.action_density(data, bpst_points, method=method)
    np.testing.assert_allclose(s, bpst_s(bpst_points), rtol=1e-12, atol=0)


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("gauge", GAUGES)
def test_bpst_charge_density(gauge, method, bpst_points):
    # Belavin, Polyakov, Schwartz, Tyupkin 1975: self-dual, so q = s / 8 pi^2 with Q = +1.
    data = ik.bpst(BPST_CENTER, BPST_SIZE, BPST_ORIENTATION).with_gauge(gauge)
    q = ik.charge_density(data, bpst_points, method=method)
    np.testing.assert_allclose(q, bpst_s(bpst_points) / (8 * np.pi**2), rtol=1e-12, atol=0)


# -- multi-instantons ----------------------------------------------------------------------------------

CONFIGS = {
    "SU2-k2": dict(k=2, rank=1, seed=11),
    "SU2-k3": dict(k=3, rank=1, seed=12),
    "SU2-k4": dict(k=4, rank=1, seed=13),
    "Sp2-k2": dict(k=2, rank=2, seed=14),
}


@functools.cache
def config(name):
    """Data, points and the fields computed once per configuration (shared by the tests below)."""
    c = CONFIGS[name]
    data = ik.random_adhm(c["k"], c["rank"], seed=c["seed"])
    x = points_near(data, c["seed"])
    return dict(
        data=data,
        x=x,
        f_auto=ik.field_strength(data, x, method="autodiff"),
        f_closed=ik.field_strength(data, x),
        s=ik.action_density(data, x),
    )


@pytest.mark.parametrize("name", CONFIGS)
def test_autodiff_field_is_self_dual(name):
    # ADHM fields are self-dual (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185).
    f = config(name)["f_auto"]
    res = np.sqrt(np.sum(np.abs(f - dual_of(f)) ** 2, axis=(1, 2, 3, 4)) / np.sum(np.abs(f) ** 2, axis=(1, 2, 3, 4)))
    assert np.max(res) <= 1e-10


@pytest.mark.parametrize("name", CONFIGS)
def test_charge_density_is_action_over_8pi2(name):
    # Self-duality gives q = s / 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85; common
    # practice): q from the autodiff F against the closed k x k action density.
    cfg = config(name)
    np.testing.assert_allclose(q_from_f(cfg["f_auto"]), cfg["s"] / (8 * np.pi**2), rtol=1e-10, atol=0)


@pytest.mark.parametrize("name", CONFIGS)
def test_autodiff_matches_closed_field_strength(name):
    # Closed ADHM F = U^dag b sigma f b^dag U (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159
    # (1979) 469, from memory) against jax.jacfwd of A = U^dag dU.
    cfg = config(name)
    assert rel_err(cfg["f_auto"], cfg["f_closed"]) <= 1e-10


@pytest.mark.parametrize("name", CONFIGS)
def test_closed_action_density_matches_autodiff(name):
    # s = -1/2 sum tr F F (conventions) of the autodiff F against the k x k closed formula.
    cfg = config(name)
    np.testing.assert_allclose(cfg["s"], s_from_f(cfg["f_auto"]), rtol=1e-10, atol=0)


def bilaplacian_log_det(data, x):
    """box box log det(Delta^dag Delta) at points x (M, 4) by nested forward-mode jax derivatives."""

    def lap(fn):
        return lambda y: jnp.trace(jax.jacfwd(jax.jacfwd(fn))(y))

    return np.asarray(jax.jit(jax.vmap(lap(lap(data.log_det))))(x))


@pytest.mark.parametrize("name", CONFIGS)
def test_osborn_formula(name):
    # Osborn, Ann. Phys. 135 (1981) 373; Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469
    # (from memory): s = -1/2 box box log det(Delta^dag Delta).
    cfg = config(name)
    np.testing.assert_allclose(-0.5 * bilaplacian_log_det(cfg["data"], cfg["x"]), cfg["s"], rtol=1e-9, atol=0)


def test_self_duality_residual_function_vanishes_for_instantons():
    # Atiyah, Hitchin, Drinfeld, Manin 1978: ADHM fields are self-dual.
    cfg = config("SU2-k3")
    assert np.max(ik.self_duality_residual(cfg["data"], cfg["x"], method="autodiff")) <= 1e-10


def test_self_duality_residual_function_is_two_for_anti_instantons():
    # For F = -*F: |F - *F| = 2 |F| (definition of the residual; conventions module).
    cfg = config("SU2-k3")
    res = ik.self_duality_residual(cfg["data"].conjugate(), cfg["x"], method="closed")
    np.testing.assert_allclose(res, 2.0, rtol=1e-10)


def wide_points(data, seed):
    """N_POINTS points from near the centres out to about five scales (tests of sign everywhere)."""
    centre, scale = data.hint()
    rng = np.random.default_rng(seed)
    return centre + scale * rng.normal(size=(N_POINTS, 4)) * rng.uniform(0.1, 2.5, size=(N_POINTS, 1))


def test_charge_density_positive_for_instantons():
    # Instantons have q = s / 8 pi^2 > 0 (conventions module: Q = +k; Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett.
    # B 59 (1975) 85).
    data = config("SU2-k3")["data"]
    assert np.all(ik.charge_density(data, wide_points(data, 5), method="closed") > 0)


def test_charge_density_negative_for_conjugate():
    # Anti-instantons are anti-self-dual with Q = -k (conventions module), so q < 0 everywhere.
    data = config("SU2-k3")["data"]
    assert np.all(ik.charge_density(data.conjugate(), wide_points(data, 6), method="closed") < 0)


def test_conjugate_is_parity_image():
    # x -> Px maps self-dual to anti-self-dual fields (common practice): s'(x) = s(Px), q'(x) = -q(Px).
    cfg = config("SU2-k3")
    x = cfg["x"]
    q_anti = ik.charge_density(cfg["data"].conjugate(), x * PARITY, method="closed")
    np.testing.assert_allclose(q_anti, -cfg["s"] / (8 * np.pi**2), rtol=1e-10, atol=0)


# -- invariances ---------------------------------------------------------------------------------------


def random_sp(n, generators):
    """exp of an anti-Hermitian quaternionic n x n matrix built from n(2n+1) reals -> Sp(n), (n, n, 4)."""
    g = list(generators)
    x = np.zeros((n, n, 4))
    for i in range(n):
        x[i, i, 1:] = [g.pop() for _ in range(3)]
        for j in range(i + 1, n):
            x[i, j] = [g.pop() for _ in range(4)]
            x[j, i] = -np.asarray(qt.qconj(x[i, j]))
    return np.asarray(qt.complex_to_qmat(scipy.linalg.expm(np.asarray(qt.qmat_to_complex(x)))))


@FEW
@given(seed=st.integers(0, 2**31 - 1))
def test_densities_invariant_under_ok_rotations(seed):
    # O(k) acts trivially on the field (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, from
    # memory); checked on the gauge invariants tr F_mu nu F_rho sigma (which contain s and q).
    cfg = config("SU2-k2")
    orth = scipy.stats.ortho_group.rvs(dim=2, random_state=seed)
    f = ik.field_strength(cfg["data"].rotate_gauge(orth), cfg["x"])
    assert rel_err(invariants(f), invariants(cfg["f_closed"])) <= 1e-10


@FEW
@given(gen=st.lists(st.floats(-3.0, 3.0), min_size=10, max_size=10))
def test_densities_invariant_under_sp_rotations(gen):
    # Lambda -> Q Lambda is a gauge transformation (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469,
    # from memory): invariants unchanged.
    cfg = config("Sp2-k2")
    f = ik.field_strength(cfg["data"].rotate_sp(random_sp(2, gen)), cfg["x"])
    assert rel_err(invariants(f), invariants(cfg["f_closed"])) <= 1e-10


@FEW
@given(shift=st.lists(st.floats(-3.0, 3.0), min_size=4, max_size=4))
def test_translation_covariance(shift):
    # Translation moves the field (common practice): s'(x) = s(x - shift).
    cfg = config("SU2-k2")
    shift = np.asarray(shift)
    s = ik.action_density(cfg["data"].translate(shift), cfg["x"] + shift)
    np.testing.assert_allclose(s, cfg["s"], rtol=1e-10, atol=0)


@FEW
@given(shift=st.lists(st.floats(-3.0, 3.0), min_size=4, max_size=4))
def test_translation_moves_the_potential(shift):
    # Translations act on the point only (common practice): Delta'(x + shift) = Delta(x), so A'(x) = A(x - shift).
    cfg = config("SU2-k2")
    shift = np.asarray(shift)
    a = ik.potential(cfg["data"].translate(shift), cfg["x"] + shift)
    assert rel_err(a, ik.potential(cfg["data"], cfg["x"])) <= 1e-10


@FEW
@given(c=st.floats(0.3, 3.0))
def test_scaling_of_action_density(c):
    # Classical scale invariance of Yang-Mills in 4D (common practice): s_c(c x) = c^-4 s(x).
    cfg = config("SU2-k2")
    s = ik.action_density(cfg["data"].dilate(c), c * cfg["x"])
    np.testing.assert_allclose(s, cfg["s"] / c**4, rtol=1e-10, atol=0)


@FEW
@given(c=st.floats(0.3, 3.0))
def test_scaling_of_charge_density_sp2(c):
    # Scale invariance (common practice): q_c(c x) = c^-4 q(x), here for Sp(2) and the closed-form F.
    cfg = config("Sp2-k2")
    q = q_from_f(ik.field_strength(cfg["data"].dilate(c), c * cfg["x"]))
    np.testing.assert_allclose(q, q_from_f(cfg["f_closed"]) / c**4, rtol=1e-10, atol=0)


def test_gauge_choice_does_not_change_invariants():
    # The singular and regular frames differ by a gauge transformation (common practice), so
    # tr F_mu nu F_rho sigma agree.
    cfg = config("SU2-k2")
    f_reg = ik.field_strength(cfg["data"].with_gauge("regular"), cfg["x"])
    assert rel_err(invariants(f_reg), invariants(cfg["f_closed"])) <= 1e-10


def test_gauge_choice_changes_the_potential():
    # Guard for the previous test: the two gauges really are different gauges.
    cfg = config("SU2-k2")
    a_reg = ik.potential(cfg["data"].with_gauge("regular"), cfg["x"])
    assert rel_err(a_reg, ik.potential(cfg["data"], cfg["x"])) > 1e-3


# -- the batch-major kernels: both routes of the SU(2) density agree -----------------------------------


@pytest.mark.parametrize("k", [2, 4])
def test_rank_one_and_exact_routes_agree(k):
    # The rank-one route (M = u u^dag, P = U U^dag of rank n = 1, pivoted column of P) and the route from
    # M = 1 - (B - p) f (B - p)^dag give the same s (an identity of this module's derivation).
    data = ik.random_adhm(k, 1, seed=30 + k)
    pts = jnp.asarray(points_near(data, seed=k))
    lam, b = jnp.asarray(data.lam), jnp.asarray(data.B)
    diag, off = _kxk.split_b(b)
    y = _kxk.y_last(diag, _kxk.p_last(pts, 1))
    g = _kxk.gram_last(lam, off, y)
    fast = _kxk.s_rank_one(lam, off, y, g)
    np.testing.assert_allclose(np.asarray(fast), np.asarray(_kxk.s_exact(off, y, _kxk.cholesky_last(g))), rtol=1e-11)


@pytest.mark.parametrize("k", [2, 5])
def test_gram_from_split_b_matches_delta_dag_delta(k):
    # Re(Delta^dag Delta) from the split B = D + O against numpy's product of the complex 2 x 2 images
    # of Delta (an independent route: no quaternion algebra of this package), with centres far from the
    # origin where a plain expansion in p would cancel.
    data = ik.random_adhm(k, 1, seed=50 + k).translate([40.0, -30.0, 20.0, 10.0])
    pts = points_near(data, seed=k)
    diag, off = _kxk.split_b(jnp.asarray(data.B))
    g = np.asarray(_kxk.gram_last(jnp.asarray(data.lam), off, _kxk.y_last(diag, _kxk.p_last(jnp.asarray(pts), 1))))
    basis = np.asarray(ik.conventions.QUATERNION_BASIS)  # 2 x 2 images of 1, i, j, k
    dc = np.einsum("...rca,aij->...ricj", np.asarray(data.delta(pts)), basis)
    dc = dc.reshape(len(pts), 2 * (1 + k), 2 * k)
    ref = np.einsum("pai,paj->pij", dc.conj(), dc)[:, ::2, ::2].real  # the real part sits on the unit blocks
    np.testing.assert_allclose(np.moveaxis(g, -1, 0), ref, rtol=1e-12, atol=1e-12 * np.max(np.abs(ref)))


def test_batched_density_far_from_the_origin_matches_autodiff():
    # The batch-major kernel on data translated far from the origin (the cancellation-free Gram matrix)
    # against s = -1/2 sum tr F F of the autodiff field strength (conventions module).
    data = ik.random_adhm(3, 1, seed=61).translate([25.0, 0.0, -25.0, 5.0])
    pts = points_near(data, seed=5)
    s_auto = s_from_f(ik.field_strength(data, pts, method="autodiff"))
    np.testing.assert_allclose(ik.action_density(data, pts), s_auto, rtol=1e-10, atol=0)


def test_flop_count_is_positive_and_grows_like_k_cubed():
    # Bookkeeping for the benchmark's roofline (labelled: a property of the count, not physics).
    f = [_kxk.flops_per_point(k) for k in (4, 8, 16)]
    assert 0 < f[0] < f[1] < f[2] and 4 < f[2] / f[1] < 8.5
