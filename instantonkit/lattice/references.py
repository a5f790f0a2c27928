"""What a lattice start is compared with and rebuilt from (floor 7, above `instantonkit.lattice.starts`).

* The matched continuum reference: `continuum_reference` gives the action of the field in the
  same box (and with the same window) as a start, and the Wilson action expected at its rho/a from
  `wilson_artefact`, so a start is compared like with like.
* Fields from their records: lattice files written from a `instantonkit.lattice.starts.LatticeStart`
  hold the field's ``record()`` (a JSON-ready dict, field hook); `field_from_record`,
  `field_from_file` rebuild the field and `regenerate` computes the start again.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..adhm.quaternionic import ADHMData
from ..adhm.unitary import UnitaryADHMData
from ..ansatz.classic import BPSTField, caloron, jnr, thooft
from ..ansatz.mixtures import mixture, torus_mixture
from ..ansatz.periodic import DEFAULT_WINDOW_WIDTH, TorusWindow
from ..core import _validate as _v
from ..core.conventions import INSTANTON_ACTION
from ..engine.fields import evaluate, hook
from ..engine.transforms import ConstantGauge, dilate, gauge_transform, parity, rotate, translate
from . import files as _io
from .starts import LatticeStart, StartSpec, lattice_start

#: 8 pi^2, the action of one instanton (conventions module).
_EIGHT_PI2 = INSTANTON_ACTION

__all__ = [
    "wilson_artefact",
    "continuum_reference",
    "RECORD_KINDS",
    "GAUGE_KINDS",
    "field_from_record",
    "field_from_file",
    "regenerate",
]


# -- the matched continuum reference ----------------------------------------------------------------------


def wilson_artefact(ratio):
    """S_W / S of one instanton of size rho at spacing a, ratio = a / rho: 1 - (1/5) ratio^2 - (1/70) ratio^4.

    García Pérez, González-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994) 535 (from memory; the
    tests reproduce it on open lattices: test_wilson_action_of_bpst_start_has_the_known_lattice_artefact).
    ratio: float or array -> same shape.
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
    Snippe, van Baal, Nucl. Phys. B 413 (1994) 535, from memory; checked by
    test_continuum_reference_of_the_plain_box_matches_the_scipy_box_integral), rho_i from the field's layout.
    For 'periodic' the wrapped links add the boundary action of the start's report on top.

    Args:
      field, shape, spacing, origin, boundary, window: as in `lattice_links`.
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
    a, org, shp = spec.spacings, spec.origin, np.asarray(spec.shape, dtype=np.float64)
    opened = np.array([b == "open" for b in spec.boundaries])
    lo = np.where(opened, org, org - a / 2.0)
    hi = np.where(opened, org + a * (shp - 1.0), org + a * (shp - 0.5))
    sizes = _field_sizes(spec.field)
    nodes = 8 if nodes is None else _v.positive_int("nodes", nodes)
    _v.affordable(
        "nodes", 32.0 * float(nodes) ** 4, f"a product rule of nodes^4 = {float(nodes) ** 4:.3e} points a panel"
    )
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
    # anisotropic spacings: to O(a^2) the artefact of an O(4)-symmetric lump is that of the mean of the
    # a_mu^2 (each direction's derivative terms enter alike; our derivation, common practice)
    a_eff = a[0] if np.all(a == a[0]) else float(np.sqrt(np.mean(a**2)))
    art = float(np.sum(1.0 - wilson_artefact(a_eff / sizes)))
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


def _entries(rec, *names):
    """The entries ``names`` of a record, or a ValueError naming the kind and what is missing."""
    missing = [n for n in names if n not in rec]
    if missing:
        raise ValueError(f"record of kind {rec.get('kind')!r} lacks {missing}; found keys {sorted(rec)}")
    return [rec[n] for n in names]


def _floats(value):
    return np.asarray(value, dtype=np.float64)


def _adhm_from_record(rec):
    lam, b, chirality, tol, gauge = _entries(rec, "lam", "B", "chirality", "tol", "gauge")
    return ADHMData(_floats(lam), _floats(b), chirality=int(chirality), tol=float(tol), gauge=gauge)


def _bpst_from_record(rec):
    center, size, orientation, gauge = _entries(rec, "center", "size", "orientation", "gauge")
    return BPSTField(_floats(center), float(size), _floats(orientation), gauge)


def _thooft_from_record(rec):
    centers, sizes = _entries(rec, "centers", "sizes")
    return thooft(_floats(centers), _floats(sizes))


