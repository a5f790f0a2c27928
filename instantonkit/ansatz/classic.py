"""Classic instanton ansaetze as fields: 't Hooft, Jackiw-Nohl-Rebbi, Harrington-Shepard, BPST.

Every object here is a frozen dataclass registered as a jax pytree (numeric parameters are leaves),
implements the field protocol of `instantonkit.engine.fields` with closed forms, and has ``hint()``
returning ``(centre (4,), length scale)`` and ``charge`` (the instanton number; per period for the
caloron).  Conventions: `instantonkit.core.conventions`.

**Scalar ansaetze** ('t Hooft, JNR, caloron).  For a positive harmonic function phi (box phi = 0 away
from its poles) the potential

    A_mu = -1/2 eta-bar_{a mu nu} d_nu log(phi) u_a,        u_a = (i, j, k) -> -i sigma_a,

is self-dual with ``s = -1/2 box box log phi`` ('t Hooft 1976, unpublished; Corrigan, Fairlie,
Phys. Lett. B 67 (1977) 69; Wilczek 1977; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642; all from
memory; self-duality and s are checked by autodiff in tests/test_ansatz.py).  The sign and
normalisation are fixed for *our* conventions by the k = 1 case: with
``phi = 1 + rho^2/y^2`` (``y = x - a``) one gets ``d_nu log phi = -2 rho^2 y_nu / (y^2 (y^2 + rho^2))``
and A is exactly the singular-gauge BPST potential ``g^-1 d g * rho^2/(y^2 + rho^2)`` with
``g = p(y)/|y|``, itself the gauge transform by ``g^-1`` of the regular-gauge potential
``(y^2/(y^2 + rho^2)) g d g^-1 = eta_{a mu nu} y_nu u_a / (y^2 + rho^2)``, whose field strength is
``F = -2 rho^2 eta_{a mu nu} u_a / (y^2 + rho^2)^2``: self-dual (eta is) and hence ``q = s / 8 pi^2 > 0``.
(Uses ``p-bar e_mu - e-bar_mu p = 2 eta-bar_{a mu nu} y_nu u_a`` and
``p e-bar_mu - e_mu p-bar = 2 eta_{a mu nu} y_nu u_a``, which follow from quaternion.thooft_eta.)

Writing ``omega = d log phi``, ``W_mu nu = d_mu omega_nu = H_mu nu / phi - omega_mu omega_nu`` (H the
Hessian of phi) and ``v_{a mu} = eta-bar_{a mu nu} omega_nu``, the closed forms are (c = -1/2,
``[u_b, u_c] = 2 eps_{bca} u_a``)

    F_mu nu = F^a_mu nu u_a,  F^a_mu nu = c (eta-bar_{a nu l} W_mu l - eta-bar_{a mu l} W_nu l)
                                           + 2 c^2 eps_{abc} v_{b mu} v_{c nu},
    s = sum_{a mu nu} (F^a_mu nu)^2,       q = 1/(16 pi^2) eps_{mu nu rho sigma} F^a_mu nu F^a_rho sigma

(tr u_a u_b = -2 delta_ab for the 2 x 2 images).  No derivative of A is taken.

**Singular points.**  The scalar ansaetze and the singular-gauge BPST potential are singular at the
poles of phi (the centres ``a_i``, the JNR poles ``y_i``, the caloron centres ``c + n beta e_4``).  Exactly
at a pole the potential, field strength and the scalar-ansatz densities evaluate to NaN, so the engine
(`instantonkit.engine.fields.evaluate`) raises a ValueError naming the point.  The closed-form BPST
densities are gauge invariant and return their finite value ``48 / rho^4`` at the centre in both gauges.

The anti-self-dual partners are the parity images (`instantonkit.engine.transforms.anti`, which wraps
these fields in `instantonkit.engine.transforms.parity`; for the scalar ansaetze the image is the
eta-form ansatz A'_mu = -1/2 eta_{a mu nu} d_nu log(phi o P) u_a, since P eta-bar_a P = eta_a).

The closed forms of the scalar ansatz live in `instantonkit.ansatz.scalar`, the caloron's field in
`instantonkit.ansatz.calorons`; every name stays importable from here.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..adhm.quaternionic import charge_one_link, projection_transition
from ..core import _validate
from ..core import quaternion as qt
from ..core._pytree import PytreeFields
from ..core.conventions import PI, point_to_quaternion
from .caloron_nahm import constituent_positions
from .calorons import CaloronField, HolonomyCaloronField
from .calorons_sun import SUNCaloronField, default_positions, fractions_of, holonomy_eigenphases
from .scalar import ANSATZ_COUPLING, ETA_BAR, UNITS_C, ScalarAnsatz, positive_scalar

#: Parameters as arrays (numpy, or jax tracers under jit/grad).
Array = jax.Array | np.ndarray

__all__ = [
    "ThooftField",
    "JNRField",
    "CaloronField",
    "HolonomyCaloronField",
    "BPSTField",
    "thooft",
    "jnr",
    "caloron",
    "SUNCaloronField",
    "bpst_field",
    "ANSATZ_COUPLING",
]

_ETA = qt.thooft_eta()  # (3, 4, 4)
_GAUGES = ("regular", "singular")


# -- validation helpers ---------------------------------------------------------------------------

#: Poles closer than this times max(1, max |coordinate|) count as coinciding (phi would lose a pole).
_COINCIDENT_POLES = 1e-12


def _poles(name: str, value, min_count: int) -> np.ndarray:
    """(k, 4) float64 distinct points (a single (4,) point promoted), at least ``min_count`` of them."""
    arr = _validate.points_array(name, value, min_count=min_count, shape_text="(k, 4)")
    scale = max(1.0, float(np.max(np.abs(arr))))
    return _validate.distinct_points(name, arr, _COINCIDENT_POLES * scale)


def _spread(points: np.ndarray) -> float:
    return float(np.max(np.linalg.norm(points - points.mean(0), axis=1))) if points.shape[0] > 1 else 0.0


def _pole_sums(x, poles, coef, hessian: bool):
    """sum_i c_i / |x - y_i|^2, its gradient and Hessian; x (4,), poles (k, 4), coef (k,).

    d_mu (1/r^2) = -2 y_mu / r^4,  d_mu d_nu (1/r^2) = -2 delta_mu nu / r^4 + 8 y_mu y_nu / r^6.
    """
    y = x[None, :] - poles
    r2 = jnp.sum(y * y, axis=-1)
    inv = 1.0 / r2
    val = jnp.sum(coef * inv)
    grad = jnp.sum((-2.0 * coef * inv * inv)[:, None] * y, axis=0)
    if not hessian:
        return val, grad, None
    hess = -2.0 * jnp.sum(coef * inv * inv) * jnp.eye(4) + 8.0 * jnp.einsum("k,km,kn->mn", coef * inv**3, y, y)
    return val, grad, hess


#: Accepted deviation of an orientation from SU(2) / from |u| = 1 (float64 rounding is ~1e-16).
_UNIT_TOL = 1e-10


def unit_quaternion(value) -> np.ndarray:
    """Orientation as a unit quaternion (4,); accepts (4,) real or an SU(2) matrix (2, 2)."""
    arr = np.asarray(value)
    if np.iscomplexobj(arr):
        if arr.shape != (2, 2):
            raise ValueError(f"an SU(2) orientation must have shape (2, 2); found {arr.shape}")
        dev = float(np.max(np.abs(arr.conj().T @ arr - np.eye(2))) + abs(np.linalg.det(arr) - 1.0))
        if dev > _UNIT_TOL:
            raise ValueError(f"orientation matrix must be in SU(2); deviation {dev:.3e}")
        return np.asarray(qt.from_matrix(arr))
    arr = _validate.real_array("orientation", arr)
    if arr.shape != (4,):
        raise ValueError(f"orientation must be a unit quaternion of shape (4,) or an SU(2) matrix; found {arr.shape}")
    dev = abs(float(np.sqrt(np.sum(arr**2))) - 1.0)
    if dev > _UNIT_TOL:
        raise ValueError(f"orientation must be a unit quaternion; found | |u| - 1 | = {dev:.3e}")
    return arr


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ThooftField(ScalarAnsatz):
    """'t Hooft ansatz, phi = 1 + sum_i rho_i^2 / |x - a_i|^2 (singular gauge), charge +k.

    centers: (k, 4) float64 points a_i (the poles, singular points of the gauge); sizes: (k,) float64 rho_i > 0.
    """

    centers: Array
    sizes: Array

    def __post_init__(self):
        if _validate.is_tracer(self.centers, self.sizes):
            return
        c = _poles("centers", self.centers, 1)
        object.__setattr__(self, "centers", c)
        object.__setattr__(self, "sizes", _validate.positive_vector("sizes", self.sizes, c.shape[0]))

    _leaves = ("centers", "sizes")

    @property
    def k(self) -> int:
        return self.centers.shape[0]

    @property
    def charge(self) -> int:
        """Instanton number +k."""
        return self.k

    def _derivs(self, x, hessian: bool = True):
        val, grad, hess = _pole_sums(x, jnp.asarray(self.centers), jnp.asarray(self.sizes) ** 2, hessian)
        return 1.0 + val, grad, hess

    def layout(self) -> tuple[np.ndarray, np.ndarray]:
        """Field hook: the poles (k, 4) and their sizes (k,), where the action sits."""
        return np.asarray(self.centers, dtype=np.float64).reshape(-1, 4), np.asarray(
            self.sizes, dtype=np.float64
        ).reshape(-1)

    def pole_count(self) -> tuple[int, str]:
        """Field hook: the charge read off the ansatz, k = number of poles (an input, not a check)."""
        return self.k, "'t Hooft poles (number of centres)"

    def describe(self) -> str:
        return f"'t Hooft ansatz, k = {self.k}"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'thooft')."""
        c, rho = self.layout()
        return {"kind": "thooft", "centers": c.tolist(), "sizes": rho.tolist(), "charge": self.k}

    def hint(self):
        """(mean of the centres (4,), max(largest size, spread of the centres))."""
        c = np.asarray(self.centers)
        return c.mean(axis=0), float(max(np.max(self.sizes), _spread(c)))


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class JNRField(ScalarAnsatz):
    """Jackiw-Nohl-Rebbi ansatz, phi = sum_i lambda_i^2 / |x - y_i|^2 over k + 1 poles, charge +k.

    poles: (k + 1, 4) float64 points y_i (singular points of the gauge); weights: (k + 1,) float64 lambda_i > 0.
    """

    poles: Array
    weights: Array

    def __post_init__(self):
        if _validate.is_tracer(self.poles, self.weights):
            return
        p = _poles("poles", self.poles, 2)
        object.__setattr__(self, "poles", p)
        object.__setattr__(self, "weights", _validate.positive_vector("weights", self.weights, p.shape[0]))

    _leaves = ("poles", "weights")

    @property
    def k(self) -> int:
        """Instanton number: the number of poles minus one."""
        return self.poles.shape[0] - 1

    @property
    def charge(self) -> int:
        return self.k

    def _derivs(self, x, hessian: bool = True):
        return _pole_sums(x, jnp.asarray(self.poles), jnp.asarray(self.weights) ** 2, hessian)

    def pole_count(self) -> tuple[int, str]:
        """Field hook: the charge read off the ansatz, k = number of poles - 1 (an input, not a check)."""
        return self.k, "JNR poles minus one"

    def describe(self) -> str:
        return f"JNR ansatz, k = {self.k}"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'jnr')."""
        poles = np.asarray(self.poles, dtype=np.float64).reshape(-1, 4)
        weights = np.asarray(self.weights, dtype=np.float64).reshape(-1)
        return {"kind": "jnr", "poles": poles.tolist(), "weights": weights.tolist(), "charge": self.k}

    def hint(self):
        """(mean of the poles (4,), max(largest weight, spread of the poles))."""
        p = np.asarray(self.poles)
        return p.mean(axis=0), float(max(np.max(self.weights), _spread(p)))


# -- BPST in closed form ----------------------------------------------------------------------------


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class BPSTField(PytreeFields):
    """Closed-form BPST instanton (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85).

    With y = x - a, g = p(y)/|y| and Omega the orientation (unit quaternion), in our conventions
      regular:  A_mu = Omega [eta_{a mu nu} y_nu / (y^2 + rho^2)] u_a Omega-bar        (smooth),
      singular: A_mu = Omega [rho^2 eta-bar_{a mu nu} y_nu / (y^2 (y^2 + rho^2))] u_a Omega-bar  (singular at a),
      F_mu nu = -2 rho^2 / (y^2 + rho^2)^2 Omega h eta_{a mu nu} u_a h-bar Omega-bar,  h = 1 (regular) or
      p-bar(y)/|y| (singular), and s = 48 rho^4 / (y^2 + rho^2)^4, q = s / 8 pi^2.
    (Derivation in the module docstring.)  center: (4,), size: rho > 0, orientation: (4,) unit quaternion.
    """

    center: Array
    size: Array
    orientation: Array
    gauge: str = "regular"

    def __post_init__(self):
        _validate.choice("gauge", self.gauge, _GAUGES)
        if _validate.is_tracer(self.center, self.size, self.orientation):
            return
        object.__setattr__(self, "center", _validate.point("center", self.center))
        object.__setattr__(self, "size", positive_scalar("size", self.size))
        object.__setattr__(self, "orientation", unit_quaternion(self.orientation))

    _leaves = ("center", "size", "orientation")
    _static = ("gauge",)

    @property
    def charge(self) -> int:
        return 1

    def with_gauge(self, gauge: str) -> BPSTField:
        """Same instanton in the other gauge ('regular' or 'singular')."""
        return dataclasses.replace(self, gauge=gauge)

    def _omega(self):
        return qt.to_matrix(jnp.asarray(self.orientation))  # (2, 2)

    def potential(self, x):
        """A_mu at one point (4,) -> (4, 2, 2) complex, in ``self.gauge``."""
        y = jnp.asarray(x, dtype=jnp.float64) - jnp.asarray(self.center)
        y2 = jnp.sum(y * y)
        rho2 = jnp.asarray(self.size) ** 2
        if self.gauge == "regular":
            v = jnp.einsum("amn,n->am", _ETA, y) / (y2 + rho2)
        else:
            v = rho2 * jnp.einsum("amn,n->am", ETA_BAR, y) / (y2 * (y2 + rho2))
        om = self._omega()
        a = jnp.einsum("am,aij->mij", v, UNITS_C)
        return om @ a @ jnp.conj(om.T)

    def field_strength(self, x):
        """F_mu nu = -2 rho^2/(y^2 + rho^2)^2 Omega h eta_{a mu nu} u_a h-bar Omega-bar at one point -> (4, 4, 2, 2)."""
        y = jnp.asarray(x, dtype=jnp.float64) - jnp.asarray(self.center)
        y2 = jnp.sum(y * y)
        rho2 = jnp.asarray(self.size) ** 2
        f = -2.0 * rho2 / (y2 + rho2) ** 2 * jnp.einsum("amn,aij->mnij", _ETA, UNITS_C)
        om = self._omega()
        if self.gauge == "singular":
            h = jnp.conj(qt.to_matrix(point_to_quaternion(y)).T) / jnp.sqrt(y2)  # p-bar(y)/|y|
            om = om @ h
        return om @ f @ jnp.conj(om.T)

    def action_density(self, x):
        """s = 48 rho^4 / (|x - a|^2 + rho^2)^4 at one point -> (); finite at the centre.

        Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85."""
        y = jnp.asarray(x, dtype=jnp.float64) - jnp.asarray(self.center)
        rho2 = jnp.asarray(self.size) ** 2
        return 48.0 * rho2**2 / (jnp.sum(y * y) + rho2) ** 4

    def charge_density(self, x):
        """q = s / 8 pi^2 (self-dual) at one point -> ()."""
        return self.action_density(x) / (8.0 * PI**2)

    def hint(self):
        """(centre (4,), size)."""
        return np.asarray(self.center), float(self.size)

    def closed_link(self, x, d):
        """Closed-form transporter x -> x + d, (4,), (4,) -> (2, 2): BPST with Lambda = rho Omega, B = p(center)
        in the same gauge (`instantonkit.adhm.quaternionic.charge_one_link`)."""
        return charge_one_link(
            jnp.asarray(self.size) * jnp.asarray(self.orientation),
            point_to_quaternion(jnp.asarray(self.center)),
            1,
            self.gauge,
            x,
            d,
        )

    @property
    def gauge_twin(self):
        """Field hook in singular gauge: () -> (this instanton in regular gauge, g), g(x) = U_reg(x)^dag U_sing(x)
        of the ADHM frames of Lambda = rho Omega, B = p(center) (the data of `closed_link`);
        links U(x, d) = g(x)^dag U_reg(x, d) g(x + d).  Absent (AttributeError) in regular gauge."""
        if self.gauge != "singular":
            raise AttributeError("gauge_twin is offered by the singular-gauge BPST field only")

        def gauge_twin():
            def transition(x):
                lam = jnp.asarray(self.size) * jnp.asarray(self.orientation)
                b = point_to_quaternion(jnp.asarray(self.center))
                return projection_transition(lam[None, None], b[None, None], 1, x)

            return self.with_gauge("regular"), transition

        return gauge_twin

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly."""
        return {
            "kind": "bpst",
            "center": np.asarray(self.center, dtype=np.float64).tolist(),
            "size": float(self.size),
            "orientation": np.asarray(self.orientation, dtype=np.float64).tolist(),
            "gauge": self.gauge,
            "charge": 1,
            "centres": [np.asarray(self.center, dtype=np.float64).tolist()],
            "sizes": [float(self.size)],
            "orientations": [np.asarray(self.orientation, dtype=np.float64).tolist()],
        }


