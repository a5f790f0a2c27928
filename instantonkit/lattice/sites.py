"""Links of lattice sites in the four directions, with singular points handled in a twin gauge.

The package-internal seam of `instantonkit.lattice.starts` (``block_links``): the transporters of
`instantonkit.lattice.transport` from every site, and, for fields with the ``gauge_twin`` hook,
links touching a singular site rebuilt in the twin's gauge and transformed back; and
`block_links`, the links of a box of sites projected onto SU(N), the one kernel path of every
lattice start (local per time slice, `instantonkit.cluster` per chunk).
"""

from __future__ import annotations

import dataclasses
import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core._batching import run_batched
from ..engine.fields import hook
from .transport import LinkStats, embed_links, finish_batched, transporters

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
    radius = 0.5 * np.asarray(scales, dtype=np.float64).reshape(-1) + np.max(a)
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
    ds = np.tile(np.eye(4) * a, (s, 1))  # a: one spacing or four (a1, a2, a3, a4)
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


def block_links(field, lo, hi, origin, spacing, *, n_field, group, embedding, method, rtol, batch):
    """Links of the sites lo <= n < hi (a box of the lattice); ((h1, h2, h3, h4, 4, N, N), LinkStats).

    The one kernel path of every lattice start (documented seam of the chunked layer):
    `lattice_links` calls it per time slice and `instantonkit.cluster` per chunk, so both
    give the same bits.  Sites x_n = origin + a n (n float64; spacing one a or four a_i, (4,)); the transporters of a box are computed
    together, projected (`_finish`) and embedded for group 'su3'.  The returned
    `LinkStats` holds the Magnus figures and the unitarity before/after the projection;
    ``batch`` (`link_batch` of the lattice) fixes the compiled kernel size, which keeps the bits equal.
    """
    lo, hi = tuple(int(v) for v in lo), tuple(int(v) for v in hi)
    ext = tuple(h - l for l, h in zip(lo, hi))
    grids = np.meshgrid(*[np.arange(l, h, dtype=np.float64) for l, h in zip(lo, hi)], indexing="ij")
    n = np.stack(grids, axis=-1).reshape(-1, 4)
    sites = np.asarray(origin, dtype=np.float64) + spacing * n
    u, stats = site_links(field, sites, spacing, method, rtol, batch, n_field)
    u, dev0, dev1 = finish_batched(u.reshape(-1, n_field, n_field), batch)
    n_out = n_field
    if group == "su3" and n_field == 2:  # SU(2) links in a 2 x 2 block; SU(3) fields give SU(3) links directly
        u, n_out = embed_links(u, 3, embedding), 3
    stats = dataclasses.replace(stats, unitarity_before=float(dev0), unitarity_after=float(dev1))
    return u.reshape(ext + (4, n_out, n_out)), stats
