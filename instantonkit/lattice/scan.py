"""A scan of lattice operators against a/rho: open starts of a field, each operator against the continuum in
the same box, and the fitted a^2, a^4 coefficients.

For every rho/a of the list the field is put on an open lattice of spacing a = rho / (rho/a) that spans
``half_width`` rho on each side of its centre (`instantonkit.lattice.starts.lattice_links`, the default
centred origin), optionally smoothed, and every operator (`instantonkit.lattice.operators`) is measured:

* an action is compared with the continuum action of the region its loops stand for: an m x n loop with
  corner x in the ordered plane (mu, nu) is the lattice's midpoint-rule cell of its centre
  x + (m/2) a mu + (n/2) a nu, so on an open lattice (sites x_d = o_d + a k, k = 0 .. L_d - 1) its loops
  cover [o + a (e - 1)/2, o + a (L - 1 - (e - 1)/2)] in a direction where it has extent e (e = 0 off the
  plane); the plane's share of the density is s / 6 (exact for an O(4)-symmetric lump such as BPST,
  whose F_mu nu all have one norm; for other fields an assumption that matters only at the box's faces);
* a charge is summed over the sites whose loops fit (the operator's longest side E from every face)
  and compared with the continuum charge of their cells [o + a (E - 1/2), o + a (L - 1 - E + 1/2)].

The continuum integrals are tensor Gauss-Legendre rules with panels cut at every face of these regions
(so each region is a sum over whole panels) and in the bulk into pieces of at most rho: one evaluation of
the densities on the grid serves every region.  The table's ratio lattice / continuum is fitted to
1 + A (a/rho)^2 + B (a/rho)^4 by least squares (numpy).  The continuum references assume the density is
smooth on the scale a (a lump of size rho >~ 2a).
"""

from __future__ import annotations

import csv
import dataclasses
import io
import math
from collections.abc import Callable, Sequence

import numpy as np

from ..core import _validate as _v
from ..core._atomic import atomic_write
from ..engine.fields import evaluate, evaluate_many, hook
from .operators import LoopOperator, get_operator, operator_action, operator_charge
from .rectangles import ORDERED_PLANES
from .starts import default_origin, lattice_links

__all__ = ["ScanTable", "operator_scan", "region_integrals", "DEFAULT_SCAN_OPERATORS", "SCAN_COLUMNS"]

#: The operators a scan measures by default: (operator, quantity) pairs.
DEFAULT_SCAN_OPERATORS = (
    ("wilson", "action"),
    ("symanzik", "action"),
    ("5li", "action"),
    ("clover", "charge"),
    ("5loop", "charge"),
)
#: Columns of a scan table, in order.
SCAN_COLUMNS = (
    "operator",
    "quantity",
    "rho_over_a",
    "a_over_rho",
    "shape",
    "value",
    "continuum",
    "ratio",
    "sampled",
    "sampled_ratio",
)
_QUANTITIES = ("action", "charge")


@dataclasses.dataclass(frozen=True, eq=False)
class ScanTable:
    """Rows of a scan (one dict per operator and rho/a, keys `SCAN_COLUMNS`) and the fits.

    fits: {(operator, quantity): {'a2': A, 'a4': B, 'a2_sampled': ..., 'a4_sampled': ...}} of
    ratio = 1 + A (a/rho)^2 + B (a/rho)^4 (least squares; NaN with fewer than two rho/a, solved exactly
    with two), for the box reference and for the sampled one (`operator_scan`).
    """

    rows: tuple
    fits: dict

    def column(self, name: str) -> list:
        """One column of the rows (`SCAN_COLUMNS`)."""
        _v.choice("name", name, SCAN_COLUMNS)
        return [r[name] for r in self.rows]

    def to_csv(self, path) -> str:
        """Write the rows as CSV (header `SCAN_COLUMNS`, shape as 'L1xL2xL3xL4') atomically; returns the path."""
        p = _v.file_path("path", path)
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(SCAN_COLUMNS)
        for r in self.rows:
            w.writerow([_cell(r[c]) for c in SCAN_COLUMNS])
        data = buf.getvalue().encode()
        atomic_write(p, lambda fh: fh.write(data))
        return p

    def to_dataframe(self):
        """The rows as a pandas DataFrame (pandas is optional: ImportError naming it when absent)."""
        try:
            import pandas as pd
        except ImportError as err:
            raise ImportError("ScanTable.to_dataframe needs pandas (pip install pandas); use to_csv otherwise") from err
        return pd.DataFrame([dict(r) for r in self.rows], columns=list(SCAN_COLUMNS))