# -- constructors -----------------------------------------------------------------------------------


def thooft(centers, sizes) -> ThooftField:
    """'t Hooft ansatz phi = 1 + sum_i rho_i^2 / |x - a_i|^2 (singular gauge); charge +k.

    Args:
      centers: (k, 4) float64 distinct poles a_i (a single (4,) point means k = 1).
      sizes: (k,) float64 rho_i > 0, or one number for all.
    Returns:
      ThooftField, a field of N = 2 with closed forms.
    Raises:
      ValueError for bad shapes, non-finite values, sizes <= 0 or coinciding centres;
      TypeError for non-real (complex, boolean) arrays.
    """
    return ThooftField(centers, sizes)


def jnr(poles, weights) -> JNRField:
    """Jackiw-Nohl-Rebbi ansatz phi = sum_i lambda_i^2 / |x - y_i|^2 over k + 1 poles; charge +k.

    (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642.)

    Args:
      poles: (k + 1, 4) float64 distinct points y_i, k + 1 >= 2.
      weights: (k + 1,) float64 lambda_i > 0, or one number for all.
    Returns:
      JNRField, a field of N = 2 with closed forms.
    Raises:
      ValueError for fewer than 2 poles, bad shapes, non-finite values, weights <= 0 or coinciding
      poles; TypeError for non-real arrays.
    """
    return JNRField(poles, weights)


