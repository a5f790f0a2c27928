"""Specification of the fundamental zero modes of ADHM backgrounds: BPST density, Dirac equation,
chirality, orthonormality, the box-f identity and the index.

Point sets have N_POINTS points so that compiled kernels are reused across tests.
"""

from __future__ import annotations

import importlib

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.integrate
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.integrals.quadrature import rule_r4

# the package exports the function ik.zero_modes, which shadows the submodule attribute of the same name
zm = importlib.import_module("instantonkit.adhm.zero_modes")

N_POINTS = 16
FEW = settings(max_examples=10, deadline=None)
PARITY = np.array([-1.0, -1.0, -1.0, 1.0])

# Pauli matrices written out here (independent of conventions.QUATERNION_BASIS).
S1 = np.array([[0, 1], [1, 0]], dtype=complex)
S2 = np.array([[0, -1j], [1j, 0]])
S3 = np.array([[1, 0], [0, -1]], dtype=complex)
ONE = np.eye(2, dtype=complex)


def points_near(data, seed, n=N_POINTS):
    c, scale = data.hint()
    return c + scale * np.random.default_rng(seed).normal(size=(n, 4))


def bpst_zero_mode_density(x, a, rho):
    """'t Hooft, Phys. Rev. D 14 (1976) 3432 (from memory): |psi|^2 = 2 rho^2 / (pi^2 (|x - a|^2 + rho^2)^3)."""
    r2 = np.sum((np.asarray(x) - a) ** 2, axis=-1)
    return 2.0 * rho**2 / (np.pi**2 * (r2 + rho**2) ** 3)


def separated(k, rank=1, seed=0):
    """Charge-k data with centres about 4-5 sizes apart (accurate quadrature of the overlaps)."""
    c = np.array([[0, 0, 0, 0], [4.5, 1, 0, 0.5], [-1, 4, 1, -2.5]], dtype=float)[:k]
    s = np.array([1.0, 0.8, 0.9])[:k]
    o = np.random.default_rng(seed).normal(size=(k, rank, 4))
    o /= np.sqrt(np.sum(o**2, axis=(1, 2), keepdims=True))
    return ik.multi_instanton(c, s, o, rank=rank)


CASES = {
    "bpst": lambda: ik.bpst([0.3, -0.2, 0.1, 0.5], 1.3, [0.6, 0.0, 0.8, 0.0]),
    "k2": lambda: ik.random_adhm(2, seed=3),
    "k3": lambda: ik.random_adhm(3, seed=4),
    "sp2_k2": lambda: ik.random_adhm(2, rank=2, seed=5),
    "anti_regular_k2": lambda: ik.random_adhm(2, seed=3).conjugate().with_gauge("regular"),
}


# -- layout ------------------------------------------------------------------------------------------


def test_layout_is_mode_colour_spinor_with_leading_shape_kept():
    data = CASES["sp2_k2"]()  # k = 2, Sp(2): 2n = 4 colours
    pts = points_near(data, 0).reshape(4, 4, 4)
    psi = zm.zero_modes(data, pts)
    assert psi.shape == (4, 4, 2, 4, 2) and psi.dtype == np.complex128
    assert zm.zero_mode_density(data, pts).shape == (4, 4)
    assert zm.zero_mode_gram(data, pts).shape == (4, 4, 2, 2)


def test_sigma_matrices_are_the_images_of_e_mu():
    # sigma_mu = (i sigma_1, i sigma_2, i sigma_3, 1) (module docstring; e_mu from the conventions module)
    np.testing.assert_allclose(zm.SIGMA, np.stack([1j * S1, 1j * S2, 1j * S3, ONE]), atol=0)
    np.testing.assert_allclose(zm.SIGMA_BAR, np.stack([-1j * S1, -1j * S2, -1j * S3, ONE]), atol=0)


# -- BPST ---------------------------------------------------------------------------------------------


