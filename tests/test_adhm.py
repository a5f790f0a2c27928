"""Specification of ADHM data: validation, constructors, moduli count, transformations and bad input.

Data and constraint: Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185 (ADHM); notation of
Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469 (from memory).
"""

import time

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.linalg import expm

import instantonkit as ik
from instantonkit.adhm import moduli
from instantonkit.core import conventions as cv
from instantonkit.core import quaternion as qt
from instantonkit.engine import fields
from instantonkit.testing import adhm_data, orthogonal_matrices, points, unit_quaternions

PARITY = np.diag([-1.0, -1.0, -1.0, 1.0])
# A few fixed sample points away from every centre used below.
SAMPLE = np.array([[0.3, -0.2, 0.5, 1.1], [2.0, 1.0, -1.5, 0.4], [-1.2, 0.7, 0.1, -0.9]])


def gram(data, x):
    """Delta^dag Delta at points x (..., 4) -> (..., k, k, 4)."""
    d = data.delta(x)
    return np.asarray(qt.qmat_mul(qt.qmat_dagger(d), d))


@jax.jit
def _log_dets(data, x):
    """log det(Delta^dag Delta) at points (m, 4) -> (m,) (one compile per data structure)."""
    return jax.vmap(data.log_det)(x)


def sp_element(rng, n):
    """Haar-ish Sp(n) element: expm of a random quaternionic anti-Hermitian matrix's complex image."""
    x = rng.normal(size=(n, n, 4))
    x = x - np.asarray(qt.qmat_dagger(x))
    return np.asarray(qt.complex_to_qmat(expm(np.asarray(qt.qmat_to_complex(x)))))


# -- BPST data ------------------------------------------------------------------------------------------


@given(points(bound=3.0), st.floats(0.1, 3.0), unit_quaternions(), points(bound=5.0))
def test_bpst_gram_is_distance_squared_plus_rho_squared(a, rho, u, x):
    # Delta^dag Delta = (|x - a|^2 + rho^2) 1 for the BPST instanton (Belavin, Polyakov, Schwartz, Tyupkin,
    # Phys. Lett. B 59 (1975) 85; ADHM form, Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; from
    # memory).
    g = gram(ik.bpst(a, rho, u), x)
    expected = np.sum((x - a) ** 2) + rho**2
    assert g.shape == (1, 1, 4)
    assert g[0, 0, 0] == pytest.approx(expected, rel=1e-12)
    assert np.max(np.abs(g[0, 0, 1:])) <= 1e-12 * expected


@given(points(bound=3.0), st.floats(0.1, 3.0), unit_quaternions())
def test_bpst_data_layout(a, rho, u):
    # B = p(a), Lambda = rho u, |Lambda| = rho, constraint satisfied.
    d = ik.bpst(a, rho, u)
    assert np.allclose(d.B[0, 0], cv.point_to_quaternion(a), rtol=0, atol=0)
    assert np.allclose(d.lam[0, 0], rho * u, rtol=1e-15, atol=1e-15)
    assert d.sizes()[0] == pytest.approx(rho, rel=1e-14)
    assert np.allclose(d.centers()[0], a, rtol=0, atol=1e-15)
    assert d.constraint_residual() <= 1e-15 * (1 + rho**2 + a @ a)


def test_bpst_defaults_and_properties():
    d = ik.bpst()
    assert np.array_equal(d.lam, [[[1.0, 0, 0, 0]]]) and np.array_equal(d.B, np.zeros((1, 1, 4)))
    assert (d.charge, d.k, d.rank, d.group, d.matrix_size) == (1, 1, 1, "SU(2)", 2)
    assert d.lam.dtype == np.float64 and d.B.dtype == np.float64
    assert d.constraint_residual() == 0.0


@given(unit_quaternions())
def test_bpst_orientation_as_su2_matrix_equals_the_quaternion(u):
    # The SU(2) matrix of u (i -> -i sigma_1, ...) must give the same data as u itself.
    by_quat = ik.bpst((0, 0, 0, 0), 1.3, u)
    by_matrix = ik.bpst((0, 0, 0, 0), 1.3, np.asarray(qt.to_matrix(u)))
    assert np.allclose(by_matrix.lam, by_quat.lam, rtol=0, atol=1e-14)


