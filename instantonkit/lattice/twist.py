"""Twisted boundary conditions on the lattice torus: the twist tensor, its Z_N plaquette factors, twisted
observables, and the exact links of 't Hooft's constant-flux field.

A twist ('t Hooft, Nucl. Phys. B 153 (1979) 141, from memory) is an antisymmetric tensor of integers
n_mu nu mod N.  On the lattice (common practice) it sits on the plaquettes of one corner: for each plane
(mu, nu) the plaquettes at n_mu = c_mu, n_nu = c_nu (every value of the other two coordinates; the
corner c defaults to the last site (L1 - 1, ..., L4 - 1)) are multiplied by the centre element

    z_mu nu = exp(2 pi i n_mu nu / N),     U_p -> z_mu nu U_p,

and every other plaquette by 1.  The twisted Wilson action is S = beta sum_p (1 - Re tr(z_p U_p) / N)
(beta = 2N by default, as `instantonkit.lattice.observables.wilson_action`), the twisted clover uses
z_p U_p for each of its four leaves.  z is central, so a lattice gauge transformation leaves every
twisted observable unchanged; multiplying the links U_mu(n) of the sheet n_mu = c_mu, n_nu = c_nu by
z_mu nu (a "singular gauge transformation") gives the plaquette of plane (mu, nu) at c the factor z_mu nu
and the one at c - nu_hat the factor conj(z_mu nu) (the planes (mu, rho) get z conj(z) = 1), so with the
twist moved from c to c - nu_hat every twisted plaquette is unchanged: only the twist tensor, not its
place, is physical.

The observables here reuse `instantonkit.lattice.observables`: they compute the untwisted quantity and
then correct the few plaquettes (and the clovers of the four sites around each) that carry a factor.
Links are ``(L1, L2, L3, L4, 4, N, N)`` complex128 on a periodic lattice (twists need the torus).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..ansatz.twisted import flux_generator, twist_eaters
from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from . import observables as _obs
from .observables import PLANES

__all__ = [
    "twist_tensor",
    "twist_corner",
    "twist_factors",
    "twisted_plaquettes",
    "twisted_plaquette_traces",
    "twisted_average_plaquette",
    "twisted_wilson_action",
    "twisted_clover_field_strength",
    "twisted_clover_charge_density",
    "twisted_clover_charge",
    "constant_flux_links",
]


# -- the twist tensor ---------------------------------------------------------------------------------------


def _entry(name: str, mu: int, nu: int, value) -> int:
    """One entry n_{mu+1, nu+1} as an int (integral floats accepted; booleans, fractions and text refused)."""
    where = f"{name} entry n_{mu + 1}{nu + 1} ({name}[{mu}, {nu}])"
    if isinstance(value, (bool, np.bool_)) or isinstance(value, (str, bytes)):
        raise TypeError(f"{where} must be an integer; found {value!r}")
    try:
        f = float(value)
    except (TypeError, ValueError) as err:
        raise TypeError(f"{where} must be an integer; found {value!r}") from err
    if not np.isfinite(f) or f != int(f) or (isinstance(value, complex) and value.imag != 0):
        raise ValueError(f"{where} must be an integer; found {value!r}")
    return int(f)


def twist_tensor(twist, n: int) -> np.ndarray:
    """The twist tensor n_mu nu of SU(n), checked: (4, 4) int64, antisymmetric, |n_mu nu| < n.

    Args:
      twist: a (4, 4) array of integers (zero-based indices, ``twist[0, 1]`` = n_12), or a mapping of
        one-based planes to integers, e.g. ``{(1, 2): 1, (3, 4): 1}`` (mu < nu; the rest follows by
        antisymmetry).
      n: the N of SU(N), >= 2.
    Returns:
      (4, 4) int64 array, n_nu mu = -n_mu nu.
    Raises:
      TypeError: a non-integer entry (bool, text, None) naming the entry; ValueError: a wrong shape, a
        fractional entry, a non-zero diagonal, a tensor that is not antisymmetric or an entry with
        |n_mu nu| >= N, naming the entry and the value found.
    """
    n = _v.positive_int("n", n)
    if n < 2:
        raise ValueError(f"n (the N of SU(N)) must be at least 2; found {n}")
    if isinstance(twist, Mapping):
        out = np.zeros((4, 4), dtype=np.int64)
        for key, value in twist.items():
            if (
                not isinstance(key, tuple)
                or len(key) != 2
                or not all(isinstance(k, (int, np.integer)) and not isinstance(k, bool) for k in key)
                or not (1 <= key[0] < key[1] <= 4)
            ):
                raise ValueError(f"twist keys must be one-based planes (mu, nu) with 1 <= mu < nu <= 4; found {key!r}")
            mu, nu = int(key[0]) - 1, int(key[1]) - 1
            out[mu, nu] = _entry("twist", mu, nu, value)
            out[nu, mu] = -out[mu, nu]
    else:
        if isinstance(twist, (str, bytes)) or twist is None:
            raise TypeError(f"twist must be a (4, 4) array of integers or a mapping {{(mu, nu): n}}; found {twist!r}")
        arr = np.asarray(twist, dtype=object)
        if arr.shape != (4, 4):
            raise ValueError(f"twist must have shape (4, 4); found {arr.shape}")
        out = np.array([[_entry("twist", mu, nu, arr[mu, nu]) for nu in range(4)] for mu in range(4)], dtype=np.int64)
    for mu in range(4):
        if out[mu, mu] != 0:
            raise ValueError(f"twist entry n_{mu + 1}{mu + 1} (twist[{mu}, {mu}]) must be 0; found {out[mu, mu]}")
    for mu, nu in PLANES:
        a, b = out[mu, nu], out[nu, mu]
        if b != -a:
            raise ValueError(
                f"twist must be antisymmetric: n_{mu + 1}{nu + 1} = {a} but n_{nu + 1}{mu + 1} = {b} "
                f"(expected {-a}; twist[{nu}, {mu}])"
            )
        if abs(a) >= n:
            raise ValueError(
                f"twist entry n_{mu + 1}{nu + 1} (twist[{mu}, {nu}]) is out of range for SU({n}): expected an integer "
                f"with |n| <= {n - 1} (a twist counts mod N); found {a}"
            )
    return out


def twist_corner(corner, shape) -> tuple:
    """The site (c1, c2, c3, c4) of the twisted plaquettes, checked (0 <= c_mu < L_mu); None: the last site."""
    shape = tuple(shape)
    if corner is None:
        return tuple(s - 1 for s in shape)
    if isinstance(corner, (str, bytes)):
        raise TypeError(f"corner must be four integers (c1, c2, c3, c4); found {corner!r}")
    try:
        items = tuple(corner)
    except TypeError as err:
        raise TypeError(f"corner must be four integers (c1, c2, c3, c4); found {corner!r}") from err
    if len(items) != 4 or not all(isinstance(c, (int, np.integer)) and not isinstance(c, bool) for c in items):
        raise ValueError(f"corner must be four integers (c1, c2, c3, c4); found {corner!r}")
    bad = [d for d in range(4) if not 0 <= int(items[d]) < shape[d]]
    if bad:
        d = bad[0]
        raise ValueError(
            f"corner must lie on the lattice, 0 <= c_mu < L_mu; found c_{d + 1} = {items[d]} for L_{d + 1} = {shape[d]}"
        )
    return tuple(int(c) for c in items)


def _twisted_planes(tensor, n):
    """[(p, mu, nu, z)] for the planes with a non-zero twist; z = exp(2 pi i n_mu nu / N)."""
    return [(p, mu, nu, np.exp(2j * np.pi * tensor[mu, nu] / n)) for p, (mu, nu) in enumerate(PLANES) if tensor[mu, nu]]


def _sheet(mu, nu, cm, cn):
    """Index of the sites with n_mu = cm, n_nu = cn (every value of the other two coordinates)."""
    sl: list[int | slice] = [slice(None)] * 4
    sl[mu], sl[nu] = cm, cn
    return tuple(sl)


def twist_factors(twist, shape, n: int, *, corner=None) -> np.ndarray:
    """The Z_N factor of every plaquette: exp(2 pi i n_mu nu / N) at the corner of plane (mu, nu), else 1.

    Args:
      twist: the twist tensor (`twist_tensor`); shape: (L1, L2, L3, L4); n: the N of SU(N);
      corner: the site of the twisted plaquettes (default the last site).
    Returns:
      (L1, L2, L3, L4, 6) complex128, plane order `instantonkit.lattice.observables.PLANES`.
    """
    tensor = twist_tensor(twist, n)
    shape = _v.lattice_shape("shape", shape)
    c = twist_corner(corner, shape)
    out = np.ones(shape + (6,), dtype=np.complex128)
    for p, mu, nu, z in _twisted_planes(tensor, n):
        out[_sheet(mu, nu, c[mu], c[nu]) + (p,)] = z
    return out


# -- the plaquettes at the corner ---------------------------------------------------------------------------


def _corner_links(u, mu, nu, c):
    """U_mu(c), U_nu(c + mu), U_mu(c + nu), U_nu(c) on the corner sheet of plane (mu, nu); each (La, Lb, N, N)."""
    cm, cn = c[mu], c[nu]
    up_m, up_n = (cm + 1) % u.shape[mu], (cn + 1) % u.shape[nu]
    a = np.asarray(u[_sheet(mu, nu, cm, cn) + (mu,)])
    b = np.asarray(u[_sheet(mu, nu, up_m, cn) + (nu,)])
    d = np.asarray(u[_sheet(mu, nu, cm, up_n) + (mu,)])
    e = np.asarray(u[_sheet(mu, nu, cm, cn) + (nu,)])
    return a, b, d, e


def _dag(m):
    return np.conj(np.swapaxes(m, -1, -2))


def _corner_plaquette(u, mu, nu, c):
    """U_mu(c) U_nu(c + mu) U_mu(c + nu)^dag U_nu(c)^dag on the corner sheet; (La, Lb, N, N)."""
    a, b, d, e = _corner_links(u, mu, nu, c)
    return a @ b @ _dag(d) @ _dag(e)


def _setup(links, twist, corner):
    """(checked links, tensor, corner, N)."""
    u = _check_links(links)
    n = u.shape[-1]
    tensor = twist_tensor(twist, n)
    return u, tensor, twist_corner(corner, u.shape[:4]), n


def twisted_plaquettes(links, twist, *, corner=None) -> np.ndarray:
    """Twisted plaquettes z_p U_p; (L1, L2, L3, L4, 6, N, N) complex128 (plane order ``PLANES``).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links of a periodic lattice.
      twist: the twist tensor (`twist_tensor`: (4, 4) integers or ``{(mu, nu): n}``).
      corner: the site of the twisted plaquettes (default the last site).
    Raises:
      ValueError / TypeError: bad links (`instantonkit.check_links`), twist or corner.
    """
    u, tensor, c, n = _setup(links, twist, corner)
    out = _obs.plaquettes(u)
    for p, mu, nu, z in _twisted_planes(tensor, n):
        out[_sheet(mu, nu, c[mu], c[nu]) + (p,)] *= z
    return out


def twisted_plaquette_traces(links, twist, *, corner=None) -> np.ndarray:
    """Re tr(z_p U_p) / N per site and plane; (L1, L2, L3, L4, 6) float64 (arguments as `twisted_plaquettes`)."""
    u, tensor, c, n = _setup(links, twist, corner)
    return _twisted_traces(u, tensor, c, n)


def _twisted_traces(u, tensor, c, n):
    out = _obs.plaquette_traces(u)
    for p, mu, nu, z in _twisted_planes(tensor, n):
        tr = np.trace(_corner_plaquette(u, mu, nu, c), axis1=-2, axis2=-1)
        out[_sheet(mu, nu, c[mu], c[nu]) + (p,)] = np.real(z * tr) / n
    return out


def twisted_average_plaquette(links, twist, *, corner=None) -> float:
    """Mean of Re tr(z_p U_p) / N over all plaquettes (arguments as `twisted_plaquettes`)."""
    return float(np.mean(twisted_plaquette_traces(links, twist, corner=corner)))


def twisted_wilson_action(links, twist, beta: float | None = None, *, corner=None) -> float:
    """Twisted Wilson action S = beta sum_p (1 - Re tr(z_p U_p) / N), beta = 2N by default (module docstring).

    With a zero twist it is `instantonkit.lattice.observables.wilson_action` (periodic).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links of a periodic lattice.
      twist: the twist tensor (`twist_tensor`).
      beta: coupling, finite and > 0 (default 2N, so S -> the continuum action).
      corner: the site of the twisted plaquettes (default the last site).
    Returns:
      float.
    Raises:
      ValueError / TypeError: bad links, twist, beta or corner.
    """
    u, tensor, c, n = _setup(links, twist, corner)
    b = 2.0 * n if beta is None else _v.positive_float("beta", beta)
    return float(b * np.sum(1.0 - _twisted_traces(u, tensor, c, n)))


# -- twisted clovers ----------------------------------------------------------------------------------------


def _clover_part(x, n):
    """[(X - X^dag) - tr(X - X^dag) / N] / 8: the clover's linear map from the leaf sum to F; (..., N, N)."""
    a = x - _dag(x)
    tr = np.trace(a, axis1=-2, axis2=-1)
    return (a - tr[..., None, None] * np.eye(n) / n) / 8.0


