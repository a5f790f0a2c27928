"""Integrals over R^4 (or R^3 x one period) of a field's densities, with error estimates.

``total_action(field)`` and ``total_charge(field)`` integrate the action density
``s = -1/2 sum tr F F`` and the charge density ``q = -1/(32 pi^2) eps tr F F`` (conventions module)
with the building blocks of :mod:`instantonkit.quadrature`: one hyperspherical rule per centre, glued
by a smooth partition of unity.  Each piece is adaptive in two ways: Gauss-Legendre radial levels in
``u`` (``r = L u / (1 - u)``), and for every radial node (a shell) its own angular level of the product
rule on S^3 (or S^2 x the x4 circle).  Refinement goes to the pieces and shells that carry the error
until it meets ``max(atol, rtol |value|)`` or the ``max_points`` budget is spent (then ``converged`` is
False and ``message`` says so).  Error estimates are differences of the last two levels, enlarged when
the levels converge slowly (see ``_piece_error``), plus a rounding floor.

Before integrating, the density is sampled along rays at large radius; if it falls no faster than
about ``|x|^-(d + 1)`` (``d`` = 4, or 3 for periodic fields) the integral diverges or converges too
slowly for an honest estimate and :class:`DivergentIntegralError` says so.  A field whose evaluation
fails (an exception in a user callable, a non-finite value) raises :class:`FieldEvaluationError` with
the original message.
"""

from __future__ import annotations

import dataclasses
import math
import sys
from typing import Callable

import numpy as np

from . import fields as _fields
from . import quadrature as _quad

__all__ = [
    "IntegralResult",
    "DivergentIntegralError",
    "FieldEvaluationError",
    "total_action",
    "total_charge",
    "integrate_density",
    "DEFAULT_MAX_POINTS",
]

#: Default budget of density evaluations for one integral (all refinement rounds together).
DEFAULT_MAX_POINTS = 4_000_000

#: Points per compiled call of the engine (one compiled size serves every round).
_CHUNK = 8192


_EPS = float(np.finfo(np.float64).eps)


# -- errors and results ----------------------------------------------------------------------------


class DivergentIntegralError(ValueError):
    """The density falls too slowly at infinity for its integral to exist (or to be estimated)."""


class FieldEvaluationError(RuntimeError):
    """Evaluating the field failed (an exception inside the field, or a non-finite value)."""


@dataclasses.dataclass(frozen=True)
class IntegralResult:
    """An integral with its error estimate.

    quantity: what was integrated; value, error: the estimate and its estimated absolute error;
    evaluations: density evaluations used (all rounds); rule: the rule of the final round;
    converged: whether ``error <= max(atol, rtol |value|)``; message: why not (budget), else "".
    """

    quantity: str
    value: float
    error: float
    evaluations: int
    rule: str
    converged: bool
    message: str = ""

    def __float__(self) -> float:
        return float(self.value)

    def __str__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        text = f"{self.quantity} = {self.value:.12g} +- {self.error:.1e} ({state}, {self.evaluations:,} points)"
        return text + (f"; {self.message}" if self.message else "")

    def to_dict(self) -> dict:
        """Plain-dict form (floats, ints, strings, bools)."""
        return dataclasses.asdict(self)


# -- where the field lives ---------------------------------------------------------------------------


def _centres_of(field):
    """(centres (k, 4), scales (k,)) from the field's own data where it has them, else None."""
    if hasattr(field, "constraint_residual") and hasattr(field, "centers") and callable(field.centers):
        return np.asarray(field.centers(), dtype=np.float64), np.asarray(field.sizes(), dtype=np.float64)
    c = getattr(field, "centers", None)
    s = getattr(field, "sizes", None)
    if c is not None and s is not None and not callable(c) and not callable(s):
        c = np.asarray(c, dtype=np.float64).reshape(-1, 4)
        s = np.broadcast_to(np.asarray(s, dtype=np.float64), (c.shape[0],)).copy()
        return c, s
    inner = getattr(field, "field", None)
    if inner is not None and type(field).__name__ == "ParityImage":
        got = _centres_of(inner)
        if got is not None:
            return got[0] * np.array([-1.0, -1.0, -1.0, 1.0]), got[1]
    if inner is not None and hasattr(field, "shift"):
        got = _centres_of(inner)
        if got is not None:
            return got[0] + np.asarray(field.shift, dtype=np.float64), got[1]
    return None


