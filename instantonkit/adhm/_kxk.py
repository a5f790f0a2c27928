"""Batch-major k x k kernels of ADHM densities: the points on the last axis, so XLA vectorises across them.

Used by `instantonkit.adhm.quaternionic.ADHMData.density_batch` (the engine's ``density_batch`` hook).  The
formulas are those of ``ADHMData.action_density`` (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys.
B 159 (1979) 469, from memory; tests/test_fields.py checks ``density_batch`` against the per-point
closed form, tests/test_adhm_fields.py the closed form against autodiff), rearranged so that each
point costs a Cholesky factor of the real Gram matrix Delta^dag Delta and triangular solves instead of
inverses, and O(k^2) work for SU(2) beyond that (see `s_rank_one`).  Quaternion products use the units of
`instantonkit.core.conventions.QUATERNION_BASIS`.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from ..core.conventions import QUATERNION_BASIS

__all__ = ["action_density_batch", "link_generator_batch", "BLOCK"]


def _structure_constants() -> np.ndarray:
    """C[a, b, c] with e_a e_b = sum_c C[a, b, c] e_c, read off the 2 x 2 images of the units (conventions)."""
    basis = QUATERNION_BASIS
    prod = np.einsum("aij,bjk->abik", basis, basis)  # images of e_a e_b
    return np.rint(0.5 * np.real(np.einsum("cji,abjk->abc", basis.conj(), prod)))  # (1/2) tr(e_c^dag e_a e_b)


_C = _structure_constants()

#
# Layout: a real k x k matrix at b points is (k, k, b); a quaternionic one is (4, k, k, b) (component
# first); a quaternionic k-vector is (k, 4, b).  Every step is a broadcast multiply-add over whole
# rows or columns (O(k) traced operations per factor or solve, not O(k^3)), which XLA fuses into loops
# over the contiguous batch axis.  The Cholesky factor is kept as its list of columns: column j is
# (k - j, b), its first entry the diagonal L_jj.

#: Points per block of the batched kernels: the (k, 4 (1 + k), block) right-hand sides stay in cache.
BLOCK = 256

#: E^c[d, e] with (u v-bar)_c = sum_{d,e} u_d v_e E^c[d, e] (c = 0: the real part), (4, 4, 4).
_E = np.einsum("dec,e->cde", _C, np.array([1.0, -1.0, -1.0, -1.0]))

#: Signs of quaternionic conjugation per component.
_CONJ = np.array([1.0, -1.0, -1.0, -1.0])


def lead_sum(x):
    """Sum over every axis but the last (the points) -> (nb,)."""
    return jnp.sum(x.reshape(-1, x.shape[-1]), axis=0)


def p_last(pts, chirality: int):
    """Quaternions p(x) (or p-bar(x)) of points (b, 4) as (4, b): p = (x4, -x1, -x2, -x3) (conventions)."""
    x = pts.T
    sign = 1.0 if chirality == -1 else -1.0
    return jnp.stack([x[3], sign * x[0], sign * x[1], sign * x[2]])


def split_b(b):
    """B = D + O: the diagonal quaternions B_ii (4, k) and the off-diagonal part O (4, k, k), component first."""
    k = b.shape[0]
    bc = jnp.moveaxis(jnp.asarray(b), -1, 0)
    diag = bc[:, jnp.arange(k), jnp.arange(k)]
    return diag, bc * (1.0 - jnp.eye(k))[None]


def y_last(diag, p):
    """y_i = B_ii - p at the points: diag (4, k), p (4, nb) -> (4, k, nb) (the diagonal of B - p 1_k)."""
    return diag[:, :, None] - p[:, None, :]


def bp_last(off, y):
    """B - p 1_k = O + diag(y) -> (4, k, k, nb)."""
    k = off.shape[1]
    return off[..., None] + jnp.eye(k)[None, :, :, None] * y[:, :, None, :]


def gram_last(lam, off, y):
    """Re(Delta^dag Delta) -> (k, k, nb), from O(k^2) work per point and no cancellation at the centres.

    With B = D + O (D = diag(B_ii), O off-diagonal, both symmetric) and y_i = B_ii - p,
    Re(Delta^dag Delta)_ij = Re(Lambda^dag Lambda + O^dag O)_ij + delta_ij |y_i|^2 + O_ij . (y_i + y_j)
    (the cross terms Re(y-bar_i O_ij + O-bar_ji y_j), '.' the Euclidean product of quaternions): the
    constant part is computed once, the rest are sums of squares and products, never differences of
    large terms (a plain expansion in p would cancel |B_ii|^2 against |p|^2 near a far-away centre).
    """
    k = off.shape[1]
    lamc = jnp.moveaxis(jnp.asarray(lam), -1, 0)  # (4, n, k)
    const = jnp.einsum("cli,clj->ij", lamc, lamc) + jnp.einsum("cli,clj->ij", off, off)
    cross = sum(off[c][:, :, None] * (y[c][:, None, :] + y[c][None, :, :]) for c in range(4))
    diag2 = sum(y[c] * y[c] for c in range(4))  # (k, nb)
    return const[..., None] + cross + jnp.eye(k)[:, :, None] * diag2[None]


def cholesky_last(g):
    """Cholesky factor of SPD g (k, k, nb) (right-looking, one rank-one update per column).

    Returns (cols, inv_d): cols[j] = L[j:, j] (k - j, nb), inv_d[j] = 1 / L_jj (nb,).
    """
    k = g.shape[0]
    cols, inv_d = [], []
    a = g
    for j in range(k):
        r = jax.lax.rsqrt(a[0, 0])
        col = a[:, 0] * r[None]
        cols.append(col)
        inv_d.append(r)
        if j < k - 1:
            a = a[1:, 1:] - col[1:, None] * col[None, 1:]
    return cols, inv_d


def solve_lower(chol, x):
    """Y with L Y = X; x (k, ..., nb) -> (k, ..., nb) (forward substitution, one update per column)."""
    cols, inv_d = chol
    k = len(cols)
    ys = []
    for j in range(k):
        inv = inv_d[j].reshape((1,) * (x.ndim - 2) + (-1,))
        yj = x[0] * inv
        ys.append(yj)
        if j < k - 1:
            x = x[1:] - cols[j][1:].reshape((k - j - 1,) + (1,) * (x.ndim - 2) + (-1,)) * yj[None]
    return jnp.stack(ys)


def solve_upper_t(chol, x):
    """Y with L^T Y = X; x (k, ..., nb) -> (k, ..., nb) (back substitution, one dot per row)."""
    cols, inv_d = chol
    k = len(cols)
    ys: list = [None] * k
    for i in reversed(range(k)):
        inv = inv_d[i].reshape((1,) * (x.ndim - 2) + (-1,))
        acc = x[i]
        if i < k - 1:
            li = cols[i][1:].reshape((k - i - 1,) + (1,) * (x.ndim - 2) + (-1,))
            acc = acc - jnp.sum(li * jnp.stack(ys[i + 1 :]), axis=0)
        ys[i] = acc * inv
    return jnp.stack(ys)


def _left_mul_matrix(off):
    """The real (4k, 4k) matrix of w -> O w for a quaternionic k-vector w laid out (k, 4): [(i, c), (j, e)]."""
    k = off.shape[1]
    # (O w)_i^c = sum_{j, d, e} C[d, e, c] O^d_ij w_j^e
    big = jnp.einsum("dec,dij->icje", jnp.asarray(_C), off)
    return big.reshape(4 * k, 4 * k)


def qmul_last(a, b):
    """Componentwise quaternion products a b of (4, ...) arrays (Hamilton 1843), from the units' table."""
    return jnp.stack(
        [sum(_C[d, e, c] * a[d] * b[e] for d in range(4) for e in range(4) if _C[d, e, c]) for c in range(4)]
    )


