"""Integrals of ADHM data through Osborn's flux: the ball |x - c| < R by its boundary sphere, the rest by volume.

For ADHM data (quaternionic Sp(n) and complex SU(N)) the action density is Osborn's
``s = -1/2 box box log det G`` with ``G(x)`` the k x k Gram matrix (Osborn, Nucl. Phys. B 159 (1979) 497,
from memory; checked by test_osborn_formula in tests/test_adhm_fields.py and, for the flux, by
verify's volume integral in tests/test_checks.py; docs/conventions.md).  Gauss's theorem turns the
integral over a ball into a flux,

    int_{|x - c| < R} s d^4x = -1/2 oint_{|x - c| = R} n . grad(box log det G) dS,

a three-dimensional integral of a function that is smooth on the sphere (the lumps sit inside it), and
the rest, ``int_{|x - c| > R} density d^4x``, is a volume integral of the field's own density over the
exterior, ``r = R / t`` with t in (0, 1], where the field has no lumps and the integrand is smooth
(``~ t^3`` at infinity).  With the sphere far outside the lumps (RADIUS_FACTOR) both converge
geometrically under a product rule on S^3 (1e-13 with about 10^4 points up to k = 8, measured in
``benchmarks/bench_integrals.py``), where a volume rule about several centres needs millions for 1e-8.  For the charge, ``q = sign s / 8 pi^2`` with the sign of the
data's chirality (self-dual fields, docs/conventions.md).

What the route takes on trust: Osborn's formula inside the ball (a theorem for ADHM data, and tested
against the closed-form and autodiff densities in tests/test_checks.py).  ``verify`` therefore keeps the
volume integral of the field's own density as the check of this figure.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import jax
import jax.numpy as jnp
import numpy as np

from ..core._batching import run_batched
from ..core.conventions import INSTANTON_ACTION
from . import quadrature as _quad

__all__ = ["gram_coefficients", "ball_action", "exterior_integral", "osborn_integral", "FluxIntegral", "RADIUS_FACTOR"]

#: Sphere radius in units of the layout's extent (its largest scale plus the largest distance of a
#: centre from the mean centre).  Measured (points for 1e-10 on random data k = 1..8 and on overlapping,
#: well separated and small lumps): 2 x extent needs 0.08-3M points and does not converge for four
#: lumps 0.3 apart of sizes 0.5-1.5 (a sixth of their charge lies outside); 8 x converges in every case
#: at the smallest levels, and 12 and 16 x change nothing.
RADIUS_FACTOR = 8.0
#: S^3 product-rule parameters n of the ball's levels (2 n^3 points each; exact to degree 2n - 1).
_BALL_LEVELS = (4, 6, 8, 10, 12, 14, 16, 20, 24, 32, 40, 48, 64)
#: Exterior levels (Gauss-Legendre nodes in t, S^3 parameter n): nt x 2 n^3 points each.
_EXTERIOR_LEVELS = tuple((n, n) for n in (4, 6, 8, 10, 12, 14, 16, 20, 24, 28, 32, 40))
#: Points per compiled call of the flux kernel (whole chunks: one compiled size serves every level).
_CHUNK = 4096
#: Rounding floor of a part's error, in units of eps x sum |w f|.
_ROUNDING_FLOOR = 64
_EPS = float(np.finfo(np.float64).eps)


def gram_coefficients(data):
    """G(x) = G0 + sum_mu x_mu G_mu + |x|^2 1 for the ADHM Gram matrix: (G0 (k, k), Gmu (4, k, k)).

    Asks the data's ``gram(x)`` hook (real symmetric Delta^dag Delta for quaternionic data, Hermitian
    f^-1 for complex SU(N) data; quadratic in x with d_mu d_nu G = 2 delta_mu nu 1 in both cases).
    """

    return _gram_coefficients(data)


@jax.jit
def _gram_coefficients(data):
    """`gram_coefficients` as one compiled call (nine eager Gram evaluations cost ~0.5 s of op compiles)."""
    e = jnp.eye(4)
    g0 = data.gram(jnp.zeros(4))
    gmu = jnp.stack([(data.gram(e[m]) - data.gram(-e[m])) / 2.0 for m in range(4)])
    return g0, gmu


def _radial_gradient_one(g0, gmu, x, w):
    """w . grad(box log det G) at one point x (4,) for a direction w (4,) -> () float64.

    With H = G^-1, P_mu = H d_mu G, d_mu d_nu G = 2 delta_mu nu 1 and dH = -H dG H (derived here):
    d_mu log det G = tr P_mu, box log det G = 8 tr H - tr S with S = sum_mu P_mu^2, and
    d_l box log det G = 2 tr(P_l S) - 12 tr(H P_l).  (k = 1: -x_l (8 r^2 + 24 rho^2) / (r^2 + rho^2)^3.)
    """
    k = g0.shape[0]
    eye = jnp.eye(k, dtype=g0.dtype)
    g = g0 + jnp.einsum("m,mij->ij", x, gmu) + jnp.sum(x * x) * eye
    dg = gmu + 2.0 * x[:, None, None] * eye[None]
    h = jnp.linalg.solve(g, eye)
    p = jnp.einsum("ij,mjk->mik", h, dg)
    s = jnp.einsum("mij,mjk->ik", p, p)
    pw = jnp.einsum("m,mij->ij", w, p)
    return jnp.real(2.0 * jnp.trace(pw @ s) - 12.0 * jnp.trace(h @ pw))  # real for Hermitian G


_radial_gradient = jax.jit(jax.vmap(_radial_gradient_one, in_axes=(None, None, 0, 0)))


def _floor(w: np.ndarray, values: np.ndarray) -> float:
    return _ROUNDING_FLOOR * _EPS * float(np.sum(np.abs(w * values)))


def _converge(levels, evaluate, tol: float, max_points: int):
    """Run levels until the last two differences are below tol: (value, error, points, level, converged).

    The error of the finest level is the larger of the last two differences between levels plus the
    rounding floor (infinite before three levels).  One difference alone can be small by accident (the
    product rule's levels do not converge monotonically: measured at k = 4, levels 10, 12 and 14 differ
    by 2.6e-11 and 3.1e-11 with the error of level 12 3.1e-11); two in a row bound it with a wide margin
    in every case measured (tests/test_integrals.py).
    """
    value, error, points, used, history = math.nan, math.inf, 0, None, []
    for level in levels:
        size = evaluate(level, count_only=True)
        if points + size > max_points:
            break
        val, floor = evaluate(level)
        points += size
        used = level
        history.append(val)
        value = val
        if len(history) >= 3:
            error = max(abs(history[-1] - history[-2]), abs(history[-2] - history[-3])) + floor
            if error <= tol:
                return value, error, points, used, True
    return value, error, points, used, False


def ball_action(data, centre, radius: float, n: int) -> tuple[float, float]:
    """int_{|x - c| < R} s d^4x by Osborn's flux on the S^3 product rule of parameter n: (value, rounding floor).

    Args:
      data: ADHM data with a ``gram`` hook; centre: (4,) float; radius: R > 0; n: S^3 rule parameter.
    """
    g0, gmu = gram_coefficients(data)
    d, w = _quad.sphere3_nodes(n)
    pts = np.asarray(centre, dtype=np.float64)[None] + radius * d
    v = np.asarray(run_batched(_radial_gradient, [pts, d], _CHUNK, args_before=(g0, gmu)), dtype=np.float64)
    scale = -0.5 * radius**3
    return scale * float(np.sum(w * v)), abs(scale) * _floor(w, v)


def exterior_integral(density, centre, radius: float, nt: int, n: int) -> tuple[float, float]:
    """int_{|x - c| > R} density d^4x on the rule r = R / t (nt Gauss-Legendre nodes in t) x S^3 (parameter n).

    Args:
      density: points (M, 4) -> (M,) float64; centre: (4,); radius: R > 0; nt, n: rule sizes.
    Returns:
      (value, rounding floor).
    """
    t, wt = _quad.legendre01(nt)
    d, w = _quad.sphere3_nodes(n)
    r = radius / t
    wr = wt * radius / t**2 * r**3  # dr = R / t^2 dt, r^3 dr d Omega
    pts = np.asarray(centre, dtype=np.float64)[None, None] + r[:, None, None] * d[None]
    v = np.asarray(density(pts.reshape(-1, 4)), dtype=np.float64).reshape(nt, -1)
    weights = wr[:, None] * w[None]
    return float(np.sum(weights * v)), _floor(weights, v)


class FluxIntegral(NamedTuple):
    """What `osborn_integral` returns (the fields of an IntegralResult but its name)."""

    value: float
    error: float
    evaluations: int
    rule: str
    converged: bool
    message: str


def osborn_integral(
    density, data, centres, extent: float, quantity: str, *, rtol: float, atol: float, max_points: int
) -> FluxIntegral:
    """The integral of ``density`` (the data's action or charge density) over R^4: ball by flux, rest by volume.

    Args:
      density: points (M, 4) -> (M,) float64, the field's own density (used outside the sphere).
      data: the ADHM data (``gram`` hook; ``charge`` gives the sign of q = sign s / 8 pi^2).
      centres: (m, 4) where the lumps sit (R^4); extent: their extent (the layout's): the sphere is about
        the mean centre, radius RADIUS_FACTOR x extent.
      quantity: 'action_density' or 'charge_density'.
      rtol, atol, max_points: as in `instantonkit.integrals.drivers.integrate_density` (ball and exterior
        each get half the tolerance and share the budget).
    Returns:
      FluxIntegral; its ``rule`` names both parts.
    """
    centre = np.asarray(centres, dtype=np.float64).reshape(-1, 4).mean(axis=0)
    radius = RADIUS_FACTOR * float(extent)
    sign = 1.0 if quantity == "action_density" else float(np.sign(data.charge)) / INSTANTON_ACTION

    def ball(n, count_only=False):
        if count_only:
            return 2 * n**3
        val, floor = ball_action(data, centre, radius, n)
        return sign * val, abs(sign) * floor

    def outside(level, count_only=False):
        nt, n = level
        if count_only:
            return nt * 2 * n**3
        return exterior_integral(density, centre, radius, nt, n)

    need = sum(ball(n, count_only=True) for n in _BALL_LEVELS[:3])
    need += sum(outside(level, count_only=True) for level in _EXTERIOR_LEVELS[:3])
    if max_points < need:
        raise ValueError(f"max_points must be at least {need:,} for Osborn's flux route (three levels of each part)")
    # The parts' tolerances: half of max(atol, rtol |Q|) each, with |Q| estimated from the coarsest ball.
    magnitude = abs(ball(_BALL_LEVELS[0])[0])
    tol = 0.5 * max(atol, rtol * magnitude)
    b_val, b_err, b_pts, b_lev, b_ok = _converge(_BALL_LEVELS, ball, tol, max_points)
    e_val, e_err, e_pts, e_lev, e_ok = _converge(_EXTERIOR_LEVELS, outside, tol, max_points - b_pts)
    value, error = b_val + e_val, b_err + e_err
    converged = b_ok and e_ok and error <= max(atol, rtol * abs(value))
    message = ""
    if not converged:
        parts = [p for p, ok in (("the ball's flux", b_ok), ("the exterior", e_ok)) if not ok]
        message = f"budget of {max_points:,} points spent before {' and '.join(parts) or 'the sum'} converged"
    rule = (
        f"Osborn flux through |x - c| = {radius:.4g} (S^3 n = {b_lev}) + exterior volume r = R/t "
        f"(nt, n) = {e_lev}; ball {b_val:.15g} +- {b_err:.1e}, exterior {e_val:.15g} +- {e_err:.1e}"
    )
    return FluxIntegral(float(value), float(error), b_pts + e_pts, rule, converged, message)
