"""Specification of the fundamental zero modes of complex ADHM (SU(N)) backgrounds: the spinor
relation, the Dirac equation by autodiff, the flat U(1) part, the Gram closed form, the box-f
identity, orthonormality and the count k by quadrature, the BPST density and agreement with the
quaternionic modes for N = 2 data.

Point sets have N_POINTS points so that compiled kernels are reused; every batch of complex data
stays at <= 256 points per compiled call (module constant of instantonkit.zero_modes).
"""

from __future__ import annotations

import importlib

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import instantonkit as ik
from instantonkit import unitary_moduli as um
from instantonkit.quadrature import rule_r4

zm = importlib.import_module("instantonkit.zero_modes")

N_POINTS = 8

# Pauli matrices written out here (independent of conventions.QUATERNION_BASIS).
S1 = np.array([[0, 1], [1, 0]], dtype=complex)
S2 = np.array([[0, -1j], [1j, 0]])
S3 = np.array([[1, 0], [0, -1]], dtype=complex)
ONE = np.eye(2, dtype=complex)


def haar_su(n, rng):
    """Haar-random SU(n) from the QR of a complex Gaussian (Mezzadri, Notices AMS 54 (2007) 592)."""
    z = (rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) / np.sqrt(2.0)
    q, r = np.linalg.qr(z)
    q = q * (np.diag(r) / np.abs(np.diag(r)))
    return q / np.linalg.det(q) ** (1.0 / n)


def points_near(data, seed, n=N_POINTS):
    c, scale = data.hint()
    return c + scale * np.random.default_rng(seed).normal(size=(n, 4))


def genuine_su3(k=2, seed=9):
    """Well separated SU(3) instantons with Haar-random orientations (not an SU(2) embedding)."""
    rng = np.random.default_rng(seed)
    centres = np.array([[0.0, 0.0, 0.0, 0.0], [4.0, 1.0, 0.0, 0.5], [-1.0, 4.0, 1.0, -2.5]])[:k]
    sizes = np.array([1.0, 0.8, 0.9])[:k]
    return um.unitary_multi_instanton(centres, sizes, np.stack([haar_su(3, rng) for _ in range(k)]), rank=3)


CASES = {
    "su3_k1": lambda: um.random_unitary_adhm(1, 3, seed=1),
    "su3_k2": lambda: um.random_unitary_adhm(2, 3, seed=1),
    "su4_k2": lambda: um.random_unitary_adhm(2, 4, seed=2),
    "su3_k2_regular": lambda: um.random_unitary_adhm(2, 3, seed=3).with_gauge("regular"),
    "su3_k3": lambda: um.random_unitary_adhm(3, 3, seed=4),
}


# -- the spinor relation ---------------------------------------------------------------------------


def test_s_mu_are_sigma_mu_conjugated_by_sigma_2():
    # d_mu Delta = b (s_mu (x) 1_k) read off by autodiff of data.delta; then s_mu = sigma_2 SIGMA_mu sigma_2 s_4
    # with SIGMA_mu = (i sigma_1, i sigma_2, i sigma_3, 1) written out here (module docstring of zero_modes)
    data = CASES["su3_k2"]()
    k = data.k
    jac = np.asarray(jax.jacfwd(lambda x: data.delta(x))(jnp.array([0.1, 0.2, -0.3, 0.4])))  # (2k+N, 2k, 4)
    sigma = np.stack([1j * S1, 1j * S2, 1j * S3, ONE])
    s = np.stack([jac[: 2 * k, :, m].reshape(2, k, 2, k)[:, 0, :, 0] for m in range(4)])
    for m in range(4):
        np.testing.assert_allclose(jac[: 2 * k, :, m], np.kron(s[m], np.eye(k)), atol=1e-15)
        np.testing.assert_allclose(s[m], S2 @ sigma[m] @ S2 @ s[3], atol=1e-15)
    assert np.all(jac[2 * k :] == 0)


# -- the Dirac equation --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "case", [pytest.param(c, marks=pytest.mark.long) if c == "su3_k3" else c for c in sorted(CASES)]
)
def test_modes_solve_the_dirac_equation(case):
    # sum_mu (D_mu psi_i) SIGMA_mu = 0 with D = d + data.potential + a 1 (a the flat U(1) part), by jax.jacfwd
    data = CASES[case]()
    res, scale = zm.dirac_residual(data, points_near(data, 1))
    assert res.shape == (N_POINTS,)
    assert float(np.max(res / scale)) < 1e-10
    assert float(np.min(scale)) > 1e-6  # not trivially: the modes are not covariantly constant


@pytest.mark.long
def test_u1_part_is_flat_and_not_zero():
    # tr F = 0 for self-dual U(N) ADHM fields on R^4 (common practice: no L^2 harmonic 2-forms on R^4), so
    # a = tr(U^dag dU) / N has d a = 0; computed here by autodiff of u1_part
    data = CASES["su3_k2"]()
    x = points_near(data, 2)[:4]
    a = np.stack([np.asarray(zm.u1_part(data, jnp.asarray(p))) for p in x])
    curl = np.stack([np.asarray(jax.jacfwd(lambda y: zm.u1_part(data, y))(jnp.asarray(p))) for p in x])
    assert float(np.max(np.abs(a.real))) < 1e-12  # imaginary: a U(1) connection
    assert float(np.max(np.abs(a))) > 1e-3  # present in this gauge ...
    assert float(np.max(np.abs(curl - np.swapaxes(curl, -1, -2)))) < 1e-12  # ... and flat
    # the potential of the data is the frame connection minus a 1: the modes need it back
    jac, u = jax.jacfwd(lambda y: (data.frame(y),) * 2, has_aux=True)(jnp.asarray(x[0]))
    frame_conn = np.einsum("ia,ibm->mab", np.conj(np.asarray(u)), np.asarray(jac))
    np.testing.assert_allclose(frame_conn, ik.potential(data, x[0]) + a[0][:, None, None] * np.eye(3), atol=1e-13)


