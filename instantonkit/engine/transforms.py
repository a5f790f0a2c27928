"""Gauge and space-time symmetry tools: fields wrapping fields (gauge, translation, rotation, dilation, parity).

Each wrapper is a frozen dataclass registered as a jax pytree whose children are the wrapped field and
the numeric parameters, so one compiled kernel serves all wrappers of the same structure.  Each
implements the field protocol of `instantonkit.engine.fields`: ``potential`` transforms the wrapped
potential, and ``field_strength``, ``action_density``, ``charge_density`` transform the wrapped closed
forms (or, when the wrapped field has none, its autodiff field strength).  ``method="autodiff"`` in the
engine differentiates the transformed potential instead, which is how the tests check the covariance.

Maps (conventions of `instantonkit.core.conventions`; ``R`` orthogonal, ``g`` unitary):

* gauge:     A'_mu = g A_mu g^-1 + g d_mu g^-1 = g A_mu g^dag - (d_mu g) g^dag,  F' = g F g^dag,  s' = s, q' = q;
* translate: A'(x) = A(x - shift);
* rotate:    p(R x) = l p(x) r-bar (unit quaternions l, r; an SO(4) rotation),
             A'_mu(x) = R_mu nu A_nu(R^T x),  F'_mu nu(x) = R_mu a R_nu b F_ab(R^T x),  s'(x) = s(R^T x);
* dilate:    A'(x) = A(x / c) / c,  F'(x) = F(x / c) / c^2,  s'(x) = s(x / c) / c^4;
* parity:    A'_mu(x) = P_mu nu A_nu(P x), P = diag(-1, -1, -1, 1): s'(x) = s(Px), q'(x) = -q(Px)
             (det P = -1 flips the sign of eps, so self-dual becomes anti-self-dual).
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core.conventions import E_MU
from .fields import as_field, hook
from .gauges import UNIT_TOL, ConstantGauge
from .wrapping import Wrapper, missing_hook, point_action_density, point_charge_density, point_field_strength

#: A point or parameter array the constructors accept (numpy or jax).
Array = jax.Array | np.ndarray
#: Anything numpy turns into an array (lists and tuples of numbers included).
ArrayLike = jax.typing.ArrayLike | tuple | list

__all__ = [
    "GaugeTransformed",
    "ConstantGauge",
    "Translated",
    "Rotated",
    "Dilated",
    "ParityImage",
    "gauge_transform",
    "translate",
    "rotate",
    "dilate",
    "parity",
    "rotation_matrix",
    "anti",
    "PARITY",
]

#: The parity matrix P = diag(-1, -1, -1, 1) (space reflection); (4,).
PARITY = np.array([-1.0, -1.0, -1.0, 1.0])

#: A generic point used to probe a gauge function at construction (unlikely to be singular).
_PROBE = np.array([0.3127, -0.4481, 0.2719, 0.5867])


# -- gauge transformation ---------------------------------------------------------------------------


def _is_static(g) -> bool:
    """True when g is an opaque callable (a pytree leaf): it then goes into the static aux data."""
    return jax.tree_util.treedef_is_leaf(jax.tree_util.tree_structure(g))


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class GaugeTransformed(Wrapper):
    """The field ``field`` gauge transformed by ``g``: A' = g A g^-1 + g d g^-1, F' = g F g^-1.

    g: callable x (4,) -> (N, N) unitary, written with jax.numpy.  A plain function is static pytree
    data (one compile per function); a registered pytree callable (e.g. a frozen dataclass with a
    ``__call__`` and array leaves) is a child, so one kernel serves all its parameter values.
    d g is taken by jax.jacfwd.  Densities are gauge invariant and forwarded unchanged.
    """

    field: object
    g: object

    _verb = "gauge transformed"

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))
        if not callable(self.g):
            raise TypeError(f"g must be a callable x -> (N, N) unitary; found {type(self.g).__name__}")
        leaves = jax.tree_util.tree_leaves(self.field) + (
            [] if _is_static(self.g) else jax.tree_util.tree_leaves(self.g)
        )
        if _validate.is_tracer(*leaves):
            return
        spec = jax.ShapeDtypeStruct((4,), jnp.float64)
        try:
            a_shape = jax.eval_shape(self.field.potential, spec).shape
            g_shape = jax.eval_shape(self.g, spec).shape
        except Exception as err:
            raise TypeError(f"g or the field failed on a (4,) point: {type(err).__name__}: {err}") from err
        n = a_shape[-1]
        if tuple(g_shape) != (n, n):
            raise ValueError(f"g(x) must have shape (N, N) = ({n}, {n}) to match the field; found {tuple(g_shape)}")
        gm = np.asarray(self.g(jnp.asarray(_PROBE)))
        if np.all(np.isfinite(gm)):
            dev = float(np.max(np.abs(gm @ gm.conj().T - np.eye(n))))
            if dev > UNIT_TOL:
                raise ValueError(f"g(x) must be unitary; max |g g^dag - 1| = {dev:.3e} at x = {_PROBE.tolist()}")

    def tree_flatten(self):
        if _is_static(self.g):
            return (self.field, None), self.g
        return (self.field, self.g), None

    @classmethod
    def tree_unflatten(cls, aux, children):
        obj = object.__new__(cls)
        object.__setattr__(obj, "field", children[0])
        object.__setattr__(obj, "g", aux if children[1] is None else children[1])
        return obj

    def _g(self, x):
        return jnp.asarray(self.g(x)).astype(jnp.complex128)

    @property
    def record(self):
        """Field hook: the record of the wrapped field and of g, or one that says why it cannot be rebuilt.

        When g offers ``record()`` (`ConstantGauge` does): {'kind': 'gauge_transformed', 'field':
        the wrapped field's record, 'g': g's record}.  Otherwise g is code, not data:
        {'kind': 'unrecordable', 'type': 'GaugeTransformed', 'reason': ..., 'field': the wrapped
        field's record}; `instantonkit.lattice.references.field_from_record` raises a ValueError quoting
        the reason.  Offered when the wrapped field has a record hook.
        """
        inner = hook(self.field, "record")
        if inner is None:
            missing_hook("record")
        g = self.g
        g_record = getattr(g, "record", None)
        if callable(g_record):  # a gauge function that records itself (e.g. ConstantGauge)
            return lambda: {"kind": "gauge_transformed", "field": inner(), "g": g_record()}
        name = getattr(g, "__qualname__", None) or type(g).__qualname__
        module = getattr(g, "__module__", None) or type(g).__module__
        reason = (
            f"a gauge transformation by the callable {module}.{name} cannot be stored: a function is code, "
            "not data, so the file cannot rebuild g; the wrapped field is recorded under 'field' "
            "(densities are gauge invariant), rebuild it and apply g again (a global rotation given as "
            "transforms.ConstantGauge records itself)"
        )

        def record():
            return {"kind": "unrecordable", "type": "GaugeTransformed", "reason": reason, "field": inner()}

        return record

    def potential(self, x):
        """A'_mu = g A_mu g^dag - (d_mu g) g^dag at one point (4,) -> (4, N, N)."""
        x = jnp.asarray(x, dtype=jnp.float64)
        g = self._g(x)
        gd = jnp.conj(g.T)
        dg = jnp.moveaxis(jax.jacfwd(self._g)(x), -1, 0)  # (mu, N, N)
        a = self.field.potential(x)
        return jnp.einsum("ij,mjk,kl->mil", g, a, gd) - jnp.einsum("mij,jk->mik", dg, gd)

    def field_strength(self, x):
        """F'_mu nu = g F_mu nu g^dag at one point -> (4, 4, N, N)."""
        x = jnp.asarray(x, dtype=jnp.float64)
        g = self._g(x)
        return jnp.einsum("ij,mnjk,kl->mnil", g, point_field_strength(self.field)(x), jnp.conj(g.T))

    def action_density(self, x):
        return point_action_density(self.field, x)

    def charge_density(self, x):
        return point_charge_density(self.field, x)

    @property
    def closed_link(self):
        """U'(x, d) = g(x) U(x, d) g(x + d)^dag from the wrapped field's closed-form link (when it has one)."""
        if not hasattr(self.field, "closed_link"):
            missing_hook("closed_link")

        def closed_link(x, d):
            x = jnp.asarray(x, dtype=jnp.float64)
            x1 = x + jnp.asarray(d, dtype=jnp.float64)
            return self._g(x) @ self.field.closed_link(x, d) @ jnp.conj(self._g(x1).T)

        return closed_link


def gauge_transform(field, g) -> GaugeTransformed:
    """Gauge transform ``field`` by ``g(x)`` (N, N) unitary: A' = g A g^-1 + g d g^-1.

    Args:
      field: a field or a bare callable A(x) with A: (4,) -> (4, N, N).
      g: callable x (4,) -> (N, N) unitary (jax.numpy); a plain function or a pytree callable.
    Returns:
      GaugeTransformed, a field with the same N; densities unchanged.
    Raises:
      TypeError when g is not callable or g / the field fail on a (4,) point; ValueError when g(x)
      has the wrong shape or is not unitary at a probe point.
    """
    return GaugeTransformed(field, g)


# -- translation ------------------------------------------------------------------------------------


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class Translated(Wrapper):
    """The field moved by ``shift`` (4,): A'(x) = A(x - shift), likewise F, s, q."""

    field: object
    shift: Array

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))
        if not _validate.is_tracer(self.shift):
            object.__setattr__(self, "shift", _validate.point("shift", self.shift))

    _leaves = ("field", "shift")
    _verb = "translated"
    _record_kind = "translated"

    def _record_params(self) -> dict:
        return {"shift": np.asarray(self.shift, dtype=np.float64).reshape(4).tolist()}

    def _y(self, x):
        return jnp.asarray(x, dtype=jnp.float64) - jnp.asarray(self.shift)

    def potential(self, x):
        return self.field.potential(self._y(x))

    def field_strength(self, x):
        return point_field_strength(self.field)(self._y(x))

    def action_density(self, x):
        return point_action_density(self.field, self._y(x))

    def charge_density(self, x):
        return point_charge_density(self.field, self._y(x))

    def _map_hint(self, centre, scale):
        return centre + np.asarray(self.shift), scale

    def _batch_points(self, pts):
        return pts - jnp.asarray(self.shift), 1.0, 1.0

    def _generator_points(self, pts, dirs):
        return pts - jnp.asarray(self.shift), dirs

    @property
    def closed_link(self):
        """U'(x, d) = U(x - shift, d) from the wrapped field's closed-form link (when it has one)."""
        if not hasattr(self.field, "closed_link"):
            missing_hook("closed_link")

        def closed_link(x, d):
            return self.field.closed_link(self._y(x), d)

        return closed_link


