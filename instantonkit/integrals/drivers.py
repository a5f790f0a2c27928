"""Integrals over R^4 (or R^3 x one period) of a field's densities, with error estimates.

``total_action(field)`` and ``total_charge(field)`` integrate the action density
``s = -1/2 sum tr F F`` and the charge density ``q = -1/(32 pi^2) eps tr F F`` (conventions module)
with the building blocks of `instantonkit.integrals.quadrature`: one hyperspherical rule per centre, glued
by a smooth partition of unity.  Each piece is adaptive in two ways: Gauss-Legendre radial levels in
``u`` (``r = L u / (1 - u)``, in panels about far neighbours), and for every radial node (a shell) its
own angular level of a product rule on S^3 (or S^2 x the x4 circle), oriented towards the neighbour
that dominates the shell (`instantonkit.integrals.cubature`).  Refinement goes to the pieces and shells that carry the error
until it meets ``max(atol, rtol |value|)`` or the ``max_points`` budget is spent (then ``converged`` is
False and ``message`` says so).  Error estimates are differences of the last two levels, enlarged when
the levels converge slowly (see ``piece_error``), plus a rounding floor.

Before integrating, the density is sampled along rays at large radius; if it falls no faster than
about ``|x|^-(d + 1)`` (``d`` = 4, or 3 for periodic fields) the integral diverges or converges too
slowly for an honest estimate and `DivergentIntegralError` says so.  A field whose evaluation
fails (an exception in a user callable, a non-finite value) raises `FieldEvaluationError` with
the original message.

ADHM data (fields with a ``gram`` hook) on R^4 take another route by default (``route='auto'``): the
ball about their lumps by Osborn's flux through its sphere, the rest by the volume integral of the
density (`instantonkit.integrals.flux`), which reaches 1e-13 with about 10^4 points where the volume rule
about many centres needs millions for 1e-8.  ``route='volume'`` gives the volume integral everywhere.

The layer under the front doors is public too (used by `instantonkit.verification.checks`):
`layout_of` gives the `Layout` (centres, scales, period) of a field, asked through its
``layout``/``hint``/``period`` hooks; `integrate` integrates `DensityRequest` s on a
layout and returns an `IntegrationOutcome` with the results and, on request, the final
quadrature rule of each integral (a `instantonkit.integrals.quadrature.Rule`) for sampling the field there.
"""

from __future__ import annotations

import dataclasses
import sys
from collections.abc import Callable, Sequence

import numpy as np

from ..core import _validate
from ..core._batching import run_batched
from ..engine import fields as _fields
from . import cubature as _cub
from . import flux as _flux
from .cubature import (
    MAX_ANGULAR_LEVEL,
    MAX_RADIAL_LEVEL,
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Layout,
)

__all__ = [
    "IntegralResult",
    "DivergentIntegralError",
    "FieldEvaluationError",
    "DensityRequest",
    "IntegrationOutcome",
    "Layout",
    "layout_of",
    "integrate",
    "field_description",
    "total_action",
    "total_charge",
    "integrate_density",
    "integrate_flux",
    "uses_flux",
    "DEFAULT_MAX_POINTS",
    "ENGINE_CHUNK",
    "MAX_RADIAL_LEVEL",
    "MAX_ANGULAR_LEVEL",
    "RULE_SAMPLE_POINTS",
]

#: Default budget of density evaluations for one integral (all refinement rounds together).
DEFAULT_MAX_POINTS = 4_000_000

#: Points per compiled call of the engine: whole chunks only, so one compiled size serves every round.
ENGINE_CHUNK = 8192

#: Default number of points of the sampled final rule (angular levels capped to fit): a fast sample.
RULE_SAMPLE_POINTS = 65536


#: The densities the integrals accept and the short names of their integrals.
_QUANTITIES = {"action_density": "action", "charge_density": "charge"}


@dataclasses.dataclass(frozen=True)
class DensityRequest:
    """One density to integrate: which quantity, by which engine method, named how, to which atol.

    quantity: 'action_density' | 'charge_density'; method: the engine's 'auto' | 'closed' | 'autodiff';
    name: the integral's name in results and messages (default 'action' / 'charge'); label: the
    density's name in evaluation errors (default the quantity with spaces); atol: this request's
    absolute tolerance (default the ``atol`` of `integrate`).
    """

    quantity: str = "action_density"
    method: str = "auto"
    name: str | None = None
    label: str | None = None
    atol: float | None = None

    def __post_init__(self):
        if self.quantity not in _QUANTITIES:
            raise ValueError(f"quantity must be 'action_density' or 'charge_density'; found {self.quantity!r}")
        _validate.choice("method", self.method, ("auto", "closed", "autodiff"))
        if self.name is None:
            object.__setattr__(self, "name", _QUANTITIES[self.quantity])
        if self.label is None:
            object.__setattr__(self, "label", self.quantity.replace("_", " "))