def _layout(field, center, scale, period):
    """Centres (k, 4), scales (k,), period or None, and a note on where they came from."""
    if period is None:
        p = getattr(field, "period", None)
        period = None if p is None else float(np.asarray(p))
    elif not (np.isfinite(float(period)) and float(period) > 0):
        raise ValueError(f"period must be finite and > 0; found {period!r}")
    if center is not None or scale is not None:
        base_c, base_s = (np.zeros(4), 1.0)
        if hasattr(field, "hint") and (center is None or scale is None):
            base_c, base_s = field.hint()
        c = np.asarray(base_c if center is None else center, dtype=np.float64)
        c = c.reshape(-1, 4) if c.size % 4 == 0 and c.size > 0 else c
        if c.ndim != 2 or c.shape[1] != 4:
            raise ValueError(f"center must have shape (4,) or (k, 4); found {np.shape(center)}")
        s = np.asarray(base_s if scale is None else scale, dtype=np.float64)
        if s.ndim == 0:
            s = np.full(c.shape[0], float(s))
        if s.shape != (c.shape[0],):
            raise ValueError(f"scale must be a number or have shape ({c.shape[0]},); found {s.shape}")
        if not np.all(np.isfinite(s)) or np.any(s <= 0):
            raise ValueError(f"scale must be finite and > 0; found {s.tolist()}")
        return c, s, period, "user hints"
    got = _centres_of(field)
    if got is not None and period is None:
        return got[0], got[1], period, "centres and sizes of the field"
    if hasattr(field, "hint"):
        c, s = field.hint()
        return np.asarray(c, dtype=np.float64).reshape(1, 4), np.array([float(s)]), period, "field.hint()"
    return np.zeros((1, 4)), np.ones(1), period, "defaults (centre 0, scale 1)"


def _describe(field) -> str:
    if hasattr(field, "constraint_residual") and hasattr(field, "group"):
        kind = "instanton" if field.charge > 0 else "anti-instanton"
        return f"ADHM {field.group} data, k = {field.k} ({kind}, {field.gauge} gauge)"
    if isinstance(field, _fields.CallableField):
        name = getattr(field.fn, "__name__", type(field.fn).__name__)
        return f"callable potential {name}"
    return type(field).__name__


# -- evaluation with clear failures ------------------------------------------------------------------


def _evaluator(field, quantity: str, method: str, label: str) -> Callable[[np.ndarray], np.ndarray]:
    def run(points: np.ndarray) -> np.ndarray:
        m = points.shape[0]
        pad = (-m) % _CHUNK  # whole chunks only: one compiled size serves every round
        if pad and m:
            points = np.concatenate([points, np.broadcast_to(points[0], (pad, 4))])
        try:
            out = _fields.evaluate(field, points, quantity, method=method, chunk_size=_CHUNK)[:m]
        except (ValueError, TypeError, RuntimeError, ArithmeticError, AttributeError, IndexError, KeyError) as err:
            raise FieldEvaluationError(
                f"evaluating the {label} of {_describe(field)} failed: {type(err).__name__}: {err}"
            ) from err
        return np.asarray(out, dtype=np.float64)

    return run


# -- progress ------------------------------------------------------------------------------------------


def _progress_sink(progress):
    """None: a line on stderr when it is a terminal; True/False: force; a callable gets a dict per round."""
    if callable(progress):
        return progress
    on = sys.stderr.isatty() if progress is None else bool(progress)
    if not on:
        return None

    def show(info: dict) -> None:
        end = "\n" if info.get("done") else ""
        sys.stderr.write(
            f"\r[instantonkit] {info['quantity']}: round {info['round']}, {info['evaluations']:,} points, "
            f"{info['value']:.12g} +- {info['error']:.1e}   {end}"
        )
        sys.stderr.flush()

    return show


# -- decay at infinity -----------------------------------------------------------------------------


def _probe_points(centres: np.ndarray, scales: np.ndarray, period) -> tuple[np.ndarray, np.ndarray, int]:
    """Points along rays at radii R_j = 16 L 2^j (j = 0..3) about the mean centre; (points, radii, dim)."""
    c0 = centres.mean(axis=0)
    big = float(np.max(scales) + np.max(np.linalg.norm(centres - c0, axis=1)))
    radii = 16.0 * big * 2.0 ** np.arange(4)
    rng = np.random.default_rng(12345)
    dim = 3 if period is not None else 4
    dirs = rng.normal(size=(8, dim))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    if dim == 3:
        dirs = np.concatenate([dirs, np.zeros((8, 1))], axis=1)
    pts = c0[None, None, :] + radii[:, None, None] * dirs[None, :, :]
    return pts.reshape(-1, 4), radii, dim


