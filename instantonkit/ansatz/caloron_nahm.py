"""The potential of a charge-1 SU(N) caloron by the Nahm transform of piecewise-constant Nahm data.

Derivation (ours; the set-up of the caloron's Nahm transform is Kraan, van Baal, Nucl. Phys. B 533 (1998)
627 and Phys. Lett. B 435 (1998) 389, and Lee, Lu, Phys. Rev. D 58 (1998) 025011, from memory).
Conventions: `instantonkit.core.conventions` (anti-Hermitian A, the point x as the 2 x 2 matrix
x4 + i x.sigma).

*ADHM data on the dual circle.*  The ADHM operator of a caloron of period beta with holonomy mu_1 <= ...
<= mu_N acts on C^N + L^2(S^1, C^2), where S^1 is the dual circle xi in [0, 2 pi / beta) with the inner
product  <(u, v), (u', v')> = u^dag u' + int v^dag v' dxi:

    Delta_x^dag (u, v) = sum_m delta(xi - xi_m) w_m u_m + (B - x)^dag v,
    B - x = (-i d/dxi - x4) + i (y(xi) - x_vec).sigma,   xi_m = 2 pi mu_m / beta,

with Nahm data y(xi) = y_m (the constituent positions) on the interval m, (xi_m, xi_{m+1}) of length
L_m = 2 pi nu_m / beta, and w_m in C^2 at the jump from y_{m-1} to y_m.  With a = y - x_vec,
(B - x)^dag (B - x) = (-i d/dxi - x4)^2 + |a|^2 + a'.sigma and a' = sum_m (y_m - y_{m-1}) delta(xi - xi_m),
so the ADHM condition (Delta^dag Delta commutes with the quaternions) asks

    w_m w_m^dag + (y_m - y_{m-1}).sigma  proportional to 1,   i.e.   w_m w_m^dag = |dy_m| (1 - dy_m.sigma/|dy_m|),

dy_m = y_m - y_{m-1}: w_m is sqrt(2 |dy_m|) times the unit spinor with (dy_m.sigma) w = -|dy_m| w (its
phase is a constant gauge choice).  Tested, not assumed: the field this gives is self-dual and its
action density is Kraan-van Baal's -1/2 box box log psi (tests/test_caloron_nahm.py).

*Zero modes.*  Delta_x^dag (u, v) = 0 reads, inside interval m, v' = (i x4 + r_m.sigma) v with
r_m = x_vec - y_m, and at xi_m the jump v(xi_m+) - v(xi_m-) = i w_m u_m.  On interval m we write
v = exp(i x4 s) Y_m(s) c_m, s = xi - xi_m, with the bounded fundamental solution

    Y_m(s) = exp((s - L_m/2) R_m) / cosh(a_m L_m / 2),   R_m = r_m.sigma,  a_m = |r_m|,

so Y_m(0) = 1 - tanh(a L/2) R/a and Y_m(L) = 1 + tanh(a L/2) R/a: every entry is at most 1 (no
exponential growth far from the constituents: the grown and the decayed parts of v are carried by the
two ends of the interval, not propagated through it).  The jump conditions are 2N linear equations
for the c_m (C^2 each) given u:

    Y_m(0) c_m - exp(i x4 L_{m-1}) Y_{m-1}(L_{m-1}) c_{m-1} = i w_m u_m     (m cyclic),

solved for u = e_1, ..., e_N (Gaussian elimination with partial pivoting written out in jax operations,
like the Cholesky factor below: LAPACK calls inside the vmapped lattice kernels were seen to hang
intermittently on the shared machine); this gives N zero modes U_0 = (1_N; v), a frame of the zero-mode space
wherever no zero mode has u = 0 (where that happens, generically on a set of measure zero, the frame
and hence the gauge below is singular; the field strength is not).

*Potential.*  With the Gram matrix G = U_0^dag U_0 = 1 + sum_m c_m^dag I_m c_m and its Cholesky factor
G = L L^dag, U = U_0 L^-dag is orthonormal and A_mu = U^dag d_mu U (ADHM).  With K_mu = U_0^dag d_mu U_0
and K~ = L^-1 K L^-dag, the derivative of the Cholesky factor, d L = L Phi(L^-1 dG L^-dag) (Phi: the strict
lower triangle plus half the diagonal) and dG = K + K^dag give

    A_mu = K~_mu - Phi(K~_mu + K~_mu^dag)^dag,

anti-Hermitian by construction.  K_mu = sum_m c_m^dag (I_m d_mu c_m + D_m,mu c_m) with the integrals over
the interval (z = a L/2, tau = tanh z, q1 = tau/z, h1 = (z (1 + tau^2) - tau)/z^3, h2 = (tau - z (1 - tau^2))/z^3,
entire in z^2, Taylor series for small z):

    I   = int Y^2 ds                  = L q1,
    D_4 = int Y (i s) Y ds            = i (L^2 q1 / 2 + (L/2)^3 h1 R),
    D_j = int Y d_j Y ds              = -(L^3/4) q1^2 r_j + (L/2)^3 (h1 r_j - h2 (sigma_j R - r_j)),

from d_j exp(sR) = int_0^1 exp(u s R) s sigma_j exp((1-u) s R) du, split into the part of sigma_j along
R (commuting) and the rest (anticommuting with R); d_mu c_m comes from jax.jacfwd of the linear solve.

*Gauge.*  x4 -> x4 + beta multiplies v by exp(i beta xi), a unitary map of the zero-mode space, which
sends u to P u, P = diag exp(2 pi i mu_m): A(x + beta e_4) = P A(x) P^dag.  The gauge transformation
g = diag exp(-2 pi i mu_m x4 / beta) makes the field periodic: A' = g A g^dag + diag(2 pi i mu / beta) dx4,
so far from the constituents (A -> 0) A'_4 -> 2 pi i diag(mu) / beta and the Polyakov loop tends to
diag exp(2 pi i mu_m).  The U(1) part tr A is flat (tr F = 0) and its loop around x4 is trivial, so we
remove it, A'' = A' - tr(A')/N (a periodic gauge transformation by a phase): the result is traceless.
"""

