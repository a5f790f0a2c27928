"""Distinct peaks of sampled densities, robust to plateaus and ties (lumps between lattice sites), of one
or either sign.

A sample is a local maximum when no sample within _PEAK_RADIUS median spacings exceeds it by more
than a rounding tolerance; touching maxima (the tied corners of a hypercube around a lump at its
centre) merge into one peak at their mean position, so lumps between sites count once.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse
import scipy.sparse.csgraph
import scipy.spatial

from ..core import _validate
from ..engine.fields import as_points

__all__ = ["BPST_PEAK", "count_peaks", "count_signed_peaks", "sample_spacing"]

#: Peak of one BPST action density: s(a) = BPST_PEAK / rho^4 (Belavin, Polyakov, Schwartz, Tyupkin,
#: Phys. Lett. B 59 (1975) 85), used to read a size off a peak height.
BPST_PEAK = 48.0

#: Relative tolerance of "equal" densities in the peak test (ties, plateaus: the 16 corners of a hypercube
#: around a lump at its centre carry equal values up to rounding).
_TIE_RTOL = 1e-9

#: Neighbourhood radius of the peak test in units of the median nearest-sample distance: 2.01 takes the
#: whole 3^4 stencil of a lattice site (its farthest corner is at 2 a), so ties are never cut arbitrarily.
_PEAK_RADIUS = 2.01

#: Samples compared with each sample when no neighbours lie within the peak radius (scattered points).
_PEAK_NEIGHBOURS = 16

# -- peaks ------------------------------------------------------------------------------------------


def _neighbours(pts: np.ndarray, n_nb: int = _PEAK_NEIGHBOURS):
    tree = scipy.spatial.cKDTree(pts)
    dist, idx = tree.query(pts, k=min(n_nb + 1, pts.shape[0]))
    return dist[:, 1:], idx[:, 1:]


def sample_spacing(pts: np.ndarray) -> float:
    """Median distance from a sample to its nearest neighbour; pts (M, 4) -> float."""
    nn, _ = _neighbours(pts, 1)
    return float(np.median(nn[:, 0]))


def _neighbour_pairs(pts: np.ndarray):
    """(i, j) index arrays of all sample pairs closer than _PEAK_RADIUS spacings (both orders), and the tree."""
    tree = scipy.spatial.cKDTree(pts)
    pairs = tree.query_pairs(_PEAK_RADIUS * sample_spacing(pts), output_type="ndarray")
    if pairs.shape[0] < pts.shape[0]:  # sparse scattered samples: fall back to nearest neighbours
        _, idx = _neighbours(pts)
        i = np.repeat(np.arange(pts.shape[0]), idx.shape[1])
        pairs = np.stack([i, idx.reshape(-1)], axis=1)
    i = np.concatenate([pairs[:, 0], pairs[:, 1]])
    j = np.concatenate([pairs[:, 1], pairs[:, 0]])
    return i, j


def count_peaks(
    points, density, *, min_fraction: float = 0.05, merge_radius: float | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Distinct local maxima of sampled density: (centres (p, 4), heights (p,)), tallest first.

    A sample is a local maximum when no sample within _PEAK_RADIUS median spacings (the 3^4 stencil of
    a lattice site) exceeds it by more than _TIE_RTOL of the tallest; maxima that touch (a plateau, or
    the tied corners of a hypercube around a lump between sites) are merged into one peak at their
    mean position.  Peaks above ``min_fraction`` of the tallest are then merged when closer than the
    BPST size of the taller one (rho = (BPST_PEAK / height)^(1/4)), or than ``merge_radius`` when it is
    given (lumps that are not BPST-shaped, e.g. a caloron's constituent monopoles).
    points: (..., 4); density: (...,) with one value per point; merge_radius: None or a length >= 0.
    """
    pts, _ = as_points(points)
    d = _validate.real_array("density", density).reshape(-1)
    if d.shape[0] != pts.shape[0]:
        raise ValueError(f"density must have one value per point ({pts.shape[0]}); found {d.shape[0]}")
    if merge_radius is not None:
        merge_radius = _validate.finite_float("merge_radius", merge_radius)
        if merge_radius < 0:
            raise ValueError(f"merge_radius must be >= 0; found {merge_radius!r}")
    top = float(np.max(d))
    if top <= 0:
        return np.zeros((0, 4)), np.zeros(0)
    i, j = _neighbour_pairs(pts)
    tol = _TIE_RTOL * top
    beaten = np.zeros(pts.shape[0], dtype=bool)
    np.logical_or.at(beaten, i, d[j] > d[i] + tol)
    is_max = ~beaten & (d > min_fraction * top)
    cand = np.flatnonzero(is_max)
    if cand.size == 0:
        return np.zeros((0, 4)), np.zeros(0)
    # plateaus: connected groups of maxima (neighbour pairs among candidates)
    pos = -np.ones(pts.shape[0], dtype=int)
    pos[cand] = np.arange(cand.size)
    both = is_max[i] & is_max[j]
    graph = scipy.sparse.coo_matrix(
        (np.ones(int(both.sum())), (pos[i[both]], pos[j[both]])), shape=(cand.size, cand.size)
    )
    n_groups, label = scipy.sparse.csgraph.connected_components(graph, directed=False)
    centres = np.array([pts[cand[label == g]].mean(axis=0) for g in range(n_groups)])
    heights = np.array([d[cand[label == g]].max() for g in range(n_groups)])
    order = np.argsort(-heights)
    centres, heights = centres[order], heights[order]
    kept: list[int] = []
    for c in range(n_groups):
        rho = (BPST_PEAK / heights[c]) ** 0.25
        if merge_radius is not None:
            near = [np.linalg.norm(centres[c] - centres[q]) <= merge_radius for q in kept]
        else:
            near = [np.linalg.norm(centres[c] - centres[q]) <= max(rho, (BPST_PEAK / heights[q]) ** 0.25) for q in kept]
        if not any(near):
            kept.append(c)
    return centres[kept], heights[kept]


def count_signed_peaks(points, charge, *, min_fraction: float = 0.05):
    """Peaks of a charge density of either sign: {+1: (centres, heights), -1: (centres, heights)}.

    Each sign is searched with `count_peaks` on +-q (heights are |q|); ``min_fraction`` is taken of
    the largest |q| of either sign, so a weak opposite-sign lump counts only above it.
    points: (..., 4); charge: (...,) charge density q.
    """
    q = _validate.real_array("charge", charge).reshape(-1)
    top = float(np.max(np.abs(q))) if q.size else 0.0
    out = {}
    for sign in (1, -1):
        part = sign * q
        m = float(np.max(part)) if part.size else 0.0
        if top <= 0 or m < min_fraction * top:
            out[sign] = (np.zeros((0, 4)), np.zeros(0))
        else:
            out[sign] = count_peaks(points, part, min_fraction=min_fraction * top / m)
    return out