@FEW
@given(
    center=st.lists(st.floats(-2, 2), min_size=4, max_size=4),
    rho=st.floats(0.3, 3.0),
    seed=st.integers(0, 1000),
)
def test_bpst_density_is_thooft_formula(center, rho, seed):
    # 't Hooft, Phys. Rev. D 14 (1976) 3432 (from memory): 2 rho^2 / (pi^2 (|x - a|^2 + rho^2)^3)
    a = np.asarray(center)
    o = np.random.default_rng(seed).normal(size=4)
    data = ik.bpst(a, rho, o / np.linalg.norm(o))
    x = points_near(data, seed)
    ref = bpst_zero_mode_density(x, a, rho)
    psi = zm.zero_modes(data, x)
    np.testing.assert_allclose(np.sum(np.abs(psi) ** 2, axis=(-3, -2, -1)), ref, rtol=1e-12)
    np.testing.assert_allclose(zm.zero_mode_density(data, x), ref, rtol=1e-12)


def test_bpst_density_integrates_to_one_by_scipy_quad():
    # radial integral 2 pi^2 int r^3 n(r) dr with scipy.integrate.quad (independent of our quadrature)
    data = ik.bpst([0.0, 0.0, 0.0, 0.0], 0.7)
    n_of_r = lambda r: float(zm.zero_mode_density(data, np.array([r, 0.0, 0.0, 0.0])))  # noqa: E731
    # check the sampled profile is radial first (density depends only on |x|)
    d = np.random.default_rng(2).normal(size=(N_POINTS, 4))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    np.testing.assert_allclose(zm.zero_mode_density(data, 1.3 * d), n_of_r(1.3), rtol=1e-13)
    total, _ = scipy.integrate.quad(lambda r: 2 * np.pi**2 * r**3 * n_of_r(r), 0, np.inf, epsabs=1e-13, epsrel=1e-12)
    assert abs(total - 1.0) < 1e-9


def test_bpst_overlap_is_one():
    o = zm.zero_mode_overlap(ik.bpst([1.0, 0.0, -1.0, 2.0], 1.7), n_radial=48, n_angular=8)
    assert o.shape == (1, 1) and abs(o[0, 0] - 1.0) < 1e-12


# -- Dirac equation and chirality ---------------------------------------------------------------------


@pytest.mark.parametrize("name", sorted(CASES))
def test_dirac_equation_holds_pointwise_by_autodiff(name):
    # sum_mu D_mu psi sigma_mu = 0 (instanton) / sigma-bar_mu (anti-instanton): module docstring,
    # after Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469 (from memory)
    data = CASES[name]()
    res, scale = zm.dirac_residual(data, points_near(data, 7))
    assert np.all(scale > 1e-6)
    assert float(np.max(res / scale)) <= 1e-9
    assert float(np.max(res)) <= 1e-9


@jax.jit
def _cov_jit(data, x):
    psi = zm._psi_at(data, x)
    dpsi = jnp.moveaxis(jax.jacfwd(lambda y: zm._psi_at(data, y))(x), -1, 0)
    return dpsi + jnp.einsum("mcd,kdb->mkcb", data.potential(x), psi), psi


def _covariant_derivative(data, x):
    """D_mu psi at one point by jax.jacfwd of the (private) per-point mode function; (4, k, 2n, 2)."""
    cov, psi = _cov_jit(data, jnp.asarray(x, dtype=jnp.float64))
    return np.asarray(cov), np.asarray(psi)


@jax.jit
def _box_trace_f(data, pts):
    """box tr f at points (M, 4) by jax.hessian of f = (Delta^dag Delta)^-1 (the private adhm helper)."""
    return jax.vmap(lambda y: jnp.einsum("iimm->", jax.hessian(lambda z: data.gram_inverse(z)[0])(y)))(pts)


