"""Specification of instantonkit.core.conventions and of the 't Hooft symbols in instantonkit.core.quaternion."""

import itertools

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import sympy
from hypothesis import given
from hypothesis import strategies as st

from instantonkit.core import conventions as cv
from instantonkit.core import quaternion as qt
from instantonkit.testing import points, su2_matrices

# Pauli matrices (Pauli, Z. Phys. 43 (1927) 601; common practice).
SIGMA = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])
DELTA = np.eye(4)
EPS = cv.LEVI_CIVITA
ETA = qt.thooft_eta()
ETA_BAR = qt.thooft_eta_bar()


def eps3():
    return np.array([[[float(sympy.LeviCivita(a, b, c)) for c in range(3)] for b in range(3)] for a in range(3)])


# -- numbers -------------------------------------------------------------------------------------------


def test_normalisation_constants():
    # Unit instanton action 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85).
    assert cv.INSTANTON_ACTION == pytest.approx(8 * np.pi**2, rel=1e-15)
    assert cv.ACTION_DENSITY_FACTOR == -0.5
    assert cv.CHARGE_DENSITY_FACTOR == pytest.approx(-1 / (32 * np.pi**2), rel=1e-15)


# -- Levi-Civita -----------------------------------------------------------------------------------------


def test_levi_civita_1234_is_plus_one():
    assert EPS[0, 1, 2, 3] == 1.0


def test_levi_civita_matches_sympy():
    # sympy.LeviCivita as the external reference.
    for idx in itertools.product(range(4), repeat=4):
        assert EPS[idx] == float(sympy.LeviCivita(*idx)), idx


def test_levi_civita_is_totally_antisymmetric():
    for a, b in itertools.combinations(range(4), 2):
        assert np.array_equal(np.swapaxes(EPS, a, b), -EPS)
    # eps_{mnrs} eps_{mnrs} = 4! (common practice)
    assert np.sum(EPS * EPS) == 24.0


# -- points as quaternions ---------------------------------------------------------------------------------


@given(points())
def test_point_matrix_is_x4_plus_i_x_dot_sigma(x):
    # The package's convention (instantonkit.conventions): p(x) has the matrix x_mu sigma_mu = x4 1 + i x.sigma.
    m = np.asarray(qt.to_matrix(cv.point_to_quaternion(x)))
    expected = x[3] * np.eye(2) + 1j * np.einsum("a,aij->ij", x[:3], SIGMA)
    assert np.allclose(m, expected, rtol=0, atol=1e-14)


def test_point_to_quaternion_components():
    assert np.array_equal(cv.point_to_quaternion(np.array([1.0, 2.0, 3.0, 4.0])), [4.0, -1.0, -2.0, -3.0])


@given(points(shape=(3, 2)))
def test_point_quaternion_converters_round_trip(x):
    q = cv.point_to_quaternion(x)
    assert q.shape == (3, 2, 4)
    assert np.array_equal(cv.quaternion_to_point(q), x)
    assert np.array_equal(cv.point_to_quaternion(cv.quaternion_to_point(x)), x)


@given(points())
def test_norm_of_point_quaternion_is_euclidean_length(x):
    # |p(x)|^2 = x.x, i.e. det(x_mu sigma_mu) = x^2 (common practice).
    assert float(qt.qnorm2(cv.point_to_quaternion(x))) == pytest.approx(float(x @ x), rel=1e-14, abs=1e-300)


def test_e_mu_is_the_derivative_of_p():
    jac = jax.jacfwd(cv.point_to_quaternion)(jnp.array([0.3, -1.0, 2.0, 0.5]))  # (4 quaternion, 4 mu)
    assert np.array_equal(np.asarray(jac).T, cv.E_MU)


def test_e_mu_matrices_are_sigma_mu():
    # sigma_mu = (i sigma_1, i sigma_2, i sigma_3, 1), the package's convention.
    m = np.asarray(qt.to_matrix(cv.E_MU))
    for a in range(3):
        assert np.allclose(m[a], 1j * SIGMA[a], atol=0)
    assert np.allclose(m[3], np.eye(2), atol=0)


def test_e_mu_are_orthonormal():
    # Re(e_mu e-bar_nu) = delta_mu nu (common practice).
    prod = np.asarray(qt.qmul(cv.E_MU[:, None], qt.qconj(cv.E_MU)[None, :]))
    assert np.array_equal(prod[..., 0], DELTA)


def test_quaternion_basis_is_1_and_minus_i_sigma():
    assert np.array_equal(cv.QUATERNION_BASIS[0], np.eye(2))
    for a in range(3):
        assert np.array_equal(cv.QUATERNION_BASIS[a + 1], -1j * SIGMA[a])