from __future__ import annotations

from fractions import Fraction

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core.conventions import PI

__all__ = ["nahm_jump_vectors", "caloron_potential_point", "caloron_potential"]

_SIGMA = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]], dtype=np.complex128)

#: Taylor coefficients in z^2 of tanh(z)/z, (z (1 + tanh^2 z) - tanh z)/z^3 and (tanh z - z (1 - tanh^2 z))/z^3
#: (sympy's series, exact fractions); the series serve for z < `_SERIES_BELOW` (tanh's radius is pi/2, so
#: 13 terms at z^2 < 1/16 leave < 1e-20).
_Q1 = [Fraction(1), Fraction(-1, 3), Fraction(2, 15), Fraction(-17, 315), Fraction(62, 2835)]
_Q1 += [Fraction(-1382, 155925), Fraction(21844, 6081075), Fraction(-929569, 638512875)]
_Q1 += [Fraction(6404582, 10854718875), Fraction(-443861162, 1856156927625)]
_Q1 += [Fraction(18888466084, 194896477400625), Fraction(-113927491862, 2900518163668125)]
_Q1 += [Fraction(58870668456604, 3698160658676859375)]
_SERIES_BELOW = 0.25


def _h_series(q1):
    """Coefficients of h1 and h2 from those of tanh(z)/z = sum_k q_k z^(2k) (exact fractions).

    tanh = z Q(w), w = z^2: h1 = (1 + w Q^2 - Q)/w, h2 = (Q - 1 + w Q^2)/w (from the definitions).
    """
    n = len(q1)
    q2 = [sum(q1[i] * q1[k - i] for i in range(k + 1)) for k in range(n)]
    wq2 = [Fraction(0)] + q2[: n - 1]
    one = [Fraction(1)] + [Fraction(0)] * (n - 1)
    h1 = [(one[k] + wq2[k] - q1[k]) for k in range(n)]
    h2 = [(q1[k] - one[k] + wq2[k]) for k in range(n)]
    return [float(c) for c in h1[1:]], [float(c) for c in h2[1:]]


_H1, _H2 = _h_series(_Q1)
_Q1F = [float(c) for c in _Q1]


def _horner(coef, w):
    out = jnp.zeros_like(w) + coef[-1]
    for c in coef[-2::-1]:
        out = out * w + c
    return out


