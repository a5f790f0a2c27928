"""Gauge-invariant observables of lattice link arrays: plaquettes, Wilson action, clover field strength
and charge, and lattice gauge transformations.

Links (conventions module, see `instantonkit.lattice.starts`): ``U_mu(n)`` joins site n to n + mu_hat,
arrays ``(L1, L2, L3, L4, 4, N, N)``; a gauge transformation acts as
``U_mu(n) -> g(n) U_mu(n) g(n + mu_hat)^-1``.  Observables wrap around periodically, or with
``boundary="open"`` use only the plaquettes (clovers) whose links all join lattice sites; ``boundary=``
is one choice for all directions or four in (x1, x2, x3, x4) order (`instantonkit.lattice.boundaries`),
e.g. ``("open", "open", "open", "periodic")``, and then masks only what crosses an open direction's edge.
Every observable first checks all links (`instantonkit.core._links.check_links`: finite, special
unitary within 1e-8), so the open-boundary masks (NaN outside, then a NaN-skipping sum) exclude only
what lies outside, never damaged input.  Work is done
in time slabs of about ``SLAB_BYTES`` so memory stays bounded on large lattices (numpy arrays and
memmaps alike).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from . import boundaries as _bd
from . import thermal as _th

__all__ = [
    "PLANES",
    "BOUNDARIES",
    "gauge_transform_links",
    "random_gauge",
    "plaquettes",
    "plaquette_traces",
    "average_plaquette",
    "wilson_action",
    "clover_field_strength",
    "clover_charge_density",
    "clover_charge",
]

#: The six lattice planes (mu, nu), mu < nu, zero-based; the order of the plane axis of `plaquettes`.
PLANES = ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))
#: The twelve ordered planes (mu, nu), mu != nu (the second axis of `instantonkit.lattice.rectangles.plane_loop_sums`).
ORDERED_PLANES = tuple((mu, nu) for mu in range(4) for nu in range(4) if mu != nu)

#: The boundary conditions of link arrays: wrap around, or use only what lies inside (per direction too).
BOUNDARIES = _bd.OBSERVABLE_BOUNDARIES
#: Bytes of link data handled at once by the observables (time slabs).
SLAB_BYTES = 1 << 26


# -- lattice shapes -------------------------------------------------------------------------------------


def _check_shape(shape):
    """(L1, L2, L3, L4) as ints (`instantonkit.core._validate.lattice_shape`)."""
    return _v.lattice_shape("shape", shape)


def _check_spacing(spacing) -> np.ndarray:
    """The lattice spacings (a1, a2, a3, a4) > 0 from one number or four (`instantonkit.core._validate.spacings`)."""
    return _v.spacings("spacing", spacing)


# -- gauge transformations ------------------------------------------------------------------------------


def random_gauge(shape, n: int = 2, *, seed=0) -> np.ndarray:
    """Haar-random SU(n) matrices at every site; (L1, L2, L3, L4, n, n) complex128 (QR of Ginibre matrices,
    Mezzadri, Notices AMS 54 (2007) 592, from memory; no test checks the Haar measure itself, the tests use
    these matrices as gauge transformations and SU(n) links, where any SU(n) matrices serve)."""
    shape = _check_shape(shape)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    z = rng.normal(size=shape + (n, n)) + 1j * rng.normal(size=shape + (n, n))
    q, r = np.linalg.qr(z)
    d = np.diagonal(r, axis1=-2, axis2=-1)
    q = q * (d / np.abs(d))[..., None, :]
    det = np.linalg.det(q)
    return q * (det ** (-1.0 / n))[..., None, None]


def gauge_transform_links(links, g, *, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Gauge transformation of a link array: U_mu(n) -> g(n) U_mu(n) g(n + mu)^dag (conventions module).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex link array.
      g: (L1, L2, L3, L4, N, N) unitary matrices, one per site (e.g. `random_gauge`).
      boundary: 'periodic' (n + mu wraps) or 'open' (the outward links of the last sites are only
        left multiplied), or four of them in (x1, x2, x3, x4) order.
    Returns:
      (L1, L2, L3, L4, 4, N, N) complex128, the transformed links.
    Raises:
      ValueError: g of the wrong shape, or an unknown boundary.

    (The continuum gauge transformation of a field is `instantonkit.engine.transforms.gauge_transform`.)
    """
    u = np.asarray(links)
    g = np.asarray(g)
    _check_boundary(boundary)
    if g.shape != u.shape[:4] + u.shape[-2:]:
        raise ValueError(f"g must have shape {u.shape[:4] + u.shape[-2:]}; found {g.shape}")
    out = np.empty_like(u)
    opened = _open_directions(boundary)
    for mu in range(4):
        g_up = np.roll(g, -1, axis=mu)
        if opened[mu]:
            sl: list[slice | int] = [slice(None)] * 4
            sl[mu] = -1
            g_up = g_up.copy()
            g_up[tuple(sl)] = np.eye(u.shape[-1])
        out[..., mu, :, :] = g @ u[..., mu, :, :] @ np.conj(np.swapaxes(g_up, -1, -2))
    return out


