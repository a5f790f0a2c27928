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
import math

import jax
import jax.numpy as jnp
import numpy as np
from jax.extend import core as jex_core

from ..adhm import _kxk
from ..adhm.quaternionic import charge_one_link
from ..core import _validate as _v
from ..core import quaternion as qt
from ..core._batching import run_batched
from ..core._pytree import structure_key
from ..engine.fields import as_field, as_points, hook, output_shape

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


#: Potential evaluations per compiled call when the potential calls LAPACK.  jax 0.10.2 on CPU left
#: batched chains of small LAPACK calls (SU(3) frames: Cholesky then inverse, with their derivatives)
#: idle and unfinished from ~10^4 matrices per call (3 nodes x 4096 links, measured), while 3 x 256
#: finish; so such a potential is called on at most 768 nodes at a time.
_NODE_BATCH = 768
#: ... and when it calls none (the library's ADHM potentials, closed-form ansaetze): larger calls cost
#: less per node (measured, charge-2 SU(2) data: 1.67 / 1.43 / 1.25 us per node at 768 / 4096 / 16384).
_NODE_BATCH_PLAIN = 4096
#: Magnus steps per compiled call of the step kernel: its exponentials use eigh for N > 2 (kept below
#: the bound above); for N = 2 they are quaternion exponentials and larger calls cost less
#: (measured: 1.95 / 0.85 us per step at 256 / 2048).
_STEP_BATCH = 256
_STEP_BATCH_PLAIN = 2048
#: Primitives that are LAPACK calls on CPU (a potential using any of them gets the small node batch).
_LAPACK_PRIMITIVES = ("cholesky", "lu", "eigh", "eig", "svd", "qr", "triangular_solve", "schur", "householder_product")
#: Node-steps (links x steps) per pass of `_magnus_at`, bounding its temporary memory.
_PASS_STEPS = 1 << 18


def _generator(field, x, d):
    """G = A_mu(x) d_mu at one node; (4,), (4,) -> (N, N)."""
    a = field.potential(x)
    return a[0] * d[0] + a[1] * d[1] + a[2] * d[2] + a[3] * d[3]


def _calls_lapack(jaxpr) -> bool:
    """Whether a jaxpr, or any jaxpr nested in it, contains a LAPACK primitive (_LAPACK_PRIMITIVES)."""
    if any(eqn.primitive.name in _LAPACK_PRIMITIVES for eqn in jaxpr.eqns):
        return True
    return any(_calls_lapack(sub) for sub in jex_core.subjaxprs(jaxpr))


_BATCH_MEMO: dict = {}


def _node_batch(field) -> int:
    """Nodes per potential call for ``field``: _NODE_BATCH_PLAIN unless its potential calls LAPACK.

    Depends only on the field's structure (its traced potential), so a link's bits do not depend on
    the other links of a call (`instantonkit.core._batching`); memoised per pytree structure.
    """
    key = structure_key(field)
    hit = _BATCH_MEMO.get(key) if key is not None else None
    if hit is None:
        jaxpr = jax.make_jaxpr(lambda f, x: f.potential(x))(field, jnp.zeros(4))
        hit = _NODE_BATCH if _calls_lapack(jaxpr.jaxpr) else _NODE_BATCH_PLAIN
        if key is not None:
            _BATCH_MEMO[key] = hit
    return hit


def _generators(field, pts, dirs):
    """G = A_mu d_mu at a batch of nodes (m, 4), (m, 4) -> (m, N, N): the ``generator_batch`` hook, else vmapped."""
    batch = hook(field, "generator_batch")
    return batch(pts, dirs) if batch is not None else jax.vmap(_generator, in_axes=(None, 0, 0))(field, pts, dirs)


@functools.cache
def _generator_kernel():
    return jax.jit(_generators)


def _step_exp(g, h):
    """exp(Omega) of one sixth-order Magnus step from G at its three nodes; g: (3, N, N)."""
    return _expm_antihermitian(_magnus6(g[0], g[1], g[2], h))


