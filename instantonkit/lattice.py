"""Lattice starts: link variables of a continuum field, and gauge-invariant lattice observables.

Links (conventions module): ``U_mu(n)`` is the parallel transporter along the straight segment
``z(t) = x_n + t a mu_hat``, ``t in [0, 1]``, the solution at ``t = 1`` of ``dW/dt = W(t) G(t)``,
``G(t) = a A_mu(z(t))``, ``W(0) = 1`` (path-ordered exponential, earlier points to the LEFT), so
``U_mu(n) -> g(x_n) U_mu(n) g(x_n + a mu_hat)^-1`` under a gauge transformation.  Site ``n`` sits at
``x_n = origin + a n``; arrays are ``(L1, L2, L3, L4, 4, N, N)`` complex128.

Transporters are computed in one of two ways:

* closed form, when the field offers the hook ``closed_link(x, d) -> (N, N)`` (:class:`instantonkit.fields.FieldHooks`;
  jax-traceable, ``x`` the start and ``d`` the displacement, both ``(4,)``): charge-1 SU(2) ADHM data
  and ``ansatz.BPSTField`` (BPST in either gauge, see :func:`bpst_link`), and the translations and
  gauge transformations of such fields;
* Gauss-Legendre Magnus steps of order six (three nodes per step; Blanes, Casas, Ros, BIT 40 (2000)
  434 and Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151, from memory; the order is checked in
  the tests against scipy), halving the step until two successive results differ by less than
  ``rtol`` in every entry.

A unitary (and det-1) projection is applied at the end only as rounding cleanup; the deviation found
before it is reported in :class:`LinkReport`.  The observables of link arrays (plaquettes, Wilson
action, clover) live in :mod:`instantonkit.observables` and are re-exported here.

Results and reports: :func:`lattice_links` always returns the links; :func:`lattice_start` returns a
frozen :class:`LatticeStart` (``.links`` and ``.report``, a :class:`LinkReport`).  The old
``lattice_links(..., return_report=True)`` still returns ``(links, report)`` with a DeprecationWarning.

Chunked starts belong to the distributed layer: ``instantonkit.cluster.lattice_links`` /
``cluster.lattice_start``.  This module never imports it; the old ``lattice_links(..., backend="dask")``
still works (DeprecationWarning) through the executor that ``instantonkit.cluster`` registers with
:func:`register_chunked_backend` when it is imported (the :class:`ChunkedExecutor` protocol).
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
import warnings
from typing import Callable, Protocol

import jax
import jax.numpy as jnp
import numpy as np

from . import _validate as _v
from . import observables as _obs
from . import quaternion as qt
from ._batching import run_batched
from .adhm import charge_one_link
from .fields import as_field, as_points, hook
from .observables import (  # noqa: F401  (re-exported: the lattice namespace offers the observables of its starts)
    BOUNDARIES,
    PLANES,
    average_plaquette,
    clover_charge,
    clover_charge_density,
    clover_field_strength,
    gauge_transform,
    gauge_transform_links,
    plaquette_traces,
    plaquettes,
    random_gauge,
    wilson_action,
)

__all__ = [
    "LinkReport",
    "LinkStats",
    "LatticeStart",
    "StartSpec",
    "ChunkedExecutor",
    "register_chunked_backend",
    "block_links",
    "link_batch",
    "lattice_links",
    "lattice_start",
    "parallel_transporter",
    "bpst_link",
    "site_points",
    "default_origin",
    "resolve_origin",
    "boundary_mismatch",
    "unitarity_deviation",
] + _obs.__all__

_GROUPS = ("su2", "su3", None)
_METHODS = ("auto", "closed", "magnus")
_BACKENDS = ("local", "dask")
#: Links per compiled call of the transporter kernels (memory per call ~ LINK_CHUNK x one link's work;
#: large enough that the per-call overhead is negligible).
LINK_CHUNK = 4096
#: Most Magnus steps per link before giving up (a smooth field converges to 1e-12 in far fewer).
_MAX_STEPS = 1 << 10
#: Padded batch sizes below LINK_CHUNK (one small size keeps the number of compiled kernels at two).
_CHUNK_SIZES = (256,)
#: Matrices per call of the unitarity check (bounds its temporary memory to ~16 M complex entries).
_UNITARITY_ENTRIES = 1 << 24


# -- the closed form --------------------------------------------------------------------------------


def bpst_link(data, x, d):
    """Exact transporter of charge-1 SU(2) ADHM data (BPST, either gauge) along x -> x + d; (N, N) = (2, 2).

    The formula (:func:`instantonkit.adhm.charge_one_link`) is what the field's own ``closed_link``
    hook computes; kept here as a function of the data.  x, d: (4,) -> (2, 2) complex128.
    """
    return charge_one_link(jnp.asarray(data.lam)[0, 0], jnp.asarray(data.B)[0, 0], data.chirality, data.gauge, x, d)


def _closed_link_of(field, x, d):
    """One link by the field's ``closed_link`` hook (the function the closed kernel vmaps)."""
    return field.closed_link(x, d)


# -- Magnus steps -------------------------------------------------------------------------------------

