"""The L^2 metric of the instanton moduli space, its volume form, and its geodesics (floor 3, above `tangent`).

The metric of a family of ADHM data given by a *chart* (a function params (d,) -> ADHM data,
jax-traceable) is

    g_ij = -2 sum_mu int tr(delta_i A_mu delta_j A_mu) d^4x

with ``delta_i A`` the background-gauge zero mode (`instantonkit.adhm.tangent`) of the horizontal part
of ``d data / d param_i`` (jax.jacfwd).  Normalised so that a translation of one instanton has norm
``8 pi^2`` = the action of one instanton (conventions.INSTANTON_ACTION).  Two routes:

* ``route="algebraic"``: ``g_ij = 8 pi^2 <h_i, h_j>_W``, the flat metric of the ADHM data (weights
  `tangent.flat_weights`) on the horizontal parts h_i: the hyperkaehler quotient metric (Maciocia,
  Commun. Math. Phys. 135 (1991) 467; Dorey, Hollowood, Khoze, Mattis, Phys. Rep. 371 (2002) 231;
  from memory).  No integral; exact to rounding.
* ``route="integral"``: the integral above, by the library's adaptive cubature
  (`instantonkit.integrals.cubature`), with an error estimate.

For k = 1 SU(2) in the standard chart both give ``g = 8 pi^2 (dX^2 + 2 |dy|^2)``, y = Lambda, |y| = rho
(tests/test_moduli_geometry.py).  The *global gauge orbit* is the part of the tangent space spanned by
constant gauge rotations of the field (`tangent.global_gauge_directions`; 3 directions for SU(2),
N^2 - 1 for SU(N) where the group acts freely); ``global_gauge="remove"`` projects it out
(metric-orthogonally), leaving the gauge-invariant part (rank 8k - 3 for SU(2) data).
"""

from __future__ import annotations

import dataclasses
import functools

import jax
import jax.numpy as jnp
import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import minimize

from ..core import _validate
from ..core import quaternion as qt
from ..core._config import lean_compiler_options
from ..core.conventions import INSTANTON_ACTION, point_to_quaternion
from ..engine.fields import evaluate
from ..integrals.cubature import final_rule, integrate_adaptive
from ..integrals.pieces import Layout
from .moduli import solve_constraint_unrolled, unit_orientations
from .quaternionic import ADHMData
from .tangent import (
    constraint_jacobian,
    constraint_rates,
    flat_weights,
    global_gauge_directions,
    horizontal,
    mode_vectors,
    pack,
)
from .unitary import UnitaryADHMData

__all__ = [
    "StandardChart",
    "MetricResult",
    "tangent_basis",
    "moduli_metric",
    "moduli_measure",
    "GeodesicPath",
    "moduli_geodesic",
]

#: Relative size below which an instanton counts as point-like (zero size).
_ZERO_SIZE = 1e-8
#: Relative rate of change of the constraint above which a chart leaves the constraint surface.
_CONSTRAINT_RATE = 1e-8
#: Points per compiled batch of the integral route.
_CHUNK = 4096