def test_instanton_modes_are_not_annihilated_by_the_other_operator():
    data = ik.random_adhm(2, seed=3)
    for x in points_near(data, 1, n=4):
        cov, _ = _covariant_derivative(data, x)
        right = np.einsum("mkca,mab->kcb", cov, zm.SIGMA)
        wrong = np.einsum("mkca,mab->kcb", cov, zm.SIGMA_BAR)
        assert np.max(np.abs(right)) < 1e-12 * np.max(np.abs(cov)) + 1e-15
        assert np.max(np.abs(wrong)) > 0.1 * np.max(np.abs(cov))


@pytest.mark.parametrize("chirality", [1, -1])
def test_chiral_dirac_spinor_solves_gamma_d_and_has_definite_gamma5(chirality):
    # Hermitian chiral basis gamma_mu = [[0, s_mu], [sbar_mu, 0]] (common practice); Clifford algebra checked here.
    s = np.stack([1j * S1, 1j * S2, 1j * S3, ONE])
    sb = np.stack([-1j * S1, -1j * S2, -1j * S3, ONE])
    z = np.zeros((2, 2))
    gam = np.stack([np.block([[z, s[m]], [sb[m], z]]) for m in range(4)])
    for m in range(4):
        for n in range(4):
            np.testing.assert_allclose(gam[m] @ gam[n] + gam[n] @ gam[m], 2.0 * (m == n) * np.eye(4), atol=1e-15)
    g5 = gam[0] @ gam[1] @ gam[2] @ gam[3]
    np.testing.assert_allclose(g5, np.diag([-1.0, -1.0, 1.0, 1.0]), atol=1e-15)
    data = ik.random_adhm(2, seed=3)
    data = data if chirality == 1 else data.conjugate()
    for x in points_near(data, 2, n=3):
        cov, psi = _covariant_derivative(data, x)
        # chi = sigma_2 psi^T (spinor first); Psi = (chi, 0) for instantons, (0, chi) for anti-instantons
        chi = np.einsum("ab,kcb->kac", S2, psi)
        dchi = np.einsum("ab,mkcb->mkac", S2, cov)
        zero = np.zeros_like(chi)
        big = (
            (lambda u: np.concatenate([u, np.zeros_like(u)], axis=-2))
            if chirality == 1
            else (lambda u: np.concatenate([np.zeros_like(u), u], axis=-2))
        )
        dirac = sum(np.einsum("ab,kbc->kac", gam[m], big(dchi[m])) for m in range(4))
        assert np.max(np.abs(dirac)) < 1e-12 * np.max(np.abs(cov))
        bigpsi = big(chi)
        np.testing.assert_allclose(np.einsum("ab,kbc->kac", g5, bigpsi), -chirality * bigpsi, atol=1e-15)
        assert np.max(np.abs(zero)) == 0.0


# -- densities, Gram matrix and the box-f identity ---------------------------------------------------


@pytest.mark.parametrize("name", sorted(CASES))
def test_gram_closed_form_matches_the_modes(name):
    # (2/pi^2) Re (f M f)_ij = sum_{c, alpha} conj(psi_i) psi_j, M = 1 - (B - p) f (B - p)^dag (derived in the module)
    data = CASES[name]()
    x = points_near(data, 3)
    psi = zm.zero_modes(data, x)
    g = np.einsum("pica,pjca->pij", psi.conj(), psi)
    np.testing.assert_allclose(zm.zero_mode_gram(data, x), g.real, atol=1e-14 * np.max(np.abs(g)))
    assert np.max(np.abs(g.imag)) <= 1e-14 * np.max(np.abs(g))


@pytest.mark.parametrize("name", ["k3", "sp2_k2", "anti_regular_k2"])
def test_density_is_minus_box_trace_f_over_four_pi_squared(name):
    # Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, and the 1978 work of Corrigan, Fairlie,
    # Templeton, Goddard, from memory: sum |psi|^2 = -(1/4 pi^2) box tr f
    data = CASES[name]()
    x = points_near(data, 4)
    lap = _box_trace_f(data, jnp.asarray(x))
    np.testing.assert_allclose(zm.zero_mode_density(data, x), -np.asarray(lap) / (4 * np.pi**2), rtol=1e-10)


