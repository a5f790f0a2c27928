"""The U(1) phase of the zero modes of complex (SU(N)) ADHM data: the flat part a, its ray integral theta (floor 5).

The modes `instantonkit.adhm.zero_modes` builds from the frame U are those of U^dag dU = data.potential + a 1,
a = tr(U^dag dU) / N (`u1_part`, flat); the modes of the traceless ``data.potential`` are exp(i theta)
times them, with d theta = Im a.  theta is the line integral of Im a along the ray from the layout centre
(`ray_angle` on a fixed Gauss-Legendre rule, `adaptive_phase` with a checked error estimate);
the public front door is `instantonkit.adhm.zero_modes.u1_phase`, and the derivation is in that module's
docstring.  ``ray_angle``, ``adaptive_phase`` and ``phase_anchor`` are package-internal seams.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._batching import run_batched
from .unitary import UnitaryADHMData

__all__ = ["u1_part", "u1_angle", "PHASE_NODES", "PHASE_ATOL", "PHASE_PANELS"]

#: Fixed Gauss-Legendre nodes of the ray integral of the U(1) phase per gauge, used where the phase is
#: differentiated (`u1_angle`, `dirac_residual`) and not checked: singular gauge 64 nodes, max error
#: <= 5e-15 measured against 1024-4096 nodes (SU(3) k = 2, 3, SU(4) k = 2); regular gauge 512 nodes, median
#: 1e-14 but up to 1e-3 measured on rays that pass near the isolated points where that frame is singular (N > 2).
PHASE_NODES = {"singular": 64, "regular": 512}

#: Default absolute tolerance on theta of the adaptive ray integral of `u1_phase` and `zero_modes`:
#: 1e-12 was not reachable on many regular-gauge rays near the frame's singular points, where the integrand itself
#: carries rounding of relative 1e-9 (Gram matrix condition 1e7, measured; 8192 and 16384 nodes differ by 9e-12).
PHASE_ATOL = 1e-10

#: Start of the adaptive rule per gauge: (panels, Gauss-Legendre nodes per panel) (`adaptive_phase`);
#: measured on 2048 random points, singular and regular gauge the default is 0.5-0.8 times the old fixed rule's time.
PHASE_PANELS = {"singular": (1, 32), "regular": (8, 32)}

#: Bisections of a panel after which points whose error estimate still exceeds the tolerance raise ValueError.
_PHASE_MAX_ROUNDS = 40


@functools.cache
def _legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights of n points on [0, 1] (numpy.polynomial.legendre.leggauss, mapped)."""
    s, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (s + 1.0), 0.5 * w


def u1_part(data: UnitaryADHMData, x):
    """The flat U(1) part a_mu = tr(U^dag d_mu U) / N removed from ``data.potential``, at one point -> (4,) complex.

    U^dag d_mu U = data.potential(x)_mu + a_mu 1_N (the frame's own connection, autodiff of the frame).
    Package-internal seam (tests check that it is flat, d_mu a_nu - d_nu a_mu = 0).
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    jac, u = jax.jacfwd(lambda y: (data.frame(y),) * 2, has_aux=True)(x)
    return jnp.einsum("ia,iam->m", jnp.conj(u), jac) / data.rank


def ray_angle(data: UnitaryADHMData, x, anchor, n: int, lo=0.0, hi=1.0):
    """theta(x) with d_mu theta = Im a_mu (a = i d theta, `UnitaryADHMData.u1_connection`), at one point -> ().

    anchor = (c (4,), l): the ray c + t e, e = (x - c) / R, R = |x - c| (e = e_4 when R = 0), with t - R =
    (R + l) s / (1 - s) beyond x (singular gauge: theta(x) = -int_R^inf Im a(c + t e) . e dt, theta -> 0 at
    infinity) or t = l R s / (l + R (1 - s)) from c to x (regular gauge: theta(x) = int_0^R ..., theta(c) = 0);
    both maps have dt/ds smooth on [0, 1].  n Gauss-Legendre nodes on the panel lo <= s <= hi (the part of
    the integral from that panel; [0, 1] is the whole ray).
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    c, ell = anchor[:4], anchor[4]
    d = x - c
    r = jnp.sqrt(jnp.sum(d**2))
    safe = jnp.where(r > 0.0, r, 1.0)  # no division by zero, also in derivatives
    e = jnp.where(r > 0.0, d / safe, jnp.array([0.0, 0.0, 0.0, 1.0]))
    u, w = (jnp.asarray(v) for v in _legendre(n))
    s, w = lo + (hi - lo) * u, (hi - lo) * w
    if data.gauge == "singular":
        t = (r + ell * s) / (1.0 - s)
        jac = -(r + ell) / (1.0 - s) ** 2
    else:
        den = ell + r * (1.0 - s)
        t = ell * r * s / den
        jac = ell * r * (ell + r) / den**2
    alpha = jax.vmap(lambda y: jnp.imag(data.u1_connection(y)))(c + t[:, None] * e)  # (n, 4)
    return jnp.sum(w * jac * (alpha @ e))