@dataclasses.dataclass(frozen=True)
class IntegrationOutcome:
    """What `integrate` returns: one result per request and, on request, the final rules.

    results: (IntegralResult, ...) in the order of the requests; rules: (quadrature.Rule, ...) the final
    rule of each integral (points (M, 4), weights (M,); shells capped at an angular level so that
    M is about ``rule_points``), or () when no rules were asked for.
    """

    results: tuple
    rules: tuple = ()

    @property
    def rule(self):
        """The final rule of the last request (a quadrature.Rule), or None without rules."""
        return self.rules[-1] if self.rules else None


def _period_of(field, period) -> float | None:
    if period is not None:
        return _validate.positive_float("period", period)
    p = _fields.hook(field, "period")
    return None if p is None else float(np.asarray(p))


def layout_of(field, center=None, scale=None, period=None) -> Layout:
    """The integration layout of ``field``: user hints, else its hooks, else centre 0 and scale 1.

    Args:
      field: a field (or a callable potential).
      center: (4,) or (m, 4) centres, overriding the field's; scale: a number or (m,) scales > 0.
        One of them alone completes the other from the field's ``hint()`` (or 0 / 1).
      period: x4 period > 0; default the field's ``period`` hook (None: R^4).
    Returns:
      Layout.  Without hints: the ``layout()`` hook (on R^4 only), else ``hint()``, else (0, 1).
    Raises:
      ValueError naming ``center``, ``scale`` or ``period`` for a bad shape or value.
    """
    field = _fields.as_field(field)
    per = _period_of(field, period)
    hint = _fields.hook(field, "hint")
    if center is not None or scale is not None:
        base_c, base_s = hint() if hint is not None and (center is None or scale is None) else (np.zeros(4), 1.0)
        c = _validate.points_array("center", base_c if center is None else center)
        s = _validate.positive_vector("scale", base_s if scale is None else scale, c.shape[0])
        return Layout(c, s, per, "user hints")
    layout = _fields.hook(field, "layout")
    if layout is not None and per is None:
        c, s = layout()
        c = np.asarray(c, dtype=np.float64).reshape(-1, 4)
        s = np.broadcast_to(np.asarray(s, dtype=np.float64), (c.shape[0],)).copy()
        return Layout(c, s, per, "the field's layout()")
    if hint is not None:
        c, s = hint()
        return Layout(np.asarray(c, dtype=np.float64).reshape(1, 4), np.array([float(s)]), per, "the field's hint()")
    return Layout(np.zeros((1, 4)), np.ones(1), per, "defaults (centre 0, scale 1)")


def field_description(field) -> str:
    """One line naming the field for reports: its ``describe()`` hook, else its type name (display only)."""
    describe = _fields.hook(field, "describe")
    return describe() if describe is not None else type(field).__name__


# -- evaluation with clear failures ------------------------------------------------------------------

#: Exceptions of a field's evaluation that become FieldEvaluationError (anything a user callable may raise).
_EVALUATION_ERRORS = (ValueError, TypeError, RuntimeError, ArithmeticError, AttributeError, IndexError, KeyError)


