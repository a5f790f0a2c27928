"""Parallel transporters along straight segments: closed forms and sixth-order Magnus steps (floor 5).

The link path of `instantonkit.lattice.starts` (which builds starts from it) and of anyone who needs
transporters of a field along arbitrary segments.  Conventions: the transporter of the segment
``z(t) = x + t d``, ``t in [0, 1]``, is W(1) with ``dW/dt = W(t) G(t)``, ``G(t) = A_mu(z(t)) d_mu``,
``W(0) = 1`` (path-ordered exponential, earlier points to the LEFT; `instantonkit.core.conventions`).

* Closed form when the field offers the hook ``closed_link(x, d) -> (N, N)``
  (`instantonkit.engine.fields.FieldHooks`): charge-1 SU(2) ADHM data and ``ansatz.BPSTField``
  (see `bpst_link`), and their translations and gauge transformations.
* Otherwise Gauss-Legendre Magnus steps of order six (three nodes per step; Blanes, Casas, Ros, BIT 40
  (2000) 434 and Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151, from memory; the order is
  checked in the tests against scipy), halving the step until the error estimate is below ``rtol`` in
  every entry: the difference of two successive results, divided by the observed convergence factor
  once it shows the sixth order (`_error_estimate`; tests/test_lattice.py checks the accepted
  links against a much finer reference).  The potential is evaluated at all nodes of a refinement in flat batches of fixed size
  (`_magnus_at`), then the step exponentials, then their ordered product.

``finish_links`` projects nearly special-unitary links onto SU(N) (rounding cleanup, with the deviation
before and after), ``embed_links`` puts SU(2) links in a block of SU(N).  Names without a leading
underscore that are not in ``__all__`` (``transporters``, ``finish_links``, ``finish_batched``,
``embed_links``, ``chunk_size``) are the package-internal seam used by `instantonkit.lattice.starts`.
"""

from __future__ import annotations

import dataclasses
import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..adhm.quaternionic import charge_one_link
from ..core import _validate as _v
from ..core import quaternion as qt
from ..core._batching import run_batched
from ..engine.fields import as_field, as_points, hook, output_shape
from .fused import FUSED_MAX_STEPS, FUSED_NODES, fused_kernel, fused_links  # noqa: F401  (the fused SU(2) path)
from .magnus import (  # noqa: F401  (the Magnus kernels; names the tests reach through this module)
    GL3,
    NODE_BATCH,
    NODE_BATCH_PLAIN,
    PASS_STEPS,
    STEP_BATCH,
    STEP_BATCH_PLAIN,
    expm_antihermitian,
    generator_kernel,
    magnus6,
    mm_aos,
    node_batch,
    pairwise_product,
    step_kernel,
)

__all__ = [
    "LinkStats",
    "parallel_transporter",
    "bpst_link",
    "unitarity_deviation",
    "project_special_unitary",
    "link_batch",
    "LINK_CHUNK",
]

_METHODS = ("auto", "closed", "magnus")
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

    The formula (`instantonkit.adhm.quaternionic.charge_one_link`) is what the field's own ``closed_link``
    hook computes; kept here as a function of the data.  x, d: (4,) -> (2, 2) complex128.
    """
    return charge_one_link(jnp.asarray(data.lam)[0, 0], jnp.asarray(data.B)[0, 0], data.chirality, data.gauge, x, d)


def _closed_link_of(field, x, d):
    """One link by the field's ``closed_link`` hook (the function the closed kernel vmaps)."""
    return field.closed_link(x, d)