def test_bpst_charge_is_plus_one_by_radial_integration():
    # Q = int q d^4x = 2 pi^2 int r^3 q(r) dr = +1 for the instanton, -1 for its partner (Belavin, Polyakov, Schwartz,
    # Tyupkin, Phys. Lett. B 59 (1975) 85; vol(S^3) = 2 pi^2, common practice).  q comes from the closed-form ADHM F_mu
    # nu through the eps tr F F formula of the conventions.  With u = r^2 / (r^2 + rho^2) the BPST integrand is the
    # polynomial 6 u (1 - u), so 24-node Gauss-Legendre (numpy.polynomial.legendre) is exact to rounding.
    rho = 0.8
    u, w = np.polynomial.legendre.leggauss(24)
    u, w = (u + 1) / 2, w / 2
    r = rho * np.sqrt(u / (1 - u))
    dr2_du = rho**2 / (1 - u) ** 2  # r^3 dr = (1/2) r^2 d(r^2)
    ray = np.stack([r, 0 * r, 0 * r, 0 * r], axis=-1)
    for d in (ik.bpst((0, 0, 0, 0), rho), ik.bpst((0, 0, 0, 0), rho).conjugate()):
        q = fields.charge_density(d, ray, method="closed")
        total = np.sum(w * 2 * np.pi**2 * 0.5 * r**2 * dr2_du * q)
        assert total == pytest.approx(d.charge, abs=1e-12)


# -- random and multi-instanton data ------------------------------------------------------------------------------


@pytest.mark.parametrize("rank", [1, 2])
@pytest.mark.parametrize("k", [1, 2, 3, 5, 8])
def test_random_adhm_passes_validation_to_1e_12(k, rank):
    for seed in range(3):
        d = ik.random_adhm(k, rank, seed=seed)
        assert (d.k, d.rank, d.charge) == (k, rank, k)
        assert d.constraint_residual() <= 1e-12
        # re-validating with a tight tolerance must succeed
        ik.ADHMData(d.lam, d.B, tol=1e-12)


def test_random_adhm_is_reproducible():
    a, b = ik.random_adhm(3, seed=11), ik.random_adhm(3, seed=11)
    assert np.array_equal(a.lam, b.lam) and np.array_equal(a.B, b.B)
    assert not np.array_equal(a.lam, ik.random_adhm(3, seed=12).lam)


@given(adhm_data(k=st.integers(1, 4), rank=st.integers(1, 2), source="moduli"))
def test_drawn_multi_instanton_data_is_valid(d):
    assert d.constraint_residual() <= 1e-12
    assert np.array_equal(d.B, np.swapaxes(d.B, 0, 1))


@given(adhm_data(k=st.integers(1, 2), rank=st.integers(1, 2), chirality=-1))
def test_adhm_data_strategy_draws_anti_instantons_on_request(d):
    assert d.chirality == -1 and d.charge == -d.k
    assert d.constraint_residual() <= 1e-12


def test_package_import_does_not_need_hypothesis():
    # hypothesis is a test extra: only instantonkit.testing may import it.
    import subprocess
    import sys

    code = "import sys, instantonkit; assert 'hypothesis' not in sys.modules, 'imported'"
    subprocess.run([sys.executable, "-c", code], check=True)


def test_multi_instanton_k8_places_moduli_and_solves_to_1e_12():
    rng = np.random.default_rng(7)
    k = 8
    centers = rng.normal(scale=2.0, size=(k, 4))
    sizes = rng.uniform(0.5, 1.5, size=k)
    orient = rng.normal(size=(k, 4))
    orient /= np.linalg.norm(orient, axis=1, keepdims=True)
    t0 = time.perf_counter()
    d = ik.multi_instanton(centers, sizes, orient)
    _elapsed = time.perf_counter() - t0  # measured about 0.01-0.1 s on 2 cores (never asserted)
    assert d.constraint_residual() <= 1e-12
    assert np.allclose(d.centers(), centers, rtol=0, atol=1e-15)
    assert np.allclose(d.sizes(), sizes, rtol=1e-14)
    assert np.allclose(d.lam[0] / sizes[:, None], orient, rtol=0, atol=1e-14)
    assert np.allclose(np.asarray(d.B)[np.arange(k), np.arange(k)], cv.point_to_quaternion(centers), atol=0)


