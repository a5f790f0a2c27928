"""The verdict rules of ``verify``: what a deviation, its error bar and the tolerance make of a check.

A check is FAILED when its deviation exceeds the tolerance by more than its error bar, PASSED when the
deviation plus its error bar lies within the tolerance, and undecided otherwise (`judge`).  The
findings below turn the integrals (charge, action, the volume check) and the curvature sample into rows,
failures, doubts and advice on one `Case`, which `instantonkit.verification.checks` turns into
the report.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..core.conventions import INSTANTON_ACTION
from ..integrals.drivers import (
    FieldEvaluationError,
    IntegralResult,
)
from .evidence import (
    CLOSED_FORM_TOL,
    CurvatureSample,
    Peak,
    curvature_sample,
)
from .report import (
    FAILED,
    HOW_CONSTRUCTION,
    HOW_CURVATURE,
    HOW_FLUX,
    HOW_INPUT,
    HOW_INTEGRAL,
    INCONCLUSIVE,
    PASSED,
    Route,
    Row,
    orientation_mistake,
    signed_offset,
)

NO_BUDGET = "correct the potential at the point named: more budget or a centre there cannot make it integrable"


#: A peak this many times higher than the largest s on the sampled rule lies between its shells.
_BETWEEN = 4.0


@dataclasses.dataclass
class Case:
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


def judge(deviation: float, error: float, tol: float) -> str:
    """'agrees' when deviation + error <= tol, 'DISAGREES' when deviation - error > tol, else 'undecided'."""
    if deviation + error <= tol:
        return "agrees"
    return "DISAGREES" if deviation - error > tol else "undecided"


def fmt_point(p) -> str:
    return "(" + ", ".join(f"{float(v):.3g}" for v in np.asarray(p)) + ")"


def is_undecided(check: IntegralResult, charge: IntegralResult, tol: float) -> bool:
    """Whether a converged volume check of S / 8 pi^2 can neither confirm nor refute |Q| to ``tol``."""
    dev = abs(check.value / INSTANTON_ACTION - abs(charge.value))
    return check.converged and judge(dev, check.error / INSTANTON_ACTION + charge.error, tol) == "undecided"


def _how(res: IntegralResult) -> str:
    return HOW_FLUX if res.route == "osborn" else HOW_INTEGRAL


def route_row(case: Case, route: Route, status: str) -> None:
    case.routes.append(route)
    case.rows.append(Row(f"route: {route.name}", route.value, route.error, route.how, status, route.note))


def action_route(case: Case, res: IntegralResult, charge, tol: float, name: str, how: str, label: str, mismatch):
    """Add the route row of an action integral ``res`` (S / 8 pi^2, signed by Q) against the charge Q.

    An integral that disagrees beyond the error bars fails with ``mismatch(value, error)``, converged or
    not; a converged one that cannot be decided is a doubt naming ``label`` (for a non-converged one
    the caller says why and advises).
    """
    val, err = case.sign * res.value / INSTANTON_ACTION, res.error / INSTANTON_ACTION  # s = 8 pi^2 |q|
    status = judge(abs(val - charge.value), err + charge.error, tol)  # the error bar decides, whatever the budget
    if status == "DISAGREES":
        case.failures.append(mismatch(val, err))
    elif res.converged and status == "undecided":
        case.doubts.append(f"{label} {val:.10g} +- {err:.1e} and Q cannot be decided to {tol:.0e}")
    note = "s = 8 pi^2 |q|, sign from Q" + ("" if res.converged else "; NOT converged")
    agrees = {"agrees": True, "DISAGREES": False}.get(status)
    route_row(case, Route(name, val, err, True, agrees, note, how), status)


def volume_check(case: Case, check: IntegralResult, charge: IntegralResult, budget: int, tol: float) -> None:
    """The volume integral of s against the flux figure of Q: a disagreement beyond the error bars fails."""
    if not check.converged:
        _not_converged(case, "volume check", check, budget)
    action_route(
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


def _not_converged(case: Case, what: str, res: IntegralResult, budget: int) -> None:
    case.doubts.append(f"{what} integral not converged: {res.message or 'error above tolerance'}")
    if "density is singular at" in res.message:  # integrable but slow: say so rather than only more budget
        case.advise("the density grows like a power near the point named: check the potential's factor and sign there")
    if any(NO_BUDGET in a for a in case.advice):  # a non-integrable point: neither budget nor hints help
        return
    case.advise(f"raise the budget (max_points={4 * budget:,}; command line --budget {4 * budget})")
    if case.peak is None or not any("poorly resolved" in a for a in case.advice):
        case.advise("or give hints where the action sits (center=..., scale=...; --center, --scale)")


def charge_findings(case: Case, charge: IntegralResult, expected, declared, tol: float, budget: int) -> None:
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
        case.nearest, status = n, judge(abs(q - n), e, tol)
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
            case.rows.append(Row(signed_offset("Q", int(want)), off, e, how, judge(off, e, tol), f"{what} charge"))
        if off - e > tol:
            flip = orientation_mistake(q, e, int(want), tol)
            case.failures.append(flip or f"{label} differs from {what} {int(want)}")
    if declared is not None:
        case.rows.append(Row("charge declared by the construction", float(declared), None, HOW_INPUT, "input"))


def action_findings(case: Case, action: IntegralResult, charge, budget: int) -> None:
    units, err = action.value / INSTANTON_ACTION, action.error / INSTANTON_ACTION
    case.rows.append(
        Row("action S / 8 pi^2", units, err, _how(action), "", "" if action.converged else "NOT converged")
    )
    if not action.converged:
        _not_converged(case, "action", action, budget)


def curvature_findings(case: Case, field, charge, action, rule, charge_method: str, tol: float) -> None:
    """Closed forms vs the potential's curvature; the margin and the residual from that curvature."""
    try:
        case.sample = s = curvature_sample(field, rule.points, rule.weights, case.sign)
    except FieldEvaluationError as err:
        if isinstance(err.__cause__, NotImplementedError):  # a densities-only field: nothing to differentiate
            case.doubts.append(f"self-duality unchecked: the field offers no potential ({err.__cause__})")
            return
        case.failures.append(str(err))
        return
    peak = case.peak
    if peak is not None and peak.value > _BETWEEN * s.s_max and not any("poorly resolved" in a for a in case.advice):
        case.advise(
            f"the integrand is poorly resolved: the action density peaks between the rule's shells, at "
            f"{fmt_point(peak.point)} with s = {peak.value:.3g}, while the largest s on the rule's points is "
            f"{s.s_max:.3g}; pass center={fmt_point(peak.point)}, scale={peak.width:.2g} or more budget"
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
                f"curvature of A by {dev:.2e} (relative, largest at x = {fmt_point(s.worst[name])})"
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
    status = judge(abs(case.margin), case.margin_error, tol)
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