# -- charts -------------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True, eq=False)
class StandardChart:
    """Centres, sizes and orientations of k SU(2) instantons as coordinates of the moduli space.

    params (8k,) = [centres a_i (k, 4), sizes rho_i (k,), rotation vectors theta_i (k, 3)] -> ADHMData with
    ``Lambda_i = rho_i u_i exp(theta_i . (i, j, k))`` (u_i the base orientations, unit quaternions),
    ``B_ii = p(a_i)`` and the off-diagonal of B solved by the differentiable minimum-norm Gauss-Newton
    solve (`instantonkit.adhm.moduli.solve_constraint_unrolled`, the same data as
    `instantonkit.adhm.moduli.multi_instanton`).  Calling it is jax-traceable.
    ``params`` holds the chart's starting point (theta = 0).
    """

    base: np.ndarray  # (k, 4) unit quaternions
    params: np.ndarray  # (8k,)

    @classmethod
    def at(cls, centers, sizes, orientations=None) -> StandardChart:
        """The chart centred on the given moduli: centers (k, 4), sizes (k,) > 0, orientations None or (k, 4) unit quaternions / (k, 2, 2) SU(2)."""
        c = _validate.points_array("centers", centers, shape_text="(k, 4)")
        k = c.shape[0]
        r = _validate.positive_vector("sizes", sizes, k)
        _validate.distinct_points("centers", c, 1e-8 * max(1.0, float(np.max(r))), noun="centers")
        u = unit_orientations(orientations, k, 1)[:, 0]
        return cls(u, np.concatenate([c.ravel(), r, np.zeros(3 * k)]))

    @classmethod
    def of(cls, data: ADHMData) -> StandardChart:
        """The chart at SU(2) data built from centres, sizes and orientations (as `multi_instanton` builds them)."""
        if not isinstance(data, ADHMData) or data.rank != 1 or data.chirality != 1:
            raise TypeError(f"the standard chart needs SU(2) instanton ADHMData (rank 1, chirality +1); found {data!r}")
        sizes = data.sizes()
        if np.min(sizes) <= _ZERO_SIZE * max(1.0, float(np.max(sizes))):
            raise ValueError(f"degenerate ADHM data: zero-size (point-like) instanton; sizes {sizes.tolist()}")
        chart = cls.at(data.centers(), sizes, np.asarray(data.lam)[0] / sizes[:, None])
        rebuilt = chart(chart.params)
        dev = float(np.max(np.abs(np.asarray(rebuilt.B) - np.asarray(data.B))))
        if dev > 1e-8 * (1.0 + float(np.max(np.abs(np.asarray(data.B))))):
            raise ValueError(
                "the data are not the standard chart's point for their centres, sizes and orientations "
                f"(max |B - B_chart| = {dev:.3e}); pass your own chart (params -> data) instead"
            )
        return chart

    @property
    def k(self) -> int:
        return int(self.base.shape[0])

    def __call__(self, params) -> ADHMData:
        k = self.k
        p = params if _validate.is_tracer(params) else _validate.real_array("params", params)
        if p.shape != (8 * k,):
            raise ValueError(f"params must have shape (8k,) = ({8 * k},); found {p.shape}")
        if _validate.is_tracer(p):
            return _standard_data(jnp.asarray(self.base), p)
        lam, b = _standard_arrays(jnp.asarray(self.base), jnp.asarray(p))
        return ADHMData(np.asarray(lam), np.asarray(b))


def _standard_data(base, p) -> ADHMData:
    """The standard chart as a pure function of (base orientations (k, 4), params (8k,)); jax."""
    k = base.shape[0]
    centres, sizes, theta = p[: 4 * k].reshape(k, 4), p[4 * k : 5 * k], p[5 * k :].reshape(k, 3)
    rot = qt.qexp(jnp.concatenate([jnp.zeros((k, 1)), theta], axis=1))
    lam = (sizes[:, None] * qt.qmul(base, rot))[None]
    return ADHMData(lam, solve_constraint_unrolled(lam, point_to_quaternion(centres)))


@jax.jit
def _standard_arrays(base, p):
    data = _standard_data(base, p)
    return data.lam, data.B


def _traceable(chart):
    """(fn(aux, params) -> data, aux): a chart as a function of stable identity, so its kernels compile once."""
    if isinstance(chart, StandardChart):
        return _standard_data, jnp.asarray(chart.base)
    return _user_chart(chart), jnp.zeros(0)


@functools.lru_cache(maxsize=32)
def _user_chart(chart):
    return lambda _aux, p: chart(p)


@functools.lru_cache(maxsize=32)
def _jac_kernel(fn):
    """jit of d pack(fn(aux, p)) / dp, (P, d)."""
    return jax.jit(jax.jacfwd(lambda aux, p: pack(fn(aux, p)), argnums=1), compiler_options=lean_compiler_options())


def _check_data(data) -> ADHMData | UnitaryADHMData:
    if not isinstance(data, ADHMData | UnitaryADHMData):
        raise TypeError(f"data (or a chart's value) must be ADHMData or UnitaryADHMData; found {type(data).__name__}")
    sizes = np.asarray(data.sizes())
    scale = max(1.0, float(np.sqrt(np.sum(np.asarray(pack(data)) ** 2))))
    if np.min(sizes) <= _ZERO_SIZE * scale:
        i = int(np.argmin(sizes))
        raise ValueError(
            f"degenerate ADHM data: instanton {i} has zero size ({sizes[i]:.3e}); point-like instantons are "
            "singular points of the moduli space, where the metric is not defined"
        )
    _check_not_point_like(data, scale)
    return data