def _interval_functions(z2):
    """(q1, h1, h2) of z = a L / 2 >= 0 from z2 = z^2: tanh(z)/z and the two cubic remainders (module docstring).

    Functions of z^2 (no square root at a constituent, so derivatives stay finite there).
    """
    small = z2 < _SERIES_BELOW**2
    w = jnp.where(small, z2, 0.0)
    zl = jnp.sqrt(jnp.where(small, 1.0, z2))
    tau = jnp.tanh(zl)
    big = (tau / zl, (zl * (1.0 + tau * tau) - tau) / zl**3, (tau - zl * (1.0 - tau * tau)) / zl**3)
    ser = (_horner(_Q1F, w), _horner(_H1, w), _horner(_H2, w))
    return tuple(jnp.where(small, s, b) for s, b in zip(ser, big))


def nahm_jump_vectors(positions):
    """The rank-one jump data w_m (N, 2) complex: w_m w_m^dag = |dy| - dy.sigma, dy = y_m - y_{m-1} (cyclic).

    w_m is sqrt(2 |dy|) times the unit eigenvector of dy.sigma of eigenvalue -|dy| (module docstring);
    of the two closed forms of that eigenvector the one of larger norm is taken (a constant phase
    choice).  positions: (N, 3) with consecutive constituents distinct.
    """
    y = jnp.asarray(positions, dtype=jnp.float64)
    dy = y - jnp.roll(y, 1, axis=0)
    d = jnp.linalg.norm(dy, axis=-1)
    n = dy / d[:, None]
    first = jnp.stack([n[:, 0] - 1j * n[:, 1], -(1.0 + n[:, 2]) + 0j], axis=-1)
    second = jnp.stack([(1.0 - n[:, 2]) + 0j, -(n[:, 0] + 1j * n[:, 1])], axis=-1)
    w = jnp.where((n[:, 2] < 0.0)[:, None], second, first)
    return w / jnp.linalg.norm(w, axis=-1, keepdims=True) * jnp.sqrt(2.0 * d)[:, None]


def _solve(mat, rhs):
    """mat^-1 rhs for a small (n, n) complex matrix, Gaussian elimination with partial pivoting, unrolled.

    Plain jax operations (no LAPACK call): vmapped inside the lattice kernels it stays within XLA.
    """
    n = mat.shape[0]
    a = jnp.concatenate([mat, rhs], axis=1)
    rows = jnp.arange(n)
    for k in range(n):
        piv = jnp.argmax(jnp.where(rows >= k, jnp.abs(a[:, k]), -1.0))
        rk, rp = a[k], a[piv]
        a = a.at[piv].set(rk).at[k].set(rp)
        factor = jnp.where(rows > k, a[:, k] / a[k, k], 0.0)
        a = a - factor[:, None] * a[k][None, :]
    x = [None] * n
    for k in range(n - 1, -1, -1):
        acc = a[k, n:]
        for j in range(k + 1, n):
            acc = acc - a[k, j] * x[j]
        x[k] = acc / a[k, k]
    return jnp.stack(x)


def _cholesky_inverse(gram):
    """L^-1 for the Cholesky factor L (lower, positive diagonal) of a small Hermitian positive (n, n) matrix; unrolled."""
    n = gram.shape[0]
    low = [[jnp.zeros((), dtype=gram.dtype) for _ in range(n)] for _ in range(n)]
    for j in range(n):
        d = gram[j, j] - sum((low[j][k] * jnp.conj(low[j][k]) for k in range(j)), jnp.zeros((), gram.dtype))
        low[j][j] = jnp.sqrt(jnp.real(d)).astype(gram.dtype)
        for i in range(j + 1, n):
            off = gram[i, j] - sum((low[i][k] * jnp.conj(low[j][k]) for k in range(j)), jnp.zeros((), gram.dtype))
            low[i][j] = off / low[j][j]
    inv = [[jnp.zeros((), dtype=gram.dtype) for _ in range(n)] for _ in range(n)]
    for j in range(n):
        inv[j][j] = 1.0 / low[j][j]
        for i in range(j + 1, n):
            acc = sum((low[i][k] * inv[k][j] for k in range(j, i)), jnp.zeros((), gram.dtype))
            inv[i][j] = -acc / low[i][i]
    return jnp.stack([jnp.stack(row) for row in inv])


