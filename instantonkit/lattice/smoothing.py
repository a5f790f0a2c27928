"""Smoothing of lattice link arrays: gradient flow, cooling, the 1x1 + 2x2 improved action and an
improved charge.

Links are arrays ``(L1, L2, L3, L4, 4, N, N)`` complex128 (`instantonkit.lattice.observables`); the
smoothing routines treat the lattice as periodic (n + L mu_hat = n).  Everything is one vectorised jax
computation over the lattice in float64 (jnp.roll for the shifts), for SU(2), SU(3) or any SU(N).

Normalisations (g = 1, beta = 2N, so that every action tends to the continuum action with
``int s = 8 pi^2`` for a unit instanton, conventions module):

* m x m loop action ``S_m = sum_x sum_{mu < nu} 2 Re tr(1 - P^{m x m}_{mu nu}(x))``; S_1 is the
  Wilson action of `instantonkit.lattice.observables.wilson_action` and S_2 -> 16 S_cont.
* improved action of Garcia Perez, Gonzalez-Arroyo, Snippe and van Baal (Nucl. Phys. B 413 (1994) 535,
  from memory; tests/test_smoothing.py checks its a^2 coefficient):
  ``S(eps) = sum_{x, mu, nu} [(4 - eps)/3 Tr(1 - P_1x1) + (eps - 1)/48 Tr(1 - P_2x2)]``,
  the sum over ordered pairs (mu, nu), i.e. ``S(eps) = (4 - eps)/3 S_1 + (eps - 1)/48 S_2``.  eps = 1 is
  the Wilson action; (4 - eps)/3 + 16 (eps - 1)/48 = 1 gives the continuum limit for every eps; the
  tree-level a^2 term of an instanton is ``S(eps) = 8 pi^2 [1 - (eps/5)(a/rho)^2 + O(a^4)]`` (same paper,
  from memory; checked by test_improved_action_a2_coefficient_is_minus_eps_over_5; it follows from
  the Wilson expansion 1 - (1/5)(a/rho)^2 and S_2(a) = 16 S_1(2a)).
* the force of an action ``S = sum_links -2 Re tr(U_mu(x) Sigma_mu(x)) + ...`` (Sigma the weighted sum of
  the staples that close every loop through the link) is ``Z = -P_ah(U Sigma)``, P_ah the traceless
  anti-Hermitian part, i.e. Z = -g0^2 d S with the Lie derivative of Luescher (JHEP 08 (2010) 071,
  section 2 for the Wilson action, from memory; our S equals his g0^2 S_w summed over oriented
  plaquettes).  tests/test_smoothing.py checks Z against finite differences of S.

Every front door checks its links first (`instantonkit.core._links.check_links`: finite, SU(N) within 1e-8).
A flow whose effective step exceeds `flow_step_bound` (the real stability interval of a third-order
Runge-Kutta scheme over the largest frequency of the linearised flow) is refused before it starts, and a
flow or cooling run whose driving action rises between two measurements stops with an error.

Cooling with the 2x2 loops uses 8 colours per direction (see `_colours`), so every sweep is an
exact sequential sweep; the gradient flow of S(eps) is offered beside it (`gradient_flow`).
"""

from __future__ import annotations

import dataclasses
import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _progress
from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from .observables import PLANES

__all__ = [
    "SmoothingRecord",
    "RK3_STABILITY",
    "max_flow_frequency",
    "flow_step_bound",
    "gradient_flow",
    "wilson_flow",
    "cool",
    "loop_action",
    "improved_action",
    "improved_coefficients",
    "loop_clover_charge",
    "improved_charge",
    "improved_charge_density",
    "instanton_size",
]

_BOUNDARIES = ("periodic", "open")


# -- small matrix helpers (AoS layout: (..., N, N)) -----------------------------------------------------


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