def test_multi_instanton_sp_orientations():
    # (k, n, 4) orientations are the unit columns of Lambda for Sp(n).
    rng = np.random.default_rng(8)
    o = rng.normal(size=(3, 2, 4))
    o /= np.sqrt(np.sum(o**2, axis=(1, 2), keepdims=True))
    d = ik.multi_instanton(rng.normal(size=(3, 4)) * 2, [0.7, 1.0, 1.2], o, rank=2)
    assert (d.rank, d.group, d.matrix_size) == (2, "Sp(2)", 4)
    assert np.allclose(np.swapaxes(d.lam, 0, 1) / d.sizes()[:, None, None], o, atol=1e-14)
    assert d.constraint_residual() <= 1e-12


def test_multi_instanton_with_one_centre_is_bpst():
    d = ik.multi_instanton([[0.1, 0.2, 0.3, 0.4]], [0.9], [[0.0, 1.0, 0.0, 0.0]])
    ref = ik.bpst((0.1, 0.2, 0.3, 0.4), 0.9, (0.0, 1.0, 0.0, 0.0))
    assert np.array_equal(d.lam, ref.lam) and np.array_equal(d.B, ref.B)


# -- tampered data --------------------------------------------------------------------------------------------


def test_perturbed_off_diagonal_b_violates_the_constraint():
    d = ik.random_adhm(3, seed=1)
    b = np.array(d.B)
    b[0, 1, 2] += 1e-3
    b[1, 0, 2] += 1e-3  # still symmetric
    with pytest.raises(ValueError, match=r"ADHM constraint violated.*max \|imaginary part\| = \d\.\d+e-0[34]"):
        ik.ADHMData(d.lam, b)


def test_asymmetric_b_is_rejected():
    d = ik.random_adhm(2, seed=1)
    b = np.array(d.B)
    b[0, 1, 0] += 1e-4
    with pytest.raises(ValueError, match=r"B must be symmetric.*1\.000e-04"):
        ik.ADHMData(d.lam, b)


def test_perturbed_lambda_violates_the_constraint():
    d = ik.random_adhm(2, seed=2)
    lam = np.array(d.lam)
    lam[0, 1] = np.asarray(qt.qmul(lam[0, 1], qt.qexp([0.0, 0.1, 0.0, 0.0])))  # rotate one column only
    with pytest.raises(ValueError, match="ADHM constraint violated"):
        ik.ADHMData(lam, d.B)


# -- moduli count -----------------------------------------------------------------------------------------------


def _pack(lam, b):
    k = b.shape[0]
    iu = np.triu_indices(k)
    return np.concatenate([np.ravel(lam), np.ravel(b[iu])])


def _constraint_jacobian(lam, b):
    """Exact Jacobian of the 3k(k-1)/2 real equations Im(Lambda^dag Lambda + B^dag B)_{i<j} = 0.

    The equations are quadratic, so their derivative along a direction (dL, dB) is exactly
    Im(L^dag dL + dL^dag L + B^dag dB + dB^dag B); evaluated on every basis direction at once.
    """
    n, k = lam.shape[0], b.shape[0]
    size = _pack(lam, b).size
    dirs = np.eye(size)
    dlam = dirs[:, : 4 * n * k].reshape(size, n, k, 4)
    iu = np.triu_indices(k)
    db = np.zeros((size, k, k, 4))
    upper = dirs[:, 4 * n * k :].reshape(size, -1, 4)
    db[:, iu[0], iu[1]] = upper
    db[:, iu[1], iu[0]] = upper
    lin = np.asarray(qt.qmat_mul(qt.qmat_dagger(lam)[None], dlam)) + np.asarray(
        qt.qmat_mul(qt.qmat_dagger(b)[None], db)
    )
    lin = lin + np.asarray(qt.qmat_dagger(lin))
    i, j = np.triu_indices(k, 1)
    return lin[:, i, j, 1:].reshape(size, -1).T


