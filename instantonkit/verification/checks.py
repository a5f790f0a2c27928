"""The one-call ``verify`` report: is a field what it claims to be, and how do we know?

``verify(field)`` integrates q and s (`instantonkit.integrals.drivers`) and weighs them with evidence
that does not take the field's closed forms on trust (`instantonkit.verification.evidence`): on the points of
the final rule of the action integral, F by automatic differentiation of the potential is compared
with the closed forms, and the self-duality residual and the Bogomolny margin are computed from that
F (q = eps tr F F).  For ADHM data Osborn's density is integrated on a different rule (shifted
centres, other scales), so its agreement bounds the quadrature error; the sphere flux is the route
for smooth potentials.  Facts of the construction (the declared charge, pole counts, the ADHM
constraint residual) are shown as the inputs they are, never as checks that agree.

The verdict has three values: PASSED (converged, and every deviation plus its error bar within
tolerance), FAILED (a deviation beyond tolerance by more than its error bar, a closed form that is not
the curvature of its potential, a clearly nonzero self-duality residual, a field that is not periodic
with the given period), else INCONCLUSIVE, with the reasons and advice (budget, hints, tolerance).
"""

from __future__ import annotations

import dataclasses
import re

import numpy as np

from ..core import _validate
from ..core.conventions import INSTANTON_ACTION
from ..engine import fields as _fields
from ..integrals.drivers import (  # re-exported: checks is the one place for "is it what it claims to be?"
    DEFAULT_MAX_POINTS,
    DensityRequest,
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Layout,
    field_description,
    integrate,
    integrate_density,
    integrate_flux,
    layout_of,
    total_action,
    total_charge,
    uses_flux,
)
from ..integrals.singular import SingularDensityError
from .evidence import (
    CLOSED_FORM_TOL,
    PERIODICITY_TOL,
    CurvatureSample,
    OsbornField,
    Peak,
    curvature_sample,
    find_peak,
    osborn_density,
    periodicity_mismatch,
    surface_winding,
)
from .report import (
    FAILED,
    HOW_CONSTRUCTION,
    HOW_CURVATURE,
    HOW_FLUX,
    HOW_INPUT,
    HOW_INTEGRAL,
    HOW_OTHER_RULE,
    HOW_SURFACE,
    INCONCLUSIVE,
    PASSED,
    Route,
    Row,
    Verification,
    expected_integer,
    orientation_mistake,
    signed_offset,
)

__all__ = [
    "IntegralResult",
    "Route",
    "Row",
    "Verification",
    "DivergentIntegralError",
    "FieldEvaluationError",
    "total_action",
    "total_charge",
    "integrate_density",
    "osborn_density",
    "surface_winding",
    "verify",
    "DEFAULT_MAX_POINTS",
    "PASSED",
    "FAILED",
    "INCONCLUSIVE",
]

#: Points of the final action rule on which the potential's curvature is sampled.
DEFAULT_SAMPLE_POINTS = 8192

_NO_BUDGET = "correct the potential at the point named: more budget or a centre there cannot make it integrable"
#: A peak this many scales away from every layout centre means the layout misses the field.
_FAR = 3.0
#: A peak this many times higher than the largest s on the sampled rule lies between its shells.
_BETWEEN = 4.0


# -- verify ------------------------------------------------------------------------------------------


@dataclasses.dataclass
class _Case:
    """What verify accumulates: failures (-> FAILED), doubts (-> INCONCLUSIVE), advice and rows."""

    failures: list = dataclasses.field(default_factory=list)
    doubts: list = dataclasses.field(default_factory=list)
    advice: list = dataclasses.field(default_factory=list)
    rows: list = dataclasses.field(default_factory=list)
    routes: list = dataclasses.field(default_factory=list)
    nearest: int | None = None
    margin: float | None = None
    margin_error: float | None = None
    margin_how: str = ""
    bound: bool | None = None
    saturated: bool | None = None
    sign: int = 1
    sample: CurvatureSample | None = None
    peak: Peak | None = None

    def advise(self, text: str) -> None:
        if text not in self.advice:
            self.advice.append(text)

    @property
    def verdict(self) -> str:
        return FAILED if self.failures else INCONCLUSIVE if self.doubts else PASSED