def _jnr_from_record(rec):
    poles, weights = _entries(rec, "poles", "weights")
    return jnr(_floats(poles), _floats(weights))


def _caloron_from_record(rec):
    size, period, center = _entries(rec, "size", "period", "center")
    return caloron(float(size), float(period), _floats(center))


def _holonomy_caloron_from_record(rec):
    size, period, holonomy, center, axis = _entries(rec, "size", "period", "holonomy", "center", "axis")
    omega = float(holonomy)
    if omega == 0.0:
        raise ValueError("a 'holonomy_caloron' record must have holonomy > 0; found 0.0 (use kind 'caloron')")
    return caloron(float(size), float(period), _floats(center), holonomy=omega, axis=_floats(axis))


def _mixture_from_record(rec):
    centres, sizes, orientations, signs = (
        _floats(v) for v in _entries(rec, "centres", "sizes", "orientations", "signs")
    )
    sg = tuple(int(v) for v in signs)
    torus = rec.get("torus")
    if torus is None:
        return mixture(centres, sizes, sg, orientations, overlap="ignore")
    if not isinstance(torus, dict) or not {"lo", "box", "taper"} <= set(torus):
        raise ValueError(f"a 'mixture' record's 'torus' entry must hold lo, box and taper; found {torus!r:.80}")
    return torus_mixture(
        centres,
        sizes,
        sg,
        _floats(torus["box"]),
        orientations,
        lo=_floats(torus["lo"]),
        taper=float(torus["taper"]),
        overlap="ignore",
    )


def _sun_caloron_from_record(rec):
    period, holonomy, positions, time = _entries(rec, "period", "holonomy", "positions", "time")
    center = (0.0, 0.0, 0.0, float(time))
    return caloron(None, float(period), center, holonomy=_floats(holonomy), positions=_floats(positions))


def _complex_entry(rec, name):
    (part,) = _entries(rec, name)
    if not isinstance(part, dict) or set(part) != {"re", "im"}:
        raise ValueError(f"record entry {name!r} must be a dict with keys 're' and 'im'; found {part!r:.80}")
    return np.asarray(part["re"], dtype=np.float64) + 1j * np.asarray(part["im"], dtype=np.float64)


def _unitary_adhm_from_record(rec):
    b1, b2, i, j = (_complex_entry(rec, n) for n in ("B1", "B2", "I", "J"))
    (tol, gauge) = _entries(rec, "tol", "gauge")
    return UnitaryADHMData(b1, b2, i, j, tol=float(tol), gauge=gauge)


def _inner(rec):
    """The wrapped field of a transformation's record (its own window, if any, rebuilt with it)."""
    (inner,) = _entries(rec, "field")
    try:
        return field_from_record(inner)
    except ValueError as err:
        raise ValueError(f"the field inside a {rec['kind']} field cannot be rebuilt: {err}") from err


#: Rebuilders of the records of gauge functions (their ``record()``) by 'kind'.
GAUGE_KINDS = {"constant": lambda rec: ConstantGauge(_complex_entry(rec, "matrix"))}


def _gauge_transformed(rec):
    (g,) = _entries(rec, "g")
    build = GAUGE_KINDS.get(g.get("kind")) if isinstance(g, dict) else None
    if build is None:
        found = g.get("kind") if isinstance(g, dict) else g
        raise ValueError(f"gauge function record kind must be one of {tuple(GAUGE_KINDS)}; found {found!r:.80}")
    return gauge_transform(_inner(rec), build(g))


def _unrecordable(rec):
    kind = rec.get("type", "field")
    raise ValueError(f"a {kind} cannot be rebuilt from its record: {rec.get('reason', 'no reason recorded')}")


#: Rebuilders of field records by their 'kind' (the ``record()`` hooks of ADHM data, complex ADHM data,
#: the ansaetze of `instantonkit.ansatz.classic` and the transformations of `instantonkit.engine.transforms`;
#: 'unrecordable' records say why a field cannot be rebuilt, and rebuilding one raises that reason).
RECORD_KINDS = {
    "adhm": _adhm_from_record,
    "unitary_adhm": _unitary_adhm_from_record,
    "bpst": _bpst_from_record,
    "thooft": _thooft_from_record,
    "jnr": _jnr_from_record,
    "caloron": _caloron_from_record,
    "holonomy_caloron": _holonomy_caloron_from_record,
    "mixture": _mixture_from_record,
    "sun_caloron": _sun_caloron_from_record,
    "translated": lambda rec: translate(_inner(rec), _floats(_entries(rec, "shift")[0])),
    "rotated": lambda rec: rotate(_inner(rec), *(_floats(v) for v in _entries(rec, "left", "right"))),
    "dilated": lambda rec: dilate(_inner(rec), float(_entries(rec, "factor")[0])),
    "parity": lambda rec: parity(_inner(rec)),
    "gauge_transformed": _gauge_transformed,
    "unrecordable": _unrecordable,
}