_GL3 = (0.5 - math.sqrt(15.0) / 10.0, 0.5, 0.5 + math.sqrt(15.0) / 10.0)


def _rcomm(a, b):
    """Reversed commutator b a - a b: Magnus terms for W' = W G from those for Y' = G Y (transpose)."""
    return _mm_aos(b, a) - _mm_aos(a, b)


def _magnus6(g1, g2, g3, h):
    """Sixth-order Magnus exponent of one step for W' = W G from G at the three Gauss-Legendre nodes.

    alpha1 = h G2, alpha2 = sqrt(15) h (G3 - G1) / 3, alpha3 = 10 h (G3 - 2 G2 + G1) / 3 and
    Omega = alpha1 + alpha3 / 12 + [-20 alpha1 - alpha3 + [alpha1, alpha2], alpha2 - [alpha1, 2 alpha3 + [alpha1, alpha2]] / 60] / 240
    (the three-node Gauss-Legendre scheme of Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151,
    from memory; the sign of the 1/60 term was fixed by the sixth-order convergence test against
    scipy's DOP853 in tests/test_lattice.py), with every commutator reversed because here the matrix
    multiplies from the right (W' = W G is the transpose of Y' = G^T Y).
    """
    a1 = h * g2
    a2 = (math.sqrt(15.0) / 3.0) * h * (g3 - g1)
    a3 = (10.0 / 3.0) * h * (g3 - 2.0 * g2 + g1)
    c12 = _rcomm(a1, a2)
    inner = a2 - _rcomm(a1, 2.0 * a3 + c12) / 60.0
    return a1 + a3 / 12.0 + _rcomm(-20.0 * a1 - a3 + c12, inner) / 240.0


def _expm_antihermitian(omega):
    """exp of an anti-Hermitian (N, N) matrix: quaternion exponential for N = 2, eigh otherwise."""
    n = omega.shape[-1]
    if n == 2:
        tr = jnp.trace(omega) / 2.0
        q = qt.from_matrix(omega - tr * jnp.eye(2))
        return jnp.exp(tr) * qt.to_matrix(qt.qexp(q))
    herm = 1j * omega
    herm = 0.5 * (herm + jnp.conj(herm.T))
    w, v = jnp.linalg.eigh(herm)
    return (v * jnp.exp(-1j * w)[None, :]) @ jnp.conj(v.T)


def _magnus_link(field, x, d, m):
    """Path-ordered exponential along x -> x + d with m sixth-order Magnus steps; (N, N)."""
    h = 1.0 / m

    nodes = jnp.asarray(_GL3)

    def gen(t):
        return jnp.einsum("mij,m->ij", field.potential(x + t * d), d)

    gens = jax.vmap(gen)  # one trace of the potential for the three nodes

    def body(s, w):
        g = gens((s + nodes) * h)
        return _mm_aos(w, _expm_antihermitian(_magnus6(g[0], g[1], g[2], h)))

    n = jax.eval_shape(gen, 0.0).shape[-1]
    return jax.lax.fori_loop(0, m, body, jnp.eye(n, dtype=jnp.complex128))


@functools.lru_cache(maxsize=None)
def _magnus_kernel():
    return jax.jit(jax.vmap(_magnus_link, in_axes=(None, 0, 0, None)))


@functools.lru_cache(maxsize=None)
def _closed_kernel():
    """One compiled closed-form kernel for every field (jax caches it per pytree structure)."""
    return jax.jit(jax.vmap(_closed_link_of, in_axes=(None, 0, 0)))


def _chunk_size(m: int, chunk: int = LINK_CHUNK) -> int:
    """Padded batch size for m links: one of a few sizes, so few kernels are compiled."""
    return next((c for c in _CHUNK_SIZES if c >= m), chunk) if m < chunk else chunk


def _chunked(kern, field, xs, ds, *extra, size=None):
    """Run a vmapped link kernel over (M, 4) starts and steps in padded batches of one fixed ``size``
    (:func:`instantonkit._batching.run_batched`, whose notes give the bit-reproducibility rule); (M, N, N) numpy."""
    size = _chunk_size(xs.shape[0]) if size is None else size
    return run_batched(kern, [xs, ds], size, args_before=(field,), args_after=extra)


@dataclasses.dataclass(frozen=True)
class LinkStats:
    """What computing some links did (an immutable record, combined with :meth:`merge`).

    method: 'closed', 'magnus' or None (nothing computed yet); max_steps: most Magnus steps on one
    link (0 for closed forms); refinement_diff: largest accepted difference of two refinements;
    unitarity_before / unitarity_after: :func:`unitarity_deviation` before and after the projection.
    """

    method: str | None = None
    max_steps: int = 0
    refinement_diff: float = 0.0
    unitarity_before: float = 0.0
    unitarity_after: float = 0.0

    def merge(self, other: "LinkStats") -> "LinkStats":
        """The record of both computations: maxima of the figures, the later method when both have one."""
        return LinkStats(
            method=other.method if other.method is not None else self.method,
            max_steps=max(self.max_steps, other.max_steps),
            refinement_diff=max(self.refinement_diff, other.refinement_diff),
            unitarity_before=max(self.unitarity_before, other.unitarity_before),
            unitarity_after=max(self.unitarity_after, other.unitarity_after),
        )


