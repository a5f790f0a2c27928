"""Calorons: instantons on R^3 x S^1 (periodic in x4); so far the Harrington-Shepard caloron (trivial holonomy).

The Harrington-Shepard caloron is the scalar ansatz (`instantonkit.ansatz.scalar`) with equal
instantons at c + n beta e_4, n in Z, summed in closed form; its constructor is
`instantonkit.ansatz.classic.caloron`.
"""

from __future__ import annotations

import dataclasses
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core.conventions import PI
from .scalar import _positive_scalar, _ScalarAnsatz

#: Parameters as arrays (numpy, or jax tracers under jit/grad).
Array = jax.Array | np.ndarray


# -- Harrington-Shepard caloron ---------------------------------------------------------------------

_SERIES_TERMS = 11
_FACT = [float(math.factorial(m)) for m in range(2 * _SERIES_TERMS + 6)]
#: Taylor coefficients in z = a^2 of S = sinh(a)/a, S' = dS/dz, S'' and C1 = (cosh(a) - 1)/a^2.
_S0 = np.array([1.0 / _FACT[2 * n + 1] for n in range(_SERIES_TERMS)])
_S1 = np.array([(n + 1) / _FACT[2 * n + 3] for n in range(_SERIES_TERMS)])
_S2 = np.array([(n + 1) * (n + 2) / _FACT[2 * n + 5] for n in range(_SERIES_TERMS)])
_C1 = np.array([1.0 / _FACT[2 * n + 2] for n in range(_SERIES_TERMS)])


def _horner(coef, z):
    out = jnp.zeros_like(z) + coef[-1]
    for c in coef[-2::-1]:
        out = out * z + c
    return out


def _caloron_ratio(z, b):
    """R = sinh(a) / (a (cosh a - cos b)), a = sqrt(z), and R_z, R_b, R_zz, R_zb, R_bb in closed form.

    With S(z) = sinh(a)/a and D = cosh(a) - cos b: D_z = S/2, D_zz = S'/2, D_b = sin b, D_bb = cos b and
      R_z = S'/D - S D_z/D^2,  R_b = -S D_b/D^2,
      R_zz = S''/D - (2 S' D_z + S D_zz)/D^2 + 2 S D_z^2/D^3,
      R_zb = -S' D_b/D^2 + 2 S D_z D_b/D^3,  R_bb = -S D_bb/D^2 + 2 S D_b^2/D^3.
    For z < 1: Taylor series in z, D = z C1(z) + 2 sin^2(b/2) (no cancellation at the pole).  For z >= 1:
    every S-, C- and D-quantity scaled by e^{-a} (R is homogeneous of degree 0), S = (1 - e^{-2a})/(2a),
    cosh(a) = (1 + e^{-2a})/2, S' = (cosh(a) - S)/(2z), S'' = (S/2 - 3 S')/(2z): no overflow.  Both
    branches get safe arguments, so derivatives through jnp.where stay finite.
    """
    small = z < 1.0
    zs = jnp.where(small, z, 0.5)
    s0, s1, s2 = _horner(_S0, zs), _horner(_S1, zs), _horner(_S2, zs)
    d_small = zs * _horner(_C1, zs) + 2.0 * jnp.sin(0.5 * b) ** 2
    zl = jnp.where(small, 1.0, z)
    a = jnp.sqrt(zl)
    e = jnp.exp(-a)
    l0 = (1.0 - e * e) / (2.0 * a)
    ch = 0.5 * (1.0 + e * e)
    l1 = (ch - l0) / (2.0 * zl)
    l2 = (0.5 * l0 - 3.0 * l1) / (2.0 * zl)

    def sel(p, q):
        return jnp.where(small, p, q)

    s0, s1, s2 = sel(s0, l0), sel(s1, l1), sel(s2, l2)
    d = sel(d_small, ch - e * jnp.cos(b))
    db = sel(jnp.sin(b), e * jnp.sin(b))
    dbb = sel(jnp.cos(b), e * jnp.cos(b))
    dz, dzz = 0.5 * s0, 0.5 * s1
    r = s0 / d
    rz = s1 / d - s0 * dz / d**2
    rb = -s0 * db / d**2
    rzz = s2 / d - (2.0 * s1 * dz + s0 * dzz) / d**2 + 2.0 * s0 * dz**2 / d**3
    rzb = -s1 * db / d**2 + 2.0 * s0 * dz * db / d**3
    rbb = -s0 * dbb / d**2 + 2.0 * s0 * db**2 / d**3
    return r, rz, rb, rzz, rzb, rbb