def _decay_exponent(values: np.ndarray, radii: np.ndarray, dim: int = 4, magnitude: float = 0.0) -> float | None:
    """p in |f| ~ r^-p from the largest |f| over rays at the two largest radii.

    None if f vanishes there, or if the tail it implies, about |f| R^dim times the area of the unit
    sphere, is below double-precision rounding of ``magnitude`` (the size of the integral seen so far):
    then the decay seen is rounding noise of a field that has already gone to zero.
    """
    v = np.max(np.abs(values.reshape(radii.shape[0], -1)), axis=1)
    if v[-1] <= 1e-290 or v[-2] <= 1e-290:
        return None
    if max(v[-2], v[-1]) * radii[-2] ** dim * 20.0 <= 1e-15 * magnitude:
        return None
    p = [-math.log(v[j + 1] / v[j]) / math.log(radii[j + 1] / radii[j]) for j in range(len(radii) - 1) if v[j] > 0]
    return float(min(p[-2:])) if p else None


# -- the integrator ------------------------------------------------------------------------------------


def _piece_error(diff: float, previous: float, magnitude: float) -> tuple[float, float]:
    """Error estimate of the finer of two levels, and |diff| to remember.

    |diff| bounds the error of the coarser level and, when the levels converge fast, generously that
    of the finer one.  To stay an upper bound when they converge slowly or erratically, the estimate is
    |diff| max(2, 3 q / (1 - q)) with q = |diff| / |previous diff| (<= 0.9; the geometric tail is
    |diff| q / (1 - q)), or 3 |diff| without history, plus a rounding floor 64 eps sum |w f|.
    """
    d = abs(diff)
    factor = 3.0
    if np.isfinite(previous) and previous > 0:
        q = min(d / previous, 0.9)
        factor = max(2.0, 3.0 * q / (1.0 - q))
    return d * factor + 64 * _EPS * magnitude, d


def _radial_count(level: int) -> int:
    """Radial Gauss-Legendre nodes of radial level l: 16, 24, 32, 40, 48, 64, 80, 96, 128, ..."""
    table = (16, 24, 32, 40, 48, 64, 80, 96, 128, 160, 192, 256)
    return table[min(level, len(table) - 1)]


_MAX_RADIAL_LEVEL = 11
_MAX_ANGULAR_LEVEL = 20


def _angular_counts(level: int, periodic: bool) -> tuple[int, int]:
    """Angular level a: S^3 parameter n = 3 + 2a (R^4), or (S^2 parameter 2 + 2a, time nodes 8 + 4a)."""
    if periodic:
        return 2 + 2 * level, 8 + 4 * level
    return 3 + 2 * level, 0


class _Piece:
    """Adaptive state of one piece: radial nodes, and per radial node (shell) its angular level and value."""

    def __init__(self, index, centre, radial_scale, dim):
        self.index, self.centre, self.L, self.dim = index, centre, radial_scale, dim
        self.lr = -1
        self.prev_value = math.nan  # value of the previous radial level
        self.last_radial_diff = math.nan
        self.radial_err = math.inf
        self.r = self.wr = None
        self.la = self.val = self.err = self.diff = self.mag = None

    def set_radial_level(self, lr: int, init_levels: np.ndarray) -> None:
        self.lr = lr
        self.r, self.wr = _quad.radial_nodes(_radial_count(lr), self.L, self.dim)
        self.la = np.asarray(init_levels, dtype=int)
        n = self.r.shape[0]
        self.val = np.zeros(n)
        self.err = np.full(n, math.inf)
        self.diff = np.full(n, math.nan)
        self.mag = np.zeros(n)

    def levels_for(self, r_new: np.ndarray) -> np.ndarray:
        """Angular levels for new radii: the larger level of the neighbouring old shells (by radius)."""
        j = np.clip(np.searchsorted(self.r, r_new), 1, self.r.shape[0] - 1)
        return np.maximum(self.la[j - 1], self.la[j])

    @property
    def value(self) -> float:
        return math.fsum(self.val)

    @property
    def angular_err(self) -> float:
        return float(np.sum(self.err))

    @property
    def error(self) -> float:
        return self.radial_err + self.angular_err

    def update_radial_error(self) -> None:
        if np.isfinite(self.prev_value):
            self.radial_err, _ = _piece_error(self.value - self.prev_value, self.last_radial_diff, 0.0)
        else:
            self.radial_err = math.inf