def _magnus_refined(field, xs, ds, rtol, batch=None):
    """Magnus transporters refined by halving the step until two refinements differ by <= rtol; (out, LinkStats)."""
    kern = _magnus_kernel()
    steps = 1
    size = _chunk_size(xs.shape[0]) if batch is None else batch  # kept for the refinements: one compiled batch size
    prev = _chunked(kern, field, xs, ds, steps, size=size)
    out = prev.copy()
    todo = np.arange(xs.shape[0])
    diff_max = 0.0
    max_steps = 0
    while todo.size:
        steps *= 2
        if steps > _MAX_STEPS:
            raise ValueError(
                f"the path-ordered exponential did not converge to rtol {rtol:.1e} with {_MAX_STEPS} Magnus "
                f"steps on {todo.size} link(s) (first start {xs[todo[0]].tolist()}, step {ds[todo[0]].tolist()}); "
                "the field may be singular near those links"
            )
        cur = _chunked(kern, field, xs[todo], ds[todo], steps, size=size)
        diff = np.max(np.abs(cur - prev), axis=(-2, -1))
        diff = np.where(np.isfinite(diff), diff, np.inf)
        done = diff <= rtol
        out[todo[done]] = cur[done]
        if np.any(done):
            diff_max = max(diff_max, float(np.max(diff[done])))
            max_steps = steps
        if not np.all(np.isfinite(cur)):
            bad = todo[~np.all(np.isfinite(cur), axis=(-2, -1))]
            raise ValueError(
                f"the potential is not finite on {bad.size} link(s) (first start {xs[bad[0]].tolist()}, "
                f"step {ds[bad[0]].tolist()}); the field is singular there (e.g. the centre of a singular gauge)"
            )
        todo, prev = todo[~done], cur[~done]
    return out, LinkStats(method="magnus", max_steps=max_steps, refinement_diff=diff_max)


def _transporters(field, xs, ds, method: str, rtol: float, batch: int | None):
    """Validated (M, 4) starts and steps -> ((M, N, N) transporters, LinkStats); the one link path."""
    closed = hook(field, "closed_link") if method != "magnus" else None
    if method == "closed" and closed is None:
        raise ValueError(f"the field {type(field).__name__} has no closed-form link (no closed_link(x, d) hook)")
    if closed is not None:
        out = _chunked(_closed_kernel(), field, xs, ds, size=batch)
        bad = ~np.all(np.isfinite(out), axis=(-2, -1))
        if np.any(bad):
            i = int(np.argmax(bad))
            raise ValueError(
                f"the closed-form link is not finite on {int(bad.sum())} link(s) (first start {xs[i].tolist()}, "
                f"step {ds[i].tolist()}); the segment passes through a singular point of the field"
            )
        return out, LinkStats(method="closed")
    return _magnus_refined(field, xs, ds, rtol, batch)


def parallel_transporter(
    field, starts, steps, *, method: str = "auto", rtol: float = 1e-12, report: dict | None = None, batch: int | None = None
):
    """Parallel transporters W(1) of ``dW/dt = W A(x + t d).d``, W(0) = 1, for many straight segments.

    Args:
      field: a field (:class:`instantonkit.fields.Field`) or a callable A(x) -> (4, N, N).
      starts, steps: (..., 4) float64, the start points x and displacements d (same shape).
      method: 'auto' (the field's ``closed_link`` hook when it has one, else Magnus), 'closed'
        (error if none) or 'magnus' (Gauss-Legendre Magnus steps refined to ``rtol``).
      rtol: refinement target of the Magnus steps (> 0; booleans refused).
      report: optional dict that receives 'method' (and for Magnus 'max_steps', 'refinement_diff';
        values already there are combined by maximum).
      batch: links per compiled kernel call (default from the number of links).  XLA's code, hence the
        last bit of a result, can depend on it, so callers that must agree bit for bit fix it
        (:mod:`instantonkit._batching`).
    Returns:
      (..., N, N) complex128 transporters, before any unitary projection.
    Raises:
      ValueError / TypeError: bad points, method, rtol or batch (naming the argument); no closed form
        for method='closed'; a segment through a singular point; Magnus steps not converging.
    """
    if batch is not None:
        batch = _v.positive_int("batch", batch)
    _v.choice("method", method, _METHODS)
    rtol = _v.positive_float("rtol", rtol)
    field = as_field(field)
    xs, lead = as_points(starts)
    ds, lead_d = as_points(steps)
    if lead != lead_d:
        raise ValueError(f"starts and steps must have the same shape; found {lead + (4,)} and {lead_d + (4,)}")
    if method == "closed" and hook(field, "closed_link") is None:
        raise ValueError(f"the field {type(field).__name__} has no closed-form link (no closed_link(x, d) hook)")
    if xs.shape[0] == 0:
        n = jax.eval_shape(field.potential, jax.ShapeDtypeStruct((4,), jnp.float64)).shape[-1]
        return np.zeros(lead + (n, n), dtype=np.complex128)
    out, stats = _transporters(field, xs, ds, method, rtol, batch)
    if report is not None:
        report["method"] = stats.method
        if stats.method == "magnus":
            report["max_steps"] = max(int(report.get("max_steps", 0)), stats.max_steps)
            report["refinement_diff"] = max(float(report.get("refinement_diff", 0.0)), stats.refinement_diff)
    return out.reshape(lead + out.shape[-2:])