def _judge(deviation: float, error: float, tol: float) -> str:
    """'agrees' when deviation + error <= tol, 'DISAGREES' when deviation - error > tol, else 'undecided'."""
    if deviation + error <= tol:
        return "agrees"
    return "DISAGREES" if deviation - error > tol else "undecided"


def _budget(max_points, declared, layout: Layout) -> int:
    """The budget per integral: given, or DEFAULT_MAX_POINTS x max(1, |declared charge|, number of centres)."""
    if max_points is not None:
        return _validate.positive_int("max_points", max_points)
    k = abs(int(declared)) if declared is not None else 1
    return DEFAULT_MAX_POINTS * max(1, k, layout.centres.shape[0])


def verify(
    field,
    *,
    expected_charge: int | None = None,
    rtol: float = 0.0,
    atol: float | None = None,
    center=None,
    scale=None,
    period=None,
    max_points: int | None = None,
    charge_tol: float = 1e-6,
    duality_tol: float = 1e-6,
    constraint_tol: float = 1e-10,
    routes: bool = True,
    winding: bool | None = None,
    charge_method: str = "auto",
    sample_points: int = DEFAULT_SAMPLE_POINTS,
    progress=None,
) -> Verification:
    """Check that ``field`` is a charge-k (anti-)instanton; PASSED, FAILED or INCONCLUSIVE with reasons.

    Args:
      field: a field or callable potential.
      expected_charge: the instanton number the field should have (None: the field's ``charge`` hook
        if it has one, else any nonzero integer).
      rtol, atol: tolerances of the integrals (atol for Q and S / 8 pi^2; default charge_tol / 4).
      center, scale, period: the integration layout (see `instantonkit.integrals.drivers.layout_of`).
      max_points: budget per integral (default DEFAULT_MAX_POINTS x max(1, |charge|, centres)).
      charge_tol: tolerance of |Q - n|; duality_tol: of the Bogomolny margin and the mean residual;
        constraint_tol: of the constraint residual.
      routes: compute the independent routes; winding: the sphere-flux route (None: for potentials
        declared 'regular' and bare potentials).
      charge_method: the engine's 'auto' | 'closed' | 'autodiff' for q.
      sample_points: points of the final action rule where the potential's curvature is sampled.
      progress: as in `instantonkit.integrals.drivers.integrate_density`.
    Returns:
      Verification (``verdict``, ``passed``, ``reasons``, ``advice``, ``rows``, the numbers).
    Raises:
      ValueError / TypeError for bad tolerances, budget, centre, scale, period or method.  Divergent
      densities and failing fields give FAILED with the reason, not an exception.
    """
    field = _fields.as_field(field)
    charge_tol = _validate.positive_float("charge_tol", charge_tol)
    duality_tol = _validate.positive_float("duality_tol", duality_tol)
    constraint_tol = _validate.positive_float("constraint_tol", constraint_tol)
    rtol = _validate.finite_float("rtol", rtol)
    if rtol < 0:
        raise ValueError(f"rtol must be finite and >= 0; found {rtol!r}")
    atol = charge_tol / 4.0 if atol is None else _validate.positive_float("atol", atol)
    _validate.choice("charge_method", charge_method, ("auto", "closed", "autodiff"))
    sample_points = _validate.positive_int("sample_points", sample_points)
    layout = layout_of(field, center, scale, period)
    declared = _fields.hook(field, "charge")
    budget = _budget(max_points, declared, layout)
    expected_charge = expected_integer(expected_charge)
    case = _Case()
    kw = dict(rtol=rtol, atol=atol, max_points=budget, progress=progress)
    charge = action = check = None
    if _periodic_ok(field, layout, case):
        case.peak = _locate(field, layout, case)
        charge, action, rule, check = _integrals(field, layout, charge_method, kw, sample_points, case, charge_tol)
        if charge is not None:
            _charge_findings(case, charge, expected_charge, declared, charge_tol, budget)
        if action is not None:
            _action_findings(case, action, charge, budget)
        if charge is not None and action is not None and rule is not None:
            _curvature_findings(case, field, charge, action, rule, charge_method, duality_tol)
        _inputs(field, case, constraint_tol)
        if check is not None and charge is not None:
            _volume_check(case, check, charge, budget, charge_tol)
        if routes and charge is not None:
            _routes(case, field, charge, layout, kw, charge_tol, winding, check is not None)
    return _report(field, case, charge, action, layout, expected_charge, budget, check)