def s_from_k(kk):
    """s = 48 tr(K K) + 16 sum_a tr(K E^a K E^a) for K = U^T f U (4, 4, nb) of a rank-one M = u u^dag."""
    s = 48.0 * lead_sum(kk * kk)
    for a in (1, 2, 3):
        ke = sum(kk[:, d, None] * _E[a][d][None, :, None] for d in range(4) if np.any(_E[a][d]))  # K E^a
        s = s + 16.0 * lead_sum(ke * jnp.swapaxes(ke, 0, 1))
    return s


def factor_solve(g, x):
    """Cholesky factor of SPD g (k, k, nb) and Y = L^-1 X in one right-looking elimination of [G | X].

    Step j scales row j of the current trailing block by 1 / sqrt(pivot) (giving L[j:, j] and row j
    of Y) and subtracts its outer product from the rows below, so the factor and the forward
    substitution share k steps of a few fused operations each.  x: (k, m, nb) -> (cols, inv_d), Y (k, m, nb)
    (cols[j] = L[j:, j], inv_d[j] = 1 / L_jj, as `cholesky_last`).
    """
    k = g.shape[0]
    a = jnp.concatenate([g, x], axis=1)  # (k, k + m, nb)
    cols, inv_d, ys = [], [], []
    for j in range(k):
        r = jax.lax.rsqrt(a[0, 0])
        row = a[0] * r[None]
        cols.append(row[: k - j])
        inv_d.append(r)
        ys.append(row[k - j :])
        if j < k - 1:
            a = a[1:, 1:] - row[1 : k - j, None] * row[None, 1:]
    return (cols, inv_d), jnp.stack(ys)


