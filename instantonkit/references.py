"""What a lattice start is compared with and rebuilt from (floor 7, above :mod:`instantonkit.lattice`).

* The matched continuum reference: :func:`continuum_reference` gives the action of the field in the
  same box (and with the same window) as a start, and the Wilson action expected at its rho/a from
  :func:`wilson_artefact`, so a start is compared like with like.
* Fields from their records: lattice files written from a :class:`instantonkit.lattice.LatticeStart`
  hold the field's ``record()`` (a JSON-ready dict, field hook); :func:`field_from_record`,
  :func:`field_from_file` rebuild the field and :func:`regenerate` computes the start again.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from . import _validate as _v
from . import io as _io
from .adhm import ADHMData
from .ansatz import BPSTField
from .conventions import INSTANTON_ACTION
from .fields import evaluate, hook
from .lattice import LatticeStart, StartSpec, lattice_start
from .periodic import DEFAULT_WINDOW_WIDTH, TorusWindow
from .unitary_adhm import UnitaryADHMData

#: 8 pi^2, the action of one instanton (conventions module).
_EIGHT_PI2 = INSTANTON_ACTION

__all__ = [
    "wilson_artefact",
    "continuum_reference",
    "RECORD_KINDS",
    "field_from_record",
    "field_from_file",
    "regenerate",
]


# -- the matched continuum reference ----------------------------------------------------------------------


def wilson_artefact(ratio):
    """S_W / S of one instanton of size rho at spacing a, ratio = a / rho: 1 - (1/5) ratio^2 - (1/70) ratio^4.

    García Pérez, González-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994) 535 (from memory; the
    tests reproduce it on open lattices).  ratio: float or array -> same shape.
    """
    r = np.asarray(ratio, dtype=np.float64)
    return 1.0 - r**2 / 5.0 - r**4 / 70.0


def _field_sizes(field) -> np.ndarray:
    lay = hook(field, "layout")
    if lay is not None:
        return np.asarray(lay()[1], dtype=np.float64).reshape(-1)
    h = hook(field, "hint")
    if h is None:
        raise ValueError("continuum_reference needs the field's sizes: a layout() or hint() hook")
    return np.array([float(h()[1])])


def continuum_reference(
    field,
    shape,
    spacing,
    *,
    origin=None,
    boundary: str | Sequence[str] = "periodic",
    window: float = DEFAULT_WINDOW_WIDTH,
    nodes: int | None = None,
) -> dict:
    """The continuum figures a lattice start of ``field`` should be compared with (like with like).

    The field put on the lattice (the windowed field where a direction is 'window', the field itself
    otherwise) has its action integrated over the lattice's box by a tensor Gauss-Legendre rule
    (``nodes`` per panel), direction by direction (``boundary`` one choice or four, as for the start):
    the periodic extent [origin - a/2, origin + a (L - 1/2)] for 'periodic' and 'window', the extent
    [origin, origin + a (L - 1)] that the inside plaquettes cover for 'open'.
    The expected Wilson action applies the lattice artefact of each lump,
    S_W = S_box - 8 pi^2 sum_i (1 - wilson_artefact(a / rho_i))  (García Pérez, González-Arroyo,
    Snippe, van Baal, Nucl. Phys. B 413 (1994) 535, from memory), rho_i from the field's layout.
    For 'periodic' the wrapped links add the boundary action of the start's report on top.

    Args:
      field, shape, spacing, origin, boundary, window: as in :func:`lattice_links`.
      nodes: Gauss-Legendre nodes per panel (default 8); each axis is cut into panels at the window's
        layers and into pieces of about 2 rho_min.
    Returns:
      dict: 'box_action' and 'box_fraction' (/ 8 pi^2), 'expected_wilson' and 'expected_fraction',
      'excess_fraction' (box_fraction - k for 'window': the window's action excess), 'boundaries' (the
      boundary of each direction as applied), 'sizes' (m,),
      'lo', 'hi' (4,) of the box, 'nodes'.
    Raises:
      ValueError: bad arguments (naming them); a field without sizes (no layout or hint hook).
    """
    spec = StartSpec.make(field, shape, spacing, origin=origin, boundary=boundary, group=None, window=window)
    a, org, shp = spec.spacing, spec.origin, np.asarray(spec.shape, dtype=np.float64)
    opened = np.array([b == "open" for b in spec.boundaries])
    lo = np.where(opened, org, org - a / 2.0)
    hi = np.where(opened, org + a * (shp - 1.0), org + a * (shp - 0.5))
    sizes = _field_sizes(spec.field)
    nodes = 8 if nodes is None else _v.positive_int("nodes", nodes)
    t, wt = np.polynomial.legendre.leggauss(nodes)
    xs, ws = [], []
    for i in range(
        4
    ):  # panels: the window's layers (where it is not analytic at the ends) and bulk pieces of ~ 2 rho_min
        cuts = [lo[i], hi[i]]
        if spec.boundaries[i] == "window":
            d = float(np.asarray(spec.field.width)[i])
            cuts = [lo[i], lo[i] + d, hi[i] - d, hi[i]] if hi[i] - lo[i] > 2 * d + 1e-12 else [lo[i], lo[i] + d, hi[i]]
        edges = [cuts[0]]
        for l, h in zip(cuts[:-1], cuts[1:]):
            m = max(1, int(np.ceil((h - l) / (2.0 * np.min(sizes)))))
            edges += list(np.linspace(l, h, m + 1)[1:])
        e = np.asarray(edges)
        xs.append((0.5 * (e[:-1] + e[1:])[:, None] + 0.5 * np.diff(e)[:, None] * t[None, :]).reshape(-1))
        ws.append((0.5 * np.diff(e)[:, None] * wt[None, :]).reshape(-1))
    g = np.stack(np.meshgrid(xs[0], xs[1], xs[2], indexing="ij"), axis=-1).reshape(-1, 3)
    w3 = np.einsum("i,j,k->ijk", ws[0], ws[1], ws[2]).reshape(-1)
    total = 0.0
    for x4, w4 in zip(xs[3], ws[3]):
        pts = np.concatenate([g, np.full((g.shape[0], 1), x4)], axis=1)
        total += w4 * float(np.sum(w3 * evaluate(spec.field, pts, "action_density")))
    art = float(np.sum(1.0 - wilson_artefact(a / sizes)))
    expected = total - _EIGHT_PI2 * art
    charge = hook(spec.field, "charge")
    k = abs(int(charge)) if charge is not None else sizes.size
    return {
        "box_action": total,
        "box_fraction": total / _EIGHT_PI2,
        "expected_wilson": expected,
        "expected_fraction": expected / _EIGHT_PI2,
        "excess_fraction": total / _EIGHT_PI2 - k,
        "sizes": sizes,
        "lo": np.asarray(lo),
        "hi": np.asarray(hi),
        "nodes": nodes,
        "boundaries": spec.boundaries,
    }


# -- fields from their records (lattice files) -----------------------------------------------------------


def _adhm_from_record(rec):
    return ADHMData(
        np.asarray(rec["lam"], dtype=np.float64),
        np.asarray(rec["B"], dtype=np.float64),
        chirality=int(rec["chirality"]),
        tol=float(rec["tol"]),
        gauge=rec["gauge"],
    )


def _bpst_from_record(rec):
    return BPSTField(
        np.asarray(rec["center"], dtype=np.float64),
        float(rec["size"]),
        np.asarray(rec["orientation"], dtype=np.float64),
        rec["gauge"],
    )


def _complex_entry(rec, name):
    part = rec[name]
    if not isinstance(part, dict) or set(part) != {"re", "im"}:
        raise ValueError(f"record entry {name!r} must be a dict with keys 're' and 'im'; found {part!r:.80}")
    return np.asarray(part["re"], dtype=np.float64) + 1j * np.asarray(part["im"], dtype=np.float64)


def _unitary_adhm_from_record(rec):
    b1, b2, i, j = (_complex_entry(rec, n) for n in ("B1", "B2", "I", "J"))
    return UnitaryADHMData(b1, b2, i, j, tol=float(rec["tol"]), gauge=rec["gauge"])


#: Rebuilders of field records by their 'kind' (the ``record()`` hooks of ADHM data, complex ADHM data
#: and ``ansatz.BPSTField``).
RECORD_KINDS = {"adhm": _adhm_from_record, "unitary_adhm": _unitary_adhm_from_record, "bpst": _bpst_from_record}


def field_from_record(record: dict, *, window: bool = True):
    """The field a ``record()`` hook described (as stored in lattice files and in ``LinkReport.field``).

    Args:
      record: dict with a 'kind' in RECORD_KINDS ('adhm': Lambda, B, chirality, gauge, tol;
        'unitary_adhm': B1, B2, I, J as {'re', 'im'} lists, gauge, tol; 'bpst': center, size,
        orientation, gauge) and optionally 'window' (lo, box, width and, when not all, the windowed
        directions of :class:`TorusWindow`).
      window: rebuild the window too (False: the field before windowing, to pass with boundary='window').
    Returns:
      The field (ADHMData, UnitaryADHMData, ansatz.BPSTField or a TorusWindow of one); floats are those of the record
      (JSON keeps float64 exactly), so np.array_equal holds on Lambda and B.
    Raises:
      ValueError: no record, or an unknown kind.
    """
    if not isinstance(record, dict) or "kind" not in record:
        raise ValueError(f"record must be a dict with a 'kind' key; found {record!r:.80}")
    build = RECORD_KINDS.get(record["kind"])
    if build is None:
        raise ValueError(f"record kind must be one of {tuple(RECORD_KINDS)}; found {record['kind']!r}")
    field = build(record)
    win = record.get("window")
    if window and win is not None:
        dirs = tuple(bool(d) for d in win.get("directions", (True,) * 4))
        field = TorusWindow(field, np.asarray(win["lo"]), np.asarray(win["box"]), np.asarray(win["width"]), dirs)
    return field


def field_from_file(path, *, window: bool = True):
    """The field described in a lattice file (npz or ILDG written by ``save_lattice`` of a start); see :func:`field_from_record`.

    Raises ValueError when the file holds no field description.
    """
    desc = _io.read_description(path)
    if desc["field"] is None:
        raise ValueError(
            f"{path!s} holds no field description (save a lattice_start(...) result, or pass description=)"
        )
    return field_from_record(desc["field"], window=window)


def regenerate(path) -> LatticeStart:
    """Compute again the start a lattice file holds, from the file's description and metadata alone (a LatticeStart)."""
    desc = _io.read_description(path)
    meta = desc["metadata"]
    if desc["field"] is None or "shape" not in meta:
        raise ValueError(f"{path!s} lacks the field description or the start's metadata needed to regenerate it")
    field = field_from_record(desc["field"], window=False)
    return lattice_start(
        field,
        tuple(meta["shape"]),
        meta["spacing"],
        origin=np.asarray(meta["origin"]),
        group=meta["group"],
        embedding=tuple(meta["embedding"]),
        boundary=meta["boundary"] if isinstance(meta["boundary"], str) else tuple(meta["boundary"]),
        rtol=meta["rtol"],
        window=meta.get("window") or DEFAULT_WINDOW_WIDTH,
    )
