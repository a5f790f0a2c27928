"""The fused SU(2) Magnus path of `instantonkit.lattice.transport`: all steps of a link in one kernel.

For N = 2 the generator is ``G = i tau 1 + v`` with v a pure quaternion, so the commutators of the
sixth-order step (`instantonkit.lattice.magnus.magnus6`) are cross products and the central tau is
integrated by the Gauss-Legendre weights; nodes, exponentials and the ordered product stay inside one
compiled kernel per number of steps.
"""

from __future__ import annotations

import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..adhm import _kxk
from ..core import quaternion as qt
from .magnus import GL3, generators, pairwise_product

#: Most Magnus steps per link of the fused SU(2) kernel (`fused_links`; each m compiles once, about
#: 1 s at m = 8, 4.7 s at m = 64): refinements beyond 8, rare on lattices at rtol 1e-8, take the node-batch
#: path below (measured, 6^4 start of overlapping charge-2 data at rtol 1e-12: first call 6.0 s, 9.5 s with 64).
FUSED_MAX_STEPS = 8
#: Nodes per call of the fused kernel (links per call 12288 / (3 m): 4096 links at one step).
FUSED_NODES = 12288
#: c with e_1 e_2 = c e_3 for the quaternion units (conventions): for pure quaternions a b - b a = 2 c a x b.
_CROSS_SIGN = float(qt.qmul(np.eye(4)[1], np.eye(4)[2])[3])


def _rcomm_q(a, b):
    """Reversed commutator b a - a b of pure quaternions given by their imaginary parts (3, ...)."""
    return -2.0 * _CROSS_SIGN * jnp.cross(a, b, axis=0)


def fused_links(field, xs, ds, m: int):
    """SU(2)/U(2) transporters of a batch of segments (L, 4) with m Magnus steps in one kernel; (L, 2, 2).

    The 3 m L nodes go to the field's ``generator_batch`` hook when it has one (ADHM data: batch-major
    k x k work, `instantonkit.adhm._kxk.link_generator_batch`), else to the vmapped potential; then
    `magnus6` in quaternion form (G = i tau 1 + v, v a pure quaternion: the commutators are cross
    products and tau, central, is integrated by the Gauss-Legendre weights), exp, and the ordered
    product E_1 ... E_m, all without leaving the compiled code.  Equal to `_magnus_at` to rounding.
    """
    h = 1.0 / m
    nb = xs.shape[0]
    ts = jnp.asarray((np.arange(m)[:, None] + np.asarray(GL3)[None, :]) * h)  # (m, 3)
    pts = (xs[None, None] + ts[:, :, None, None] * ds[None, None]).reshape(-1, 4)  # (step, node, link)
    dirs = jnp.broadcast_to(ds[None, None], (m, 3, nb, 4)).reshape(-1, 4)
    g = generators(field, pts, dirs)
    tau = (0.5 * jnp.imag(g[:, 0, 0] + g[:, 1, 1])).reshape(m, 3, nb)
    v = jnp.moveaxis(qt.from_matrix(g)[:, 1:], -1, 0).reshape(3, m, 3, nb)
    a1 = h * v[:, :, 1]
    a2 = (math.sqrt(15.0) / 3.0) * h * (v[:, :, 2] - v[:, :, 0])
    a3 = (10.0 / 3.0) * h * (v[:, :, 2] - 2.0 * v[:, :, 1] + v[:, :, 0])
    c12 = _rcomm_q(a1, a2)
    inner = a2 - _rcomm_q(a1, 2.0 * a3 + c12) / 60.0
    om = a1 + a3 / 12.0 + _rcomm_q(-20.0 * a1 - a3 + c12, inner) / 240.0  # (3, m, nb)
    w = jnp.moveaxis(qt.qexp(jnp.moveaxis(jnp.concatenate([jnp.zeros((1, m, nb)), om]), 0, -1)), -1, 0)  # (4, m, nb)
    w = pairwise_product(w, _kxk.qmul_last, jnp.concatenate)
    phase = jnp.exp(1j * h * jnp.sum(tau * jnp.asarray([5.0, 8.0, 5.0])[None, :, None] / 18.0, axis=(0, 1)))
    return phase[:, None, None] * qt.to_matrix(w.T)


@functools.cache
def fused_kernel(m: int):
    return jax.jit(functools.partial(fused_links, m=m))