def _shell_rule(piece: _Piece, j: int, level: int, centres, scales, period):
    """Points and weights of shell j of ``piece`` at angular level ``level``."""
    n, nt = _angular_counts(level, period is not None)
    a, r, wr = piece.centre, piece.r[j], piece.wr[j]
    if period is None:
        dirs, wd = _quad.sphere3_nodes(n)
        pts = a[None, :] + r * dirs
        w = wr * wd
    else:
        dirs, wd = _quad.sphere2_nodes(n)
        t = a[3] - 0.5 * period + period * (np.arange(nt) + 0.5 * (nt % 2)) / nt
        xs = np.broadcast_to((a[:3][None, :] + r * dirs)[:, None, :], (dirs.shape[0], nt, 3))
        tt = np.broadcast_to(t[None, :, None], (dirs.shape[0], nt, 1))
        pts = np.concatenate([xs, tt], axis=-1).reshape(-1, 4)
        w = (wr * wd[:, None] * np.full(nt, period / nt)[None, :]).reshape(-1)
    if centres.shape[0] > 1:
        w = w * _quad.partition_weights(pts, centres, scales, period=period)[:, piece.index]
    return pts, w


def _shell_size(level: int, periodic: bool) -> int:
    n, nt = _angular_counts(level, periodic)
    return 2 * n * n * nt if periodic else 2 * n**3


def _greedy(errors: np.ndarray, target: float) -> list[int]:
    """Indices of the largest errors, largest first, until the rest sums to <= target."""
    errors = np.asarray(errors, dtype=np.float64)
    rest = float(np.sum(errors))
    out = []
    for j in np.argsort(-errors):
        if rest <= target:
            break
        out.append(int(j))
        rest = float(np.sum(np.delete(errors, out)))
    return out


