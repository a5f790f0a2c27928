"""Gauge functions that record themselves: the constant gauge g(x) = g0 of `transforms.gauge_transform`.

A gauge function with a ``record()`` lets a gauge-transformed field be written to a lattice file and
rebuilt (``references.field_from_record``); a bare callable g cannot be.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._pytree import PytreeFields

#: A point or parameter array the constructors accept (numpy or jax).
Array = jax.Array | np.ndarray

#: Accepted deviation from unitarity of g(x) and from |q| = 1 of rotation quaternions (float64 rounding is ~1e-16).
UNIT_TOL = 1e-10


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ConstantGauge(PytreeFields):
    """A global gauge rotation g(x) = g0 (constant unitary), a gauge function that records itself.

    With d g = 0 the map is A' = g0 A g0^dag, F' = g0 F g0^dag (the gauge map above).  matrix: (N, N)
    complex128 unitary (to 1e-10).  ``record()`` -> {'kind': 'constant', 'matrix': {'re', 'im'}}.
    """

    matrix: Array

    _leaves = ("matrix",)

    def __post_init__(self):
        if _validate.is_tracer(self.matrix):
            return
        m = np.asarray(self.matrix)
        if m.ndim != 2 or m.shape[0] != m.shape[1] or m.shape[0] < 1:
            raise ValueError(f"matrix must have shape (N, N); found {m.shape}")
        if m.dtype == bool or not np.issubdtype(m.dtype, np.number):
            raise TypeError(f"matrix must be numeric; found dtype {m.dtype}")
        m = m.astype(np.complex128)
        if not np.all(np.isfinite(m)):
            raise ValueError(f"matrix must be finite; found {int(np.sum(~np.isfinite(m)))} non-finite entries")
        dev = float(np.max(np.abs(m @ m.conj().T - np.eye(m.shape[0]))))
        if dev > UNIT_TOL:
            raise ValueError(f"matrix must be unitary; max |g g^dag - 1| = {dev:.3e}")
        object.__setattr__(self, "matrix", m)

    def __call__(self, x):
        """g0 at one point (4,) -> (N, N) complex128."""
        return jnp.asarray(self.matrix, dtype=jnp.complex128)

    def record(self) -> dict:
        """A JSON-ready description that rebuilds g exactly (real and imaginary parts)."""
        m = np.asarray(self.matrix, dtype=np.complex128)
        return {"kind": "constant", "matrix": {"re": m.real.tolist(), "im": m.imag.tolist()}}