def _evaluator(field, request: DensityRequest) -> Callable[[np.ndarray], np.ndarray]:
    """points (M, 4) -> the requested density (M,) float64, in whole ENGINE_CHUNK batches."""

    def chunk(points):
        return _fields.evaluate(field, points, request.quantity, method=request.method, chunk_size=ENGINE_CHUNK)

    def run(points: np.ndarray) -> np.ndarray:
        if points.shape[0] == 0:
            return np.zeros(0)
        try:
            out = run_batched(chunk, [points], ENGINE_CHUNK)
        except _EVALUATION_ERRORS as err:
            raise FieldEvaluationError(
                f"evaluating the {request.label} of {field_description(field)} failed: {type(err).__name__}: {err}"
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


def _check_tolerances(rtol, atol, max_points) -> None:
    for name, v in (("rtol", rtol), ("atol", atol)):
        if _validate.finite_float(name, v) < 0:
            raise ValueError(f"{name} must be finite and >= 0; found {v!r}")
    if rtol == 0 and atol == 0:
        raise ValueError("rtol and atol cannot both be 0")
    _validate.budget("max_points", max_points)


def integrate(
    field,
    requests: Sequence[DensityRequest],
    layout: Layout,
    *,
    rtol: float = 1e-10,
    atol: float = 1e-10,
    max_points: int = DEFAULT_MAX_POINTS,
    progress=None,
    rule_points: int | None = None,
) -> IntegrationOutcome:
    """Integrate each requested density of ``field`` adaptively on ``layout`` (one integral per request).

    Each request gets its own adaptive rule (refinement follows its own errors) and its own budget of
    ``max_points`` evaluations; ``atol`` applies unless the request sets its own.

    Args:
      field: a field (or callable potential); requests: DensityRequest s; layout: from `layout_of`.
      rtol, atol: refine until error <= max(atol, rtol |value|) (finite, >= 0, not both 0).
      max_points: density evaluations per integral (never exceeded; ValueError when even the first
        round does not fit); progress: None | bool | callable (dict per round).
      rule_points: None, or the number of points (about) of each final rule returned in ``rules``.
    Returns:
      IntegrationOutcome(results (IntegralResult per request), rules (quadrature.Rule per request or ())).
    Raises:
      ValueError for bad tolerances or budget; DivergentIntegralError for a density that falls too
      slowly (or, as SingularDensityError, grows like r^-p, p >= 4, about a point it names with p);
      FieldEvaluationError when the field cannot be evaluated.
    """
    field = _fields.as_field(field)
    _check_tolerances(rtol, atol, max_points)
    if rule_points is not None:
        _validate.positive_int("rule_points", rule_points)
    sink = _progress_sink(progress)
    results, rules = [], []
    for req in requests:
        if not isinstance(req, DensityRequest):
            raise TypeError(f"requests must hold DensityRequest objects; found {type(req).__name__}")
        req_atol = atol if req.atol is None else req.atol
        _check_tolerances(rtol, req_atol, max_points)
        res, state = _cub.integrate_adaptive(
            _evaluator(field, req), str(req.name), layout, rtol=rtol, atol=req_atol, max_points=max_points, sink=sink
        )
        results.append(res)
        if rule_points is not None:
            rules.append(_cub.final_rule(state, rule_points))
    return IntegrationOutcome(tuple(results), tuple(rules))


# -- front doors -----------------------------------------------------------------------------------------


def integrate_flux(
    field,
    request: DensityRequest,
    layout: Layout,
    *,
    rtol: float = 1e-10,
    atol: float = 1e-10,
    max_points: int = DEFAULT_MAX_POINTS,
    progress=None,
) -> IntegralResult:
    """The requested density of ADHM data over R^4 by Osborn's flux route (`instantonkit.integrals.flux`).

    Args:
      field: ADHM data (``gram`` and ``charge`` hooks); request: which density, by which method
        (used outside the sphere), with its own atol; layout: R^4, from `layout_of`.
      rtol, atol, max_points, progress: as in `integrate_density`.
    Returns:
      IntegralResult with route 'osborn' (its ``rule`` names the sphere and both parts' levels).
    Raises:
      ValueError for a field without the hooks, a periodic layout, bad tolerances or a budget below
      three levels of each part; FieldEvaluationError when the density cannot be evaluated.
    """
    field = _fields.as_field(field)
    uses_flux(field, layout, request.method, "osborn")
    req_atol = atol if request.atol is None else request.atol
    _check_tolerances(rtol, req_atol, max_points)
    density = _evaluator(field, request)
    parts = _flux.osborn_integral(
        density, field, layout.centres, layout.extent, request.quantity, rtol=rtol, atol=req_atol, max_points=max_points
    )
    res = IntegralResult(str(request.name), *parts, route="osborn")
    sink = _progress_sink(progress)
    if sink is not None:
        sink(
            dict(
                quantity=res.quantity, round=1, evaluations=res.evaluations, value=res.value, error=res.error, done=True
            )
        )
    return res


def uses_flux(field, layout: Layout, method: str, route: str) -> bool:
    """Whether an integral of ``field`` takes Osborn's flux route (see `integrate_density`).

    Raises ValueError for an unknown route, or route 'osborn' for a field without ``gram`` and
    ``charge`` hooks or on a periodic layout."""
    _validate.choice("route", route, ("auto", "osborn", "volume"))
    if route == "volume":
        return False
    usable = _fields.hook(field, "gram") is not None and _fields.hook(field, "charge") is not None
    if route == "osborn" and not (usable and layout.period is None):
        raise ValueError(
            "route='osborn' needs ADHM data (a field with 'gram' and 'charge' hooks) on R^4; found "
            f"{field_description(field)}" + (f" with period {layout.period:g}" if layout.period is not None else "")
        )
    return usable and layout.period is None and (route == "osborn" or method == "auto")


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
    route: str = "auto",
) -> IntegralResult:
    """Integral of a density of ``field`` over R^4 (or R^3 x one period of x4) with an error estimate.

    Args:
      field: a field or a callable potential A(x): (4,) -> (4, N, N).
      quantity: 'action_density' or 'charge_density' (of `instantonkit.engine.fields`).
      rtol, atol: refine until ``error <= max(atol, rtol |value|)``.
      center, scale: (4,) or (k, 4) centres and a number or (k,) scales; default from the field's
        ``layout()`` / ``hint()`` hooks, else (0, 1) (see `layout_of`).
      period: integrate x4 over one period (default: the field's ``period`` hook).
      max_points: budget of density evaluations; when spent, ``converged`` is False and ``message`` says so.
      method: the engine's 'auto' | 'closed' | 'autodiff'.
      progress: None (a line on stderr when it is a terminal), True/False, or a callable getting a dict per round.
      route: 'auto' | 'osborn' | 'volume'.  'osborn' (what 'auto' takes for ADHM data, i.e. fields with a
        ``gram`` hook, on R^4 with method 'auto'): the ball |x - c| < R by Osborn's flux through its
        sphere and the rest by the volume integral of the density (`instantonkit.integrals.flux`; fast and
        precise, and it takes Osborn's formula on trust inside the ball).  'volume': the adaptive volume
        integral of the density everywhere (`instantonkit.integrals.cubature`), what ``verify`` checks with.
    Returns:
      IntegralResult (value, error, evaluations, rule, converged, message).
    Raises:
      ValueError for a bad quantity, tolerance, budget, centre, scale, period or route (route='osborn'
      for a field without a ``gram`` hook or on R^3 x S^1);
      DivergentIntegralError for a density that falls too slowly; FieldEvaluationError when the
      field cannot be evaluated.
    """
    if quantity not in _QUANTITIES:
        raise ValueError(f"quantity must be 'action_density' or 'charge_density'; found {quantity!r}")
    layout = layout_of(field, center, scale, period)
    if uses_flux(field, layout, method, route):
        return integrate_flux(
            field,
            DensityRequest(quantity, method),
            layout,
            rtol=rtol,
            atol=atol,
            max_points=max_points,
            progress=progress,
        )
    outcome = integrate(
        field,
        (DensityRequest(quantity, method),),
        layout,
        rtol=rtol,
        atol=atol,
        max_points=max_points,
        progress=progress,
    )
    return outcome.results[0]


