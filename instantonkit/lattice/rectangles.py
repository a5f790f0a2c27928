"""Rectangular m x n Wilson loops of lattice links: their traces, clovers and staples (lattice units).

Links are ``(L1, L2, L3, L4, 4, N, N)`` complex128 (array-of-structures layout, as in
`instantonkit.lattice.loops`); shifts are periodic (``jnp.roll``), so callers that work on time slabs
or open lattices keep only the sites whose loops they trust.  An "m x n loop in the ordered plane
(mu, nu)" has extent m along mu and n along nu:

    W^{m x n}_{mu nu}(x) = D^m_mu(x) D^n_nu(x + m mu) D^m_mu(x + n nu)^dag D^n_nu(x)^dag,

D^e_mu(x) = U_mu(x) U_mu(x + mu) ... U_mu(x + (e - 1) mu) the long link.  For smooth fields
W = exp(m n a_mu a_nu F_mu nu + ...) (common practice).  Summing over the twelve ordered planes counts
every geometric square twice (W_{nu mu} = W_{mu nu}^dag for m = n) and every geometric rectangle of
either orientation once, so N - Re tr W summed over them tends to (m n)^2 (a^4 s) for an isotropic
lattice (s the action density of the conventions module).
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core.conventions import CHARGE_DENSITY_FACTOR
from .loops import _dag, _long, _mm, _retr, _sh, _traceless_antihermitian
from .observables import PLANES

#: The twelve ordered planes (mu, nu), mu != nu, in the order of `loop_traces`' second axis.
ORDERED_PLANES = tuple((mu, nu) for mu in range(4) for nu in range(4) if mu != nu)


def _longs(u, extents):
    """{e: [D^e_mu for mu in 0..3]}; each (L1..L4, N, N)."""
    return {e: [_long(u, mu, e) for mu in range(4)] for e in extents}


def _extents(pairs):
    return sorted({e for p in pairs for e in p})


def _retrace(d, mu, nu, m, n):
    """N - Re tr W^{m x n}_{mu nu}(x) at every corner x; (L1..L4) float."""
    left = _mm(d[m][mu], _sh(d[n][nu], mu, m))
    right = _mm(d[n][nu], _sh(d[m][mu], nu, n))
    size = left.shape[-1]
    return size - jnp.real(jnp.sum(left * jnp.conj(right), axis=(-2, -1)))


@functools.partial(jax.jit, static_argnames=("mu", "e"))
def _long_jit(u, mu: int, e: int):
    return _long(u, mu, e)


def _longs_jit(u, extents):
    """`_longs` with one small compiled kernel per (direction, extent) (XLA compiles small graphs much faster)."""
    return {e: [_long_jit(u, mu, e) for mu in range(4)] for e in extents}


@functools.partial(jax.jit, static_argnames=("m", "n", "margin"))
def _pair_traces(dm, dn, m: int, n: int, margin: int):
    """(12, L1, L2, L3, L4 - 2 margin): N - Re tr W^{m x n}_{mu nu} per ordered plane (dm, dn: long links)."""
    d = {m: dm, n: dn}
    done: dict = {}
    planes = []
    for mu, nu in ORDERED_PLANES:
        if m == n and (nu, mu) in done:
            planes.append(done[(nu, mu)])
            continue
        t = _retrace(d, mu, nu, m, n)
        done[(mu, nu)] = t
        planes.append(t)
    res = jnp.stack(planes)
    return res[..., margin : res.shape[-1] - margin] if margin else res


def loop_traces(u, pairs: tuple, margin: int = 0):
    """N - Re tr W^{m x n}_{mu nu}(x) for each (m, n) of ``pairs`` and ordered plane; (len(pairs), 12, L1, L2, L3, L4 - 2 margin).

    ``margin`` time slices are dropped at both ends of x4 (a slab's halo).  A square is computed once
    per unordered plane (its reverse has the same trace).  Traceable (flows call it inside their jit).
    """
    d = _longs_jit(u, _extents(pairs))
    return jnp.stack([_pair_traces(d[m], d[n], m, n, margin) for m, n in pairs])


def _clover_leaves(d, mu, nu, m, n):
    """Sum of the four m x n loops (m along mu) that start and end at x, all oriented mu -> nu; (L1..L4, N, N)."""
    dmu, dnu = d[m][mu], d[n][nu]
    dmu_m = _sh(dmu, mu, -m)  # D_mu(x - m mu)
    dnu_m = _sh(dnu, nu, -n)  # D_nu(x - n nu)
    q = _mm(_mm(dmu, _sh(dnu, mu, m)), _mm(_dag(_sh(dmu, nu, n)), _dag(dnu)))
    q = q + _mm(_mm(dnu, _dag(_sh(dmu_m, nu, n))), _mm(_dag(_sh(dnu, mu, -m)), dmu_m))
    q = q + _mm(_mm(_dag(dmu_m), _dag(_sh(dnu_m, mu, -m))), _mm(_sh(dmu_m, nu, -n), dnu_m))
    q = q + _mm(_mm(_dag(dnu_m), _sh(dmu, nu, -n)), _mm(_sh(dnu_m, mu, m), _dag(dmu)))
    return q


def _pair_fields(d, m, n, area):
    """Clover field strength of the m x n loops, both orientations averaged, in physical units.

    F^{(m, n)}_{mu nu} = [P_ah(Q^{m x n}) + P_ah(Q^{n x m})] / (8 m n a_mu a_nu) (a square: P_ah(Q) / (4 m^2
    a_mu a_nu)), Q the clover sum of `_clover_leaves`; = F_mu nu + O(a^2) (the clover of Bilson-Thompson,
    Leinweber, Williams, Ann. Phys. 304 (2003) 1, from memory, normalised by its area).  List of 6 in
    `PLANES` order; ``area[p]`` = a_mu a_nu.
    """
    out = []
    for p, (mu, nu) in enumerate(PLANES):
        f = _traceless_antihermitian(_clover_leaves(d, mu, nu, m, n))
        if m != n:
            f = 0.5 * (f + _traceless_antihermitian(_clover_leaves(d, mu, nu, n, m)))
        out.append(f / (4.0 * m * n * area[p]))
    return out


def _charge_of(f):
    """q = 8 c (tr F12 F34 - tr F13 F24 + tr F14 F23), c = conventions.CHARGE_DENSITY_FACTOR (eps_1234 = +1)."""
    return 8.0 * CHARGE_DENSITY_FACTOR * (_retr(f[0], f[5]) - _retr(f[1], f[4]) + _retr(f[2], f[3]))


@functools.partial(jax.jit, static_argnames=("m", "n", "margin"))
def _pair_fields_jit(dm, dn, area, m: int, n: int, margin: int):
    """`_pair_fields` stacked, (6, L1, L2, L3, T, N, N), with ``margin`` time slices dropped at both ends."""
    f = jnp.stack(_pair_fields({m: dm, n: dn}, m, n, area))
    return f[:, :, :, :, margin : f.shape[4] - margin] if margin else f


@jax.jit
def _charge_jit(f):
    return _charge_of([f[p] for p in range(6)])


def field_and_charge(u, pairs: tuple, coeffs, area, combine: str, margin: int = 0):
    """The improved field strength F = sum_i c_i F^{(m_i, n_i)} and the charge density q per site.

    combine 'field': q from F (Bilson-Thompson, Leinweber, Williams 2003, from memory); 'density':
    q = sum_i c_i q[F^{(m_i, n_i)}] (de Forcrand, Garcia Perez, Stamatescu, Nucl. Phys. B 499 (1997) 409,
    from memory).  coeffs: (len(pairs),) float; area: (6,) float (a_mu a_nu per plane).  One compiled
    kernel per loop pair.  Returns (F: (6, L1, L2, L3, T, N, N), q: (L1, L2, L3, T)), T = L4 - 2 margin.
    """
    d = _longs_jit(u, _extents(pairs))
    total = None
    q = None
    for i, (m, n) in enumerate(pairs):
        f = _pair_fields_jit(d[m], d[n], area, m, n, margin)
        if combine == "density":
            qi = coeffs[i] * _charge_jit(f)
            q = qi if q is None else q + qi
        total = coeffs[i] * f if total is None else total + coeffs[i] * f
    if combine == "field":
        q = _charge_jit(total)
    return total, q


# -- staples (the force and cooling of an action made of rectangles) ------------------------------------------


def _long_staple(d, mu, e, f):
    """Sum over nu != mu of the staples of the long link D^e_mu(x) in its e x f loops (f along nu), up and
    down, so that those loops' Re tr = Re tr(D^e_mu(x) Sigma); list of 3 per nu (L1..L4, N, N)."""
    out = []
    for nu in range(4):
        if nu == mu:
            continue
        up = _mm(_sh(d[f][nu], mu, e), _mm(_dag(_sh(d[e][mu], nu, f)), _dag(d[f][nu])))
        dn_nu = _sh(d[f][nu], nu, -f)  # D_nu(x - f nu)
        down = _mm(_dag(_sh(dn_nu, mu, e)), _mm(_dag(_sh(d[e][mu], nu, -f)), dn_nu))
        out.append(up + down)
    return out[0] + out[1] + out[2]


def _link_staple(u, d, mu, e, f):
    """Sigma of U_mu(x) in every e x f loop (e along mu, f along nu != mu): the link sits at position k of the
    long link D^e_mu(x - k mu) = A_k U_mu(x) B_k and Re tr(D Sigma_D) = Re tr(U B_k Sigma_D A_k)."""
    sd = _long_staple(d, mu, e, f)
    one = u[..., mu, :, :]
    n = one.shape[-1]
    eye = jnp.broadcast_to(jnp.eye(n, dtype=one.dtype), one.shape)
    total = 0.0
    for k in range(e):
        a = eye
        for j in range(k, 0, -1):
            a = _mm(a, _sh(one, mu, -j))
        b = eye
        for j in range(1, e - k):
            b = _mm(b, _sh(one, mu, j))
        total = total + _mm(_mm(b, _sh(sd, mu, -k)), a)
    return total


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
