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

from . import fields as _fields
from . import quadrature as _quad
from .conventions import INSTANTON_ACTION, LEVI_CIVITA, PI
from .integrals import (  # re-exported: checks is the one place for "is it what it claims to be?"
    _CHUNK,
    _MAX_ANGULAR_LEVEL,
    DEFAULT_MAX_POINTS,
    DivergentIntegralError,
    FieldEvaluationError,
    IntegralResult,
    _angular_counts,
    _describe,
    _evaluator,
    _integrate,
    _layout,
    _shell_rule,
    integrate_density,
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
    """G(x) = G0 + sum_mu x_mu G_mu + |x|^2 1 for G = Re(Delta^dag Delta) of ADHM data: (G0 (k,k), Gmu (4,k,k))."""
    from . import quaternion as qt  # local: keeps the import graph flat

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

    For ADHM data G(x) = G0 + x_mu G_mu + |x|^2 1 is a real symmetric k x k matrix with
    d_mu d_nu G = 2 delta_mu nu 1.  With H = G^-1 and P_mu = H d_mu G (derived here by repeated use of
    d H = -H (dG) H):

        box box log det G = 48 sum_mu tr(H P_mu^2) - 96 tr H^2 - 2 sum_mu nu tr(P_mu P_nu P_mu P_nu)
                            - 4 tr((sum_mu P_mu^2)^2),

    which for k = 1 is -96 rho^4 / (|x - a|^2 + rho^2)^4, i.e. s = 48 rho^4 / (...)^4 (BPST).
    Formula s = -1/2 box box log det: Osborn, Nucl. Phys. B 159 (1979) 497 (from memory).
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
    a = np.asarray(_fields.evaluate(field, pts, "potential", method=method, chunk_size=_CHUNK))
    f = np.asarray(_fields.evaluate(field, pts, "field_strength", method=method, chunk_size=_CHUNK))
    af = np.einsum("pnij,prsji->pnrs", a, f)  # tr(A_nu F_rs)
    aa = np.einsum("prij,psjk->prsik", a, a)
    aaa = np.einsum("pnij,prsji->pnrs", a, aa)  # tr(A_nu A_r A_s)
    k = -(1.0 / (8.0 * PI**2)) * np.einsum("mnrs,pnrs->pm", LEVI_CIVITA, 0.5 * af - aaa / 3.0)
    flux = np.real(np.einsum("pm,pm->p", k, dirs)) * radius**3
    return float(np.sum(w * flux))


def surface_winding(field, *, center=None, radius=None, n_angular: int = 10, method: str = "auto") -> tuple[float, float]:
    """Chern-Simons flux through a large S^3 about ``center``: (value, error estimate).

    The flux at radii R and 2R (R = 200 x the field's scale unless given); the value is the one at 2R
    and the error their difference plus a rounding floor.  Equals Q for potentials smooth everywhere
    (the regular-gauge BPST gives +1) and tends to the winding number of the gauge map at infinity.
    """
    field = _fields.as_field(field)
    centres, scales, _, _ = _layout(field, None, None, None)
    c = centres.mean(axis=0) if center is None else np.asarray(center, dtype=np.float64)
    big = float(np.max(scales) + np.max(np.linalg.norm(centres - centres.mean(0), axis=1)))
    r = 200.0 * big if radius is None else float(radius)
    try:
        w1 = _cs_flux(field, c, r, n_angular, method)
        w2 = _cs_flux(field, c, 2.0 * r, n_angular, method)
    except (ValueError, TypeError, RuntimeError, ArithmeticError) as err:
        raise FieldEvaluationError(f"evaluating the potential of {_describe(field)} failed: {type(err).__name__}: {err}") from err
    return w2, abs(w2 - w1) + 1e-12


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


def _residual_stats(field, pieces, centres, scales, period, sign: int, method: str,
                    max_samples: int = 65536) -> tuple[float, float]:
    """(max, s-weighted mean) of |F - sign *F| / |F| over the final shells (angular levels capped).

    Each final shell of each piece is sampled at min(its angular level, cap), the cap chosen so that
    at most ``max_samples`` points are used; weights are the rule weights times s = -1/2 sum tr F F.
    """
    periodic = period is not None
    cap = _MAX_ANGULAR_LEVEL
    while cap > 0:
        total = 0
        for p in pieces:
            for lev in np.minimum(p.la, cap):
                n, nt = _angular_counts(int(lev), periodic)
                total += 2 * n**3 if not periodic else 2 * n * n * nt
        if total <= max_samples:
            break
        cap -= 1
    pts, wts = [], []
    for p in pieces:
        for j, lev in enumerate(np.minimum(p.la, cap)):
            a, w = _shell_rule(p, j, int(lev), centres, scales, period)
            pts.append(a)
            wts.append(w)
    pts, wts = np.concatenate(pts), np.concatenate(wts)
    res = np.empty(pts.shape[0])
    dens = np.empty(pts.shape[0])
    for start in range(0, pts.shape[0], _CHUNK):
        chunk = pts[start : start + _CHUNK]
        m = chunk.shape[0]
        if m < _CHUNK:  # one compiled size for every call
            chunk = np.concatenate([chunk, np.broadcast_to(chunk[0], (_CHUNK - m, 4))])
        f = np.asarray(_fields.field_strength(field, chunk, method=method, chunk_size=_CHUNK))[:m]
        fd = 0.5 * np.einsum("mnrs,prsij->pmnij", LEVI_CIVITA, f)
        num = np.sqrt(np.sum(np.abs(f - sign * fd) ** 2, axis=(1, 2, 3, 4)))
        den = np.sqrt(np.sum(np.abs(f) ** 2, axis=(1, 2, 3, 4)))
        res[start : start + m] = np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)
        dens[start : start + m] = -0.5 * np.real(np.einsum("pmnij,pmnji->p", f, f))
    wd = np.abs(wts * dens)
    mean = float(np.sum(wd * res) / np.sum(wd)) if np.sum(wd) > 0 else 0.0
    return float(np.max(res)), mean


