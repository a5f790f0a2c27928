"""Lattice starts: link variables of a continuum field, and gauge-invariant lattice observables.

Links (conventions module): ``U_mu(n)`` is the parallel transporter along the straight segment
``z(t) = x_n + t a mu_hat``, ``t in [0, 1]``, the solution at ``t = 1`` of ``dW/dt = W(t) G(t)``,
``G(t) = a A_mu(z(t))``, ``W(0) = 1`` (path-ordered exponential, earlier points to the LEFT), so
``U_mu(n) -> g(x_n) U_mu(n) g(x_n + a mu_hat)^-1`` under a gauge transformation.  Site ``n`` sits at
``x_n = origin + a n``; arrays are ``(L1, L2, L3, L4, 4, N, N)`` complex128.

Transporters are computed in one of two ways:

* closed form, when the field offers a per-link hook ``link(x, d) -> (N, N)`` (jax-traceable, ``x`` the
  start and ``d`` the displacement, both ``(4,)``), or when it is charge-1 SU(2) ADHM data (BPST in
  either gauge, see :func:`bpst_link`);
* Gauss-Legendre Magnus steps of order six (three nodes per step; Blanes, Casas, Ros, BIT 40 (2000)
  434 and Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151, from memory; the order is checked in
  the tests against scipy), halving the step until two successive results differ by less than
  ``rtol`` in every entry.

A unitary (and det-1) projection is applied at the end only as rounding cleanup; the deviation found
before it is reported in :class:`LinkReport`.  The observables of link arrays (plaquettes, Wilson
action, clover) live in :mod:`instantonkit.observables` and are re-exported here.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
from typing import Callable

import jax
import jax.numpy as jnp
import numpy as np

from . import quaternion as qt
from . import observables as _obs
from .observables import (  # noqa: F401  (re-exported: the lattice namespace offers the observables of its starts)
    _BOUNDARIES,
    PLANES,
    _check_shape,
    _check_spacing,
    average_plaquette,
    clover_charge,
    clover_charge_density,
    clover_field_strength,
    gauge_transform,
    plaquette_traces,
    plaquettes,
    random_gauge,
    wilson_action,
)
from .conventions import point_to_quaternion

__all__ = [
    "LinkReport",
    "StartSpec",
    "block_links",
    "lattice_links",
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
#: Links per compiled call of the transporter kernels.
LINK_CHUNK = 4096
_MAX_STEPS = 1 << 10
_CHUNK_SIZES = (256,)


# -- the closed form for charge-1 SU(2) ADHM data ------------------------------------------------------


def _line_integral(alpha, beta, gamma, wedge2, c):
    """Integral_0^1 dt / (alpha t^2 + beta t + gamma + c) for alpha t^2 + beta t + gamma = |y0 + t d|^2.

    alpha = |d|^2, beta = 2 y0.d, gamma = |y0|^2, wedge2 = |y0 ^ d|^2 = alpha gamma - (y0.d)^2 >= 0.
    With disc = 4 alpha (gamma + c) - beta^2 = 4 (wedge2 + alpha c) (no cancellation) the integral is
    2 atan2(sqrt(disc), 2 (gamma + c) + beta) / sqrt(disc) (the arctan antiderivative with the
    difference of two arctans folded into one atan2), and 2 / (2 (gamma + c) + beta) as disc -> 0.
    Infinite when the segment meets a zero of the denominator (a singular point of the field).
    """
    s = jnp.sqrt(4.0 * (wedge2 + alpha * c))
    w = 2.0 * (gamma + c) + beta
    small = s <= 1e-6 * jnp.abs(w)
    safe_s = jnp.where(small, 1.0, s)
    safe_w = jnp.where(w == 0, 1.0, w)
    series = 2.0 / safe_w * (1.0 - (s / safe_w) ** 2 / 3.0)  # atan2(s, w) / s for s << w > 0
    series = jnp.where(w > 0, series, jnp.inf)
    return jnp.where(small, series, 2.0 * jnp.arctan2(s, w) / safe_s)


def bpst_link(data, x, d):
    """Exact transporter of charge-1 SU(2) ADHM data (BPST, either gauge) along x -> x + d; (N, N) = (2, 2).

    For k = 1, n = 1 the ADHM frame gives, with y = p(x) - B (p-bar(x) for chirality -1),
    rho = |Lambda| and l = Lambda / rho (derivation from the frame of :mod:`instantonkit.adhm`):

        regular gauge:  A = l Im(y dy-bar) l-bar / (|y|^2 + rho^2),
        singular gauge: A = l Im(y-bar dy) l-bar rho^2 / (|y|^2 (|y|^2 + rho^2))

    (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85; 't Hooft, Phys. Rev. D 14
    (1976) 3432, in quaternion form).  On the straight line y = y0 + t dq the imaginary quaternion
    Im(y dy-bar/dt) = Im(y0 dq-bar) (resp. Im(y-bar dy/dt) = Im(y0-bar dq)) does not depend on t, so all
    A(z(t)) commute and U = exp(l M l-bar * integral of the scalar factor), an arctan closed form.
    x, d: (4,) -> (2, 2) complex128.
    """
    return _k1_link(jnp.asarray(data.lam)[0, 0], jnp.asarray(data.B)[0, 0], data.chirality, data.gauge, x, d)


def _k1_link(lam, b, chirality: int, gauge: str, x, d):
    """bpst_link from the quaternions Lambda (4,) and B (4,) of charge-1 SU(2) data; (2, 2)."""
    rho2 = jnp.sum(lam**2)
    lhat = lam / jnp.sqrt(rho2)
    px, pd = point_to_quaternion(jnp.asarray(x)), point_to_quaternion(jnp.asarray(d))
    if chirality == -1:
        px, pd = qt.qconj(px), qt.qconj(pd)
    y0 = px - b
    alpha, beta, gamma = jnp.sum(pd**2), 2.0 * jnp.sum(y0 * pd), jnp.sum(y0**2)
    wedge = y0[:, None] * pd[None, :] - y0[None, :] * pd[:, None]
    wedge2 = 0.5 * jnp.sum(wedge**2)
    if gauge == "regular":
        gen = qt.qmul(y0, qt.qconj(pd))
        scalar = _line_integral(alpha, beta, gamma, wedge2, rho2)
    else:
        gen = qt.qmul(qt.qconj(y0), pd)
        scalar = _line_integral(alpha, beta, gamma, wedge2, 0.0) - _line_integral(alpha, beta, gamma, wedge2, rho2)
    gen = gen.at[0].set(0.0)
    omega = qt.qmul(qt.qmul(lhat, gen), qt.qconj(lhat)) * scalar
    return qt.to_matrix(qt.qexp(omega))


def _closed_link_fn(field) -> Callable | None:
    """The per-link closed form of ``field`` if it has one: its ``link`` hook, or BPST for k = 1 SU(2) ADHM data."""
    if hasattr(field, "link") and callable(getattr(field, "link")):
        return lambda f, x, d: f.link(x, d)
    from .adhm import ADHMData

    if isinstance(field, ADHMData) and field.k == 1 and field.rank == 1:
        return bpst_link
    try:  # the closed-form BPST of the ansatz module is bpst(center, size, orientation) in the same gauge
        from .ansatz import BPSTField
    except ImportError:  # pragma: no cover
        return None
    if isinstance(field, BPSTField):
        return lambda f, x, d: _k1_link(
            jnp.asarray(f.size) * jnp.asarray(f.orientation), point_to_quaternion(jnp.asarray(f.center)), 1, f.gauge, x, d
        )
    return None


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
def _closed_kernel(fn):
    return jax.jit(jax.vmap(fn, in_axes=(None, 0, 0)))


def _chunk_size(m: int, chunk: int = LINK_CHUNK) -> int:
    """Padded batch size for m links: one of a few sizes, so few kernels are compiled."""
    return next((c for c in _CHUNK_SIZES if c >= m), chunk) if m < chunk else chunk


def _chunked(kern, field, xs, ds, *extra, size=None):
    """Run a vmapped link kernel over (M, 4) starts and steps in padded chunks of ``size``; (M, N, N) numpy."""
    m = xs.shape[0]
    size = _chunk_size(m) if size is None else size
    parts = []
    for start in range(0, m, size):
        stop = min(start + size, m)
        cx, cd = xs[start:stop], ds[start:stop]
        if stop - start < size:
            pad = size - (stop - start)
            cx = np.concatenate([cx, np.broadcast_to(xs[start], (pad, 4))])
            cd = np.concatenate([cd, np.broadcast_to(ds[start], (pad, 4))])
        parts.append(np.asarray(kern(field, cx, cd, *extra))[: stop - start])
    return np.concatenate(parts) if parts else None


def _magnus_refined(field, xs, ds, rtol, stats, batch=None):
    """Magnus transporters refined by halving the step until two refinements differ by <= rtol."""
    kern = _magnus_kernel()
    steps = 1
    size = _chunk_size(xs.shape[0]) if batch is None else batch  # kept for the refinements: one compiled batch size
    prev = _chunked(kern, field, xs, ds, steps, size=size)
    out = prev.copy()
    todo = np.arange(xs.shape[0])
    diff_max = 0.0
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
            stats["max_steps"] = max(stats.get("max_steps", 0), steps)
        if not np.all(np.isfinite(cur)):
            bad = todo[~np.all(np.isfinite(cur), axis=(-2, -1))]
            raise ValueError(
                f"the potential is not finite on {bad.size} link(s) (first start {xs[bad[0]].tolist()}, "
                f"step {ds[bad[0]].tolist()}); the field is singular there (e.g. the centre of a singular gauge)"
            )
        todo, prev = todo[~done], cur[~done]
    stats["refinement_diff"] = max(stats.get("refinement_diff", 0.0), diff_max)
    return out


def parallel_transporter(
    field, starts, steps, *, method: str = "auto", rtol: float = 1e-12, report: dict | None = None, batch: int | None = None
):
    """Parallel transporters W(1) of ``dW/dt = W A(x + t d).d``, W(0) = 1, for many straight segments.

    starts, steps: (..., 4) float64 (start point x, displacement d) -> (..., N, N) complex128, before
    any unitary projection.  method: 'auto' (closed form when the field has one), 'closed' (error if
    none), 'magnus' (Gauss-Legendre Magnus steps refined to ``rtol``).  ``report`` (a dict) receives
    'method', 'max_steps' and 'refinement_diff'.  batch: links per compiled kernel call (default from
    the number of links); XLA's code, hence the last bit of a result, can depend on it, so callers
    that must agree bit for bit (lattice starts in chunks) fix it.
    """
    from .fields import as_field, as_points

    if batch is not None and (isinstance(batch, bool) or not isinstance(batch, (int, np.integer)) or batch < 1):
        raise ValueError(f"batch must be a positive integer; found {batch!r}")
    if method not in _METHODS:
        raise ValueError(f"method must be one of {_METHODS}; found {method!r}")
    if not (isinstance(rtol, (int, float)) and rtol > 0):
        raise ValueError(f"rtol must be a positive number; found {rtol!r}")
    field = as_field(field)
    xs, lead = as_points(starts)
    ds, lead_d = as_points(steps)
    if lead != lead_d:
        raise ValueError(f"starts and steps must have the same shape; found {lead + (4,)} and {lead_d + (4,)}")
    stats = report if report is not None else {}
    closed = _closed_link_fn(field) if method != "magnus" else None
    if method == "closed" and closed is None:
        raise ValueError(f"the field {type(field).__name__} has no closed-form link (no link(x, d) hook)")
    if xs.shape[0] == 0:
        n = jax.eval_shape(field.potential, jax.ShapeDtypeStruct((4,), jnp.float64)).shape[-1]
        return np.zeros(lead + (n, n), dtype=np.complex128)
    if closed is not None:
        out = _chunked(_closed_kernel(closed), field, xs, ds, size=batch)
        stats["method"] = "closed"
        bad = ~np.all(np.isfinite(out), axis=(-2, -1))
        if np.any(bad):
            i = int(np.argmax(bad))
            raise ValueError(
                f"the closed-form link is not finite on {int(bad.sum())} link(s) (first start {xs[i].tolist()}, "
                f"step {ds[i].tolist()}); the segment passes through a singular point of the field"
            )
    else:
        out = _magnus_refined(field, xs, ds, float(rtol), stats, batch)
        stats["method"] = "magnus"
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
    step = max(1, (1 << 24) // (n * n))
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
    shape = _check_shape(shape)
    a = _check_spacing(spacing)
    centre = np.zeros(4)
    if hasattr(field, "hint"):
        centre = np.asarray(field.hint()[0], dtype=np.float64).reshape(4)
    return centre - a * (np.floor(np.asarray(shape) / 2.0) - 0.5)


def resolve_origin(field, shape, spacing, origin) -> np.ndarray:
    """``origin`` as a checked (4,) float64 point, or :func:`default_origin` when it is None; ValueError naming the value."""
    org = default_origin(field, shape, spacing) if origin is None else np.asarray(origin, dtype=np.float64)
    if org.shape != (4,) or not np.all(np.isfinite(org)):
        raise ValueError(f"origin must be a finite point of shape (4,); found {np.asarray(origin).tolist()!r}")
    return org


def site_points(shape, spacing, origin) -> np.ndarray:
    """Positions of the sites, x_n = origin + a n; (L1, L2, L3, L4, 4) float64."""
    shape = _check_shape(shape)
    a = _check_spacing(spacing)
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


def _slice_links(field, sites_t, a, method, rtol, stats, batch=None):
    """Links of one set of sites (S, 4) in the four directions: (S, 4, N, N), unprojected."""
    s = sites_t.shape[0]
    xs = np.repeat(sites_t, 4, axis=0)
    ds = np.tile(a * np.eye(4), (s, 1))
    u = parallel_transporter(field, xs, ds, method=method, rtol=rtol, report=stats, batch=batch)
    return u.reshape(s, 4, u.shape[-2], u.shape[-1])


@dataclasses.dataclass(frozen=True)
class StartSpec:
    """The validated parameters of one lattice start (what :func:`lattice_links` was asked for).

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
        from .fields import as_field

        field = as_field(field)
        shape = _check_shape(shape)
        a = _check_spacing(spacing)
        if group not in _GROUPS:
            raise ValueError(f"group must be one of {_GROUPS}; found {group!r}")
        if boundary not in _BOUNDARIES:
            raise ValueError(f"boundary must be one of {_BOUNDARIES}; found {boundary!r}")
        if method not in _METHODS:
            raise ValueError(f"method must be one of {_METHODS}; found {method!r}")
        if isinstance(rtol, bool) or not (isinstance(rtol, (int, float, np.floating)) and rtol > 0):
            raise ValueError(f"rtol must be a positive number; found {rtol!r}")
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

    def block(self, lo, hi, stats: dict):
        """Links of the sites lo <= n < hi; see :func:`block_links`."""
        return block_links(
            self.field, lo, hi, self.origin, self.spacing, n_field=self.n_field, group=self.group,
            embedding=self.embedding, method=self.method, rtol=self.rtol, stats=stats, batch=link_batch(self.shape),
        )

    def boundary_figures(self, links):
        """(link_mismatch, action_error) of :func:`boundary_mismatch` for periodic starts, (None, None) for open ones."""
        if self.boundary != "periodic":
            return None, None
        bm = boundary_mismatch(
            self.field, links, self.spacing, origin=self.origin, group=self.group, embedding=self.embedding, rtol=self.rtol, method=self.method
        )
        return bm["link_mismatch"], bm["action_error"]

    def report(self, stats: dict, before: float, after: float, seconds: float, mismatch=None, action_err=None) -> "LinkReport":
        """The :class:`LinkReport` of a finished start."""
        return LinkReport(
            shape=self.shape,
            spacing=self.spacing,
            origin=tuple(float(v) for v in self.origin),
            group=self.group,
            embedding=self.embedding,
            boundary=self.boundary,
            rtol=self.rtol,
            method=stats.get("method", "closed"),
            max_steps=int(stats.get("max_steps", 0)),
            refinement_diff=float(stats.get("refinement_diff", 0.0)),
            unitarity_before=float(before),
            unitarity_after=float(after),
            boundary_link_mismatch=mismatch,
            boundary_action_error=action_err,
            seconds=float(seconds),
        )