def test_density_is_gauge_invariant():
    data = ik.random_adhm(2, seed=8)
    x = points_near(data, 5)
    a = np.sum(np.abs(zm.zero_modes(data, x)) ** 2, axis=(-3, -2, -1))
    b = np.sum(np.abs(zm.zero_modes(data.with_gauge("regular"), x)) ** 2, axis=(-3, -2, -1))
    np.testing.assert_allclose(a, b, rtol=1e-11)


def test_anti_instanton_density_is_the_parity_image():
    # conjugate() is the parity image (adhm module): n'(x) = n(P x)
    data = ik.random_adhm(2, seed=9)
    x = points_near(data, 6)
    np.testing.assert_allclose(
        zm.zero_mode_density(data.conjugate(), x), zm.zero_mode_density(data, x * PARITY), rtol=1e-12
    )


# -- orthonormality and the index ---------------------------------------------------------------------


@pytest.mark.parametrize("k, rank, n_radial, n_angular", [(2, 1, 64, 14), (2, 2, 64, 14), (3, 1, 64, 20)])
def test_modes_are_orthonormal(k, rank, n_radial, n_angular):
    # orthonormality of the ADHM zero modes (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469 and the
    # 1978 work of Corrigan, Fairlie, Templeton, Goddard and Osborn, Ann. Phys. 135 (1981) 373, from memory)
    data = separated(k, rank, seed=k + rank)
    o = zm.zero_mode_overlap(data, n_radial=n_radial, n_angular=n_angular)
    assert o.shape == (k, k)
    assert float(np.max(np.abs(o - np.eye(k)))) <= 1e-8
    # not trivially so: the pointwise off-diagonal Gram entries are far from zero
    g = zm.zero_mode_gram(data, points_near(data, 0, n=256))
    assert float(np.max(np.abs(g[:, 0, 1]))) > 1e-4


def test_number_of_modes_equals_the_topological_charge():
    # Atiyah-Singer index theorem (Atiyah, Singer, Ann. Math. 87 (1968) 484; 't Hooft, Phys. Rev. D 14 (1976) 3432):
    # index = Q; for self-dual fields all normalisable modes have one chirality, so their number is Q.
    data = separated(2, seed=1)
    rule = rule_r4(data.centers(), data.sizes(), 48, 10)
    q = float(np.sum(rule.weights * ik.charge_density(data, rule.points)))
    n_modes = zm.zero_modes(data, rule.points[:1]).shape[-3]
    trace = float(np.sum(rule.weights * zm.zero_mode_density(data, rule.points)))
    assert abs(q - 2.0) < 1e-6 and n_modes == round(q) and abs(trace - round(q)) < 1e-6


# -- bad input -----------------------------------------------------------------------------------------


def test_bad_input_raises():
    data = ik.bpst()
    with pytest.raises(TypeError, match="ADHMData"):
        zm.zero_modes(ik.bpst_field() if hasattr(ik, "bpst_field") else object(), np.zeros((1, 4)))
    with pytest.raises(ValueError, match=r"\(\.\.\., 4\)"):
        zm.zero_mode_density(data, np.zeros((3, 3)))
    with pytest.raises(ValueError, match="chunk_size"):
        zm.zero_modes(data, np.ones((2, 4)), chunk_size=0)
    with pytest.raises(ValueError, match="not finite"):
        zm.zero_modes(data, np.zeros((1, 4)))  # singular gauge frame at the centre
    with pytest.raises(ValueError, match="rule"):
        zm.zero_mode_overlap(data, rule=type("R", (), {"points": np.zeros((3, 4)), "weights": np.ones(2)})())
