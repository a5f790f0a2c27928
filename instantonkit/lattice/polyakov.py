"""Polyakov loops: the continuum loop P exp of A_4 around the period, and lattice loops of time links.

Continuum: P(x_vec) = P exp int_0^beta A_4(x_vec, t0 + t) dt, the parallel transporter along x4 over one
period (`instantonkit.lattice.transport.parallel_transporter`, Magnus steps or a closed form); its
1/N tr is gauge invariant for fields periodic in x4 (common practice).  Lattice: L(x_vec) =
U_4(x_vec, 0) U_4(x_vec, a) ... U_4(x_vec, (L4 - 1) a), the ordered product of the time links at each
spatial site (common practice), with its volume average of 1/N tr and its eigenphases.
"""

from __future__ import annotations

import numpy as np

from ..core import _links
from ..core import _validate as _v
from ..engine.protocol import hook
from .transport import parallel_transporter

__all__ = ["polyakov_loop", "lattice_polyakov_loop", "polyakov_average", "polyakov_phases"]


def polyakov_loop(field, points, *, period=None, t0=0.0, rtol: float = 1e-12):
    """Continuum Polyakov loop P exp of the integral of A_4 over one period at spatial points.

    Args:
      field: a field periodic in x4 (its ``period`` hook) or any field with ``period`` given.
      points: (..., 3) float64 spatial points x_vec.
      period: beta > 0; default the field's ``period``.
      t0: start time of the loop (its trace does not depend on it).
      rtol: refinement target of the Magnus steps.
    Returns:
      (..., N, N) complex128 loops W = P exp int A_4 dt (later times to the right, as the transporters).
    Raises:
      ValueError: points not of shape (..., 3) or not finite, no period, beta <= 0, t0 not finite.
    """
    pts = np.asarray(points)
    pts = _v.real_array("points", pts)
    if pts.ndim < 1 or pts.shape[-1] != 3:
        raise ValueError(f"points must have shape (..., 3) (spatial points); found {pts.shape}")
    if period is None:
        found = hook(field, "period")
        if found is None:
            raise ValueError("the field has no period in x4; pass period=beta")
        period = float(np.asarray(found))
    beta = _v.positive_float("period", period)
    start_t = _v.finite_float("t0", t0)
    starts = np.concatenate([pts, np.full(pts.shape[:-1] + (1,), start_t)], axis=-1)
    steps = np.zeros_like(starts)
    steps[..., 3] = beta
    return np.asarray(parallel_transporter(field, starts, steps, method="magnus", rtol=rtol))


def lattice_polyakov_loop(links) -> np.ndarray:
    """Local lattice Polyakov loop at every spatial site: the ordered product of the time links.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex, checked by `instantonkit.core._links.check_links`
        (finite, SU(N) within its tolerance).
    Returns:
      (L1, L2, L3, N, N) complex128, L(x_vec) = U_4(x_vec, 0) U_4(x_vec, 1) ... U_4(x_vec, L4 - 1).
    Raises:
      ValueError / TypeError as `check_links`.
    """
    u = np.asarray(_links.check_links(links))
    time_links = u[:, :, :, :, 3]
    out = time_links[:, :, :, 0].copy()
    for t in range(1, time_links.shape[3]):
        out = out @ time_links[:, :, :, t]
    return out


def polyakov_average(links) -> complex:
    """Volume average of 1/N tr L(x_vec) over the spatial sites (1/2 tr for SU(2)); links as `lattice_polyakov_loop`."""
    loops = lattice_polyakov_loop(links)
    n = loops.shape[-1]
    return complex(np.mean(np.trace(loops, axis1=-2, axis2=-1)) / n)


def polyakov_phases(links) -> np.ndarray:
    """Eigenphases of L(x_vec) in (-pi, pi], sorted, at every spatial site: (L1, L2, L3, N) float64."""
    loops = lattice_polyakov_loop(links)
    return np.sort(np.angle(np.linalg.eigvals(loops)), axis=-1)
