"""The report of ``verify``: its data (`Verification`, `Row`, `Route`) and its text.

The text is a table whose every row says how it was obtained, then the verdict, reasons and advice.
Numbers are printed plainly: offsets with their sign folded in ("|Q + 1|", never "|Q - -1|"), the
quadrature rule in words.  `instantonkit.verification.checks` fills the report in.
"""

from __future__ import annotations

import dataclasses
import math
import numbers
import re

from ..integrals.drivers import IntegralResult

__all__ = [
    "Verification",
    "Row",
    "Route",
    "PASSED",
    "FAILED",
    "INCONCLUSIVE",
    "format_report",
    "signed_offset",
    "expected_integer",
    "orientation_mistake",
    "rule_in_words",
]

PASSED, FAILED, INCONCLUSIVE = "PASSED", "FAILED", "INCONCLUSIVE"

#: How a row was obtained (the report's "how" column).
HOW_INTEGRAL = "integral"
HOW_CURVATURE = "autodiff of A on the rule"
HOW_OTHER_RULE = "integral, other rule"
HOW_SURFACE = "flux through S^3"
HOW_INPUT = "input"
HOW_CONSTRUCTION = "by construction"
HOW_FLUX = "Osborn flux + exterior"
HOW_BALLS = "integral over balls"


@dataclasses.dataclass(frozen=True)
class Route:
    """An independent determination of the charge, reported beside the integral of q.

    name: what was computed; value, error: its result (None when not available); decisive: whether
    a disagreement fails the verification; agrees: True / False / None (undecided or not compared);
    note: caveats; how: how it was obtained (see the HOW_ constants).
    """

    name: str
    value: float | None
    error: float | None
    decisive: bool
    agrees: bool | None
    note: str = ""
    how: str = ""


@dataclasses.dataclass(frozen=True)
class Row:
    """One line of the report: label, value, error (None: none), how it was obtained, status.

    status: 'agrees' | 'DISAGREES' | 'undecided' for checks; 'input' or 'by construction' for facts
    that cannot fail; '' for plain numbers (the charge and action themselves).
    """

    label: str
    value: float | None
    error: float | None
    how: str
    status: str = ""
    note: str = ""


@dataclasses.dataclass(frozen=True)
class Verification:
    """The answer to "is this a charge-k (anti-)instanton?", with every number behind it.

    ``verdict`` is PASSED, FAILED or INCONCLUSIVE; ``passed`` is ``verdict == 'PASSED'``; ``reasons``
    say why it is not PASSED, ``advice`` what to do.  ``rows`` is the report table (each row with how
    it was obtained); ``str(report)`` prints it, `to_dict` gives a plain dict for JSON.
    The margin and residual fields hold the decisive values (see ``margin_how``).  For ADHM data
    ``charge`` and ``action`` come from Osborn's flux route and ``check`` is the volume integral of s
    that checks them (None for other fields).
    """

    field: str
    charge: IntegralResult | None
    action: IntegralResult | None
    nearest_integer: int | None
    distance: float | None
    distance_error: float | None
    action_units: float | None
    action_units_error: float | None
    bogomolny_margin: float | None
    bogomolny_margin_error: float | None
    bound_holds: bool | None
    saturated: bool | None
    duality: str
    residual_max: float | None
    residual_mean: float | None
    constraint_residual: float | None
    routes: tuple
    passed: bool
    reasons: tuple
    period: float | None = None
    expected_charge: int | None = None
    verdict: str = FAILED
    advice: tuple = ()
    rows: tuple = ()
    margin_how: str = ""
    closed_form_deviation: dict = dataclasses.field(default_factory=dict)
    peak: tuple | None = None
    budget: int = 0
    layout: str = ""
    check: IntegralResult | None = None

    def to_dict(self) -> dict:
        """Plain dict (numbers, strings, bools, lists and nested dicts) for scripts and JSON."""
        d = dataclasses.asdict(self)
        for key in ("routes", "rows"):
            d[key] = [dataclasses.asdict(r) for r in getattr(self, key)]
        d["reasons"], d["advice"] = list(self.reasons), list(self.advice)
        d["peak"] = None if self.peak is None else list(self.peak)
        return d

    def __str__(self) -> str:
        return format_report(self)


def expected_integer(value) -> int | None:
    """``expected_charge`` as an int: None, an integer or a float equal to one; anything else is refused.

    A charge on R^4 (and per period on R^3 x S^1) is an integer (common practice), so 1.5 or 1.9 is a
    mistake, never truncated; booleans, nan and infinities are refused too.
    Raises ValueError naming the value found.
    """
    if value is None:
        return None
    ok = isinstance(value, numbers.Real) and not isinstance(value, bool) and type(value).__name__ != "bool_"
    if ok and math.isfinite(float(value)) and float(value) == round(float(value)):
        return int(round(float(value)))
    raise ValueError(
        f"expected_charge must be an integer (the instanton number) or None; found {value!r} ({type(value).__name__})"
    )


def orientation_mistake(q: float, error: float, want: int, tol: float) -> str:
    """ "" or the reason naming an orientation mistake: Q = -n (to tol and its error bar) for an expected n != 0."""
    if want == 0 or abs(q + want) - error > tol:
        return ""
    kind = "an anti-instanton (anti-self-dual)" if want > 0 else "an instanton (self-dual)"
    return (
        f"orientation mistake: Q = {q:.10g} +- {error:.1e} is {-want:+d}, the opposite of the expected {want:+d}: "
        f"{kind} field where its opposite was expected; the likely cause is the 't Hooft symbol (eta where eta-bar "
        f"belongs, or the reverse) or the sign of the su(2) generators (conventions: instantons are self-dual, Q = +1)"
    )