def _orbit_tangents(lam, b):
    """Tangents of the O(k) orbit, d/dt (Lambda e^{tT}, e^{-tT} B e^{tT}) = (Lambda T, B T - T B)."""
    k = b.shape[0]
    out = []
    for i, j in zip(*np.triu_indices(k, 1)):
        t = np.zeros((k, k))
        t[i, j], t[j, i] = 1.0, -1.0
        dlam = np.einsum("nja,jk->nka", lam, t)
        db = np.einsum("ija,jk->ika", b, t) - np.einsum("ij,jka->ika", t, b)
        out.append(_pack(dlam, db))
    return np.array(out).reshape(-1, _pack(lam, b).size)


def moduli_dimension(d):
    """dim(data) - rank(constraint Jacobian) - dim(O(k) orbit) at the solution d, and the orbit/kernel check."""
    theta = _pack(np.asarray(d.lam), np.asarray(d.B))
    jac = _constraint_jacobian(np.asarray(d.lam), np.asarray(d.B))
    orbit = _orbit_tangents(np.asarray(d.lam), np.asarray(d.B))
    rank_j = np.linalg.matrix_rank(jac, tol=1e-9) if jac.size else 0
    rank_o = np.linalg.matrix_rank(orbit, tol=1e-9) if orbit.size else 0
    orbit_in_kernel = float(np.max(np.abs(jac @ orbit.T))) if orbit.size and jac.size else 0.0
    return theta.size - rank_j - rank_o, rank_j, orbit_in_kernel


def test_constraint_jacobian_matches_central_differences():
    # Central differences are exact (to rounding) for the quadratic ADHM equations.
    d = ik.random_adhm(3, rank=2, seed=3)
    lam, b = np.asarray(d.lam), np.asarray(d.B)
    jac = _constraint_jacobian(lam, b)
    i, j = np.triu_indices(3, 1)

    def equations(theta):
        lam_t = theta[: lam.size].reshape(lam.shape)
        b_t = np.zeros_like(b)
        iu = np.triu_indices(3)
        b_t[iu] = theta[lam.size :].reshape(-1, 4)
        b_t[(iu[1], iu[0])] = theta[lam.size :].reshape(-1, 4)
        c = np.asarray(qt.qmat_mul(qt.qmat_dagger(lam_t), lam_t)) + np.asarray(qt.qmat_mul(qt.qmat_dagger(b_t), b_t))
        return c[i, j, 1:].ravel()

    theta, h = _pack(lam, b), 1e-3
    fd = np.stack([(equations(theta + h * e) - equations(theta - h * e)) / (2 * h) for e in np.eye(theta.size)], axis=1)
    assert np.allclose(jac, fd, rtol=0, atol=1e-10)


@pytest.mark.parametrize("k", [1, 2, 3, 4])
def test_su2_moduli_count_is_8k(k):
    # dim M_k = 8k real moduli for framed SU(2) charge-k instantons (Atiyah, Hitchin, Drinfeld, Manin,
    # Phys. Lett. A 65 (1978) 185; 8k - 3 after removing global gauge rotations, from memory).
    d = ik.random_adhm(k, seed=k)
    dim, rank_j, orbit_in_kernel = moduli_dimension(d)
    assert rank_j == 3 * k * (k - 1) // 2  # the equations are independent at a generic solution
    assert orbit_in_kernel <= 1e-12  # the O(k) redundancy is tangent to the solution set
    assert dim == 8 * k