def _expm_su(x):
    """exp(X) of traceless anti-Hermitian X; (..., N, N) -> SU(N).

    N = 2: X^2 = -det(X) 1 = -theta^2 1 (Cayley-Hamilton), so exp X = cos(theta) 1 + sin(theta)/theta X;
    otherwise exp X = V exp(-i w) V^dag from the eigen-decomposition (numpy/jax eigh) of the Hermitian
    i X.  Both are exact to rounding and unitary to rounding.
    """
    n = x.shape[-1]
    if n == 2:
        det = jnp.real(x[..., 0, 0] * x[..., 1, 1] - x[..., 0, 1] * x[..., 1, 0])
        th = jnp.sqrt(jnp.maximum(det, 0.0))
        return jnp.cos(th)[..., None, None] * jnp.eye(2) + jnp.sinc(th / jnp.pi)[..., None, None] * x
    h = 1j * x
    h = 0.5 * (h + _dag(h))
    w, v = jnp.linalg.eigh(h)
    return _mm(v * jnp.exp(-1j * w)[..., None, :], _dag(v))


# -- loops and staples ------------------------------------------------------------------------------------


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


def _long_staple(d, mu, m):
    """Sum over nu != mu of the staples of the long link D_mu(n) in m x m loops (up and down); (L1..L4, N, N)."""
    out = 0.0
    for nu in range(4):
        if nu == mu:
            continue
        up = _mm(_sh(d[nu], mu, m), _mm(_dag(_sh(d[mu], nu, m)), _dag(d[nu])))
        dn_nu = _sh(d[nu], nu, -m)  # D_nu(n - m nu)
        down = _mm(_dag(_sh(dn_nu, mu, m)), _mm(_dag(_sh(d[mu], nu, -m)), dn_nu))
        out = out + up + down
    return out


def _staple(u, mu: int, m: int):
    """Sigma^(m)_mu(n): the sum of the 7-link (m = 2) or 3-link (m = 1) paths that close every m x m loop
    through U_mu(n), so that the loops' share of S_m holding U_mu(n) is -2 Re tr(U_mu(n) Sigma) + const.

    The link sits at position k = 0 .. m-1 of the long link D_mu(n - k mu) = A_k U_mu(n) B_k, and
    Re tr(D Sigma_D) = Re tr(U B_k Sigma_D A_k).
    """
    d = [_long(u, nu, m) for nu in range(4)]
    sd = _long_staple(d, mu, m)
    one = u[..., mu, :, :]
    n = one.shape[-1]
    eye = jnp.broadcast_to(jnp.eye(n, dtype=one.dtype), one.shape)
    total = 0.0
    for k in range(m):
        a = eye
        for j in range(k, 0, -1):  # U_mu(n - k mu) ... U_mu(n - mu)
            a = _mm(a, _sh(one, mu, -j))
        b = eye
        for j in range(1, m - k):  # U_mu(n + mu) ... U_mu(n + (m-1-k) mu)
            b = _mm(b, _sh(one, mu, j))
        total = total + _mm(_mm(b, _sh(sd, mu, -k)), a)
    return total


def _total_staple(u, mu, c1, c2, two: bool):
    s = c1 * _staple(u, mu, 1)
    if two:
        s = s + c2 * _staple(u, mu, 2)
    return s


def _force(u, c1, c2, two: bool):
    """Z(U) = -P_ah(U_mu Sigma_mu) for the four directions; (L1..L4, 4, N, N) (module docstring)."""
    return jnp.stack(
        [-_traceless_antihermitian(_mm(u[..., mu, :, :], _total_staple(u, mu, c1, c2, two))) for mu in range(4)],
        axis=4,
    )


@functools.partial(jax.jit, static_argnames=("two",))
def _rk3_step(u, h, c1, c2, two: bool):
    """One step of Luescher's third-order Runge-Kutta integrator (JHEP 08 (2010) 071, eqs. (C.1)-(C.3),
    from memory; the third order is checked by test_runge_kutta_integrator_is_third_order):
    W1 = exp(Z0/4) W0, W2 = exp(8/9 Z1 - 17/36 Z0) W1, V(t + h) = exp(3/4 Z2 - 8/9 Z1 + 17/36 Z0) W2,
    Z_i = h Z(W_i)."""
    z0 = h * _force(u, c1, c2, two)
    w1 = _mm(_expm_su(0.25 * z0), u)
    z1 = h * _force(w1, c1, c2, two)
    w2 = _mm(_expm_su((8.0 / 9.0) * z1 - (17.0 / 36.0) * z0), w1)
    z2 = h * _force(w2, c1, c2, two)
    return _mm(_expm_su(0.75 * z2 - (8.0 / 9.0) * z1 + (17.0 / 36.0) * z0), w2)


