"""The evaluation engine: a field and points in, float64/complex128 arrays out.

A *field* is anything with a method ``potential(x)`` mapping one point ``(4,)`` to the four
anti-Hermitian matrices ``A_mu`` ``(4, N, N)`` (jax-traceable), optionally with closed forms
``field_strength(x) -> (4, 4, N, N)``, ``action_density(x) -> ()`` and ``charge_density(x) -> ()``.
`instantonkit.adhm.quaternionic.ADHMData` and the ansatz objects of `instantonkit.ansatz.classic` are fields; a
bare callable ``A(x)`` is wrapped by `as_field`.  Fields should be pytrees (frozen dataclasses
registered with jax) so that one compiled kernel serves every field of the same structure.

The public functions validate the points once, flatten the leading shape, pick the closed form when
the field has one (``method="auto"``) or differentiate the potential with ``jax.jacfwd``
(``method="autodiff"``), map over fixed-size chunks with ``jit(vmap(...))`` so that memory stays
bounded, and restore the leading shape.  Formulas follow `instantonkit.core.conventions`.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence
from typing import Any

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._batching import padded_size, run_batched
from ..core._config import lean_compiler_options
from ..core._pytree import structure_key
from ..core.conventions import ACTION_DENSITY_FACTOR, CHARGE_DENSITY_FACTOR, LEVI_CIVITA
from .protocol import HOOKS, Array, CallableField, Field, FieldHooks, ParametrisedField, as_field, as_points, hook

__all__ = [
    "Field",
    "FieldHooks",
    "HOOKS",
    "hook",
    "CallableField",
    "ParametrisedField",
    "as_field",
    "as_points",
    "potential",
    "field_strength",
    "action_density",
    "charge_density",
    "self_duality_residual",
    "evaluate",
    "evaluate_many",
    "QUANTITIES",
    "dual",
    "field_strength_from_potential",
    "action_from_f",
    "charge_from_f",
    "residual_from_f",
    "DEFAULT_CHUNK",
    "output_shape",
]

#: Points per compiled call; memory per call is about DEFAULT_CHUNK times the per-point work.
DEFAULT_CHUNK = 16384

#: Relative size of A + A^dag accepted for a user callable (rounding of a float64 potential is ~1e-16).
_ANTI_HERMITIAN_TOL = 1e-10

_METHODS = ("auto", "closed", "autodiff")

#: Quantities a field may compute for a whole batch at once (the ``density_batch`` hook).
_BATCH_QUANTITIES = ("action_density", "charge_density")

#: What `evaluate` computes.
QUANTITIES = ("potential", "field_strength", "action_density", "charge_density", "self_duality_residual")


def field_strength_from_potential(pot: Callable) -> Callable:
    """F_mu nu = d_mu A_nu - d_nu A_mu + [A_mu, A_nu] by one forward-mode jacobian of ``pot`` at a point."""

    def fs(x):
        a = pot(x)  # (4, N, N)
        da = jax.jacfwd(lambda y: pot(y))(x)  # (nu, N, N, mu) = d_mu A_nu
        d = jnp.moveaxis(da, -1, 0)  # (mu, nu, N, N)
        comm = jnp.einsum("mij,njk->mnik", a, a)
        return d - jnp.swapaxes(d, 0, 1) + comm - jnp.swapaxes(comm, 0, 1)

    return fs


@jax.jit
def _staged_potential(field, x):
    """``field.potential(x)`` as one staged call: jacobians of it transform its jaxpr, not its Python code.

    The field is a pytree argument, so the trace is cached per field structure; derivative kernels
    built on it trace a potential's library code once, at one level of transformation, and XLA
    inlines the call.
    """
    return field.potential(x)


def _autodiff_field_strength(field) -> Callable:
    """Per-point F of ``field`` by a forward-mode jacobian of its staged potential (same formula as above)."""
    return field_strength_from_potential(lambda y: _staged_potential(field, y))


def dual(f):
    """(*F)_mu nu = 1/2 eps_{mu nu rho sigma} F_rho sigma; f: (..., 4, 4, N, N) -> same shape."""
    return 0.5 * jnp.einsum("mnrs,...rsij->...mnij", LEVI_CIVITA, f)


def action_from_f(f):
    """s = -1/2 sum tr F_mu nu F_mu nu (conventions.ACTION_DENSITY_FACTOR); f: (4, 4, N, N) -> ()."""
    return ACTION_DENSITY_FACTOR * jnp.real(jnp.einsum("mnij,mnji->", f, f))


def charge_from_f(f):
    """q = -1/(32 pi^2) eps tr F F (conventions.CHARGE_DENSITY_FACTOR); f: (4, 4, N, N) -> ()."""
    return CHARGE_DENSITY_FACTOR * jnp.real(jnp.einsum("mnrs,mnij,rsji->", LEVI_CIVITA, f, f))


def residual_from_f(f):
    """|F - *F| / |F| with |F|^2 = sum_{mu nu} tr(F_mu nu^dag F_mu nu); 0 where F = 0."""
    diff = f - dual(f)
    num = jnp.sqrt(jnp.real(jnp.sum(diff * jnp.conj(diff))))
    den = jnp.sqrt(jnp.real(jnp.sum(f * jnp.conj(f))))
    return jnp.where(den > 0, num / jnp.where(den > 0, den, 1.0), 0.0)


def _point_fn(field, quantity: str, method: str) -> Callable:
    """Per-point function x -> value for the field (traced inside the compiled kernel)."""

    closed_f = hook(field, "field_strength") if method != "autodiff" else None
    fs = closed_f if closed_f is not None else _autodiff_field_strength(field)

    if quantity == "potential":
        return field.potential
    if quantity == "field_strength":
        return fs
    if quantity == "action_density":
        closed_s = hook(field, "action_density") if method == "auto" else None
        return closed_s if closed_s is not None else (lambda x: action_from_f(fs(x)))
    if quantity == "charge_density":
        closed_q = hook(field, "charge_density") if method == "auto" else None
        return closed_q if closed_q is not None else (lambda x: charge_from_f(fs(x)))
    if quantity == "self_duality_residual":
        return lambda x: residual_from_f(fs(x))
    raise ValueError(f"unknown quantity {quantity!r}")


def _differentiates(field, quantity: str, method: str) -> bool:
    """True when the kernel for (field, quantity, method) takes derivatives of the potential (mirrors _point_fn)."""
    if quantity == "potential":
        return False
    if method == "autodiff":
        return True
    if method == "auto" and quantity in _BATCH_QUANTITIES:
        if hook(field, "density_batch") is not None or hook(field, quantity) is not None:
            return False
    return hook(field, "field_strength") is None


class _Kernel:
    """The engine's compiled kernel for a tuple of (quantity, method): ``kernel(field, pts) -> values``.

    One traced function returns every quantity asked for: one compilation, and XLA shares their work.
    Closed forms compile with XLA's full optimisation (hot paths); kernels that differentiate a potential
    use `instantonkit.core._config.lean_compiler_options` when it is on (their graphs took most of a first
    call in XLA's optimisation passes).  jax caches compilations per field structure and chunk shape.
    """

    def __init__(self, specs: tuple[tuple[str, str], ...]):
        self.specs = specs

        def one(field, quantity, method, pts):
            if method == "auto" and quantity in _BATCH_QUANTITIES:
                batch = hook(field, "density_batch")
                if batch is not None:
                    return batch(pts, quantity)
            return jax.vmap(lambda x: _point_fn(field, quantity, method)(x))(pts)

        def run(field, pts):
            return tuple(one(field, q, meth, pts) for q, meth in specs)

        self._run = run
        self._plain = jax.jit(run)
        self._lean: dict = {}

    def _variant(self, field):
        lean = any(_differentiates(field, q, meth) for q, meth in self.specs)
        opts = lean_compiler_options() if lean else None
        if not opts:
            return self._plain
        key = tuple(sorted(opts.items()))
        if key not in self._lean:
            self._lean[key] = jax.jit(self._run, compiler_options=dict(opts))
        return self._lean[key]

    def __call__(self, field, pts):
        if _validate.is_tracer(pts):  # inside another trace: compiler options belong to the outer jit
            return self._plain(field, pts)
        return self._variant(field)(field, pts)

    def eval_shape(self, field, rows: int):
        """Output shapes/dtypes (a tuple) for ``rows`` points, traced by the variant that will run (reused)."""
        return self._variant(field).eval_shape(field, jax.ShapeDtypeStruct((rows, 4), jnp.float64))

    def _cache_size(self) -> int:
        """Compilations held by all variants (what a parameter scan should not grow)."""
        jits: list[Any] = [self._plain, *self._lean.values()]
        return sum(j._cache_size() for j in jits)


@functools.cache
def _kernel(*specs: tuple[str, str]) -> _Kernel:
    """One kernel per tuple of (quantity, method); jax caches its compilation per field structure."""
    if not specs or not all(isinstance(sp, tuple) and len(sp) == 2 for sp in specs):
        raise TypeError(f"kernel specs must be (quantity, method) pairs; found {specs!r}")
    return _Kernel(specs)


@jax.jit
def _potential_at(field, x):
    return field.potential(x)


def _check_callable(field, x0: np.ndarray) -> None:
    """For a wrapped callable: shape (4, N, N) and anti-Hermitian at the first point, else a clear error."""
    try:
        shape = jax.eval_shape(field.potential, jax.ShapeDtypeStruct((4,), jnp.float64)).shape
    except Exception as err:  # the callable cannot be traced
        raise TypeError(f"the potential callable failed on a (4,) point: {type(err).__name__}: {err}") from err
    if len(shape) != 3 or shape[0] != 4 or shape[1] != shape[2]:
        raise ValueError(f"the potential callable must return shape (4, N, N); found {tuple(shape)}")
    a = np.asarray(_potential_at(field, jnp.asarray(x0)))  # compiled: eager tracing compiles every operation
    herm = float(np.max(np.abs(a + np.conj(np.swapaxes(a, -1, -2)))))
    scale = 1.0 + float(np.max(np.abs(a)))
    if herm > _ANTI_HERMITIAN_TOL * scale:
        raise ValueError(f"the potential must be anti-Hermitian (A^dag = -A); max |A + A^dag| = {herm:.3e} at {x0}")


_STRUCT_CACHE: dict = {}


def _output_struct(kern, field, rows: int = 1):
    """Shape/dtype of the kernel output for ``rows`` points, memoised per kernel and field structure.

    ``rows`` is the first batch's size, so the trace made here is the one jit reuses for that batch.
    """
    key = structure_key(field, kern)
    hit = _STRUCT_CACHE.get(key) if key is not None else None
    if hit is None:
        hit = kern.eval_shape(field, rows)
        if key is not None:
            _STRUCT_CACHE[key] = hit
    return hit


def output_shape(field, quantity: str, method: str = "auto") -> tuple[tuple[int, ...], np.dtype]:
    """Shape and dtype of ``quantity`` at one point, e.g. ((4, 4, 2, 2), complex128) for the field strength."""
    if method not in _METHODS:
        raise ValueError(f"method must be one of {_METHODS}; found {method!r}")
    (st,) = _output_struct(_kernel((quantity, method)), as_field(field))
    return tuple(st.shape[1:]), np.dtype(st.dtype)


def evaluate(
    field, points: Array, quantity: str, *, method: str = "auto", chunk_size: int = DEFAULT_CHUNK
) -> np.ndarray:
    """Evaluate ``quantity`` of ``field`` on ``points`` in chunks of compiled work.

    Args:
      field: a field (an object with ``potential(x)``) or a bare callable ``A(x): (4,) -> (4, N, N)``.
      points: (..., 4) float64 (numpy or jax, not a tracer).
      quantity: 'potential' | 'field_strength' | 'action_density' | 'charge_density' |
        'self_duality_residual'.
      method: 'auto' (closed forms when present), 'closed' (closed-form field strength, densities
        computed from it), 'autodiff' (jax.jacfwd of the potential).
      chunk_size: points per compiled call (a positive integer; the last chunk shrinks to a power of two).
    Returns:
      numpy array (..., *per-point shape): (..., 4, N, N) complex128 for the potential,
      (..., 4, 4, N, N) complex128 for the field strength, (...,) float64 for the densities.
    Raises:
      ValueError for an unknown method or quantity, chunk_size < 1, bad points, a callable of the
      wrong shape or not anti-Hermitian, or a result that is not finite at some point (a singular
      point of the field, e.g. the centre of a singular gauge), naming how many points and the first.
      TypeError for non-real points, a non-integer (or boolean) chunk_size, or an object that is not a field.
    """
    return _evaluate_specs(field, points, ((quantity, method),), chunk_size)[0]


def evaluate_many(
    field, points: Array, quantities: Sequence, *, method: str = "auto", chunk_size: int = DEFAULT_CHUNK
) -> tuple[np.ndarray, ...]:
    """Evaluate several quantities of ``field`` on ``points`` in one compiled kernel.

    One trace and one compilation serve them all, and XLA shares their common work (the k x k algebra
    of s, q and F; the potential inside its own jacobian), so asking for F, s and q together costs
    less than three `evaluate` calls on a first call and per point.

    Args:
      field, points, method, chunk_size: as in `evaluate` (``method`` for the names given alone).
      quantities: a non-empty sequence of quantity names or (name, method) pairs, e.g.
        ``("field_strength", ("field_strength", "autodiff"), "action_density")``.
    Returns:
      a tuple of numpy arrays in the order of ``quantities``, each shaped as `evaluate` returns it.
    Raises:
      ValueError / TypeError as `evaluate`, and for an empty or malformed ``quantities``.
    """
    if isinstance(quantities, str) or not isinstance(quantities, Sequence) or not quantities:
        raise TypeError(
            f"quantities must be a non-empty sequence of names or (name, method) pairs; found {quantities!r}"
        )
    specs = []
    for q in quantities:
        spec = (q, method) if isinstance(q, str) else tuple(q)
        if len(spec) != 2 or not all(isinstance(v, str) for v in spec):
            raise TypeError(f"each quantity must be a name or a (name, method) pair of strings; found {q!r}")
        specs.append(spec)
    return _evaluate_specs(field, points, tuple(specs), chunk_size)


def _evaluate_specs(field, points: Array, specs: tuple, chunk_size: int) -> tuple[np.ndarray, ...]:
    """The chunked loop of `evaluate` and `evaluate_many` for a tuple of (quantity, method)."""
    for quantity, method in specs:
        if method not in _METHODS:
            raise ValueError(f"method must be one of {_METHODS}; found {method!r}")
        if quantity not in QUANTITIES:
            raise ValueError(f"unknown quantity {quantity!r}; expected one of {QUANTITIES}")
    chunk_size = _validate.positive_int("chunk_size", chunk_size)
    field = as_field(field)
    pts, lead = as_points(points)
    m = pts.shape[0]
    core = hook(field, "wrapped_callable")
    inner = core() if core is not None else None
    if inner is not None and m:
        _check_callable(inner, pts[0])
    kern = _kernel(*specs)
    probes = _output_struct(kern, field, padded_size(min(max(m, 1), chunk_size), chunk_size, shrink_last=True))
    outs = tuple(np.empty((m,) + p.shape[1:], dtype=p.dtype) for p in probes)
    if m:
        run_batched(kern, [pts], chunk_size, shrink_last=True, out=outs, args_before=(field,))
        for (quantity, _), out in zip(specs, outs):
            bad = ~np.all(np.isfinite(out.reshape(m, -1)), axis=1)
            if np.any(bad):
                first = pts[np.argmax(bad)]
                raise ValueError(
                    f"{quantity} is not finite at {int(bad.sum())} of {m} points (first: {first.tolist()}); "
                    "the field is singular there (for example the centre of a singular gauge)"
                )
    return tuple(out.reshape(lead + p.shape[1:]) for out, p in zip(outs, probes))


def potential(field, points: Array, **kw) -> np.ndarray:
    """Gauge potential A_mu at points (anti-Hermitian, conventions module).

    Args:
      field: a field or a bare callable ``A(x)`` (see `evaluate`).
      points: (..., 4) float64 (numpy or jax).
      **kw: ``method`` and ``chunk_size`` of `evaluate`.
    Returns:
      numpy array (..., 4, N, N) complex128.
    Raises:
      ValueError / TypeError as `evaluate` (bad points or options, non-finite results).
    """
    return evaluate(field, points, "potential", **kw)


def field_strength(field, points: Array, **kw) -> np.ndarray:
    """Field strength F_mu nu = d_mu A_nu - d_nu A_mu + [A_mu, A_nu] at points.

    Closed form when the field has one, else jax.jacfwd of the potential (``method="autodiff"`` forces it).

    Args:
      field: a field or a bare callable ``A(x)`` (see `evaluate`).
      points: (..., 4) float64 (numpy or jax).
      **kw: ``method`` and ``chunk_size`` of `evaluate`.
    Returns:
      numpy array (..., 4, 4, N, N) complex128.
    Raises:
      ValueError / TypeError as `evaluate` (bad points or options, non-finite results).
    """
    return evaluate(field, points, "field_strength", **kw)


def action_density(field, points: Array, **kw) -> np.ndarray:
    """Action density s(x) = -1/2 sum_{mu nu} tr F_mu nu F_mu nu at points (closed form when present).

    Args:
      field: a field or a bare callable ``A(x)`` (see `evaluate`).
      points: (..., 4) float64 (numpy or jax).
      **kw: ``method`` and ``chunk_size`` of `evaluate`.
    Returns:
      numpy array (...,) float64.
    Raises:
      ValueError / TypeError as `evaluate` (bad points or options, non-finite results).
    """
    return evaluate(field, points, "action_density", **kw)


def charge_density(field, points: Array, **kw) -> np.ndarray:
    """Charge density q(x) = -1/(32 pi^2) eps_{mu nu rho sigma} tr F_mu nu F_rho sigma at points.

    Args:
      field: a field or a bare callable ``A(x)`` (see `evaluate`).
      points: (..., 4) float64 (numpy or jax).
      **kw: ``method`` and ``chunk_size`` of `evaluate`.
    Returns:
      numpy array (...,) float64.
    Raises:
      ValueError / TypeError as `evaluate` (bad points or options, non-finite results).
    """
    return evaluate(field, points, "charge_density", **kw)


def self_duality_residual(field, points: Array, **kw) -> np.ndarray:
    """Pointwise |F - *F| / |F|, |F|^2 = sum_{mu nu} tr(F_mu nu^dag F_mu nu).

    0 for self-dual fields, 2 for anti-self-dual ones, and 0 by definition where F vanishes.

    Args:
      field: a field or a bare callable ``A(x)`` (see `evaluate`).
      points: (..., 4) float64 (numpy or jax).
      **kw: ``method`` and ``chunk_size`` of `evaluate`.
    Returns:
      numpy array (...,) float64.
    Raises:
      ValueError / TypeError as `evaluate` (bad points or options, non-finite results).
    """
    return evaluate(field, points, "self_duality_residual", **kw)