def caloron(
    size, period, center=(0.0, 0.0, 0.0, 0.0), holonomy=0.0, axis=(0.0, 0.0, 1.0), positions=None
) -> CaloronField | HolonomyCaloronField | SUNCaloronField:
    """Caloron of size rho, period beta in x4 and holonomy about ``center``; charge +1 per period.

    SU(2): holonomy = omega, a number.  omega = 0 (the default) gives the Harrington-Shepard caloron
    (`CaloronField`, trivial holonomy); 0 < omega <= 1/2 the Kraan-van Baal caloron
    (`HolonomyCaloronField`) with A_4 -> 2 pi omega u_3 / beta at spatial infinity (1/2 tr P -> cos 2 pi
    omega) and two constituent monopoles of action fractions 2 omega and 1 - 2 omega, a distance
    pi rho^2 / beta apart along ``axis``.
    SU(N): holonomy = (mu_1, ..., mu_N), ascending, summing to 0 (P at infinity ~ diag exp(2 pi i mu_m));
    N constituents of fractions nu_m = mu_{m+1} - mu_m (nu_N = 1 + mu_1 - mu_N) at ``positions``, or on
    ``axis`` at neighbour distance pi rho^2 / beta with their nu-weighted mean at ``center``.  N = 2 gives
    the SU(2) field of omega = mu_2; N >= 3 a `SUNCaloronField` (closed-form densities; the potential by
    the Nahm transform, `instantonkit.ansatz.caloron_nahm`).

    Args:
      size: rho > 0, a real number (None when ``positions`` are given).
      period: beta > 0, a real number.
      center: (4,) float64 point c (for nonzero holonomy the constituents' centre of mass; its x4 is the
        caloron's time).
      holonomy: omega in [0, 1/2], a real number; or mu, a sequence of N >= 2 real numbers.
      axis: (3,) non-zero vector, the direction from the first constituent to the second.
      positions: (N, 3) distinct constituent positions (with a sequence holonomy only).
    Returns:
      CaloronField, HolonomyCaloronField (N = 2) or SUNCaloronField (N >= 3), periodic in x4.
    Raises:
      ValueError for rho or beta <= 0 or not finite, omega outside [0, 1/2], eigenphases unordered, not
      summing to 0 or spread beyond 1, a centre not of shape (4,), a zero axis, coincident positions, or
      both or neither of size and positions; TypeError for non-real values.
    """
    if np.ndim(holonomy) == 0 and positions is None:
        omega = _validate.finite_float("holonomy", holonomy)
        if not 0.0 <= omega <= 0.5:
            raise ValueError(f"holonomy omega must lie in [0, 1/2]; found {omega!r}")
        if omega == 0.0:
            return CaloronField(size, period, center)
        return HolonomyCaloronField(size, period, np.asarray(omega), center, axis)
    mu = holonomy_eigenphases(np.atleast_1d(holonomy) if np.ndim(holonomy) else [-holonomy, holonomy])
    beta = float(_validate.positive_float("period", period))
    c = _validate.point("center", center)
    if (positions is None) == (size is None):
        raise ValueError(
            "give the constituents either by size (on axis, pi rho^2 / beta apart) or by positions, not "
            f"{'both' if size is not None else 'neither'}; found size = {size!r}, positions = "
            f"{None if positions is None else np.asarray(positions).tolist()}"
        )
    if positions is None:
        ax = _validate.real_array("axis", axis, (3,))
        if not np.linalg.norm(ax) > 0:
            raise ValueError(f"axis must be a non-zero (3,) vector; found {ax.tolist()}")
        rho = float(_validate.positive_float("size", size))
        pos = default_positions(mu, rho, beta, c, ax)
    else:
        pos = constituent_positions(positions, mu.shape[0])
    if mu.shape[0] > 2:
        return SUNCaloronField(np.asarray(beta), mu, pos, c[3])
    sep = pos[1] - pos[0]
    dist = float(np.linalg.norm(sep))
    nu = fractions_of(mu)
    centre = np.append(nu @ pos, c[3])
    rho = float(np.sqrt(dist * beta / np.pi))
    if mu[1] == 0.0:
        return CaloronField(np.asarray(rho), np.asarray(beta), centre)
    return HolonomyCaloronField(np.asarray(rho), np.asarray(beta), np.asarray(float(mu[1])), centre, sep)


def bpst_field(
    center=(0.0, 0.0, 0.0, 0.0), size=1.0, gauge: str = "regular", orientation=(1.0, 0.0, 0.0, 0.0)
) -> BPSTField:
    """Closed-form BPST instanton; gauge 'regular' (smooth) or 'singular' (singular at the centre).

    Args:
      center: (4,) float64 point a.
      size: rho > 0, a real number.
      gauge: 'regular' or 'singular'.
      orientation: unit quaternion (4,) or SU(2) matrix (2, 2), acting as the global gauge rotation Omega.
    Returns:
      BPSTField, a field of N = 2 with closed forms; charge +1.
    Raises:
      ValueError for a bad centre, rho <= 0, an unknown gauge or a non-unit orientation; TypeError for non-real values.
    """
    return BPSTField(center, size, orientation, gauge)