def _report(field, case: _Case, charge, action, layout: Layout, expected, budget: int, check=None) -> Verification:
    units = None if action is None else action.value / INSTANTON_ACTION
    units_err = None if action is None else action.error / INSTANTON_ACTION
    s = case.sample
    duality = "self-duality" if case.sign > 0 else "anti-self-duality"
    peak = None if case.peak is None else (case.peak.point.tolist(), case.peak.value, case.peak.width)
    return Verification(
        field=field_description(field),
        charge=charge,
        action=action,
        nearest_integer=case.nearest,
        distance=None if charge is None or case.nearest is None else charge.value - case.nearest,
        distance_error=None if charge is None else charge.error,
        action_units=units,
        action_units_error=units_err,
        bogomolny_margin=case.margin,
        bogomolny_margin_error=case.margin_error,
        bound_holds=case.bound,
        saturated=case.saturated,
        duality=duality,
        residual_max=None if s is None else s.residual_max,
        residual_mean=None if s is None else s.residual_mean,
        constraint_residual=_constraint_value(field),
        routes=tuple(case.routes),
        passed=case.verdict == PASSED,
        reasons=tuple(case.failures + case.doubts),
        period=layout.period,
        expected_charge=expected,
        verdict=case.verdict,
        advice=tuple(case.advice),
        rows=tuple(case.rows),
        margin_how=case.margin_how,
        closed_form_deviation={} if s is None else dict(s.deviations),
        peak=peak,
        budget=budget,
        layout=f"{layout.centres.shape[0]} centre(s) from {layout.source}",
        check=check,
    )


def _fmt_point(p) -> str:
    return "(" + ", ".join(f"{float(v):.3g}" for v in np.asarray(p)) + ")"


def _periodic_ok(field, layout: Layout, case: _Case) -> bool:
    """Before integrating over one period: are the densities periodic with it?  False (FAILED) if not."""
    if layout.period is None:
        return True
    try:
        mismatch, where = periodicity_mismatch(field, layout.centres, layout.scales, layout.period)
    except FieldEvaluationError as err:
        case.failures.append(str(err))
        return False
    if mismatch <= PERIODICITY_TOL:
        return True
    case.failures.append(
        f"the field is not periodic with period {layout.period:g}: its action or charge density at "
        f"x = {_fmt_point(where)} and at x + {layout.period:g} e_4 differ by {mismatch:.2e} of the largest s sampled"
    )
    own = _fields.hook(field, "period")
    case.advise(
        "pass the field's own period"
        + (f" ({float(own):g})" if own is not None else "")
        + ", or no period to integrate over R^4"
    )
    return False


def _locate(field, layout: Layout, case: _Case) -> Peak | None:
    """Search the action density's peak; advise hints when it lies far from every layout centre."""
    peak = find_peak(field, layout.centres, layout.scales, layout.period)
    if peak is None:
        return None
    d = np.linalg.norm(layout.centres - peak.point, axis=1) / layout.scales
    if layout.period is not None:
        dt = np.abs(np.mod(layout.centres[:, 3] - peak.point[3] + layout.period / 2, layout.period) - layout.period / 2)
        d = np.linalg.norm(np.column_stack([layout.centres[:, :3] - peak.point[:3], dt]), axis=1) / layout.scales
    if float(np.min(d)) > _FAR:
        case.advise(
            f"the integrand is poorly resolved: the action density peaks at {_fmt_point(peak.point)} "
            f"(s = {peak.value:.3g}, width about {peak.width:.2g}), {float(np.min(d)):.1f} scales from the nearest "
            f"centre of the layout ({layout.source}); pass center={_fmt_point(peak.point)}, scale={peak.width:.2g} "
            f"(command line: --center {','.join(f'{v:.3g}' for v in peak.point)} --scale {peak.width:.2g})"
        )
    return peak


