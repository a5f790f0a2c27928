"""One flatten/unflatten for the library's frozen-dataclass pytrees (fields, ansaetze, wrappers), and their memo key.

A class lists its array leaves in ``_leaves`` and its static configuration in ``_static``; unflattening
sets the attributes directly, so ``__post_init__`` validation is not re-run on traced leaves.
Classes still register themselves with ``jax.tree_util.register_pytree_node_class``.
"""

from __future__ import annotations

from typing import Any

import jax
import numpy as np


class PytreeFields:
    """Mixin: ``tree_flatten``/``tree_unflatten`` from the names in ``_leaves`` and ``_static``."""

    _leaves: tuple = ()
    _static: tuple = ()

    def tree_flatten(self):
        return tuple(getattr(self, n) for n in self._leaves), tuple(getattr(self, n) for n in self._static)

    @classmethod
    def tree_unflatten(cls, aux, children):
        obj = object.__new__(cls)
        for name, value in zip(cls._leaves, children):
            object.__setattr__(obj, name, value)
        for name, value in zip(cls._static, aux):
            object.__setattr__(obj, name, value)
        return obj


def structure_key(tree, *extra) -> Any:
    """A memo key for what a trace of ``tree`` depends on: its treedef and its leaves' shapes and dtypes.

    Returns None when the static data are unhashable (no memo then); ``extra`` joins the key (e.g. a kernel).
    """
    leaves, treedef = jax.tree_util.tree_flatten(tree)
    dtypes = tuple(np.dtype(v.dtype) if hasattr(v, "dtype") else np.result_type(v) for v in leaves)
    key = (*extra, treedef, tuple(np.shape(v) for v in leaves), dtypes)
    try:
        hash(key)
    except TypeError:
        return None
    return key
