"""Evidence for ``verify`` that does not take a field's closed forms on trust.

* Osborn's density ``s = -1/2 box box log det(Delta^dag Delta)`` for ADHM data (Osborn, Nucl. Phys. B
  159 (1979) 497 and Ann. Phys. 135 (1981) 373, from memory; tests/test_checks.py checks it against
  mpmath's fourth derivatives and the closed-form action density), fourth derivatives in the closed form
  of `osborn_density` (derived here).
* The Chern-Simons flux through a large S^3, ``Q = oint K_mu n_mu dS`` with ``K_mu = -(1/8 pi^2)
  eps_{mu nu rho sigma} tr(1/2 A_nu F_rho sigma - 1/3 A_nu A_rho A_sigma)``, ``q = d_mu K_mu``
  (derived from ``eps tr F F = 4 d_mu [eps tr(A d A + 2/3 A A A)]``, common practice).
* `curvature_sample`: on the points of a quadrature rule, F by automatic differentiation of the
  potential against the field's closed forms, and the self-duality residual and the Bogomolny margin
  from that independent F (q = eps tr F F by `fields.charge_from_f`, never from s).
* `periodicity_mismatch` (gauge-invariant densities at x and x + period e_4) and
  `find_peak` (where the action density is largest, for advice on hints).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._pytree import PytreeFields
from ..core.conventions import INSTANTON_ACTION, LEVI_CIVITA, PI
from ..engine import fields as _fields
from ..integrals import quadrature as _quad
from ..integrals.drivers import ENGINE_CHUNK, FieldEvaluationError, field_description, layout_of
from ..integrals.flux import gram_coefficients

__all__ = [
    "osborn_density",
    "OsbornField",
    "surface_winding",
    "CurvatureSample",
    "curvature_sample",
    "periodicity_mismatch",
    "find_peak",
    "Peak",
    "CLOSED_FORM_TOL",
]

#: Exceptions of a field's evaluation that a probe turns into "could not evaluate" (user callables).
_EVAL_ERRORS = (ValueError, TypeError, RuntimeError, ArithmeticError, AttributeError, IndexError, KeyError)


# -- Osborn's density --------------------------------------------------------------------------------


def osborn_density(data, x):
    """Osborn's action density s = -1/2 box box log det G, G = Delta^dag Delta, at one point (4,) -> ().

    Args:
      data: ADHM data (`instantonkit.adhm.quaternionic.ADHMData`, k instantons).
      x: one point (4,) float64 (jax-traceable).
    Returns:
      s(x), a () float64 jax array.

    For ADHM data G(x) = G0 + x_mu G_mu + |x|^2 1 is a real symmetric k x k matrix with
    d_mu d_nu G = 2 delta_mu nu 1.  With H = G^-1 and P_mu = H d_mu G (derived here by repeated use of
    d H = -H (dG) H):

        box box log det G = 48 sum_mu tr(H P_mu^2) - 96 tr H^2 - 2 sum_mu nu tr(P_mu P_nu P_mu P_nu)
                            - 4 tr((sum_mu P_mu^2)^2),

    which for k = 1 is -96 rho^4 / (|x - a|^2 + rho^2)^4, i.e. s = 48 rho^4 / (...)^4 (BPST).
    Formula s = -1/2 box box log det: Osborn, Nucl. Phys. B 159 (1979) 497 (from memory; checked by
    test_osborn_density_matches_mpmath_box_box_log_det_for_k2 and
    test_osborn_density_equals_the_closed_form_action_density).
    Raises nothing itself; the data's own seams raise for points of the wrong shape.
    """
    g0, gmu = gram_coefficients(data)
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
    return -0.5 * jnp.real(bb)  # real for Hermitian G; the imaginary parts of the traces cancel


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class OsbornField(PytreeFields):
    """ADHM data seen through Osborn's density only (action_density is `osborn_density`)."""

    data: Any
    _leaves = ("data",)

    def potential(self, x):
        return self.data.potential(x)

    def action_density(self, x):
        return osborn_density(self.data, x)

    def describe(self) -> str:
        """Field hook: one line for reports."""
        return f"Osborn's density of {field_description(self.data)}"


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