def _undecided(check: IntegralResult, charge: IntegralResult, tol: float) -> bool:
    """Whether a converged volume check of S / 8 pi^2 can neither confirm nor refute |Q| to ``tol``."""
    dev = abs(check.value / INSTANTON_ACTION - abs(charge.value))
    return check.converged and _judge(dev, check.error / INSTANTON_ACTION + charge.error, tol) == "undecided"


def _integrals(field, layout: Layout, charge_method: str, kw: dict, sample_points: int, case: _Case, tol: float):
    """(charge, action, sampled final rule of the action's volume integral, volume check or None).

    ADHM data (``gram`` hook, R^4, charge_method 'auto'): Q and S by Osborn's flux route (precise), and
    the volume integral of s as their check (its final rule is the one sampled); a check whose error bar
    leaves |Q| undecided at ``tol`` runs once more at a quarter of its tolerance (the volume rule's error
    estimate can miss a neighbour's lump seen through the partition of unity: measured on random k = 4
    data, 6e-7 true against 4e-7 reported at 5e-7).  Other fields: Q and S by the volume rule, no
    separate check.
    """
    charge = action = rule = check = None
    s_atol = kw["atol"] * INSTANTON_ACTION  # atol is for S / 8 pi^2
    try:
        if charge_method == "auto" and uses_flux(field, layout, "auto", "auto"):
            action = integrate_flux(field, DensityRequest("action_density", atol=s_atol), layout, **kw)
            # Q = sign S / 8 pi^2 by construction here: both are s inside the ball, and outside it the closed-form
            # q is sign s / 8 pi^2; one integral serves both (the Bogomolny row says 'by construction'), and the
            # volume check below reuses its compiled s.
            sign = float(np.sign(_fields.hook(field, "charge")))  # the flux route's sign of q (flux.osborn_integral)
            charge = dataclasses.replace(
                action,
                quantity="charge",
                value=sign * action.value / INSTANTON_ACTION,
                error=action.error / INSTANTON_ACTION,
            )
            # The check confirms Q to charge_tol (= 4 atol): half of it for its own error bar is enough.
            req = DensityRequest("action_density", name="action (volume check)", atol=2.0 * s_atol)
            outcome = integrate(field, (req,), layout, rule_points=sample_points, **kw)
            if _undecided(outcome.results[0], charge, tol):  # its error bar too wide to decide: once, 4 x tighter
                finer = integrate(
                    field, (dataclasses.replace(req, atol=s_atol / 2.0),), layout, rule_points=sample_points, **kw
                )
                outcome = finer if finer.results[0].converged else outcome
            check, rule = outcome.results[0], outcome.rule
        else:
            req = DensityRequest("action_density", atol=s_atol)  # s first: it names a non-integrable point soonest
            outcome = integrate(field, (req,), layout, rule_points=sample_points, **kw)
            action, rule = outcome.results[0], outcome.rule
            charge = integrate(field, (DensityRequest("charge_density", charge_method),), layout, **kw).results[0]
    except (DivergentIntegralError, FieldEvaluationError) as err:
        case.failures.append(re.sub(r"\|x\|\^--", "|x|^", str(err)))
        if isinstance(err, SingularDensityError):  # more budget or a centre there cannot make it finite
            case.advice = [a for a in case.advice if "center=" not in a] + [_NO_BUDGET]
    except ValueError as err:  # a budget below the first round of the rule: nothing converged, say what is needed
        if "max_points must be at least" not in str(err):
            raise
        need = re.search(r"at least ([0-9,]+)", str(err))
        case.doubts.append(f"integrals not converged: the budget is below the first round of the rule ({err})")
        case.advise(
            f"raise the budget (max_points >= {need.group(1) if need else 'the first round'}; command line --budget)"
        )
    return charge, action, rule, check


