"""Loops of lattice links: the m x m loop actions, the 1x1 + 2x2 improved action and charge, and the staples.

Links are ``(L1, L2, L3, L4, 4, N, N)`` complex128; the normalisations (g = 1, beta = 2N) and the improved
action S(eps) = (4 - eps)/3 S_1 + (eps - 1)/48 S_2 of Garcia Perez, Gonzalez-Arroyo, Snippe and van Baal
(Nucl. Phys. B 413 (1994) 535, from memory) are written in `instantonkit.lattice.smoothing`, whose
flows and cooling drive these actions.  Every front door checks its links first
(`instantonkit.core._links.check_links`).
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from .observables import PLANES

_BOUNDARIES = ("periodic", "open")


def _mm(a, b):
    """Batched matrix product as a broadcast sum (fuses well on CPU for N = 2, 3); (..., N, N)."""
    return jnp.sum(a[..., :, :, None] * b[..., None, :, :], axis=-2)


def _dag(m):
    return jnp.conj(jnp.swapaxes(m, -1, -2))


def _sh(x, mu: int, s: int):
    """x(n + s mu_hat), periodic; x: (L1, L2, L3, L4, ...)."""
    return jnp.roll(x, -s, axis=mu) if s else x


def _retr(a, b):
    """Re tr(a b) without forming the product; (...)."""
    return jnp.real(jnp.sum(a * jnp.swapaxes(b, -1, -2), axis=(-2, -1)))


def _traceless_antihermitian(m):
    """P_ah(M) = (M - M^dag)/2 - tr(M - M^dag)/(2N); (..., N, N)."""
    n = m.shape[-1]
    a = 0.5 * (m - _dag(m))
    tr = jnp.trace(a, axis1=-2, axis2=-1) / n
    return a - tr[..., None, None] * jnp.eye(n)


def _long(u, mu: int, m: int):
    """Product of m links along mu: U_mu(n) U_mu(n + mu) ... U_mu(n + (m-1) mu); (L1..L4, N, N)."""
    one = u[..., mu, :, :]
    out = one
    for k in range(1, m):
        out = _mm(out, _sh(one, mu, k))
    return out


def _loop(d, mu, nu, m):
    """m x m loop at corner n in plane (mu, nu) from the long links d (list of 4): D_mu(n) D_nu(n+m mu) D_mu(n+m nu)^dag D_nu(n)^dag."""
    return _mm(_mm(d[mu], _sh(d[nu], mu, m)), _mm(_dag(_sh(d[mu], nu, m)), _dag(d[nu])))


def _plane_staples(d, mu: int, e: int, f: int, nu: int):
    """(up, down): the staples of the long link D^e_mu(n) in its two e x f loops of plane (mu, nu) (f along nu),
    so that each loop's Re tr = Re tr(D^e_mu(n) staple); d: {extent: [D^extent_nu for nu in 0..3]}; (L1..L4, N, N)."""
    up = _mm(_sh(d[f][nu], mu, e), _mm(_dag(_sh(d[e][mu], nu, f)), _dag(d[f][nu])))
    dn_nu = _sh(d[f][nu], nu, -f)  # D_nu(n - f nu)
    down = _mm(_dag(_sh(dn_nu, mu, e)), _mm(_dag(_sh(d[e][mu], nu, -f)), dn_nu))
    return up, down


def _long_staple(d, mu: int, e: int, f: int):
    """Sum over nu != mu of the up and down staples of D^e_mu(n) in its e x f loops (`_plane_staples`)."""
    out = []
    for nu in range(4):
        if nu != mu:
            up, down = _plane_staples(d, mu, e, f, nu)
            out.append(up + down)
    return out[0] + out[1] + out[2]


def _spread(da, sums: dict, axis: int):
    """From the staple sums Sigma_e of the long links D^e(x) along ``axis`` ({e: Sigma_e}, each (..., N, N) with
    periodic site axes) to the staple of the single link U(x), summed over the e: U(x) sits at position k of
    D^e(x - k) = D^k(x - k) U(x) D^(e-1-k)(x + 1), and Re tr(D^e Sigma_e) = Re tr(U D^(e-1-k)(x + 1) Sigma_e(x - k)
    D^k(x - k)); the partial products are the long links ``da`` (``da[j - 1] = D^j`` for j up to the largest
    e - 1), so each position costs one or two products.  The one spread of the staples of the plane-by-plane
    force and of the direction-by-direction staples (cooling, the Wilson flows' fused step)."""
    out = None
    for e, sig in sums.items():
        for k in range(e):
            t = _sh(sig, axis, -k)
            if e - 1 - k >= 1:
                t = _mm(_sh(da[e - 2 - k], axis, 1), t)
            if k >= 1:
                t = _mm(t, _sh(da[k - 1], axis, -k))
            out = t if out is None else out + t
    return out


