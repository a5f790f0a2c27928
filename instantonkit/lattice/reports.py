"""The records of a lattice start: its quality report (`LinkReport`) and the finished start (`LatticeStart`).

`instantonkit.lattice.starts.StartSpec` fills the report; lattice files store it
(``LinkReport.as_metadata``), with the field's ``record()`` that rebuilds the field.
"""

from __future__ import annotations

import dataclasses

from ..engine.fields import hook


@dataclasses.dataclass(frozen=True)
class LinkReport:
    """What `lattice_links` did and how good the result is.

    method: 'closed' or 'magnus'; max_steps: largest number of Magnus steps on one link (0 for the
    closed form); refinement_diff: largest accepted error estimate of the Magnus refinements;
    unitarity_before / unitarity_after: `unitarity_deviation` before and after the final
    projection; boundary: as given (a string or four); boundary_link_mismatch / boundary_action_error:
    see `boundary_mismatch`, the max and sum of the ``*_by_direction`` figures of each
    direction's faces (None for an open direction, and None when all are open); seconds: wall time;
    boundary_action_fraction: boundary_action_error / 8 pi^2 (above BOUNDARY_WARN_FRACTION a
    BoundaryActionWarning is raised); window: the layer width of the windowed directions (fraction of
    the half-box), else None; field: the field's ``record()`` (rebuilt by `field_from_record`;
    None without a record hook); potential_evaluations: of the Magnus links in all (0 for closed
    forms); boundaries: the four boundaries as applied (`instantonkit.lattice.boundaries`); spacing:
    one float, or (a1, a2, a3, a4) when they differ (``spacings``: always the four).
    """

    shape: tuple
    spacing: float | tuple
    origin: tuple
    group: str | None
    embedding: tuple
    boundary: str | tuple
    rtol: float
    method: str
    max_steps: int
    refinement_diff: float
    unitarity_before: float
    unitarity_after: float
    boundary_link_mismatch: float | None
    boundary_action_error: float | None
    seconds: float
    boundary_action_fraction: float | None = None
    window: float | None = None
    field: dict | None = None
    potential_evaluations: int = 0
    boundaries: tuple | None = None
    boundary_link_mismatch_by_direction: tuple | None = None
    boundary_action_error_by_direction: tuple | None = None

    @property
    def spacings(self) -> tuple:
        """The four spacings (a1, a2, a3, a4) in (x1, x2, x3, x4) order."""
        sp = self.spacing
        return tuple(float(v) for v in sp) if isinstance(sp, (tuple, list)) else (float(sp),) * 4

    def as_metadata(self) -> dict:
        """A JSON-ready dict of the generation parameters and quality figures (with 'spacings', the four)."""
        out = {k: (list(v) if isinstance(v, tuple) else v) for k, v in dataclasses.asdict(self).items()}
        out["spacings"] = list(self.spacings)
        return out


def record_of(field):
    """The field's ``record()``, or an 'unrecordable' record naming its type (so a file says what it held)."""
    rec, kind = hook(field, "record"), type(field).__name__
    why = "it offers no record() hook (a bare callable, a ParametrisedField or a field class of your own); rebuild it by hand, or save with description="
    return rec() if rec is not None else {"kind": "unrecordable", "type": kind, "reason": why}


@dataclasses.dataclass(frozen=True)
class LatticeStart:
    """A finished lattice start: ``links`` (L1, L2, L3, L4, 4, N, N) and its `LinkReport` ``report``."""

    links: object
    report: LinkReport