def translate(field, shift: Array) -> Translated:
    """Translate ``field`` by ``shift``: A'(x) = A(x - shift).

    Args:
      field: a field or a bare callable A(x).
      shift: (4,) float64.
    Returns:
      Translated, a field with the same N.
    Raises:
      ValueError for a shift not of shape (4,) or not finite; TypeError for non-real values.
    """
    return Translated(field, shift)


# -- rotation ---------------------------------------------------------------------------------------


def rotation_matrix(left, right):
    """The SO(4) matrix R with p(R x) = l p(x) r-bar; left, right: (4,) unit quaternions -> (4, 4).

    R_mu nu = Re(e-bar_mu l e_nu r-bar) = e_mu . (l e_nu r-bar) (E_MU is orthonormal).  (l, r) and
    (-l, -r) give the same R; every R in SO(4) arises (common practice).  jax-traceable.
    """
    e = jnp.asarray(E_MU)
    ler = qt.qmul(qt.qmul(jnp.asarray(left)[None], e), qt.qconj(jnp.asarray(right))[None])  # (nu, 4)
    return e @ ler.T


def _unit(name: str, value) -> np.ndarray:
    """A unit quaternion (4,) float64 (|q| = 1 to UNIT_TOL), else ValueError naming the deviation."""
    arr = _validate.point(name, value)
    dev = abs(float(np.linalg.norm(arr)) - 1.0)
    if dev > UNIT_TOL:
        raise ValueError(f"{name} must be a unit quaternion; found | |q| - 1 | = {dev:.3e}")
    return arr


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class Rotated(Wrapper):
    """The field rotated by R in SO(4), p(R x) = l p(x) r-bar: A'_mu(x) = R_mu nu A_nu(R^T x).

    left, right: (4,) unit quaternions l, r.  F' = R R F(R^T x) on both indices; s, q scalars.
    """

    field: object
    left: ArrayLike
    right: ArrayLike

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))
        if not _validate.is_tracer(self.left, self.right):
            object.__setattr__(self, "left", _unit("left", self.left))
            object.__setattr__(self, "right", _unit("right", self.right))

    _leaves = ("field", "left", "right")
    _verb = "rotated"
    _record_kind = "rotated"

    def _record_params(self) -> dict:
        return {
            "left": np.asarray(self.left, dtype=np.float64).reshape(4).tolist(),
            "right": np.asarray(self.right, dtype=np.float64).reshape(4).tolist(),
        }

    @property
    def matrix(self):
        """R, (4, 4)."""
        return rotation_matrix(self.left, self.right)

    def _back(self, x):
        r = self.matrix
        return r, r.T @ jnp.asarray(x, dtype=jnp.float64)

    def potential(self, x):
        r, y = self._back(x)
        return jnp.einsum("mn,nij->mij", r, self.field.potential(y))

    def field_strength(self, x):
        r, y = self._back(x)
        return jnp.einsum("ma,nb,abij->mnij", r, r, point_field_strength(self.field)(y))

    def action_density(self, x):
        return point_action_density(self.field, self._back(x)[1])

    def charge_density(self, x):
        return point_charge_density(self.field, self._back(x)[1])

    def _map_hint(self, centre, scale):
        return np.asarray(self.matrix) @ centre, scale

    def _batch_points(self, pts):
        return pts @ self.matrix, 1.0, 1.0  # rows y = R^T x

    def _generator_points(self, pts, dirs):
        r = self.matrix  # A'.d = (R^T d).A(R^T x)
        return pts @ r, dirs @ r

    @property
    def period(self):
        raise AttributeError("a rotated field has no period along x4 in general")