def _coefficients(x, positions, lengths, w):
    """c (N, 2, N): the interval coefficients of the N zero modes (column k: u = e_k) at x (4,).

    Solves the 2N jump conditions of the module docstring, Y_m(0) c_m - e^{i x4 L_{m-1}} Y_{m-1}(L) c_{m-1}
    = i w_m u_m, for the N right-hand sides at once.
    """
    n = positions.shape[0]
    r = x[:3] - positions  # (N, 3)
    q1, _, _ = _interval_functions(0.25 * lengths**2 * jnp.sum(r * r, axis=-1))
    rs = jnp.einsum("mi,ijk->mjk", r.astype(jnp.complex128), _SIGMA)  # R_m (N, 2, 2)
    half = (0.5 * lengths * q1)[:, None, None] * rs
    eye = jnp.eye(2, dtype=jnp.complex128)
    start, end = eye - half, eye + half
    phase = jnp.exp(1j * x[3] * lengths)
    mat = jnp.zeros((n, 2, n, 2), dtype=jnp.complex128)
    idx = jnp.arange(n)
    mat = mat.at[idx, :, idx, :].set(start)
    prev = (idx - 1) % n
    mat = mat.at[idx, :, prev, :].add(-phase[prev][:, None, None] * end[prev])
    rhs = jnp.zeros((n, 2, n), dtype=jnp.complex128).at[idx, :, idx].set(1j * w)
    sol = _solve(mat.reshape(2 * n, 2 * n), rhs.reshape(2 * n, n))
    return sol.reshape(n, 2, n)


def _split(f):
    """f: R^4 -> complex array, as a real-valued pair for jax.jacfwd."""
    return lambda x: (jnp.real(f(x)), jnp.imag(f(x)))


def _adhm_gauge_potential(x, positions, lengths, w):
    """A_mu (4, N, N) = U^dag d_mu U at x (4,) in the Cholesky frame (not periodic; module docstring)."""
    n = positions.shape[0]
    c = _coefficients(x, positions, lengths, w)
    dre, dim = jax.jacfwd(_split(lambda p: _coefficients(p, positions, lengths, w)))(x)
    dc = jnp.moveaxis(dre + 1j * dim, -1, 0)  # (4, N, 2, N)
    r = x[:3] - positions
    half_l = 0.5 * lengths
    q1, h1, h2 = _interval_functions(half_l**2 * jnp.sum(r * r, axis=-1))
    rs = jnp.einsum("mi,ijk->mjk", r.astype(jnp.complex128), _SIGMA)
    eye = jnp.eye(2, dtype=jnp.complex128)
    gram_w = lengths * q1  # I_m (N,)
    cube = half_l**3
    d4 = 1j * ((0.5 * lengths**2 * q1)[:, None, None] * eye + (cube * h1)[:, None, None] * rs)
    sig_r = jnp.einsum("ijk,mkl->imjl", _SIGMA, rs)  # sigma_j R_m: (3, N, 2, 2)
    rj = jnp.moveaxis(r, -1, 0)[:, :, None, None]  # (3, N, 1, 1)
    dj = (-(lengths**3) / 4.0 * q1**2)[None, :, None, None] * rj * eye
    dj = dj + cube[None, :, None, None] * (
        h1[None, :, None, None] * rj * eye - h2[None, :, None, None] * (sig_r - rj * eye)
    )
    dmat = jnp.concatenate([dj, d4[None]], axis=0)  # (4, N, 2, 2)
    cc = jnp.conj(c)
    gram = jnp.eye(n, dtype=jnp.complex128) + jnp.einsum("m,mak,mal->kl", gram_w, cc, c)
    k = jnp.einsum("m,mak,umal->ukl", gram_w, cc, dc) + jnp.einsum("mak,umab,mbl->ukl", cc, dmat, c)
    inv = _cholesky_inverse(gram)
    kt = inv @ k @ jnp.conj(inv).T
    s = kt + jnp.conj(jnp.swapaxes(kt, -1, -2))
    diag = jnp.diagonal(s, axis1=-2, axis2=-1)
    phi = jnp.tril(s, -1) + 0.5 * diag[..., None] * jnp.eye(n)
    return kt - jnp.conj(jnp.swapaxes(phi, -1, -2))