# -- cooling -----------------------------------------------------------------------------------------------


def _su2_part(w):
    """The real-SU(2)-span part of a complex 2 x 2 block (..., 2, 2): [[a, b], [-b*, a*]] with
    a = (w00 + w11*)/2, b = (w01 - w10*)/2, so that Re tr(g w) = Re tr(g v) for every g in SU(2)."""
    a = 0.5 * (w[..., 0, 0] + jnp.conj(w[..., 1, 1]))
    b = 0.5 * (w[..., 0, 1] - jnp.conj(w[..., 1, 0]))
    return a, b


def _maximise(u, sigma, hits: int):
    """The SU(N) matrix maximising Re tr(U Sigma), by Cabibbo-Marinari SU(2)-subgroup steps (Cabibbo and
    Marinari, Phys. Lett. B 119 (1982) 387, from memory; no update raising the action is checked by
    test_su3_cooling_lowers_the_wilson_action_every_sweep_and_keeps_links_in_su3): for each subgroup (i, j)
    the 2 x 2 block w of W = U Sigma, its SU(2)-span part v = k s (k >= 0), and U <- G U with G = s^dag in
    rows/columns (i, j), which maximises Re tr(G W) exactly.  For N = 2 one step gives the exact maximiser
    Sigma^dag / sqrt(det) (the staple sum is in the real span of SU(2)); for N >= 3 ``hits`` passes over
    the N(N-1)/2 subgroups, each never lowering Re tr(U Sigma)."""
    n = u.shape[-1]
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    for _ in range(1 if n == 2 else hits):
        for i, j in pairs:
            w = _mm(u, sigma)
            blk = w[..., [i, j], :][..., :, [i, j]]
            a, b = _su2_part(blk)
            k = jnp.sqrt(jnp.abs(a) ** 2 + jnp.abs(b) ** 2)
            safe = k > 0
            kk = jnp.where(safe, k, 1.0)
            a = jnp.where(safe, a / kk, 1.0)
            b = jnp.where(safe, b / kk, 0.0)
            # s = [[a, b], [-b*, a*]], g = s^dag = [[a*, -b], [b*, a]]
            ri, rj = u[..., i, :], u[..., j, :]
            new_i = jnp.conj(a)[..., None] * ri - b[..., None] * rj
            new_j = jnp.conj(b)[..., None] * ri + a[..., None] * rj
            u = u.at[..., i, :].set(new_i).at[..., j, :].set(new_j)
    return u


def _colours(shape, two: bool) -> np.ndarray:
    """Colour of every link, (4, L1, L2, L3, L4) int, such that links of one direction and colour share no
    loop of the action, so they can be updated at once (an exact sequential sweep).

    Wilson action: the parity of n1 + n2 + n3 + n4 (2 colours).  With 2 x 2 loops the links of direction
    mu in one loop differ by (+-1 in mu) and/or (+-1 or +-2 in one other direction), so the colour
    (n_mu mod 2, sum_{nu != mu} n_nu mod 4) separates them (8 colours; needs L_nu divisible by 4).
    """
    idx = np.indices(shape)
    out = np.empty((4,) + tuple(shape), dtype=np.int32)
    for mu in range(4):
        if not two:
            out[mu] = idx.sum(axis=0) % 2
        else:
            rest = (idx.sum(axis=0) - idx[mu]) % 4
            out[mu] = (idx[mu] % 2) * 4 + rest
    return out


@functools.partial(jax.jit, static_argnames=("two", "ncol", "hits"))
def _cool_sweep(u, colours, c1, c2, two: bool, ncol: int, hits: int):
    for mu in range(4):

        def body(c, v, mu=mu):
            st = _total_staple(v, mu, c1, c2, two)
            new = _maximise(v[..., mu, :, :], st, hits)
            sel = (colours[mu] == c)[..., None, None]
            return v.at[..., mu, :, :].set(jnp.where(sel, new, v[..., mu, :, :]))

        u = jax.lax.fori_loop(0, ncol, body, u)
    return u