def _magnus_at(field, xs, ds, m):
    """Transporters of (M, 4) segments with m sixth-order Magnus steps; (M, N, N) numpy.

    N = 2 and m <= FUSED_MAX_STEPS: `fused_links` in calls of FUSED_NODES nodes (768 when the
    potential calls LAPACK, `node_batch`).  Otherwise the potential is evaluated at all 3 m
    Gauss-Legendre nodes of a pass of links in one flat batch (one compiled size per field,
    `node_batch`, whatever m or M: no loop inside the kernel, so XLA's per-operation
    overhead is paid once per 768 nodes), then every step's exponential, then the ordered product.
    Each node and step is computed by kernels of fixed batch sizes, so a link's bits do not depend on
    the other links of the call (the rule of `instantonkit.core._batching`).
    """
    nodes = node_batch(field)
    if m <= FUSED_MAX_STEPS and output_shape(field, "potential")[0][-1] == 2:
        per_call = max(1, (FUSED_NODES if nodes == NODE_BATCH_PLAIN else nodes) // (3 * m))
        return run_batched(fused_kernel(m), [xs, ds], per_call, args_before=(field,))
    h = 1.0 / m
    ts = ((np.arange(m)[:, None] + np.asarray(GL3)[None, :]) * h).reshape(-1)  # (3 m,)
    out = None
    per = max(1, PASS_STEPS // m)
    for lo in range(0, xs.shape[0], per):
        x, d = xs[lo : lo + per], ds[lo : lo + per]
        pts = (x[:, None, :] + ts[None, :, None] * d[:, None, :]).reshape(-1, 4)
        dirs = np.repeat(d, ts.size, axis=0)
        g = run_batched(generator_kernel(), [pts, dirs], node_batch(field), args_before=(field,))
        n = g.shape[-1]
        if out is None:
            out = np.empty((xs.shape[0], n, n), dtype=np.complex128)
        steps = STEP_BATCH_PLAIN if n == 2 else STEP_BATCH
        e = run_batched(step_kernel(), [g.reshape(-1, 3, n, n)], steps, args_after=(h,))
        out[lo : lo + per] = pairwise_product(e.reshape(x.shape[0], m, n, n))
    return out


@functools.cache
def _closed_kernel():
    """One compiled closed-form kernel for every field (jax caches it per pytree structure)."""
    return jax.jit(jax.vmap(_closed_link_of, in_axes=(None, 0, 0)))


def chunk_size(m: int, chunk: int = LINK_CHUNK) -> int:
    """Padded batch size for m links: one of a few sizes, so few kernels are compiled."""
    return next((c for c in _CHUNK_SIZES if c >= m), chunk) if m < chunk else chunk


def _chunked(kern, field, xs, ds, *extra, size=None):
    """Run a vmapped link kernel over (M, 4) starts and steps in padded batches of one fixed ``size``
    (`instantonkit.core._batching.run_batched`, whose notes give the bit-reproducibility rule); (M, N, N) numpy."""
    size = chunk_size(xs.shape[0]) if size is None else size
    return run_batched(kern, [xs, ds], size, args_before=(field,), args_after=extra)


@dataclasses.dataclass(frozen=True)
class LinkStats:
    """What computing some links did (an immutable record, combined with `merge`).

    method: 'closed', 'magnus' or None (nothing computed yet); max_steps: most Magnus steps on one
    link (0 for closed forms); refinement_diff: largest accepted error estimate (the difference of two
    refinements, extrapolated in the sixth-order regime: `_error_estimate`);
    unitarity_before / unitarity_after: `unitarity_deviation` before and after the projection;
    evaluations: potential evaluations in all (3 per Magnus step and link; 0 for closed forms).
    """

    method: str | None = None
    max_steps: int = 0
    refinement_diff: float = 0.0
    unitarity_before: float = 0.0
    unitarity_after: float = 0.0
    evaluations: int = 0

    def merge(self, other: LinkStats) -> LinkStats:
        """The record of both computations: maxima of the figures, the later method when both have one."""
        return LinkStats(
            method=other.method if other.method is not None else self.method,
            max_steps=max(self.max_steps, other.max_steps),
            refinement_diff=max(self.refinement_diff, other.refinement_diff),
            unitarity_before=max(self.unitarity_before, other.unitarity_before),
            unitarity_after=max(self.unitarity_after, other.unitarity_after),
            evaluations=self.evaluations + other.evaluations,
        )


#: Convergence factor per halving of the step of a sixth-order method: 2^6.
_ORDER_FACTOR = 64.0
#: Observed factors between successive differences that count as the sixth-order regime: a factor far
#: above 2^6 means the coarser difference was not yet in it (measured: a link whose differences fell by
#: 6500 then 5.6 at rho / a = 1, so extrapolating from the 6500 claimed 6e-10 for an error of 3.7e-9).
_ASYMPTOTIC_FACTORS = (16.0, 256.0)
#: Safety factor of the extrapolated error estimate.
_ESTIMATE_SAFETY = 2.0


def _error_estimate(diff: np.ndarray, prev_diff: np.ndarray) -> np.ndarray:
    """Error of the finer of two refinements from their difference ``diff`` and the one before, ``prev_diff``.

    Once the differences shrink by a factor q in _ASYMPTOTIC_FACTORS per halving (the sixth-order regime),
    the finer result's error is about diff / (q - 1) (geometric tail; q capped at 2^6); the estimate is twice that.
    Before (one difference only, or slower convergence) it is the difference itself, which bounds the
    finer result's error whenever the step halving at least halves it.
    """
    q = np.where(diff > 0, prev_diff / np.where(diff > 0, diff, 1.0), np.inf)
    fast = (q >= _ASYMPTOTIC_FACTORS[0]) & (q <= _ASYMPTOTIC_FACTORS[1])
    return np.where(fast, _ESTIMATE_SAFETY * diff / (np.minimum(q, _ORDER_FACTOR) - 1.0), diff)


def _magnus_refined(field, xs, ds, rtol, batch=None, allow_bad=False):
    """Magnus transporters refined by halving the step until the error estimate is <= rtol; (out, LinkStats).

    The estimate is `_error_estimate` of the last two differences: in the sixth-order regime one
    halving fewer than asking two refinements to agree to rtol (measured: 44 -> 21 potential evaluations
    per link for a charge-2 start at rho / a = 1.5, benchmarks/bench_limits.py).
    """
    steps = 1
    prev = _magnus_at(field, xs, ds, steps)
    evaluations = 3 * xs.shape[0]
    out = prev.copy()
    todo = np.arange(xs.shape[0])
    prev_diff = np.full(xs.shape[0], np.nan)
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
        cur = _magnus_at(field, xs[todo], ds[todo], steps)
        evaluations += 3 * steps * todo.size
        if allow_bad:  # links through a singular point: NaN rows for the caller to rebuild in another gauge
            nan_rows = ~np.all(np.isfinite(cur), axis=(-2, -1))
            if np.any(nan_rows):
                out[todo[nan_rows]] = np.nan
                todo, prev, cur = todo[~nan_rows], prev[~nan_rows], cur[~nan_rows]
                prev_diff = prev_diff[~nan_rows]
        diff = np.max(np.abs(cur - prev), axis=(-2, -1))
        diff = np.where(np.isfinite(diff), diff, np.inf)
        est = _error_estimate(diff, prev_diff)
        done = est <= rtol
        out[todo[done]] = cur[done]
        if np.any(done):
            diff_max = max(diff_max, float(np.max(est[done])))
            max_steps = steps
        if not np.all(np.isfinite(cur)):
            bad = todo[~np.all(np.isfinite(cur), axis=(-2, -1))]
            raise ValueError(
                f"the potential is not finite on {bad.size} link(s) (first start {xs[bad[0]].tolist()}, "
                f"step {ds[bad[0]].tolist()}); the field is singular there (e.g. the centre of a singular gauge)"
            )
        todo, prev, prev_diff = todo[~done], cur[~done], diff[~done]
    return out, LinkStats(method="magnus", max_steps=max_steps, refinement_diff=diff_max, evaluations=evaluations)


def transporters(field, xs, ds, method: str, rtol: float, batch: int | None, allow_bad: bool = False):
    """Validated (M, 4) starts and steps -> ((M, N, N) transporters, LinkStats); the one link path.

    allow_bad: links through a singular point come back as NaN rows instead of raising ValueError.
    """
    closed = hook(field, "closed_link") if method != "magnus" else None
    if method == "closed" and closed is None:
        raise ValueError(f"the field {type(field).__name__} has no closed-form link (no closed_link(x, d) hook)")
    if closed is not None:
        out = _chunked(_closed_kernel(), field, xs, ds, size=batch)
        bad = ~np.all(np.isfinite(out), axis=(-2, -1))
        if np.any(bad) and not allow_bad:
            i = int(np.argmax(bad))
            raise ValueError(
                f"the closed-form link is not finite on {int(bad.sum())} link(s) (first start {xs[i].tolist()}, "
                f"step {ds[i].tolist()}); the segment passes through a singular point of the field"
            )
        return out, LinkStats(method="closed")
    return _magnus_refined(field, xs, ds, rtol, batch, allow_bad)


def parallel_transporter(
    field,
    starts,
    steps,
    *,
    method: str = "auto",
    rtol: float = 1e-12,
    report: dict | None = None,
    batch: int | None = None,
):
    """Parallel transporters W(1) of ``dW/dt = W A(x + t d).d``, W(0) = 1, for many straight segments.

    Args:
      field: a field (`instantonkit.engine.fields.Field`) or a callable A(x) -> (4, N, N).
      starts, steps: (..., 4) float64, the start points x and displacements d (same shape).
      method: 'auto' (the field's ``closed_link`` hook when it has one, else Magnus), 'closed'
        (error if none) or 'magnus' (Gauss-Legendre Magnus steps refined to ``rtol``).
      rtol: refinement target of the Magnus steps (> 0; booleans refused).
      report: optional dict that receives 'method' (and for Magnus 'max_steps', 'refinement_diff';
        values already there are combined by maximum).
      batch: links per compiled kernel call (default from the number of links).  XLA's code, hence the
        last bit of a result, can depend on it, so callers that must agree bit for bit fix it
        (`instantonkit.core._batching`).
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
    out, stats = transporters(field, xs, ds, method, rtol, batch)
    if report is not None:
        report["method"] = stats.method
        if stats.method == "magnus":
            report["max_steps"] = max(int(report.get("max_steps", 0)), stats.max_steps)
            report["refinement_diff"] = max(float(report.get("refinement_diff", 0.0)), stats.refinement_diff)
    return out.reshape(lead + out.shape[-2:])


# -- unitarity -------------------------------------------------------------------------------------------


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
    gram = mm_aos(jnp.conj(jnp.swapaxes(u, -1, -2)), u)
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
def finish_links(u):
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


def project_special_unitary(u):
    """Nearest special unitary matrices (see _finish); (M, N, N) numpy -> (M, N, N) numpy."""
    return np.asarray(finish_links(jnp.asarray(u))[0])


def embed_links(u2, n_out, embedding):
    """Embed (M, 2, 2) links in the (i, j) block of (M, n_out, n_out) identity matrices."""
    i, j = embedding
    out = np.zeros(u2.shape[:-2] + (n_out, n_out), dtype=np.complex128)
    out[..., np.arange(n_out), np.arange(n_out)] = 1.0
    out[..., i, i], out[..., i, j] = u2[..., 0, 0], u2[..., 0, 1]
    out[..., j, i], out[..., j, j] = u2[..., 1, 0], u2[..., 1, 1]
    return out


def finish_batched(u, batch: int):
    """`_finish` in padded pieces of ``batch`` links (one compiled size, `instantonkit.core._batching`);
    (projected (M, N, N), dev_before, dev_after).  Padding rows copy a real row, so the maxima are unchanged."""
    devs = []

    def kernel(piece):
        p, d0, d1 = finish_links(jnp.asarray(piece))
        devs.append((float(d0), float(d1)))
        return p

    out = run_batched(kernel, [u], batch, out=np.empty_like(u))
    return out, max((d[0] for d in devs), default=0.0), max((d[1] for d in devs), default=0.0)


def link_batch(shape) -> int:
    """Links per compiled kernel call for a start of ``shape``: fixed by the time-slice size, so the
    local path (one slice at a time) and any chunking of the same start run the same compiled code."""
    return chunk_size(4 * shape[0] * shape[1] * shape[2])