def total_action(
    field,
    *,
    rtol=1e-10,
    atol=1e-10,
    center=None,
    scale=None,
    period=None,
    max_points=DEFAULT_MAX_POINTS,
    method="auto",
    progress=None,
    route="auto",
) -> IntegralResult:
    """S = int s d^4x (per period for periodic fields) with error estimate; 8 pi^2 |Q| for (anti-)instantons.

    Args:
      field and keywords as in `integrate_density` (``atol`` is absolute, in units of S).
    Returns:
      IntegralResult with quantity 'action'.
    Raises:
      as `integrate_density`.
    """
    return integrate_density(
        field,
        "action_density",
        rtol=rtol,
        atol=atol,
        center=center,
        scale=scale,
        period=period,
        max_points=max_points,
        method=method,
        progress=progress,
        route=route,
    )


def total_charge(
    field,
    *,
    rtol=1e-10,
    atol=1e-10,
    center=None,
    scale=None,
    period=None,
    max_points=DEFAULT_MAX_POINTS,
    method="auto",
    progress=None,
    route="auto",
) -> IntegralResult:
    """Q = int q d^4x (per period for periodic fields) with error estimate; +k for k instantons.

    Args:
      field and keywords as in `integrate_density`; ``method='closed'`` computes q from the
      closed-form F (eps tr F F) even where the field has a closed-form q.
    Returns:
      IntegralResult with quantity 'charge'.
    Raises:
      as `integrate_density`.
    """
    return integrate_density(
        field,
        "charge_density",
        rtol=rtol,
        atol=atol,
        center=center,
        scale=scale,
        period=period,
        max_points=max_points,
        method=method,
        progress=progress,
        route=route,
    )