def _finish_batched(u, batch: int):
    """:func:`_finish` in padded pieces of ``batch`` links (one compiled size); (projected, before, after)."""
    m = u.shape[0]
    out = np.empty_like(u)
    before = after = 0.0
    for start in range(0, m, batch):
        piece = u[start : start + batch]
        k = piece.shape[0]
        if k < batch:
            piece = np.concatenate([piece, np.broadcast_to(piece[:1], (batch - k,) + piece.shape[1:])])
        p, d0, d1 = _finish(jnp.asarray(piece))
        out[start : start + k] = np.asarray(p)[:k]
        before, after = max(before, float(d0)), max(after, float(d1))
    return out, before, after


def link_batch(shape) -> int:
    """Links per compiled kernel call for a start of ``shape``: fixed by the time-slice size, so the
    local path (one slice at a time) and any chunking of the same start run the same compiled code."""
    return _chunk_size(4 * shape[0] * shape[1] * shape[2])


def block_links(field, lo, hi, origin, spacing, *, n_field, group, embedding, method, rtol, stats, batch):
    """Links of the sites lo <= n < hi (a box of the lattice); ((h1, h2, h3, h4, 4, N, N), dev_before, dev_after).

    The one kernel path of every lattice start: :func:`lattice_links` calls it per time slice and the
    chunked backends (:mod:`instantonkit.cluster`) per chunk, so both give the same bits.  Sites
    x_n = origin + a n (n float64); the transporters of a box are computed together, projected
    (:func:`_finish`) and embedded for group 'su3'.  ``stats`` collects the Magnus figures; ``batch``
    (:func:`link_batch` of the lattice) fixes the compiled kernel size, which keeps the bits equal.
    """
    lo, hi = tuple(int(v) for v in lo), tuple(int(v) for v in hi)
    ext = tuple(h - l for l, h in zip(lo, hi))
    grids = np.meshgrid(*[np.arange(l, h, dtype=np.float64) for l, h in zip(lo, hi)], indexing="ij")
    n = np.stack(grids, axis=-1).reshape(-1, 4)
    sites = np.asarray(origin, dtype=np.float64) + spacing * n
    u = _slice_links(field, sites, spacing, method, rtol, stats, batch).reshape(-1, n_field, n_field)
    u, dev0, dev1 = _finish_batched(u, batch)
    n_out = n_field
    if group == "su3":
        u, n_out = _embed(u, 3, embedding), 3
    return u.reshape(ext + (4, n_out, n_out)), float(dev0), float(dev1)


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

    shape: (L1, L2, L3, L4); spacing: a > 0; origin: (4,) position of site 0 (default
    :func:`default_origin`: the field's centre in the middle of the central hypercube).
    group: 'su2' (N = 2), 'su3' (the SU(2) links embedded in the ``embedding`` = (i, j) rows and
    columns of 3 x 3 identity matrices) or None (the field's own N, e.g. Sp(n)).
    boundary: 'periodic' (the link from the last site points to site 0; use a field that decays fast,
    e.g. singular gauge; the mismatch is measured, see :func:`boundary_mismatch`) or 'open' (every
    link is the exact transporter to x + a mu_hat; observables then use only plaquettes inside).
    rtol: refinement target of the Magnus quadrature (unused by closed forms); method: 'auto',
    'closed' or 'magnus' (see :func:`parallel_transporter`).  out: optional preallocated array or
    np.memmap of the result shape and complex128 dtype, filled one time slice at a time;
    progress(done, total) is called after each time slice.  With ``return_report=True`` returns
    ``(links, LinkReport)``.

    backend: 'local' (this process, one time slice at a time) or 'dask' (chunks of ``chunks`` =
    (c1, c2, c3, c4) sites computed by the same kernels on a Dask cluster, bit-identical to 'local';
    ``store`` a Zarr directory written chunk by chunk and resumable, else a lazy dask array is
    returned; ``client`` a dask.distributed.Client, None for a temporary local cluster, or 'sync'
    for this process; ``overwrite`` replaces a store made with other parameters; ``progress`` then
    counts chunks).  See
    :func:`instantonkit.cluster.start_links`; needs the optional extra ``distributed``.
    """
    t_start = time.perf_counter()
    if backend not in _BACKENDS:
        raise ValueError(f"backend must be one of {_BACKENDS}; found {backend!r}")
    spec = StartSpec.make(field, shape, spacing, origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method)
    if backend == "dask":
        if out is not None:
            raise ValueError("out= is for the local backend; the dask backend writes to store= (a Zarr path) or returns a dask array")
        from . import cluster

        return cluster.start_links(spec, chunks=chunks, store=store, client=client, overwrite=overwrite, progress=progress, return_report=return_report)
    if chunks is not None or store is not None or client is not None:
        raise ValueError("chunks=, store= and client= need backend='dask'")
    shape = spec.shape
    full = spec.links_shape
    if out is None:
        out = np.empty(full, dtype=np.complex128)
    else:
        if tuple(out.shape) != full or out.dtype != np.complex128:
            raise ValueError(f"out must have shape {full} and dtype complex128; found {tuple(out.shape)} {out.dtype}")
    stats: dict = {}
    before = after = 0.0
    for t in range(shape[3]):
        block, dev0, dev1 = spec.block((0, 0, 0, t), shape[:3] + (t + 1,), stats)
        before, after = max(before, dev0), max(after, dev1)
        out[:, :, :, t : t + 1] = block
        if progress is not None:
            progress(t + 1, shape[3])
    if hasattr(out, "flush"):
        out.flush()
    if not return_report:
        return out
    mismatch, action_err = spec.boundary_figures(out)
    return out, spec.report(stats, before, after, time.perf_counter() - t_start, mismatch, action_err)


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
    a = _check_spacing(spacing)
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