def _caloron_derivs(x, size, period, center, hessian: bool):
    """phi, grad phi (4,) and Hess phi (4, 4) of the Harrington-Shepard scalar at one point.

    phi = 1 + (pi rho^2 / (beta r)) sinh(2 pi r / beta) / (cosh(2 pi r / beta) - cos(2 pi t / beta))
        = 1 + amp R(z, b),  amp = 2 pi^2 rho^2 / beta^2,  z = kappa^2 r^2,  b = kappa t,  kappa = 2 pi / beta
    (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122, from memory; checked by
    test_caloron_phi_equals_the_periodic_sum_of_thooft_poles), t reduced to [-beta/2, beta/2].
    With u = r^2: d_i phi = 2 y_i phi_u, d_4 phi = phi_t, d_i d_j phi = 2 delta_ij phi_u + 4 y_i y_j phi_uu,
    d_i d_4 phi = 2 y_i phi_ut, d_4 d_4 phi = phi_tt (i, j <= 3), phi_u = amp kappa^2 R_z etc.
    """
    y = x - center
    ys = y[:3]
    kappa = 2.0 * PI / period
    t = y[3] - period * jnp.round(y[3] / period)
    r, rz, rb, rzz, rzb, rbb = _caloron_ratio(kappa**2 * jnp.sum(ys * ys), kappa * t)
    amp = PI * size**2 * kappa / period
    k2 = kappa**2
    pu, pt = amp * k2 * rz, amp * kappa * rb
    grad = jnp.concatenate([2.0 * pu * ys, pt[None]])
    if not hessian:
        return 1.0 + amp * r, grad, None
    puu, put, ptt = amp * k2 * k2 * rzz, amp * k2 * kappa * rzb, amp * k2 * rbb
    top = 2.0 * pu * jnp.eye(3) + 4.0 * puu * jnp.outer(ys, ys)
    side = 2.0 * put * ys
    hess = jnp.block([[top, side[:, None]], [side[None, :], ptt[None, None]]])
    return 1.0 + amp * r, grad, hess


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class CaloronField(_ScalarAnsatz):
    """Harrington-Shepard caloron: the 't Hooft ansatz with equal instantons at c + n beta e_4, n in Z.

    phi = 1 + (pi rho^2/(beta r)) sinh(2 pi r/beta) / (cosh(2 pi r/beta) - cos(2 pi t/beta)), r = |x_vec - c_vec|,
    t = x4 - c4 (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122, from memory; tests/test_ansatz.py checks phi
    against the periodic sum of 't Hooft poles and self-duality by autodiff); periodic in x4 with
    period beta, self-dual, charge +1 per period.  size: rho > 0; period: beta > 0; center: (4,).
    Singular points: c + n beta e_4.
    """

    size: Array
    period: Array
    center: Array

    def __post_init__(self):
        if _validate.is_tracer(self.size, self.period, self.center):
            return
        object.__setattr__(self, "size", _positive_scalar("size", self.size))
        object.__setattr__(self, "period", _positive_scalar("period", self.period))
        object.__setattr__(self, "center", _validate.point("center", self.center))

    _leaves = ("size", "period", "center")

    @property
    def charge(self) -> int:
        """Instanton number per period, +1."""
        return 1

    def _derivs(self, x, hessian: bool = True):
        args = (jnp.asarray(self.size), jnp.asarray(self.period), jnp.asarray(self.center))
        return _caloron_derivs(x, *args, hessian)

    def describe(self) -> str:
        return f"Harrington-Shepard caloron, rho = {float(self.size):g}, period = {float(self.period):g}"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'caloron')."""
        centre = np.asarray(self.center, dtype=np.float64).reshape(4).tolist()
        size = float(self.size)
        return {"kind": "caloron", "size": size, "period": float(self.period), "center": centre, "charge": 1}

    def hint(self):
        """(centre (4,), rho * max(1, pi rho / beta)): the core size (pi rho^2/beta is the monopole scale)."""
        rho, beta = float(self.size), float(self.period)
        return np.asarray(self.center), rho * max(1.0, PI * rho / beta)