def _leaf_corrections(u, tensor, c, n):
    """The change of the clover F (lattice units) by the twist: [(sites, mu, nu, dF)], sites four (k,) int
    arrays, dF (k, N, N), one entry per site sheet around each twisted corner (`twisted_clover_field_strength`)."""
    out = []
    for _, mu, nu, z in _twisted_planes(tensor, n):
        umu, unu_up, _, unu = _corner_links(u, mu, nu, c)  # U_mu(c), U_nu(c + mu), -, U_nu(c)
        p = _corner_plaquette(u, mu, nu, c)
        w = umu @ unu_up
        cm, cn = c[mu], c[nu]
        um, un = (cm + 1) % u.shape[mu], (cn + 1) % u.shape[nu]
        rest = [d for d in range(4) if d not in (mu, nu)]
        grid = np.indices((u.shape[rest[0]], u.shape[rest[1]])).reshape(2, -1)
        for (sm, sn), leaf in (
            ((cm, cn), p),
            ((um, cn), _dag(umu) @ p @ umu),
            ((cm, un), _dag(unu) @ p @ unu),
            ((um, un), _dag(w) @ p @ w),
        ):
            sites = [np.empty(grid.shape[1], dtype=np.intp) for _ in range(4)]
            sites[mu][:], sites[nu][:] = sm, sn
            sites[rest[0]][:], sites[rest[1]][:] = grid
            out.append((tuple(sites), mu, nu, _clover_part((z - 1.0) * leaf, n).reshape((-1, n, n))))
    return out


