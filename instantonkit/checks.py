"""The one-call ``verify`` report: is a field what it claims to be?

``verify(field)`` combines both integrals of :mod:`instantonkit.integrals` with the self-duality residual, the Bogomolny bound
``S >= 8 pi^2 |Q|`` and independent routes to the charge:

* ADHM data: the integral of Osborn's density ``s = -1/2 box box log det(Delta^dag Delta)``
  (Osborn, Nucl. Phys. B 159 (1979) 497 and Ann. Phys. 135 (1981) 373, from memory), fourth
  derivatives in the closed form of :func:`osborn_density` (derived here);
* the 't Hooft and JNR ansaetze: the pole count (k centres; JNR: poles minus one);
* potentials that are pure gauge at infinity: the Chern-Simons flux through a large S^3,
  ``Q = oint K_mu n_mu dS`` with ``K_mu = -(1/8 pi^2) eps_{mu nu rho sigma} tr(1/2 A_nu F_rho sigma
  - 1/3 A_nu A_rho A_sigma)``, ``q = d_mu K_mu`` (derived here from
  ``eps tr F F = 4 d_mu [eps tr(A d A + 2/3 A A A)]``, common practice); equal to ``Q`` for a
  potential that is smooth everywhere, and to the winding number of the asymptotic gauge map ``g``
  (``A -> g d g^-1``) as the radius grows.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from . import _validate
from . import fields as _fields
from . import quadrature as _quad
from . import quaternion as qt
from . import transforms as _transforms
from ._batching import run_batched
from .conventions import INSTANTON_ACTION, LEVI_CIVITA, PI
from .integrals import (  # re-exported: checks is the one place for "is it what it claims to be?"
    DEFAULT_MAX_POINTS,
    ENGINE_CHUNK,
    RULE_SAMPLE_POINTS,
    DensityRequest,
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    Layout,
    field_description,
    integrate,
    integrate_density,
    layout_of,
    total_action,
    total_charge,
)

__all__ = [
    "IntegralResult",
    "Route",
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
]


# -- Osborn's density --------------------------------------------------------------------------------


def _gram_coefficients(data):
    """G(x) = G0 + sum_mu x_mu G_mu + |x|^2 1 for G = Re(Delta^dag Delta) of ADHM data: (G0 (k,k), Gmu (4,k,k)).

    Reads the data through ADHMData's package-internal seams ``b_minus_p(x)`` and ``lam``.
    """
    def gram(x):
        bp = data.b_minus_p(jnp.asarray(x, dtype=jnp.float64))
        lam = jnp.asarray(data.lam)
        m = qt.qmat_mul(qt.qmat_dagger(lam), lam) + qt.qmat_mul(qt.qmat_dagger(bp), bp)
        return m[..., 0]

    g0 = gram(jnp.zeros(4))
    e = jnp.eye(4)
    gmu = jnp.stack([(gram(e[m]) - gram(-e[m])) / 2.0 for m in range(4)])
    return g0, gmu


def osborn_density(data, x):
    """Osborn's action density s = -1/2 box box log det G, G = Delta^dag Delta, at one point (4,) -> ().

    Args:
      data: ADHM data (:class:`instantonkit.adhm.ADHMData`, k instantons).
      x: one point (4,) float64 (jax-traceable).
    Returns:
      s(x), a () float64 jax array.

    For ADHM data G(x) = G0 + x_mu G_mu + |x|^2 1 is a real symmetric k x k matrix with
    d_mu d_nu G = 2 delta_mu nu 1.  With H = G^-1 and P_mu = H d_mu G (derived here by repeated use of
    d H = -H (dG) H):

        box box log det G = 48 sum_mu tr(H P_mu^2) - 96 tr H^2 - 2 sum_mu nu tr(P_mu P_nu P_mu P_nu)
                            - 4 tr((sum_mu P_mu^2)^2),

    which for k = 1 is -96 rho^4 / (|x - a|^2 + rho^2)^4, i.e. s = 48 rho^4 / (...)^4 (BPST).
    Formula s = -1/2 box box log det: Osborn, Nucl. Phys. B 159 (1979) 497 (from memory).
    Raises nothing itself; the data's own seams raise for points of the wrong shape.
    """
    g0, gmu = _gram_coefficients(data)
    x = jnp.asarray(x, dtype=jnp.float64)
    k = g0.shape[0]
    g = g0 + jnp.einsum("m,mij->ij", x, gmu) + jnp.sum(x * x) * jnp.eye(k)
    dg = gmu + 2.0 * x[:, None, None] * jnp.eye(k)[None]
    h = jnp.linalg.inv(g)
    p = jnp.einsum("ij,mjk->mik", h, dg)
    pp = jnp.einsum("mij,mjk->mik", p, p)  # P_mu^2 per mu
    sp = jnp.sum(pp, axis=0)
    t1 = jnp.einsum("ij,mji->", h, pp)
    t2 = jnp.trace(h @ h)
    pq = jnp.einsum("mij,njk->mnik", p, p)  # P_mu P_nu
    t3 = jnp.einsum("mnij,mnji->", pq, pq)
    t4 = jnp.trace(sp @ sp)
    bb = 48.0 * t1 - 96.0 * t2 - 2.0 * t3 - 4.0 * t4
    return -0.5 * bb


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class _OsbornField:
    """ADHM data seen through Osborn's density only (action_density is :func:`osborn_density`)."""

    data: Any

    def potential(self, x):
        return self.data.potential(x)

    def action_density(self, x):
        return osborn_density(self.data, x)

    def describe(self) -> str:
        """Field hook: one line for reports."""
        return f"Osborn's density of {field_description(self.data)}"

    def tree_flatten(self):
        return (self.data,), None

    @classmethod
    def tree_unflatten(cls, aux, children):
        return cls(children[0])