def surface_winding(
    field, *, center=None, radius=None, n_angular: int = 10, method: str = "auto"
) -> tuple[float, float]:
    """Chern-Simons flux through a large S^3 about ``center``: (value, error estimate).

    The flux at radii R and 2R; the value is the one at 2R and the error their difference plus a
    rounding floor.  Equals Q for potentials smooth everywhere (the regular-gauge BPST gives +1) and
    tends to the winding number of the gauge map at infinity.

    Args:
      field: a field or callable potential.
      center: (4,) centre of the sphere (default the mean of the field's layout centres).
      radius: R (default 200 x the field's extent, see `Layout`).
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


# -- the curvature of the potential against the closed forms ----------------------------------------

#: Relative disagreement of a closed form with the curvature of the potential beyond which it is wrong
#: (autodiff and closed forms of float64 fields agree to ~1e-12 relative; common practice).
CLOSED_FORM_TOL = 1e-8

#: Relative deviation of the closed-form q from s / 8 pi^2 below which q is s / 8 pi^2 by construction.
_SAME_FORMULA_TOL = 1e-13


@dataclasses.dataclass(frozen=True)
class CurvatureSample:
    """What the potential's own curvature says on the points of a rule (F by jax.jacfwd of A).

    points: number of sample points; weight_s: sum w s(F) (about S on a good rule);
    margin: sum w (s(F) / 8 pi^2 - sign q(F)) with q = eps tr F F (the Bogomolny margin on the rule);
    residual_max, residual_mean: |F -+ *F| / |F| (sign of the charge), max and |w s|-weighted mean;
    deviations: {'field_strength' | 'action_density' | 'charge_density': max relative difference of the
    closed form from the potential's curvature (for F relative to max |F| + |A(x)|^2, the size of the
    terms that cancel)} for the closed forms the field has;
    worst: {name: point (4,) list where that difference is largest};
    q_is_s: the closed-form q equals sign s / 8 pi^2 pointwise to rounding (so Q and S are one integral);
    s_max: the largest s(F) on the points.
    """

    points: int
    weight_s: float
    margin: float
    residual_max: float
    residual_mean: float
    deviations: dict
    worst: dict
    q_is_s: bool
    s_max: float = 0.0


def _rel(a: np.ndarray, b: np.ndarray, floor=0.0) -> tuple[float, int]:
    """max_i |a_i - b_i| / (max |b| + floor_i) over the leading axis (per-point max over the rest), and its argmax.

    ``floor`` (M,) adds the size of the terms that cancel in b at each point (|A|^2 for F = dA + [A, A]
    near the singular centre of a singular gauge; |F| |A|^2 for s and q from that F), so that rounding
    there is not taken for a mistake.
    """
    diff = np.abs(a - b).reshape(a.shape[0], -1).max(axis=1)
    scale = (float(np.max(np.abs(b))) or 1.0) + np.asarray(floor)
    ratio = diff / scale
    i = int(np.argmax(ratio))
    return float(ratio[i]), i


def _whole_chunks(points: np.ndarray) -> np.ndarray:
    """``points`` (M, 4) padded to a multiple of ENGINE_CHUNK rows with copies of the first (slice results to M).

    Evaluated with chunk_size=ENGINE_CHUNK, every kernel then compiles once, at the size the integrals
    compile the closed forms for; a shrunk last batch compiles each kernel again (the autodiff F of
    k = 4 data took 12 s instead of 4 s in verify, measured).
    """
    m = points.shape[0]
    return np.concatenate([points, np.broadcast_to(points[:1], (-m % ENGINE_CHUNK, 4))]) if m else points


@jax.jit
def _derived(f):
    """s, q and *F of F (M, 4, 4, N, N), the conventions module's formulas."""
    return jax.vmap(_fields.action_from_f)(f), jax.vmap(_fields.charge_from_f)(f), _fields.dual(f)