def signed_offset(name: str, n: int) -> str:
    """'|Q - 3|', '|Q + 1|', '|Q|' for n = 3, -1, 0."""
    if n == 0:
        return f"|{name}|"
    return f"|{name} {'-' if n > 0 else '+'} {abs(n)}|"


def rule_in_words(rule: str) -> str:
    """The integrals' one-line rule description with the angular parameters explained.

    "S^3 parameter 5..41" becomes "angular rules of 250..137,842 points per shell" (the product rule on
    S^3 with parameter n has 2 n^3 points); "S^2 x circle parameter a..b" becomes "S^2 x circle rules
    of parameter a..b (finer with larger parameter)".
    """

    def s3(m: re.Match) -> str:
        lo, hi = int(m.group(1)), int(m.group(2))
        return f"angular rules of {2 * lo**3:,}..{2 * hi**3:,} points per shell"

    text = re.sub(r"S\^3 parameter (\d+)\.\.(\d+)", s3, rule)
    text = re.sub(
        r"S\^2 x circle parameter (\d+)\.\.(\d+)",
        r"S^2 x circle rules of parameter \1..\2 per shell (more points for larger parameter)",
        text,
    )
    return text.replace("Gauss-Legendre in u, r = L u/(1-u)", "Gauss-Legendre radial nodes in u = r / (L + r)")


#: What each "how obtained" entry means (printed under the table for the entries that occur).
_LEGEND = (
    ("integral", "adaptive quadrature of the density (closed form where the field has one)"),
    (
        "integral over balls",
        "product Gauss rule for s over a ball about each constituent (half the distance to the "
        "nearest other) times one period",
    ),
    (
        "autodiff of A on the rule",
        "F = dA - dA + [A, A] by automatic differentiation of the potential on the "
        "points of the final action rule, s and q = eps tr F F from it",
    ),
    (
        "integral, other rule",
        "integrated on a rule with shifted centres and 1.25 x the scales: other nodes, "
        "so agreement bounds the quadrature error",
    ),
    ("flux through S^3", "Chern-Simons current through spheres at two large radii"),
    (
        "Osborn flux + exterior",
        "the ball about the lumps by the flux of Osborn's grad box log det G through its sphere, the rest by "
        "the volume integral of the density: precise, and it takes Osborn's formula on trust inside the ball "
        "(the volume integral of s checks it)",
    ),
    ("input", "given by the construction; shown, not checked"),
    ("by construction", "holds by the field's construction; shown, not a check"),
)


def _num(v, fmt: str) -> str:
    if v is None:
        return "-"
    return format(float(v), fmt)


def _value_format(label: str) -> str:
    return (
        ".12f"
        if label.startswith(("topological charge", "action S", "route:", "charge declared", "pole count"))
        else ".3e"
    )


def format_report(v) -> str:
    """The report table of a Verification ``v``, its rule line, verdict, reasons and advice."""
    per = f" (per period {v.period:g})" if v.period is not None else ""
    rows = []
    for r in v.rows:
        err = "" if r.error is None else f"+- {r.error:.1e}"
        rows.append(
            (
                r.label + (per if r.label.startswith(("topological", "action")) else ""),
                _num(r.value, _value_format(r.label)),
                err,
                r.how,
                r.status,
                r.note,
            )
        )
    w0 = max([len(a) for a, *_ in rows] + [20]) + 2
    w3 = max([len(d) for _, _, _, d, _, _ in rows] + [3]) + 2
    w3 = max(w3, len("how obtained") + 2)
    lines = [f"instantonkit verification of {v.field}", "-" * (w0 + w3 + 52)]
    if rows:
        lines.append(f"  {'quantity':<{w0}}{'value':>20}  {'error':<10}  {'how obtained':<{w3}}status")
    for a, b, c, d, e, f in rows:
        tail = f"{e} ({f})" if e and f else e or f
        lines.append(f"  {a:<{w0}}{b:>20}  {c:<10}  {d:<{w3}}{tail}".rstrip())
    lines.append("-" * (w0 + w3 + 52))
    hows = {r.how for r in v.rows}
    for key, text in _LEGEND:
        if key in hows:
            lines.append(f"  {key}: {text}")
    lines.append(f"  layout: {v.layout}; budget {v.budget:,} points per integral")
    if v.charge is not None:
        lines.append(f"  rule: {rule_in_words(v.charge.rule)}")
        if v.check is not None:
            lines.append(f"  check rule: {rule_in_words(v.check.rule)}")
        lines.append(
            f"  points: charge {v.charge.evaluations:,}"
            + (f", action {v.action.evaluations:,}" if v.action else "")
            + (f", volume check {v.check.evaluations:,}" if v.check is not None else "")
        )
    lines.append(f"  verdict: {v.verdict}")
    for reason in v.reasons:
        lines.append(f"    - {reason}")
    if v.advice:
        lines.append("  advice:")
        for a in v.advice:
            lines.append(f"    - {a}")
    return "\n".join(lines)