def _pole_count(field):
    """Instanton number read off a scalar ansatz: (count, description) or None."""
    name = type(field).__name__
    if name == "ThooftField":
        return int(np.asarray(field.centers).reshape(-1, 4).shape[0]), "'t Hooft poles (number of centres)"
    if name == "JNRField":
        return int(np.asarray(field.poles).reshape(-1, 4).shape[0]) - 1, "JNR poles minus one"
    if name == "ParityImage" and hasattr(field, "field"):
        got = _pole_count(field.field)
        if got is not None:
            return -got[0], got[1] + ", parity image"
    return None


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

    Integrates q (``charge_method``: 'auto' uses the field's closed-form q where it has one, 'closed'
    forces eps tr F F from the closed-form F, 'autodiff' differentiates the potential) and s,
    then reports the nearest integer n to Q and Q - n with its error, S/8pi^2, the Bogomolny margin
    S/8pi^2 - |Q| (>= 0 always; 0 for (anti-)self-dual fields), the (anti-)self-duality residual
    |F -+ *F|/|F| (sign from Q) as max and s-weighted mean over the integration points, the ADHM
    constraint residual where the field has data, and the independent routes of the module docstring.
    ``rtol``/``atol`` apply to Q and to S / 8 pi^2.  ``passed`` requires: both integrals converged to within ``charge_tol``, |Q - n| <= charge_tol,
    n == expected_charge (if given) and n != 0, |margin| <= duality_tol and mean residual
    <= duality_tol, constraint residual <= constraint_tol, decisive routes agreeing.
    ``winding``: compute the sphere flux (None: for potentials declared 'regular' and for callables).
    Divergent densities and failing fields give passed = False with the reason, not numbers.
    """
    field = _fields.as_field(field)
    desc = _describe(field)
    reasons: list[str] = []
    kw = dict(rtol=rtol, atol=atol, max_points=max_points, progress=progress)
    charge = action = None
    pieces = None
    try:
        centres, scales, per, _ = _layout(field, center, scale, period)
        charge, _ = _integrate(_evaluator(field, "charge_density", charge_method, "charge density"), "charge",
                               centres, scales, per, **kw)
        kw_s = dict(kw, atol=atol * INSTANTON_ACTION)  # atol is for Q and for S / 8 pi^2
        action, pieces = _integrate(_evaluator(field, "action_density", "auto", "action density"), "action",
                                    centres, scales, per, **kw_s)
    except (DivergentIntegralError, FieldEvaluationError) as err:
        reasons.append(str(err))
        per = period
    nearest = distance = dist_err = units = units_err = margin = margin_err = None
    bound = saturated = None
    rmax = rmean = None
    duality = "self-duality"
    if charge is not None:
        nearest = int(round(charge.value))
        distance = charge.value - nearest
        dist_err = charge.error
        if not charge.converged and charge.error > charge_tol:
            reasons.append(f"charge integral not converged: {charge.message}")
        if abs(distance) > max(charge_tol, 0.0):
            reasons.append(f"charge is not an integer: Q = {charge.value:.10g}, |Q - {nearest}| = {abs(distance):.2e} > {charge_tol:.0e}")
        if expected_charge is not None and nearest != int(expected_charge):
            reasons.append(f"charge {nearest} differs from the expected {int(expected_charge)}")
        if nearest == 0:
            reasons.append("charge 0: not an instanton")
        if nearest < 0:
            duality = "anti-self-duality"
    if action is not None:
        units = action.value / INSTANTON_ACTION
        units_err = action.error / INSTANTON_ACTION
        if not action.converged and units_err > charge_tol:
            reasons.append(f"action integral not converged: {action.message}")
    if charge is not None and action is not None:
        margin = units - abs(charge.value)
        margin_err = units_err + charge.error
        bound = margin >= -max(margin_err, 1e-12)
        saturated = abs(margin) <= max(duality_tol, margin_err)
        if not bound:
            reasons.append(f"Bogomolny bound violated: S/8pi^2 - |Q| = {margin:.3e} (error {margin_err:.1e})")
        elif not saturated:
            reasons.append(f"not {duality.replace('-duality', '-dual')}: S/8pi^2 - |Q| = {margin:.3e} > {duality_tol:.0e}")
        sign = -1 if (nearest is not None and nearest < 0) else 1
        try:
            rmax, rmean = _residual_stats(field, pieces, centres, scales, per, sign, "auto")
        except (ValueError, TypeError, RuntimeError) as err:
            reasons.append(f"duality residual could not be evaluated: {type(err).__name__}: {err}")
        if rmean is not None and rmean > duality_tol:
            reasons.append(f"{duality} residual (weighted mean) {rmean:.3e} > {duality_tol:.0e}")
    cres = None
    if hasattr(field, "constraint_residual"):
        cres = float(field.constraint_residual())
        if cres > constraint_tol:
            reasons.append(f"ADHM constraint residual {cres:.3e} > {constraint_tol:.0e}")
    found: list[Route] = []
    if routes and charge is not None:
        found = _routes(field, charge, centres, scales, per, kw, charge_tol, winding)
        for r in found:
            if r.decisive and r.agrees is False:
                reasons.append(f"independent route disagrees: {r.name} gives {r.value} ({r.note})".strip())
    return Verification(
        field=desc, charge=charge, action=action, nearest_integer=nearest, distance=distance,
        distance_error=dist_err, action_units=units, action_units_error=units_err, bogomolny_margin=margin,
        bogomolny_margin_error=margin_err, bound_holds=bound, saturated=saturated, duality=duality,
        residual_max=rmax, residual_mean=rmean, constraint_residual=cres, routes=tuple(found),
        passed=not reasons, reasons=tuple(reasons), period=per,
        expected_charge=None if expected_charge is None else int(expected_charge),
    )


def _agree(value, error, charge, tol) -> bool | None:
    if value is None or charge is None:
        return None
    return abs(value - charge.value) <= max(tol, 10.0 * (error + charge.error))


def _routes(field, charge, centres, scales, per, kw, tol, winding) -> list[Route]:
    out: list[Route] = []
    if hasattr(field, "constraint_residual") and hasattr(field, "log_det") and centres is not None:
        name = "Osborn density -1/2 box box log det(Delta^dag Delta)"
        try:
            kw_s = dict(kw, atol=kw["atol"] * INSTANTON_ACTION)
            res, _ = _integrate(_evaluator(_OsbornField(field), "action_density", "auto", "Osborn density"),
                                "Osborn action", centres, scales, per, **kw_s)
            sign = 1 if field.chirality > 0 else -1
            val, err = sign * res.value / INSTANTON_ACTION, res.error / INSTANTON_ACTION
            out.append(Route(name, val, err, True, _agree(val, err, charge, tol),
                             "" if res.converged else res.message))
        except (DivergentIntegralError, FieldEvaluationError) as e:
            out.append(Route(name, None, None, True, False, str(e)))
    poles = _pole_count(field)
    if poles is not None:
        val = float(poles[0])
        out.append(Route(poles[1], val, 0.0, True, _agree(val, 0.0, charge, tol)))
    gauge = getattr(field, "gauge", None)
    is_adhm = hasattr(field, "constraint_residual")
    smooth = gauge == "regular" and (not is_adhm or field.k == 1)
    if winding is None:
        winding = smooth or isinstance(field, _fields.CallableField)
    if winding and per is None:
        name = "Chern-Simons flux through a large S^3 (winding at infinity)"
        note = "" if smooth else "equals Q only for a potential smooth everywhere"
        try:
            val, err = surface_winding(field)
            out.append(Route(name, val, err, bool(smooth), _agree(val, err, charge, tol), note))
        except FieldEvaluationError as e:
            out.append(Route(name, None, None, bool(smooth), None, str(e)))
    return out