def twisted_clover_field_strength(links, twist, *, spacing: float = 1.0, corner=None) -> np.ndarray:
    """Clover field strength with twisted leaves, F_mu nu / spacing^2; (L1, L2, L3, L4, 4, 4, N, N) complex128.

    The clover of `instantonkit.lattice.observables.clover_field_strength` (F = [(Q - Q^dag) - tr / N] / 8,
    Q the sum of the four leaves, linear in Q), corrected at the four sites c, c + mu, c + nu, c + mu + nu
    around each twisted corner plaquette P by [(z - 1) L - h.c. - tr] / 8, where L is P read from that site
    (P, U_mu(c)^dag P U_mu(c), U_nu(c)^dag P U_nu(c), W^dag P W with W = U_mu(c) U_nu(c + mu)).

    Args:
      links, twist, corner: as `twisted_plaquettes`; spacing: lattice spacing a > 0.
    Raises:
      ValueError / TypeError: bad links, twist, spacing or corner.
    """
    u, tensor, c, n = _setup(links, twist, corner)
    a2 = _v.positive_float("spacing", spacing) ** 2
    out = _obs.clover_field_strength(u, spacing=spacing)
    for sites, mu, nu, df in _leaf_corrections(u, tensor, c, n):
        out[sites + (mu, nu)] += df / a2
        out[sites + (nu, mu)] -= df / a2
    return out