def rotate(field, left: ArrayLike, right: ArrayLike = (1.0, 0.0, 0.0, 0.0)) -> Rotated:
    """Rotate ``field`` by the SO(4) map p(x) -> l p(x) r-bar: A'_mu(x) = R_mu nu A_nu(R^T x).

    Args:
      field: a field or a bare callable A(x).
      left, right: (4,) float64 unit quaternions l, r.
    Returns:
      Rotated, a field with the same N (R = rotation_matrix(l, r)).
    Raises:
      ValueError for quaternions not of shape (4,), not finite or not of unit length (UNIT_TOL);
      TypeError for non-real values.
    """
    return Rotated(field, left, right)


# -- dilation ---------------------------------------------------------------------------------------


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class Dilated(Wrapper):
    """The field dilated about the origin by c > 0: A'(x) = A(x/c)/c, F'(x) = F(x/c)/c^2, s'(x) = s(x/c)/c^4."""

    field: object
    factor: Array

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))
        if not _validate.is_tracer(self.factor):
            c = _validate.real_array("factor", self.factor, ())
            object.__setattr__(self, "factor", np.asarray(_validate.positive_float("factor", c)))

    _leaves = ("field", "factor")
    _verb = "dilated"
    _record_kind = "dilated"

    def _record_params(self) -> dict:
        return {"factor": float(self.factor)}

    def _y(self, x):
        c = jnp.asarray(self.factor)
        return c, jnp.asarray(x, dtype=jnp.float64) / c

    def potential(self, x):
        c, y = self._y(x)
        return self.field.potential(y) / c

    def field_strength(self, x):
        c, y = self._y(x)
        return point_field_strength(self.field)(y) / c**2

    def action_density(self, x):
        c, y = self._y(x)
        return point_action_density(self.field, y) / c**4

    def charge_density(self, x):
        c, y = self._y(x)
        return point_charge_density(self.field, y) / c**4

    def _map_hint(self, centre, scale):
        c = float(self.factor)
        return c * centre, c * scale

    def _map_period(self, period):
        return float(self.factor) * period

    def _batch_points(self, pts):
        c = jnp.asarray(self.factor)
        return pts / c, 1.0 / c**4, 1.0

    def _generator_points(self, pts, dirs):
        c = jnp.asarray(self.factor)  # A'.d = A(x / c).(d / c)
        return pts / c, dirs / c