def _cell(v) -> str:
    """A CSV cell: text as is, a shape as 'L1xL2xL3xL4', a number by repr (round-trips float64)."""
    if isinstance(v, str):
        return v
    if isinstance(v, tuple):
        return "x".join(str(s) for s in v)
    return repr(float(v))


def _fit(x, y) -> dict:
    """ratio - 1 = A x^2 + B x^4 by least squares (numpy.linalg.lstsq); NaN with fewer than two points."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if x.size < 2:
        return {"a2": math.nan, "a4": math.nan}
    design = np.stack([x**2, x**4], axis=1)
    (a2, a4), *_ = np.linalg.lstsq(design, y - 1.0, rcond=None)
    return {"a2": float(a2), "a4": float(a4)}


def _axis_rule(lo: float, hi: float, cuts, panel: float, nodes: int, thin: int):
    """Gauss-Legendre nodes and weights on [lo, hi] with panels cut at ``cuts`` and at most ``panel`` wide
    (panels no wider than a quarter of ``panel`` get ``thin`` nodes)."""
    t, w = np.polynomial.legendre.leggauss(nodes)
    t2, w2 = np.polynomial.legendre.leggauss(thin)
    edges = np.unique(np.concatenate([[lo, hi], [c for c in cuts if lo < c < hi]]))
    xs, ws = [], []
    for a, b in zip(edges[:-1], edges[1:]):
        k = max(1, int(np.ceil((b - a) / panel - 1e-12)))
        for l, h in zip(np.linspace(a, b, k + 1)[:-1], np.linspace(a, b, k + 1)[1:]):
            tt, ww = (t2, w2) if (h - l) <= 0.25 * panel else (t, w)
            xs.append(0.5 * (l + h) + 0.5 * (h - l) * tt)
            ws.append(0.5 * (h - l) * ww)
    return np.concatenate(xs), np.concatenate(ws)


def region_integrals(field, boxes, *, scale: float, nodes: int = 6, thin: int = 3):
    """Integrals of the action and charge densities of ``field`` over boxes, from one tensor grid.

    Args:
        field: a field (`instantonkit.engine.fields.Field`).
        boxes: a sequence of (lo (4,), hi (4,)) boxes.
        scale: the field's length scale (panels at most this wide in the bulk).
        nodes, thin: Gauss-Legendre nodes of a bulk panel and of a thin panel (a slice between two faces).
    Returns:
        (m, 2) float64: [int s, int q] per box.
    Raises:
        ValueError: empty boxes or lo >= hi; a grid beyond `instantonkit.core._validate.MAX_POINTS`.
    """
    bx = [(np.asarray(lo, float).reshape(4), np.asarray(hi, float).reshape(4)) for lo, hi in boxes]
    if not bx:
        raise ValueError("boxes must hold at least one (lo, hi) box; found none")
    for i, (lo, hi) in enumerate(bx):
        if not np.all(hi > lo):
            raise ValueError(f"box {i} must have lo < hi in every direction; found lo {lo}, hi {hi}")
    scale = _v.positive_float("scale", scale)
    lo_all = np.min([b[0] for b in bx], axis=0)
    hi_all = np.max([b[1] for b in bx], axis=0)
    rules = [
        _axis_rule(lo_all[d], hi_all[d], [b[0][d] for b in bx] + [b[1][d] for b in bx], scale, nodes, thin)
        for d in range(4)
    ]
    count = float(np.prod([r[0].size for r in rules]))
    _v.bounded_work("boxes", count, f"a tensor grid of {count:.3e} points")
    g = np.stack(np.meshgrid(rules[0][0], rules[1][0], rules[2][0], indexing="ij"), axis=-1).reshape(-1, 3)
    dens = np.empty((rules[3][0].size, g.shape[0], 2))
    per = max(1, 1_000_000 // g.shape[0])
    for k0 in range(0, rules[3][0].size, per):
        x4 = rules[3][0][k0 : k0 + per]
        pts = np.concatenate(
            [np.repeat(g[None], x4.size, 0), np.broadcast_to(x4[:, None, None], (x4.size, g.shape[0], 1))], axis=2
        )
        s, q = evaluate_many(field, pts.reshape(-1, 4), ("action_density", "charge_density"))
        dens[k0 : k0 + x4.size] = np.stack([s, q], axis=-1).reshape(x4.size, g.shape[0], 2)
    dens = dens.reshape(rules[3][0].size, rules[0][0].size, rules[1][0].size, rules[2][0].size, 2)
    w = [
        np.stack([np.where((rules[d][0] > lo[d]) & (rules[d][0] < hi[d]), rules[d][1], 0.0) for lo, hi in bx])
        for d in range(4)
    ]
    return np.einsum("labcq,ia,ib,ic,il->iq", dens, w[0], w[1], w[2], w[3], optimize=True)


def _entry(item):
    """(LoopOperator, quantity) of one entry of ``operators``."""
    if isinstance(item, tuple) and len(item) == 2 and isinstance(item[1], str) and not isinstance(item[0], int):
        op, qty = item
        _v.choice("quantity", qty, _QUANTITIES)
        return get_operator(op), qty
    op = get_operator(item)
    return op, "charge" if op.combine == "field" else "action"


def _action_boxes(op: LoopOperator, origin, a, shape):
    """(box, weight) per term and ordered plane: the cells of the loops' centres, weight c / 12."""
    out = []
    for m, n, c in op.terms:
        for mu, nu in ORDERED_PLANES:
            e = np.zeros(4)
            e[mu], e[nu] = m, n
            lo = origin + a * (e - 1.0) / 2.0
            hi = origin + a * (np.asarray(shape) - 1.0 - (e - 1.0) / 2.0)
            out.append(((lo, hi), float(c) / 12.0))
    return out