def _charge_from_clover(f):
    """q = -1/(32 pi^2) eps tr F F = 8 c (tr F12 F34 - tr F13 F24 + tr F14 F23); f: (..., 4, 4, N, N) -> (...)."""

    def trf(a, b):
        return np.real(np.einsum("...ij,...ji->...", f[..., a[0], a[1], :, :], f[..., b[0], b[1], :, :]))

    return 8.0 * CHARGE_DENSITY_FACTOR * (trf((0, 1), (2, 3)) - trf((0, 2), (1, 3)) + trf((0, 3), (1, 2)))


def twisted_clover_charge_density(links, twist, *, spacing: float = 1.0, corner=None) -> np.ndarray:
    """Clover charge density with twisted leaves, q(n) / spacing^4; (L1, L2, L3, L4) float64.

    q = -1/(32 pi^2) eps tr F F (conventions module) of `twisted_clover_field_strength`; with a zero twist
    it is `instantonkit.lattice.observables.clover_charge_density` (periodic).  Memory stays that of the
    untwisted density: the clovers are those of `instantonkit.lattice.observables.clover_charge_density`
    except on the slab n_mu in {c_mu, c_mu + 1}, n_nu in {c_nu, c_nu + 1} of each twisted plane, which is
    recomputed from a block four sites wide in mu and nu (its middle two are exact) with every correction.
    """
    u, tensor, c, n = _setup(links, twist, corner)
    a4 = _v.positive_float("spacing", spacing) ** 4
    q = _obs.clover_charge_density(u)
    corrections = _leaf_corrections(u, tensor, c, n)
    shape = u.shape[:4]
    for _, mu, nu, _ in _twisted_planes(tensor, n):
        axes = [np.arange(s) for s in shape]
        for d in (mu, nu):
            axes[d] = (c[d] + np.arange(-1, 3)) % shape[d]
        f = _obs.clover_field_strength(u[np.ix_(*axes)])
        for sites, m, v, df in corrections:
            pos = list(sites)
            keep = np.ones(len(sites[0]), dtype=bool)
            for d in (mu, nu):
                first, second = sites[d] == c[d], sites[d] == (c[d] + 1) % shape[d]
                keep &= first | second
                pos[d] = np.where(first, 1, 2)
            idx = tuple(x[keep] for x in pos)
            f[idx + (m, v)] += df[keep]
            f[idx + (v, m)] -= df[keep]
        inner: list = [slice(None)] * 4
        out_axes = list(axes)
        for d in (mu, nu):
            inner[d] = slice(1, 3)
            out_axes[d] = axes[d][1:3]
        q[np.ix_(*out_axes)] = _charge_from_clover(f[tuple(inner)])
    return q / a4