def dilate(field, factor) -> Dilated:
    """Dilate ``field`` about the origin by ``factor`` c > 0: A'(x) = A(x / c) / c.

    Args:
      field: a field or a bare callable A(x).
      factor: c > 0, a real number.
    Returns:
      Dilated, a field with the same N; s'(x) = s(x / c) / c^4.
    Raises:
      ValueError for c <= 0 or not finite; TypeError for non-real (or boolean) values.
    """
    return Dilated(field, factor)


# -- parity -----------------------------------------------------------------------------------------


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ParityImage(Wrapper):
    """The parity image: A'_mu(x) = P_mu A_mu(Px), P = diag(-1, -1, -1, 1); s'(x) = s(Px), q'(x) = -q(Px).

    Turns an instanton (self-dual) into an anti-instanton (anti-self-dual) and back; charge -> -charge.
    """

    field: object

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))

    _leaves = ("field",)
    _verb = "parity image"
    _record_kind = "parity"
    _pole_note = ", parity image"

    @staticmethod
    def _px(x):
        return jnp.asarray(x, dtype=jnp.float64) * PARITY

    def potential(self, x):
        return PARITY[:, None, None] * self.field.potential(self._px(x))

    def field_strength(self, x):
        return (PARITY[:, None] * PARITY[None, :])[:, :, None, None] * point_field_strength(self.field)(self._px(x))

    def action_density(self, x):
        return point_action_density(self.field, self._px(x))

    def charge_density(self, x):
        return -point_charge_density(self.field, self._px(x))

    def _map_hint(self, centre, scale):
        return PARITY * centre, scale

    def _map_charge(self, charge):
        return -charge

    def _batch_points(self, pts):
        return pts * PARITY, 1.0, -1.0

    def _generator_points(self, pts, dirs):
        return pts * PARITY, dirs * PARITY  # A'.d = A(P x).(P d)

    def conjugate(self):
        """Field hook: the partner of a parity image is the field it wraps (P^2 = 1)."""
        return self.field