# -- unitarity -------------------------------------------------------------------------------------------


def _mm_aos(a, b):
    """Batched small matrix product written as a broadcast sum (fuses well on CPU); (..., N, N)."""
    return jnp.sum(a[..., :, :, None] * b[..., None, :, :], axis=-2)


def _det(u):
    """Determinant of (..., N, N): explicit for N = 2, 3, LU otherwise."""
    n = u.shape[-1]
    if n == 2:
        return u[..., 0, 0] * u[..., 1, 1] - u[..., 0, 1] * u[..., 1, 0]
    if n == 3:
        return (
            u[..., 0, 0] * (u[..., 1, 1] * u[..., 2, 2] - u[..., 1, 2] * u[..., 2, 1])
            - u[..., 0, 1] * (u[..., 1, 0] * u[..., 2, 2] - u[..., 1, 2] * u[..., 2, 0])
            + u[..., 0, 2] * (u[..., 1, 0] * u[..., 2, 1] - u[..., 1, 1] * u[..., 2, 0])
        )
    return jnp.linalg.det(u)


@jax.jit
def _unitarity_dev(u):
    n = u.shape[-1]
    gram = _mm_aos(jnp.conj(jnp.swapaxes(u, -1, -2)), u)
    return jnp.maximum(jnp.max(jnp.abs(gram - jnp.eye(n))), jnp.max(jnp.abs(_det(u) - 1.0)))


def unitarity_deviation(links) -> float:
    """max over links of max(|U^dag U - 1|, |det U - 1|) (entrywise); links: (..., N, N)."""
    u = np.asarray(links)
    if u.size == 0:
        return 0.0
    n = u.shape[-1]
    flat = u.reshape(-1, n, n)
    step = max(1, _UNITARITY_ENTRIES // (n * n))
    return float(max(float(_unitarity_dev(flat[i : i + step])) for i in range(0, flat.shape[0], step)))


@jax.jit
def _finish(u):
    """Projection onto SU(N) of nearly special-unitary links, with the deviation before and after.

    N = 2: the quaternion of the matrix normalised (exact SU(2)); otherwise the polar factor (SVD),
    then det fixed by a central phase.  u: (M, N, N) -> (projected, dev_before, dev_after).
    """
    n = u.shape[-1]
    before = _unitarity_dev(u)
    if n == 2:
        q = qt.from_matrix(u)
        q = q / jnp.sqrt(jnp.sum(q**2, axis=-1, keepdims=True))
        p = qt.to_matrix(q)
    else:
        a, _, bh = jnp.linalg.svd(u)
        p = a @ bh
        p = p * (_det(p) ** (-1.0 / n))[:, None, None]
    return p, before, _unitarity_dev(p)


def _project_special_unitary(u):
    """Nearest special unitary matrices (see _finish); (M, N, N) numpy -> (M, N, N) numpy."""
    return np.asarray(_finish(jnp.asarray(u))[0])


def _embed(u2, n_out, embedding):
    """Embed (M, 2, 2) links in the (i, j) block of (M, n_out, n_out) identity matrices."""
    i, j = embedding
    out = np.zeros(u2.shape[:-2] + (n_out, n_out), dtype=np.complex128)
    out[..., np.arange(n_out), np.arange(n_out)] = 1.0
    out[..., i, i], out[..., i, j] = u2[..., 0, 0], u2[..., 0, 1]
    out[..., j, i], out[..., j, j] = u2[..., 1, 0], u2[..., 1, 1]
    return out


# -- lattice geometry -----------------------------------------------------------------------------------


def default_origin(field, shape, spacing) -> np.ndarray:
    """Origin that puts the field's centre (``field.hint()``, else 0) in the middle of the hypercube
    nearest the lattice middle, so no site and no link touches the centre: x_n = origin + a n.

    origin_i = centre_i - a (floor(L_i / 2) - 1/2); (4,) float64.
    """
    shape = _v.lattice_shape("shape", shape)
    a = _v.positive_float("spacing", spacing)
    centre = np.zeros(4)
    hint = hook(field, "hint")
    if hint is not None:
        centre = np.asarray(hint()[0], dtype=np.float64).reshape(4)
    return centre - a * (np.floor(np.asarray(shape) / 2.0) - 0.5)


def resolve_origin(field, shape, spacing, origin) -> np.ndarray:
    """``origin`` as a checked (4,) float64 point, or :func:`default_origin` when it is None; ValueError naming the value."""
    org = default_origin(field, shape, spacing) if origin is None else np.asarray(origin, dtype=np.float64)
    if org.shape != (4,) or not np.all(np.isfinite(org)):
        raise ValueError(f"origin must be a finite point of shape (4,); found {np.asarray(origin).tolist()!r}")
    return org


def site_points(shape, spacing, origin) -> np.ndarray:
    """Positions of the sites, x_n = origin + a n; (L1, L2, L3, L4, 4) float64."""
    shape = _v.lattice_shape("shape", shape)
    a = _v.positive_float("spacing", spacing)
    grids = np.meshgrid(*[np.arange(n, dtype=np.float64) for n in shape], indexing="ij")
    return np.asarray(origin, dtype=np.float64) + a * np.stack(grids, axis=-1)


@dataclasses.dataclass(frozen=True)
class LinkReport:
    """What :func:`lattice_links` did and how good the result is.

    method: 'closed' or 'magnus'; max_steps: largest number of Magnus steps on one link (0 for the
    closed form); refinement_diff: largest accepted difference between two refinements;
    unitarity_before / unitarity_after: :func:`unitarity_deviation` before and after the final
    projection; boundary_link_mismatch / boundary_action_error: see :func:`boundary_mismatch`
    (None for open boundaries); seconds: wall time.
    """

    shape: tuple
    spacing: float
    origin: tuple
    group: str | None
    embedding: tuple
    boundary: str
    rtol: float
    method: str
    max_steps: int
    refinement_diff: float
    unitarity_before: float
    unitarity_after: float
    boundary_link_mismatch: float | None
    boundary_action_error: float | None
    seconds: float

    def as_metadata(self) -> dict:
        """A JSON-ready dict of the generation parameters and quality figures."""
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in dataclasses.asdict(self).items()}


