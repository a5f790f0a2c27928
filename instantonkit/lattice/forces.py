"""The force of a loop action, computed plane by plane on cache-sized blocks and worker threads.

For an action made of m x n Wilson loops with a staple weight per term, direction and plane (the weights
omega_i[mu, nu] of `instantonkit.lattice.staples`; the isotropic action has omega_i = c_i / (m_i n_i)^2 in
every plane), the flow's force on the link U_mu(x) is Z_mu(x) = -P_ah(U_mu(x) Sigma_mu(x)) with Sigma_mu
the weighted staple sum (module docstring of `instantonkit.lattice.smoothing`).  Every loop lies in one plane,
so Sigma_mu is the sum over the three planes (mu, nu) of the staples of that plane's loops: each plane is cut
into blocks across its two other axes (no halo), a compiled kernel computes the staples of both of the plane's
directions on a block (`instantonkit.lattice.rectangles.plane_staples`: the corner products of a loop are
shared by the four long links it holds), and the chunks of blocks run on one thread per core
(`instantonkit.lattice.threads`).  The result equals the staples of `instantonkit.lattice.staples` to rounding
(tests/test_forces.py).  Memory beyond the links: the staple sum (each plane's staples are added as soon as its
parts are done) and about two planes' links and staples in the plane layout (the next plane is laid out while
the last parts of one run).  `plane_force` lays out the weights and centre factors of the
planes once, for every force of a flow.  The isotropic Wilson flows keep their one fused compiled step
(`instantonkit.lattice.smoothing._force`), which is faster for the plaquettes alone; tests/test_forces.py
ties the two.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from . import threads
from .loops import _mm, _traceless_antihermitian
from .observables import PLANES
from .rectangles import plane_loops, plane_staples

__all__ = ["BLOCK_SITES", "plane_force", "loop_force"]

#: Sites per block of the plane kernel (the block's products stay in the cache; a block is at least one whole
#: plane, so 16^4 and 32^4 lattices run one plane a block; tuned apart from `operators.BLOCK_SITES`).
BLOCK_SITES = 1 << 8


def _shape_weights(pairs: tuple, omega, a: int, b: int) -> tuple[np.ndarray, np.ndarray]:
    """(wa, wb): the weights of the a- and b-staples of each loop shape of plane (a, b) (`plane_loops` order, p along a).

    A shape (p, q) of term i = (m, n) enters Sigma_a with share_i omega_i[a, b] and Sigma_b with share_i
    omega_i[b, a], share 1 for a square and 1/2 for each orientation of a rectangle (the convention of
    `instantonkit.lattice.staples.weighted_staple`).  omega: (len(pairs), 4, 4) float."""
    om = np.asarray(omega, dtype=np.float64)
    index = {pr: i for i, pr in enumerate(pairs)}
    wa, wb = [], []
    for p, q in plane_loops(pairs):
        i = index[(p, q)] if (p, q) in index else index[(q, p)]
        share = 1.0 if p == q else 0.5
        wa.append(share * om[i, a, b])
        wb.append(share * om[i, b, a])
    return np.array(wa), np.array(wb)


def _block(plane: int, across: int) -> int:
    """Transverse sites per block: the largest divisor of ``across`` with at most `BLOCK_SITES` sites a block
    (at least one)."""
    return max(d for d in range(1, across + 1) if across % d == 0 and d * plane <= max(BLOCK_SITES, plane))


@functools.partial(jax.jit, static_argnames=("a", "b", "b_sites"))
def _plane_blocks(u, a: int, b: int, b_sites: int):
    """The links along a and b in the blocked plane layout (nb, La, Lb, b_sites, 2, N, N) (the other two axes in
    their order, flattened and cut into blocks of b_sites)."""
    rest = tuple(r for r in range(4) if r not in (a, b))
    x = jnp.stack([u[..., a, :, :], u[..., b, :, :]], axis=4)
    x = jnp.transpose(x, (a, b, *rest, 4, 5, 6))
    x = x.reshape(x.shape[0], x.shape[1], -1, b_sites, *x.shape[4:])
    return jnp.moveaxis(x, 2, 0)


@functools.partial(jax.jit, static_argnames=("a", "b", "b_sites"))
def _phase_blocks(z, a: int, b: int, b_sites: int):
    """Centre factors (S, L1..L4) of S loop shapes in the blocked plane layout of `_plane_blocks`: (nb, S, La, Lb, b_sites)."""
    rest = tuple(r for r in range(4) if r not in (a, b))
    x = jnp.transpose(z, (0, 1 + a, 1 + b, *(1 + r for r in rest)))
    x = x.reshape(x.shape[0], x.shape[1], x.shape[2], -1, b_sites)
    return jnp.moveaxis(x, 3, 0)


@functools.partial(jax.jit, static_argnames=("a", "b"), donate_argnames=("sigma",))
def _add_plane(sigma, parts, a: int, b: int):
    """sigma (L1..L4, 4, N, N) plus the staples of plane (a, b) given as the blocked parts of `_plane_blocks`."""
    r = jnp.concatenate(parts, axis=0)  # (nb, La, Lb, b, 2, N, N)
    rest = tuple(x for x in range(4) if x not in (a, b))
    shape = sigma.shape[:4]
    r = jnp.moveaxis(r, 0, 2).reshape(shape[a], shape[b], shape[rest[0]], shape[rest[1]], *r.shape[4:])
    r = jnp.transpose(r, (*np.argsort((a, b, *rest)), 4, 5, 6))
    return sigma.at[..., a, :, :].add(r[..., 0, :, :]).at[..., b, :, :].add(r[..., 1, :, :])


@jax.jit
def _force_of(u, sigma):
    """Z_mu = -P_ah(U_mu Sigma_mu) for the four directions; (L1..L4, 4, N, N)."""
    return -_traceless_antihermitian(_mm(u, sigma))


def _parts(nb: int) -> int:
    """Parts of a plane's nb blocks handed to the threads: the largest divisor of nb up to 2 `WORKERS`
    (equal parts share one compiled kernel)."""
    return max(d for d in range(1, min(nb, 2 * threads.workers()) + 1) if nb % d == 0)


def plane_force(shape, pairs: tuple, omega, phases=None):
    """The force of the loop action with staple weights omega on lattices of ``shape``: a function u -> Z(U) =
    -P_ah(U_mu Sigma_mu), (L1..L4, 4, N, N) complex128 jax, with the planes' weights and centre factors laid out once.

    shape: (L1, L2, L3, L4); pairs: ((m, n), ...) the terms (m <= n); omega: (len(pairs), 4, 4) float,
    omega_i[mu, nu] the weight of term i's staples of U_mu in plane (mu, nu); phases: None, or on a twisted
    torus the centre factor of every loop, {(e, f): (4, 4, L1..L4) complex} for each shape of `plane_loops`
    (`instantonkit.lattice.staples.phase_fields`).  The function takes checked periodic links u (L1..L4, 4, N, N)
    complex128 and is not traceable (the planes run on worker threads); the flows call it between their compiled
    stages.

    Raises:
        ValueError: a shape that is not four positive extents, omega not (len(pairs), 4, 4), phases missing a
            loop shape or not (4, 4, L1..L4); and, from the function, links not of this shape.
    """
    shape = tuple(int(x) for x in shape)
    if len(shape) != 4 or min(shape) < 1:
        raise ValueError(f"shape must be four positive extents (L1, L2, L3, L4); found {shape}")
    om = np.asarray(omega, dtype=np.float64)
    if om.shape != (len(pairs), 4, 4):
        raise ValueError(f"omega must have shape {(len(pairs), 4, 4)} (term, mu, nu); found {om.shape}")
    shapes = plane_loops(pairs)
    if phases is not None:
        for sh in shapes:
            got = None if sh not in phases else np.shape(phases[sh])
            if got != (4, 4) + shape:
                raise ValueError(f"phases[{sh}] must have shape {(4, 4) + shape}; found {got}")
    jobs = []
    for a, b in PLANES:
        across = int(np.prod(shape)) // (shape[a] * shape[b])
        wa, wb = (jnp.asarray(w) for w in _shape_weights(pairs, om, a, b))
        z = None if phases is None else jnp.stack([jnp.asarray(phases[sh])[a, b] for sh in shapes])
        bs = _block(shape[a] * shape[b], across)
        jobs.append((a, b, bs, wa, wb, None if z is None else _phase_blocks(z, a, b, bs)))

    def force(u):
        u = jnp.asarray(u)
        if u.ndim != 7 or u.shape[:5] != shape + (4,) or u.shape[5] != u.shape[6]:
            raise ValueError(f"links must have shape {shape + (4, 'N', 'N')}; found {tuple(u.shape)}")

        def chunks():
            for k, (a, b, bs, wa, wb, ph) in enumerate(jobs):
                x = _plane_blocks(u, a, b, bs)
                n = _parts(x.shape[0])
                step = x.shape[0] // n
                for j in range(n):
                    part = slice(j * step, (j + 1) * step)
                    yield k, j == n - 1, x[part], wa, wb, None if ph is None else ph[part]

        def run(item):
            k, last, x, wa, wb, ph = item
            return k, last, plane_staples(x, wa, wb, shapes, ph).block_until_ready()

        sigma = jnp.zeros_like(u)
        done: list = []
        for k, last, r in threads.map_chunks(run, chunks()):
            done.append(r)
            if last:
                a, b = jobs[k][:2]
                sigma = _add_plane(sigma, tuple(done), a, b)
                done = []
        return _force_of(u, sigma)

    return force


def loop_force(u, pairs: tuple, omega, phases=None):
    """Z(U) of `plane_force` for one set of links u (L1..L4, 4, N, N) complex128; (L1..L4, 4, N, N) complex128 jax."""
    return plane_force(np.shape(u)[:4], pairs, omega, phases)(u)