def s_rank_one(lam, off, y, g):
    """s of SU(2) data (n = 1) at nb points, from a rank-one factor of M; g the Gram matrix (k, k, nb) -> (nb,).

    M = b^dag P b = u u^dag has rank one (P = 1 - Delta f Delta^dag = U U^dag, n = 1), so with
    K = U^T f U (U the real k x 4 matrix of u) s = 48 tr(f M0 f M0) + 16 sum_a tr(f M^a f M^a) =
    48 tr(K K) + 16 sum_a tr(K E^a K E^a), and u is read off one column of P: for v = e_j,
    M = w phi^-1 w^dag with w = b^dag P v = b^dag v - (B - p) f Delta^dag v and phi = v^dag P v = P_jj.
    Each point takes the column with the largest P_jj: the diagonal of the rank-one projector sums to
    tr P = 1 over n + k = 1 + k entries, so phi >= 1 / (1 + k) and the cancellation in
    phi = 1 - |L^-1 Delta^dag e_j|^2 costs at most a factor 1 + k of rounding, at every point.
    Work: the factor and L^-1 Delta^dag (4 (1 + k) right-hand sides) in one elimination, then
    f Delta^dag v, (B - p) f Delta^dag v (a constant 4k x 4k real product plus the diagonal) and
    L^-1 w on single quaternionic columns (counted in `flops_per_point`).
    """
    k, nb = y.shape[1], y.shape[-1]
    lamd = jnp.asarray(lam)[0].T * _CONJ[:, None]  # Lambda^dag, (4, k)
    bpd = bp_last(off, y) * _CONJ[:, None, None, None]  # (B - p)^dag = conj(B - p) (B symmetric), (4, k, k, nb)
    rhs = jnp.concatenate(  # Delta^dag e_j, j = 0 .. k: [Lambda^dag | (B - p)^dag], (k, 4 (1 + k), nb)
        [jnp.broadcast_to(lamd.T[:, :, None, None], (k, 4, 1, nb)), jnp.moveaxis(bpd, 0, 1)], axis=2
    ).reshape(k, 4 * (1 + k), nb)
    chol, ysol = factor_solve(g, rhs)
    ysol = ysol.reshape(k, 4, 1 + k, nb)
    pdiag = 1.0 - jnp.sum(ysol * ysol, axis=(0, 1))  # P_jj, (1 + k, nb)
    pick = (jnp.arange(1 + k)[:, None] == jnp.argmax(pdiag, axis=0)[None]).astype(ysol.dtype)  # one-hot
    ysel = jnp.sum(ysol * pick[None, None], axis=2)  # L^-1 Delta^dag v, (k, 4, nb)
    phi = jnp.max(pdiag, axis=0)
    gv = solve_upper_t(chol, ysel)  # f Delta^dag v, (k, 4, nb)
    og = jnp.dot(_left_mul_matrix(off), gv.reshape(4 * k, nb)).reshape(k, 4, nb)  # O f Delta^dag v
    yg = jnp.moveaxis(qmul_last(y, jnp.moveaxis(gv, 1, 0)), 0, 1)  # diag(y) f Delta^dag v, (k, 4, nb)
    w = -(og + yg)
    w = w.at[:, 0].add(pick[1:])  # + b^dag v (real)
    z = solve_lower(chol, w)  # (k, 4, nb) = L^-1 W
    kk = jnp.sum(z[:, :, None] * z[:, None, :], axis=0) / phi[None, None]
    return s_from_k(kk)


