"""Quaternionic kernels of ADHM data and the closed-form links of charge one (floor 2, below `instantonkit.adhm.quaternionic`).

The k x k algebra the quaternionic data class uses (the real Gram matrix Re(Delta^dag Delta), real-times-
quaternionic products, an unrolled SPD solve, the quaternionic Cholesky inverse, the sigma_mu nu tensors)
and the closed form of a charge-one field's parallel transporter (`charge_one_link`; the 't Hooft
ansatz of charge one shares it, through its re-export in `instantonkit.adhm.quaternionic`).  The names without
underscore are package-internal seams of `instantonkit.adhm.quaternionic`.
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from ..core import quaternion as qt
from ..core.conventions import E_MU, point_to_quaternion

__all__ = ["charge_one_link"]


def real_gram(lam, bp):
    """Re(Delta^dag Delta)_ij = sum_{l,a} Delta_li^a Delta_lj^a, the real k x k matrix, without the imaginary parts."""
    return jnp.einsum("lia,lja->ij", lam, lam) + jnp.einsum("lia,lja->ij", bp, bp)


def real_mul(f, q):
    """Product of a real (k, k) matrix with a quaternionic (k, m, 4) matrix."""
    return jnp.einsum("ij,jma->ima", f, q)


def real_mul_left(f):
    """A real (k, k) matrix as a quaternionic one, (k, k, 4)."""
    return jnp.concatenate([f[..., None], jnp.zeros(f.shape + (3,))], axis=-1)


# -- k x k algebra of the potential ------------------------------------------------------------------

_QTABLE = [
    [(a, b, float(c)) for a in range(4) for b in range(4) if (c := np.asarray(qt.qmul(np.eye(4)[a], np.eye(4)[b]))[o])]
    for o in range(4)
]


def qmul_unrolled(p, q):
    """Quaternion product of broadcast (..., 4) arrays, written out as multiply-adds (no einsum)."""
    return jnp.stack([sum(c * p[..., a] * q[..., b] for a, b, c in terms) for terms in _QTABLE], axis=-1)


#: Largest k whose Cholesky factor is written out (larger k use jnp.linalg.solve).
_UNROLLED_K = 8


def spd_solve(g, r):
    """X with g X = r for a real symmetric positive definite (k, k) g and r (k, ...): Cholesky, then two
    triangular solves, written out over the static k (elementwise, so a vmap vectorises it)."""
    k = g.shape[0]
    if k > _UNROLLED_K:
        return jnp.linalg.solve(g, r.reshape(k, -1)).reshape(r.shape)
    lo = [[None] * k for _ in range(k)]
    for j in range(k):
        d = jnp.sqrt(g[j, j] - sum((lo[j][m] ** 2 for m in range(j)), 0.0))
        lo[j][j] = d
        for i in range(j + 1, k):
            lo[i][j] = (g[i, j] - sum((lo[i][m] * lo[j][m] for m in range(j)), 0.0)) / d
    y = []
    for i in range(k):
        y.append((r[i] - sum((lo[i][m] * y[m] for m in range(i)), 0.0)) / lo[i][i])
    xs = [None] * k
    for i in reversed(range(k)):
        xs[i] = (y[i] - sum((lo[m][i] * xs[m] for m in range(i + 1, k)), 0.0)) / lo[i][i]
    return jnp.stack(xs)


def _make_sigma(chirality: int) -> np.ndarray:
    e = E_MU
    eb = np.asarray(qt.qconj(e))
    if chirality == 1:
        s = np.asarray(qt.qmul(e[:, None], eb[None, :]))
    else:
        s = np.asarray(qt.qmul(eb[:, None], e[None, :]))
    return s - np.swapaxes(s, 0, 1)


_SIGMA = {1: _make_sigma(1), -1: _make_sigma(-1)}


def sigma_munu(chirality: int) -> np.ndarray:
    """sigma_mu nu as quaternions, (4, 4, 4): e_mu e-bar_nu - e_nu e-bar_mu (or e-bar_mu e_nu - e-bar_nu e_mu)."""
    return _SIGMA[chirality]


def quat_cholesky_inverse(gram):
    """L^-1 for gram = L L^dag, quaternionic Hermitian positive (n, n, 4) -> lower-triangular (n, n, 4).

    Quaternionic Cholesky (real positive diagonal), then forward substitution; plain loops over the
    small static n, so it is differentiable where gram is positive definite.
    """
    n = gram.shape[0]
    if n == 1:
        return jnp.zeros((1, 1, 4)).at[0, 0, 0].set(1.0 / jnp.sqrt(gram[0, 0, 0]))
    lo = [[jnp.zeros(4) for _ in range(n)] for _ in range(n)]
    for j in range(n):
        d = gram[j, j, 0] - sum((qt.qnorm2(lo[j][m]) for m in range(j)), 0.0)
        ljj = jnp.sqrt(d)
        lo[j][j] = jnp.zeros(4).at[0].set(ljj)
        for i in range(j + 1, n):
            acc = gram[i, j] - sum((qt.qmul(lo[i][m], qt.qconj(lo[j][m])) for m in range(j)), jnp.zeros(4))
            lo[i][j] = acc / ljj
    inv = [[jnp.zeros(4) for _ in range(n)] for _ in range(n)]
    for i in range(n):
        inv[i][i] = jnp.zeros(4).at[0].set(1.0 / lo[i][i][0])
        for j in range(i):
            acc = sum((qt.qmul(lo[i][m], inv[m][j]) for m in range(j, i)), jnp.zeros(4))
            inv[i][j] = -acc / lo[i][i][0]
    return jnp.stack([jnp.stack(row) for row in inv])


# -- the closed-form link of charge 1 (package seam: ADHMData.closed_link, ansatz.BPSTField.closed_link) --

#: Below this ratio sqrt(disc) / |w| the arctan quotient is replaced by its two-term series
#: (the relative error of the series, ~(s/w)^4 / 5, is then below 1e-24; the quotient would lose digits).
_SERIES_RATIO = 1e-6


def _line_integral(alpha, beta, gamma, wedge2, c):
    """Integral_0^1 dt / (alpha t^2 + beta t + gamma + c) for alpha t^2 + beta t + gamma = |y0 + t d|^2.

    alpha = |d|^2, beta = 2 y0.d, gamma = |y0|^2, wedge2 = |y0 ^ d|^2 = alpha gamma - (y0.d)^2 >= 0.
    With disc = 4 alpha (gamma + c) - beta^2 = 4 (wedge2 + alpha c) (no cancellation) the integral is
    2 atan2(sqrt(disc), 2 (gamma + c) + beta) / sqrt(disc) (the arctan antiderivative with the
    difference of two arctans folded into one atan2), and 2 / (2 (gamma + c) + beta) as disc -> 0.
    Infinite when the segment meets a zero of the denominator (a singular point of the field).
    """
    s = jnp.sqrt(4.0 * (wedge2 + alpha * c))
    w = 2.0 * (gamma + c) + beta
    small = s <= _SERIES_RATIO * jnp.abs(w)
    safe_s = jnp.where(small, 1.0, s)
    safe_w = jnp.where(w == 0, 1.0, w)
    series = 2.0 / safe_w * (1.0 - (s / safe_w) ** 2 / 3.0)  # atan2(s, w) / s for s << w > 0
    series = jnp.where(w > 0, series, jnp.inf)
    return jnp.where(small, series, 2.0 * jnp.arctan2(s, w) / safe_s)


def charge_one_link(lam, b, chirality: int, gauge: str, x, d):
    """Exact transporter of a charge-1 SU(2) instanton (BPST, either gauge) along x -> x + d; (2, 2) complex128.

    Package-internal seam (not in ``__all__``): the one formula behind the ``closed_link`` hooks of
    `ADHMData` (k = n = 1) and ``ansatz.BPSTField``.  lam: Lambda (4,) quaternion, b: B (4,)
    quaternion, chirality: +1 / -1, gauge: 'regular' / 'singular', x, d: (4,) start and displacement.

    For k = 1, n = 1 the ADHM frame gives, with y = p(x) - B (p-bar(x) for chirality -1),
    rho = |Lambda| and l = Lambda / rho (derivation from the frame of this module):

        regular gauge:  A = l Im(y dy-bar) l-bar / (|y|^2 + rho^2),
        singular gauge: A = l Im(y-bar dy) l-bar rho^2 / (|y|^2 (|y|^2 + rho^2))

    (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85; 't Hooft, Phys. Rev. D 14
    (1976) 3432, in quaternion form).  On the straight line y = y0 + t dq the imaginary quaternion
    Im(y dy-bar/dt) = Im(y0 dq-bar) (resp. Im(y-bar dy/dt) = Im(y0-bar dq)) does not depend on t, so all
    A(z(t)) commute and U = exp(l M l-bar * integral of the scalar factor), an arctan closed form.
    """
    rho2 = jnp.sum(lam**2)
    lhat = lam / jnp.sqrt(rho2)
    px, pd = point_to_quaternion(jnp.asarray(x)), point_to_quaternion(jnp.asarray(d))
    if chirality == -1:
        px, pd = qt.qconj(px), qt.qconj(pd)
    y0 = px - b
    alpha, beta, gamma = jnp.sum(pd**2), 2.0 * jnp.sum(y0 * pd), jnp.sum(y0**2)
    wedge = y0[:, None] * pd[None, :] - y0[None, :] * pd[:, None]
    wedge2 = 0.5 * jnp.sum(wedge**2)
    if gauge == "regular":
        gen = qt.qmul(y0, qt.qconj(pd))
        scalar = _line_integral(alpha, beta, gamma, wedge2, rho2)
    else:
        gen = qt.qmul(qt.qconj(y0), pd)
        scalar = _line_integral(alpha, beta, gamma, wedge2, 0.0) - _line_integral(alpha, beta, gamma, wedge2, rho2)
    gen = gen.at[0].set(0.0)
    omega = qt.qmul(qt.qmul(lhat, gen), qt.qconj(lhat)) * scalar
    return qt.to_matrix(qt.qexp(omega))