# -- Chern-Simons flux through a large sphere -------------------------------------------------------


def _cs_flux(field, centre: np.ndarray, radius: float, n_angular: int, method: str) -> float:
    """oint_{|x - c| = R} K_mu n_mu dS with K_mu = -(1/8 pi^2) eps tr(1/2 A_nu F_rs - 1/3 A_nu A_r A_s)."""
    dirs, w = _quad.sphere3_nodes(n_angular)
    pts = centre[None, :] + radius * dirs
    a = np.asarray(_fields.evaluate(field, pts, "potential", method=method, chunk_size=ENGINE_CHUNK))
    f = np.asarray(_fields.evaluate(field, pts, "field_strength", method=method, chunk_size=ENGINE_CHUNK))
    af = np.einsum("pnij,prsji->pnrs", a, f)  # tr(A_nu F_rs)
    aa = np.einsum("prij,psjk->prsik", a, a)
    aaa = np.einsum("pnij,prsji->pnrs", a, aa)  # tr(A_nu A_r A_s)
    k = -(1.0 / (8.0 * PI**2)) * np.einsum("mnrs,pnrs->pm", LEVI_CIVITA, 0.5 * af - aaa / 3.0)
    flux = np.real(np.einsum("pm,pm->p", k, dirs)) * radius**3
    return float(np.sum(w * flux))


#: Default sphere radius of surface_winding, in units of the field's extent (far out in the pure gauge).
_WINDING_RADIUS = 200.0
#: Rounding floor added to the winding's error estimate (the flux is a sum of O(1) terms).
_WINDING_FLOOR = 1e-12


def surface_winding(field, *, center=None, radius=None, n_angular: int = 10, method: str = "auto") -> tuple[float, float]:
    """Chern-Simons flux through a large S^3 about ``center``: (value, error estimate).

    The flux at radii R and 2R; the value is the one at 2R and the error their difference plus a
    rounding floor.  Equals Q for potentials smooth everywhere (the regular-gauge BPST gives +1) and
    tends to the winding number of the gauge map at infinity.

    Args:
      field: a field or callable potential.
      center: (4,) centre of the sphere (default the mean of the field's layout centres).
      radius: R (default 200 x the field's extent, see :class:`Layout`).
      n_angular: S^3 parameter n of the angular rule (2 n^3 points per sphere).
      method: the engine's 'auto' | 'closed' | 'autodiff' for A and F.
    Returns:
      (value, error) floats.
    Raises:
      FieldEvaluationError when the potential or F cannot be evaluated on the spheres;
      ValueError for a bad ``center``.
    """
    field = _fields.as_field(field)
    layout = layout_of(field)
    c = layout.centres.mean(axis=0) if center is None else _validate.point("center", center)
    r = _WINDING_RADIUS * layout.extent if radius is None else float(radius)
    try:
        w1 = _cs_flux(field, c, r, n_angular, method)
        w2 = _cs_flux(field, c, 2.0 * r, n_angular, method)
    except (ValueError, TypeError, RuntimeError, ArithmeticError) as err:
        raise FieldEvaluationError(
            f"evaluating the potential of {field_description(field)} failed: {type(err).__name__}: {err}"
        ) from err
    return w2, abs(w2 - w1) + _WINDING_FLOOR