# -- Hermitian / coupling converters --------------------------------------------------------------------------


@given(su2_matrices(), st.floats(0.1, 10.0))
def test_hermitian_converters_round_trip(g_mat, g):
    # An anti-Hermitian su(2) element built from an SU(2) matrix: X = (U - U^dag) / 2.
    x = 0.5 * (g_mat - g_mat.conj().T)
    h = cv.hermitian_from_antihermitian(x, coupling=g)
    assert np.allclose(h, h.conj().T, atol=1e-15)
    assert np.allclose(cv.antihermitian_from_hermitian(h, coupling=g), x, atol=1e-14)


def test_hermitian_convention_field_strength_and_action():
    # Hermitian convention D = d - i g A^H, F^H = dA^H - dA^H - i g [A^H, A^H], S = (1/2) int tr F^H F^H
    # (= (1/4) F^a F^a with tr T_a T_b = delta_ab / 2) (Peskin, Schroeder, An Introduction to Quantum Field Theory,
    # Addison-Wesley 1995, ch. 15; from memory). For constant potentials F is the commutator term only; F^H must equal i
    # F / g and the action s / g^2.
    rng = np.random.default_rng(0)
    g = 1.7
    coeff = rng.normal(size=(4, 3))
    a = np.einsum("ma,aij->mij", coeff, -0.5j * SIGMA)  # anti-Hermitian, ours
    f = np.einsum("mij,njk->mnik", a, a) - np.einsum("nij,mjk->mnik", a, a)
    ah = cv.hermitian_from_antihermitian(a, coupling=g)
    fh = -1j * g * (np.einsum("mij,njk->mnik", ah, ah) - np.einsum("nij,mjk->mnik", ah, ah))
    assert np.allclose(fh, cv.hermitian_from_antihermitian(f, coupling=g), atol=1e-13)
    s = cv.ACTION_DENSITY_FACTOR * np.einsum("mnij,mnji->", f, f).real
    s_h = 0.5 * np.einsum("mnij,mnji->", fh, fh).real
    assert s_h == pytest.approx(cv.action_with_coupling(s, g), rel=1e-13)


def test_self_dual_field_has_q_equal_s_over_8pi2():
    # For F = *F: q = s / (8 pi^2), so Q = S / 8 pi^2 = +1 for the unit instanton
    # (Belavin, Polyakov, Schwartz, Tyupkin 1975; the package's conventions).
    rng = np.random.default_rng(1)
    t = np.einsum("ab,bij->aij", rng.normal(size=(3, 3)), -0.5j * SIGMA)  # three su(2) elements
    f = np.einsum("amn,aij->mnij", ETA, t)  # self-dual by construction
    dual = 0.5 * np.einsum("mnrs,rsij->mnij", EPS, f)
    assert np.allclose(dual, f, atol=1e-15)
    s = cv.ACTION_DENSITY_FACTOR * np.einsum("mnij,mnji->", f, f).real
    q = cv.CHARGE_DENSITY_FACTOR * np.einsum("mnrs,mnij,rsji->", EPS, f, f).real
    assert s > 0
    assert q == pytest.approx(s / cv.INSTANTON_ACTION, rel=1e-13)


# -- 't Hooft symbols ('t Hooft, Phys. Rev. D 14 (1976) 3432, appendix; from memory) ----------------------------


def test_eta_explicit_definition():
    # eta_{a mu nu} = eps_{a mu nu} (mu, nu <= 3), eta_{a mu 4} = delta_{a mu}, eta_{a 4 nu} = -delta_{a nu};
    # eta-bar has the opposite sign of the delta terms ('t Hooft, Phys. Rev. D 14 (1976) 3432, appendix; from memory).
    e3 = eps3()
    for sym, sign in ((ETA, 1.0), (ETA_BAR, -1.0)):
        assert sym.shape == (3, 4, 4)
        assert np.array_equal(sym[:, :3, :3], e3)
        assert np.array_equal(sym[:, :3, 3], sign * np.eye(3))
        assert np.array_equal(sym[:, 3, :3], -sign * np.eye(3))
        assert np.all(sym[:, 3, 3] == 0)


def test_eta_is_antisymmetric():
    assert np.array_equal(ETA, -np.swapaxes(ETA, 1, 2))
    assert np.array_equal(ETA_BAR, -np.swapaxes(ETA_BAR, 1, 2))


def test_eta_is_self_dual_and_eta_bar_anti_self_dual():
    # eta_{a mu nu} = 1/2 eps_{mu nu rho sigma} eta_{a rho sigma}; eta-bar with a minus sign.
    assert np.array_equal(0.5 * np.einsum("mnrs,ars->amn", EPS, ETA), ETA)
    assert np.array_equal(0.5 * np.einsum("mnrs,ars->amn", EPS, ETA_BAR), -ETA_BAR)