def _gram_numpy(data, x: np.ndarray) -> np.ndarray:
    """Delta^dag Delta at one point (f^-1; real (k, k) quaternionic, Hermitian complex), in numpy."""
    if isinstance(data, UnitaryADHMData):
        return np.asarray(data.gram(x))
    lam, b = np.asarray(data.lam), np.asarray(data.B)
    p = np.asarray(point_to_quaternion(x))
    bp = b - np.eye(data.k)[:, :, None] * (np.asarray(qt.qconj(p)) if data.chirality == -1 else p)
    return np.einsum("lia,lja->ij", lam, lam) + np.einsum("lia,lja->ij", bp, bp)


def _check_not_point_like(data, scale: float) -> None:
    """Refuse data whose Delta(x) loses rank somewhere (an ideal, point-like instanton in any O(k) / U(k) frame).

    The smallest eigenvalue of Delta^dag Delta(x) is minimised over x from every centre (Nelder-Mead);
    a minimum below 1e-12 |data|^2 means Delta(x) v = 0 there, where the field is singular.
    """
    lowest = lambda x: float(np.linalg.eigvalsh(_gram_numpy(data, np.asarray(x)))[0])  # noqa: E731
    for c in np.asarray(data.centers()):
        res = minimize(lowest, c, method="Nelder-Mead", options=dict(xatol=1e-10, fatol=1e-14 * scale**2, maxiter=400))
        if res.fun <= 1e-12 * scale**2:
            raise ValueError(
                "degenerate ADHM data: Delta(x) loses rank at x = "
                f"{np.round(res.x, 6).tolist()} (smallest eigenvalue of Delta^dag Delta {res.fun:.3e}), a point-like "
                "(zero-size) instanton; the metric is not defined there"
            )


def _resolve(chart, params):
    """(callable chart, params (d,)) from a chart and params, or from data alone (its standard chart)."""
    if isinstance(chart, ADHMData | UnitaryADHMData):
        if params is not None:
            raise TypeError("pass params only with a callable chart (params -> data); found data and params")
        _check_data(chart)
        if isinstance(chart, ADHMData) and chart.rank == 1 and chart.chirality == 1:
            sc = StandardChart.of(chart)
            return sc, sc.params
        return None, None
    if isinstance(chart, StandardChart) and params is None:
        return chart, chart.params
    if not callable(chart):
        raise TypeError(f"chart must be a callable params -> ADHM data, or ADHM data; found {type(chart).__name__}")
    if params is None:
        raise TypeError("params are required with a callable chart")
    p = _validate.real_array("params", params)
    if p.ndim != 1 or p.size == 0:
        raise ValueError(f"params must have shape (d,) with d >= 1; found {p.shape}")
    return chart, p


def _raw_tangents(chart, p):
    """The data at p and d(pack(chart))/d params, (d, P), with the constraint checks of the chart."""
    try:
        data = chart(p)
    except ValueError as err:
        raise ValueError(f"chart(params) gave no valid ADHM data: {err}") from err
    data = _check_data(data)
    fn, aux = _traceable(chart)
    jac = _jac_kernel(fn)(aux, jnp.asarray(p))  # (P, d)
    t = np.asarray(jac).T
    rates = constraint_rates(data, t)
    if rates.size and np.max(rates) > _CONSTRAINT_RATE:
        i = int(np.argmax(rates))
        raise ValueError(
            f"the chart leaves the ADHM constraint surface: moving params[{i}] changes the constraint at "
            f"relative rate {rates[i]:.3e} (expected <= {_CONSTRAINT_RATE:.0e}); charts must map onto solutions"
        )
    return data, t