# -- verify ------------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class Route:
    """An independent determination of the charge, reported beside the integral of q.

    name: what was computed; value, error: its result (None when not available); decisive: whether
    a disagreement fails the verification; agrees: |value - Q| within errors and tolerance (None when
    not compared); note: caveats.
    """

    name: str
    value: float | None
    error: float | None
    decisive: bool
    agrees: bool | None
    note: str = ""


@dataclasses.dataclass(frozen=True)
class Verification:
    """The answer to "is this a charge-k (anti-)instanton?", with every number behind it.

    Fields hold floats (or None where a step failed); ``passed`` with ``reasons`` when it is False.
    ``str(report)`` is a table; :meth:`to_dict` gives a plain dict.
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

    def to_dict(self) -> dict:
        """Plain dict (numbers, strings, bools, lists and nested dicts) for scripts and JSON."""
        d = dataclasses.asdict(self)
        d["routes"] = [dataclasses.asdict(r) for r in self.routes]
        d["reasons"] = list(self.reasons)
        return d

    def __str__(self) -> str:
        def num(v, fmt=".12f"):
            return "-" if v is None else format(v, fmt)

        def err(v):
            return "" if v is None else f"+- {v:.1e}"

        per = f" per period {self.period:g}" if self.period is not None else ""
        rows = [("topological charge Q" + per, num(self.charge.value if self.charge else None),
                 err(self.charge.error if self.charge else None))]
        if self.nearest_integer is not None:
            rows.append(("nearest integer", str(self.nearest_integer), ""))
            rows.append((f"Q - ({self.nearest_integer})", num(self.distance, ".3e"), err(self.distance_error)))
        rows.append(("action / 8 pi^2" + per, num(self.action_units), err(self.action_units_error)))
        rows.append(("Bogomolny margin S/8pi^2 - |Q|", num(self.bogomolny_margin, ".3e"), err(self.bogomolny_margin_error)))
        rows.append((f"{self.duality} residual, max", num(self.residual_max, ".3e"), ""))
        rows.append((f"{self.duality} residual, weighted mean", num(self.residual_mean, ".3e"), ""))
        if self.constraint_residual is not None:
            rows.append(("ADHM constraint residual", num(self.constraint_residual, ".3e"), ""))
        for r in self.routes:
            mark = {True: "agrees", False: "DISAGREES", None: "(not compared)"}[r.agrees]
            rows.append((f"route: {r.name}", num(r.value), f"{err(r.error)} {mark}".strip()))
        width = max(len(a) for a, _, _ in rows) + 2
        lines = [f"instantonkit verification of {self.field}"]
        lines.append("-" * (width + 40))
        for a, b, c in rows:
            lines.append(f"  {a:<{width}}{b:>20}  {c}")
        lines.append("-" * (width + 40))
        if self.charge is not None:
            lines.append(f"  rule: {self.charge.rule}")
            lines.append(f"  points: charge {self.charge.evaluations:,}" +
                         (f", action {self.action.evaluations:,}" if self.action else ""))
        verdict = "PASSED" if self.passed else "FAILED"
        lines.append(f"  verdict: {verdict}")
        for reason in self.reasons:
            lines.append(f"    - {reason}")
        return "\n".join(lines)


def _whole_chunks(quantity_fn, field, points: np.ndarray) -> np.ndarray:
    """quantity_fn(field, points) (M,) float64 in whole ENGINE_CHUNK batches: the integrals' compiled size."""
    out = run_batched(lambda p: quantity_fn(field, p, chunk_size=ENGINE_CHUNK), [points], ENGINE_CHUNK)
    return np.zeros(0) if out is None else np.asarray(out, dtype=np.float64)


