"""Specification of the quaternion layer: Hamilton's algebra, its 2x2 complex image, quaternionic matrices."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from instantonkit.core import quaternion as qt
from instantonkit.testing import imaginary_quaternions, quaternions, su2_matrices, unit_quaternions

# Pauli matrices (Pauli, Z. Phys. 43 (1927) 601; common practice).
SIGMA = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]])


def close(a, b, tol=1e-12):
    a, b = np.asarray(a), np.asarray(b)
    scale = 1.0 + max(float(np.max(np.abs(a), initial=0.0)), float(np.max(np.abs(b), initial=0.0)))
    return np.allclose(a, b, rtol=0.0, atol=tol * scale)


def random_qmat(rng, r, c):
    return rng.normal(size=(r, c, 4))


# -- Hamilton's units -------------------------------------------------------------------------------


def test_units_obey_hamiltons_relations():
    # i^2 = j^2 = k^2 = ijk = -1 (Hamilton, Phil. Mag. 25 (1844) 10; common practice).
    one, i, j, k = qt.UNITS
    for u in (i, j, k):
        assert close(qt.qmul(u, u), -one, 0)
    assert close(qt.qmul(qt.qmul(i, j), k), -one, 0)
    assert close(qt.qmul(i, j), k, 0) and close(qt.qmul(j, k), i, 0) and close(qt.qmul(k, i), j, 0)
    assert close(qt.qmul(j, i), -k, 0)


def test_units_map_to_minus_i_sigma():
    # The package's convention: 1 -> 1, i -> -i sigma_1, j -> -i sigma_2, k -> -i sigma_3.
    m = np.asarray(qt.to_matrix(qt.UNITS))
    assert np.array_equal(m[0], np.eye(2))
    for a in range(3):
        assert np.array_equal(m[a + 1], -1j * SIGMA[a])


@given(unit_quaternions(), imaginary_quaternions(max_angle=2.0))
def test_strategies_draw_what_they_promise(u, v):
    assert u.shape == (4,) and u.dtype == np.float64 and abs(np.linalg.norm(u) - 1.0) <= 1e-15
    assert v[0] == 0.0 and np.linalg.norm(v) <= 2.0 + 1e-12


# -- algebra properties (hypothesis) ------------------------------------------------------------------


@given(quaternions(), quaternions(), quaternions())
def test_product_is_associative(p, q, r):
    # The quaternions form an associative division algebra (Hamilton 1844; Frobenius 1878; common practice).
    assert close(qt.qmul(qt.qmul(p, q), r), qt.qmul(p, qt.qmul(q, r)), 1e-12)


@given(quaternions(), quaternions())
def test_norm_is_multiplicative(p, q):
    # |pq| = |p||q| (Euler's four-square identity, 1748; common practice).
    assert np.isclose(float(qt.qnorm(qt.qmul(p, q))), float(qt.qnorm(p) * qt.qnorm(q)), rtol=1e-12, atol=1e-300)


@given(quaternions(), quaternions())
def test_conjugate_reverses_products(p, q):
    # conj(pq) = conj(q) conj(p) (common practice).
    assert close(qt.qconj(qt.qmul(p, q)), qt.qmul(qt.qconj(q), qt.qconj(p)))


@given(quaternions())
def test_q_times_conjugate_is_norm_squared(q):
    # q q-bar = q-bar q = |q|^2 (common practice).
    n2 = float(qt.qnorm2(q))
    assert close(qt.qmul(q, qt.qconj(q)), [n2, 0, 0, 0])
    assert close(qt.qmul(qt.qconj(q), q), [n2, 0, 0, 0])


@given(quaternions().filter(lambda q: np.linalg.norm(q) > 1e-3))
def test_inverse_is_two_sided(q):
    # q q^-1 = q^-1 q = 1 in a division algebra (common practice).
    inv = qt.qinv(q)
    assert close(qt.qmul(q, inv), [1.0, 0, 0, 0], 1e-12)
    assert close(qt.qmul(inv, q), [1.0, 0, 0, 0], 1e-12)


@given(quaternions())
def test_real_part_is_half_trace_and_w_component(q):
    # Re q = (q + q-bar) / 2 = (1/2) tr of its 2x2 image (common practice).
    assert float(qt.qreal(q)) == q[0]
    assert np.isclose(np.trace(np.asarray(qt.to_matrix(q))).real / 2, q[0], rtol=0, atol=1e-12 * (1 + abs(q[0])))


@given(imaginary_quaternions())
def test_exp_log_round_trip(v):
    # exp(theta n) = cos(theta) + n sin(theta) (Euler-Rodrigues; common practice); log inverts it on |v| < pi.
    u = qt.qexp(v)
    assert np.isclose(float(qt.qnorm(u)), 1.0, atol=1e-14)
    assert close(qt.qlog(u), v, 1e-12)


@given(unit_quaternions().filter(lambda u: u[0] > -1 + 1e-6))
def test_log_exp_round_trip(u):
    # Every unit quaternion except -1 has a unique logarithm with |log u| < pi (common practice).
    w = qt.qlog(u)
    assert float(w[0]) == 0.0
    assert float(qt.qnorm(w)) <= np.pi + 1e-12
    assert close(qt.qexp(w), u, 1e-10)


def test_exp_matches_scipy_expm_of_the_matrix_image():
    # The image of exp(v) is expm of the image of v (scipy.linalg.expm as the external reference).
    from scipy.linalg import expm

    rng = np.random.default_rng(5)
    for _ in range(5):
        v = np.concatenate([[0.0], rng.normal(size=3)])
        assert close(qt.to_matrix(qt.qexp(v)), expm(np.asarray(qt.to_matrix(v))), 1e-12)


def test_exp_of_zero_and_small_vectors_is_accurate():
    # exp(v) = 1 + v + O(v^2) (Taylor series); the small-angle branch must not lose precision.
    assert close(qt.qexp(np.zeros(4)), [1.0, 0, 0, 0], 0)
    v = np.array([0.0, 1e-9, -2e-9, 3e-9])
    assert close(qt.qexp(v), [1.0, 1e-9, -2e-9, 3e-9], 1e-17)


# -- the 2x2 complex image ----------------------------------------------------------------------------


@given(quaternions(), quaternions())
def test_to_matrix_is_an_algebra_homomorphism(p, q):
    # M(pq) = M(p) M(q), M(p + q) = M(p) + M(q), M(q-bar) = M(q)^dagger (common practice).
    mp, mq = np.asarray(qt.to_matrix(p)), np.asarray(qt.to_matrix(q))
    assert close(qt.to_matrix(qt.qmul(p, q)), mp @ mq)
    assert close(qt.to_matrix(p + q), mp + mq)
    assert close(qt.to_matrix(qt.qconj(q)), mq.conj().T)


@given(quaternions())
def test_determinant_of_image_is_norm_squared(q):
    # det M(q) = |q|^2 (common practice).
    assert np.isclose(np.linalg.det(np.asarray(qt.to_matrix(q))), float(qt.qnorm2(q)), rtol=1e-12, atol=1e-12)


@given(unit_quaternions())
def test_unit_quaternions_map_to_su2(u):
    # Unit quaternions are SU(2): M^dagger M = 1 and det M = 1 (common practice).
    m = np.asarray(qt.to_matrix(u))
    assert close(m.conj().T @ m, np.eye(2), 1e-14)
    assert np.isclose(np.linalg.det(m), 1.0, atol=1e-14)


@given(su2_matrices())
def test_every_su2_matrix_comes_from_a_unit_quaternion(m):
    # SU(2) = {[[a, -conj(b)], [b, conj(a)]] : |a|^2 + |b|^2 = 1}, the unit quaternions (common practice).
    q = np.asarray(qt.from_matrix(m))
    assert np.isclose(np.linalg.norm(q), 1.0, atol=1e-14)
    assert close(qt.to_matrix(q), m, 1e-15)


@given(quaternions())
def test_from_matrix_inverts_to_matrix(q):
    assert close(qt.from_matrix(qt.to_matrix(q)), q, 1e-15)


def test_from_matrix_projects_general_complex_matrices():
    # A general complex 2x2 matrix splits as M = M_q + i M_q' with M_q, M_q' quaternionic (common practice);
    # from_matrix returns the first part.
    rng = np.random.default_rng(0)
    q1, q2 = rng.normal(size=4), rng.normal(size=4)
    m = np.asarray(qt.to_matrix(q1)) + 1j * np.asarray(qt.to_matrix(q2))
    assert close(qt.from_matrix(m), q1, 1e-15)


# -- quaternionic matrices ----------------------------------------------------------------------------


@given(st.integers(0, 2**32 - 1), st.integers(1, 3), st.integers(1, 3), st.integers(1, 3))
def test_qmat_mul_matches_product_of_complex_images(seed, r, c, d):
    rng = np.random.default_rng(seed)
    a, b = random_qmat(rng, r, c), random_qmat(rng, c, d)
    lhs = np.asarray(qt.qmat_to_complex(qt.qmat_mul(a, b)))
    rhs = np.asarray(qt.qmat_to_complex(a)) @ np.asarray(qt.qmat_to_complex(b))
    assert lhs.shape == (2 * r, 2 * d)
    assert close(lhs, rhs)


@given(st.integers(0, 2**32 - 1), st.integers(1, 3), st.integers(1, 3))
def test_qmat_dagger_maps_to_complex_conjugate_transpose(seed, r, c):
    a = random_qmat(np.random.default_rng(seed), r, c)
    assert close(qt.qmat_to_complex(qt.qmat_dagger(a)), np.asarray(qt.qmat_to_complex(a)).conj().T, 0)


@given(st.integers(0, 2**32 - 1), st.integers(1, 3), st.integers(1, 3))
def test_complex_to_qmat_round_trip(seed, r, c):
    a = random_qmat(np.random.default_rng(seed), r, c)
    assert close(qt.complex_to_qmat(qt.qmat_to_complex(a)), a, 1e-15)


def test_qmat_to_complex_places_blocks_row_major():
    # Entry (i, j) is the 2x2 block at rows 2i:2i+2, columns 2j:2j+2 (module documentation).
    a = np.zeros((2, 3, 4))
    a[1, 2] = [0.0, 1.0, 0.0, 0.0]  # the unit i
    m = np.asarray(qt.qmat_to_complex(a))
    assert m.shape == (4, 6)
    assert np.array_equal(m[2:4, 4:6], -1j * SIGMA[0])
    assert np.count_nonzero(m) == 2


def test_qmat_transpose_is_not_the_adjoint():
    # (AB)^T != B^T A^T over the quaternions, but (AB)^dagger = B^dagger A^dagger (common practice).
    rng = np.random.default_rng(2)
    a, b = random_qmat(rng, 2, 3), random_qmat(rng, 3, 2)
    ab = qt.qmat_mul(a, b)
    assert close(qt.qmat_dagger(ab), qt.qmat_mul(qt.qmat_dagger(b), qt.qmat_dagger(a)))
    assert not close(qt.qmat_transpose(ab), qt.qmat_mul(qt.qmat_transpose(b), qt.qmat_transpose(a)))
    assert np.array_equal(np.asarray(qt.qmat_transpose(a))[2, 1], a[1, 2])


def test_qmat_identity_and_real_trace():
    # tr of the complex image of A is 2 Re tr A (module documentation; common practice).
    rng = np.random.default_rng(3)
    a = random_qmat(rng, 3, 3)
    eye = qt.qmat_identity(3)
    assert close(qt.qmat_mul(eye, a), a, 0) and close(qt.qmat_mul(a, eye), a, 0)
    assert np.isclose(np.trace(np.asarray(qt.qmat_to_complex(a))).real, 2 * float(qt.qmat_real_trace(a)))
    assert np.isclose(np.trace(np.asarray(qt.qmat_to_complex(a))).imag, 0.0, atol=1e-14)


def test_qmat_functions_broadcast_over_leading_axes():
    rng = np.random.default_rng(4)
    a, b = rng.normal(size=(5, 2, 3, 4)), rng.normal(size=(5, 3, 1, 4))
    out = np.asarray(qt.qmat_mul(a, b))
    assert out.shape == (5, 2, 1, 4)
    assert close(out[3], qt.qmat_mul(a[3], b[3]))
    assert np.asarray(qt.qmat_to_complex(a)).shape == (5, 4, 6)


def test_complex_to_qmat_rejects_odd_shapes():
    with pytest.raises(ValueError, match=r"even shape \(2r, 2c\); found \(3, 2\)"):
        qt.complex_to_qmat(np.zeros((3, 2), complex))


def test_quaternion_results_are_float64():
    q = np.array([1.0, 2.0, 3.0, 4.0])
    for out in (qt.qmul(q, q), qt.qinv(q), qt.qexp(q), qt.qlog(q / 30**0.5), qt.from_matrix(qt.to_matrix(q))):
        assert np.asarray(out).dtype == np.float64
    assert np.asarray(qt.to_matrix(q)).dtype == np.complex128
