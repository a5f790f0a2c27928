"""Quadrature rules for integrals over R^4 and over R^3 x [t0, t0 + beta), as point and weight arrays.

A rule is a set of points ``(M, 4)`` (ordered ``(x1, x2, x3, x4)``, conventions module) and weights
``(M,)`` with ``int f d^4x ~ sum_i w_i f(x_i)``.  The rules here are built for instanton densities:
smooth, concentrated near a few centres, and falling like a power of ``|x|`` at infinity.

* Radial direction: the algebraic map ``r = L u / (1 - u)``, ``u in (0, 1)``, with Gauss-Legendre
  nodes in ``u``.  A density ``~ r^-p`` gives an integrand ``~ (1 - u)^(p - d - 1)`` near ``u = 1``
  (``d`` the dimension), so the ``|x|^-8`` tail of an instanton becomes the smooth factor
  ``(1 - u)^3`` and Gauss-Legendre converges geometrically (the BPST radial integrand is a rational
  function of ``u`` with poles at ``u = (1 +- i) / 2``; common practice for semi-infinite intervals).
* Angles on S^3: ``n = (sin psi sin th cos ph, sin psi sin th sin ph, sin psi cos th, cos psi)`` with
  measure ``sin^2 psi sin th dpsi dth dph`` (total ``2 pi^2``).  A product rule of Gauss-Chebyshev
  (second kind) in ``cos psi``, Gauss-Legendre in ``cos th`` and the trapezoid rule in ``ph`` with
  ``n``, ``n`` and ``2n`` nodes integrates every polynomial on S^3 of degree ``<= 2n - 1`` exactly
  (the harmonics of degree ``l`` reduce, after the ``ph`` and ``th`` integrals, to a Gegenbauer
  polynomial ``C_l^1(cos psi)`` against ``sqrt(1 - t^2) dt``; derived here, the S^2 analogue is
  common practice).
* Several centres ``a_i`` with scales ``rho_i``: a smooth partition of unity
  ``w_i(x) = phi_i(x) / sum_j phi_j(x)``, ``phi_i = (rho_i / (|x - a_i|^2 + rho_i^2))^m`` (m = 4: the
  shape of a BPST density, so a sum of separated lumps is split into its lumps), and each piece
  ``w_i f`` integrated with the rule centred at ``a_i`` with radial scale ``rho_i``.  Since
  ``sum_i w_i = 1`` exactly, this only changes efficiency, never the integral.
* Periodic directions: ``x4`` over one period by the trapezoid rule (spectrally accurate for smooth
  periodic integrands; common practice), times the radial rule in ``R^3`` and the S^2 product rule.
  The partition of unity then uses the periodic distance
  ``|x_vec - a_vec|^2 + (beta / pi)^2 sin^2(pi (x4 - a4) / beta)``.

Nodes come from `scipy.special.roots_legendre` and `scipy.special.roots_chebyu`.
"""

from __future__ import annotations

import dataclasses
import functools

import numpy as np
from scipy.special import roots_chebyu, roots_legendre

from ..core import _validate

__all__ = [
    "Rule",
    "radial_nodes",
    "sphere2_nodes",
    "sphere3_nodes",
    "sphere3_oriented",
    "shell_axes",
    "radial_panel_nodes",
    "ray_points",
    "decay_exponent",
    "partition_weights",
    "rule_r4",
    "rule_r4_piece",
    "rule_r3_circle",
    "rule_r3_circle_piece",
    "DEFAULT_PARTITION_POWER",
]

#: Exponent m of the partition-of-unity weights (|x - a_i|^2 + rho_i^2)^-m.
DEFAULT_PARTITION_POWER = 4