def _residual_stats(field, rule: _quad.Rule, sign: int) -> tuple[float, float]:
    """(max, s-weighted mean) of the (anti-)self-duality residual over the points of ``rule``, by the engine.

    sign +1: |F - *F| / |F| from :func:`fields.self_duality_residual`; sign -1: |F + *F| / |F|, the
    self-duality residual of the parity image (evaluated at the parity-mapped points, where its F is
    F with the index signs of P, so the value is exact).  Weights |w s| with s from
    :func:`fields.action_density` of the same field.
    """
    pts, target = rule.points, field
    if sign < 0:
        pts, target = pts * _transforms.PARITY, _transforms.parity(field)
    res = _whole_chunks(_fields.self_duality_residual, target, pts)
    dens = _whole_chunks(_fields.action_density, target, pts)
    wd = np.abs(rule.weights * dens)
    mean = float(np.sum(wd * res) / np.sum(wd)) if np.sum(wd) > 0 else 0.0
    return float(np.max(res)), mean


def verify(
    field,
    *,
    expected_charge: int | None = None,
    rtol: float = 1e-10,
    atol: float = 1e-10,
    center=None,
    scale=None,
    period=None,
    max_points: int = DEFAULT_MAX_POINTS,
    charge_tol: float = 1e-6,
    duality_tol: float = 1e-6,
    constraint_tol: float = 1e-10,
    routes: bool = True,
    winding: bool | None = None,
    charge_method: str = "auto",
    progress=None,
) -> Verification:
    """Check that ``field`` is a charge-k (anti-)instanton and report every number behind the verdict.

    Integrates q and s, then reports the nearest integer n to Q and Q - n with its error, S/8pi^2,
    the Bogomolny margin S/8pi^2 - |Q| (>= 0 always; 0 for (anti-)self-dual fields), the
    (anti-)self-duality residual |F -+ *F|/|F| (sign from Q) as max and s-weighted mean over a sample
    of the final rule of the action integral, the constraint residual where the field has the
    ``constraint_residual`` hook, and the independent routes of the module docstring.

    Args:
      field: a field or callable potential.
      expected_charge: the instanton number the field should have (None: any nonzero integer).
      rtol, atol: tolerances of both integrals; ``atol`` is for Q and for S / 8 pi^2.
      center, scale, period: the integration layout (see :func:`instantonkit.integrals.layout_of`).
      max_points: budget of density evaluations per integral.
      charge_tol: tolerance of |Q - n| (and of unconverged errors); duality_tol: of the Bogomolny
        margin and the mean residual; constraint_tol: of the constraint residual.
      routes: compute the independent routes; winding: the sphere-flux route (None: for potentials
        declared 'regular' and for fields that offer no hook beyond a potential, see :func:`_routes`).
      charge_method: 'auto' (the field's closed-form q where it has one), 'closed' (eps tr F F from
        the closed-form F) or 'autodiff' (differentiate the potential).
      progress: as in :func:`instantonkit.integrals.integrate_density`.
    Returns:
      Verification; ``passed`` requires both integrals converged to within ``charge_tol``,
      |Q - n| <= charge_tol, n == expected_charge (if given) and n != 0, |margin| <= duality_tol and
      mean residual <= duality_tol, constraint residual <= constraint_tol, decisive routes agreeing.
    Raises:
      ValueError for bad tolerances, budget, centre, scale or period.  Divergent densities and
      failing fields give passed = False with the reason, not an exception.
    """
    field = _fields.as_field(field)
    layout = layout_of(field, center, scale, period)
    kw = dict(rtol=rtol, atol=atol, max_points=max_points, progress=progress)
    reasons: list[str] = []
    charge, action, rule = _integrals(field, layout, charge_method, kw, reasons)
    found = _Findings()
    if charge is not None:
        _charge_findings(found, charge, expected_charge, charge_tol, reasons)
    if action is not None:
        _action_findings(found, action, charge_tol, reasons)
    if charge is not None and action is not None:
        _duality_findings(found, field, charge, rule, duality_tol, reasons)
    cres = _constraint_findings(field, constraint_tol, reasons)
    route_list: list[Route] = []
    if routes and charge is not None:
        route_list = _routes(field, charge, layout, kw, charge_tol, winding)
        for r in route_list:
            if r.decisive and r.agrees is False:
                reasons.append(f"independent route disagrees: {r.name} gives {r.value} ({r.note})".strip())
    return Verification(
        field=field_description(field), charge=charge, action=action, nearest_integer=found.nearest,
        distance=found.distance, distance_error=found.distance_error, action_units=found.units,
        action_units_error=found.units_error, bogomolny_margin=found.margin,
        bogomolny_margin_error=found.margin_error, bound_holds=found.bound, saturated=found.saturated,
        duality=found.duality, residual_max=found.residual_max, residual_mean=found.residual_mean,
        constraint_residual=cres, routes=tuple(route_list), passed=not reasons, reasons=tuple(reasons),
        period=layout.period, expected_charge=None if expected_charge is None else int(expected_charge),
    )