def _how(res: IntegralResult) -> str:
    return HOW_FLUX if res.route == "osborn" else HOW_INTEGRAL


def _action_route(case: _Case, res: IntegralResult, charge, tol: float, name: str, how: str, label: str, mismatch):
    """Add the route row of an action integral ``res`` (S / 8 pi^2, signed by Q) against the charge Q.

    An integral that disagrees beyond the error bars fails with ``mismatch(value, error)``, converged or
    not; a converged one that cannot be decided is a doubt naming ``label`` (for a non-converged one
    the caller says why and advises).
    """
    val, err = case.sign * res.value / INSTANTON_ACTION, res.error / INSTANTON_ACTION  # s = 8 pi^2 |q|
    status = _judge(abs(val - charge.value), err + charge.error, tol)  # the error bar decides, whatever the budget
    if status == "DISAGREES":
        case.failures.append(mismatch(val, err))
    elif res.converged and status == "undecided":
        case.doubts.append(f"{label} {val:.10g} +- {err:.1e} and Q cannot be decided to {tol:.0e}")
    note = "s = 8 pi^2 |q|, sign from Q" + ("" if res.converged else "; NOT converged")
    agrees = {"agrees": True, "DISAGREES": False}.get(status)
    _route_row(case, Route(name, val, err, True, agrees, note, how), status)


def _volume_check(case: _Case, check: IntegralResult, charge: IntegralResult, budget: int, tol: float) -> None:
    """The volume integral of s against the flux figure of Q: a disagreement beyond the error bars fails."""
    if not check.converged:
        _not_converged(case, "volume check", check, budget)
    _action_route(
        case,
        check,
        charge,
        tol,
        "volume integral of s / 8 pi^2 (checks the flux figures)",
        HOW_INTEGRAL,
        "the volume check",
        lambda val, err: (
            f"the volume integral of s gives S/8pi^2 = {val:.10g} +- {err:.1e}, not the flux figure Q = "
            f"{charge.value:.10g} +- {charge.error:.1e}: the closed-form density or the quadrature is wrong"
        ),
    )


def _not_converged(case: _Case, what: str, res: IntegralResult, budget: int) -> None:
    case.doubts.append(f"{what} integral not converged: {res.message or 'error above tolerance'}")
    if "density is singular at" in res.message:  # integrable but slow: say so rather than only more budget
        case.advise("the density grows like a power near the point named: check the potential's factor and sign there")
    if any(_NO_BUDGET in a for a in case.advice):  # a non-integrable point: neither budget nor hints help
        return
    case.advise(f"raise the budget (max_points={4 * budget:,}; command line --budget {4 * budget})")
    if case.peak is None or not any("poorly resolved" in a for a in case.advice):
        case.advise("or give hints where the action sits (center=..., scale=...; --center, --scale)")