def field_from_record(record: dict, *, window: bool = True):
    """The field a ``record()`` hook described (as stored in lattice files and in ``LinkReport.field``).

    Args:
      record: dict with a 'kind' in RECORD_KINDS ('adhm': Lambda, B, chirality, gauge, tol;
        'unitary_adhm': B1, B2, I, J as {'re', 'im'} lists, gauge, tol; 'bpst': center, size,
        orientation, gauge; 'thooft': centers, sizes; 'jnr': poles, weights; 'caloron': size, period,
        center; 'holonomy_caloron': size, period, holonomy, axis, center; 'sun_caloron': period, holonomy
        (mu), positions, time; 'mixture': centres, sizes, orientations, signs and, on the torus, 'torus'
        (lo, box, taper); 'translated': field, shift; 'rotated': field, left, right; 'dilated': field, factor;
        'parity': field; 'gauge_transformed': field, g (a gauge function's record, kind in
        GAUGE_KINDS), where 'field' is the wrapped field's record) and optionally 'window' (lo, box,
        width and, when not all, the windowed directions of `TorusWindow`; 'background' as {'re', 'im'}
        when the window is about a constant limit).
      window: rebuild the window too (False: the field before windowing, to pass with boundary='window').
    Returns:
      The field (ADHMData, UnitaryADHMData, an ansatz field, a transformed field or a TorusWindow of
      one); floats are those of the record (JSON keeps float64 exactly), so np.array_equal holds on
      the parameters.
    Raises:
      ValueError: no record, an unknown kind, an entry missing (naming it), or a field that cannot be
        rebuilt (kind 'unrecordable': a gauge transformation by a callable, with the reason).
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
        bg = win.get("background")  # the constant limit of A at spatial infinity (non-trivial holonomy)
        bg = None if bg is None else np.asarray(bg["re"]) + 1j * np.asarray(bg["im"])
        field = TorusWindow(field, np.asarray(win["lo"]), np.asarray(win["box"]), np.asarray(win["width"]), dirs, bg)
    return field


#: Why a lattice start's file can hold no field description (its field offered no ``record()`` hook).
_NO_RECORD = (
    "its field offered no record() hook: a bare callable A(x), a ParametrisedField, a field class of your "
    "own, or a transformation or window of one of those (fields that record themselves: ADHM data, complex "
    "ADHM data, BPST, 't Hooft, JNR and caloron fields, sum-ansatz mixtures and their translations, rotations, dilations, parity "
    "images, gauge transformations by a transforms.ConstantGauge and windows); rebuild the field by hand, or save with description= a dict of your own"
)


def field_from_file(path, *, window: bool = True):
    """The field described in a lattice file (npz or ILDG written by ``save_lattice`` of a start); see `field_from_record`.

    Raises ValueError saying why when the field cannot be rebuilt: the file holds no description (links
    saved without a start, or a start whose field has no ``record()`` hook, told apart by the start's
    metadata), or the description is of a field that cannot be rebuilt (with its reason).
    """
    desc = _io.read_description(path)
    rec = desc["field"]
    if rec is None:
        meta = desc["metadata"] or {}
        if "shape" in meta and "boundary" in meta:
            raise ValueError(f"{path!s} holds a lattice start but no field description: {_NO_RECORD}")
        raise ValueError(
            f"{path!s} holds no field description: the links were saved without a lattice start and without "
            "description= (save the lattice_start(...) result itself, or pass description=)"
        )
    try:
        return field_from_record(rec, window=window)
    except ValueError as err:
        raise ValueError(f"the field of {path!s} cannot be rebuilt: {err}") from err


def regenerate(path) -> LatticeStart:
    """Compute again the start a lattice file holds, from the file's description and metadata alone (a LatticeStart)."""
    desc = _io.read_description(path)
    meta = desc["metadata"]
    if desc["field"] is None or "shape" not in meta:
        raise ValueError(f"{path!s} lacks the field description or the start's metadata needed to regenerate it")
    try:
        field = field_from_record(desc["field"], window=False)
    except ValueError as err:
        raise ValueError(f"the field of {path!s} cannot be rebuilt: {err}") from err
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