def caloron_potential_point(x, positions, holonomy, period, time=0.0):
    """A_mu (4, N, N) complex128 of the charge-1 SU(N) caloron at one point x (4,), periodic gauge.

    positions: (N, 3) constituent positions y_m; holonomy: mu (N,) ascending, summing to 0; period: beta;
    time: t0, the x4 origin (psi's cos(2 pi (x4 - t0)/beta)).  Traceless, anti-Hermitian, periodic in x4
    with period beta, A_4 -> 2 pi i diag(mu) / beta far from the constituents (module docstring).
    Unchecked (the field `instantonkit.ansatz.calorons_sun.SUNCaloronField` checks its parameters);
    jit- and vmap-able.
    """
    y = jnp.asarray(positions, dtype=jnp.float64)
    mu = jnp.asarray(holonomy, dtype=jnp.float64)
    beta = jnp.asarray(period, dtype=jnp.float64)
    n = y.shape[0]
    lengths = 2.0 * PI * jnp.append(jnp.diff(mu), 1.0 + mu[0] - mu[-1]) / beta
    t = jnp.asarray(x, dtype=jnp.float64)[3] - time
    local = jnp.concatenate([jnp.asarray(x, dtype=jnp.float64)[:3], t[None]])
    a = _adhm_gauge_potential(local, y, lengths, nahm_jump_vectors(y))
    g = jnp.exp(-2j * PI * mu * t / beta)
    a = g[None, :, None] * a * jnp.conj(g)[None, None, :]
    a = a.at[3].add(jnp.diag(2j * PI * mu / beta))
    return a - (jnp.trace(a, axis1=-2, axis2=-1) / n)[:, None, None] * jnp.eye(n)


def constituent_positions(positions, n: int, why: str = "") -> np.ndarray:
    """The N constituent positions y_m, (N, 3) float64, checked: real, finite, one per eigenphase, no two equal.

    Raises ValueError naming the shape found or the first coincident pair (y_a = y_b = value), with ``why``
    (why coincident constituents are refused) after "must be distinct"."""
    y = _validate.real_array("positions", positions, (n, 3), shape_text=f"({n}, 3), one per eigenphase")
    dist = np.linalg.norm(y[:, None] - y[None, :], axis=-1) + np.diag(np.full(n, np.inf))
    a, b = np.unravel_index(np.argmin(dist), dist.shape)
    if not dist[a, b] > 0:
        raise ValueError(
            f"constituent positions must be distinct{why}; found y_{min(a, b) + 1} = y_{max(a, b) + 1} = {y[a].tolist()}"
        )
    return y


def _checked(points, positions, holonomy, period, time):
    """The arguments of `caloron_potential` checked (ValueError / TypeError naming the value) as numpy arrays."""
    pts = np.asarray(points)
    if not _validate.is_tracer(points):
        pts = _validate.real_array("points", points)
        if pts.ndim < 1 or pts.shape[-1] != 4:
            raise ValueError(f"points must have shape (..., 4); found {pts.shape}")
    mu = _validate.real_array("holonomy", holonomy, (None,), shape_text="(N,) with N >= 2")
    n = mu.shape[0]
    if n < 2 or np.any(np.diff(mu) < -1e-12) or abs(float(mu.sum())) > 1e-12 * max(1.0, float(np.abs(mu).sum())):
        raise ValueError(
            f"holonomy must hold N >= 2 ascending eigenphases mu_m summing to 0; found {mu.tolist()} (sum {mu.sum()!r})"
        )
    if mu[-1] - mu[0] > 1.0 + 1e-12:
        raise ValueError(f"holonomy eigenphases must satisfy mu_N - mu_1 <= 1; found {float(mu[-1] - mu[0])!r}")
    y = constituent_positions(positions, n, " (the Nahm data's jump would vanish)")
    return pts, y, mu, _validate.positive_float("period", period), _validate.finite_float("time", time)


def caloron_potential(points, positions, holonomy, period, time=0.0):
    """A_mu of the charge-1 SU(N) caloron at a batch of points, in its periodic gauge.

    Args:
      points: (..., 4) float64 points.
      positions: (N, 3) distinct constituent positions y_m.
      holonomy: (N,) eigenphases mu_m, ascending, summing to 0, mu_N - mu_1 <= 1.
      period: beta > 0.
      time: t0, the caloron's x4 origin.
    Returns:
      (..., 4, N, N) complex128 jax array (`caloron_potential_point` vmapped over the points).
    Raises:
      ValueError / TypeError naming a bad value (checked when the arguments are concrete, not under tracing).
    """
    if not _validate.is_tracer(positions, holonomy, period, time):
        points, positions, holonomy, period, time = _checked(points, positions, holonomy, period, time)
    pts = jnp.asarray(points, dtype=jnp.float64)
    flat = pts.reshape(-1, 4)
    out = jax.vmap(lambda p: caloron_potential_point(p, positions, holonomy, period, time))(flat)
    return out.reshape(pts.shape[:-1] + out.shape[1:])