@dataclasses.dataclass(frozen=True)
class Rule:
    """A quadrature rule: ``int f ~ sum_i weights[i] f(points[i])``.

    points: (M, 4) float64 (x1, x2, x3, x4); weights: (M,) float64;
    description: one line naming the construction and its node counts.
    """

    points: np.ndarray
    weights: np.ndarray
    description: str

    def __post_init__(self):
        pts = np.asarray(self.points, dtype=np.float64)
        w = np.asarray(self.weights, dtype=np.float64)
        if pts.ndim != 2 or pts.shape[1] != 4:
            raise ValueError(f"rule points must have shape (M, 4); found {pts.shape}")
        if w.shape != (pts.shape[0],):
            raise ValueError(f"rule weights must have shape ({pts.shape[0]},); found {w.shape}")
        object.__setattr__(self, "points", pts)
        object.__setattr__(self, "weights", w)

    @property
    def size(self) -> int:
        """Number of points M."""
        return int(self.weights.shape[0])

    def integrate(self, values) -> float:
        """sum_i w_i values_i for values (M,) float64 (pairwise summation of numpy)."""
        v = np.asarray(values, dtype=np.float64)
        if v.shape != self.weights.shape:
            raise ValueError(f"values must have shape {self.weights.shape}; found {v.shape}")
        return float(np.sum(self.weights * v))

    def magnitude(self, values) -> float:
        """sum_i |w_i values_i|, the scale of the rounding error of `integrate`."""
        v = np.asarray(values, dtype=np.float64)
        return float(np.sum(np.abs(self.weights * v)))


# -- one-dimensional and spherical pieces ------------------------------------------------------------


def _check_count(name: str, n) -> int:
    """A node count: a positive integer (see `instantonkit.core._validate.positive_int`)."""
    return _validate.positive_int(name, n)


def _check_scale(name: str, value) -> float:
    """A length or period: a finite number > 0 (see `instantonkit.core._validate.positive_float`)."""
    return _validate.positive_float(name, value)


