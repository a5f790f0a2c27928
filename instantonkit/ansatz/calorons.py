"""Calorons: instantons on R^3 x S^1 (periodic in x4): Harrington-Shepard and Kraan-van Baal (SU(2)).

The Harrington-Shepard caloron (trivial holonomy) is the scalar ansatz (`instantonkit.ansatz.scalar`)
with equal instantons at c + n beta e_4, n in Z, summed in closed form.  The Kraan-van Baal caloron
has holonomy omega in [0, 1/2] (A_4 -> 2 pi omega u_3 / beta at spatial infinity) and two constituent
monopoles.  Both are built by `instantonkit.ansatz.classic.caloron`.
"""

from __future__ import annotations

import dataclasses
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._pytree import PytreeFields
from ..core.conventions import PI
from .caloron_psi import caloron_action_density
from .scalar import ETA_BAR, UNITS_C, ScalarAnsatz, positive_scalar

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
class CaloronField(ScalarAnsatz):
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
        object.__setattr__(self, "size", positive_scalar("size", self.size))
        object.__setattr__(self, "period", positive_scalar("period", self.period))
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


# -- Kraan-van Baal caloron (SU(2), any holonomy) -----------------------------------------------------


def _constituent(z, k):
    """(C, S, sigma) of one constituent: C = cosh(a) sigma, S = (sinh(a)/r) sigma, a = k r, z = r^2.

    sigma = 1 for a < 1 (Taylor series in a^2, smooth at r = 0) and e^{-a} for a >= 1 (no overflow);
    the caloron's psi, psi-hat and chi are sums of products of one factor per constituent, so the
    common scale sigma_1 sigma_2 cancels in every ratio.  k = 2 pi nu / beta >= 0.
    """
    a2 = k * k * z
    small = a2 < 1.0
    zs = jnp.where(small, a2, 0.5)
    c_small = 1.0 + zs * _horner(_C1, zs)
    s_small = k * _horner(_S0, zs)
    al = jnp.sqrt(jnp.where(small, 1.0, a2))
    e = jnp.exp(-al)
    r_large = jnp.sqrt(jnp.where(small, 1.0, z))
    c_large = 0.5 * (1.0 + e * e)
    s_large = 0.5 * (1.0 - e * e) / r_large
    return jnp.where(small, c_small, c_large), jnp.where(small, s_small, s_large), jnp.where(small, 1.0, e)


def _kvb_parts(y, size, period, holonomy):
    """psi, psi-hat and chi-tilde of the Kraan-van Baal caloron at y (4,), constituents on the x3 axis.

    In units of beta (from memory, Kraan, van Baal, Nucl. Phys. B 533 (1998) 627 and
    Phys. Lett. B 428 (1998) 268; Lee, Lu, Phys. Rev. D 58 (1998) 025011), with d = pi rho^2 / beta,
    nu_1 = 2 omega, nu_2 = 1 - 2 omega, r_m = |x_vec - y_m|, c_m = cosh(2 pi nu_m r_m / beta),
    s_m = sinh(2 pi nu_m r_m / beta):
      psi     = c1 c2 + (r1^2 + r2^2 + d^2)/(2 r1 r2) s1 s2 + d (s1 c2/r1 + s2 c1/r2) - cos(2 pi t/beta),
      psi-hat = c1 c2 + (r1^2 + r2^2 - d^2)/(2 r1 r2) s1 s2 - cos(2 pi t/beta),
      chi     = (d/psi) (e^{2 pi i t/beta} s1/r1 + s2/r2),
    psi = 1/2 tr(A_2 A_1) - cos(2 pi t/beta) with A_m = (1/r_m) [[r_m, d], [0, r_{m+1}]] [[c_m, s_m], [s_m, c_m]].
    The phase's sign and the light constituent's place (y_1 = -nu_2 d e_3, y_2 = nu_1 d e_3, centre of
    mass at 0) were fixed by self-duality (tests/test_calorons.py).  All three are scaled by sigma_1 sigma_2.
    """
    d = PI * size**2 / period
    nu1 = 2.0 * holonomy
    nu2 = 1.0 - nu1
    ys, t = y[:3], y[3]
    e3 = jnp.array([0.0, 0.0, 1.0])
    y1, y2 = -nu2 * d * e3, nu1 * d * e3
    z1, z2 = jnp.sum((ys - y1) ** 2), jnp.sum((ys - y2) ** 2)
    k = 2.0 * PI / period
    c1, s1, e1 = _constituent(z1, k * nu1)
    c2, s2, e2 = _constituent(z2, k * nu2)
    cos_t = jnp.cos(k * t) * e1 * e2
    common = c1 * c2 + 0.5 * (z1 + z2) * s1 * s2 - cos_t
    psi = common + 0.5 * d * d * s1 * s2 + d * (s1 * c2 + s2 * c1)
    psi_hat = common - 0.5 * d * d * s1 * s2
    num = jnp.exp(1j * k * t) * s1 * e2 + s2 * e1
    return psi, psi_hat, d * num / psi


