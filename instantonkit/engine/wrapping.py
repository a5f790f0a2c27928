"""The wrapper base of `instantonkit.engine.transforms`: a field wrapping a field, and the forwarding of its hooks.

A wrapper offers a hook exactly when the field it wraps does and the subclass can map it (its ``_map_*``
methods); a hook it cannot map raises ``AttributeError``, so ``fields.hook`` says None.  The per-point
helpers ``point_field_strength``, ``point_action_density``, ``point_charge_density`` give a field's F, s and q by its closed forms when it has them, else by
autodiff of its potential (``fields.field_strength_from_potential``).
"""

from __future__ import annotations

from collections.abc import Callable

import jax.numpy as jnp
import numpy as np

from ..core._pytree import PytreeFields
from .fields import action_from_f, charge_from_f, field_strength_from_potential, hook

# -- per-point helpers for any field ----------------------------------------------------------------


def point_field_strength(field):
    """The field's per-point F: its closed form if it has one, else jax.jacfwd of its potential."""
    closed = hook(field, "field_strength")
    return closed if closed is not None else field_strength_from_potential(field.potential)


def point_action_density(field, x):
    """s(x): the field's closed form when it has one, else fields.action_from_f of its F."""
    closed = hook(field, "action_density")
    return closed(x) if closed is not None else action_from_f(point_field_strength(field)(x))


def point_charge_density(field, x):
    """q(x): the field's closed form when it has one, else fields.charge_from_f of its F."""
    closed = hook(field, "charge_density")
    return closed(x) if closed is not None else charge_from_f(point_field_strength(field)(x))


def missing_hook(name: str):
    """Raise AttributeError (so ``hasattr`` is False) when the wrapped field lacks ``name``."""
    raise AttributeError(f"the wrapped field has no {name!r}")


class Wrapper(PytreeFields):
    """Shared forwarding of ``hint``/``charge``/``period`` through the ``_map_*`` hooks of a subclass."""

    field: object

    def _map_hint(self, centre, scale):
        return centre, scale

    def _map_charge(self, charge):
        return charge

    def _map_period(self, period):
        return period

    @property
    def hint(self):
        if not hasattr(self.field, "hint"):
            missing_hook("hint")

        def hint():
            centre, scale = self.field.hint()
            return self._map_hint(np.asarray(centre, dtype=np.float64), float(scale))

        return hint

    @property
    def charge(self):
        if not hasattr(self.field, "charge"):
            missing_hook("charge")
        return self._map_charge(self.field.charge)

    @property
    def period(self):
        if not hasattr(self.field, "period"):
            missing_hook("period")
        return self._map_period(self.field.period)

    def _map_layout(self, centres, scales):
        """Centres (m, 4) and scales (m,) of the wrapped field -> those of this one (default: via _map_hint)."""
        mapped = [self._map_hint(c, float(s)) for c, s in zip(centres, scales)]
        return np.array([m[0] for m in mapped]).reshape(-1, 4), np.array([m[1] for m in mapped], dtype=np.float64)

    @property
    def layout(self):
        if not hasattr(self.field, "layout"):
            missing_hook("layout")

        def layout():
            centres, scales = self.field.layout()
            return self._map_layout(
                np.asarray(centres, dtype=np.float64).reshape(-1, 4), np.asarray(scales, dtype=np.float64).reshape(-1)
            )

        return layout

    @property
    def pole_count(self):
        if not hasattr(self.field, "pole_count"):
            missing_hook("pole_count")

        def pole_count():
            count, text = self.field.pole_count()
            return self._map_charge(count), text + self._pole_note

        return pole_count

    _pole_note = ""

    @property
    def constraint_residual(self):
        """The wrapped field's constraint residual (gauge, translation, rotation and dilation invariant)."""
        if not hasattr(self.field, "constraint_residual"):
            missing_hook("constraint_residual")
        return self.field.constraint_residual

    def describe(self) -> str:
        inner = self.field.describe() if hasattr(self.field, "describe") else type(self.field).__name__
        return f"{inner}, {self._verb}"

    def wrapped_callable(self):
        """Field hook: the bare user callable at the core of the wrapped chain, or None."""
        inner = hook(self.field, "wrapped_callable")
        return inner() if inner is not None else None

    _verb = "transformed"

    #: The 'kind' of this wrapper's record (references.field_from_record), and its parameters.
    _record_kind = "transformed"

    def _record_params(self) -> dict:
        return {}

    @property
    def record(self):
        """Field hook: {'kind': the transformation, 'field': the wrapped field's record, its parameters}.

        Offered when the wrapped field has a record hook; rebuilt by
        `instantonkit.lattice.references.field_from_record`.
        """
        inner = hook(self.field, "record")
        if inner is None:
            missing_hook("record")

        def record():
            return {"kind": self._record_kind, "field": inner(), **self._record_params()}

        return record

    def _batch_points(self, pts):
        """Points (m, 4) of this field -> (points of the wrapped field, density factor, sign of q); subclasses."""
        return pts, 1.0, 1.0

    #: (points (m, 4), directions (m, 4)) of this field -> (y, e) of the wrapped one with A'(x).d = A(y).e, in
    #: the subclasses that can map the generator (not gauge transformations: their g d g^-1 has no batch hook).
    _generator_points: Callable | None = None

    @property
    def generator_batch(self):
        """Field hook: A'.d at a batch from the wrapped field's hook (translations, rotations, dilations, parity)."""
        inner = hook(self.field, "generator_batch")
        to_inner = self._generator_points
        if inner is None or to_inner is None:
            missing_hook("generator_batch")

        def generator_batch(points, dirs):
            y, e = to_inner(jnp.asarray(points, dtype=jnp.float64), jnp.asarray(dirs, dtype=jnp.float64))
            return inner(y, e)

        return generator_batch

    @property
    def density_batch(self):
        """Field hook: the wrapped field's batch densities at the mapped points (s, q are scalars, q pseudo)."""
        inner = hook(self.field, "density_batch")
        if inner is None:
            missing_hook("density_batch")

        def density_batch(points, quantity: str):
            y, factor, sign = self._batch_points(jnp.asarray(points, dtype=jnp.float64))
            out = inner(y, quantity) * factor
            return sign * out if quantity == "charge_density" else out

        return density_batch