@functools.cache
def _step_kernel():
    return jax.jit(jax.vmap(_step_exp, in_axes=(0, None)))


def _pairwise_product(e, mul=np.matmul, cat=np.concatenate):
    """E_1 E_2 ... E_m of factors on axis 1 (e.g. (M, m, N, N)): pairwise products (log2 m rounds, no long
    chain for XLA to fuse), earlier factors left; ``mul``/``cat`` the product and concatenation to use."""
    while e.shape[1] > 1:
        pairs = e.shape[1] // 2
        prod = mul(e[:, 0 : 2 * pairs : 2], e[:, 1 : 2 * pairs : 2])
        e = cat([prod, e[:, 2 * pairs :]], axis=1) if e.shape[1] % 2 else prod
    return e[:, 0]


#: Most Magnus steps per link of the fused SU(2) kernel (`_fused_links`; each m compiles once, about
#: 1 s at m = 8, 4.7 s at m = 64): refinements beyond 8, rare on lattices at rtol 1e-8, take the node-batch
#: path below (measured, 6^4 start of overlapping charge-2 data at rtol 1e-12: first call 6.0 s, 9.5 s with 64).
_FUSED_MAX_STEPS = 8
#: Nodes per call of the fused kernel (links per call 12288 / (3 m): 4096 links at one step).
_FUSED_NODES = 12288
#: c with e_1 e_2 = c e_3 for the quaternion units (conventions): for pure quaternions a b - b a = 2 c a x b.
_CROSS_SIGN = float(qt.qmul(np.eye(4)[1], np.eye(4)[2])[3])


def _rcomm_q(a, b):
    """Reversed commutator b a - a b of pure quaternions given by their imaginary parts (3, ...)."""
    return -2.0 * _CROSS_SIGN * jnp.cross(a, b, axis=0)


def _fused_links(field, xs, ds, m: int):
    """SU(2)/U(2) transporters of a batch of segments (L, 4) with m Magnus steps in one kernel; (L, 2, 2).

    The 3 m L nodes go to the field's ``generator_batch`` hook when it has one (ADHM data: batch-major
    k x k work, `instantonkit.adhm._kxk.link_generator_batch`), else to the vmapped potential; then
    `_magnus6` in quaternion form (G = i tau 1 + v, v a pure quaternion: the commutators are cross
    products and tau, central, is integrated by the Gauss-Legendre weights), exp, and the ordered
    product E_1 ... E_m, all without leaving the compiled code.  Equal to `_magnus_at` to rounding.
    """
    h = 1.0 / m
    nb = xs.shape[0]
    ts = jnp.asarray((np.arange(m)[:, None] + np.asarray(_GL3)[None, :]) * h)  # (m, 3)
    pts = (xs[None, None] + ts[:, :, None, None] * ds[None, None]).reshape(-1, 4)  # (step, node, link)
    dirs = jnp.broadcast_to(ds[None, None], (m, 3, nb, 4)).reshape(-1, 4)
    g = _generators(field, pts, dirs)
    tau = (0.5 * jnp.imag(g[:, 0, 0] + g[:, 1, 1])).reshape(m, 3, nb)
    v = jnp.moveaxis(qt.from_matrix(g)[:, 1:], -1, 0).reshape(3, m, 3, nb)
    a1 = h * v[:, :, 1]
    a2 = (math.sqrt(15.0) / 3.0) * h * (v[:, :, 2] - v[:, :, 0])
    a3 = (10.0 / 3.0) * h * (v[:, :, 2] - 2.0 * v[:, :, 1] + v[:, :, 0])
    c12 = _rcomm_q(a1, a2)
    inner = a2 - _rcomm_q(a1, 2.0 * a3 + c12) / 60.0
    om = a1 + a3 / 12.0 + _rcomm_q(-20.0 * a1 - a3 + c12, inner) / 240.0  # (3, m, nb)
    w = jnp.moveaxis(qt.qexp(jnp.moveaxis(jnp.concatenate([jnp.zeros((1, m, nb)), om]), 0, -1)), -1, 0)  # (4, m, nb)
    w = _pairwise_product(w, _kxk.qmul_last, jnp.concatenate)
    phase = jnp.exp(1j * h * jnp.sum(tau * jnp.asarray([5.0, 8.0, 5.0])[None, :, None] / 18.0, axis=(0, 1)))
    return phase[:, None, None] * qt.to_matrix(w.T)


