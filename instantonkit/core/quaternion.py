"""Quaternions and quaternionic matrices as real arrays, and the 't Hooft symbols.

A quaternion is a real array ``(..., 4)`` ordered ``(w, x, y, z)`` with ``w`` the real part; a
quaternionic matrix is a real array ``(..., rows, cols, 4)``.  Complex images use the map of
`instantonkit.core.conventions.QUATERNION_BASIS` (``i -> -i sigma_1`` etc.): a quaternion becomes a
2x2 block, an ``r x c`` quaternionic matrix a ``2r x 2c`` complex matrix.  All functions are pure,
jax-traceable and accept numpy or jax arrays.
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from .conventions import QUATERNION_BASIS

__all__ = [
    "qmul",
    "qconj",
    "qnorm",
    "qnorm2",
    "qinv",
    "qexp",
    "qlog",
    "qreal",
    "to_matrix",
    "from_matrix",
    "qmat_mul",
    "qmat_dagger",
    "qmat_transpose",
    "qmat_to_complex",
    "complex_to_qmat",
    "qmat_identity",
    "qmat_real_trace",
    "UNITS",
    "thooft_eta",
    "thooft_eta_bar",
]

#: The quaternion units ``1, i, j, k`` as rows; (4, 4).
UNITS = np.eye(4)


def _structure_constants() -> np.ndarray:
    """C[a, b, c]: (e_a e_b) = sum_c C[a, b, c] e_c for the units (1, i, j, k) (Hamilton 1843)."""
    table = {  # (a, b): (sign, c) with i^2 = j^2 = k^2 = ijk = -1
        (0, 0): (1, 0),
        (0, 1): (1, 1),
        (0, 2): (1, 2),
        (0, 3): (1, 3),
        (1, 0): (1, 1),
        (1, 1): (-1, 0),
        (1, 2): (1, 3),
        (1, 3): (-1, 2),
        (2, 0): (1, 2),
        (2, 1): (-1, 3),
        (2, 2): (-1, 0),
        (2, 3): (1, 1),
        (3, 0): (1, 3),
        (3, 1): (1, 2),
        (3, 2): (-1, 1),
        (3, 3): (-1, 0),
    }
    c = np.zeros((4, 4, 4))
    for (a, b), (sign, out) in table.items():
        c[a, b, out] = sign
    return c


_C = _structure_constants()
_CONJ = np.array([1.0, -1.0, -1.0, -1.0])


def _einsum(spec, *ops):
    """numpy einsum when every operand is a numpy array (fast for small host-side work), else jax."""
    if all(isinstance(o, (np.ndarray, float, int)) for o in ops):
        return np.einsum(spec, *ops, optimize=True)
    return jnp.einsum(spec, *ops)


def qmul(p, q):
    """Hamilton product ``p q``; p, q: (..., 4) broadcastable -> (..., 4)."""
    return _einsum("...a,...b,abc->...c", p, q, _C)


def qconj(q):
    """Conjugate ``q-bar = (w, -x, -y, -z)``; (..., 4) -> (..., 4)."""
    return q * _CONJ if isinstance(q, np.ndarray) else jnp.asarray(q) * _CONJ


def qnorm2(q):
    """Squared norm ``|q|^2 = q q-bar``; (..., 4) -> (...)."""
    return jnp.sum(jnp.asarray(q) ** 2, axis=-1)


def qnorm(q):
    """Norm ``|q|``; (..., 4) -> (...)."""
    return jnp.sqrt(qnorm2(q))


def qinv(q):
    """Inverse ``q^-1 = q-bar / |q|^2``; (..., 4) -> (...,4).  Zero has no inverse (gives inf/nan)."""
    return qconj(q) / qnorm2(q)[..., None]


def qreal(q):
    """Real part ``w``; (..., 4) -> (...)."""
    return jnp.asarray(q)[..., 0]


def qexp(v):
    """Exponential of a pure imaginary quaternion ``v`` (its real part is ignored) -> unit quaternion.

    ``exp(theta n) = cos(theta) + n sin(theta)`` for a unit imaginary ``n`` (Euler-Rodrigues).
    v: (..., 4) -> (..., 4).
    """
    v = jnp.asarray(v)
    vec = v[..., 1:]
    theta2 = jnp.sum(vec**2, axis=-1)
    safe = jnp.where(theta2 > 0, theta2, 1.0)
    theta = jnp.sqrt(safe)
    sinc = jnp.where(theta2 > 0, jnp.sin(theta) / theta, 1.0 - theta2 / 6.0)
    cos = jnp.where(theta2 > 0, jnp.cos(theta), 1.0 - theta2 / 2.0)
    return jnp.concatenate([cos[..., None], sinc[..., None] * vec], axis=-1)


def qlog(u):
    """Logarithm of a unit quaternion: a pure imaginary quaternion with ``|log u| <= pi``.

    Inverse of `qexp` on angles in [0, pi).  u: (..., 4) -> (..., 4) with zero real part.
    """
    u = jnp.asarray(u)
    vec = u[..., 1:]
    s = jnp.sqrt(jnp.sum(vec**2, axis=-1))
    theta = jnp.arctan2(s, u[..., 0])
    factor = jnp.where(s > 0, theta / jnp.where(s > 0, s, 1.0), 1.0)
    return jnp.concatenate([jnp.zeros_like(s)[..., None], factor[..., None] * vec], axis=-1)


def to_matrix(q):
    """2x2 complex matrix of a quaternion, ``w 1 - i (x sigma_1 + y sigma_2 + z sigma_3)``.

    q: (..., 4) real -> (..., 2, 2) complex128.  See conventions.QUATERNION_BASIS.
    """
    return jnp.einsum("...a,aij->...ij", jnp.asarray(q), QUATERNION_BASIS)


def from_matrix(m):
    """Quaternion of a 2x2 complex matrix ``m = w 1 - i x.sigma`` (the real-linear projection).

    Exact inverse of `to_matrix` on its image; for a general complex matrix it returns the
    quaternion part ``(1/2) Re tr(basis_a^dag m)``.  m: (..., 2, 2) -> (..., 4) float64.
    """
    m = jnp.asarray(m)
    return 0.5 * jnp.real(jnp.einsum("aij,...ij->...a", QUATERNION_BASIS.conj(), m))  # tr(b_a^dag m)


def qmat_mul(a, b):
    """Product of quaternionic matrices; a: (..., r, c, 4), b: (..., c, d, 4) -> (..., r, d, 4)."""
    return _einsum("...ija,...jkb,abc->...ikc", a, b, _C)


def qmat_transpose(a):
    """Transpose without conjugation; (..., r, c, 4) -> (..., c, r, 4)."""
    return np.swapaxes(a, -2, -3) if isinstance(a, np.ndarray) else jnp.swapaxes(jnp.asarray(a), -2, -3)


def qmat_dagger(a):
    """Quaternionic adjoint (conjugate transpose); (..., r, c, 4) -> (..., c, r, 4)."""
    return qconj(qmat_transpose(a))


def qmat_identity(n: int):
    """The ``n x n`` quaternionic identity; (n, n, 4)."""
    out = np.zeros((n, n, 4))
    out[np.arange(n), np.arange(n), 0] = 1.0
    return jnp.asarray(out)


def qmat_real_trace(a):
    """``Re tr a`` of a square quaternionic matrix; the complex trace of its image is twice this.

    a: (..., n, n, 4) -> (...).
    """
    return jnp.trace(jnp.asarray(a)[..., 0], axis1=-2, axis2=-1)


def qmat_to_complex(a):
    """Complex image of a quaternionic matrix: entry (i, j) becomes the 2x2 block (2i:2i+2, 2j:2j+2).

    a: (..., r, c, 4) real -> (..., 2r, 2c) complex128.  Products and adjoints are preserved.
    """
    a = jnp.asarray(a)
    blocks = to_matrix(a)  # (..., r, c, 2, 2)
    r, c = a.shape[-3], a.shape[-2]
    blocks = jnp.swapaxes(blocks, -3, -2)  # (..., r, 2, c, 2)
    return blocks.reshape(a.shape[:-3] + (2 * r, 2 * c))


def complex_to_qmat(m):
    """Inverse of `qmat_to_complex`: (..., 2r, 2c) complex -> (..., r, c, 4) real.

    Exact on the image of quaternionic matrices; otherwise the quaternionic projection of each block.
    """
    m = jnp.asarray(m)
    r2, c2 = m.shape[-2], m.shape[-1]
    if r2 % 2 or c2 % 2:
        raise ValueError(f"complex matrix must have even shape (2r, 2c); found {m.shape[-2:]}")
    blocks = m.reshape(m.shape[:-2] + (r2 // 2, 2, c2 // 2, 2))
    blocks = jnp.swapaxes(blocks, -3, -2)
    return from_matrix(blocks)


def _thooft(sign: float) -> np.ndarray:
    """eta_{a mu nu} ('t Hooft, Phys. Rev. D 14 (1976) 3432, eq. (A.7); equation number from memory).

    Checked by tests/test_conventions.py: the explicit entries, self-duality of eta and
    anti-self-duality of eta-bar, and the contraction identities.

    eta_{a mu nu} = eps_{a mu nu} (mu, nu <= 3), eta_{a mu 4} = +delta_{a mu}, eta_{a 4 nu} = -delta_{a nu};
    eta-bar flips the sign of the delta terms.  Returned with zero-based indices, shape (3, 4, 4).
    """
    eta = np.zeros((3, 4, 4))
    eps3 = np.zeros((3, 3, 3))
    eps3[0, 1, 2] = eps3[1, 2, 0] = eps3[2, 0, 1] = 1.0
    eps3[0, 2, 1] = eps3[2, 1, 0] = eps3[1, 0, 2] = -1.0
    eta[:, :3, :3] = eps3
    for a in range(3):
        eta[a, a, 3] = sign
        eta[a, 3, a] = -sign
    return eta


def thooft_eta() -> np.ndarray:
    """Self-dual 't Hooft symbols eta_{a mu nu}; (3, 4, 4).

    In this library's quaternions, ``e_mu e-bar_nu - e_nu e-bar_mu = -2 eta_{a mu nu} u_a`` with
    ``u = (i, j, k)`` and ``e_mu`` = conventions.E_MU.
    """
    return _thooft(1.0)


def thooft_eta_bar() -> np.ndarray:
    """Anti-self-dual 't Hooft symbols eta-bar_{a mu nu}; (3, 4, 4).

    ``e-bar_mu e_nu - e-bar_nu e_mu = -2 eta-bar_{a mu nu} u_a``.
    """
    return _thooft(-1.0)
