"""One flatten/unflatten for the library's frozen-dataclass pytrees (fields, ansaetze, wrappers).

A class lists its array leaves in ``_leaves`` and its static configuration in ``_static``; unflattening
sets the attributes directly, so ``__post_init__`` validation is not re-run on traced leaves.
Classes still register themselves with ``jax.tree_util.register_pytree_node_class``.
"""

from __future__ import annotations


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
