"""What one chunk computes: small frozen callables region -> (block, stats row) that pickle to workers.

The stats row holds the chunk-report columns after ``done`` (`instantonkit.cluster.store.Column`).
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..engine.fields import evaluate as _evaluate
from .store import NO_STATS, stats_row

__all__ = ["LinkChunk", "MemberChunk", "GridChunk", "PointChunk"]


@dataclasses.dataclass(frozen=True)
class LinkChunk:
    """Links of one box of sites of one start: region over (L1, L2, L3, L4) -> (links, stats row)."""

    spec: object

    def __call__(self, region):
        arr, stats = self.spec.block([r.start for r in region], [r.stop for r in region])
        return arr, stats_row(stats)


@dataclasses.dataclass(frozen=True)
class MemberChunk:
    """Links of one box of one ensemble member: region over (n, L1, ..., L4), member axis chunk 1."""

    spec: object

    def __call__(self, region):
        arr, row = LinkChunk(self.spec)(region[1:])
        return arr[None], row


@dataclasses.dataclass(frozen=True)
class GridChunk:
    """A quantity on the sites origin + a n of one box of a grid (spacing: one a, or (4,) a_mu per direction)."""

    field: object
    quantity: str
    method: str
    origin: np.ndarray
    spacing: float | np.ndarray

    def __call__(self, region):
        grids = np.meshgrid(*[np.arange(r.start, r.stop, dtype=np.float64) for r in region], indexing="ij")
        pts = self.origin + self.spacing * np.stack(grids, axis=-1)
        return _evaluate(self.field, pts, self.quantity, method=self.method), list(NO_STATS)


@dataclasses.dataclass(frozen=True)
class PointChunk:
    """A quantity on one block of a point array of shape (..., 4): a Zarr array read at the region
    (cheap to ship to a worker), or, for numpy points, just the block itself (``sliced``)."""

    field: object
    quantity: str
    method: str
    points: object
    sliced: bool = False

    def __call__(self, region):
        pts = self.points if self.sliced else self.points[region]
        return _evaluate(self.field, np.asarray(pts), self.quantity, method=self.method), list(NO_STATS)