@pytest.mark.parametrize("k", [2, 3])
def test_sp2_moduli_count_is_4k_n_plus_1(k):
    # Sp(n) charge k: 4k(n+1) framed moduli, i.e. 4k(n+1) - n(2n+1) after removing global Sp(n) for
    # k >= n (Bernard, Christ, Guth, Weinberg, Phys. Rev. D 16 (1977) 2967; from memory).
    d = ik.random_adhm(k, rank=2, seed=10 + k)
    dim, _, _ = moduli_dimension(d)
    assert dim == 4 * k * (2 + 1)


# -- transformations -------------------------------------------------------------------------------------------


@given(adhm_data(k=st.integers(2, 3)), orthogonal_matrices(3))
def test_rotate_gauge_keeps_det_of_gram_and_validity(d, o3):
    # O(k) acts as Lambda -> Lambda O, B -> O^T B O, so Delta^dag Delta -> O^T (Delta^dag Delta) O and its
    # determinant is unchanged (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; common practice).
    o = (
        o3[: d.k, : d.k]
        if d.k == 3
        else np.array([[np.cos(o3[0, 0]), -np.sin(o3[0, 0])], [np.sin(o3[0, 0]), np.cos(o3[0, 0])]])
    )
    r = d.rotate_gauge(o)
    assert r.constraint_residual() <= 1e-12
    assert np.allclose(_log_dets(r, SAMPLE), _log_dets(d, SAMPLE), rtol=1e-12, atol=1e-12)


def test_rotate_gauge_keeps_action_density():
    d = ik.random_adhm(2, seed=4)
    o = np.array([[0.6, -0.8], [-0.8, -0.6]])  # a reflection (det -1)
    assert np.allclose(fields.action_density(d.rotate_gauge(o), SAMPLE), fields.action_density(d, SAMPLE), rtol=1e-11)


@pytest.mark.parametrize("rank", [1, 2])
def test_rotate_sp_keeps_gauge_invariants(rank):
    # Lambda -> Q Lambda is a constant gauge transformation: tr F_mn F_rs is unchanged (common practice).
    rng = np.random.default_rng(rank)
    d = ik.random_adhm(2, rank=rank, seed=5)
    q = sp_element(rng, rank)
    r = d.rotate_sp(q[0, 0] if rank == 1 else q)
    assert r.constraint_residual() <= 1e-12
    f1, f2 = fields.field_strength(d, SAMPLE), fields.field_strength(r, SAMPLE)
    inv1 = np.einsum("pmnij,prsji->pmnrs", f1, f1)
    inv2 = np.einsum("pmnij,prsji->pmnrs", f2, f2)
    assert np.allclose(inv2, inv1, rtol=1e-10, atol=1e-12 * np.max(np.abs(inv1)))


def test_translate_moves_centres_and_densities():
    # A'(x) = A(x - shift) so s'(x) = s(x - shift) (translation covariance, common practice).
    d = ik.random_adhm(2, seed=6)
    shift = np.array([0.5, -1.0, 2.0, 0.25])
    t = d.translate(shift)
    assert np.allclose(t.centers(), d.centers() + shift, atol=1e-14)
    assert t.constraint_residual() <= 1e-12
    assert np.allclose(fields.action_density(t, SAMPLE + shift), fields.action_density(d, SAMPLE), rtol=1e-11)


def test_dilate_scales_sizes_centres_and_densities():
    # A'(x) = A(x / c) / c so s'(x) = s(x / c) / c^4 (scale covariance, common practice).
    d = ik.random_adhm(2, seed=7)
    c = 1.7
    s = d.dilate(c)
    assert np.allclose(s.sizes(), c * d.sizes(), rtol=1e-14)
    assert np.allclose(s.centers(), c * d.centers(), rtol=1e-14)
    assert s.constraint_residual() <= 1e-12
    assert np.allclose(fields.action_density(s, c * SAMPLE), fields.action_density(d, SAMPLE) / c**4, rtol=1e-11)