def _charge_findings(case: _Case, charge: IntegralResult, expected, declared, tol: float, budget: int) -> None:
    """Nearest integer, |Q - n| against tolerance and error bar, the expected and the declared charge."""
    q, e = charge.value, charge.error
    how = _how(charge)
    case.rows.append(Row("topological charge Q", q, e, how, "", "" if charge.converged else "NOT converged"))
    if not charge.converged:
        _not_converged(case, "charge", charge, budget)
    n = int(round(q)) if e < 0.5 else None  # an error bar of 1/2 or more names no nearest integer
    want = expected if expected is not None else declared
    case.sign = -1 if (n if n is not None else want if want is not None else q) < 0 else 1
    if n is None:
        case.doubts.append(f"Q = {q:.6g} +- {e:.1e}: the error bar is too wide to name the nearest integer")
    else:
        case.nearest, status = n, _judge(abs(q - n), e, tol)
        case.rows.append(Row(signed_offset("Q", n), abs(q - n), e, how, status, f"tolerance {tol:.0e}"))
        if status == "DISAGREES":  # whatever the budget: the error bar is part of the rule
            case.failures.append(
                f"charge is not an integer: Q = {q:.10g} +- {e:.1e}, {signed_offset('Q', n)} = {abs(q - n):.2e} "
                f"exceeds the tolerance {tol:.0e} by more than the error bar"
            )
        elif status == "undecided" and charge.converged:
            case.doubts.append(
                f"the error bar of Q ({e:.1e}) is too wide to decide {signed_offset('Q', n)} = {abs(q - n):.2e} "
                f"against the tolerance {tol:.0e}"
            )
            case.advise(
                f"tighten atol (e.g. atol={tol / 10:.0e}) with more budget, or loosen charge_tol to {abs(q - n) + e:.0e}"
            )
        if n == 0 and abs(q) + e < 0.5:
            case.failures.append("charge 0: not an instanton")
    for want, what in ((expected, "the expected"), (declared, "the construction's (input)")):
        if want is None or n == int(want):
            continue
        off, label = abs(q - int(want)), f"charge {n}" if n is not None else f"Q = {q:.10g} +- {e:.1e}"
        if n is None:
            case.rows.append(Row(signed_offset("Q", int(want)), off, e, how, _judge(off, e, tol), f"{what} charge"))
        if off - e > tol:
            flip = orientation_mistake(q, e, int(want), tol)
            case.failures.append(flip or f"{label} differs from {what} {int(want)}")
    if declared is not None:
        case.rows.append(Row("charge declared by the construction", float(declared), None, HOW_INPUT, "input"))


def _action_findings(case: _Case, action: IntegralResult, charge, budget: int) -> None:
    units, err = action.value / INSTANTON_ACTION, action.error / INSTANTON_ACTION
    case.rows.append(
        Row("action S / 8 pi^2", units, err, _how(action), "", "" if action.converged else "NOT converged")
    )
    if not action.converged:
        _not_converged(case, "action", action, budget)


def _curvature_findings(case: _Case, field, charge, action, rule, charge_method: str, tol: float) -> None:
    """Closed forms vs the potential's curvature; the margin and the residual from that curvature."""
    try:
        case.sample = s = curvature_sample(field, rule.points, rule.weights, case.sign)
    except FieldEvaluationError as err:
        case.failures.append(str(err))
        return
    peak = case.peak
    if peak is not None and peak.value > _BETWEEN * s.s_max and not any("poorly resolved" in a for a in case.advice):
        case.advise(
            f"the integrand is poorly resolved: the action density peaks between the rule's shells, at "
            f"{_fmt_point(peak.point)} with s = {peak.value:.3g}, while the largest s on the rule's points is "
            f"{s.s_max:.3g}; pass center={_fmt_point(peak.point)}, scale={peak.width:.2g} or more budget"
        )
    for name, dev in s.deviations.items():
        ok = dev <= CLOSED_FORM_TOL
        case.rows.append(
            Row(
                f"closed-form {name.replace('_', ' ')} vs curvature of A",
                dev,
                None,
                HOW_CURVATURE,
                "agrees" if ok else "DISAGREES",
                "max relative difference",
            )
        )
        if not ok:
            case.failures.append(
                f"the closed-form {name} is not the curvature of the potential: it differs from the autodiff "
                f"curvature of A by {dev:.2e} (relative, largest at x = {_fmt_point(s.worst[name])})"
            )
    units, u_err = action.value / INSTANTON_ACTION, action.error / INSTANTON_ACTION
    m_int, e_int = units - abs(charge.value), u_err + charge.error
    by_construction = s.q_is_s and charge_method == "auto"
    rel_rule = abs(s.weight_s - action.value) / max(abs(action.value), 1e-300)
    m_s = s.margin
    e_s = abs(m_s) * min(1.0, rel_rule) + 1e-12 * max(units, 1.0)
    label = "Bogomolny margin S/8pi^2 - |Q|"
    if by_construction:
        case.rows.append(
            Row(
                label + " (integrals)",
                m_int,
                e_int,
                HOW_CONSTRUCTION,
                "by construction",
                "the closed-form q is s / 8 pi^2",
            )
        )
        case.margin, case.margin_error, case.margin_how = m_s, e_s, HOW_CURVATURE
    else:
        case.margin, case.margin_error, case.margin_how = m_int, e_int, HOW_INTEGRAL
    status = _judge(abs(case.margin), case.margin_error, tol)
    case.bound = case.margin >= -case.margin_error - 1e-12
    case.saturated = status == "agrees"
    duality = "self-dual" if case.sign > 0 else "anti-self-dual"
    case.rows.append(Row(label, case.margin, case.margin_error, case.margin_how, status, f"tolerance {tol:.0e}"))
    if not by_construction:
        case.rows.append(Row(label + " on the rule", m_s, e_s, HOW_CURVATURE, "", "cross-check"))
    if not case.bound:
        case.failures.append(f"Bogomolny bound violated: S/8pi^2 - |Q| = {case.margin:.3e} +- {case.margin_error:.1e}")
    elif status == "DISAGREES":
        case.failures.append(f"not {duality}: S/8pi^2 - |Q| = {case.margin:.3e} +- {case.margin_error:.1e} > {tol:.0e}")
    elif status == "undecided":
        case.doubts.append(
            f"the Bogomolny margin {case.margin:.2e} +- {case.margin_error:.1e} cannot be decided against {tol:.0e}"
        )
    res_status = "agrees" if s.residual_mean <= tol else "DISAGREES"
    what = "self-duality" if case.sign > 0 else "anti-self-duality"
    case.rows.append(
        Row(
            f"{what} residual |F {'-' if case.sign > 0 else '+'} *F|/|F|, max",
            s.residual_max,
            None,
            HOW_CURVATURE,
            "",
            f"{s.points:,} points",
        )
    )
    case.rows.append(
        Row(
            f"{what} residual, s-weighted mean",
            s.residual_mean,
            None,
            HOW_CURVATURE,
            res_status,
            f"tolerance {tol:.0e}",
        )
    )
    if res_status == "DISAGREES":
        case.failures.append(f"not {duality}: {what} residual (s-weighted mean) {s.residual_mean:.3e} > {tol:.0e}")