def tangent_basis(data) -> np.ndarray:
    """A basis of the tangent space of the moduli space at the data, horizontal and flat-orthonormal; (D, P).

    The null space of the linearised ADHM constraint (SVD), made horizontal (`tangent.horizontal`) and
    orthonormalised in the flat metric W of `tangent.flat_weights`, so the algebraic metric in these
    coordinates is 8 pi^2 times the identity.  D = 8k for SU(2), 4k(n + 1) for Sp(n) and 4kN for SU(N) (Atiyah, Hitchin, Drinfeld, Manin 1978; the dimension count is common practice).
    """
    data = _check_data(data)
    jac = np.asarray(constraint_jacobian(data))
    _, s, vt = np.linalg.svd(jac)
    rank = int(np.sum(s > 1e-10 * max(1.0, float(s[0]))))
    h = np.asarray(horizontal(data, vt[rank:]))
    w = flat_weights(data)
    gram = (h * w) @ h.T
    ev, vec = np.linalg.eigh(gram)
    keep = ev > 1e-10 * float(ev[-1])
    return (vec[:, keep] / np.sqrt(ev[keep])).T @ h


def _gauge_free(data, t):
    """Tangents t (d, P), horizontal, minus their flat-orthogonal projection on the global gauge orbit."""
    w = flat_weights(data)
    g = np.asarray(horizontal(data, np.asarray(global_gauge_directions(data))))
    gram = (g * w) @ g.T
    coef = np.linalg.lstsq(gram, g @ (w * t).T, rcond=1e-10)[0]
    return t - coef.T @ g


# -- the two routes ---------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class MetricResult:
    """The metric of the moduli space in a chart, with how it was obtained.

    metric: (d, d) float64, symmetric; error: estimated absolute error of every entry (0 for the
    algebraic route); route: 'algebraic' or 'integral'; tangents: (d, P) the horizontal tangent vectors
    (tangent layout) whose zero modes were used; data: the ADHM data at the point; evaluations: points
    of the integral (0 algebraic); message: the integrator's note ('' when converged).
    """

    metric: np.ndarray
    error: float
    route: str
    tangents: np.ndarray
    data: object
    evaluations: int = 0
    message: str = ""

    @property
    def measure(self) -> float:
        """The volume form's density sqrt(det g) in these coordinates."""
        sign, logdet = np.linalg.slogdet(self.metric)
        return float(np.exp(0.5 * logdet)) if sign > 0 else 0.0


def _pointwise(data, t, x):
    """g_ij(x) = -2 sum_mu Re tr(delta_i A_mu delta_j A_mu) at one point; (d, d)."""
    y = mode_vectors(data, t, x)
    return y @ y.T


@functools.cache
def _scalar_kernel():
    def weighted(data, t, x):
        g = _pointwise(data, t, x)
        return jnp.sum(g) + jnp.trace(g)

    return jax.jit(jax.vmap(weighted, in_axes=(None, None, 0)))


@functools.cache
def _sum_kernel():
    return jax.jit(
        lambda data, t, pts, w: jnp.einsum("m,mij->ij", w, jax.vmap(_pointwise, in_axes=(None, None, 0))(data, t, pts))
    )


def _integral(data, t, rtol: float, max_points: int):
    """The integral route: adapt the cubature on sum_ij g_ij(x) + tr g(x), then sum every entry on its final rule."""
    if isinstance(data, ADHMData) and data.rank <= data.k:
        data = data.with_gauge("regular")
    elif isinstance(data, UnitaryADHMData) and data.rank <= 2 * data.k:
        data = data.with_gauge("regular")
    tj = jnp.asarray(t)
    kern = _scalar_kernel()

    def density(points):
        pts = np.asarray(points, dtype=np.float64)
        out = np.empty(pts.shape[0])
        for s in range(0, pts.shape[0], _CHUNK):
            piece = pts[s : s + _CHUNK]
            width = max(16, 1 << int(np.ceil(np.log2(piece.shape[0]))))
            pad = np.concatenate([piece, np.broadcast_to(piece[0], (width - piece.shape[0], 4))])
            out[s : s + piece.shape[0]] = np.asarray(kern(data, tj, pad))[: piece.shape[0]]
        return out

    centres, scales = data.layout()
    layout = Layout(
        np.asarray(centres).reshape(-1, 4), np.asarray(scales, dtype=np.float64), None, "the data's layout()"
    )
    res, state = integrate_adaptive(
        density, "zero-mode metric", layout, rtol=rtol, atol=0.0, max_points=max_points, sink=None
    )
    rule = final_rule(state, max_points)
    total = np.zeros((t.shape[0], t.shape[0]))
    for s in range(0, rule.points.shape[0], _CHUNK):
        p, w = rule.points[s : s + _CHUNK], rule.weights[s : s + _CHUNK]
        n = p.shape[0]
        pad = _CHUNK - n
        p = np.concatenate([p, np.broadcast_to(p[0], (pad, 4))])
        w = np.concatenate([w, np.zeros(pad)])
        total += np.asarray(_sum_kernel()(data, tj, p, w))
    total = 0.5 * (total + total.T)
    return total, float(res.error), int(res.evaluations), "" if res.converged else res.message