# -- measurements -------------------------------------------------------------------------------------------


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


def loop_action(links, size: int = 1, *, boundary: str = "periodic") -> float:
    """S_m = sum_n sum_{mu < nu} 2 Re tr(1 - P^{m x m}_{mu nu}(n)) for square loops of side ``size`` = m.

    m = 1 is the Wilson action (beta = 2N); for smooth fields S_m -> m^4 S_cont.  Open boundaries: only
    loops whose links all join lattice sites.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        size: 1 or 2 (loop side in lattice units).
        boundary: 'periodic' or 'open'.
    Returns:
        float.
    Raises:
        ValueError / TypeError on a bad argument.
    """
    u = _links(links)
    m = _v.positive_int("size", size)
    _v.choice("boundary", boundary, _BOUNDARIES)
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
    return float(np.nansum(_charge_density(_links(links), m, boundary)))


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


# -- stability -----------------------------------------------------------------------------------------------

#: Real stability interval [-RK3_STABILITY, 0] of every explicit three-stage third-order Runge-Kutta scheme,
#: whose stability function on dy/dt = lambda y is R(z) = 1 + z + z^2/2 + z^3/6 (Hairer and Wanner, Solving
#: Ordinary Differential Equations II, Springer 1996, section IV.2, from memory; the root is computed
#: below and checked by test_the_rk3_stability_bound_is_the_real_root_of_r_equal_minus_one): the real root of R(z) = -1,
#: 2.5127.  Luescher's integrator reduces to such a scheme on the linearised flow (its stages 1/4, 5/12, 1/3).
RK3_STABILITY = float(-min(r.real for r in np.roots([1.0 / 6.0, 0.5, 1.0, 2.0]) if abs(r.imag) < 1e-9))

#: Relative rise of the driving action between two measurements above which a run is unstable (rounding of
#: the lattice sums is ~1e-13 relative).
ACTION_RISE_TOL = 1e-9


@functools.lru_cache(maxsize=64)
def max_flow_frequency(eps: float = 1.0) -> float:
    """Largest eigenvalue lambda_max of the gradient flow of S(eps) linearised about the trivial field.

    Small fields A_mu(p) (momentum p, lattice units) flow by dA/dt = -M(p) A with the tree-level kernel
    M_nu rho = delta_nu rho sum_mu W_mu nu p_mu^2 - W_nu rho p_nu p_rho, p_mu = 2 sin(p_mu / 2), and the
    plane weights W_mu nu = c1 + c2 (4 cos^2(p_mu / 2)) (4 cos^2(p_nu / 2)) of the 1x1 and 2x2 loops
    (the 2x2 flux is (1 + e^{i p_mu})(1 + e^{i p_nu}) times the 1x1 flux; common practice).  Maximised over a
    17^4 grid of [0, pi]^4: 16 for the Wilson flow (the staggered mode, p = pi), 64/3 for eps = 0;
    tests/test_flow_stability.py checks both against power iteration of the module's own force.
    """
    c1, c2 = improved_coefficients(eps)
    p = np.linspace(0.0, np.pi, 17)
    grid = np.stack(np.meshgrid(p, p, p, p, indexing="ij"), axis=-1).reshape(-1, 4)
    ph = 2.0 * np.sin(grid / 2.0)
    c = 4.0 * np.cos(grid / 2.0) ** 2
    w = c1 + c2 * c[:, :, None] * c[:, None, :]
    m = -w * ph[:, :, None] * ph[:, None, :]
    diag = np.sum(w * (ph**2)[:, :, None], axis=1) - np.diagonal(w, axis1=1, axis2=2) * ph**2
    m[:, np.arange(4), np.arange(4)] = diag
    return float(np.max(np.linalg.eigvalsh(m)))


def flow_step_bound(eps: float = 1.0) -> float:
    """Largest stable step of `gradient_flow`: RK3_STABILITY / `max_flow_frequency` (0.157 for the
    Wilson flow, 0.118 for eps = 0); beyond it the shortest wavelengths grow instead of being damped."""
    return RK3_STABILITY / max_flow_frequency(_v.finite_float("eps", eps))


