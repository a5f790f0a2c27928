"""The independent routes of ``verify``: the inputs of the construction and the second ways to the charge.

Facts of the construction (declared charge, pole counts, the ADHM constraint residual) are shown as
inputs, never as agreeing checks; Osborn's density on another rule and the sphere flux are routes to
the charge that do not share the volume integral's rule.
"""

from __future__ import annotations

import numpy as np

from ..core.conventions import INSTANTON_ACTION
from ..engine import fields as _fields
from ..integrals.drivers import (
    DensityRequest,
    DivergentIntegralError,
    FieldEvaluationError,
    Layout,
    integrate,
)
from .constituents import constituent_rows
from .evidence import (
    OsbornField,
    surface_winding,
)
from .report import (
    HOW_CONSTRUCTION,
    HOW_INPUT,
    HOW_OTHER_RULE,
    HOW_SURFACE,
    Route,
    Row,
)
from .verdicts import Case, action_route, judge, route_row


def constraint_value(field) -> float | None:
    residual = _fields.hook(field, "constraint_residual")
    return None if residual is None else float(residual())


def record_inputs(field, case: Case, constraint_tol: float) -> None:
    """Facts of the construction: the constraint residual and pole counts (rows that cannot agree)."""
    cres = constraint_value(field)
    if cres is not None:
        case.rows.append(
            Row("ADHM constraint residual", cres, None, HOW_CONSTRUCTION, "by construction", "enforced at construction")
        )
        if cres > constraint_tol:
            case.failures.append(f"ADHM constraint residual {cres:.3e} > {constraint_tol:.0e}")
    pole_count = _fields.hook(field, "pole_count")
    if pole_count is not None:
        count, text = pole_count()
        case.rows.append(Row(f"pole count: {text}", float(count), None, HOW_INPUT, "input"))
        case.routes.append(
            Route(text, float(count), None, False, None, "the number of poles given as input", HOW_INPUT)
        )
    case.rows.extend(constituent_rows(field))


def _only_potential(field) -> bool:
    """True when the field offers no hook beyond ``describe``: a bare potential (a user callable, say)."""
    return all(_fields.hook(field, name) is None for name in _fields.HOOKS if name != "describe")


def _osborn_route(case: Case, field, charge, layout: Layout, kw: dict, tol: float) -> None:
    """Q from the integral of Osborn's density on another rule (shifted centres, larger scales)."""
    name = "Osborn density -1/2 box box log det(D^dag D)"
    shift = 0.1 * layout.scales[:, None] * np.array([0.5, -0.5, 0.5, 0.5])
    other = Layout(layout.centres + shift, 1.25 * layout.scales, layout.period, "shifted, rescaled layout")
    try:
        req = DensityRequest(
            "action_density", name="Osborn action", label="Osborn density", atol=kw["atol"] * INSTANTON_ACTION
        )
        res = integrate(OsbornField(field), (req,), other, **kw).results[0]
    except (DivergentIntegralError, FieldEvaluationError) as e:
        case.failures.append(f"the Osborn route failed: {e}")
        route_row(case, Route(name, None, None, True, False, str(e), HOW_OTHER_RULE), "DISAGREES")
        return
    if not res.converged:
        case.doubts.append(f"the Osborn route did not converge: {res.message}")
        budget = kw["max_points"]
        case.advise(
            f"raise the budget (max_points={4 * budget:,}; command line --budget {4 * budget}), or routes=False"
        )
    action_route(
        case,
        res,
        charge,
        tol,
        name,
        HOW_OTHER_RULE,
        "the Osborn route",
        lambda val, err: (
            f"the integral of Osborn's density on another rule gives {val:.10g} +- {err:.1e}, "
            f"not Q = {charge.value:.10g} +- {charge.error:.1e} (quadrature error beyond tolerance)"
        ),
    )


def run_routes(case: Case, field, charge, layout: Layout, kw, tol, winding, checked: bool = False) -> None:
    """Osborn's density for fields with ``gram`` (unless the volume check ran); the sphere flux for smooth
    and bare potentials."""
    if _fields.hook(field, "gram") is not None and not checked:
        _osborn_route(case, field, charge, layout, kw, tol)
    declared = _fields.hook(field, "charge")
    is_adhm = _fields.hook(field, "constraint_residual") is not None
    smooth = getattr(field, "gauge", None) == "regular" and (
        not is_adhm or (declared is not None and abs(declared) == 1)
    )
    if winding is None:
        winding = smooth or _only_potential(field)
    if not winding or layout.period is not None:
        return
    name = "Chern-Simons flux at infinity"
    note = "" if smooth else "equals Q only for a potential smooth everywhere (not decisive)"
    try:
        val, err = surface_winding(field)
    except FieldEvaluationError as e:
        route_row(case, Route(name, None, None, bool(smooth), None, str(e), HOW_SURFACE), "undecided")
        return
    status = judge(abs(val - charge.value), err + charge.error, max(tol, 10.0 * err))
    if smooth and status == "DISAGREES":
        case.failures.append(f"the sphere flux {val:.10g} +- {err:.1e} disagrees with Q = {charge.value:.10g}")
    agrees = {"agrees": True, "DISAGREES": False}.get(status)
    route_row(case, Route(name, val, err, bool(smooth), agrees, note, HOW_SURFACE), status if smooth else "")