def u1_angle(data: UnitaryADHMData, x, *, nodes: int | None = None):
    """theta of `u1_phase` at one point x (4,) -> (), jax-traceable in x (data concrete).

    The fixed rule (nodes, None for PHASE_NODES[data.gauge]), unchecked; `u1_phase` is the checked value.
    Package-internal seam (tests differentiate it with jax.jacfwd against `u1_part`).
    """
    n = PHASE_NODES[data.gauge] if nodes is None else _validate.positive_int("nodes", nodes)
    return ray_angle(data, x, jnp.asarray(phase_anchor(data)), n)


@functools.cache
def _panel_kernel(n: int):
    """Compiled (data, x (B, 4), lo (B,), hi (B,), anchor) -> (B,): n-node ray integrals over panels [lo, hi]."""
    fn = lambda d, x, lo, hi, a: ray_angle(d, x, a, n, lo, hi)  # noqa: E731
    return jax.jit(jax.vmap(fn, in_axes=(None, 0, 0, 0, None)))


def adaptive_phase(data: UnitaryADHMData, pts: np.ndarray, size: int, atol: float) -> np.ndarray:
    """theta at points (m, 4) by adaptive composite Gauss-Legendre on the rays of `ray_angle`.

    A panel's estimate is |Q(left half) + Q(right half) - Q(panel)| (n nodes each, PHASE_PANELS); its value is
    the halves' sum.  A point is done when its estimates sum to <= atol; until then the panels whose
    estimate exceeds atol times their width in s are bisected (at least one does) and the others kept.
    A panel whose estimate is below 1e-6 of its value but not below a quarter of its parent's is at the
    rounding of the integrand (measured: relative 1e-9 where the regular frame's Gram matrix has condition
    1e7) and is kept with its estimate.  Raises ValueError naming the points whose summed estimate exceeds atol
    (also after _PHASE_MAX_ROUNDS rounds); non-finite values are returned (the caller's check names them).
    """
    p0, n = PHASE_PANELS[data.gauge]
    kern, after = _panel_kernel(n), (jnp.asarray(phase_anchor(data)),)
    m = pts.shape[0]

    def quad(i, a, b):
        return run_batched(kern, [pts[i], a, b], size, shrink_last=True, args_before=(data,), args_after=after)

    idx = np.repeat(np.arange(m), p0)
    lo = np.tile(np.arange(p0) / p0, m)
    hi = lo + 1.0 / p0
    coarse, prev = quad(idx, lo, hi), np.full(len(idx), np.inf)
    theta, est = np.zeros(m), np.zeros(m)
    for _ in range(_PHASE_MAX_ROUNDS + 1):
        mid, t = 0.5 * (lo + hi), len(idx)
        halves = quad(np.concatenate([idx, idx]), np.concatenate([lo, mid]), np.concatenate([mid, hi]))
        fine, err = halves[:t] + halves[t:], np.abs(halves[:t] + halves[t:] - coarse)
        total = est + np.bincount(idx, err, m)
        noise = (err > 0.25 * prev) & (err < 1e-6 * np.abs(fine))  # not shrinking, yet tiny: rounding of the integrand
        keep = (total <= atol)[idx] | (err <= atol * (hi - lo)) | ~np.isfinite(total)[idx] | noise
        theta += np.bincount(idx[keep], fine[keep], m)
        est += np.bincount(idx[keep], err[keep], m)
        if np.all(keep):
            break
        idx, coarse = np.tile(idx[~keep], 2), np.concatenate([halves[:t][~keep], halves[t:][~keep]])
        lo, hi, prev = (
            np.concatenate([lo[~keep], mid[~keep]]),
            np.concatenate([mid[~keep], hi[~keep]]),
            np.tile(err[~keep], 2),
        )
    else:
        est += np.bincount(idx, prev, m) / 2  # the estimates of the panels left unsplit (each tiled twice)
    bad = np.flatnonzero(~(est <= atol) & np.isfinite(est))
    if bad.size:
        raise ValueError(
            f"u1_phase did not reach atol = {atol:.1e} at {bad.size} of {m} points (first: {pts[bad[0]].tolist()}, "
            f"error estimate {est[bad[0]]:.1e}, largest {np.max(est[bad]):.1e}; {_PHASE_MAX_ROUNDS} bisections at "
            f"most): the ray from the layout centre passes near a point where the {data.gauge} gauge frame is "
            "singular, where the integrand peaks and loses digits (try the other gauge or a larger atol)"
        )
    return theta


def phase_anchor(data: UnitaryADHMData) -> np.ndarray:
    """(c, l) of the phase's ray: the layout centre (mean of the centres) and length scale of ``data.hint``; (5,)."""
    c, ell = data.hint()
    return np.concatenate([np.asarray(c, dtype=np.float64), [float(ell)]])
