"""The field protocol: what a field is, its optional hooks, and user callables seen as fields (floor 1).

A *field* is anything with ``potential(x)`` (`Field`); everything else it can do is an optional
hook (`FieldHooks`, names in `HOOKS`), asked for with `hook`.  A bare user callable
``A(x)`` becomes a `CallableField` (static data compared by code and captured values, so equal
closures share one compiled kernel); `ParametrisedField` makes parameters pytree leaves.  The
engine that evaluates fields is `instantonkit.engine.fields`, which re-exports every name here.
"""

from __future__ import annotations

import dataclasses
import functools
import types
from collections.abc import Callable
from typing import Any, Protocol, runtime_checkable

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate

#: An array the public functions accept (numpy or jax); results are numpy arrays.
Array = jax.Array | np.ndarray

__all__ = [
    "Field",
    "FieldHooks",
    "HOOKS",
    "hook",
    "CallableField",
    "ParametrisedField",
    "as_field",
    "as_points",
]


# -- the field protocol -----------------------------------------------------------------------------


@runtime_checkable
class Field(Protocol):
    """What the engine needs of a field: the potential at one point, jax-traceable.

    ``potential(x)``: x (4,) float64 -> A_mu (4, N, N) complex128, anti-Hermitian (conventions module).
    Everything else a field may offer is an optional hook, listed in `FieldHooks` and asked for
    with `hook`; the engine and the checks never look at a field's class.
    """

    def potential(self, x: Any) -> Any: ...


class FieldHooks(Protocol):
    """The optional hooks a field may implement (a reference for implementers and type checkers).

    Closed forms, used by the engine when present (``method="auto"``); all jax-traceable, one point:
      ``field_strength(x) -> (4, 4, N, N)``, ``action_density(x) -> ()``, ``charge_density(x) -> ()``.
    Layout, used by the integrals and the lattice (host-side numpy):
      ``hint() -> (centre (4,), scale)``: one centre and length scale for the whole field;
      ``layout() -> (centres (m, 4), scales (m,))``: where the action sits (one entry per lump), for
      the quadrature's per-centre rules.  Without it the integrals use ``hint()``.
    Facts known from the construction (shown by ``verify`` as inputs, never as checks):
      ``charge``: the instanton number the construction gives (int attribute or property);
      ``pole_count() -> (int, str)``: the charge read off the ansatz's poles, with a description;
      ``constraint_residual() -> float``: the residual of the field's defining constraint (ADHM);
      ``period``: the period in x4 for fields on R^3 x S^1 (float attribute or property);
      ``asymptotic_holonomy() -> (N,)``: mu_1 <= ... <= mu_N (sum 0) with the Polyakov loop at spatial
      infinity conjugate to diag(exp(2 pi i mu_m)) (calorons);
      ``constituents() -> (positions (n, 4), fractions (n,))``: the constituent monopoles of a caloron
      and their action fractions (summing to the charge per period).
    Other routes and kernels:
      ``log_det(x) -> ()``: log det of the ADHM Gram matrix, for Osborn's density s = -1/2 box box log det;
      ``gram(x) -> (k, k)``: the ADHM Gram matrix itself (real symmetric Delta^dag Delta for quaternionic
      data, Hermitian f^-1 for complex SU(N) data), quadratic in x; the Osborn route of ``verify``;
      ``closed_link(x, d) -> (N, N)``: the closed-form parallel transporter from x to x + d
      (jax-traceable, one link), used by the lattice instead of Magnus steps;
      ``describe() -> str``: a one-line description for reports;
      ``conjugate() -> field``: the field's own anti-self-dual partner (the parity image), used by
      `instantonkit.engine.transforms.anti` instead of a parity wrapper (ADHM data flip chirality,
      a parity image gives back the field it wraps);
      ``wrapped_callable() -> CallableField | None``: the bare user callable at the core of a wrapper
      chain (a `CallableField` returns itself, wrappers ask the field they wrap), so the engine
      can check its shape and anti-Hermiticity once before compiling;
      ``gauge_twin() -> (twin, g)``: the same field in another gauge and the transition g(x) -> (N, N)
      (jax-traceable) with A = g^dag A_twin g + g^dag dg, so links U(x, d) = g(x)^dag U_twin(x, d) g(x + d);
      g is not finite where this field's gauge is singular (the lattice builds links touching such
      points in the twin's gauge, `instantonkit.lattice.starts.block_links`);
      ``record() -> dict``: a JSON-ready description with a 'kind' key from which
      `instantonkit.lattice.references.field_from_record` rebuilds the field (stored in lattice files);
      ``density_batch(points, quantity) -> (m,)``: the closed-form ``action_density`` or
      ``charge_density`` at a whole batch of points (m, 4) at once (jax-traceable, equal to the
      per-point closed forms to rounding), used by ``method="auto"`` instead of vmapping them, so a
      field can lay its work out across points (ADHM data: the batch-major k x k kernels); a field that
      offers it and not the per-point density hooks gets those from it (`hook`);
      ``generator_batch(points, dirs) -> (m, N, N)``: A_mu d_mu at a batch (the Magnus links' nodes).
    """

    def field_strength(self, x: Any) -> Any: ...
    def action_density(self, x: Any) -> Any: ...
    def charge_density(self, x: Any) -> Any: ...
    def hint(self) -> tuple[Any, float]: ...
    def layout(self) -> tuple[np.ndarray, np.ndarray]: ...
    def pole_count(self) -> tuple[int, str]: ...
    def constraint_residual(self) -> float: ...
    def log_det(self, x: Any) -> Any: ...
    def gram(self, x: Any) -> Any: ...
    def closed_link(self, x: Any, d: Any) -> Any: ...
    def describe(self) -> str: ...
    def conjugate(self) -> Any: ...
    def wrapped_callable(self) -> Any: ...
    def gauge_twin(self) -> tuple[Any, Callable]: ...
    def record(self) -> dict: ...
    def density_batch(self, points: Any, quantity: str) -> Any: ...
    def generator_batch(self, points: Any, dirs: Any) -> Any: ...
    def asymptotic_holonomy(self) -> np.ndarray: ...
    def constituents(self) -> tuple[np.ndarray, np.ndarray]: ...