@dataclasses.dataclass
class _Findings:
    """The numbers verify derives from the integrals, filled in step by step (None where not reached)."""

    nearest: int | None = None
    distance: float | None = None
    distance_error: float | None = None
    units: float | None = None
    units_error: float | None = None
    margin: float | None = None
    margin_error: float | None = None
    bound: bool | None = None
    saturated: bool | None = None
    duality: str = "self-duality"
    residual_max: float | None = None
    residual_mean: float | None = None


def _integrals(field, layout: Layout, charge_method: str, kw: dict, reasons: list):
    """(charge, action, sampled final rule of the action) as far as they can be computed.

    A divergent density or a failing field ends the step with its message in ``reasons``; a charge
    computed before the action failed is kept.
    """
    charge = action = rule = None
    try:
        charge = integrate(field, (DensityRequest("charge_density", charge_method),), layout, **kw).results[0]
        outcome = integrate(field, (DensityRequest("action_density", atol=kw["atol"] * INSTANTON_ACTION),), layout,
                            rule_points=RULE_SAMPLE_POINTS, **kw)  # atol is for Q and for S / 8 pi^2
        action, rule = outcome.results[0], outcome.rule
    except (DivergentIntegralError, FieldEvaluationError) as err:
        reasons.append(str(err))
    return charge, action, rule


def _charge_findings(found: _Findings, charge: IntegralResult, expected, charge_tol: float, reasons: list) -> None:
    """Nearest integer, distance to it, and the charge's reasons to fail."""
    found.nearest = nearest = int(round(charge.value))
    found.distance = distance = charge.value - nearest
    found.distance_error = charge.error
    if not charge.converged and charge.error > charge_tol:
        reasons.append(f"charge integral not converged: {charge.message}")
    if abs(distance) > max(charge_tol, 0.0):
        reasons.append(f"charge is not an integer: Q = {charge.value:.10g}, |Q - {nearest}| = {abs(distance):.2e} > {charge_tol:.0e}")
    if expected is not None and nearest != int(expected):
        reasons.append(f"charge {nearest} differs from the expected {int(expected)}")
    if nearest == 0:
        reasons.append("charge 0: not an instanton")
    if nearest < 0:
        found.duality = "anti-self-duality"


def _action_findings(found: _Findings, action: IntegralResult, charge_tol: float, reasons: list) -> None:
    """S / 8 pi^2 with its error, and the action's reason to fail."""
    found.units = action.value / INSTANTON_ACTION
    found.units_error = action.error / INSTANTON_ACTION
    if not action.converged and found.units_error > charge_tol:
        reasons.append(f"action integral not converged: {action.message}")


def _duality_findings(found: _Findings, field, charge: IntegralResult, rule, duality_tol: float, reasons: list) -> None:
    """The Bogomolny margin and the (anti-)self-duality residual on the sampled final rule."""
    found.margin = margin = found.units - abs(charge.value)
    found.margin_error = margin_err = found.units_error + charge.error
    found.bound = margin >= -max(margin_err, 1e-12)
    found.saturated = abs(margin) <= max(duality_tol, margin_err)
    duality = found.duality
    if not found.bound:
        reasons.append(f"Bogomolny bound violated: S/8pi^2 - |Q| = {margin:.3e} (error {margin_err:.1e})")
    elif not found.saturated:
        reasons.append(f"not {duality.replace('-duality', '-dual')}: S/8pi^2 - |Q| = {margin:.3e} > {duality_tol:.0e}")
    sign = -1 if (found.nearest is not None and found.nearest < 0) else 1
    try:
        found.residual_max, found.residual_mean = _residual_stats(field, rule, sign)
    except (ValueError, TypeError, RuntimeError) as err:
        reasons.append(f"duality residual could not be evaluated: {type(err).__name__}: {err}")
    if found.residual_mean is not None and found.residual_mean > duality_tol:
        reasons.append(f"{duality} residual (weighted mean) {found.residual_mean:.3e} > {duality_tol:.0e}")


