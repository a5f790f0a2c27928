"""Constituents of calorons from sampled densities or from the links of a thermal lattice: positions and
action fractions.

A charge-1 SU(N) caloron of non-trivial holonomy splits into N constituent monopoles, static lumps of
the action density whose shares of the action per period approach the fractions nu_m set by the
holonomy (SU(2): 2 omega and 1 - 2 omega) as they separate (Kraan, van Baal, Nucl. Phys. B 533 (1998)
627 and Phys. Lett. B 435 (1998) 389; Lee, Lu, Phys. Rev. D 58 (1998) 025011; from memory).

Method.  Constituents are static, so the density is averaged over time first: the samples are grouped
by their spatial point (equal x_vec to the bit, as on a grid or a lattice) and averaged in each group.
The peaks of this time-averaged density are those of `instantonkit.fit.peaks.count_peaks` (plateaus
and ties merged), with ``min_fraction`` small by default (``MIN_FRACTION``: a light constituent's peak
is low, its height scaling roughly as nu^4: measured 1/164 of the heavy one's for nu = 0.2 and 0.8
at 8 beta apart) and peaks
merged when closer than beta / (2 pi) (the core radius of a constituent of fraction 1, the smallest
a constituent has; `merge_radius`).  Each spatial point is given to its nearest peak (a Voronoi
partition) and the ``n`` peaks holding the most action are the constituents (so a low peak that holds
a wide lump wins over a narrow bump of the boundary layer); the samples are then partitioned among
these ``n`` alone and the action of each part per period, in units of 8 pi^2, is its fraction.  A
position is refined from its sample by a quadratic least-squares fit of log s to the
``_REFINE_NEIGHBOURS`` nearest spatial points (the stationary point of the quadratic, kept when its
Hessian is negative definite and it stays within the fitted points; otherwise the sample is kept and a
note says so).

What the numbers are.  Positions are those of the maxima of the time-averaged action density; the
constituents' own positions (where the two eigenvalues of the Polyakov loop meet, 1/2 tr P = +-1, as
the field's ``constituents`` hook gives them) differ from them by
the overlap of the cores, small once the constituents are several beta / (2 pi nu) apart (measured in
tests/test_constituent_finder.py).  Fractions are Voronoi integrals per period: their sum is the
action inside the samples (``total``), and each approaches nu_m as the constituents separate, the
abelian dipole field between and around them being shared by the two parts.  Weights: the links'
cell volume a1 a2 a3 a4 on a lattice; for points on a regular grid (shape (L1, L2, L3, L4, 4)) the
spatial cell a1 a2 a3 times beta / L4 (beta times the time average: exact for slices covering one
period, the static approximation for fewer); for other points the caller's ``weights`` (d^4x per
sample over one period), without which the fractions are NaN.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.spatial

from ..core import _validate
from ..core._links import check_links
from ..core.conventions import ACTION_DENSITY_FACTOR, INSTANTON_ACTION, PI
from ..engine.fields import as_points
from ..lattice import boundaries as _bd
from ..lattice import observables as _obs
from .peaks import count_peaks, sample_spacing
from .results import verdict_lines

__all__ = ["ConstituentFit", "find_constituents", "find_lattice_constituents"]

_QUANTITIES = ("action", "charge")

#: Candidate peaks above this fraction of the tallest (a light constituent's peak height scales roughly as nu^4).
MIN_FRACTION = 1e-4

#: Spatial points of the quadratic fit of log s about a peak (3^3 on a grid; a quadratic in 3D has 10 coefficients).
_REFINE_NEIGHBOURS = 27

#: Relative tolerance of "a regular grid" when weights are inferred from the points.
_GRID_RTOL = 1e-9

#: Candidate peaks left out holding more than this fraction of the total action are named in the reasons.
_LEFT_OUT_FRACTION = 0.02


@dataclasses.dataclass(frozen=True)
class ConstituentFit:
    """Result of `find_constituents` / `find_lattice_constituents`: constituent positions and action fractions.

    positions: (m, 3) float64 spatial positions of the maxima of the time-averaged action density, m <= n
    (constituents are static; compare with the ``[:, :3]`` of a caloron's ``constituents()``), ordered by
    fraction, largest first; fractions: (m,) float64, the action of each constituent's part per period in
    units of 8 pi^2 (NaN without weights); heights: (m,) the time-averaged density at the peaks;
    total: the action of all samples per period / 8 pi^2 (NaN without weights); n: the number asked for;
    n_peaks: candidate peaks found; period: beta; spacing: median distance between neighbouring spatial
    points (the resolution); quantity: 'action' or 'charge'; ambiguous / reasons: whether the result is in
    doubt and why (fewer peaks than n, peaks left out that hold action); notes: decisions taken (refinement
    fallbacks, how the weights were set); error_budget: a sentence on what the numbers are (module docstring).
    """

    positions: np.ndarray
    fractions: np.ndarray
    heights: np.ndarray
    total: float
    n: int
    n_peaks: int
    period: float
    spacing: float
    quantity: str
    ambiguous: bool
    reasons: tuple
    notes: tuple = ()
    error_budget: str = ""

    @property
    def k(self) -> int:
        """Number of constituents found (m <= n)."""
        return int(self.positions.shape[0])

    def summary(self) -> str:
        """A readable table: one row per constituent with position, fraction and peak height."""
        lines = [
            (
                f"{self.k} of {self.n} constituent(s) found in {self.quantity} density samples "
                f"(period {self.period:g}; {self.n_peaks} candidate peak(s); resolution {self.spacing:.3g}; "
                f"total action / 8 pi^2 = {self.total:.4f})"
            ),
            f"{'#':>3} {'x1':>10} {'x2':>10} {'x3':>10} {'fraction':>10} {'peak s':>10}",
        ]
        for i in range(self.k):
            c = " ".join(f"{v:10.4f}" for v in self.positions[i])
            lines.append(f"{i:>3} {c} {self.fractions[i]:10.4f} {self.heights[i]:10.3e}")
        return "\n".join(lines + verdict_lines(self, "result"))

    def __str__(self) -> str:
        return self.summary()


_BUDGET = (
    "positions: maxima of the time-averaged action density (refined by a quadratic fit of log s), off the "
    "constituents' own positions by the overlap of their cores; fractions: Voronoi integrals of s per period, "
    "approaching the holonomy's nu_m as the constituents separate; the samples' box truncates the total"
)


def _time_average(pts: np.ndarray, d: np.ndarray, w):
    """Spatial points (p, 3), the time-averaged density (p,), the weighted sum of each group (p,) (None without
    weights) and the samples per group (p,); groups: equal x_vec to the bit (np.unique)."""
    xyz, inverse, counts = np.unique(pts[:, :3], axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.reshape(-1)
    mean = np.bincount(inverse, weights=d, minlength=xyz.shape[0]) / counts
    held = None if w is None else np.bincount(inverse, weights=d * w, minlength=xyz.shape[0])
    return xyz, mean, held, counts


def _refine(xyz: np.ndarray, s: np.ndarray, tree, centre: np.ndarray):
    """The stationary point of a quadratic fit of log s about ``centre`` (3,), or (centre, reason) when it fails."""
    m = min(_REFINE_NEIGHBOURS, xyz.shape[0])
    dist, idx = tree.query(centre, k=m)
    idx = np.atleast_1d(idx)
    ok = s[idx] > 0
    if ok.sum() < 10:
        return centre, "too few positive samples about the peak for a quadratic fit"
    y = xyz[idx[ok]] - centre
    scale = float(np.max(np.abs(y))) or 1.0
    u = y / scale
    cols = [np.ones(u.shape[0])] + [u[:, i] for i in range(3)]
    cols += [u[:, i] * u[:, j] for i in range(3) for j in range(i, 3)]
    design = np.stack(cols, axis=1)
    coef, *_ = np.linalg.lstsq(design, np.log(s[idx[ok]]), rcond=None)
    if np.linalg.matrix_rank(design) < design.shape[1]:
        return centre, "the samples about the peak do not fix a quadratic (degenerate layout)"
    grad = coef[1:4]
    hess = np.zeros((3, 3))
    k = 4
    for i in range(3):
        for j in range(i, 3):
            hess[i, j] += coef[k] * (2.0 if i == j else 1.0)
            if i != j:
                hess[j, i] += coef[k]
            k += 1
    if not np.all(np.linalg.eigvalsh(hess) < 0):
        return centre, "the quadratic fit of log s about the peak is not concave"
    step = -np.linalg.solve(hess, grad)
    if np.linalg.norm(step) > float(np.max(np.linalg.norm(u, axis=1))):
        return centre, "the quadratic fit of log s puts the maximum outside the fitted samples"
    return centre + scale * step, None


def _grid_steps(points, n_samples: int):
    """(a1, a2, a3, a4) of a regular axis-aligned (L1, L2, L3, L4, 4) grid of points (a4 = 0 for L4 = 1), or (None, why)."""
    arr = np.asarray(points)
    if arr.ndim != 5 or arr.shape[-1] != 4 or int(np.prod(arr.shape[:4])) != n_samples:
        return None, "points are not a (L1, L2, L3, L4, 4) grid"
    arr = arr.astype(np.float64)
    origin = arr[0, 0, 0, 0]
    steps = np.zeros(4)
    for mu in range(4):
        if arr.shape[mu] > 1:
            idx = [0, 0, 0, 0]
            idx[mu] = 1
            steps[mu] = arr[tuple(idx)][mu] - origin[mu]
    grids = np.meshgrid(*[np.arange(m, dtype=np.float64) for m in arr.shape[:4]], indexing="ij")
    scale = max(float(np.max(np.abs(arr))), 1.0)
    if not np.all(np.abs(arr - origin - steps * np.stack(grids, axis=-1)) <= _GRID_RTOL * scale):
        return None, "points are not a regular axis-aligned grid"
    if np.any(steps[:3] <= 0):
        return None, "the grid needs two or more increasing points in every spatial direction"
    return steps, None


def _grid_samples(grid, dens: np.ndarray, w):
    """Time-averaged samples of a grid: (xyz (p, 3), mean (p,), weighted sums (p,) or None, counts (p,)).

    grid: (L1, L2, L3, L4, 4); dens: (L1, L2, L3, L4), NaN where a site has no value (a spatial column with a
    NaN is dropped whole); w: None, a number (every sample's weight) or (L1, L2, L3, L4).
    """
    ok = np.isfinite(dens).all(axis=3)
    xyz = np.asarray(grid)[:, :, :, 0, :3][ok]
    mean = dens.mean(axis=3)[ok]
    held = None if w is None else (dens * w).sum(axis=3)[ok]
    return xyz, mean, held, np.full(xyz.shape[0], dens.shape[3])


def find_constituents(
    points,
    density,
    n: int,
    *,
    period,
    weights=None,
    quantity: str = "action",
    min_fraction: float = MIN_FRACTION,
    merge_radius: float | None = None,
) -> ConstituentFit:
    """Positions and action fractions of a caloron's constituents from density samples (module docstring).

    Args:
      points: (..., 4) float64 sample positions; a regular grid (L1, L2, L3, L4, 4) lets the weights be inferred.
      density: (...,) float64, the action density s (quantity='action') or the charge density q
        (quantity='charge', taken as s = 8 pi^2 q: calorons are self-dual), one value per point.
      n: number of constituents to find (2 for SU(2), N for SU(N)), a positive integer.
      period: beta > 0, the period in x4 (fractions are per period).
      weights: None or (...,) >= 0, the integration weight (d^4x over one period) of each sample; None on a
        regular grid infers them (module docstring), elsewhere leaves the fractions NaN.
      quantity: 'action' or 'charge'.
      min_fraction: candidate peaks above this fraction of the tallest, in (0, 1).
      merge_radius: peaks closer than this merge into one, >= 0; default beta / (2 pi).
    Returns:
      `ConstituentFit` with positions (m, 3), fractions (m,), m <= n, and the reasons it may be ambiguous.
    Raises:
      ValueError / TypeError naming the bad argument; ValueError when the density has no positive value.
    """
    pts, _ = as_points(points)
    d = _validate.real_array("density", density).reshape(-1)
    if d.shape[0] != pts.shape[0]:
        raise ValueError(f"density must have one value per point ({pts.shape[0]}); found {d.shape[0]}")
    n = _validate.positive_int("n", n)
    beta = _validate.positive_float("period", period)
    _validate.choice("quantity", quantity, _QUANTITIES)
    frac_min = _validate.positive_float("min_fraction", min_fraction)
    if frac_min >= 1:
        raise ValueError(f"min_fraction must lie in (0, 1); found {frac_min!r}")
    radius = beta / (2.0 * PI) if merge_radius is None else merge_radius
    s = d * INSTANTON_ACTION if quantity == "charge" else d
    if not float(np.max(s)) > 0:
        raise ValueError(
            f"the action density has no positive value (largest {float(np.max(s))!r}): no constituents to find"
        )
    notes: list[str] = []
    w = None
    if weights is not None:
        w = _validate.real_array("weights", weights).reshape(-1)
        if w.shape != d.shape:
            raise ValueError(f"weights must have one value per point ({d.shape[0]}); found {w.shape[0]}")
        if np.any(w < 0):
            raise ValueError(f"weights must be >= 0; found min {float(np.min(w))!r}")
    steps, why = _grid_steps(points, pts.shape[0])
    if steps is None:
        if w is None:
            notes.append(f"fractions not computed: {why}; pass weights= (d^4x per sample over one period)")
        samples = _time_average(pts, s, w)
    else:
        shape = np.shape(points)[:4]
        if w is None:
            w = float(np.prod(steps[:3])) * beta / shape[3]
            notes.append(
                f"weights: the grid's cell a1 a2 a3 = {float(np.prod(steps[:3])):.4g} times beta / L4 (beta times the "
                f"time average over {shape[3]} time slice(s): exact for slices covering one period, the static "
                "approximation otherwise)"
            )
            extent = shape[3] * steps[3]
            if shape[3] > 1 and abs(extent - beta) > 1e-9 * beta:
                notes.append(f"the time slices span L4 a4 = {extent:.6g}, not the period {beta:g}")
        else:
            w = w.reshape(shape)
        samples = _grid_samples(np.reshape(pts, tuple(shape) + (4,)), s.reshape(shape), w)
    return _find(samples, n, beta, quantity, frac_min, radius, notes)


def _find(samples: tuple, n, beta, quantity, frac_min, radius, notes) -> ConstituentFit:
    """The finder on time-averaged samples (xyz (p, 3), sbar (p,) mean action density, held_at (p,) the action
    of each spatial point's samples (weights times s, summed over time) or None, counts (p,) samples per point)."""
    xyz, sbar, held_at, counts = samples
    if xyz.shape[0] < 2:
        raise ValueError(f"need samples at two or more spatial points; found {xyz.shape[0]}")
    if n > xyz.shape[0]:
        raise ValueError(f"n = {n} constituents exceeds the {xyz.shape[0]} spatial points sampled")
    if np.any(counts != counts[0]):
        notes.append(
            f"spatial points carry {int(counts.min())} to {int(counts.max())} time samples: the time average is uneven"
        )
    pad = np.concatenate([xyz, np.zeros((xyz.shape[0], 1))], axis=1)
    cand, heights = count_peaks(pad, sbar, min_fraction=frac_min, merge_radius=radius)
    cand = cand[:, :3]
    n_peaks = int(cand.shape[0])
    reasons: list[str] = []
    # action of each sample's Voronoi part among the candidates, then the n candidates holding the most
    per_point = held_at if held_at is not None else sbar * counts
    _, near = scipy.spatial.cKDTree(cand).query(xyz)
    held = np.bincount(near, weights=per_point, minlength=n_peaks)
    keep = np.sort(np.argsort(-held, kind="stable")[:n])
    if n_peaks < n:
        reasons.append(
            f"found {n_peaks} distinct peak(s), fewer than n = {n}: the constituents overlap (closer than their "
            "cores), are too light to stand out, or lie outside the samples"
        )
    left = np.setdiff1d(np.arange(n_peaks), keep)
    if left.size:
        lost = float(np.sum(held[left]) / np.sum(held))
        if lost > _LEFT_OUT_FRACTION:
            reasons.append(
                f"{left.size} further peak(s) left out hold {100 * lost:.3g} % of the action (the {n} holding the most "
                "are kept): more constituents, or lumps that are not constituents"
            )
    tree = scipy.spatial.cKDTree(xyz)
    refined = []
    for c in cand[keep]:
        pos, why = _refine(xyz, sbar, tree, c)
        refined.append(pos)
        if why:
            notes.append(f"peak at ({', '.join(f'{v:.4g}' for v in c)}) not refined: {why}")
    positions = np.asarray(refined).reshape(-1, 3)
    if held_at is not None:
        _, part = scipy.spatial.cKDTree(positions).query(xyz)
        fractions = np.bincount(part, weights=held_at, minlength=keep.size) / INSTANTON_ACTION
        total = float(np.sum(held_at) / INSTANTON_ACTION)
    else:
        fractions, total = np.full(keep.size, np.nan), float("nan")
    order = np.argsort(-(heights[keep] if held_at is None else fractions), kind="stable")
    return ConstituentFit(
        positions=positions[order],
        fractions=fractions[order],
        heights=heights[keep][order],
        total=total,
        n=n,
        n_peaks=n_peaks,
        period=beta,
        spacing=sample_spacing(pad),
        quantity=quantity,
        ambiguous=bool(reasons),
        reasons=tuple(reasons),
        notes=tuple(notes),
        error_budget=_BUDGET,
    )


def find_lattice_constituents(
    links,
    n: int,
    *,
    spacing,
    origin=None,
    boundary="periodic",
    period=None,
    quantity: str = "action",
    min_fraction: float = MIN_FRACTION,
    merge_radius: float | None = None,
) -> ConstituentFit:
    """Positions and action fractions of a caloron's constituents from the links of a thermal lattice.

    The density is the clover action density s = -1/2 sum tr F F of the clover field strength
    (quantity='action', `instantonkit.lattice.observables.clover_field_strength`) or 8 pi^2 times the clover
    charge density (quantity='charge'), both with the lattice's spacings, at the sites x_n = origin + a n;
    the weights are the cell volume a1 a2 a3 a4, and the L4 time slices make one period beta = L4 a4.
    Then as `find_constituents` (module docstring).  Sites whose clovers leave an open spatial face are dropped.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links of an N_s^3 x N_t lattice (L4 = N_t), periodic in time.
      n: number of constituents (2 for SU(2)).
      spacing: one a > 0 or four (a1, a2, a3, a4) > 0 (`instantonkit.lattice.thermal.thermal_spacings`).
      origin: (4,) position of site 0 (a start's ``report.origin``), default (0, 0, 0, 0).
      boundary: one of ('periodic', 'open') or four, per direction; x4 must be 'periodic'.
      period: None, or beta > 0 to check against L4 a4 (a mismatch is refused).
      quantity, min_fraction, merge_radius: as in `find_constituents`.
    Returns:
      `ConstituentFit`, positions in the lattice's coordinates.
    Raises:
      ValueError / TypeError naming the bad argument: links not of a 4-dimensional lattice, spacings not one or
      four positive numbers, an open time direction, a period other than L4 a4.
    """
    u = check_links(links)
    n = _validate.positive_int("n", n)
    frac_min = _validate.positive_float("min_fraction", min_fraction)
    if frac_min >= 1:
        raise ValueError(f"min_fraction must lie in (0, 1); found {frac_min!r}")
    a = _validate.spacings("spacing", spacing)
    dirs = _bd.per_direction("boundary", boundary, _bd.OBSERVABLE_BOUNDARIES)
    if dirs[3] != "periodic":
        raise ValueError(
            f"boundary in x4 must be 'periodic' (a thermal lattice closes on its period); found {dirs[3]!r}"
        )
    n_t = int(u.shape[3])
    beta = n_t * float(a[3])
    if period is not None:
        want = _validate.positive_float("period", period)
        if abs(want - beta) > _bd.PERIOD_RTOL * max(want, beta):
            raise ValueError(
                f"period {want!r} does not match the lattice's time extent L4 * a4 = {n_t} * {float(a[3])!r} = {beta!r} "
                "(links of shape (L1, L2, L3, L4, 4, N, N) with L4 = N_t, spacings (a1, a2, a3, a4) with a4 = a_t)"
            )
    _validate.choice("quantity", quantity, _QUANTITIES)
    org = np.zeros(4) if origin is None else _validate.point("origin", origin)
    bnd = boundary if isinstance(boundary, str) else dirs
    if quantity == "action":
        f = _obs.clover_field_strength(u, spacing=a, boundary=bnd)
        dens = ACTION_DENSITY_FACTOR * np.real(np.einsum("...mnij,...mnji->...", f, f))
    else:
        dens = INSTANTON_ACTION * _obs.clover_charge_density(u, spacing=a, boundary=bnd)
    grids = np.meshgrid(*[np.arange(m, dtype=np.float64) for m in dens.shape], indexing="ij")
    sites = org + a * np.stack(grids, axis=-1)
    if not np.isfinite(dens).all(axis=3).any():
        raise ValueError(f"no site of the {dens.shape} lattice has a complete clover (open faces take them all)")
    radius = beta / (2.0 * PI) if merge_radius is None else merge_radius
    cell = float(np.prod(a))
    note = f"weights: the cell volume a1 a2 a3 a4 = {cell:.4g}; the {n_t} time slices make one period {beta:g}"
    if not float(np.nanmax(dens)) > 0:
        raise ValueError(
            f"the clover {quantity} density has no positive value (largest {float(np.nanmax(dens))!r}): "
            "no constituents to find"
        )
    return _find(_grid_samples(sites, dens, cell), n, beta, quantity, frac_min, radius, [note])