def moduli_metric(
    chart,
    params=None,
    *,
    route: str = "algebraic",
    global_gauge: str = "keep",
    rtol: float = 1e-8,
    max_points: int = 4_000_000,
) -> MetricResult:
    """The L^2 metric of the instanton moduli space at a point, in the coordinates of a chart.

    g_ij = -2 sum_mu int tr(delta_i A_mu delta_j A_mu) d^4x, by the flat metric of the data on horizontal
    variations (``route="algebraic"``) or by integrating the zero modes (``route="integral"``); module
    docstring for the formulas and sources.

    Args:
      chart: a callable params (d,) -> ADHMData / UnitaryADHMData (jax-traceable: tangents are its
        jacobian by jax.jacfwd), or a `StandardChart`, or ADHM data alone: SU(2) data use their
        standard chart (centres, sizes, orientations; `StandardChart.of`), other data the flat
        orthonormal coordinates of `tangent_basis`.
      params: (d,) float64 point of the chart (omit for data or a StandardChart at its own point).
      route: 'algebraic' or 'integral'.
      global_gauge: 'keep' (the full metric) or 'remove' (project out the global gauge orbit).
      rtol: relative tolerance (> 0) of the integral route, on the sum of all entries plus the trace.
      max_points: budget of integrand points of the integral route.
    Returns:
      `MetricResult` (metric (d, d), error, route, tangents, data, ...).
    Raises:
      TypeError for a chart that is neither callable nor data; ValueError for a chart that leaves the
      constraint surface (names the parameter), degenerate data (zero size; an O(k) / U(k) action
      that is not free), bad params or options.
    """
    _validate.choice("route", route, ("algebraic", "integral"))
    _validate.choice("global_gauge", global_gauge, ("keep", "remove"))
    rtol = _validate.positive_float("rtol", rtol)
    max_points = _validate.budget("max_points", max_points)
    fn, p = _resolve(chart, params)
    if fn is None:
        data = _check_data(chart)
        t = tangent_basis(data)
    else:
        data, t = _raw_tangents(fn, p)
        t = np.asarray(horizontal(data, t))
    if global_gauge == "remove":
        t = _gauge_free(data, t)
    if route == "algebraic":
        g = INSTANTON_ACTION * (t * flat_weights(data)) @ t.T
        return MetricResult(0.5 * (g + g.T), 0.0, route, t, data)
    g, err, evals, msg = _integral(data, t, rtol, max_points)
    return MetricResult(g, err, route, t, data, evals, msg)


def moduli_measure(chart, params=None) -> float:
    """The density sqrt(det g) of the volume form of the moduli space in a chart's coordinates (algebraic metric).

    Arguments as for `moduli_metric`.  For k = 1 SU(2) in the standard chart at theta = 0,
    sqrt(det g) = (8 pi^2)^2 (16 pi^2)^2 rho^3 = 2^14 pi^8 rho^3 (from g = 8 pi^2 (dX^2 + 2 |dy|^2)).
    """
    return moduli_metric(chart, params).measure