# -- densities -----------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", ["su3_k2", "su4_k2", pytest.param("su3_k3", marks=pytest.mark.long)])
def test_gram_closed_form_equals_the_modes_and_minus_box_f(case):
    # G_ij = sum_{c, alpha} conj(psi_i) psi_j; the identity G_ij = -(1/4 pi^2) box f_ij (Corrigan, Goddard,
    # Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, in the SU(2) form; from memory) by jax Hessians of f
    data = CASES[case]()
    x = points_near(data, 3)
    psi = zm.zero_modes(data, x)
    assert psi.shape == (N_POINTS, data.k, data.rank, 2)
    g = zm.zero_mode_gram(data, x)
    np.testing.assert_allclose(g, np.einsum("pica,pjca->pij", psi.conj(), psi), atol=1e-14 * np.max(np.abs(g)))
    np.testing.assert_allclose(zm.zero_mode_density(data, x), np.trace(g, axis1=1, axis2=2).real, rtol=1e-12)

    def f(y, part):
        return part(jnp.linalg.inv(data.gram(y)))

    for p, gp in zip(x[:3], g[:3], strict=True):
        box = sum(jnp.trace(jax.hessian(f)(jnp.asarray(p), part), axis1=-2, axis2=-1) * c for part, c in _PARTS)
        np.testing.assert_allclose(gp, -np.asarray(box) / (4 * np.pi**2), atol=1e-12 * np.max(np.abs(gp)))


_PARTS = ((jnp.real, 1.0), (jnp.imag, 1j))


def test_bpst_zero_mode_density_in_su3():
    # 't Hooft, Phys. Rev. D 14 (1976) 3432 (from memory): |psi|^2 = 2 rho^2 / (pi^2 (|x - a|^2 + rho^2)^3)
    a, rho = np.array([0.3, -0.2, 0.1, 0.5]), 1.3
    data = um.unitary_multi_instanton(a[None], rho, haar_su(3, np.random.default_rng(5))[None], rank=3)
    x = points_near(data, 4)
    ref = 2 * rho**2 / (np.pi**2 * (np.sum((x - a) ** 2, axis=-1) + rho**2) ** 3)
    np.testing.assert_allclose(zm.zero_mode_density(data, x), ref, rtol=1e-12)
    np.testing.assert_allclose(np.sum(np.abs(zm.zero_modes(data, x)) ** 2, axis=(-3, -2, -1)), ref, rtol=1e-12)


@pytest.mark.parametrize("k", [1, 2, 3])
def test_n2_data_reproduce_the_quaternionic_zero_mode_densities(k):
    # the same field up to gauge (unitary_moduli.from_quaternionic): gauge-invariant densities agree
    q = ik.random_adhm(k, seed=20 + k)
    c = um.from_quaternionic(q)
    x = points_near(q, 5)
    dq, dc = zm.zero_mode_density(q, x), zm.zero_mode_density(c, x)
    assert float(np.max(np.abs(dc - dq) / dq)) < 1e-10
    np.testing.assert_allclose(zm.zero_mode_gram(c, x), zm.zero_mode_gram(q, x), atol=1e-10 * np.max(dq))


def test_densities_are_gauge_and_colour_invariant():
    data = CASES["su3_k2"]()
    x = points_near(data, 6)
    ref = zm.zero_mode_density(data, x)
    rng = np.random.default_rng(7)
    for other in (data.rotate_su(haar_su(3, rng)), data.rotate_gauge(haar_su(2, rng)), data.with_gauge("regular")):
        np.testing.assert_allclose(zm.zero_mode_density(other, x), ref, rtol=1e-11)


# -- normalisation and the count -----------------------------------------------------------------------


def test_genuine_su3_modes_are_orthonormal_and_number_k():
    # int G_ij = delta_ij by quadrature (the box-f identity with f ~ |x|^-2 at infinity and Gauss's theorem);
    # Atiyah-Singer index (Atiyah, Singer, Ann. Math. 87 (1968) 484): k modes of one chirality for Q = k
    data = genuine_su3(2)
    rule = rule_r4(data.centers(), data.sizes(), 48, 12)
    o = zm.zero_mode_overlap(data, rule=rule)
    assert o.shape == (2, 2)
    assert float(np.max(np.abs(o - np.eye(2)))) <= 1e-7
    g = zm.zero_mode_gram(data, points_near(data, 8, n=64))
    assert float(np.max(np.abs(g[:, 0, 1]))) > 1e-4  # the pointwise overlaps are far from zero
    q = float(np.sum(rule.weights * ik.charge_density(data, rule.points)))
    assert abs(q - 2.0) < 1e-6 and zm.zero_modes(data, rule.points[:1]).shape[-3] == round(q)


# -- bad input -----------------------------------------------------------------------------------------


def test_bad_input():
    with pytest.raises(TypeError, match="ADHMData or UnitaryADHMData"):
        zm.zero_modes(object(), np.zeros((1, 4)))
    data = CASES["su3_k1"]()
    with pytest.raises(ValueError, match=r"\(\.\.\., 4\)"):
        zm.zero_mode_density(data, np.zeros((2, 3)))