def _longs_along(u, d, mu: int, e: int) -> list:
    """[D^1_mu, ..., D^(e-1)_mu] (the partial products `_spread` needs), from d where it holds them; (L1..L4, N, N)."""
    return [d[j][mu] if j in d else _long(u, mu, j) for j in range(1, e)]


def _link_staple(u, d, mu: int, e: int, f: int):
    """Sigma of U_mu(n) in every e x f loop (e along mu, f along nu != mu): the sum of the paths that close
    each such loop through U_mu(n), so that the loops' share of the action holding U_mu(n) is
    -2 Re tr(U_mu(n) Sigma) + const (the Wilson staple for e = f = 1).  d: {extent: [D^extent_nu for nu]}
    holding e and f.  The staples direction by direction (cooling and the isotropic Wilson flows' fused step)
    for the Wilson, 1x1 + 2x2, m x n and weighted (staples module) actions: `_plane_staples` per plane, `_spread`
    to the single links; the other flows take theirs plane by plane
    (`instantonkit.lattice.rectangles.plane_staples`, the same `_spread`)."""
    return _spread(_longs_along(u, d, mu, e), {e: _long_staple(d, mu, e, f)}, mu)


def _staple(u, mu: int, m: int):
    """Sigma^(m)_mu(n): the staples that close every m x m loop through U_mu(n) (`_link_staple`)."""
    return _link_staple(u, {m: [_long(u, nu, m) for nu in range(4)]}, mu, m, m)


def _total_staple(u, mu, c1, c2, two: bool):
    s = c1 * _staple(u, mu, 1)
    if two:
        s = s + c2 * _staple(u, mu, 2)
    return s


def _loop_mask(shape, mu, nu, m, boundary):
    """Open boundaries: loops at n fit when n_mu, n_nu <= L - 1 - m; periodic: all."""
    if boundary == "periodic":
        return np.ones(shape, dtype=bool)
    idx = np.indices(shape)
    return (idx[mu] <= shape[mu] - 1 - m) & (idx[nu] <= shape[nu] - 1 - m)


def _site_mask(shape, m, boundary):
    """Open boundaries: sites whose m x m clovers fit (m <= n_mu <= L - 1 - m in every direction)."""
    if boundary == "periodic":
        return np.ones(shape, dtype=bool)
    idx = np.indices(shape)
    ok = np.ones(shape, dtype=bool)
    for d in range(4):
        ok &= (idx[d] >= m) & (idx[d] <= shape[d] - 1 - m)
    return ok


@functools.partial(jax.jit, static_argnames=("m",))
def _loop_terms(u, m: int):
    """2 (N - Re tr P^{m x m}) per site and plane; (6, L1..L4)."""
    n = u.shape[-1]
    d = [_long(u, mu, m) for mu in range(4)]
    out = []
    for mu, nu in PLANES:
        left = _mm(d[mu], _sh(d[nu], mu, m))
        right = _mm(d[nu], _sh(d[mu], nu, m))
        out.append(2.0 * (n - jnp.real(jnp.sum(left * jnp.conj(right), axis=(-2, -1)))))
    return jnp.stack(out)