def _sampled(field, op: LoopOperator, qty: str, origin, a, shape) -> float:
    """The continuum density at the lattice's own points: V sum_x q(x) over the sites whose loops fit (charge), or
    sum_i c_i sum_{ordered planes} V sum_corners s(centre) / 12 over the loops' centres (action); no quadrature."""
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in shape], indexing="ij"), axis=-1).reshape(-1, 4)
    vol = a**4
    if qty == "charge":
        big = op.extent
        keep = np.all((idx >= big) & (idx <= np.asarray(shape) - 1 - big), axis=1)
        return vol * float(np.sum(evaluate(field, origin + a * idx[keep], "charge_density")))
    total = 0.0
    for m, n, c in op.terms:
        for mu, nu in ORDERED_PLANES:
            e = np.zeros(4)
            e[mu], e[nu] = m, n
            keep = np.all(idx <= np.asarray(shape) - 1 - e, axis=1)
            pts = origin + a * (idx[keep] + e / 2.0)
            total += float(c) / 12.0 * vol * float(np.sum(evaluate(field, pts, "action_density")))
    return total


def _charge_box(op: LoopOperator, origin, a, shape):
    big = op.extent
    return origin + a * (big - 0.5), origin + a * (np.asarray(shape) - 1.0 - big + 0.5)