def _slice_links(field, sites_t, a, method, rtol, batch=None):
    """Links of one set of sites (S, 4) in the four directions: ((S, 4, N, N) unprojected, LinkStats)."""
    s = sites_t.shape[0]
    xs = np.repeat(sites_t, 4, axis=0)
    ds = np.tile(a * np.eye(4), (s, 1))
    u, stats = _transporters(field, xs, ds, method, rtol, batch)
    return u.reshape(s, 4, u.shape[-2], u.shape[-1]), stats


@dataclasses.dataclass(frozen=True)
class StartSpec:
    """The validated parameters of one lattice start (what :func:`lattice_links` was asked for).

    Documented seam of the chunked layer (:mod:`instantonkit.cluster`): it builds a spec with
    :meth:`make`, computes boxes with :meth:`block` and assembles the report with :meth:`report`.

    field: a field object; shape: (L1, L2, L3, L4); spacing: a; origin: (4,) float64 (site 0);
    group / embedding / boundary / rtol / method: as in :func:`lattice_links`; n_field: N of the
    field; n_out: N of the links (3 for 'su3').  Build it with :meth:`make`, which raises
    ValueError/TypeError naming the bad argument and the value found.
    """

    field: object
    shape: tuple
    spacing: float
    origin: np.ndarray
    group: str | None
    embedding: tuple
    boundary: str
    rtol: float
    method: str
    n_field: int
    n_out: int

    @classmethod
    def make(cls, field, shape, spacing, *, origin=None, group="su2", embedding=(0, 1), boundary="periodic", rtol=1e-12, method="auto"):
        field = as_field(field)
        shape = _v.lattice_shape("shape", shape)
        a = _v.positive_float("spacing", spacing)
        if group not in _GROUPS:
            raise ValueError(f"group must be one of {_GROUPS}; found {group!r}")
        _v.choice("boundary", boundary, BOUNDARIES)
        _v.choice("method", method, _METHODS)
        rtol = _v.positive_float("rtol", rtol)
        n_field = jax.eval_shape(field.potential, jax.ShapeDtypeStruct((4,), jnp.float64)).shape[-1]
        if group in ("su2", "su3") and n_field != 2:
            raise ValueError(f"group {group!r} needs a 2 x 2 (SU(2)) field; found N = {n_field} (use group=None)")
        try:
            emb = tuple(embedding)
        except TypeError as err:
            raise TypeError(f"embedding must be two distinct indices in 0..2; found {embedding!r}") from err
        if not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in emb):
            raise TypeError(f"embedding must be two distinct indices in 0..2; found {embedding!r}")
        emb = tuple(int(v) for v in emb)
        if group == "su3" and (len(emb) != 2 or emb[0] == emb[1] or not all(0 <= v < 3 for v in emb)):
            raise ValueError(f"embedding must be two distinct indices in 0..2; found {embedding!r}")
        n_out = 3 if group == "su3" else n_field
        org = resolve_origin(field, shape, a, origin)
        return cls(field, shape, a, org, group, emb, boundary, float(rtol), method, int(n_field), int(n_out))

    @property
    def links_shape(self) -> tuple:
        """(L1, L2, L3, L4, 4, N, N) of the links."""
        return self.shape + (4, self.n_out, self.n_out)

    def block(self, lo, hi) -> tuple:
        """Links of the sites lo <= n < hi; ((h1, h2, h3, h4, 4, N, N), LinkStats), see :func:`block_links`."""
        return block_links(
            self.field, lo, hi, self.origin, self.spacing, n_field=self.n_field, group=self.group,
            embedding=self.embedding, method=self.method, rtol=self.rtol, batch=link_batch(self.shape),
        )

    def boundary_figures(self, links):
        """(link_mismatch, action_error) of :func:`boundary_mismatch` for periodic starts, (None, None) for open ones."""
        if self.boundary != "periodic":
            return None, None
        bm = boundary_mismatch(
            self.field, links, self.spacing, origin=self.origin, group=self.group, embedding=self.embedding, rtol=self.rtol, method=self.method
        )
        return bm["link_mismatch"], bm["action_error"]

    def report(self, stats: LinkStats, seconds: float, mismatch=None, action_err=None) -> "LinkReport":
        """The :class:`LinkReport` of a finished start from its combined :class:`LinkStats`."""
        return LinkReport(
            shape=self.shape,
            spacing=self.spacing,
            origin=tuple(float(v) for v in self.origin),
            group=self.group,
            embedding=self.embedding,
            boundary=self.boundary,
            rtol=self.rtol,
            method=stats.method or "closed",
            max_steps=int(stats.max_steps),
            refinement_diff=float(stats.refinement_diff),
            unitarity_before=float(stats.unitarity_before),
            unitarity_after=float(stats.unitarity_after),
            boundary_link_mismatch=mismatch,
            boundary_action_error=action_err,
            seconds=float(seconds),
        )