def test_eta_contractions():
    # eta_{a mu nu} eta_{b mu nu} = 4 delta_ab, eta_{a mu nu} eta_{a mu lam} = 3 delta_{nu lam},
    # eta_{a mu nu} eta-bar_{b mu nu} = 0 (same for eta-bar).
    for sym in (ETA, ETA_BAR):
        assert np.array_equal(np.einsum("amn,bmn->ab", sym, sym), 4 * np.eye(3))
        assert np.array_equal(np.einsum("amn,aml->nl", sym, sym), 3 * DELTA)
    assert np.array_equal(np.einsum("amn,bmn->ab", ETA, ETA_BAR), np.zeros((3, 3)))


def test_eta_eta_is_delta_delta_plus_eps():
    # eta_{a mu nu} eta_{a kap lam} = d_mk d_nl - d_ml d_nk + eps_{mu nu kap lam}; eta-bar: minus eps.
    dd = np.einsum("mk,nl->mnkl", DELTA, DELTA) - np.einsum("ml,nk->mnkl", DELTA, DELTA)
    assert np.array_equal(np.einsum("amn,akl->mnkl", ETA, ETA), dd + EPS)
    assert np.array_equal(np.einsum("amn,akl->mnkl", ETA_BAR, ETA_BAR), dd - EPS)


def test_eps_eta_eta_identity():
    # eps_abc eta_{b mu nu} eta_{c kap lam}
    #   = d_mk eta_{a nu lam} - d_ml eta_{a nu kap} - d_nk eta_{a mu lam} + d_nl eta_{a mu kap}
    # (same for eta-bar).
    e3 = eps3()
    for sym in (ETA, ETA_BAR):
        lhs = np.einsum("abc,bmn,ckl->amnkl", e3, sym, sym)
        rhs = (
            np.einsum("mk,anl->amnkl", DELTA, sym)
            - np.einsum("ml,ank->amnkl", DELTA, sym)
            - np.einsum("nk,aml->amnkl", DELTA, sym)
            + np.einsum("nl,amk->amnkl", DELTA, sym)
        )
        assert np.array_equal(lhs, rhs)


def test_eta_product_and_su2_algebra():
    # eta_{a mu nu} eta_{b mu lam} = delta_ab delta_{nu lam} + eps_abc eta_{c nu lam}; hence the matrices
    # (eta_a)_{mu nu} obey [eta_a, eta_b] = -2 eps_abc eta_c and commute with every eta-bar_b.
    e3 = eps3()
    for sym in (ETA, ETA_BAR):
        lhs = np.einsum("amn,bml->abnl", sym, sym)
        rhs = np.einsum("ab,nl->abnl", np.eye(3), DELTA) + np.einsum("abc,cnl->abnl", e3, sym)
        assert np.array_equal(lhs, rhs)
        comm = np.einsum("amn,bnl->abml", sym, sym) - np.einsum("bmn,anl->abml", sym, sym)
        assert np.array_equal(comm, -2 * np.einsum("abc,cml->abml", e3, sym))
    mixed = np.einsum("amn,bnl->abml", ETA, ETA_BAR) - np.einsum("bmn,anl->abml", ETA_BAR, ETA)
    assert np.array_equal(mixed, np.zeros_like(mixed))


def test_quaternion_relation_for_eta():
    # e_mu e-bar_nu - e_nu e-bar_mu = -2 eta_{a mu nu} u_a with u = (i, j, k) (conventions module).
    e, eb = cv.E_MU, np.asarray(qt.qconj(cv.E_MU))
    s = np.asarray(qt.qmul(e[:, None], eb[None, :]))
    s = s - np.swapaxes(s, 0, 1)
    assert np.array_equal(s[..., 0], np.zeros((4, 4)))
    assert np.array_equal(s[..., 1:], -2 * np.moveaxis(ETA, 0, -1))


def test_quaternion_relation_for_eta_bar():
    # e-bar_mu e_nu - e-bar_nu e_mu = -2 eta-bar_{a mu nu} u_a (conventions module).
    e, eb = cv.E_MU, np.asarray(qt.qconj(cv.E_MU))
    s = np.asarray(qt.qmul(eb[:, None], e[None, :]))
    s = s - np.swapaxes(s, 0, 1)
    assert np.array_equal(s[..., 0], np.zeros((4, 4)))
    assert np.array_equal(s[..., 1:], -2 * np.moveaxis(ETA_BAR, 0, -1))