def _check_rise(prev, cur, kind: str, where: str, advice: str):
    """Raise when the driving action rose from ``prev`` to ``cur`` beyond rounding (an unstable run)."""
    if cur - prev > ACTION_RISE_TOL * max(abs(prev), 1.0) or not np.isfinite(cur):
        raise ValueError(
            f"the {kind} is unstable: the action S(eps) rose from {prev:.10g} to {cur:.10g} {where}, where it "
            f"must fall; {advice}"
        )


# -- front doors ---------------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True, eq=False)
class SmoothingRecord:
    """Observables along a flow or a cooling run, one entry per measurement; all (m,) float64.

    time: flow time t / a^2 (flow) or sweeps done (cooling); wilson_action: S_W (beta = 2N); action: the
    driving action S(eps) (= S_W for eps = 1); clover_charge: Q of the 1x1 clover;
    improved_charge: `improved_charge`; size: `instanton_size` (rho/a).
    """

    time: np.ndarray
    wilson_action: np.ndarray
    action: np.ndarray
    clover_charge: np.ndarray
    improved_charge: np.ndarray
    size: np.ndarray
    eps: float
    kind: str

    @classmethod
    def _from(cls, times, rows, eps, kind):
        r = np.asarray(rows, dtype=float).reshape(-1, 5)
        return cls(np.asarray(times, float), r[:, 0], r[:, 1], r[:, 2], r[:, 3], r[:, 4], float(eps), kind)


def _check_periodic_shape(shape, two: bool, what: str):
    if two and any(s % 4 for s in shape):
        raise ValueError(f"{what} with 2x2 loops needs every lattice extent divisible by 4; found shape {tuple(shape)}")
    if any(s % 2 for s in shape):
        raise ValueError(f"{what} needs even lattice extents (checkerboard); found shape {tuple(shape)}")


def gradient_flow(links, t: float, step: float = 0.01, *, eps: float = 1.0, every: int = 1, progress=None):
    """Gradient flow dV/dt = Z(V) V, Z = -g0^2 dS(eps) (module docstring), to flow time ``t`` (units a^2).

    Integrated with Luescher's third-order Runge-Kutta scheme (JHEP 08 (2010) 071, appendix C) with
    exact exponentials of traceless anti-Hermitian matrices, so the links stay in SU(N) to rounding.
    eps = 1 is the Wilson flow; another eps flows by the improved action S(eps) (2x2 loops included).
    The lattice is periodic.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        t: flow time >= 0 in lattice units; n = ceil(t / step) equal steps of t / n are taken.
        step: nominal step > 0 (0.01-0.05 is common practice for the Wilson flow); the effective step
            must lie below `flow_step_bound` (0.157 for the Wilson flow).
        eps: the action parameter of `improved_action`.
        every: measure after every ``every`` steps (and at t = 0 and the end).
        progress: None (a line on stderr on a terminal), False, True or progress(done, total) per step.
    Returns:
        (links (same shape) complex128 numpy, `SmoothingRecord`).
    Raises:
        ValueError / TypeError on a bad argument, links that are not finite SU(N) matrices, a step beyond
        `flow_step_bound`, or an action that rises between two measurements (an unstable flow,
        naming the step, the actions before and after and a smaller step).
    """
    u = _links(links)
    tt = _v.finite_float("t", t)
    if tt < 0:
        raise ValueError(f"t must be >= 0; found {t!r}")
    h = _v.positive_float("step", step)
    every = _v.positive_int("every", every)
    c1, c2 = improved_coefficients(eps)
    two = c2 != 0.0
    n = int(math.ceil(tt / h - 1e-9)) if tt > 0 else 0
    h = tt / n if n else h
    bound = flow_step_bound(eps)
    if n and h > bound:
        raise ValueError(
            f"step must be below the stability bound {bound:.4f} of the third-order Runge-Kutta flow for eps = "
            f"{float(eps):g} (h lambda_max <= {RK3_STABILITY:.4f}, lambda_max = {max_flow_frequency(float(eps)):.4g}: "
            f"flow_step_bound); found an effective step {h:g} (t = {tt:g}, step = {step!r}); use step <= "
            f"{0.25 * bound:.3g} (0.01-0.05 is common practice)"
        )
    times, rows = [0.0], [_measure(u, c1, c2, two)]
    report = _progress.sink(progress, "flow steps")
    for i in range(1, n + 1):
        u = _rk3_step(u, h, c1, c2, two)
        if report is not None:
            report(i, n)
        if i % every == 0 or i == n:
            times.append(i * h)
            rows.append(_measure(u, c1, c2, two))
            _check_rise(
                float(rows[-2][1]),
                float(rows[-1][1]),
                "flow",
                f"between flow times {times[-2]:g} and {times[-1]:g} (step {i} of {n}, step size {h:g})",
                f"use a smaller step, e.g. step={0.25 * h:.3g}",
            )
    return np.asarray(u), SmoothingRecord._from(times, [np.asarray(r) for r in rows], eps, "flow")