def twisted_clover_charge(links, twist, *, corner=None) -> float:
    """Total twisted clover charge Q = sum_n a^4 q(n) (arguments as `twisted_plaquettes`)."""
    return float(np.sum(twisted_clover_charge_density(links, twist, corner=corner)))


# -- the constant-flux field on the lattice -----------------------------------------------------------------


def constant_flux_links(shape, n: int = 2) -> np.ndarray:
    """Exact links of 't Hooft's constant-flux field (`instantonkit.ansatz.twisted`) on an L1 x ... x L4 lattice.

    With lattice spacing a = 1 (box sides L_mu = number of sites; the links depend only on the shape),
    H the flux generator (`instantonkit.ansatz.twisted.flux_generator`), E1, E2 its twist eaters
    (`instantonkit.ansatz.twisted.twist_eaters`), phi12 = 2 pi / ((N - 1) L1 L2), phi34 = 2 pi / (L3 L4):

        U_2(n) = exp(-i phi12 n1 H) (times E2 at n2 = L2 - 1),   U_4(n) = exp(-i phi34 n3 H),
        U_1(n) = 1, at n1 = L1 - 1: exp(i phi12 L1 n2 H) E1,     U_3(n) = 1, at n3 = L3 - 1: exp(i phi34 L3 n4 H):

    the transporters exp(a A_mu) of the continuum potential inside the box (A is constant along each
    link), times the transition function Omega_mu at the far site on the links that wrap round.  Every
    plaquette of plane 12 is exp(-i phi12 H), of plane 34 exp(-i phi34 H), the rest 1, except the corner
    plaquettes (last site), which carry exp(-2 pi i n_mu nu / N) on top, removed by the twist n_12 = 1,
    n_34 = N - 1 (`instantonkit.ansatz.twisted.constant_flux_twist`): the twisted plaquettes are constant.

    Args:
      shape: (L1, L2, L3, L4) sites, each >= 2.
      n: N of SU(N), >= 2.
    Returns:
      (L1, L2, L3, L4, 4, N, N) complex128 SU(N) links.
    Raises:
      ValueError / TypeError: a bad shape (an extent below 2) or n.
    """
    shape = _v.lattice_shape("shape", shape)
    if min(shape) < 2:
        raise ValueError(f"shape must have every extent >= 2 for a twisted torus; found {shape}")
    h = np.diagonal(flux_generator(n))
    e1, e2 = twist_eaters(n)
    n = h.size
    l1, l2, l3, l4 = shape
    idx = np.indices(shape, dtype=np.float64)
    phi12, phi34 = 2.0 * np.pi / ((n - 1) * l1 * l2), 2.0 * np.pi / (l3 * l4)
    theta = np.zeros(shape + (4,))
    theta[..., 1] = phi12 * idx[0]
    theta[..., 0] = np.where(idx[0] == l1 - 1, -phi12 * l1 * idx[1], 0.0)
    theta[..., 3] = phi34 * idx[2]
    theta[..., 2] = np.where(idx[2] == l3 - 1, -phi34 * l3 * idx[3], 0.0)
    out = np.zeros(shape + (4, n, n), dtype=np.complex128)
    out[..., np.arange(n), np.arange(n)] = np.exp(-1j * theta[..., None] * h)
    out[l1 - 1, :, :, :, 0] = out[l1 - 1, :, :, :, 0] @ e1
    out[:, l2 - 1, :, :, 1] = out[:, l2 - 1, :, :, 1] @ e2
    return out