def _clover_f(u, m: int):
    """m x m clover F_mu nu at the sites, lattice units (= m^2 a^2 F + O(a^4)); list of 6 (L1..L4, N, N).

    Q = the four m x m loops in the plane that start and end at n, all oriented mu -> nu;
    F = [(Q - Q^dag) - tr(Q - Q^dag)/N] / 8 (as `instantonkit.lattice.observables.clover_field_strength`).
    """
    d = [_long(u, mu, m) for mu in range(4)]
    out = []
    for mu, nu in PLANES:
        dmu, dnu = d[mu], d[nu]
        dmu_m = _sh(dmu, mu, -m)  # D_mu(n - m mu)
        dnu_m = _sh(dnu, nu, -m)  # D_nu(n - m nu)
        q = _mm(_mm(dmu, _sh(dnu, mu, m)), _mm(_dag(_sh(dmu, nu, m)), _dag(dnu)))
        q = q + _mm(_mm(dnu, _dag(_sh(dmu_m, nu, m))), _mm(_dag(_sh(dnu, mu, -m)), dmu_m))
        q = q + _mm(_mm(_dag(dmu_m), _dag(_sh(dnu_m, mu, -m))), _mm(_sh(dmu_m, nu, -m), dnu_m))
        q = q + _mm(_mm(_dag(dnu_m), _sh(dmu, nu, -m)), _mm(_sh(dnu_m, mu, m), _dag(dmu)))
        out.append(_traceless_antihermitian(q) / 4.0)  # P_ah(Q) = (Q - Q^dag)/2 - ..., F = P_ah(Q)/4
    return out


@functools.partial(jax.jit, static_argnames=("m",))
def _clover_densities(u, m: int):
    """(q, s) per site from the m x m clover, lattice units: q = 8 c (tr F12 F34 - tr F13 F24 + tr F14 F23)
    (c = conventions.CHARGE_DENSITY_FACTOR, eps_1234 = +1) and s = -sum_{mu < nu} tr F_mu nu^2."""
    f = _clover_f(u, m)
    q = 8.0 * CHARGE_DENSITY_FACTOR * (_retr(f[0], f[5]) - _retr(f[1], f[4]) + _retr(f[2], f[3]))
    s = -sum(_retr(x, x) for x in f)
    return q, s


def _links(links):
    """Checked links (shape, dtype, finite, SU(N) within 1e-8: `instantonkit.core._links.check_links`) as a jax array."""
    u = _check_links(links)
    return jnp.asarray(u, dtype=jnp.complex128)


def improved_coefficients(eps) -> tuple[float, float]:
    """(c1, c2) = ((4 - eps)/3, (eps - 1)/48) of S(eps) = c1 S_1 + c2 S_2 (Garcia Perez, Gonzalez-Arroyo,
    Snippe, van Baal, Nucl. Phys. B 413 (1994) 535)."""
    e = _v.finite_float("eps", eps)
    return (4.0 - e) / 3.0, (e - 1.0) / 48.0


def _loop_fits(size: int, shape) -> None:
    """Refuse loops longer than the lattice (they would wrap onto themselves; each size compiles anew)."""
    if size > min(shape):
        raise ValueError(
            f"size must be at most the smallest lattice extent {min(shape)} (shape {tuple(shape)}); found {size}"
        )


def loop_action(links, size: int = 1, *, boundary: str = "periodic") -> float:
    """S_m = sum_n sum_{mu < nu} 2 Re tr(1 - P^{m x m}_{mu nu}(n)) for square loops of side ``size`` = m.

    m = 1 is the Wilson action (beta = 2N); for smooth fields S_m -> m^4 S_cont.  Open boundaries: only
    loops whose links all join lattice sites.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        size: loop side in lattice units, 1 <= size <= min(L1, L2, L3, L4) (1 and 2 are used here).
        boundary: 'periodic' or 'open'.
    Returns:
        float.
    Raises:
        ValueError / TypeError on a bad argument.
    """
    m = _v.positive_int("size", size)
    _v.choice("boundary", boundary, _BOUNDARIES)
    u = _links(links)
    _loop_fits(m, u.shape[:4])
    return _loop_action(u, m, boundary)


def _loop_action(u, m, boundary):
    """`loop_action` of checked links."""
    terms = np.asarray(_loop_terms(u, m))
    shape = u.shape[:4]
    return float(sum(np.sum(terms[p][_loop_mask(shape, mu, nu, m, boundary)]) for p, (mu, nu) in enumerate(PLANES)))