#: Names of the optional hooks (methods or attributes), documented in `FieldHooks`.
HOOKS = tuple(name for name in vars(FieldHooks) if not name.startswith("_")) + ("charge", "period")


def hook(field, name: str):
    """The field's hook ``name`` (bound method or attribute value), or None when it does not offer it.

    Wrappers (`instantonkit.engine.transforms`) offer a hook exactly when the field they wrap does and
    they can map it; asking is the only way modules learn what a field can do.  A field that offers
    ``density_batch`` but not the per-point ``action_density`` / ``charge_density`` gets them from it (a batch
    of one point), so a closed form written for batches is written once.
    """
    if name not in HOOKS:
        raise ValueError(f"unknown field hook {name!r}; the hooks are {HOOKS}")
    try:
        value = getattr(field, name)
    except AttributeError:
        value = None
    if value is None and name in ("action_density", "charge_density"):
        batch = hook(field, "density_batch")
        if batch is not None:
            return lambda x: batch(jnp.asarray(x)[None], name)[0]
    return value


# -- inputs -----------------------------------------------------------------------------------------


def as_points(points: Array) -> tuple[np.ndarray, tuple[int, ...]]:
    """Validate points and flatten them: (..., 4) -> ((M, 4) float64 numpy array, leading shape).

    Args:
      points: (..., 4) real array (numpy, jax or nested lists); not a jax tracer.
    Returns:
      ((M, 4) float64 numpy array, leading shape ``...``), M the product of the leading shape.
    Raises:
      TypeError for a tracer or non-real input; ValueError for a wrong last axis or non-finite values.
    """
    return _validate.points(points)