def _derived_in_batches(f: np.ndarray, chunk: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`_derived` over batches of ``chunk`` rows (the last padded with zeros): one compiled size."""
    parts = []
    for start in range(0, f.shape[0], chunk):
        piece = f[start : start + chunk]
        rows = piece.shape[0]
        if rows < chunk:
            piece = np.concatenate([piece, np.zeros((chunk - rows,) + f.shape[1:], dtype=f.dtype)])
        parts.append([np.asarray(v)[:rows] for v in _derived(jnp.asarray(piece))])
    if not parts:
        return np.zeros(0), np.zeros(0), np.zeros_like(f)
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(3))  # type: ignore[return-value]


def curvature_sample(field, points: np.ndarray, weights: np.ndarray, sign: int) -> CurvatureSample:
    """Compare the field's closed forms with the curvature of its potential on ``points`` (M, 4).

    F_auto = dA - dA + [A, A] by automatic differentiation (`fields.field_strength`,
    method 'autodiff'); s and q from F_auto by `fields.action_from_f` and
    `fields.charge_from_f`; the residual |F - sign *F| / |F| with `fields.dual`.
    Closed forms compared: the ``field_strength``, ``action_density`` and ``charge_density`` hooks.

    Args:
      field: a field; points: (M, 4) float64; weights: (M,) quadrature weights; sign: +1 or -1.
    Returns:
      CurvatureSample.
    Raises:
      FieldEvaluationError when the field cannot be evaluated on the points.
    """
    m, chunk = points.shape[0], ENGINE_CHUNK
    padded = _whole_chunks(points)
    try:
        # one kernel for A, its autodiff curvature and the closed forms (one compile; XLA shares their work)
        names = [
            n for n in ("field_strength", "action_density", "charge_density") if _fields.hook(field, n) is not None
        ]
        wanted = (("field_strength", "autodiff"), "potential", *names)
        values = [v[:m] for v in _fields.evaluate_many(field, padded, wanted, chunk_size=chunk)]
        f_auto, a = values[0], values[1]
        a2 = np.sum(np.abs(a) ** 2, axis=(1, 2, 3))  # |A|^2: the size of the terms that cancel in F
        s_auto, q_auto, dual = _derived_in_batches(f_auto, chunk)
        deviations, worst = {}, {}
        closed = dict(zip(names, values[2:]))
    except _EVAL_ERRORS as err:
        raise FieldEvaluationError(
            f"evaluating the curvature of {field_description(field)} failed: {type(err).__name__}: {err}"
        ) from err
    ref = {"field_strength": f_auto, "action_density": s_auto, "charge_density": q_auto}
    # Rounding of the autodiff F near a singular-gauge centre is about eps |A|^2; it reaches s = -1/2 tr F F
    # as |F| x that (Cauchy-Schwarz), and q = eps tr F F / 32 pi^2 as at most 1 / 4 pi^2 of it.
    fnorm = np.sqrt(np.sum(np.abs(f_auto) ** 2, axis=(1, 2, 3, 4)))
    floors = {"field_strength": a2, "action_density": fnorm * a2, "charge_density": fnorm * a2 / (4 * np.pi**2)}
    for name, val in closed.items():
        deviations[name], i = _rel(val, ref[name], floors[name])
        worst[name] = points[i].tolist()
    q_is_s = False
    if "charge_density" in closed and "action_density" in closed:
        q_is_s = (
            _rel(closed["charge_density"], sign * closed["action_density"] / INSTANTON_ACTION)[0] <= _SAME_FORMULA_TOL
        )
    num = np.sqrt(np.sum(np.abs(f_auto - sign * dual) ** 2, axis=(1, 2, 3, 4)))
    den = np.sqrt(np.sum(np.abs(f_auto) ** 2, axis=(1, 2, 3, 4)))
    res = np.where(den > 0, num / np.where(den > 0, den, 1.0), 0.0)
    wd = np.abs(weights * s_auto)
    mean = float(np.sum(wd * res) / np.sum(wd)) if np.sum(wd) > 0 else 0.0
    margin = float(np.sum(weights * (s_auto / INSTANTON_ACTION - sign * q_auto)))
    return CurvatureSample(
        m,
        float(np.sum(weights * s_auto)),
        margin,
        float(np.max(res, initial=0.0)),
        mean,
        deviations,
        worst,
        q_is_s,
        float(np.max(s_auto, initial=0.0)),
    )


# -- periodicity and peaks --------------------------------------------------------------------------

#: Relative difference of s(x) and s(x + period e_4) beyond which a field is not periodic (rounding ~1e-14).
PERIODICITY_TOL = 1e-8
_PROBE_SEED = 20261202


def periodicity_mismatch(field, centres: np.ndarray, scales: np.ndarray, period: float, n: int = 12):
    """Largest relative difference of s and q between x and x + period e_4 on ``n`` points per centre.

    Gauge-invariant densities of a field on R^3 x S^1 repeat with the period even when its potential
    only repeats up to a gauge transformation (common practice).

    Args:
      field: a field; centres: (m, 4); scales: (m,); period: > 0; n: points per centre.
    Returns:
      (relative difference, point (4,) list where it is largest); relative to the largest |s| sampled.
    Raises:
      FieldEvaluationError when the field cannot be evaluated.
    """
    rng = np.random.default_rng(_PROBE_SEED)
    pts = np.concatenate([c + s * rng.normal(size=(n, 4)) for c, s in zip(centres, scales)])
    shift = np.array([0.0, 0.0, 0.0, period])
    try:
        a = [
            np.asarray(_fields.evaluate(field, p, q))
            for p in (pts, pts + shift)
            for q in ("action_density", "charge_density")
        ]
    except _EVAL_ERRORS as err:
        raise FieldEvaluationError(
            f"evaluating the densities of {field_description(field)} failed: {type(err).__name__}: {err}"
        ) from err
    scale = max(float(np.max(np.abs(a[0]))), 1e-300)
    diff = np.maximum(np.abs(a[0] - a[2]), np.abs(a[1] - a[3]) * INSTANTON_ACTION)
    i = int(np.argmax(diff))
    return float(diff[i] / scale), pts[i].tolist()


@dataclasses.dataclass(frozen=True)
class Peak:
    """Where the sampled action density is largest: point (4,), value s, width (48 / s)^(1/4).

    The width is the size of a BPST lump with that peak (s(0) = 48 / rho^4; Belavin, Polyakov, Schwartz,
    Tyupkin, Phys. Lett. B 59 (1975) 85).
    """

    point: np.ndarray
    value: float
    width: float


def find_peak(
    field, centres: np.ndarray, scales: np.ndarray, period: float | None = None, n: int = 2048, rounds: int = 6
) -> Peak | None:
    """Search for the maximum of the action density: a wide random cloud, then shrinking clouds.

    The first cloud is Gaussian about each centre with 4 x (extent + scale) spread; each round samples
    ``n // 8`` points about the best point so far with half the spread.  Returns None when the field
    cannot be evaluated or the density is zero everywhere sampled.
    """
    rng = np.random.default_rng(_PROBE_SEED + 1)
    c0 = centres.mean(axis=0)
    extent = float(np.max(scales) + np.max(np.linalg.norm(centres - c0, axis=1)))
    spread = 4.0 * extent
    pts = np.concatenate(
        [c0 + spread * rng.normal(size=(n // 2, 4))]
        + [c + 2.0 * s * rng.normal(size=(n // (2 * len(centres)) + 1, 4)) for c, s in zip(centres, scales)]
    )
    if period is not None:
        pts[:, 3] = np.mod(pts[:, 3] - c0[3], period) + c0[3]
    best, val = np.asarray(c0), -np.inf
    try:
        for _ in range(rounds + 1):
            m = pts.shape[0]
            s = np.asarray(_fields.evaluate(field, _whole_chunks(pts), "action_density", chunk_size=ENGINE_CHUNK))[:m]
            i = int(np.argmax(s))
            if s[i] > val:
                best, val = pts[i], float(s[i])
            spread /= 2.0
            pts = best + spread * rng.normal(size=(max(n // 8, 16), 4))
    except _EVAL_ERRORS:
        return None
    if not val > 0:
        return None
    return Peak(np.asarray(best), val, float((48.0 / val) ** 0.25))
