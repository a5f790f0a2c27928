"""The adaptive integrator under `instantonkit.integrals.drivers` (floor 4): per-centre hyperspherical
rules refined where the error is, with error estimates and a decay probe at infinity.

It knows densities (callables ``points (M, 4) -> (M,) float64``) and layouts, not fields.  Each piece
of the partition of unity (one per centre) is adaptive in two ways: Gauss-Legendre radial levels in
``u`` (``r = L u / (1 - u)``; cut into panels about far neighbours' distances), and for every radial
node (a shell) its own angular level of a product rule on S^3 (or S^2 x the x4 circle), oriented with
more nodes in the angle from the neighbour that dominates the shell (quadrature.shell_axes).  Error
estimates: differences of the last two levels (radially the largest seen at the level), enlarged when
they converge slowly (``piece_error``), plus a rounding floor.  `integrate_adaptive` runs one
integral; `final_rule` gives its final rule as points and weights, for sampling the field there."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import Any, NamedTuple

import numpy as np

from . import quadrature as _quad
from . import singular as _sing
from .decay import PROBE_RADII, PROBE_RADIUS, PROBE_RAYS, PROBE_SEED, check_decay
from .estimates import piece_error
from .pieces import (
    RADIAL_COUNTS,
    Gluing,
    Layout,
    Piece,
    angular_counts,
    piece_radial_nodes,
    shell_orientation,
    shell_rule,
    shell_size,
)
from .singular import DivergentIntegralError, SingularDensityError

__all__ = [
    "IntegralResult",
    "DivergentIntegralError",
    "SingularDensityError",
    "FieldEvaluationError",
    "Layout",
    "integrate_adaptive",
    "final_rule",
    "MAX_RADIAL_LEVEL",
    "MAX_ANGULAR_LEVEL",
]

#: Finest radial level: the last entry of RADIAL_COUNTS (256 nodes in u).
MAX_RADIAL_LEVEL = len(RADIAL_COUNTS) - 1

#: Finest angular level: S^3 parameter 3 + 2 * 20 = 43 (2 * 43^3 = 159,014 points per shell).
MAX_ANGULAR_LEVEL = 20

#: A round refines the largest errors until the rest is below this fraction of the tolerance.
_REFINE_TARGET = 0.5
#: A piece refines its shells (not its radial level) while their error exceeds this share of its tolerance ...
_ANGULAR_SHARE = 0.25
#: ... or this fraction of its radial error.
_ANGULAR_OVER_RADIAL = 0.1

#: The search for singular points (`instantonkit.integrals.singular`) runs once: when the error has not halved for
#: this many rounds, or when the integral stops unconverged.
_STALL_ROUNDS = 6


# -- errors and results ----------------------------------------------------------------------------


class FieldEvaluationError(RuntimeError):
    """Evaluating the field failed (an exception inside the field, or a non-finite value)."""


@dataclasses.dataclass(frozen=True)
class IntegralResult:
    """An integral with its error estimate.

    quantity: what was integrated; value, error: the estimate and its estimated absolute error;
    evaluations: density evaluations used (all rounds); rule: the rule of the final round;
    converged: whether ``error <= max(atol, rtol |value|)``; message: why not (budget), else "";
    route: 'volume' (the adaptive volume rule) or 'osborn' (Osborn's flux route, `instantonkit.integrals.flux`).
    """

    quantity: str
    value: float
    error: float
    evaluations: int
    rule: str
    converged: bool
    message: str = ""
    route: str = "volume"

    def __float__(self) -> float:
        return float(self.value)

    def __str__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        text = f"{self.quantity} = {self.value:.12g} +- {self.error:.1e} ({state}, {self.evaluations:,} points)"
        return text + (f"; {self.message}" if self.message else "")

    def to_dict(self) -> dict:
        """Plain-dict form (floats, ints, strings, bools)."""
        return dataclasses.asdict(self)


# -- levels and error estimates ------------------------------------------------------------------------


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


class _ShellRequest(NamedTuple):
    """One shell to evaluate: kind 'lo'/'hi' (the first pair of levels of a new shell) or 'up' (next level)."""

    piece: Piece
    kind: str
    shell: int
    level: int


class _Plan(NamedTuple):
    """A piece's refinement in one round: kind 'angular' (shells: indices) or 'radial' (shells: initial levels)."""

    piece: Piece
    kind: str
    shells: Any


@dataclasses.dataclass
class _State:
    """The state of one adaptive integral: its layout, pieces and the points spent."""

    layout: Layout
    pieces: list
    evaluations: int = 0
    rounds: int = 0
    top: list = dataclasses.field(default_factory=list)
    probes: int = 0

    @classmethod
    def start(cls, layout: Layout) -> _State:
        g = Gluing.of(layout)
        pieces = [Piece(i, g.centres[i], float(g.radial[i]), layout.dim, layout, g) for i in range(g.centres.shape[0])]
        return cls(layout, pieces)

    @property
    def value(self) -> float:
        return math.fsum(p.value for p in self.pieces)

    @property
    def error(self) -> float:
        return math.fsum(p.error for p in self.pieces)


# -- the steps of one integral ---------------------------------------------------------------------------


def _new_level_requests(piece: Piece, lr: int, init) -> list[_ShellRequest]:
    """Move ``piece`` to radial level lr; each new shell is evaluated at two angular levels (lo, lo + 1)."""
    piece.set_radial_level(lr, init)
    reqs = []
    for j in range(piece.r.shape[0]):
        lo = max(int(piece.la[j]) - 1, 0)  # the pair (lo, lo + 1) gives the first error estimate
        piece.la[j] = lo + 1
        reqs += [_ShellRequest(piece, "lo", j, lo), _ShellRequest(piece, "hi", j, lo + 1)]
    return reqs


def _evaluate(state: _State, density, requests: Sequence[_ShellRequest], extra=None):
    """All shells of a round (and ``extra`` points) in one density call.

    Returns ([(sum w f, sum |w f|) per request], density at ``extra``); adds the points to the state.
    """
    chunks = [shell_rule(q.piece, q.shell, q.level, state.layout) for q in requests]
    sizes = [c[0].shape[0] for c in chunks]
    allpts = [c[0] for c in chunks] + ([extra] if extra is not None else [])
    pts = np.concatenate(allpts) if allpts else np.zeros((0, 4))
    vals = density(pts) if allpts else np.zeros(0)
    state.top = _sing.keep_peaks(state.top, pts, vals, 0.25 * float(np.min(state.layout.scales)))
    out, start = [], 0
    for (_, w), m in zip(chunks, sizes):
        v = vals[start : start + m]
        out.append((float(np.sum(w * v)), float(np.sum(np.abs(w * v)))))
        start += m
    state.evaluations += int(sum(sizes) + (0 if extra is None else extra.shape[0]))
    return out, vals[start:]


def _singularities(state: _State, density, name: str) -> str:
    """ "" or the sentence naming an integrable singular point; SingularDensityError for a non-integrable one."""
    mag = sum(float(np.sum(p.mag)) for p in state.pieces)
    note, spent = _sing.search(density, state.top, state.layout.centres, float(np.min(state.layout.scales)), mag, name)
    state.probes += spent
    return note


def _apply(requests: Sequence[_ShellRequest], sums) -> None:
    """Store the shell sums in their pieces, with the error estimate of each shell's last two levels."""
    lows = {}
    for (p, kind, j, lev), (v, mag) in zip(requests, sums):
        if kind == "lo":
            lows[(id(p), j)] = v
        elif kind == "hi":
            v0 = lows[(id(p), j)]
            p.err[j], p.diff[j] = piece_error(v - v0, math.nan, mag)
            p.val[j], p.mag[j] = v, mag
        else:  # 'up'
            p.err[j], p.diff[j] = piece_error(v - p.val[j], p.diff[j], mag)
            p.val[j], p.mag[j], p.la[j] = v, mag, lev


def _level_need(piece: Piece, lr: int, init, layout: Layout) -> int:
    """Points of moving ``piece`` to radial level lr with initial angular levels ``init`` (lo and hi per shell)."""
    r_new = piece_radial_nodes(piece, lr)[0]
    asp = shell_orientation(piece, r_new, layout)[1]
    return sum(
        shell_size(int(max(lev - 1, 0)), layout.periodic, int(a))
        + shell_size(int(max(lev, 1)), layout.periodic, int(a))
        for lev, a in zip(init, asp)
    )


def _initial_rounds(state: _State, density, name: str, max_points: int) -> str:
    """Radial levels 0 and 1 of every piece (each shell at two angular levels), and the decay probe.

    Returns "" or, when radial level 1 does not fit ``max_points``, the budget message (the integral
    then stops after level 0 with an infinite error estimate).
    Raises ValueError naming max_points when not even level 0 and the probe fit.
    """
    radii = PROBE_RADIUS * state.layout.extent * 2.0 ** np.arange(PROBE_RADII)  # rays about the mean centre
    probe = _quad.ray_points(state.layout.centres.mean(axis=0), radii, state.layout.dim, PROBE_RAYS, PROBE_SEED)
    init0 = [np.ones(piece_radial_nodes(p, 0)[0].shape[0], dtype=int) for p in state.pieces]
    need0 = probe.shape[0] + sum(_level_need(p, 0, i0, state.layout) for p, i0 in zip(state.pieces, init0))
    if need0 > max_points:
        raise ValueError(
            f"max_points must be at least {need0:,} for this layout of {len(state.pieces)} centre(s) "
            f"(the first round); found {max_points:,}"
        )
    reqs0 = []
    for p, i0 in zip(state.pieces, init0):
        reqs0 += _new_level_requests(p, 0, i0)
    res0, probe_vals = _evaluate(state, density, reqs0, probe)
    magnitude = float(sum(mag for q, (_, mag) in zip(reqs0, res0) if q.kind == "hi"))
    check_decay(name, probe_vals, radii, state.layout, magnitude)
    _apply(reqs0, res0)
    for p in state.pieces:
        p.prev_value = p.value
    inits = [p.levels_for(1) for p in state.pieces]
    need1 = sum(_level_need(p, 1, init, state.layout) for p, init in zip(state.pieces, inits))
    if state.evaluations + need1 > max_points:
        return (
            f"budget spent: the second round needs {need1:,} more points, beyond max_points = {max_points:,} "
            f"({state.evaluations:,} used); no error estimate of the radial rule yet"
        )
    reqs1 = []
    for p, init in zip(state.pieces, inits):
        reqs1 += _new_level_requests(p, 1, init)
    res1, _ = _evaluate(state, density, reqs1)
    _apply(reqs1, res1)
    for p in state.pieces:
        p.update_radial_error()
    state.rounds = 1
    return ""


def _plan_round(state: _State, tol: float) -> tuple[list[Piece], list[_Plan], int]:
    """Choose the pieces that carry the error and how each refines: (chosen, plans, points needed).

    A piece refines the angular level of its worst shells while their error is not small beside its
    share of the tolerance and its radial error (or at the finest radial level); else it moves to the
    next radial level, whose new shells start at the levels of their old neighbours.
    """
    periodic = state.layout.periodic
    errs = np.array([p.error for p in state.pieces])
    chosen = [state.pieces[i] for i in _greedy(errs, _REFINE_TARGET * tol)]
    share = tol / len(state.pieces)
    plans, need = [], 0
    for p in chosen:
        if p.angular_err > max(_ANGULAR_SHARE * share, _ANGULAR_OVER_RADIAL * p.radial_err) or p.lr >= MAX_RADIAL_LEVEL:
            idx = [j for j in _greedy(p.err, _REFINE_TARGET * p.angular_err) if p.la[j] < MAX_ANGULAR_LEVEL]
            if idx:  # worst shells all at the finest angular level: refine radially, or nothing is left here
                plans.append(_Plan(p, "angular", idx))
                need += sum(shell_size(int(p.la[j]) + 1, periodic, int(p.aspect[j])) for j in idx)
                continue
        if p.lr < MAX_RADIAL_LEVEL:
            init = p.levels_for(p.lr + 1)
            plans.append(_Plan(p, "radial", init))
            need += _level_need(p, p.lr + 1, init, state.layout)
    return chosen, plans, need


def _plan_requests(plans: Sequence[_Plan]) -> list[_ShellRequest]:
    """The shells of a round's plans (a radial step also remembers the piece's value before it)."""
    reqs: list[_ShellRequest] = []
    for p, kind, arg in plans:
        if kind == "angular":
            reqs += [_ShellRequest(p, "up", j, int(p.la[j]) + 1) for j in arg]
        else:
            old = p.value
            p.last_radial_diff = abs(old - p.prev_value) if np.isfinite(p.prev_value) else math.nan
            p.prev_value = old
            reqs += _new_level_requests(p, p.lr + 1, arg)
    return reqs


def _stop_message(plans, need: int, state: _State, max_points: int, error: float, tol: float) -> str:
    """Why refinement stops short of the tolerance ("" when the next round fits the budget)."""
    if plans and need > 0 and state.evaluations + need <= max_points:
        return ""
    if plans and need > 0:
        return (
            f"budget spent: the next round needs {need:,} more points, beyond max_points = {max_points:,} "
            f"({state.evaluations:,} used); estimated error {error:.1e} > tolerance {tol:.1e}"
        )
    return f"finest levels reached; estimated error {error:.1e} > tolerance {tol:.1e}"


def _rule_description(state: _State) -> str:
    """One line naming the final rule: domain, pieces, radial nodes and angular parameters per piece."""
    layout, periodic = state.layout, state.layout.periodic
    kind = f"R^3 x S^1 (period {layout.period:g})" if periodic else "R^4"
    parts = []
    for p in state.pieces:
        lo, hi = int(p.la.min()), int(p.la.max())
        n_lo, n_hi = angular_counts(lo, periodic)[1], angular_counts(hi, periodic)[1]
        sphere = "S^2 x circle" if periodic else "S^3"
        parts.append(f"{p.r.shape[0]} radial nodes (L = {p.L:.3g}), {sphere} parameter {n_lo}..{n_hi}")
    k = len(state.pieces)
    return (
        f"{kind}, {k} piece(s) glued by a partition of unity; Gauss-Legendre in u, r = L u/(1-u), "
        f"product rules per shell, adaptive per shell: " + "; ".join(parts[:4]) + ("; ..." if k > 4 else "")
    )


def final_rule(state: _State, max_points: int) -> _quad.Rule:
    """The final rule with every shell at min(its angular level, cap), the largest cap giving <= max_points."""
    cap = MAX_ANGULAR_LEVEL
    while cap > 0:
        total = sum(p.sizes(np.minimum(p.la, cap)) for p in state.pieces)
        if total <= max_points:
            break
        cap -= 1
    pts, wts = [], []
    for p in state.pieces:
        for j, lev in enumerate(np.minimum(p.la, cap)):
            a, w = shell_rule(p, j, int(lev), state.layout)
            pts.append(a)
            wts.append(w)
    desc = _rule_description(state) + (f"; angular levels capped at {cap}" if cap < MAX_ANGULAR_LEVEL else "")
    return _quad.Rule(np.concatenate(pts), np.concatenate(wts), desc)


def integrate_adaptive(
    density, name: str, layout: Layout, *, rtol: float, atol: float, max_points: int, sink
) -> tuple[IntegralResult, _State]:
    """One adaptive integral: the initial rounds, then planned rounds until converged or stopped.

    Every round evaluates at least one shell (a round that would add none stops with its reason), so
    there are at most max_points / (smallest shell) rounds and the time is bounded by the budget's
    evaluations; a stalled or unconverged integral is searched once for a singular point
    (`instantonkit.integrals.singular.search`, SingularDensityError when it is not integrable)."""
    state = _State.start(layout)
    first = _initial_rounds(state, density, name, max_points)
    converged, message, note, searched, best, stalled = False, "", "", False, math.inf, 0
    max_rounds = max_points // shell_size(0, layout.periodic)  # each round evaluates >= 1 shell of >= this
    while True:
        value, error = state.value, state.error
        tol = max(atol, rtol * abs(value))
        if first:
            message = first
            break
        if sink is not None:
            sink(
                dict(
                    quantity=name,
                    round=state.rounds,
                    evaluations=state.evaluations,
                    value=value,
                    error=error,
                    done=False,
                )
            )
        if error <= tol:
            converged = True
            break
        best, stalled = (error, 0) if error < 0.5 * best else (best, stalled + 1)
        if stalled >= _STALL_ROUNDS and not searched:  # the error does not fall: a singular point?
            note, searched = _singularities(state, density, name), True
        chosen, plans, need = _plan_round(state, tol)
        message = _stop_message(plans, need, state, max_points, error, tol)
        if state.rounds >= max_rounds:
            message = f"{state.rounds:,} refinement rounds (the most {max_points:,} points allow); error {error:.1e}"
        if message:
            break
        reqs = _plan_requests(plans)
        sums, _ = _evaluate(state, density, reqs)
        _apply(reqs, sums)
        for p in chosen:
            p.update_radial_error()
        state.rounds += 1
    if not converged and not searched:
        note = _singularities(state, density, name)
    if note:
        message = f"{message}; {note} ({state.probes:,} probe points beside the budget)"
    if sink is not None:
        sink(
            dict(quantity=name, round=state.rounds, evaluations=state.evaluations, value=value, error=error, done=True)
        )
    res = IntegralResult(
        name, float(value), float(error), state.evaluations, _rule_description(state), converged, message
    )
    return res, state