def _same_value(a, b, depth: int = 0) -> bool:
    """True when two captured values surely compute alike (identity, or equal plain data / arrays)."""
    if a is b:
        return True
    if type(a) is not type(b) or depth > 4:
        return False
    if isinstance(a, (float, complex)):
        return repr(a) == repr(b)  # bitwise for practical purposes: -0.0 and nan kept apart / together
    if isinstance(a, (int, str, bytes, type(None))):
        return a == b
    if isinstance(a, (tuple, list)):
        return len(a) == len(b) and all(_same_value(u, v, depth + 1) for u, v in zip(a, b))
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same_value(a[key], b[key], depth + 1) for key in a)
    if isinstance(a, (np.ndarray, np.generic, jax.Array)) and not _validate.is_tracer(a):
        x, y = np.asarray(a), np.asarray(b)
        return x.dtype == y.dtype and x.shape == y.shape and x.tobytes() == y.tobytes()
    if isinstance(a, types.FunctionType):
        return _same_function(a, b, depth + 1)
    if isinstance(a, functools.partial):
        return (
            _same_value(a.func, b.func, depth + 1)
            and _same_value(a.args, b.args, depth + 1)
            and _same_value(a.keywords, b.keywords, depth + 1)
        )
    if isinstance(a, types.MethodType):
        return a.__self__ is b.__self__ and a.__func__ is b.__func__
    return False


def _same_function(f, g, depth: int = 0) -> bool:
    """Same code, same module globals, equal defaults and equal captured values (cells)."""
    cf, cg = f.__closure__ or (), g.__closure__ or ()
    try:
        cells = [(u.cell_contents, v.cell_contents) for u, v in zip(cf, cg)]
    except ValueError:  # an empty cell (a name not bound yet)
        return False
    return (
        f.__code__ == g.__code__
        and f.__globals__ is g.__globals__
        and len(cf) == len(cg)
        and _same_value(f.__defaults__, g.__defaults__, depth)
        and _same_value(f.__kwdefaults__, g.__kwdefaults__, depth)
        and all(_same_value(u, v, depth) for u, v in cells)
    )


def _code_names(code: types.CodeType) -> set[str]:
    """The global (and attribute) names a code object and the code objects nested in it refer to."""
    names = set(code.co_names)
    for const in code.co_consts:
        if isinstance(const, types.CodeType):
            names |= _code_names(const)
    return names


def _referenced_globals(fn, depth: int = 0) -> tuple:
    """((name, value), ...) of the module globals ``fn`` reads, as they are bound now.

    jax bakes what a traced function reads from its module into the compiled kernel, so a key by
    code alone would reuse the kernel of ``lambda x: o.potential(x)`` after ``o`` is rebound (a
    silently wrong number).  Functions of the same module that ``fn`` calls (or captures) are followed
    a few levels deep, so a rebound global read by a helper changes the key too.
    """
    while isinstance(fn, functools.partial):
        fn = fn.func
    if not isinstance(fn, types.FunctionType) or depth > 3:
        return ()
    glob = fn.__globals__
    out: list[tuple] = []
    for name in sorted(_code_names(fn.__code__)):
        if name in glob:
            value = glob[name]
            out.append((name, value))
            if isinstance(value, types.FunctionType) and value is not fn and value.__module__ == fn.__module__:
                out.append((name + "()", _referenced_globals(value, depth + 1)))
    for i, cell in enumerate(fn.__closure__ or ()):
        try:
            value = cell.cell_contents
        except ValueError:  # an empty cell
            continue
        if isinstance(value, types.FunctionType) and value.__module__ == fn.__module__:
            out.append((f"cell {i}()", _referenced_globals(value, depth + 1)))
    return tuple(out)