def gauge_transform(links, g, *, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Deprecated name of `gauge_transform_links` (the public ``ik.gauge_transform`` is the continuum one)."""
    warnings.warn(
        "observables.gauge_transform / lattice.gauge_transform is deprecated; use gauge_transform_links "
        "(instantonkit.gauge_transform transforms continuum fields)",
        DeprecationWarning,
        stacklevel=2,
    )
    return gauge_transform_links(links, g, boundary=boundary)


# -- observables ------------------------------------------------------------------------------------------


def _check_boundary(boundary):
    _bd.per_direction("boundary", boundary, BOUNDARIES)


def _open_directions(boundary) -> tuple:
    """Four booleans: which directions (x1, x2, x3, x4) of ``boundary`` are open."""
    return tuple(b == "open" for b in _bd.per_direction("boundary", boundary, BOUNDARIES))


def _slabs(u, margin: int):
    """Yield (t0, t1, ext): links at times t0 - margin .. t1 - 1 + margin (periodic) in the
    structure-of-arrays layout (4, N, N, L1, L2, L3, T) complex128, which vectorises well."""
    l4 = u.shape[3]
    per_t = int(np.prod(u.shape[:3])) * int(np.prod(u.shape[4:])) * 16
    step = max(1, min(l4, SLAB_BYTES // max(per_t, 1) - 2 * margin))
    for t0 in range(0, l4, step):
        t1 = min(l4, t0 + step)
        idx = np.arange(t0 - margin, t1 + margin) % l4
        ext = np.asarray(u[:, :, :, idx], dtype=np.complex128)
        yield t0, t1, np.ascontiguousarray(np.moveaxis(ext, (4, 5, 6), (0, 1, 2)))


def _shift(arr, mu, s):
    """arr[n + s mu_hat] (periodic roll within the slab); arr: (N, N, L1, L2, L3, T)."""
    return _xp(arr).roll(arr, -s, axis=2 + mu) if s else arr


def _xp(arr):
    """numpy for numpy arrays, jax.numpy otherwise (the slab helpers serve both)."""
    return np if isinstance(arr, np.ndarray) else jnp


def _mm(a, b):
    """Matrix product of fields of matrices (N, N, ...): an explicit sum over the inner index of
    contiguous site arrays (structure-of-arrays layout vectorises well)."""
    n = a.shape[1]
    out = a[:, 0:1] * b[0:1, :]
    for j in range(1, n):
        out = out + a[:, j : j + 1] * b[j : j + 1, :]
    return out


def _dag(m):
    return _xp(m).conj(_xp(m).swapaxes(m, 0, 1))


def _plane_plaquette(ext, mu, nu):
    """U_mu(n) U_nu(n+mu) U_mu(n+nu)^dag U_nu(n)^dag on a slab; (N, N, L1, L2, L3, T)."""
    umu, unu = ext[mu], ext[nu]
    return _mm(_mm(umu, _shift(unu, mu, 1)), _mm(_dag(_shift(umu, nu, 1)), _dag(unu)))


def _plane_retrace(ext, mu, nu):
    """Re tr of the plaquette without forming it: Re sum_ij (U_mu U_nu(n+mu))_ij conj(U_nu U_mu(n+nu))_ij."""
    umu, unu = ext[mu], ext[nu]
    left = _mm(umu, _shift(unu, mu, 1))
    right = _mm(unu, _shift(umu, nu, 1))
    return np.real(np.sum(left * np.conj(right), axis=(0, 1)))


def _slab_retraces(ext):
    """Re tr U_p for the six planes on the core times of a slab with margin 1; (L1, L2, L3, T, 6)."""
    return np.stack([_plane_retrace(ext, mu, nu)[:, :, :, 1:-1] for mu, nu in PLANES], axis=-1)


def _slab_plaquettes(ext):
    """Plaquette matrices on the core times; (L1, L2, L3, T, 6, N, N)."""
    p = np.stack([_plane_plaquette(ext, mu, nu)[..., 1:-1] for mu, nu in PLANES], axis=2)
    return np.moveaxis(p, (0, 1, 2), (-2, -1, -3))


def _open_mask(shape, t0, t1, planes_need, lo: int, boundary="open"):
    """Validity of per-site plane quantities for open boundaries: (L1, L2, L3, t1 - t0) bool per plane.

    A plane (mu, nu) quantity at n is valid when lo <= n_d <= L_d - 2 for each open d of mu, nu
    (lo = 0 plaquettes, 1 clovers); a periodic direction never masks.
    """
    opened = _open_directions(boundary)
    idx = np.meshgrid(*[np.arange(s) for s in shape[:3]], np.arange(t0, t1), indexing="ij")
    masks = []
    for mu, nu in planes_need:
        ok = np.ones(idx[0].shape, dtype=bool)
        for d in (mu, nu):
            if not opened[d]:
                continue
            ok &= (idx[d] >= lo) & (idx[d] <= shape[d] - 2)
        masks.append(ok)
    return masks


def plaquette_traces(links, *, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Re tr U_p / N for every site and plane; (L1, L2, L3, L4, 6) float64 (plane order `PLANES`).

    Open boundaries: NaN for plaquettes that leave the lattice (n_mu or n_nu = L - 1).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      (L1, L2, L3, L4, 6) float64, Re tr U_p / N per site and plane.
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    u = _check_links(links)
    _check_boundary(boundary)
    return _traces(u, boundary)


def _traces(u, boundary):
    """`plaquette_traces` of checked links."""
    n = u.shape[-1]
    return _per_plaquette(u, boundary, lambda ext: np.asarray(_slab_retraces(ext)) / n, np.empty(u.shape[:4] + (6,)))


def _per_plaquette(u, boundary, slab_values, out):
    """``out`` (L1, L2, L3, L4, 6, ...) filled time slab by time slab with ``slab_values(ext)``, NaN for the
    plaquettes that leave an open lattice."""
    for t0, t1, ext in _slabs(u, 1):
        out[:, :, :, t0:t1] = slab_values(ext)
        if any(_open_directions(boundary)):
            for p, ok in enumerate(_open_mask(u.shape, t0, t1, PLANES, 0, boundary)):
                out[:, :, :, t0:t1, p][~ok] = np.nan
    return out


def plaquettes(links, *, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Plaquette matrices U_mu(n) U_nu(n+mu) U_mu(n+nu)^dag U_nu(n)^dag; (L1, L2, L3, L4, 6, N, N).

    Plane order `PLANES`; ``plaquette = exp(a^2 F_mu nu + O(a^3))`` (conventions module).
    Open boundaries: NaN for plaquettes that leave the lattice.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      (L1, L2, L3, L4, 6, N, N) complex128 plaquette matrices.
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    u = _check_links(links)
    _check_boundary(boundary)
    out = np.empty(u.shape[:4] + (6,) + u.shape[-2:], dtype=np.complex128)
    return _per_plaquette(u, boundary, lambda ext: np.asarray(_slab_plaquettes(ext)), out)


def average_plaquette(links, *, boundary: str | Sequence[str] = "periodic") -> float:
    """Mean of Re tr U_p / N over all (for open boundaries: all inside) plaquettes.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      float, the mean of Re tr U_p / N.
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    return float(np.nanmean(plaquette_traces(links, boundary=boundary)))


def wilson_action(
    links, beta: float | None = None, *, boundary: str | Sequence[str] = "periodic", spacing=None
) -> float:
    """Wilson action S_W = beta sum_p (1 - Re tr U_p / N), beta = 2N by default (g = 1), so that
    S_W -> integral of s for smooth fields (Wilson, Phys. Rev. D 10 (1974) 2445).

    Anisotropic spacings (``spacing`` = (a1, a2, a3, a4)): each plane (mu, nu) is weighted by
    w_mu nu = a_rho a_sigma / (a_mu a_nu), i.e. 1/xi for spatial and xi for temporal plaquettes of
    (a_s, a_s, a_s, a_t), xi = a_s / a_t (derivation and source: `instantonkit.lattice.thermal`), so that
    S_W -> integral of s again; one number or None: the isotropic action.

    Sums 1 - Re tr / N directly (no cancellation against a large total); open boundaries: only
    plaquettes fully inside the lattice.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      beta: coupling, finite and > 0 (default 2N).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
      spacing: None (isotropic), one a > 0 (isotropic too) or four (a1, a2, a3, a4) > 0.
    Returns:
      float, S_W.
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    u = _check_links(links)
    _check_boundary(boundary)
    n = u.shape[-1]
    b = 2.0 * n if beta is None else _v.positive_float("beta", beta)
    w = None if spacing is None else _th.plane_weights(spacing)
    tr = _traces(u, boundary)
    if w is None or np.all(w == 1.0):
        return float(b * np.nansum(1.0 - tr))
    return float(b * np.nansum((1.0 - tr) * w))


def _clover_planes(ext):
    """Clover F_mu nu (lattice units) on a slab array for the six planes; (N, N, 6, L1, L2, L3, T).

    Q = sum of the four plaquettes in the (mu, nu) plane that start and end at n, all with the
    orientation mu -> nu; F = [(Q - Q^dag) - tr(Q - Q^dag) / N] / 8, anti-Hermitian and traceless,
    = a^2 F_mu nu + O(a^4) (common practice; e.g. Bilson-Thompson, Leinweber, Williams, Ann. Phys.
    304 (2003) 1, from memory; the O(a^2) approach is checked by
    test_clover_field_strength_approaches_the_continuum_field_as_a_squared).
    """
    res = []
    n = ext.shape[1]
    eye = np.eye(n).reshape((n, n) + (1,) * (ext.ndim - 3))
    for mu, nu in PLANES:
        umu, unu = ext[mu], ext[nu]
        umu_m = _shift(umu, mu, -1)  # U_mu(n - mu)
        unu_m = _shift(unu, nu, -1)  # U_nu(n - nu)
        q = _mm(_mm(umu, _shift(unu, mu, 1)), _mm(_dag(_shift(umu, nu, 1)), _dag(unu)))
        q = q + _mm(_mm(unu, _dag(_shift(umu_m, nu, 1))), _mm(_dag(_shift(unu, mu, -1)), umu_m))
        q = q + _mm(_mm(_dag(umu_m), _dag(_shift(unu_m, mu, -1))), _mm(_shift(umu_m, nu, -1), unu_m))
        q = q + _mm(_mm(_dag(unu_m), _shift(umu, nu, -1)), _mm(_shift(_shift(unu, nu, -1), mu, 1), _dag(umu)))
        aq = q - _dag(q)
        tr = np.trace(aq, axis1=0, axis2=1)
        res.append((aq - tr[None, None] * eye / n) / 8.0)
    return np.stack(res, axis=2)


def _slab_clover(ext):
    """(L1, L2, L3, T, 6, N, N) on the core times."""
    return np.moveaxis(_clover_planes(ext), (0, 1, 2), (-2, -1, -3))[:, :, :, 1:-1]


def _slab_charge(ext):
    """-1/(32 pi^2) eps tr F F = -(8/(32 pi^2)) (tr F12 F34 - tr F13 F24 + tr F14 F23); (L1, L2, L3, T)."""
    f = _clover_planes(ext)[..., 1:-1]

    def trf(p, r):
        return np.real(np.sum(f[:, :, p] * np.swapaxes(f[:, :, r], 0, 1), axis=(0, 1)))

    return 8.0 * CHARGE_DENSITY_FACTOR * (trf(0, 5) - trf(1, 4) + trf(2, 3))


def clover_field_strength(links, *, spacing=1.0, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Clover field strength at the sites, F_mu nu / (a_mu a_nu); (L1, L2, L3, L4, 4, 4, N, N) complex128.

    Antisymmetric in (mu, nu), anti-Hermitian and traceless; open boundaries: NaN where a clover
    leaves the lattice (n_mu or n_nu at 0 or L - 1).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      spacing: lattice spacing a > 0, or four (a1, a2, a3, a4) (results in physical units).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      (L1, L2, L3, L4, 4, 4, N, N) complex128, F_mu nu / (a_mu a_nu) (the clover of the plane is
      a_mu a_nu F_mu nu + O(a^4)).
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    u = _check_links(links)
    _check_boundary(boundary)
    a = _check_spacing(spacing)
    n = u.shape[-1]
    out = np.zeros(u.shape[:4] + (4, 4, n, n), dtype=np.complex128)
    for t0, t1, ext in _slabs(u, 1):
        fs = np.asarray(_slab_clover(ext))
        masks = _open_mask(u.shape, t0, t1, PLANES, 1, boundary) if any(_open_directions(boundary)) else None
        for p, (mu, nu) in enumerate(PLANES):
            f = fs[:, :, :, :, p] / (float(a[0]) ** 2 if a[0] == a[1] == a[2] == a[3] else a[mu] * a[nu])
            if masks is not None:
                f = np.where(masks[p][..., None, None], f, np.nan)
            out[:, :, :, t0:t1, mu, nu] = f
            out[:, :, :, t0:t1, nu, mu] = -f
    return out


def clover_charge_density(links, *, spacing=1.0, boundary: str | Sequence[str] = "periodic") -> np.ndarray:
    """Clover charge density q(n) = -1/(32 pi^2) eps tr F F per site, divided by a1 a2 a3 a4; (L1, L2, L3, L4).

    eps_{mu nu rho sigma} tr F_mu nu F_rho sigma = 8 (tr F12 F34 - tr F13 F24 + tr F14 F23)
    (conventions.CHARGE_DENSITY_FACTOR, eps_1234 = +1).  Open boundaries: NaN at sites whose clovers
    leave the lattice; the sum of a1 a2 a3 a4 q is `clover_charge`.  Each term pairs two
    complementary planes, F_mu nu F_rho sigma = C_mu nu C_rho sigma / (a1 a2 a3 a4) with C the clovers,
    so anisotropic spacings (a1, a2, a3, a4) divide by the cell volume and Q does not depend on them.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      spacing: lattice spacing a > 0, or four (a1, a2, a3, a4) (results in physical units).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      (L1, L2, L3, L4) float64, q(n) / (a1 a2 a3 a4).
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    u = _check_links(links)
    _check_boundary(boundary)
    a = _check_spacing(spacing)
    out = np.empty(u.shape[:4])
    for t0, t1, ext in _slabs(u, 1):
        q = np.asarray(_slab_charge(ext))
        if any(_open_directions(boundary)):
            ok = np.logical_and.reduce(_open_mask(u.shape, t0, t1, PLANES, 1, boundary))
            q = np.where(ok, q, np.nan)
        out[:, :, :, t0:t1] = q / (float(a[0]) ** 4 if a[0] == a[1] == a[2] == a[3] else float(np.prod(a)))
    return out


def clover_charge(links, *, boundary: str | Sequence[str] = "periodic") -> float:
    """Total clover charge Q = sum_n a^4 q(n) (open boundaries: over the sites whose clovers fit inside).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links (numpy array, memmap or anything np.asarray reads).
      boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order (open ones mask their edges).
    Returns:
      float, Q.
    Raises:
      ValueError / TypeError: links of the wrong shape or dtype, NaN or inf entries (counted and
        located) or links not in SU(N) within 1e-8 (checked before any open-boundary mask),
        an unknown boundary, a bad spacing (where one is taken).
    """
    return float(np.nansum(clover_charge_density(links, boundary=boundary)))