# -- geodesics -----------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=16)
def _metric_kernels(fn):
    """(g(aux, p), accel(aux, p, v)) of a traceable chart: the algebraic metric (d, d) and the geodesic acceleration (d,)."""

    def g(aux, p):
        data = fn(aux, p)
        t = jax.jacfwd(lambda q: pack(fn(aux, q)))(p).T
        h = horizontal(data, t, check=False)
        return INSTANTON_ACTION * (h * jnp.asarray(flat_weights(data))) @ h.T

    def accel(aux, p, v):
        gp = g(aux, p)
        dg = jax.jacfwd(lambda q: g(aux, q))(p)  # (d, d, d): dg[a, b, c] = d_c g_ab
        rhs = jnp.einsum("abc,b,c->a", dg, v, v) - 0.5 * jnp.einsum("bca,b,c->a", dg, v, v)
        return -jnp.linalg.solve(gp, rhs)

    lean = lean_compiler_options()
    return jax.jit(g, compiler_options=lean), jax.jit(accel, compiler_options=lean)


@dataclasses.dataclass(frozen=True)
class GeodesicPath:
    """A geodesic of the moduli-space metric: times (s,), params (s, d), velocities (s, d), the data along it.

    speed2: (s,) the conserved g(v, v) along the path (a check of the integration).
    """

    times: np.ndarray
    params: np.ndarray
    velocities: np.ndarray
    speed2: np.ndarray
    data: tuple

    def densities(self, points) -> np.ndarray:
        """Action densities of the data along the path at points (..., 4) -> (s, ...) float64."""
        return np.stack([np.asarray(evaluate(d, points, "action_density")) for d in self.data])


def moduli_geodesic(
    chart, velocity, *, params=None, t_final: float = 1.0, samples: int = 21, rtol: float = 1e-9
) -> GeodesicPath:
    """Integrate the geodesic equation of the algebraic moduli-space metric from a point and a velocity.

    x''^a = -Gamma^a_bc x'^b x'^c, written as ``g_ab x''^b = -(d_c g_ab - 1/2 d_a g_bc) x'^b x'^c`` with the
    metric's derivatives d_c g_ab by jax.jacfwd of the algebraic metric (itself a jacobian of the chart);
    scipy's DOP853 integrates it (rtol, atol = rtol).  Charts can break down (the standard chart where two
    centres meet): the integration then stops with a ValueError.

    Args:
      chart: callable params -> ADHM data (jax-traceable), or a `StandardChart`.
      velocity: (d,) float64 initial velocity in the chart's coordinates.
      params: (d,) start (default: a StandardChart's own params).
      t_final: time > 0 to integrate to; samples: number (>= 2) of output times in [0, t_final].
      rtol: relative tolerance (> 0) of the ODE integration.
    Returns:
      `GeodesicPath`.
    Raises:
      ValueError for a start that is degenerate or off the constraint surface (as `moduli_metric`),
      shapes that do not match, or a path that runs into a singular metric.
    """
    fn, p0 = _resolve(chart, params)
    if fn is None:
        raise TypeError("moduli_geodesic needs a chart (params -> data), not data alone")
    t_final = _validate.positive_float("t_final", t_final)
    samples = _validate.positive_int("samples", samples)
    if samples < 2:
        raise ValueError(f"samples must be >= 2; found {samples}")
    rtol = _validate.positive_float("rtol", rtol)
    v0 = _validate.real_array("velocity", velocity, (p0.shape[0],))
    moduli_metric(fn, p0)  # the checks: constraint surface, degeneracy
    tfn, aux = _traceable(fn)
    g, accel = _metric_kernels(tfn)
    d = p0.shape[0]

    def rhs(_, y):
        a = np.asarray(accel(aux, jnp.asarray(y[:d]), jnp.asarray(y[d:])))
        if not np.all(np.isfinite(a)):
            raise ValueError("the geodesic ran into a singular metric (degenerate data along the path)")
        return np.concatenate([y[d:], a])

    times = np.linspace(0.0, t_final, samples)
    sol = solve_ivp(rhs, (0.0, t_final), np.concatenate([p0, v0]), method="DOP853", t_eval=times, rtol=rtol, atol=rtol)
    if not sol.success:
        raise ValueError(f"the geodesic integration failed: {sol.message}")
    ps, vs = sol.y[:d].T, sol.y[d:].T
    speed2 = np.array([float(v @ np.asarray(g(aux, jnp.asarray(p))) @ v) for p, v in zip(ps, vs)])
    data = tuple(fn(p) for p in ps)
    return GeodesicPath(times, ps, vs, speed2, data)