@functools.cache
def _fused_kernel(m: int):
    return jax.jit(functools.partial(_fused_links, m=m))


def _magnus_at(field, xs, ds, m):
    """Transporters of (M, 4) segments with m sixth-order Magnus steps; (M, N, N) numpy.

    N = 2 and m <= _FUSED_MAX_STEPS: `_fused_links` in calls of _FUSED_NODES nodes (768 when the
    potential calls LAPACK, `_node_batch`).  Otherwise the potential is evaluated at all 3 m
    Gauss-Legendre nodes of a pass of links in one flat batch (one compiled size per field,
    `_node_batch`, whatever m or M: no loop inside the kernel, so XLA's per-operation
    overhead is paid once per 768 nodes), then every step's exponential, then the ordered product.
    Each node and step is computed by kernels of fixed batch sizes, so a link's bits do not depend on
    the other links of the call (the rule of `instantonkit.core._batching`).
    """
    nodes = _node_batch(field)
    if m <= _FUSED_MAX_STEPS and output_shape(field, "potential")[0][-1] == 2:
        per_call = max(1, (_FUSED_NODES if nodes == _NODE_BATCH_PLAIN else nodes) // (3 * m))
        return run_batched(_fused_kernel(m), [xs, ds], per_call, args_before=(field,))
    h = 1.0 / m
    ts = ((np.arange(m)[:, None] + np.asarray(_GL3)[None, :]) * h).reshape(-1)  # (3 m,)
    out = None
    per = max(1, _PASS_STEPS // m)
    for lo in range(0, xs.shape[0], per):
        x, d = xs[lo : lo + per], ds[lo : lo + per]
        pts = (x[:, None, :] + ts[None, :, None] * d[:, None, :]).reshape(-1, 4)
        dirs = np.repeat(d, ts.size, axis=0)
        g = run_batched(_generator_kernel(), [pts, dirs], _node_batch(field), args_before=(field,))
        n = g.shape[-1]
        if out is None:
            out = np.empty((xs.shape[0], n, n), dtype=np.complex128)
        steps = _STEP_BATCH_PLAIN if n == 2 else _STEP_BATCH
        e = run_batched(_step_kernel(), [g.reshape(-1, 3, n, n)], steps, args_after=(h,))
        out[lo : lo + per] = _pairwise_product(e.reshape(x.shape[0], m, n, n))
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


# -- links of lattice sites, singular points handled in a twin gauge ------------------------------------


def _near_centres(field, pts, a):
    """Points (M, 4) within scale / 2 + a of a centre of the field's layout (all points without a layout hook).

    The singular points of a singular gauge sit at the instanton centres (k = 1) or close to them
    (k > 1), so the transition g of the gauge_twin hook is evaluated only there.  Without a layout the
    ``hint`` hook's one centre and scale serve (fields of one lump, e.g. ``ansatz.BPSTField``: before,
    g was evaluated at every site, 3x the cost of its closed-form links).
    """
    lay = hook(field, "layout")
    if lay is None:
        lay = hook(field, "hint")  # one lump (e.g. ansatz.BPSTField): its centre and scale
    if lay is None:
        return np.ones(pts.shape[0], dtype=bool)
    centres, scales = lay()
    centres = np.asarray(centres, dtype=np.float64).reshape(-1, 4)
    radius = 0.5 * np.asarray(scales, dtype=np.float64).reshape(-1) + a
    d2 = np.sum((pts[:, None, :] - centres[None]) ** 2, axis=-1)
    return np.any(d2 <= radius[None] ** 2, axis=1)


#: Points per compiled call of the gauge_twin transition (few points per block: those near a centre).
_TRANSITION_BATCH = 256


@functools.cache
def _transition_kernel():
    """g(x) of the field's ``gauge_twin`` hook, vmapped over points (one compile per field structure)."""
    return jax.jit(jax.vmap(lambda f, x: f.gauge_twin()[1](x), in_axes=(None, 0)))


def site_links(field, sites_t, a, method, rtol, batch=None, n_field=None):
    """Links of one set of sites (S, 4) in the four directions: ((S, 4, N, N) unprojected, LinkStats).

    The package-internal seam of `instantonkit.lattice.starts` (``block_links``).

    Singular points on sites or links: when the field has the ``gauge_twin`` hook (twin, g), g is
    evaluated at both ends of every link near a centre (`_near_centres`); a link that starts or ends at a site where g is not finite
    (a singular point of the field's gauge), or whose transporter is not finite (a singular point
    on the link), is computed in the twin's gauge and transformed back, U = G(x)^dag U_twin G(x + d),
    with G = g except G = 1 at the singular sites (the transformation there is free).  So the links
    are a lattice gauge transform of the twin's: every plaquette is correct.
    """
    s = sites_t.shape[0]
    xs = np.repeat(sites_t, 4, axis=0)
    ds = np.tile(a * np.eye(4), (s, 1))
    twin_hook = hook(field, "gauge_twin")
    if twin_hook is None:
        u, stats = transporters(field, xs, ds, method, rtol, batch)
        return u.reshape(s, 4, u.shape[-2], u.shape[-1]), stats
    size = _TRANSITION_BATCH  # one compiled size whatever the block: the bits do not depend on the chunking
    ends = xs + ds
    near0, near1 = _near_centres(field, xs, a), _near_centres(field, ends, a)
    sing0, sing1 = np.zeros(xs.shape[0], dtype=bool), np.zeros(xs.shape[0], dtype=bool)
    for near, sing, pts in ((near0, sing0, xs), (near1, sing1, ends)):
        idx = np.flatnonzero(near)
        if idx.size:
            g = run_batched(_transition_kernel(), [pts[idx]], size, args_before=(field,))
            sing[idx] = ~np.all(np.isfinite(g), axis=(-2, -1))
    touch = sing0 | sing1
    n = (
        n_field
        if n_field is not None
        else jax.eval_shape(field.potential, jax.ShapeDtypeStruct((4,), jnp.float64)).shape[-1]
    )
    u = np.full((xs.shape[0], n, n), np.nan, dtype=np.complex128)
    stats = LinkStats()
    keep = np.flatnonzero(~touch)
    if keep.size:
        uk, stats = transporters(field, xs[keep], ds[keep], method, rtol, batch, allow_bad=True)
        u[keep] = uk
    redo = np.flatnonzero(~np.all(np.isfinite(u), axis=(-2, -1)))
    if redo.size:
        twin = twin_hook()[0]
        ut, st = transporters(twin, xs[redo], ds[redo], method, rtol, batch)
        eye = np.eye(n)
        ga = run_batched(_transition_kernel(), [xs[redo]], size, args_before=(field,))
        gb = run_batched(_transition_kernel(), [ends[redo]], size, args_before=(field,))
        ga = np.where(np.all(np.isfinite(ga), axis=(-2, -1))[:, None, None], ga, eye)
        gb = np.where(np.all(np.isfinite(gb), axis=(-2, -1))[:, None, None], gb, eye)
        u[redo] = np.conj(np.swapaxes(ga, -1, -2)) @ ut @ gb
        stats = stats.merge(st)
    return u.reshape(s, 4, u.shape[-2], u.shape[-1]), stats