def _constraint_findings(field, constraint_tol: float, reasons: list) -> float | None:
    """The field's constraint residual (``constraint_residual`` hook) and its reason to fail, or None."""
    residual = _fields.hook(field, "constraint_residual")
    if residual is None:
        return None
    cres = float(residual())
    if cres > constraint_tol:
        reasons.append(f"ADHM constraint residual {cres:.3e} > {constraint_tol:.0e}")
    return cres


def _agree(value, error, charge, tol) -> bool | None:
    if value is None or charge is None:
        return None
    return abs(value - charge.value) <= max(tol, 10.0 * (error + charge.error))


def _only_potential(field) -> bool:
    """True when the field offers no hook beyond ``describe``: a bare potential (a user callable, say).

    For such a field the sphere flux is the only other route to the charge, so it is on by default.
    """
    return all(_fields.hook(field, name) is None for name in _fields.HOOKS if name != "describe")


def _osborn_route(field, charge, layout: Layout, kw: dict, tol: float) -> Route:
    """Q from the integral of Osborn's density, for fields with the ``log_det`` hook (ADHM data)."""
    name = "Osborn density -1/2 box box log det(Delta^dag Delta)"
    try:
        req = DensityRequest("action_density", name="Osborn action", label="Osborn density",
                             atol=kw["atol"] * INSTANTON_ACTION)
        res = integrate(_OsbornField(field), (req,), layout, **kw).results[0]
    except (DivergentIntegralError, FieldEvaluationError) as e:
        return Route(name, None, None, True, False, str(e))
    declared = _fields.hook(field, "charge")
    sign = -1 if declared is not None and declared < 0 else 1  # s = 8 pi^2 |q|: the sign is the construction's
    val, err = sign * res.value / INSTANTON_ACTION, res.error / INSTANTON_ACTION
    return Route(name, val, err, True, _agree(val, err, charge, tol), "" if res.converged else res.message)


def _routes(field, charge, layout: Layout, kw, tol, winding) -> list[Route]:
    """The independent routes to the charge that the field's hooks allow.

    Osborn's density: fields with ``log_det``.  Pole count: fields with ``pole_count``.  Sphere flux
    (R^4 only): when ``winding`` is True, or by default for potentials declared smooth (attribute
    ``gauge == 'regular'`` and, for ADHM data with ``constraint_residual``, |charge| 1) and for fields
    that offer no hook beyond a potential; decisive only for the smooth ones.
    """
    out: list[Route] = []
    if _fields.hook(field, "log_det") is not None:
        out.append(_osborn_route(field, charge, layout, kw, tol))
    pole_count = _fields.hook(field, "pole_count")
    if pole_count is not None:
        count, text = pole_count()
        val = float(count)
        out.append(Route(text, val, 0.0, True, _agree(val, 0.0, charge, tol)))
    declared = _fields.hook(field, "charge")
    is_adhm = _fields.hook(field, "constraint_residual") is not None
    smooth = getattr(field, "gauge", None) == "regular" and (not is_adhm or (declared is not None and abs(declared) == 1))
    if winding is None:
        winding = smooth or _only_potential(field)
    if winding and layout.period is None:
        name = "Chern-Simons flux through a large S^3 (winding at infinity)"
        note = "" if smooth else "equals Q only for a potential smooth everywhere"
        try:
            val, err = surface_winding(field)
            out.append(Route(name, val, err, bool(smooth), _agree(val, err, charge, tol), note))
        except FieldEvaluationError as e:
            out.append(Route(name, None, None, bool(smooth), None, str(e)))
    return out