def _constraint_value(field) -> float | None:
    residual = _fields.hook(field, "constraint_residual")
    return None if residual is None else float(residual())


def _inputs(field, case: _Case, constraint_tol: float) -> None:
    """Facts of the construction: the constraint residual and pole counts (rows that cannot agree)."""
    cres = _constraint_value(field)
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


def _only_potential(field) -> bool:
    """True when the field offers no hook beyond ``describe``: a bare potential (a user callable, say)."""
    return all(_fields.hook(field, name) is None for name in _fields.HOOKS if name != "describe")


def _route_row(case: _Case, route: Route, status: str) -> None:
    case.routes.append(route)
    case.rows.append(Row(f"route: {route.name}", route.value, route.error, route.how, status, route.note))


def _osborn_route(case: _Case, field, charge, layout: Layout, kw: dict, tol: float) -> None:
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
        _route_row(case, Route(name, None, None, True, False, str(e), HOW_OTHER_RULE), "DISAGREES")
        return
    if not res.converged:
        case.doubts.append(f"the Osborn route did not converge: {res.message}")
        budget = kw["max_points"]
        case.advise(
            f"raise the budget (max_points={4 * budget:,}; command line --budget {4 * budget}), or routes=False"
        )
    _action_route(
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


def _routes(case: _Case, field, charge, layout: Layout, kw, tol, winding, checked: bool = False) -> None:
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
        _route_row(case, Route(name, None, None, bool(smooth), None, str(e), HOW_SURFACE), "undecided")
        return
    status = _judge(abs(val - charge.value), err + charge.error, max(tol, 10.0 * err))
    if smooth and status == "DISAGREES":
        case.failures.append(f"the sphere flux {val:.10g} +- {err:.1e} disagrees with Q = {charge.value:.10g}")
    agrees = {"agrees": True, "DISAGREES": False}.get(status)
    _route_row(case, Route(name, val, err, bool(smooth), agrees, note, HOW_SURFACE), status if smooth else "")
