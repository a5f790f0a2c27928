"""Rectangular m x n Wilson loops of lattice links: their traces, clovers and staples (lattice units).

Links are ``(L1, L2, L3, L4, 4, N, N)`` complex128 (array-of-structures layout, as in
`instantonkit.lattice.loops`); shifts are periodic (``jnp.roll``), so callers on open lattices keep only
the sites whose loops they trust.  An "m x n loop in the ordered plane (mu, nu)" has extent m along mu
and n along nu:

    W^{m x n}_{mu nu}(x) = D^m_mu(x) D^n_nu(x + m mu) D^m_mu(x + n nu)^dag D^n_nu(x)^dag,

D^e_mu(x) = U_mu(x) U_mu(x + mu) ... U_mu(x + (e - 1) mu) the long link.  For smooth fields
W = exp(m n a_mu a_nu F_mu nu + ...) (common practice).  Summing over the twelve ordered planes counts
every geometric square twice (W_{nu mu} = W_{mu nu}^dag for m = n) and every geometric rectangle of
either orientation once, so N - Re tr W summed over them tends to (m n)^2 (a^4 s) for an isotropic
lattice (s the action density of the conventions module).

Measurements go plane by plane (the kernels ``plane_*``): the links along mu and nu in the plane layout
(L_mu, L_nu, B, 2, N, N), B sites across the plane, where every loop of the plane is built from the long
links and two corner products without leaving it; the operators module cuts the B axis into chunks and
blocks (no halo is needed) and runs the blocks one after the other, so their products stay in the cache.
The force of a flow whose action has loops longer than the plaquette (or an anisotropic or twisted one) takes
its staples plane by plane as well (``plane_staples``, driven by `instantonkit.lattice.forces`); cooling, which
updates one direction and colour at a time, and the isotropic Wilson flows' fused step take them from
`instantonkit.lattice.loops` direction by direction.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core.conventions import CHARGE_DENSITY_FACTOR
from .loops import _link_staple, _long, _mm, _retr, _sh, _spread
from .observables import ORDERED_PLANES, PLANES


def _extents(pairs):
    return sorted({e for p in pairs for e in p})


def plane_loops(pairs) -> tuple:
    """The loops (p, q) (extent p along the plane's first axis, q along its second) of the terms ``pairs``:
    both orientations of every rectangle, a square once; sorted."""
    return tuple(sorted({(m, n) for m, n in pairs} | {(n, m) for m, n in pairs}))


def _plane_longs(ua, ub, big: int):
    """The long links D^e along the plane's axes 0 (a) and 1 (b) for e = 1 .. big; lists, ``da[e - 1] = D^e_a``."""
    da, db = [ua], [ub]
    for k in range(1, big):
        da.append(_mm(da[-1], _sh(ua, 0, k)))
        db.append(_mm(db[-1], _sh(ub, 1, k)))
    return da, db


def _mm_nd(a, b):
    """a b^dag without forming b^dag (the conjugate is fused into the product); (..., N, N)."""
    return jnp.sum(a[..., :, None, :] * jnp.conj(b[..., None, :, :]), axis=-1)


def _mm_dn(a, b):
    """a^dag b without forming a^dag; (..., N, N)."""
    return jnp.sum(jnp.conj(a[..., :, :, None]) * b[..., :, None, :], axis=-3)


def _corners(da, db, p: int, q: int):
    """(L, R) at every corner x: L = D^p_a(x) D^q_b(x + p a), R = D^q_b(x) D^p_a(x + q b), so that the p x q
    loop (p along a) is W = L R^dag."""
    return _mm(da[p - 1], _sh(db[q - 1], 0, p)), _mm(db[q - 1], _sh(da[p - 1], 1, q))


def _plane_traces(ua, ub, loops: tuple):
    """N - Re tr W^{p x q}(x) of each loop of ``loops`` summed over the transverse axis 2; (len(loops), La, Lb).

    ua, ub: (La, Lb, B, N, N), the links along the plane's two axes (periodic in La and Lb, B sites across).
    Re tr(L R^dag) is the sum of L * conj(R): two products per loop, the long links shared by all loops.
    """
    n = ua.shape[-1]
    da, db = _plane_longs(ua, ub, max(max(lp) for lp in loops))
    out = []
    for p, q in loops:
        left, right = _corners(da, db, p, q)
        out.append(jnp.sum(n - jnp.real(jnp.sum(left * jnp.conj(right), axis=(-2, -1))), axis=2))
    return jnp.stack(out)


def _leaves(da, db, p: int, q: int):
    """The four p x q loops (p along a) that start and end at x, all oriented a -> b, each as (shift, M): the
    leaf at x is M(x + shift), shift = (s_a, s_b) along the plane's axes (so that leaves of one shift are
    summed before they are moved).

    From the corner products (L, R) of `_corners`, each leaf as a product without inverse pairs:
    (+a, +b): L(x) R(x)^dag; (-a, +b): D^q_b(y + p a) R(y)^dag D^p_a(y), y = x - p a; (-a, -b):
    R(z)^dag L(z), z = x - p a - q b; (+a, -b): D^q_b(w)^dag L(w) D^p_a(w + q b)^dag, w = x - q b.
    """
    dap, dbq = da[p - 1], db[q - 1]
    left, right = _corners(da, db, p, q)
    return (
        ((0, 0), _mm_nd(left, right)),
        ((-p, 0), _mm(_mm_nd(_sh(dbq, 0, p), right), dap)),
        ((-p, -q), _mm_dn(right, left)),
        ((0, -q), _mm_nd(_mm_dn(dbq, left), _sh(dap, 1, q))),
    )


def _moved_sum(acc: dict):
    """sum over shifts (s_a, s_b) of acc[shift](x + shift): one shift along a per entry, one along b per
    distinct s_b (each shift of a block is a pass over it, as costly as a third of a product)."""
    by_b: dict = {}
    for (sa, sb), x in acc.items():
        x = _sh(x, 0, sa)
        by_b[sb] = by_b[sb] + x if sb in by_b else x
    out = None
    for sb in sorted(by_b):
        x = _sh(by_b[sb], 1, sb)
        out = x if out is None else out + x
    return out


def _plane_fields(ua, ub, pairs: tuple, scales, summed: bool):
    """Clover field strengths of the terms in one plane: scale_i P_ah(Q^{m x n} + Q^{n x m}) (a square: Q once),
    Q^{p x q} the sum of the four p x q leaves of `_leaves`.

    With scale_i = c_i / (8 m n a_mu a_nu) (a square: c_i / (4 m^2 a_mu a_nu)) this is c_i F^{(m, n)}, the
    clover of the m x n loops divided by its area (both orientations averaged), = c_i F + O(a^2) (the
    clover of Bilson-Thompson, Leinweber, Williams, Ann. Phys. 304 (2003) 1, from memory).  summed:
    (1, La, Lb, B, N, N) the sum over the terms (P_ah is real-linear: one projection of the weighted
    sum); else (len(pairs), La, Lb, B, N, N).
    """
    da, db = _plane_longs(ua, ub, max(max(pr) for pr in pairs))
    out = []
    acc: dict = {}
    for i, (m, n) in enumerate(pairs):
        for p, q in ((m, n), (n, m)) if m != n else ((m, n),):
            for key, leaf in _leaves(da, db, p, q):
                leaf = scales[i] * leaf
                acc[key] = acc[key] + leaf if key in acc else leaf
        if not summed:
            out.append(_ah(_moved_sum(acc)))
            acc = {}
    return _ah(_moved_sum(acc))[None] if summed else jnp.stack(out)


def _ah(m):
    """P_ah(M) = (M - M^dag)/2 - i Im(tr M)/N (the traceless anti-Hermitian part, elementwise); (..., N, N)."""
    n = m.shape[-1]
    im_tr = jnp.imag(jnp.sum(jnp.diagonal(m, axis1=-2, axis2=-1), axis=-1))
    return 0.5 * (m - jnp.conj(jnp.swapaxes(m, -1, -2))) - (1j * im_tr / n)[..., None, None] * jnp.eye(n)


@functools.partial(jax.jit, static_argnames=("loops",))
def plane_traces(x, loops: tuple):
    """`_plane_traces` of the blocks of a plane chunk, summed over the blocks; (len(loops), La, Lb).

    x: (nb, La, Lb, b, 2, N, N) complex128, blocks of b transverse sites taken one after the other
    (`jax.lax.map`: each block's products stay in the cache, about 3x faster than whole arrays; measured
    in the benchmarks).  One compiled kernel per shape and loop set."""
    return jnp.sum(jax.lax.map(lambda y: _plane_traces(y[..., 0, :, :], y[..., 1, :, :], loops), x), axis=0)


@functools.partial(jax.jit, static_argnames=("pairs", "summed"))
def plane_fields(x, scales, pairs: tuple, summed: bool):
    """`_plane_fields` of the blocks (as `plane_traces`) of a plane chunk; (nb, 1 or len(pairs), La, Lb, b, N, N).

    x: (nb, La, Lb, b, 2, N, N) complex128; scales: (len(pairs),) float."""
    return jax.lax.map(lambda y: _plane_fields(y[..., 0, :, :], y[..., 1, :, :], pairs, scales, summed), x)


def _block_staples(ua, ub, shapes: tuple, wa, wb, ph=None):
    """(Sigma_a, Sigma_b): the weighted staple sums of the links along the plane's axes a and b from every loop of
    ``shapes`` in the plane, so that the loops' share of the action holding U_a(x) is -2 Re tr(U_a(x) Sigma_a(x))
    + const (as `instantonkit.lattice.staples.weighted_staple`, whose sum over the three planes of a direction
    this is); each (La, Lb, B, N, N).

    ua, ub: (La, Lb, B, N, N) periodic in La and Lb; shapes: ((p, q), ...) with p along a; wa, wb:
    (len(shapes),) the weights of the a- and b-staples of each shape.  The p x q loop at corner x is
    W = L R^dag with the corner products of `_corners`; each long link it holds sees the rest of the loop
    through one more product: D^p_a(x) (bottom): D^q_b(x + p a) R(x)^dag; D^p_a(x + q b) (top):
    L(x)^dag D^q_b(x); D^q_b(x) (left): D^p_a(x + q b) L(x)^dag; D^q_b(x + p a) (right): R(x)^dag D^p_a(x)
    (Re tr W = Re tr W^dag and the cyclic trace).  Six products a shape and site for the staples of both
    axes, then `_spread` to the single links.

    ph: None or (len(shapes), La, Lb, B) complex, the centre factor z(x) of each shape's loop at corner x on a
    twisted torus (the loop enters the action as Re tr(z W), `instantonkit.lattice.staples.phase_fields`
    with the plane's (a, b)): the links that W holds (bottom, right) take z, those that W^dag holds (top,
    left) take conj(z), each of its own loop's corner."""
    da, db = _plane_longs(ua, ub, max(max(s) for s in shapes))
    sa: dict = {}
    sb: dict = {}
    for i, (p, q) in enumerate(shapes):
        dap, dbq = da[p - 1], db[q - 1]
        dbq_p, dap_q = _sh(dbq, 0, p), _sh(dap, 1, q)
        left, right = _mm(dap, dbq_p), _mm(dbq, dap_q)
        bottom, top, lhs, rhs = _mm_nd(dbq_p, right), _mm_dn(left, dbq), _mm_nd(dap_q, left), _mm_dn(right, dap)
        if ph is not None:
            z = ph[i][..., None, None]
            bottom, top, lhs, rhs = z * bottom, jnp.conj(z) * top, jnp.conj(z) * lhs, z * rhs
        st_a = wa[i] * (bottom + _sh(top, 1, -q))
        st_b = wb[i] * (lhs + _sh(rhs, 0, -p))
        sa[p] = sa[p] + st_a if p in sa else st_a
        sb[q] = sb[q] + st_b if q in sb else st_b
    return _spread(da, sa, 0), _spread(db, sb, 1)


@functools.partial(jax.jit, static_argnames=("shapes",))
def plane_staples(x, wa, wb, shapes: tuple, ph=None):
    """`_block_staples` of the blocks of a plane chunk (as `plane_traces`); (nb, La, Lb, b, 2, N, N), the a- and
    b-staples stacked like the links.  x: (nb, La, Lb, b, 2, N, N) complex128; wa, wb: (len(shapes),) float;
    ph: None or the blocks' centre factors (nb, len(shapes), La, Lb, b) complex128."""

    def one(y, z=None):
        return jnp.stack(_block_staples(y[..., 0, :, :], y[..., 1, :, :], shapes, wa, wb, z), axis=-3)

    if ph is None:
        return jax.lax.map(one, x)
    return jax.lax.map(lambda yz: one(*yz), (x, ph))


def _pack(f):
    """An anti-Hermitian (..., N, N) as N^2 reals (..., N^2): Im of the diagonal, then Re and Im of the entries
    above it (the rest follow from F^dag = -F), so that Re tr(F G) = -sum_k g_k pack(F)_k pack(G)_k with the
    metric g of `_pack_metric` (Re tr(F G) = -sum_ij Re(F_ij conj(G_ij)) for anti-Hermitian F, G)."""
    n = f.shape[-1]
    iu = np.triu_indices(n, 1)
    up = f[..., iu[0], iu[1]]
    return jnp.concatenate([jnp.imag(jnp.diagonal(f, axis1=-2, axis2=-1)), jnp.real(up), jnp.imag(up)], axis=-1)


def pack_metric(n: int) -> np.ndarray:
    """The metric g of `_pack` for N x N matrices: 1 on the diagonal entries, 2 on the off-diagonal pairs; (N^2,)."""
    return np.concatenate([np.ones(n), np.full(n * (n - 1), 2.0)])


@functools.partial(jax.jit, static_argnames=("pairs", "summed"))
def plane_fields_packed(x, scales, pairs: tuple, summed: bool):
    """`plane_fields` with each field packed by `_pack` (half the bytes of the complex matrices, for the
    charge density's gather across planes); (nb, 1 or len(pairs), La, Lb, b, N^2) float64."""
    return jax.lax.map(lambda y: _pack(_plane_fields(y[..., 0, :, :], y[..., 1, :, :], pairs, scales, summed)), x)


@jax.jit
def charge_terms_packed(f1, f2, weights, metric):
    """sum_i w_i Re tr(F1_i F2_i) per site from packed fields (`_pack`); f1, f2: (nb, k, ..., N^2),
    weights: (k,), metric: (N^2,) -> (nb, ...)."""
    return -jnp.tensordot(jnp.sum(f1 * f2 * metric, axis=-1), weights, axes=((1,), (0,)))


def _charge_of(f):
    """q = 8 c (tr F12 F34 - tr F13 F24 + tr F14 F23), c = conventions.CHARGE_DENSITY_FACTOR (eps_1234 = +1)."""
    return 8.0 * CHARGE_DENSITY_FACTOR * (_retr(f[0], f[5]) - _retr(f[1], f[4]) + _retr(f[2], f[3]))


def to_plane(u, mu: int, nu: int):
    """Links (L1..L4, 4, N, N) (traceable) in the layout of plane (mu, nu): (L_mu, L_nu, B, 2, N, N), B the
    sites of the other two axes in their order."""
    rest = [r for r in range(4) if r not in (mu, nu)]
    x = jnp.stack([u[..., mu, :, :], u[..., nu, :, :]], axis=4)
    x = jnp.transpose(x, (mu, nu, *rest, 4, 5, 6))
    return x.reshape(x.shape[0], x.shape[1], -1, *x.shape[4:])


def plane_loop_sums(u, pairs: tuple):
    """sum_x (N - Re tr W^{m x n}_{mu nu}(x)) per term (m, n) and ordered plane (m along mu, `ORDERED_PLANES`);
    (len(pairs), 12).  Traceable (the flows measure their action with it inside their jit); periodic lattices.

    The loops of the ordered plane (mu, nu) with m along mu are those of the unordered plane {mu, nu} of shape
    (m, n) (mu < nu) or (n, m) (mu > nu), `_plane_traces` of the plane layout."""
    loops = plane_loops(pairs)
    per = {}
    for mu, nu in PLANES:
        x = to_plane(u, mu, nu)
        per[(mu, nu)] = jnp.sum(_plane_traces(x[..., 0, :, :], x[..., 1, :, :], loops), axis=(1, 2))
    rows = []
    for m, n in pairs:
        row = [
            per[(mu, nu)][loops.index((m, n))] if mu < nu else per[(nu, mu)][loops.index((n, m))]
            for mu, nu in ORDERED_PLANES
        ]
        rows.append(jnp.stack(row))
    return jnp.stack(rows)


def loop_sums(u, pairs: tuple):
    """sum_x sum_{mu != nu} (N - Re tr W^{m x n}_{mu nu}(x)) per term (m, n) of ``pairs`` (extent m along mu);
    (len(pairs),), the sum of `plane_loop_sums` over the ordered planes."""
    return jnp.sum(plane_loop_sums(u, pairs), axis=1)


# -- staples (the force and cooling of an action made of rectangles) ------------------------------------------


def _longs(u, extents):
    """{e: [D^e_mu for mu in 0..3]}; each (L1..L4, N, N)."""
    return {e: [_long(u, mu, e) for mu in range(4)] for e in extents}


def staple(u, mu: int, pairs: tuple, weights):
    """Sigma_mu(x) of the action S = sum_i w_i sum_{x, mu != nu} Re tr(1 - W^{m_i x n_i}_{mu nu}(x)):
    the share of S that holds U_mu(x) is -2 Re tr(U_mu(x) Sigma_mu(x)) + const.

    Each geometric loop enters S with weight w (rectangle) or 2 w (square); as 2 kappa Re tr(1 - W) it
    has kappa = w / 2 per orientation, so Sigma = sum_i (w_i / 2) (Sigma^{m x n} + Sigma^{n x m}).
    weights: (len(pairs),) float (isotropic lattices).  Returns (L1..L4, N, N).
    """
    d = _longs(u, _extents(pairs))
    out = 0.0
    for i, (m, n) in enumerate(pairs):
        s = _link_staple(u, d, mu, m, n)
        s = 2.0 * s if m == n else s + _link_staple(u, d, mu, n, m)
        out = out + 0.5 * weights[i] * s
    return out


def colours(shape, pairs: tuple) -> tuple[np.ndarray, int]:
    """Colours of the links such that links of one direction and colour share no loop of the action.

    Two mu-links of one loop differ by |d_mu| <= E - 1 (E the largest extent) and by 0 or +-f (1 <= f <= E)
    in one other direction, so (n_mu mod P, sum_{nu != mu} n_nu mod K) with P the least power of two >= E
    and K the least power of two > E separates them (plaquettes alone: the site parity); extents must be
    divisible by P and K.  Returns
    ((4, L1..L4) int32, number of colours).
    """
    big = max(max(p) for p in pairs)
    per = 1 << (big - 1).bit_length()
    k = 1 << big.bit_length()
    idx = np.indices(shape)
    if big == 1:  # plaquettes alone: the parity of the site (the Wilson sweep's own colouring)
        return np.broadcast_to(idx.sum(axis=0) % 2, (4,) + tuple(shape)).astype(np.int32), 2
    out = np.empty((4,) + tuple(shape), dtype=np.int32)
    for mu in range(4):
        rest = (idx.sum(axis=0) - idx[mu]) % k
        out[mu] = (idx[mu] % per) * k + rest
    return out, per * k


def colour_period(pairs: tuple) -> int:
    """The number every lattice extent must be a multiple of for `colours` (the larger of P and K)."""
    big = max(max(p) for p in pairs)
    return max(1 << (big - 1).bit_length(), 1 << big.bit_length())
