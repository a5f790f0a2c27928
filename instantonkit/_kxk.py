"""Batch-major k x k kernels of ADHM densities: the points on the last axis, so XLA vectorises across them.

Used by :meth:`instantonkit.adhm.ADHMData.density_batch` (the engine's ``density_batch`` hook).  The
formulas are those of ``ADHMData.action_density`` (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys.
B 159 (1979) 469, from memory), rearranged so that each point costs a Cholesky factor of the real
Gram matrix Delta^dag Delta and triangular solves instead of inverses, and O(k^2) work for SU(2)
beyond that (see :func:`s_rank_one`).  Quaternion products use the units of
:data:`instantonkit.conventions.QUATERNION_BASIS`.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from .conventions import QUATERNION_BASIS

__all__ = ["action_density_batch", "BLOCK"]


def _structure_constants() -> np.ndarray:
    """C[a, b, c] with e_a e_b = sum_c C[a, b, c] e_c, read off the 2 x 2 images of the units (conventions)."""
    basis = QUATERNION_BASIS
    prod = np.einsum("aij,bjk->abik", basis, basis)  # images of e_a e_b
    return np.rint(0.5 * np.real(np.einsum("cji,abjk->abc", basis.conj(), prod)))  # (1/2) tr(e_c^dag e_a e_b)


_C = _structure_constants()

#
# Layout: a real k x k matrix at b points is (k, k, b); a quaternionic one is (4, k, k, b) (component
# first).  Every product is a short Python loop of broadcast multiply-adds over the small axis, which
# XLA fuses into loops over the contiguous batch axis; the Cholesky factor and triangular solves are
# fori_loops over the k columns (a small traced graph whatever k).

#: Points per block of the batched kernels: the (4, k, k, block) intermediates stay in cache.
BLOCK = 1024

#: E^c[d, e] with (u v-bar)_c = sum_{d,e} u_d v_e E^c[d, e] (c = 0: the real part), (4, 4, 4).
_E = np.einsum("dec,e->cde", _C, np.array([1.0, -1.0, -1.0, -1.0]))


def lead_sum(x):
    """Sum over every axis but the last (the points) -> (nb,)."""
    return jnp.sum(x.reshape(-1, x.shape[-1]), axis=0)


def p_last(pts, chirality: int):
    """Quaternions p(x) (or p-bar(x)) of points (b, 4) as (4, b): p = (x4, -x1, -x2, -x3) (conventions)."""
    x = pts.T
    sign = 1.0 if chirality == -1 else -1.0
    return jnp.stack([x[3], sign * x[0], sign * x[1], sign * x[2]])


def bp_last(b, p):
    """B - p 1_k at b points: b (k, k, 4), p (4, nb) -> (4, k, k, nb)."""
    k = b.shape[0]
    eye = jnp.eye(k)[None, :, :, None]
    return jnp.moveaxis(jnp.asarray(b), -1, 0)[..., None] - eye * p[:, None, None, :]


def gram_last(lam, bp):
    """Re(Delta^dag Delta)_ij = sum_{l,c} Lambda^c_li Lambda^c_lj + sum_{l,c} bp^c_li bp^c_lj -> (k, k, nb)."""
    const = jnp.einsum("lic,ljc->ij", lam, lam)[..., None]
    return const + sum(bp[c, m, :, None] * bp[c, m, None, :] for c in range(4) for m in range(bp.shape[1]))


def cholesky_last(g):
    """Lower L with g = L L^T for SPD g (k, k, nb) (LAPACK's batched potrf through jnp.linalg.cholesky).

    Unrolled loops over k vectorise as well but trace k^3 / 6 operations; the library call keeps the
    compiled graph small (first calls) at about the same speed.
    """
    if g.shape[0] == 1:
        return jnp.sqrt(g)
    return jnp.moveaxis(jnp.linalg.cholesky(jnp.moveaxis(g, -1, 0)), 0, -1)


def solve_lower(lo, x):
    """Y with L Y = X; lo (k, k, nb) lower, x (k, m, nb) -> (k, m, nb) (forward substitution, unrolled)."""
    k = lo.shape[0]
    ys = []
    for i in range(k):
        acc = x[i]
        for j in range(i):
            acc = acc - lo[i, j][None] * ys[j]
        ys.append(acc / lo[i, i][None])
    return jnp.stack(ys)


def solve_upper_t(lo, x):
    """Y with L^T Y = X; lo (k, k, nb) lower, x (k, m, nb) -> (k, m, nb) (back substitution, unrolled)."""
    k = lo.shape[0]
    ys = [None] * k
    for i in reversed(range(k)):
        acc = x[i]
        for j in range(i + 1, k):
            acc = acc - lo[j, i][None] * ys[j]
        ys[i] = acc / lo[i, i][None]
    return jnp.stack(ys)


def qmatmul_last(a, v):
    """Quaternionic (A V)_im = sum_j A_ij V_jm; a (4, k, k, nb), v (4, k, m, nb) -> (4, k, m, nb) (Hamilton 1843)."""
    r = sum(
        a[:, None, :, j, None] * v[None, :, j, None] for j in range(a.shape[2])
    )  # r[d, e] = A^d V^e, (4, 4, k, m, nb)
    return jnp.stack([sum(_C[d, e, c] * r[d, e] for d in range(4) for e in range(4) if _C[d, e, c]) for c in range(4)])


def s_from_k(kk):
    """s = 48 tr(K K) + 16 sum_a tr(K E^a K E^a) for K = U^T f U (4, 4, nb) of a rank-one M = u u^dag."""
    s = 48.0 * lead_sum(kk * kk)
    for a in (1, 2, 3):
        ke = sum(kk[:, d, None] * _E[a][d][None, :, None] for d in range(4) if np.any(_E[a][d]))  # K E^a
        s = s + 16.0 * lead_sum(ke * jnp.swapaxes(ke, 0, 1))
    return s


def s_rank_one(lam, bp, lo):
    """s of SU(2) data (n = 1) at nb points, from a rank-one factor of M; (nb,).

    M = b^dag P b = u u^dag has rank one (P = 1 - Delta f Delta^dag = U U^dag, n = 1), so with
    K = U^T f U (U the real k x 4 matrix of u) s = 48 tr(f M0 f M0) + 16 sum_a tr(f M^a f M^a) =
    48 tr(K K) + 16 sum_a tr(K E^a K E^a), and u is read off one column of P: for v = e_j,
    M = w phi^-1 w^dag with w = b^dag P v = b^dag v - (B - p) f Delta^dag v and phi = v^dag P v = P_jj.
    Each point takes the column with the largest P_jj: the diagonal of the rank-one projector sums to
    tr P = 1 over n + k = 1 + k entries, so phi >= 1 / (1 + k) and the cancellation in
    phi = 1 - |L^-1 Delta^dag e_j|^2 costs at most a factor 1 + k of rounding, at every point.
    Work: L^-1 Delta^dag (2 k^3) and O(k^2) for the rest.
    """
    conj = jnp.array([1.0, -1.0, -1.0, -1.0])
    k, nb = bp.shape[1], bp.shape[-1]
    lamd = jnp.moveaxis(lam[0], -1, 0) * conj[:, None]  # Lambda^dag, (4, k)
    cols = jnp.concatenate(  # Delta^dag e_j, j = 0 .. k: [Lambda^dag | (B - p)^dag], (4, k, 1 + k, nb)
        [jnp.broadcast_to(lamd[:, :, None, None], (4, k, 1, nb)), jnp.swapaxes(bp, 1, 2) * conj[:, None, None, None]],
        axis=2,
    )
    y = solve_lower(lo, jnp.moveaxis(cols, 0, 1).reshape(k, 4 * (1 + k), nb)).reshape(k, 4, 1 + k, nb)
    pdiag = 1.0 - jnp.sum(y * y, axis=(0, 1))  # P_jj, (1 + k, nb)
    pick = (jnp.arange(1 + k)[:, None] == jnp.argmax(pdiag, axis=0)[None]).astype(y.dtype)  # one-hot
    ysel = jnp.sum(y * pick[None, None], axis=2)  # L^-1 Delta^dag v, (k, 4, nb)
    phi = jnp.max(pdiag, axis=0)
    g = jnp.swapaxes(solve_upper_t(lo, ysel), 0, 1)  # f Delta^dag v, (4, k, nb)
    w = -qmatmul_last(bp, g[:, :, None])[:, :, 0]  # -(B - p) f Delta^dag v
    w = w.at[0].add(pick[1:])  # + b^dag v (real)
    z = solve_lower(lo, jnp.swapaxes(w, 0, 1))  # (k, 4, nb) = L^-1 W
    kk = sum(z[i, :, None] * z[i, None, :] for i in range(k)) / phi[None, None]
    return s_from_k(kk)


def s_exact(bp, lo):
    """s from k x k work for any n, O(k^3) per point; (nb,).

    With f = L^-T L^-1 and M = 1 - (B - p) f (B - p)^dag, s = 48 tr(f M0 f M0) + 16 sum_a tr(f M^a f M^a)
    (M0, M^a the real and imaginary parts; the 16 Re tr GG + 32 Re tr G*G of action_density in real
    form), and tr(f X f X) = +-|A|^2 for A = L^-1 X L^-T with X symmetric / antisymmetric, so
    s = 48 |A^0|^2 - 16 sum_a |A^a|^2 with A = L^-1 L^-T - Z Z^dag, Z = L^-1 (B - p) L^-T.
    """
    k, nb = bp.shape[1], bp.shape[-1]
    eye = jnp.broadcast_to(jnp.eye(k)[..., None], (k, k, nb))
    linv = solve_lower(lo, eye)  # L^-1
    # Z^c = L^-1 bp^c L^-T: solve for (L^-1 bp^cT)^T = bp^c L^-T, then L^-1 of that
    bpt = jnp.concatenate([jnp.swapaxes(bp[c], 0, 1) for c in range(4)], axis=1)  # (k, 4k, nb)
    x = solve_lower(lo, bpt)  # L^-1 bp^cT, column block c
    x = jnp.concatenate([jnp.swapaxes(x[:, c * k : (c + 1) * k], 0, 1) for c in range(4)], axis=1)
    z = solve_lower(lo, x)  # (k, 4k, nb): block c is Z^c
    zc = [z[:, c * k : (c + 1) * k] for c in range(4)]
    s_mat = sum(linv[:, None, m] * linv[None, :, m] for m in range(k))  # L^-1 L^-T
    zs = jnp.stack(zc)  # (4, k, k, nb)
    pcd = sum(zs[:, None, :, None, m] * zs[None, :, None, :, m] for m in range(k))  # P^cd = Z^c Z^dT, (4, 4, k, k, nb)
    a0 = s_mat - sum(pcd[c, c] for c in range(4))
    s = 48.0 * lead_sum(a0 * a0)
    for a in (1, 2, 3):
        im = sum(_E[a][c, d] * pcd[c, d] for c in range(4) for d in range(4) if _E[a][c, d])
        s = s - 16.0 * lead_sum(im * im)
    return s


def action_density_block(lam, b, chirality: int, pts):
    """s at a block of points (nb, 4) -> (nb,): the rank-one route for SU(2), the exact O(k^3) route for Sp(n > 1)."""
    p = p_last(pts, chirality)
    bp = bp_last(b, p)
    lo = cholesky_last(gram_last(lam, bp))
    if lam.shape[0] != 1:
        return s_exact(bp, lo)
    return s_rank_one(lam, bp, lo)


def action_density_k1(lam, b, chirality: int, pts):
    """s of charge-1 data (any n) at points (m, 4) -> (m,): 48 (|Lambda|^2 f^2)^2, f = 1 / (|Lambda|^2 + |B - p|^2).

    For k = 1, M = 1 - |B - p|^2 f = |Lambda|^2 f and G = f M is real, so s = 16 G^2 + 32 G^2 = 48 G^2
    (the BPST density 48 rho^4 / (|x - a|^2 + rho^2)^4 of Belavin, Polyakov, Schwartz, Tyupkin,
    Phys. Lett. B 59 (1975) 85), here without the cancellation of 1 - |B - p|^2 f far from the centre.
    """
    p = p_last(pts, chirality)
    bq = b[0, 0]
    y2 = sum((bq[c] - p[c]) ** 2 for c in range(4))
    rho2 = jnp.sum(lam**2)
    g = rho2 / (rho2 + y2) ** 2
    return 48.0 * g * g


def action_density_batch(lam, b, chirality: int, pts):
    """s at points (m, 4) -> (m,), in blocks of BLOCK points (lax.map) when m is a multiple of it."""
    m = pts.shape[0]
    lam, b = jnp.asarray(lam), jnp.asarray(b)
    if b.shape[0] == 1:
        return action_density_k1(lam, b, chirality, pts)
    if m > BLOCK and m % BLOCK == 0:
        blocks = pts.reshape(m // BLOCK, BLOCK, 4)
        return jax.lax.map(lambda q: action_density_block(lam, b, chirality, q), blocks).reshape(m)
    return action_density_block(lam, b, chirality, pts)