def test_conjugate_flips_charge_and_is_the_parity_image():
    # The anti-instanton partner is the parity image: s'(x) = s(Px), q'(x) = -q(Px), F anti-self-dual
    # (parity reverses eps_{mu nu rho sigma}; common practice).  s and q from the closed-form F_mu nu
    # with the conventions' formulas s = -1/2 tr F F, q = -1/(32 pi^2) eps tr F F.
    d = ik.random_adhm(2, seed=8)
    a = d.conjugate()
    assert (a.charge, a.chirality, a.conjugate().charge) == (-2, -1, 2)
    assert np.allclose(a.centers(), d.centers() @ PARITY, atol=1e-15)
    fa, fd = fields.field_strength(a, SAMPLE), fields.field_strength(d, SAMPLE @ PARITY)

    def s_and_q(f):
        s = cv.ACTION_DENSITY_FACTOR * np.einsum("pmnij,pmnji->p", f, f).real
        q = cv.CHARGE_DENSITY_FACTOR * np.einsum("mnrs,pmnij,prsji->p", cv.LEVI_CIVITA, f, f).real
        return s, q

    (sa, qa), (sd, qd) = s_and_q(fa), s_and_q(fd)
    assert np.allclose(sa, sd, rtol=1e-11)
    assert np.allclose(qa, -qd, rtol=1e-11)
    assert np.all(qa < 0)
    assert np.allclose(np.asarray(fields.dual(fa)), -fa, atol=1e-12 * np.max(np.abs(fa)))


def test_translate_of_anti_instanton_moves_its_centres():
    a = ik.random_adhm(2, seed=9).conjugate()
    shift = np.array([1.0, 2.0, 3.0, 4.0])
    assert np.allclose(a.translate(shift).centers(), a.centers() + shift, atol=1e-14)


def test_embed_sp_keeps_the_field():
    # Padding Lambda with zero rows embeds Sp(n) in Sp(m) (Christ, Weinberg, Stanton, Phys. Rev. D 18 (1978)
    # 2013; from memory): the densities are unchanged.
    d = ik.random_adhm(2, seed=10)
    e = moduli.embed_sp(d, 3, row=1)
    assert (e.rank, e.group, e.k) == (3, "Sp(3)", 2)
    assert np.array_equal(e.lam[1], d.lam[0]) and not np.any(e.lam[[0, 2]])
    assert e.constraint_residual() <= 1e-12
    assert np.allclose(fields.action_density(e, SAMPLE), fields.action_density(d, SAMPLE), rtol=1e-10)


def test_block_sum_with_stacked_ranks_is_exact_direct_sum():
    # Lambda = diag(L1, L2), B = diag(B1, B2) gives the direct sum of the two connections, so the action
    # densities add (direct sum of connections; common practice).
    a, b = ik.random_adhm(1, seed=11), ik.random_adhm(2, seed=12)
    s = ik.block_sum(a, b, stack_ranks=True)
    assert (s.k, s.rank, s.charge) == (3, 2, 3)
    assert s.constraint_residual() <= 1e-15
    expected = fields.action_density(a, SAMPLE) + fields.action_density(b, SAMPLE)
    assert np.allclose(fields.action_density(s, SAMPLE), expected, rtol=1e-10)


def test_block_sum_same_rank_exact_when_cross_term_is_real():
    a = ik.bpst((0, 0, 0, 0), 1.0)
    b = ik.bpst((3, 0, 0, 0), 0.5)  # both Lambda real: Lambda_1^dag Lambda_2 real
    s = ik.block_sum(a, b)
    assert (s.k, s.rank, s.charge) == (2, 1, 2)
    assert s.constraint_residual() == 0.0


def test_block_sum_same_rank_with_non_real_cross_term_raises():
    a = ik.bpst((0, 0, 0, 0), 1.0)
    b = ik.bpst((3, 0, 0, 0), 0.5, (0.0, 0.0, 1.0, 0.0))  # Lambda_1^dag Lambda_2 = 0.5 j
    with pytest.raises(ValueError, match=r"block sum is not exact: Im\(Lambda_1\^dag Lambda_2\) has max 5\.000e-01"):
        ik.block_sum(a, b)


def test_block_sum_rejects_mixed_chirality_and_ranks():
    a = ik.random_adhm(1, seed=1)
    with pytest.raises(ValueError, match="same chirality"):
        ik.block_sum(a, a.conjugate().translate((5, 0, 0, 0)))
    with pytest.raises(ValueError, match=r"ranks differ \(1 and 2\)"):
        ik.block_sum(a, ik.random_adhm(1, rank=2, seed=2))