def _integrate(
    density: Callable[[np.ndarray], np.ndarray],
    quantity: str,
    centres: np.ndarray,
    scales: np.ndarray,
    period,
    *,
    rtol: float,
    atol: float,
    max_points: int,
    progress,
):
    """Adaptive integral: per piece, radial levels and per-shell angular levels; returns (result, pieces).

    Each round refines the pieces that carry the error: a piece whose shells are not converged
    (angular error above a quarter of its share) raises the angular level of its worst shells; otherwise
    it moves to the next radial level (new shells start at the angular levels of their old neighbours).
    Errors: per shell and per radial step, the difference of the last two levels (see _piece_error).
    All new points of a round go to the density in one call.
    """
    for name, v in (("rtol", rtol), ("atol", atol)):
        if not (np.isfinite(v) and v >= 0):
            raise ValueError(f"{name} must be finite and >= 0; found {v!r}")
    if rtol == 0 and atol == 0:
        raise ValueError("rtol and atol cannot both be 0")
    if not isinstance(max_points, (int, np.integer)) or max_points < 1:
        raise ValueError(f"max_points must be a positive integer; found {max_points!r}")
    sink = _progress_sink(progress)
    periodic = period is not None
    dim = 3 if periodic else 4
    k = centres.shape[0]
    lsc = _quad.radial_scales(centres, scales)
    pieces = [_Piece(i, centres[i], float(lsc[i]), dim) for i in range(k)]
    probe, radii, _ = _probe_points(centres, scales, period)

    # requests: (piece, kind, shell index, level); kind 'new' (first level), 'up' (next level)
    def run(requests, extra=None):
        chunks = []
        for req in requests:
            pts, w = _shell_rule(req[0], req[2], req[3], centres, scales, period)
            chunks.append((pts, w))
        sizes = [c[0].shape[0] for c in chunks]
        allpts = [c[0] for c in chunks] + ([extra] if extra is not None else [])
        vals = density(np.concatenate(allpts)) if allpts else np.zeros(0)
        out, start = [], 0
        for (pts, w), m in zip(chunks, sizes):
            v = vals[start : start + m]
            out.append((float(np.sum(w * v)), float(np.sum(np.abs(w * v)))))
            start += m
        return out, vals[start:], int(sum(sizes) + (0 if extra is None else extra.shape[0]))

    def new_level_requests(p: _Piece, lr: int, init):
        p.set_radial_level(lr, init)
        reqs = []
        for j in range(p.r.shape[0]):
            lo = max(int(p.la[j]) - 1, 0)  # the pair (lo, lo + 1) gives the first error estimate
            p.la[j] = lo + 1
            reqs += [(p, "lo", j, lo), (p, "hi", j, lo + 1)]
        return reqs

    def apply(results, reqs):
        lows = {}
        for (p, kind, j, lev), (v, mag) in zip(reqs, results):
            if kind == "lo":
                lows[(id(p), j)] = v
            elif kind == "hi":
                v0 = lows[(id(p), j)]
                p.err[j], p.diff[j] = _piece_error(v - v0, math.nan, mag)
                p.val[j], p.mag[j] = v, mag
            else:  # 'up'
                p.err[j], p.diff[j] = _piece_error(v - p.val[j], p.diff[j], mag)
                p.val[j], p.mag[j], p.la[j] = v, mag, lev

    # round 0: radial levels 0 and 1 of every piece (each shell at two angular levels) and the probes
    reqs0 = []
    for p in pieces:
        reqs0 += new_level_requests(p, 0, np.ones(_radial_count(0), dtype=int))
    res0, probe_vals, evaluations = run(reqs0, probe)
    magnitude = float(sum(mag for (_, kind, _, _), (_, mag) in zip(reqs0, res0) if kind == "hi"))
    p_exp = _decay_exponent(probe_vals, radii, dim, magnitude)
    if p_exp is not None and p_exp < dim + 0.75:
        verdict = "diverges" if p_exp <= dim + 0.05 else "converges too slowly to estimate"
        raise DivergentIntegralError(
            f"the {quantity} density falls like |x|^-{p_exp:.2f} along rays at radii {radii[0]:.3g}..{radii[-1]:.3g} "
            f"about {np.round(centres.mean(0), 6).tolist()}; its integral over "
            f"{'R^3 x S^1' if periodic else 'R^4'} {verdict} (it needs a fall faster than |x|^-{dim + 1})"
        )
    apply(res0, reqs0)
    for p in pieces:
        p.prev_value = p.value
    reqs1 = []
    for p in pieces:
        reqs1 += new_level_requests(p, 1, p.levels_for(_quad.radial_nodes(_radial_count(1), p.L, dim)[0]))
    res1, _, n1 = run(reqs1)
    evaluations += n1
    apply(res1, reqs1)
    for p in pieces:
        p.update_radial_error()

    rnd = 1
    message = ""
    converged = False
    while True:
        value = math.fsum(p.value for p in pieces)
        error = math.fsum(p.error for p in pieces)
        tol = max(atol, rtol * abs(value))
        if sink is not None:
            sink(dict(quantity=quantity, round=rnd, evaluations=evaluations, value=value, error=error, done=False))
        if error <= tol:
            converged = True
            break
        errs = np.array([p.error for p in pieces])
        chosen = [pieces[i] for i in _greedy(errs, 0.5 * tol)]
        share = tol / k
        plans = []  # (piece, 'angular', shell indices) or (piece, 'radial', initial levels)
        need = 0
        for p in chosen:
            # shells first while their error is not small beside the radial one, then the next radial level
            if p.angular_err > max(0.25 * share, 0.1 * p.radial_err) or p.lr >= _MAX_RADIAL_LEVEL:
                idx = [j for j in _greedy(p.err, 0.5 * p.angular_err) if p.la[j] < _MAX_ANGULAR_LEVEL]
                plans.append((p, "angular", idx))
                need += sum(_shell_size(int(p.la[j]) + 1, periodic) for j in idx)
            elif p.lr < _MAX_RADIAL_LEVEL:
                init = p.levels_for(_quad.radial_nodes(_radial_count(p.lr + 1), p.L, dim)[0])
                plans.append((p, "radial", init))
                need += sum(_shell_size(int(max(lev - 1, 0)), periodic) + _shell_size(int(max(lev, 1)), periodic)
                            for lev in init)
        if not plans or evaluations + need > max_points:
            message = (
                f"budget spent: the next round needs {need:,} more points, beyond max_points = {max_points:,} "
                f"({evaluations:,} used); estimated error {error:.1e} > tolerance {tol:.1e}"
                if plans
                else f"finest levels reached; estimated error {error:.1e} > tolerance {tol:.1e}"
            )
            break
        reqs = []
        for p, kind, arg in plans:
            if kind == "angular":
                reqs += [(p, "up", j, int(p.la[j]) + 1) for j in arg]
            else:
                old = p.value
                p.last_radial_diff = abs(old - p.prev_value) if np.isfinite(p.prev_value) else math.nan
                p.prev_value = old
                reqs += new_level_requests(p, p.lr + 1, arg)
        res, _, n_used = run(reqs)
        evaluations += n_used
        apply(res, reqs)
        for p in chosen:
            p.update_radial_error()
        rnd += 1
    if sink is not None:
        sink(dict(quantity=quantity, round=rnd, evaluations=evaluations, value=value, error=error, done=True))
    kind = "R^3 x S^1 (period %g)" % period if periodic else "R^4"
    parts = []
    for p in pieces:
        lo, hi = int(p.la.min()), int(p.la.max())
        n_lo, n_hi = _angular_counts(lo, periodic)[0], _angular_counts(hi, periodic)[0]
        sphere = "S^2 x circle" if periodic else "S^3"
        parts.append(f"{p.r.shape[0]} radial nodes (L = {p.L:.3g}), {sphere} parameter {n_lo}..{n_hi}")
    desc = (
        f"{kind}, {k} piece(s) glued by a partition of unity; Gauss-Legendre in u, r = L u/(1-u), "
        f"product rules per shell, adaptive per shell: " + "; ".join(parts[:4]) + ("; ..." if k > 4 else "")
    )
    res = IntegralResult(quantity, float(value), float(error), evaluations, desc, converged, message)
    return res, pieces