def _kvb_frame(axis) -> np.ndarray:
    """Rotation R (3, 3) with R e_3 = axis (unit); Rodrigues' formula, R = diag(1, -1, -1) for axis = -e_3."""
    n = np.asarray(axis, dtype=np.float64) / np.linalg.norm(axis)
    c = float(n[2])
    if c < -1.0 + 1e-12:
        return np.diag([1.0, -1.0, -1.0])
    v = np.cross([0.0, 0.0, 1.0], n)
    vx = np.array([[0.0, -v[2], v[1]], [v[2], 0.0, -v[0]], [-v[1], v[0], 0.0]])
    return np.eye(3) + vx + vx @ vx / (1.0 + c)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class HolonomyCaloronField(PytreeFields):
    """Kraan-van Baal SU(2) caloron of charge 1: period beta, holonomy omega, size rho, two constituents.

    A_mu = -1/2 eta-bar^3_{mu nu} d_nu log(phi) u_3
           - 1/2 phi Re[(eta-bar^1_{mu nu} - i eta-bar^2_{mu nu}) (u_1 + i u_2) (d_nu - 4 pi i omega delta_{nu 4}/beta) chi]
           + delta_{mu 4} (2 pi omega / beta) u_3,          phi = psi / psi-hat,
    with psi, psi-hat, chi of ``_kvb_parts`` (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory,
    adapted to anti-Hermitian u_a = -i sigma_a; Re acts on the complex coefficient: Re[Z (u_1 + i u_2)] =
    Re Z u_1 - Im Z u_2).  Periodic in x4 with period beta; A_4 -> 2 pi omega u_3 / beta at spatial
    infinity, so 1/2 tr P -> cos(2 pi omega).  Self-dual with Q = +1 per period; the action density is
    s = -1/2 box box log psi.  The constituents (action fractions 2 omega and 1 - 2 omega) sit at
    c - (1 - 2 omega) d n and c + 2 omega d n, d = pi rho^2 / beta, n = axis (their centre of mass is c).
    size: rho > 0; period: beta > 0; holonomy: omega in [0, 1/2]; center: (4,); axis: (3,) non-zero.
    """

    size: Array
    period: Array
    holonomy: Array
    center: Array
    axis: Array
    frame: Array = None  # type: ignore[assignment]

    def __post_init__(self):
        if _validate.is_tracer(self.size, self.period, self.holonomy, self.center, self.axis):
            return
        object.__setattr__(self, "size", positive_scalar("size", self.size))
        object.__setattr__(self, "period", positive_scalar("period", self.period))
        omega = _validate.finite_float("holonomy", self.holonomy)
        if not 0.0 <= omega <= 0.5:
            raise ValueError(f"holonomy omega must lie in [0, 1/2]; found {omega!r}")
        object.__setattr__(self, "holonomy", np.asarray(omega, dtype=np.float64))
        object.__setattr__(self, "center", _validate.point("center", self.center))
        axis = _validate.real_array("axis", self.axis, (3,))
        if not np.linalg.norm(axis) > 0:
            raise ValueError(f"axis must be a non-zero (3,) vector; found {axis.tolist()}")
        object.__setattr__(self, "axis", axis / np.linalg.norm(axis))
        object.__setattr__(self, "frame", _kvb_frame(axis))

    _leaves = ("size", "period", "holonomy", "center", "axis", "frame")

    @property
    def charge(self) -> int:
        """Instanton number per period, +1."""
        return 1

    def _local(self, x):
        """The point in the constituents' frame: y = R^T (x - c) on the spatial part, (4,)."""
        y = jnp.asarray(x, dtype=jnp.float64) - jnp.asarray(self.center)
        return jnp.concatenate([jnp.asarray(self.frame).T @ y[:3], y[3:]])

    def _args(self):
        return jnp.asarray(self.size), jnp.asarray(self.period), jnp.asarray(self.holonomy)

    def psi(self, x):
        """Kraan-van Baal's psi at one point (4,) -> () (times a positive scale that cancels in log-derivatives)."""
        return _kvb_parts(self._local(x), *self._args())[0]

    def potential(self, x):
        """A_mu at one point (4,) -> (4, 2, 2) complex, in the periodic gauge (formula in the class docstring)."""
        y = self._local(x)
        size, period, omega = self._args()

        def log_phi(v):
            psi, psi_hat, _ = _kvb_parts(v, size, period, omega)
            return jnp.log(psi / psi_hat)

        psi, psi_hat, chi = _kvb_parts(y, size, period, omega)
        phi = psi / psi_hat
        g_log = jax.grad(log_phi)(y)
        g_re = jax.grad(lambda v: jnp.real(_kvb_parts(v, size, period, omega)[2]))(y)
        g_im = jax.grad(lambda v: jnp.imag(_kvb_parts(v, size, period, omega)[2]))(y)
        e4 = jnp.array([0.0, 0.0, 0.0, 1.0])
        dchi = g_re + 1j * g_im - (4j * PI * omega / period) * e4 * chi
        zc = jnp.einsum("mn,n->m", ETA_BAR[0] - 1j * ETA_BAR[1], dchi)
        coef = jnp.stack([-0.5 * phi * jnp.real(zc), 0.5 * phi * jnp.imag(zc)])
        coef = jnp.concatenate([coef, -0.5 * jnp.einsum("mn,n->m", ETA_BAR[2], g_log)[None]], axis=0)
        coef = coef + jnp.outer(jnp.array([0.0, 0.0, 2.0 * PI / period]) * omega, e4)
        a_local = jnp.einsum("am,aij->mij", coef, UNITS_C)
        rot = jnp.asarray(self.frame)
        return jnp.concatenate([jnp.einsum("mn,nij->mij", rot, a_local[:3]), a_local[3:]], axis=0)

    def psi_action_density(self, x):
        """s = -1/2 box box log psi at one point (4,) -> () (Kraan, van Baal 1998, from memory; autodiff of psi).

        Not an engine hook: four derivatives of psi by autodiff compile for minutes; the engine uses the
        closed form of `density_batch`.
        """
        y = self._local(x)
        args = self._args()

        def lap(f):
            return lambda v: jnp.trace(jax.hessian(f)(v))

        log_psi = lambda v: jnp.log(_kvb_parts(v, *args)[0])  # noqa: E731
        return -0.5 * lap(lap(log_psi))(y)

    def _psi_geometry(self):
        """(positions (2, 3), fractions (2,)) as jax arrays (traceable): the constituents' data for psi."""
        d = PI * jnp.asarray(self.size) ** 2 / jnp.asarray(self.period)
        nu1 = 2.0 * jnp.asarray(self.holonomy)
        n = jnp.asarray(self.axis)
        c = jnp.asarray(self.center)[:3]
        return jnp.stack([c - (1.0 - nu1) * d * n, c + nu1 * d * n]), jnp.stack([nu1, 1.0 - nu1])

    def density_batch(self, points, quantity: str):
        """Field hook: closed-form s = -1/2 box box log psi (or q = s / 8 pi^2) at a batch; (m, 4) -> (m,).

        Kraan, van Baal, Nucl. Phys. B 533 (1998) 627 (from memory); the derivatives of log psi in closed
        form (`instantonkit.ansatz.caloron_psi`).  Self-dual, so q = s / (8 pi^2) (conventions module).
        """
        pos, frac = self._psi_geometry()
        pts = jnp.asarray(points) - jnp.concatenate([jnp.zeros(3), jnp.asarray(self.center)[3:]])
        s = caloron_action_density(pts, pos, frac, jnp.asarray(self.period))
        return s if quantity == "action_density" else s / (8.0 * PI**2)

    def asymptotic_holonomy(self) -> np.ndarray:
        """Field hook: mu = (-omega, omega), the eigenphases / 2 pi of the Polyakov loop at spatial infinity."""
        omega = float(self.holonomy)
        return np.array([-omega, omega])

    def constituents(self):
        """(positions (2, 4), action fractions (2,)): the monopoles at c - (1 - 2 omega) d n and c + 2 omega d n."""
        rho, beta, omega = float(self.size), float(self.period), float(self.holonomy)
        d = PI * rho**2 / beta
        n = np.concatenate([np.asarray(self.axis), [0.0]])
        c = np.asarray(self.center)
        pos = np.stack([c - (1.0 - 2.0 * omega) * d * n, c + 2.0 * omega * d * n])
        return pos, np.array([2.0 * omega, 1.0 - 2.0 * omega])

    def hint(self):
        """(centre (4,), scale): the centre of mass and max(rho, beta, half the constituent separation)."""
        rho, beta = float(self.size), float(self.period)
        return np.asarray(self.center), max(rho, beta, 0.5 * PI * rho**2 / beta)

    def layout(self):
        """(centres (m, 4), scales (m,)): each constituent of fraction nu > 0, scale beta / (2 nu) capped at d."""
        pos, frac = self.constituents()
        beta = float(self.period)
        keep = frac > 0
        return pos[keep], np.array([beta / max(2.0 * nu, 0.5) for nu in frac[keep]])

    def describe(self) -> str:
        rho, beta, omega = float(self.size), float(self.period), float(self.holonomy)
        return f"Kraan-van Baal caloron, rho = {rho:g}, period = {beta:g}, holonomy = {omega:g}"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'holonomy_caloron')."""
        return {
            "kind": "holonomy_caloron",
            "size": float(self.size),
            "period": float(self.period),
            "holonomy": float(self.holonomy),
            "center": np.asarray(self.center, dtype=np.float64).reshape(4).tolist(),
            "axis": np.asarray(self.axis, dtype=np.float64).reshape(3).tolist(),
            "charge": 1,
        }