def test_adhm_data_is_a_jax_pytree():
    d = ik.random_adhm(2, seed=3)
    leaves, tree = jax.tree_util.tree_flatten(d)
    assert len(leaves) == 2
    back = jax.tree_util.tree_unflatten(tree, leaves)
    assert np.array_equal(back.B, d.B) and back.chirality == d.chirality and back.gauge == d.gauge
    # under jit the value checks are skipped and the data flows through
    out = jax.jit(lambda data, x: data.log_det(x))(d, jnp.asarray(SAMPLE[0]))
    assert float(out) == pytest.approx(float(d.log_det(SAMPLE[0])), rel=1e-13)


def test_delta_keeps_leading_shape():
    d = ik.random_adhm(2, rank=2, seed=4)
    x = np.zeros((3, 5, 4))
    assert d.delta(x).shape == (3, 5, 4, 2, 4)
    assert d.delta(np.zeros(4)).shape == (4, 2, 4)


# -- bad input --------------------------------------------------------------------------------------------------


def test_lam_of_wrong_rank_is_rejected():
    with pytest.raises(ValueError, match=r"lam must have shape \(n, k, 4\); found \(1, 4\)"):
        ik.ADHMData(np.zeros((1, 4)), np.zeros((1, 1, 4)))


def test_b_not_matching_lam_is_rejected():
    with pytest.raises(
        ValueError, match=r"B must have shape \(k, k, 4\) = \(2, 2, 4\) for lam \(1, 2, 4\); found \(1, 1, 4\)"
    ):
        ik.ADHMData(np.ones((1, 2, 4)), np.zeros((1, 1, 4)))


def test_last_axis_must_be_a_quaternion():
    with pytest.raises(ValueError, match=r"B must have shape \(k, k, 4\); found \(1, 1, 3\)"):
        ik.ADHMData(np.ones((1, 1, 4)), np.zeros((1, 1, 3)))


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_data_is_rejected(bad):
    lam = np.ones((1, 1, 4))
    lam[0, 0, 2] = bad
    with pytest.raises(ValueError, match=r"lam must be finite; found 1 NaN or inf value\(s\)"):
        ik.ADHMData(lam, np.zeros((1, 1, 4)))
    b = np.zeros((1, 1, 4))
    b[0, 0, 0] = bad
    with pytest.raises(ValueError, match="B must be finite"):
        ik.ADHMData(np.ones((1, 1, 4)), b)


def test_complex_lam_is_a_type_error():
    with pytest.raises(TypeError, match="lam must be a real numeric array; found dtype complex128"):
        ik.ADHMData(np.ones((1, 1, 4), complex), np.zeros((1, 1, 4)))


@pytest.mark.parametrize("chirality", [0, 2, -2])
def test_wrong_chirality_is_rejected(chirality):
    with pytest.raises(ValueError, match=rf"chirality must be \+1 or -1; found {chirality}"):
        ik.ADHMData(np.ones((1, 1, 4)), np.zeros((1, 1, 4)), chirality=chirality)


def test_unknown_gauge_is_rejected():
    with pytest.raises(ValueError, match="gauge must be one of"):
        ik.bpst().with_gauge("axial")


def test_non_unit_orientation_is_rejected():
    with pytest.raises(ValueError, match=r"orientations must be unit quaternions.*1\.000e\+00"):
        ik.bpst(orientation=(2.0, 0.0, 0.0, 0.0))
    with pytest.raises(ValueError, match="orientations must be unit"):
        ik.multi_instanton([[0, 0, 0, 0], [3, 0, 0, 0]], [1.0, 1.0], [[1, 0, 0, 0], [0.5, 0, 0, 0]])


def test_non_su2_orientation_matrix_is_rejected():
    with pytest.raises(ValueError, match="orientation matrices must be in SU"):
        ik.bpst(orientation=np.array([[1, 0], [0, -1]], dtype=complex))  # unitary, det -1