def _finish_batched(u, batch: int):
    """:func:`_finish` in padded pieces of ``batch`` links (one compiled size, :mod:`instantonkit._batching`);
    (projected (M, N, N), dev_before, dev_after).  Padding rows copy a real row, so the maxima are unchanged."""
    devs = []

    def kernel(piece):
        p, d0, d1 = _finish(jnp.asarray(piece))
        devs.append((float(d0), float(d1)))
        return p

    out = run_batched(kernel, [u], batch, out=np.empty_like(u))
    return out, max((d[0] for d in devs), default=0.0), max((d[1] for d in devs), default=0.0)


def link_batch(shape) -> int:
    """Links per compiled kernel call for a start of ``shape``: fixed by the time-slice size, so the
    local path (one slice at a time) and any chunking of the same start run the same compiled code."""
    return _chunk_size(4 * shape[0] * shape[1] * shape[2])


def block_links(field, lo, hi, origin, spacing, *, n_field, group, embedding, method, rtol, batch):
    """Links of the sites lo <= n < hi (a box of the lattice); ((h1, h2, h3, h4, 4, N, N), LinkStats).

    The one kernel path of every lattice start (documented seam of the chunked layer):
    :func:`lattice_links` calls it per time slice and :mod:`instantonkit.cluster` per chunk, so both
    give the same bits.  Sites x_n = origin + a n (n float64); the transporters of a box are computed
    together, projected (:func:`_finish`) and embedded for group 'su3'.  The returned
    :class:`LinkStats` holds the Magnus figures and the unitarity before/after the projection;
    ``batch`` (:func:`link_batch` of the lattice) fixes the compiled kernel size, which keeps the bits equal.
    """
    lo, hi = tuple(int(v) for v in lo), tuple(int(v) for v in hi)
    ext = tuple(h - l for l, h in zip(lo, hi))
    grids = np.meshgrid(*[np.arange(l, h, dtype=np.float64) for l, h in zip(lo, hi)], indexing="ij")
    n = np.stack(grids, axis=-1).reshape(-1, 4)
    sites = np.asarray(origin, dtype=np.float64) + spacing * n
    u, stats = _slice_links(field, sites, spacing, method, rtol, batch)
    u, dev0, dev1 = _finish_batched(u.reshape(-1, n_field, n_field), batch)
    n_out = n_field
    if group == "su3":
        u, n_out = _embed(u, 3, embedding), 3
    stats = dataclasses.replace(stats, unitarity_before=float(dev0), unitarity_after=float(dev1))
    return u.reshape(ext + (4, n_out, n_out)), stats


# -- the chunked backend, registered by the distributed layer -------------------------------------------


class ChunkedExecutor(Protocol):
    """What a chunked backend offers :func:`lattice_links` (``instantonkit.cluster`` registers one as 'dask').

    ``executor(spec, *, chunks, store, client, overwrite, progress, return_report)`` computes the start
    ``spec`` (:class:`StartSpec`) in chunks and returns the links (or ``(links, LinkReport)`` with
    ``return_report=True``); it must use :meth:`StartSpec.block` so that the bits equal the local path's.
    """

    def __call__(self, spec: StartSpec, *, chunks, store, client, overwrite: bool, progress, return_report: bool): ...


_EXECUTORS: dict = {}


def register_chunked_backend(name: str, executor: ChunkedExecutor) -> None:
    """Make ``executor`` the chunked backend ``name`` of :func:`lattice_links` (called by ``instantonkit.cluster``)."""
    _v.choice("name", name, tuple(b for b in _BACKENDS if b != "local"))
    if not callable(executor):
        raise TypeError(f"executor must be callable; found {type(executor).__name__}")
    _EXECUTORS[name] = executor