def integrate_density(
    field,
    quantity: str = "action_density",
    *,
    rtol: float = 1e-10,
    atol: float = 1e-10,
    center=None,
    scale=None,
    period=None,
    max_points: int = DEFAULT_MAX_POINTS,
    method: str = "auto",
    progress=None,
) -> IntegralResult:
    """Integral of a density of ``field`` over R^4 (or R^3 x one period of x4) with an error estimate.

    quantity: 'action_density' or 'charge_density' (of :mod:`instantonkit.fields`); method: the engine's
    'auto' | 'closed' | 'autodiff'.  Centres and scales come from ``center=``/``scale=`` ((4,) or (k, 4);
    number or (k,)), else from the field (ADHM centres and sizes, 't Hooft centres and sizes,
    ``hint()``), else (0, 1).  ``period=`` (or a ``period`` attribute of the field) integrates x4 over
    one period.  Refines until ``error <= max(atol, rtol |value|)`` or ``max_points`` evaluations are
    spent (then ``converged`` is False and ``message`` says so).
    Raises DivergentIntegralError for a density that falls too slowly and FieldEvaluationError when
    the field cannot be evaluated.
    """
    if quantity not in ("action_density", "charge_density"):
        raise ValueError(f"quantity must be 'action_density' or 'charge_density'; found {quantity!r}")
    field = _fields.as_field(field)
    centres, scales, per, _ = _layout(field, center, scale, period)
    label = quantity.replace("_", " ")
    density = _evaluator(field, quantity, method, label)
    name = "action" if quantity == "action_density" else "charge"
    res, _ = _integrate(density, name, centres, scales, per, rtol=rtol, atol=atol, max_points=max_points, progress=progress)
    return res


def total_action(field, *, rtol=1e-10, atol=1e-10, center=None, scale=None, period=None,
                 max_points=DEFAULT_MAX_POINTS, method="auto", progress=None) -> IntegralResult:
    """S = int s d^4x (per period for periodic fields) with error estimate; 8 pi^2 |Q| for (anti-)instantons.

    Keywords as in :func:`integrate_density`.
    """
    return integrate_density(field, "action_density", rtol=rtol, atol=atol, center=center, scale=scale,
                             period=period, max_points=max_points, method=method, progress=progress)


def total_charge(field, *, rtol=1e-10, atol=1e-10, center=None, scale=None, period=None,
                 max_points=DEFAULT_MAX_POINTS, method="auto", progress=None) -> IntegralResult:
    """Q = int q d^4x (per period for periodic fields) with error estimate; +k for k instantons.

    Keywords as in :func:`integrate_density`; ``method='closed'`` computes q from the closed-form F
    (eps tr F F) even where the field has a closed-form q.
    """
    return integrate_density(field, "charge_density", rtol=rtol, atol=atol, center=center, scale=scale,
                             period=period, max_points=max_points, method=method, progress=progress)