class _CodeKey:
    """Static pytree data for a user callable: equal for two closures of the same code and captured values.

    jax keys its compiled kernels by the pytree structure, whose static data compare with ``==``; with
    the function object itself every new closure (``lambda x: A(x)`` built again in a loop or a
    function) compiled anew.  Two callables compare equal here when they surely compute the same:
    the same object, or plain functions with the same code, the same module globals and captured
    values (cells, defaults) that are identical or equal numbers, strings, arrays or such functions
    (``functools.partial`` likewise), and in both cases the module globals the code reads bound to the
    same values (`_referenced_globals`: rebinding ``o`` in ``lambda x: o.potential(x)`` compiles again).  A closure over a *different* value is a different key and
    compiles again: put such parameters in `ParametrisedField` instead.
    """

    __slots__ = ("fn", "globals")

    def __init__(self, fn):
        self.fn = fn
        self.globals = _referenced_globals(fn)

    def __eq__(self, other):
        return (
            isinstance(other, _CodeKey) and _same_value(self.fn, other.fn) and _same_value(self.globals, other.globals)
        )

    def __hash__(self):
        fn = self.fn
        while isinstance(fn, functools.partial):
            fn = fn.func
        if isinstance(fn, types.FunctionType):
            return hash(fn.__code__)
        if isinstance(fn, types.MethodType):
            return hash((id(fn.__self__), id(fn.__func__)))
        return id(fn)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class CallableField:
    """A user callable ``A(x): (4,) -> (4, N, N)`` (anti-Hermitian, jax.numpy) seen as a field.

    The callable is static pytree data, compared by code and captured values (not by object
    identity): two closures of the same code over equal values share one compiled kernel, a closure
    over a new value compiles again (use `ParametrisedField` to scan parameters).
    """

    fn: Callable[[Any], Any]

    def potential(self, x):
        return jnp.asarray(self.fn(x)).astype(jnp.complex128)

    def describe(self) -> str:
        """Field hook: one line for reports."""
        return f"callable potential {getattr(self.fn, '__name__', type(self.fn).__name__)}"

    def wrapped_callable(self) -> CallableField:
        """Field hook: the bare callable at the core of a wrapper chain is this object."""
        return self

    def tree_flatten(self):
        return (), (_CodeKey(self.fn),)

    @classmethod
    def tree_unflatten(cls, aux, children):
        return cls(aux[0].fn)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ParametrisedField:
    """A user potential ``fn(x, params)`` whose parameters are pytree leaves: one kernel for every value.

    A closure ``lambda x: A(x, 0.7)`` is static data, so each new value compiles anew (seconds).
    Here ``params`` (a number, an array or any pytree of them) are leaves, traced by jit like the
    moduli of ADHM data, so a scan over parameter values compiles once per structure (and shape)
    of ``params``; only a new ``fn`` (other code or other captured values) compiles again.

    fn: ``fn(x, params)`` with x (4,) float64 -> (4, N, N) anti-Hermitian (jax.numpy), the same ``fn``
        object for every value of the scan (define it once, outside the loop).
    params: the parameters (pytree of numbers / arrays; floats become float64 arrays).

    Example::

        def ansatz(x, p):            # p = {"rho": ..., "centre": (4,)}
            ...
        for rho in (0.5, 1.0, 1.5, 2.0):
            s = ik.action_density(ParametrisedField(ansatz, {"rho": rho, "centre": c}), pts)  # one compile
    """

    fn: Callable[[Any, Any], Any]
    params: Any = None

    def __post_init__(self):
        if not callable(self.fn):
            raise TypeError(f"fn must be a callable fn(x, params); found {type(self.fn).__name__}")
        leaves, treedef = jax.tree_util.tree_flatten(self.params)
        if not any(_validate.is_tracer(leaf) for leaf in leaves):
            leaves = [
                jnp.asarray(leaf, dtype=jnp.float64)
                if isinstance(leaf, (int, float)) and not isinstance(leaf, bool)
                else leaf
                for leaf in leaves
            ]
            object.__setattr__(self, "params", jax.tree_util.tree_unflatten(treedef, leaves))

    def potential(self, x):
        return jnp.asarray(self.fn(x, self.params)).astype(jnp.complex128)

    def describe(self) -> str:
        """Field hook: one line for reports."""
        return f"parametrised potential {getattr(self.fn, '__name__', type(self.fn).__name__)}"

    def wrapped_callable(self) -> ParametrisedField:
        """Field hook: the user callable at the core of a wrapper chain (checked once before compiling)."""
        return self

    def tree_flatten(self):
        return (self.params,), (_CodeKey(self.fn),)

    @classmethod
    def tree_unflatten(cls, aux, children):
        obj = object.__new__(cls)
        object.__setattr__(obj, "fn", aux[0].fn)
        object.__setattr__(obj, "params", children[0])
        return obj


def as_field(obj):
    """Return ``obj`` if it has a ``potential`` method, wrap it if it is a plain callable, else TypeError."""
    if hasattr(obj, "potential") and callable(obj.potential):
        return obj
    if callable(obj):
        return CallableField(obj)
    raise TypeError(f"a field must have a potential(x) method or be a callable A(x); found {type(obj).__name__}")


# -- per-point formulas (conventions module) --------------------------------------------------------