@dataclasses.dataclass(frozen=True)
class LatticeStart:
    """A finished lattice start: ``links`` (L1, L2, L3, L4, 4, N, N) and its :class:`LinkReport` ``report``."""

    links: object
    report: "LinkReport"


def _local_start(spec: StartSpec, out, progress) -> tuple:
    """Fill the links of ``spec`` one time slice at a time; (links, combined LinkStats)."""
    shape = spec.shape
    full = spec.links_shape
    if out is None:
        out = np.empty(full, dtype=np.complex128)
    elif tuple(out.shape) != full or out.dtype != np.complex128:
        raise ValueError(f"out must have shape {full} and dtype complex128; found {tuple(out.shape)} {out.dtype}")
    stats = LinkStats()
    for t in range(shape[3]):
        block, block_stats = spec.block((0, 0, 0, t), shape[:3] + (t + 1,))
        stats = stats.merge(block_stats)
        out[:, :, :, t : t + 1] = block
        if progress is not None:
            progress(t + 1, shape[3])
    if hasattr(out, "flush"):
        out.flush()
    return out, stats


_START_DOC_ARGS = """
    Args:
      field: a field (:class:`instantonkit.fields.Field`) or a callable A(x) -> (4, N, N).
      shape: (L1, L2, L3, L4) positive integers.
      spacing: a > 0.
      origin: (4,) position of site 0 (default :func:`default_origin`: the field's centre in the
        middle of the central hypercube, so no link touches it).
      group: 'su2' (N = 2), 'su3' (the SU(2) links embedded in the ``embedding`` = (i, j) rows and
        columns of 3 x 3 identity matrices) or None (the field's own N, e.g. Sp(n)).
      boundary: 'periodic' (the link from the last site points to site 0; use a field that decays
        fast, e.g. singular gauge; the mismatch is measured, see :func:`boundary_mismatch`) or 'open'
        (every link is the exact transporter to x + a mu_hat; observables then use only plaquettes inside).
      rtol: refinement target of the Magnus quadrature (unused by closed forms).
      method: 'auto', 'closed' or 'magnus' (see :func:`parallel_transporter`).
      out: optional preallocated array or np.memmap of shape (L1, L2, L3, L4, 4, N, N), complex128,
        filled one time slice at a time.
      progress: progress(done, total) after each time slice.
"""


def lattice_start(field, shape, spacing, *, origin=None, group: str | None = "su2", embedding=(0, 1), boundary: str = "periodic",
                  rtol: float = 1e-12, method: str = "auto", out=None, progress: Callable[[int, int], None] | None = None) -> LatticeStart:
    """A lattice start with its quality report: :class:`LatticeStart` (``.links``, ``.report``).
    {args}
    Returns:
      LatticeStart: ``links`` (L1, L2, L3, L4, 4, N, N) complex128 (``out`` when given) and ``report``
      (a :class:`LinkReport`, with the periodic boundary figures of :func:`boundary_mismatch`).
    Raises:
      ValueError / TypeError: a bad argument (naming it and the value found); a link through a
        singular point; Magnus steps not converging.
    """
    t_start = time.perf_counter()
    spec = StartSpec.make(field, shape, spacing, origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method)
    links, stats = _local_start(spec, out, progress)
    mismatch, action_err = spec.boundary_figures(links)
    return LatticeStart(links, spec.report(stats, time.perf_counter() - t_start, mismatch, action_err))


if lattice_start.__doc__:  # (absent under python -OO)
    lattice_start.__doc__ = lattice_start.__doc__.format(args=_START_DOC_ARGS)


def lattice_links(
    field,
    shape,
    spacing,
    *,
    origin=None,
    group: str | None = "su2",
    embedding=(0, 1),
    boundary: str = "periodic",
    rtol: float = 1e-12,
    method: str = "auto",
    out=None,
    progress: Callable[[int, int], None] | None = None,
    return_report: bool = False,
    backend: str = "local",
    chunks=None,
    store=None,
    client=None,
    overwrite: bool = False,
):
    """Link variables of ``field`` on an L1 x L2 x L3 x L4 lattice; (L1, L2, L3, L4, 4, N, N) complex128.
    {args}
      return_report: deprecated; ``True`` returns ``(links, LinkReport)`` with a DeprecationWarning
        (use :func:`lattice_start`, whose result has ``.links`` and ``.report``).
      backend, chunks, store, client, overwrite: deprecated; ``backend="dask"`` (DeprecationWarning)
        runs the chunked start of ``instantonkit.cluster.lattice_links`` (which takes the other four).
    Returns:
      The links (L1, L2, L3, L4, 4, N, N) complex128: a numpy array (``out`` when given); with the
      deprecated ``backend="dask"`` a ``zarr.Array`` (store given) or a lazy dask array.
    Raises:
      ValueError / TypeError: a bad argument (naming it and the value found); a link through a
        singular point; Magnus steps not converging.
      ImportError: ``backend="dask"`` without the optional extra ``distributed``.
    """
    _v.choice("backend", backend, _BACKENDS)
    if return_report:
        warnings.warn(
            "lattice_links(..., return_report=True) is deprecated; use lattice_start(...), whose result has .links and .report",
            DeprecationWarning,
            stacklevel=2,
        )
    if backend != "local":
        if out is not None:
            raise ValueError("out= is for the local backend; the dask backend writes to store= (a Zarr path) or returns a dask array")
        spec = StartSpec.make(field, shape, spacing, origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method)
        warnings.warn(
            f"lattice_links(..., backend={backend!r}) is deprecated; use instantonkit.cluster.lattice_links(...) "
            "(or cluster.lattice_start(...) for the report)",
            DeprecationWarning,
            stacklevel=2,
        )
        executor = _EXECUTORS.get(backend)
        if executor is None:
            raise ImportError(f"no chunked backend {backend!r} is registered; import instantonkit.cluster (needs the extra 'distributed')")
        return executor(spec, chunks=chunks, store=store, client=client, overwrite=overwrite, progress=progress, return_report=return_report)
    if chunks is not None or store is not None or client is not None:
        raise ValueError("chunks=, store= and client= need backend='dask'")
    kw = dict(origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method, out=out, progress=progress)
    if return_report:
        res = lattice_start(field, shape, spacing, **kw)
        return res.links, res.report
    spec = StartSpec.make(field, shape, spacing, origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method)
    return _local_start(spec, out, progress)[0]