@functools.lru_cache(maxsize=64)
def legendre01(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on (0, 1)."""
    t, w = roots_legendre(n)
    return 0.5 * (t + 1.0), 0.5 * w


def radial_nodes(n: int, scale: float, dim: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes r (n,) and weights (n,) for int_0^inf g(r) r^(dim-1) dr, r = L u / (1 - u).

    The weights include the Jacobian L / (1 - u)^2 and the factor r^(dim - 1).
    """
    n = _check_count("n", n)
    L = _check_scale("scale", scale)
    u, wu = legendre01(n)
    r = L * u / (1.0 - u)
    w = wu * L / (1.0 - u) ** 2 * r ** (dim - 1)
    return r, w


@functools.lru_cache(maxsize=64)
def _sphere2(n: int) -> tuple[np.ndarray, np.ndarray]:
    ct, wt = roots_legendre(n)
    nph = 2 * n
    ph = 2.0 * np.pi * (np.arange(nph) + 0.5) / nph
    st = np.sqrt(1.0 - ct**2)
    dirs = np.stack(
        [
            st[:, None] * np.cos(ph)[None, :],
            st[:, None] * np.sin(ph)[None, :],
            np.broadcast_to(ct[:, None], (n, nph)),
        ],
        axis=-1,
    ).reshape(-1, 3)
    w = (wt[:, None] * np.full(nph, 2.0 * np.pi / nph)[None, :]).reshape(-1)
    return dirs, w


def sphere2_nodes(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Product rule on the unit S^2: directions (2n^2, 3) and weights (2n^2,) summing to 4 pi.

    Gauss-Legendre in cos(theta) (n nodes) times the trapezoid rule in phi (2n nodes); exact for
    polynomials of degree <= 2n - 1 (common practice).
    """
    d, w = _sphere2(_check_count("n", n))
    return d.copy(), w.copy()


@functools.lru_cache(maxsize=64)
def _sphere3(n: int) -> tuple[np.ndarray, np.ndarray]:
    cp, wp = roots_chebyu(n)  # int_-1^1 sqrt(1 - t^2) g(t) dt
    sp = np.sqrt(1.0 - cp**2)
    d2, w2 = _sphere2(n)
    dirs = np.concatenate(
        [
            (sp[:, None, None] * d2[None, :, :]),
            np.broadcast_to(cp[:, None, None], (n, d2.shape[0], 1)),
        ],
        axis=-1,
    ).reshape(-1, 4)
    w = (wp[:, None] * w2[None, :]).reshape(-1)
    return dirs, w


def sphere3_nodes(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Product rule on the unit S^3 in R^4: directions (2n^3, 4) and weights (2n^3,) summing to 2 pi^2.

    Gauss-Chebyshev (second kind) in cos(psi), Gauss-Legendre in cos(theta), trapezoid in phi with
    n, n, 2n nodes; exact for polynomials on S^3 of degree <= 2n - 1 (see the module docstring).
    """
    d, w = _sphere3(_check_count("n", n))
    return d.copy(), w.copy()


@functools.lru_cache(maxsize=256)
def _sphere3_aniso(n_psi: int, n_perp: int) -> tuple[np.ndarray, np.ndarray]:
    cp, wp = roots_chebyu(n_psi)
    sp = np.sqrt(1.0 - cp**2)
    d2, w2 = _sphere2(n_perp)
    dirs = np.concatenate(
        [(sp[:, None, None] * d2[None, :, :]), np.broadcast_to(cp[:, None, None], (n_psi, d2.shape[0], 1))], axis=-1
    ).reshape(-1, 4)
    return dirs, (wp[:, None] * w2[None, :]).reshape(-1)


def sphere3_oriented(n_psi: int, n_perp: int, axis=None) -> tuple[np.ndarray, np.ndarray]:
    """Anisotropic product rule on S^3 with its pole along the unit vector ``axis``.

    Gauss-Chebyshev (second kind) in cos(psi), psi the angle from ``axis``, with ``n_psi`` nodes, times
    the S^2 rule of `sphere2_nodes` with parameter ``n_perp``; exact for polynomials of degree
    <= 2 n_psi - 1 in cos(psi) times harmonics of degree <= 2 n_perp - 1 on the S^2 (as in
    `sphere3_nodes`, which is the case n_psi = n_perp, axis = e4).  A density that varies mostly
    with the angle from ``axis`` (a neighbour's lump seen from a centre) needs many nodes in psi and
    few across.  ``axis=None`` is e4; otherwise e4 is reflected onto ``axis`` (a Householder reflection).

    Returns directions (2 n_psi n_perp^2, 4) and weights summing to 2 pi^2.
    """
    dirs, w = _sphere3_aniso(_check_count("n_psi", n_psi), _check_count("n_perp", n_perp))
    dirs = dirs.copy()
    if axis is not None:
        e = np.asarray(axis, dtype=np.float64).reshape(4)
        norm = float(np.linalg.norm(e))
        if not np.isfinite(norm) or norm == 0.0:
            raise ValueError(f"axis must be a finite nonzero (4,) vector; found {e.tolist()}")
        v = e / norm - np.array([0.0, 0.0, 0.0, 1.0])
        nv = float(v @ v)
        if nv > 1e-30:
            dirs -= 2.0 * np.outer(dirs @ v, v) / nv
    return dirs, w.copy()


def shell_axes(
    centers, scales, index: int, r, *, aspect: int = 4, dominance: float = 10.0, separation: float = 6.0
) -> tuple[np.ndarray, np.ndarray]:
    """Pole axis (n, 4) and aspect (n,) of the S^3 rules of the shells of radii r (n,) about centre ``index``.

    A neighbour j shows up in the piece w_i f of the partition of unity, on a shell of radius r, as
    structure that depends mostly on the angle from its direction e_ij (the partition's transition
    and the neighbour's lump, both nearly symmetric about the line a_i a_j), the more so the closer
    the shell passes: score_j = rho_j^2 / ((d_ij - r)^2 + rho_j^2) (rho_j / d_ij)^4.  The best
    neighbour's direction is the axis; the aspect (n_psi / n_perp of `sphere3_oriented`) is
    ``aspect`` when the best score beats the second by ``dominance`` and, for three or more centres,
    that neighbour is at least ``separation`` rho_j away (overlapping lumps of three or more are not
    symmetric about one line); else 1.  Two centres: always ``aspect``.  Rules chosen by measurement
    on random charge 2-4 ADHM data.
    """
    c, s = _as_centers(centers, scales)
    r = np.asarray(r, dtype=np.float64).reshape(-1)
    n = r.shape[0]
    diff = c - c[index][None, :]
    d = np.linalg.norm(diff, axis=1)
    d[index] = np.inf
    score = s[None, :] ** 2 / ((d[None, :] - r[:, None]) ** 2 + s[None, :] ** 2) * (s / d)[None, :] ** 4
    order = np.argsort(-score, axis=1)
    best = order[:, 0]
    axis = diff[best] / d[best][:, None]
    out = np.ones(n, dtype=int)
    if c.shape[0] == 2:
        out[:] = aspect
    elif c.shape[0] > 2:
        rows = np.arange(n)
        ratio = score[rows, best] / np.maximum(score[rows, order[:, 1]], 1e-300)
        out[(ratio >= dominance) & (d[best] >= separation * s[best])] = aspect
    return axis, out


def radial_panel_nodes(
    n: int, scale: float, dim: int, cuts, *, min_length: float = 0.02, min_nodes: int = 6
) -> tuple[np.ndarray, np.ndarray]:
    """Composite Gauss-Legendre version of `radial_nodes`: u = r / (L + r) cut at the radii ``cuts``.

    Cuts closer than ``min_length`` in u merge; each panel [a, b] gets max(min_nodes, ceil(n (b - a)))
    nodes.  Returns r and weights (with the Jacobian L / (1 - u)^2 and r^(dim - 1)), sorted by r.
    """
    n = _check_count("n", n)
    L = _check_scale("scale", scale)
    cuts = np.asarray(cuts, dtype=np.float64).reshape(-1)
    keep = [0.0]
    for u in np.unique(np.concatenate([cuts / (L + cuts), [1.0]])):
        if u - keep[-1] >= min_length:
            keep.append(float(u))
    keep[-1] = 1.0
    rs, ws = [], []
    for a, b in zip(keep[:-1], keep[1:]):
        t, wt = legendre01(max(min_nodes, int(np.ceil(n * (b - a)))))
        u = a + (b - a) * t
        r = L * u / (1.0 - u)
        rs.append(r)
        ws.append((b - a) * wt * L / (1.0 - u) ** 2 * r ** (dim - 1))
    return np.concatenate(rs), np.concatenate(ws)


# -- partition of unity -------------------------------------------------------------------------------


def _distance2(points: np.ndarray, centers: np.ndarray, period: float | None) -> np.ndarray:
    """Squared (periodic in x4 when ``period``) distances: points (M, 4), centers (k, 4) -> (M, k)."""
    diff = points[:, None, :] - centers[None, :, :]
    if period is None:
        return np.sum(diff**2, axis=-1)
    spatial = np.sum(diff[..., :3] ** 2, axis=-1)
    chord = (period / np.pi) * np.sin(np.pi * diff[..., 3] / period)
    return spatial + chord**2


def partition_weights(
    points, centers, scales, *, power: int | None = None, period=None, log_amplitudes=None
) -> np.ndarray:
    """Smooth partition of unity w_i(x) = phi_i / sum_j phi_j, phi_i = A_i (rho_i / (d(x, a_i)^2 + rho_i^2))^power.

    points: (M, 4); centers: (k, 4); scales: (k,) rho_i > 0; log_amplitudes: None (all A_i = 1) or
    (k,) log A_i; returns (M, k) float64, rows summing to 1.  ``period`` makes the distance periodic
    in x4 (see the module docstring).  Computed in log space so that no phi underflows.
    """
    pts = np.asarray(points, dtype=np.float64).reshape(-1, 4)
    c = np.asarray(centers, dtype=np.float64).reshape(-1, 4)
    power = DEFAULT_PARTITION_POWER if power is None else int(power)
    rho = np.asarray(scales, dtype=np.float64).reshape(-1)
    if rho.shape[0] != c.shape[0]:
        raise ValueError(f"scales must have shape ({c.shape[0]},) to match centers; found {rho.shape}")
    logphi = power * np.log(rho[None, :]) - power * np.log(_distance2(pts, c, period) + rho[None, :] ** 2)
    if log_amplitudes is not None:
        logphi = logphi + np.asarray(log_amplitudes, dtype=np.float64).reshape(1, -1)
    logphi -= np.max(logphi, axis=1, keepdims=True)
    phi = np.exp(logphi)
    return phi / np.sum(phi, axis=1, keepdims=True)


def _as_centers(centers, scales) -> tuple[np.ndarray, np.ndarray]:
    """Centres (k, 4) (a (4,) centre promoted) and scales (k,) > 0 (a number broadcast), validated."""
    c = _validate.points_array("centers", centers)
    return c, _validate.positive_vector("scales", scales, c.shape[0])


def radial_scales(centers, scales) -> np.ndarray:
    """Radial scale L_i of piece i: max(rho_i, RADIAL_SPREAD * distance to the nearest other centre).

    A lone lump is best served by L = rho (its density is then a rational function of u with poles at
    u = (1 +- i)/2); a piece that reaches out to a neighbour at distance d needs nodes out to d,
    which the larger L provides (measured here on two- and three-instanton data).
    """
    c, s = _as_centers(centers, scales)
    if c.shape[0] == 1:
        return s.copy()
    d = np.linalg.norm(c[:, None] - c[None], axis=-1) + np.diag(np.full(c.shape[0], np.inf))
    return np.maximum(s, RADIAL_SPREAD * np.min(d, axis=1))


#: Fraction of the nearest-neighbour distance used as radial scale (see `radial_scales`).
RADIAL_SPREAD = 0.3


# -- full rules ------------------------------------------------------------------------------------


def rule_r4_piece(
    i: int,
    centers,
    scales,
    n_radial: int,
    n_angular: int,
    *,
    power: int | None = None,
    radial_scale: float | None = None,
) -> Rule:
    """Piece i of `rule_r4`: the rule centred at a_i with radial scale L_i, weights times w_i(x).

    scales: (k,) rho_i of the partition of unity; radial_scale: L_i (default `radial_scales`).
    Size n_radial * 2 n_angular^3.
    """
    power = DEFAULT_PARTITION_POWER if power is None else int(power)
    c, s = _as_centers(centers, scales)
    if not 0 <= i < c.shape[0]:
        raise ValueError(f"piece index must be in [0, {c.shape[0]}); found {i}")
    n_radial = _check_count("n_radial", n_radial)
    dirs, wd = _sphere3(_check_count("n_angular", n_angular))
    L = radial_scales(c, s)[i] if radial_scale is None else _check_scale("radial_scale", radial_scale)
    r, wr = radial_nodes(n_radial, L, 4)
    pts = (c[i][None, None, :] + r[:, None, None] * dirs[None, :, :]).reshape(-1, 4)
    wts = (wr[:, None] * wd[None, :]).reshape(-1)
    if c.shape[0] > 1:
        wts = wts * partition_weights(pts, c, s, power=power)[:, i]
    desc = (
        f"R^4 piece {i + 1}/{c.shape[0]}: {n_radial} Gauss-Legendre radial nodes (r = L u/(1-u), L = {L:.4g}) x "
        f"{2 * n_angular**3} S^3 product nodes (degree {2 * n_angular - 1})"
        + (f", partition of unity power {power}" if c.shape[0] > 1 else "")
    )
    return Rule(pts, wts, desc)


def rule_r4(centers, scales, n_radial: int, n_angular: int, *, power: int | None = None) -> Rule:
    """Rule for int over R^4: hyperspherical rules about each centre, glued by the partition of unity.

    centers: (4,) or (k, 4); scales: number or (k,) (radial scale L_i of each piece);
    n_radial: Gauss-Legendre nodes in u; n_angular: the S^3 parameter n (2n^3 directions).
    Size k * n_radial * 2 n_angular^3.
    """
    power = DEFAULT_PARTITION_POWER if power is None else int(power)
    c, s = _as_centers(centers, scales)
    pieces = [rule_r4_piece(i, c, s, n_radial, n_angular, power=power) for i in range(c.shape[0])]
    desc = (
        f"R^4: {c.shape[0]} centre(s) x [{n_radial} Gauss-Legendre radial nodes (r = L u/(1-u)) x "
        f"{2 * n_angular**3} S^3 product nodes (degree {2 * n_angular - 1})]"
        + (f", partition of unity power {power}" if c.shape[0] > 1 else "")
    )
    return Rule(np.concatenate([p.points for p in pieces]), np.concatenate([p.weights for p in pieces]), desc)


def rule_r3_circle_piece(
    i: int,
    centers,
    scales,
    period: float,
    n_radial: int,
    n_angular: int,
    n_time: int,
    *,
    power: int | None = None,
) -> Rule:
    """Piece i of `rule_r3_circle`: centred at a_i (space) with a time node at a4_i.

    Size n_radial * 2 n_angular^2 * n_time.
    """
    power = DEFAULT_PARTITION_POWER if power is None else int(power)
    c, s = _as_centers(centers, scales)
    if not 0 <= i < c.shape[0]:
        raise ValueError(f"piece index must be in [0, {c.shape[0]}); found {i}")
    beta = _check_scale("period", period)
    n_radial = _check_count("n_radial", n_radial)
    n_time = _check_count("n_time", n_time)
    dirs, wd = _sphere2(_check_count("n_angular", n_angular))
    a = c[i]
    L = radial_scales(c, s)[i]
    r, wr = radial_nodes(n_radial, L, 3)
    t = a[3] - 0.5 * beta + beta * np.arange(n_time) / n_time
    if n_time % 2:
        t = t + 0.5 * beta / n_time  # keep a node at a4
    xs = a[None, None, :3] + r[:, None, None] * dirs[None, :, :]  # (nr, nd, 3)
    nd = dirs.shape[0]
    pts = np.concatenate(
        [
            np.broadcast_to(xs[:, :, None, :], (n_radial, nd, n_time, 3)),
            np.broadcast_to(t[None, None, :, None], (n_radial, nd, n_time, 1)),
        ],
        axis=-1,
    ).reshape(-1, 4)
    wts = (wr[:, None, None] * wd[None, :, None] * np.full(n_time, beta / n_time)[None, None, :]).reshape(-1)
    if c.shape[0] > 1:
        wts = wts * partition_weights(pts, c, s, power=power, period=beta)[:, i]
    desc = (
        f"R^3 x S^1 (period {beta:g}) piece {i + 1}/{c.shape[0]}: {n_radial} Gauss-Legendre radial nodes "
        f"(r = L u/(1-u), L = {L:.4g}) x {2 * n_angular**2} S^2 product nodes x {n_time} trapezoid nodes in x4"
        + (f", periodic partition of unity power {power}" if c.shape[0] > 1 else "")
    )
    return Rule(pts, wts, desc)


def rule_r3_circle(
    centers, scales, period: float, n_radial: int, n_angular: int, n_time: int, *, power: int | None = None
) -> Rule:
    """Rule for int over R^3 x one period of x4 (each piece covers [a4_i - beta/2, a4_i + beta/2)).

    centers: (4,) or (k, 4); scales: number or (k,); period: beta > 0; n_radial: radial nodes in R^3;
    n_angular: S^2 parameter n (2n^2 directions); n_time: trapezoid nodes in x4.
    Size k * n_radial * 2 n_angular^2 * n_time.
    """
    power = DEFAULT_PARTITION_POWER if power is None else int(power)
    c, s = _as_centers(centers, scales)
    pieces = [
        rule_r3_circle_piece(i, c, s, period, n_radial, n_angular, n_time, power=power) for i in range(c.shape[0])
    ]
    desc = (
        f"R^3 x S^1 (period {float(period):g}): {c.shape[0]} centre(s) x [{n_radial} Gauss-Legendre radial nodes "
        f"(r = L u/(1-u)) x {2 * n_angular**2} S^2 product nodes x {n_time} trapezoid nodes in x4]"
        + (f", periodic partition of unity power {power}" if c.shape[0] > 1 else "")
    )
    return Rule(np.concatenate([p.points for p in pieces]), np.concatenate([p.weights for p in pieces]), desc)


# -- probing the decay at infinity ------------------------------------------------------------------


def ray_points(centre, radii, dim: int, rays: int, seed: int) -> np.ndarray:
    """Points (len(radii) * rays, 4) along ``rays`` random directions (fixed ``seed``) at ``radii`` about ``centre``.

    dim 4: directions in R^4; dim 3: in the x1..x3 space (x4 = centre's), for R^3 x S^1.  Radius-major order.
    """
    rng = np.random.default_rng(seed)
    dirs = rng.normal(size=(rays, dim))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    if dim == 3:
        dirs = np.concatenate([dirs, np.zeros((rays, 1))], axis=1)
    radii = np.asarray(radii, dtype=np.float64)
    pts = np.asarray(centre, dtype=np.float64)[None, None, :] + radii[:, None, None] * dirs[None, :, :]
    return pts.reshape(-1, 4)


def decay_exponent(
    values, radii, dim: int, magnitude: float, *, zero: float, area: float, noise: float
) -> float | None:
    """p in |f| ~ r^-p from the largest |f| over the rays of `ray_points` at the largest radii.

    None if f vanishes there (|f| <= ``zero``), or if the tail it implies, about |f| R^dim ``area``, is
    below ``noise`` x ``magnitude`` (the size of the integral seen so far): then the decay seen is
    rounding noise of a field that has already gone to zero.
    """
    radii = np.asarray(radii, dtype=np.float64)
    v = np.max(np.abs(np.asarray(values).reshape(radii.shape[0], -1)), axis=1)
    if v[-1] <= zero or v[-2] <= zero:
        return None
    if max(v[-2], v[-1]) * radii[-2] ** dim * area <= noise * magnitude:
        return None
    p = [-np.log(v[j + 1] / v[j]) / np.log(radii[j + 1] / radii[j]) for j in range(len(radii) - 1) if v[j] > 0]
    return float(min(p[-2:])) if p else None