def operator_scan(
    field,
    ratios: Sequence,
    operators: Sequence = DEFAULT_SCAN_OPERATORS,
    *,
    half_width: float = 2.5,
    group: str = "su2",
    smoothing: Callable | None = None,
    nodes: int = 6,
    sampled: bool = True,
    progress: Callable | None = None,
) -> ScanTable:
    """Measure lattice operators on open starts of ``field`` at several rho/a against the continuum in the same box.

    Args:
        field: a field with a ``hint()`` (centre, size rho), e.g. ``bpst(size=1.0).with_gauge('regular')``
            (a smooth gauge: the open start is then smooth everywhere).
        ratios: the rho/a values (each > 0; the lattice is L = 2 ceil(half_width rho/a) sites a side).
        operators: entries ``(operator, 'action' | 'charge')`` or an operator alone (its charge when it
            combines fields, else its action); operators are preset names, `LoopOperator` or {(m, n): c}.
        half_width: the box half-width in units of rho (> 0).
        group: 'su2' or 'su3' (`lattice_links`).
        smoothing: links -> links applied to each start before measuring (e.g. a few cooling sweeps);
            the continuum reference stays that of the field itself.
        nodes: Gauss-Legendre nodes of a bulk panel of the continuum integrals.
        sampled: also compare with the continuum density at the lattice's own points (columns 'sampled',
            'sampled_ratio'): the same sum without the midpoint rule's O(a^2) face term, which is ~1e-3 for
            a box reaching 1.8 rho from the centre at a/rho = 0.3 (a charge's sites keep the operator's
            longest side from every face), so improved operators are judged by their own artefacts.
        progress: progress(done, total) after each rho/a.
    Returns:
        `ScanTable`.
    Raises:
        ValueError / TypeError: a field without hint, bad ratios (empty, not positive, too few sites for
        an operator's loops), operators, quantity, half_width, group or smoothing.
    """
    h = hook(field, "hint")
    if h is None:
        raise ValueError("operator_scan needs a field with a hint() hook (its centre and size rho)")
    rho = float(h()[1])
    if isinstance(ratios, (str, bytes)) or not isinstance(ratios, Sequence) or len(ratios) == 0:
        raise TypeError(f"ratios must be a non-empty sequence of rho/a values; found {ratios!r}")
    rs = [_v.positive_float("ratios", r) for r in ratios]
    hw = _v.positive_float("half_width", half_width)
    if isinstance(operators, (str, LoopOperator)) or not isinstance(operators, Sequence) or not operators:
        raise TypeError(
            f"operators must be a non-empty sequence of operators or (operator, quantity); found {operators!r}"
        )
    entries = [_entry(item) for item in operators]
    if smoothing is not None and not callable(smoothing):
        raise TypeError(f"smoothing must be a callable links -> links or None; found {smoothing!r}")
    nodes = _v.positive_int("nodes", nodes)
    if not isinstance(sampled, bool):
        raise TypeError(f"sampled must be True or False; found {sampled!r}")
    rows = []
    for step, r in enumerate(rs):
        a = rho / r
        size = 2 * math.ceil(hw * r)
        shape = (size,) * 4
        big = max(op.extent for op, _ in entries)
        if size < 2 * big + 2:
            raise ValueError(f"ratios: rho/a = {r:g} gives {size} sites a side, too few for loops of side {big}")
        origin = default_origin(field, shape, a)
        links = lattice_links(field, shape, a, origin=origin, group=group, boundary="open")
        if smoothing is not None:
            links = smoothing(links)
        plan = []
        for op, qty in entries:
            plan.append(
                _action_boxes(op, origin, a, shape) if qty == "action" else [(_charge_box(op, origin, a, shape), 1.0)]
            )
        boxes = [b for p in plan for b, _ in p]
        ints = region_integrals(field, boxes, scale=rho, nodes=nodes)
        k = 0
        for (op, qty), p in zip(entries, plan):
            col = 0 if qty == "action" else 1
            cont = sum(w * ints[k + j, col] for j, (_, w) in enumerate(p))
            k += len(p)
            fn = operator_action if qty == "action" else operator_charge
            val = fn(links, op, spacing=a, boundary="open")
            smp = _sampled(field, op, qty, origin, a, shape) if sampled else math.nan
            rows.append(
                {
                    "operator": op.name,
                    "quantity": qty,
                    "rho_over_a": r,
                    "a_over_rho": 1.0 / r,
                    "shape": shape,
                    "value": val,
                    "continuum": cont,
                    "ratio": val / cont,
                    "sampled": smp,
                    "sampled_ratio": val / smp,
                }
            )
        if progress is not None:
            progress(step + 1, len(rs))
    fits = {}
    for op, qty in entries:
        sel = [x for x in rows if x["operator"] == op.name and x["quantity"] == qty]
        x = [r["a_over_rho"] for r in sel]
        fit = _fit(x, [r["ratio"] for r in sel])
        smp_fit = _fit(x, [r["sampled_ratio"] for r in sel]) if sampled else {"a2": math.nan, "a4": math.nan}
        fits[(op.name, qty)] = {**fit, "a2_sampled": smp_fit["a2"], "a4_sampled": smp_fit["a4"]}
    return ScanTable(tuple(rows), fits)