if lattice_links.__doc__:
    lattice_links.__doc__ = lattice_links.__doc__.format(args=_START_DOC_ARGS)


def boundary_mismatch(field, links, spacing, *, origin=None, group="su2", embedding=(0, 1), rtol=1e-12, method="auto") -> dict:
    """How far a periodic lattice start is from the continuum field across the boundary.

    For each direction mu the sites x_n with n_mu = L_mu (one period beyond the last site) are
    identified with those of n_mu = 0.  Returns a dict with
    'link_mismatch': max |U_nu(x at n_mu = L) - U_nu(x at n_mu = 0)| over the faces (nu != mu),
    'action_error': sum over the plaquettes crossing one face (n_mu = L - 1, n_nu <= L_nu - 2) of the
    Wilson action (beta = 2N) with the wrapped link minus that with the exact link, and
    'boundary_action': the wrapped plaquettes' Wilson action itself.
    links: (L1, L2, L3, L4, 4, N, N) from :func:`lattice_links` with the same parameters (any array
    with numpy slicing: numpy, memmap, Zarr; only the faces are read).
    """
    if not (hasattr(links, "shape") and hasattr(links, "__getitem__")):
        links = np.asarray(links)
    shape = tuple(links.shape[:4])
    n = links.shape[-1]
    a = _v.positive_float("spacing", spacing)
    org = default_origin(field, shape, a) if origin is None else np.asarray(origin, dtype=np.float64)
    beta = 2.0 * n
    link_mis, err, wrapped_total = 0.0, 0.0, 0.0
    for mu in range(4):
        lm = shape[mu]
        if lm < 2:
            continue
        # the face one period beyond: sites with n_mu = L_mu, all other indices free
        idx = [np.arange(s) for s in shape]
        idx[mu] = np.array([lm])
        g = np.stack(np.meshgrid(*idx, indexing="ij"), axis=-1).reshape(-1, 4).astype(np.float64)
        pts = org + a * g
        others = [nu for nu in range(4) if nu != mu]
        xs = np.repeat(pts, 3, axis=0)
        ds = np.tile(a * np.eye(4)[others], (pts.shape[0], 1))
        u = _project_special_unitary(parallel_transporter(field, xs, ds, method=method, rtol=rtol))
        if group == "su3":
            u = _embed(u, 3, embedding)
        face_shape = list(shape)
        face_shape[mu] = 1
        exact = u.reshape(tuple(face_shape) + (3, n, n))
        wrap = np.asarray(links[(slice(None),) * mu + (slice(0, 1),)])[..., others, :, :]
        link_mis = max(link_mis, float(np.max(np.abs(exact - wrap))))
        last = np.asarray(links[(slice(None),) * mu + (slice(lm - 1, lm),)])  # sites n_mu = L - 1
        for j, nu in enumerate(others):
            ln = shape[nu]
            if ln < 2:
                continue
            sl = [slice(None)] * 4
            sl[nu] = slice(0, ln - 1)
            sl_up = [slice(None)] * 4
            sl_up[nu] = slice(1, ln)
            u_mu = last[tuple(sl)][..., mu, :, :]
            u_mu_up = last[tuple(sl_up)][..., mu, :, :]
            u_nu = last[tuple(sl)][..., nu, :, :]
            left = np.conj(np.swapaxes(u_nu @ u_mu_up, -1, -2))
            for label, u_far in (("wrap", wrap[tuple(sl)][..., j, :, :]), ("exact", exact[tuple(sl)][..., j, :, :])):
                tr = np.real(np.einsum("...ij,...ji->...", u_mu @ u_far, left))
                s = beta * float(np.sum(1.0 - tr / n))
                if label == "wrap":
                    wrapped_total += s
                    err += s
                else:
                    err -= s
    return {"link_mismatch": link_mis, "action_error": err, "boundary_action": wrapped_total}