def s_exact(off, y, chol):
    """s from k x k work for any n, O(k^3) per point; (nb,).

    With f = L^-T L^-1 and M = 1 - (B - p) f (B - p)^dag, s = 48 tr(f M0 f M0) + 16 sum_a tr(f M^a f M^a)
    (M0, M^a the real and imaginary parts; the 16 Re tr GG + 32 Re tr G*G of action_density in real
    form), and tr(f X f X) = +-|A|^2 for A = L^-1 X L^-T with X symmetric / antisymmetric, so
    s = 48 |A^0|^2 - 16 sum_a |A^a|^2 with A = L^-1 L^-T - Z Z^dag, Z = L^-1 (B - p) L^-T
    (Z^c symmetric, since B - p is).
    """
    k, nb = y.shape[1], y.shape[-1]
    bp = bp_last(off, y)  # (4, k, k, nb), each component symmetric
    eye = jnp.broadcast_to(jnp.eye(k)[..., None], (k, k, nb))
    linv = solve_lower(chol, eye)  # L^-1, (k, k, nb)
    x = solve_lower(chol, jnp.moveaxis(bp, 0, 1))  # (L^-1 bp^c)_{i, c, j}, (k, 4, k, nb)
    zs = jnp.moveaxis(solve_lower(chol, jnp.moveaxis(x, 2, 0)), 2, 0)  # Z^c = L^-1 (L^-1 bp^c)^T, (4, k, k, nb)
    s_mat = jnp.sum(linv[:, None] * linv[None, :], axis=2)  # L^-1 L^-T
    pcd = sum(zs[:, None, :, None, m] * zs[None, :, None, :, m] for m in range(k))  # Z^c Z^d, (4, 4, k, k, nb)
    a0 = s_mat - sum(pcd[c, c] for c in range(4))
    s = 48.0 * lead_sum(a0 * a0)
    for a in (1, 2, 3):
        im = sum(_E[a][c, d] * pcd[c, d] for c in range(4) for d in range(4) if _E[a][c, d])
        s = s - 16.0 * lead_sum(im * im)
    return s


def action_density_block(lam, b, chirality: int, pts):
    """s at a block of points (nb, 4) -> (nb,): the rank-one route for SU(2), the exact O(k^3) route for Sp(n > 1)."""
    diag, off = split_b(b)
    y = y_last(diag, p_last(pts, chirality))
    g = gram_last(lam, off, y)
    if jnp.shape(lam)[0] != 1:
        return s_exact(off, y, cholesky_last(g))
    return s_rank_one(lam, off, y, g)


def flops_per_point(k: int, n: int = 1) -> int:
    """Floating-point operations per point of `action_density_block` (a multiply-add counts 2).

    Counted from the loops above, for m = 4 (1 + k) right-hand sides in the SU(2) route: Gram matrix
    14 k^2; factor and forward substitution together sum_j 2 (k - j - 1)(k - j - 1 + m) ~ 2 k^3 / 3 + m k^2,
    plus the row scalings k^2 / 2 + m k; P_jj and the pick 4 m k; the back and forward solves of one
    quaternionic column 8 k^2; the constant 4k x 4k product 32 k^2; diag(y) g 32 k; K 32 k; s from K
    about 150.  Sp(n > 1): Cholesky 2 k^3 / 3, the solves for L^-1 (k columns), L^-1 (B - p) and
    Z (4 k columns each) 9 k^3, L^-1 L^-T 2 k^3 and the 16 products Z^c Z^d 32 k^3.
    """
    gram = 14 * k * k
    if n == 1:
        m = 4 * (1 + k)
        elim = sum(2 * (k - j - 1) * (k - j - 1 + m) + (k - j + m) for j in range(k))
        return gram + elim + 4 * m * k + 8 * k * k + 32 * k * k + 64 * k + 150
    chol = sum(2 * (k - j - 1) ** 2 + (k - j) for j in range(k))
    return gram + chol + 9 * k**3 + 2 * k**3 + 32 * k**3 + 8 * k * k


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