def improved_action(links, eps: float = 0.0, *, boundary: str = "periodic") -> float:
    """The 1x1 + 2x2 action S(eps) = (4 - eps)/3 S_1 + (eps - 1)/48 S_2 of Garcia Perez, Gonzalez-Arroyo,
    Snippe and van Baal (Nucl. Phys. B 413 (1994) 535, from memory; the -eps/5 a^2 coefficient is checked by
    test_improved_action_a2_coefficient_is_minus_eps_over_5); eps = 1 is the Wilson action,
    eps = 0 has no tree-level a^2 term.  See `loop_action` for S_m and ``boundary``."""
    c1, c2 = improved_coefficients(eps)
    u = _links(links)
    _v.choice("boundary", boundary, _BOUNDARIES)
    s1 = _loop_action(u, 1, boundary)
    return c1 * s1 + (c2 * _loop_action(u, 2, boundary) if c2 != 0.0 else 0.0)


def _charge_density(u, size, boundary):
    """Clover charge density of checked links (jax array), NaN outside for open boundaries."""
    _v.choice("boundary", boundary, _BOUNDARIES)
    q, _ = _clover_densities(u, size)
    q = np.asarray(q)
    return np.where(_site_mask(u.shape[:4], size, boundary), q, np.nan)


def loop_clover_charge(links, size: int = 1, *, boundary: str = "periodic") -> float:
    """Sum over the sites of the charge density of the ``size`` x ``size`` clover (lattice units, so it
    tends to size^4 Q); size 1 is `instantonkit.lattice.observables.clover_charge`.  Open boundaries: the
    sites whose clovers fit inside."""
    m = _v.positive_int("size", size)
    u = _links(links)
    _loop_fits(m, u.shape[:4])
    return float(np.nansum(_charge_density(u, m, boundary)))


def improved_charge_density(links, *, boundary: str = "periodic") -> np.ndarray:
    """q_imp = (4/3) q_1x1 - (1/48) q_2x2 per site; (L1, L2, L3, L4) float64 (lattice units, sum = Q).

    The combination of the 1x1 and 2x2 clover charge densities without tree-level a^2 term
    (q_mxm = m^4 q + m^6 a^2 X + ...), the charge analogue of the eps = 0 action of Garcia Perez,
    Gonzalez-Arroyo, Snippe and van Baal (Nucl. Phys. B 413 (1994) 535, from memory; checked by
    test_improved_charge_is_closer_to_the_continuum_than_clover).  Open boundaries:
    NaN where the 2x2 clovers leave the lattice.
    """
    u = _links(links)
    q1 = _charge_density(u, 1, "periodic")
    q2 = _charge_density(u, 2, boundary)
    return (4.0 / 3.0) * q1 - q2 / 48.0


def improved_charge(links, *, boundary: str = "periodic") -> float:
    """Q_imp = (4/3) Q_1x1 - (1/48) Q_2x2, the sum of `improved_charge_density`."""
    return float(np.nansum(improved_charge_density(links, boundary=boundary)))


def instanton_size(links) -> float:
    """Size rho/a of a single instanton from moments of the clover action density s (lattice units):
    (rho/a)^4 = (48/7) sum s / sum s^2.

    For the BPST density s = 48 rho^4 / (x^2 + rho^2)^4 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett.
    B 59 (1975) 85), int s = 8 pi^2 and int s^2 = 48^2 pi^2 / (42 rho^4) (Beta integrals), so the ratio does
    not depend on where the centre sits relative to the sites (unlike the peak density 48/rho^4).  Periodic
    lattices; on a lattice the estimate carries the clover's a^2 error (2.34 for a rho/a = 2 start on 12^4,
    3.27 for rho/a = 3 on 16^4, both with the boundary jump of a periodic start), so compare sizes of one
    lattice, e.g. along a smoothing run.
    """
    u = _links(links)
    _, s = _clover_densities(u, 1)
    return float((48.0 / 7.0 * jnp.sum(s) / jnp.sum(s * s)) ** 0.25)


@functools.partial(jax.jit, static_argnames=("two",))
def _measure(u, c1, c2, two: bool):
    s1 = jnp.sum(_loop_terms(u, 1))
    s2 = jnp.sum(_loop_terms(u, 2)) if two else 0.0
    q1, dens = _clover_densities(u, 1)
    q2, _ = _clover_densities(u, 2)
    qsum1, qsum2 = jnp.sum(q1), jnp.sum(q2)
    size = (48.0 / 7.0 * jnp.sum(dens) / jnp.sum(dens * dens)) ** 0.25
    return jnp.stack([s1, c1 * s1 + c2 * s2, qsum1, (4.0 / 3.0) * qsum1 - qsum2 / 48.0, size])