def wilson_flow(links, t: float, step: float = 0.01, *, every: int = 1, progress=None):
    """The Wilson flow (Luescher, JHEP 08 (2010) 071): `gradient_flow` with eps = 1."""
    return gradient_flow(links, t, step, eps=1.0, every=every, progress=progress)


def cool(links, sweeps: int, *, eps: float = 1.0, hits: int = 3, every: int = 1, progress=None):
    """Plain cooling: every link in turn replaced by the SU(N) matrix that minimises the action with the
    other links fixed, i.e. maximises Re tr(U Sigma) for its staple sum Sigma (SU(2): Sigma^dag normalised;
    SU(N >= 3): ``hits`` Cabibbo-Marinari SU(2)-subgroup passes, see `_maximise`).

    Sweeps go direction by direction and colour by colour: links of one direction and one colour share no
    loop, so updating them at once is the same as updating them one after the other.  Wilson action
    (eps = 1): checkerboard parity of the site (2 colours, even extents).  eps != 1 (1x1 + 2x2 action
    S(eps), staples of the 2x2 loops included): 8 colours (n_mu mod 2, sum_{nu != mu} n_nu mod 4),
    extents divisible by 4.  The lattice is periodic.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        sweeps: number of sweeps >= 0.
        eps: the action parameter of `improved_action` (1: Wilson).
        hits: subgroup passes per link for N >= 3 (ignored for SU(2), where one step is exact).
        every: measure after every ``every`` sweeps (and before the first and after the last).
        progress: None (a line on stderr on a terminal), False, True or progress(done, total) per sweep.
    Returns:
        (links complex128 numpy, `SmoothingRecord` with time = sweeps done).
    Raises:
        ValueError / TypeError on a bad argument or lattice shape, links that are not finite SU(N)
        matrices, or an action that rises between two measurements (naming the sweeps and actions).
    """
    u = _links(links)
    sweeps = _v.nonnegative_int("sweeps", sweeps)
    hits = _v.positive_int("hits", hits)
    every = _v.positive_int("every", every)
    c1, c2 = improved_coefficients(eps)
    two = c2 != 0.0
    shape = u.shape[:4]
    _check_periodic_shape(shape, two, "cooling")
    colours = jnp.asarray(_colours(shape, two))
    ncol = 8 if two else 2
    times, rows = [0], [_measure(u, c1, c2, two)]
    report = _progress.sink(progress, "cooling sweeps")
    for i in range(1, sweeps + 1):
        u = _cool_sweep(u, colours, c1, c2, two, ncol, hits)
        if report is not None:
            report(i, sweeps)
        if i % every == 0 or i == sweeps:
            times.append(i)
            rows.append(_measure(u, c1, c2, two))
            _check_rise(
                float(rows[-2][1]),
                float(rows[-1][1]),
                "cooling",
                f"between sweeps {times[-2]} and {i}",
                "each cooling update minimises the action with the other links fixed, so the links have left "
                "SU(N) (check them with instantonkit.check_links)",
            )
    return np.asarray(u), SmoothingRecord._from(times, [np.asarray(r) for r in rows], eps, "cooling")