def _generator_block(lam, b, chirality: int, gauge: str, pts, dirs):
    """Imaginary parts (3, nb) of the quaternion A_mu(x) d_mu of SU(2) data (n = 1) at a block of points (nb, 4).

    The formula of ``ADHMData.potential`` (n = 1) contracted with d: with e(d) = sum_mu d_mu e_mu
    (e-bar for chirality -1; it is p(d), conventions), X = f Delta^dag V0 (one Cholesky solve of the
    real Gram matrix) and the tail T = b^dag P V0 = b^dag V0 - (B - p) X of P V0,
    A.d = Im( sum_i T-bar_i e(d) X_i ) / phi with phi = V0^dag P V0 (real, = 1 - Lambda X in the singular
    gauge V0 = [1 ; 0], = Lambda T in the regular gauge V0 = [0 ; Lambda^dag]).
    """
    k = b.shape[0]
    e = p_last(dirs, chirality)
    diag, off = split_b(b)
    y = y_last(diag, p_last(pts, chirality))
    bp = bp_last(off, y)  # (4, k, k, nb)
    lq = jnp.asarray(lam)[0].T  # Lambda_i, (4, k)
    conj = jnp.asarray(_CONJ)[:, None]
    if gauge == "singular":  # Delta^dag V0 = Lambda^dag
        dv = jnp.broadcast_to((lq * conj)[:, :, None], (4, k, pts.shape[0]))
    else:  # Delta^dag V0 = (B - p)^dag Lambda^dag: sum_j conj(Lambda_j (B - p)_ji)
        dv = sum(qmul_last(lq[:, j, None, None], bp[:, j]) for j in range(k)) * conj[:, :, None]
    chol = cholesky_last(gram_last(lam, off, y))
    x = jnp.swapaxes(solve_upper_t(chol, solve_lower(chol, jnp.swapaxes(dv, 0, 1))), 0, 1)  # (4, k, nb)
    tail = -sum(qmul_last(bp[:, :, j], x[:, j, None]) for j in range(k))  # -(B - p) X, (4, k, nb)
    if gauge == "singular":
        phi = 1.0 - sum(qmul_last(lq[:, j, None], x[:, j])[0] for j in range(k))
    else:
        tail = tail + (lq * conj)[:, :, None]
        phi = sum(qmul_last(lq[:, j, None], tail[:, j])[0] for j in range(k))
    m = sum(qmul_last(qmul_last(tail[:, i] * conj, e), x[:, i]) for i in range(k))
    return m[1:] / phi[None]


def link_generator_batch(lam, b, chirality: int, gauge: str, pts, dirs):
    """A_mu(x) d_mu of SU(2) data (n = 1) at points (m, 4) with directions (m, 4) -> (3, m) imaginary
    quaternion parts (the link generator of `instantonkit.lattice.transport`), in blocks of BLOCK points
    (lax.map) when m is a multiple of it; equal to contracting ``ADHMData.potential`` to rounding."""
    m = pts.shape[0]
    lam, b = jnp.asarray(lam), jnp.asarray(b)
    if m > BLOCK and m % BLOCK == 0:
        blocks = (pts.reshape(m // BLOCK, BLOCK, 4), dirs.reshape(m // BLOCK, BLOCK, 4))
        out = jax.lax.map(lambda q: _generator_block(lam, b, chirality, gauge, q[0], q[1]), blocks)
        return jnp.moveaxis(out, 1, 0).reshape(3, m)
    return _generator_block(lam, b, chirality, gauge, pts, dirs)