@pytest.mark.parametrize("size", [0.0, -1.0, np.nan, np.inf])
def test_non_positive_or_non_finite_size_is_rejected(size):
    with pytest.raises(ValueError, match=r"size must be (finite|> 0)"):
        ik.bpst(size=size)
    with pytest.raises(ValueError, match=r"sizes must be (finite|> 0)"):
        ik.multi_instanton([[0, 0, 0, 0], [3, 0, 0, 0]], [1.0, size])


def test_bad_centres_are_rejected():
    with pytest.raises(ValueError, match=r"center must have shape \(4,\); found \(3,\)"):
        ik.bpst(center=(0, 0, 0))
    with pytest.raises(ValueError, match="center must be finite"):
        ik.bpst(center=(0, np.nan, 0, 0))
    with pytest.raises(ValueError, match=r"centers must have shape \(k, 4\); found \(2, 3\)"):
        ik.multi_instanton(np.zeros((2, 3)), [1.0, 1.0])


def test_coincident_centres_are_rejected():
    with pytest.raises(ValueError, match="centers 0 and 2 coincide"):
        ik.multi_instanton([[1, 2, 3, 4], [0, 0, 0, 0], [1, 2, 3, 4]], [1.0, 1.0, 1.0])


def test_sizes_of_wrong_length_are_rejected():
    with pytest.raises(ValueError, match=r"sizes must have shape \(2,\); found \(3,\)"):
        ik.multi_instanton([[0, 0, 0, 0], [3, 0, 0, 0]], [1.0, 1.0, 1.0])


def test_bad_rank_and_k_are_rejected():
    with pytest.raises(ValueError, match="rank must be a positive integer; found 0"):
        ik.multi_instanton([[0, 0, 0, 0]], [1.0], rank=0)
    with pytest.raises(ValueError, match="k must be a positive integer; found 0"):
        ik.random_adhm(0)


def test_bad_transformation_arguments_are_rejected():
    d = ik.random_adhm(2, seed=1)
    with pytest.raises(ValueError, match=r"orth must have shape \(2, 2\); found \(3, 3\)"):
        d.rotate_gauge(np.eye(3))
    with pytest.raises(ValueError, match="orth must be orthogonal"):
        d.rotate_gauge(np.array([[1.0, 1.0], [0.0, 1.0]]))
    with pytest.raises(ValueError, match=r"q must be in Sp\(1\)"):
        d.rotate_sp([2.0, 0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match=r"q must have shape \(1, 1, 4\); found \(2, 2, 4\)"):
        d.rotate_sp(np.zeros((2, 2, 4)))
    with pytest.raises(ValueError, match=r"shift must have shape \(4,\)"):
        d.translate([1.0, 2.0])
    for c in (0.0, -2.0, np.inf):
        with pytest.raises(ValueError, match=r"factor must be (finite|> 0)"):
            d.dilate(c)
    with pytest.raises(ValueError, match=r"cannot embed Sp\(2\) data at row 0 into Sp\(1\)"):
        moduli.embed_sp(ik.random_adhm(1, rank=2, seed=1), 1)


def test_booleans_are_refused_as_numbers():
    # common practice of the house: True is not 1 for an argument (_validate refuses booleans everywhere)
    with pytest.raises(TypeError, match="rank must be a positive integer; found True"):
        ik.multi_instanton([[0, 0, 0, 0]], [1.0], rank=True)
    with pytest.raises(TypeError, match="k must be a positive integer"):
        ik.random_adhm(True)
    with pytest.raises(TypeError, match="size must be a real number"):
        ik.bpst(size=True)
    with pytest.raises(ValueError, match=r"chirality must be \+1 or -1; found True"):
        ik.ADHMData(np.ones((1, 1, 4)), np.zeros((1, 1, 4)), chirality=True)
    with pytest.raises(TypeError, match="lam must be a real numeric array; found dtype bool"):
        ik.ADHMData(np.ones((1, 1, 4), bool), np.zeros((1, 1, 4)))