def parity(field) -> ParityImage:
    """Parity image of ``field`` (x -> (-x1, -x2, -x3, x4)), its anti-self-dual partner.

    Args:
      field: a field or a bare callable A(x).
    Returns:
      ParityImage, a field with A'_mu(x) = P_mu A_mu(Px); charge -> -charge.
    Raises:
      TypeError when ``field`` is neither a field nor a callable.
    """
    return ParityImage(field)


def anti(field):
    """Anti-self-dual partner of ``field``: its parity image x -> Px, P = diag(-1, -1, -1, 1).

    A'_mu(x) = P_mu nu A_nu(Px), so F' is anti-self-dual, s'(x) = s(Px), q'(x) = -q(Px) and the centres
    move to P a_i.  The field is asked first: when it offers the ``conjugate`` hook (ADHM data flip
    their chirality, the same map; a parity image returns the field it wraps, so ``anti(anti(f))``
    gives ``f`` back) that is the answer; any other field is wrapped by `parity`.

    Args:
      field: a field or a bare callable A(x).
    Returns:
      a field of opposite charge (same type as ``field.conjugate()`` or a ParityImage).
    Raises:
      TypeError when ``field`` is neither a field nor a callable.
    """
    field = as_field(field)
    conjugate = hook(field, "conjugate")
    return conjugate() if conjugate is not None else ParityImage(field)
