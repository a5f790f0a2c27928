"""The one check of link values shared by the observables, smoothing, the finder and the file loader (floor 0).

Link arrays are ``(L1, L2, L3, L4, 4, N, N)`` complex (`instantonkit.lattice.observables`).  Before a number
is computed from them, `check_links` refuses

* non-finite entries (NaN or inf), counting them and naming the first few sites and directions: an
  observable must never turn damaged data into a plausible number (a masked sum would skip them);
* links that are not special unitary beyond a tolerance: ``max |U^dag U - 1|`` (entrywise) or
  ``max |det U - 1|`` above ``tol`` (default `UNITARITY_TOL`), naming the worst link and value.

Projection onto SU(N) happens only when asked (``project=True`` or `project_links`): the polar
factor of the SVD U = X S V^dag, W = X V^dag (the unitary matrix nearest to U in the Frobenius norm,
Higham, SIAM J. Sci. Stat. Comput. 7 (1986) 1160, from memory; checked by
test_projection_when_asked_restores_the_links_of_scaled_input), then det W fixed to 1 by the central
phase det(W)^(-1/N).

Cost: a numpy ``isfinite`` pass and one jitted kernel over padded blocks of `BLOCK` matrices
(Gram matrix and determinant, explicit for N = 2, 3); measured for a 16^4 SU(3) lattice in the module's
tests and the README.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np

from ._validate import affordable

__all__ = [
    "UNITARITY_TOL",
    "BLOCK",
    "links_shape",
    "check_finite",
    "check_links",
    "CheckedLinks",
    "project_links",
    "unitarity_deviation",
]

#: Largest accepted max(|U^dag U - 1|, |det U - 1|) (entrywise) by default: six orders above float64
#: rounding of a product of a few SU(N) matrices, far below what changes an observable's leading digits.
UNITARITY_TOL = 1e-8

#: Matrices per call of the jitted deviation kernel (the last block is padded with identities).
BLOCK = 1 << 14

#: Bytes of links read at once (time slabs; np.memmap inputs are read slab by slab).
_SLAB_BYTES = 1 << 26

_SHOW = 4  # sites named in a message


def links_shape(links, name: str = "links"):
    """The array of ``links`` (np.memmap kept) after the shape (L1, L2, L3, L4, 4, N, N) and complex dtype checks."""
    u = links if isinstance(links, np.memmap) else np.asarray(links)
    if u.ndim != 7 or u.shape[4] != 4 or u.shape[5] != u.shape[6]:
        raise ValueError(f"{name} must have shape (L1, L2, L3, L4, 4, N, N); found {u.shape}")
    if not np.iscomplexobj(u):
        raise TypeError(f"{name} must be complex; found dtype {u.dtype}")
    if u.size == 0:
        raise ValueError(f"{name} must not be empty; found shape {u.shape}")
    # a zero-stride view can name 10^16 sites without holding them: refuse before reading any
    affordable(name, 16.0 * u.size, f"a complex128 copy of {u.size // (4 * u.shape[-1] ** 2)} sites' links")
    return u


def _det(u):
    """det of (M, N, N): explicit for N = 2, 3, LU otherwise."""
    n = u.shape[-1]
    if n == 1:
        return u[:, 0, 0]
    if n == 2:
        return u[:, 0, 0] * u[:, 1, 1] - u[:, 0, 1] * u[:, 1, 0]
    if n == 3:
        r0, r1, r2 = u[:, 0], u[:, 1], u[:, 2]
        return (
            r0[:, 0] * (r1[:, 1] * r2[:, 2] - r1[:, 2] * r2[:, 1])
            - r0[:, 1] * (r1[:, 0] * r2[:, 2] - r1[:, 2] * r2[:, 0])
            + r0[:, 2] * (r1[:, 0] * r2[:, 1] - r1[:, 1] * r2[:, 0])
        )
    return jnp.linalg.det(u)


@jax.jit
def _block_deviation(u):
    """Per block of (BLOCK, N, N): (max |U^dag U - 1|, its index, max |det U - 1|, its index)."""
    n = u.shape[-1]
    gram = jnp.sum(jnp.conj(u)[:, :, :, None] * u[:, :, None, :], axis=1)
    e = jnp.max(jnp.abs(gram - jnp.eye(n)), axis=(1, 2))
    d = jnp.abs(_det(u) - 1.0)
    return jnp.max(e), jnp.argmax(e), jnp.max(d), jnp.argmax(d)


def _slabs(u):
    """Yield (t0, slab) with slab = u[:, :, :, t0:t1] as a numpy array (bounded memory for memmaps)."""
    l4 = u.shape[3]
    per_t = max(1, u.nbytes // max(1, l4))  # without indexing: a memmap is read only slab by slab
    step = max(1, min(l4, _SLAB_BYTES // per_t))
    for t0 in range(0, l4, step):
        yield t0, np.asarray(u[:, :, :, t0 : t0 + step])


def _site(shape, t0, flat_index) -> tuple:
    """((n1, n2, n3, n4), mu) of the matrix ``flat_index`` of a slab starting at time t0."""
    x, y, z, t, mu = (int(v) for v in np.unravel_index(int(flat_index), shape))
    return (x, y, z, t + t0), mu


def _finite_error(name, u, bad_count, bad_links, first) -> ValueError:
    where = ", ".join(f"site {s} direction mu={mu}" for s, mu in first)
    more = "" if bad_links <= len(first) else f" (first {len(first)} shown)"
    return ValueError(
        f"{name} must be finite; found {bad_count} NaN or inf entr{'y' if bad_count == 1 else 'ies'} in "
        f"{bad_links} of {int(np.prod(u.shape[:5]))} links of a {u.shape} array, at {where}{more}; "
        "the data are damaged (a corrupt file or a computation that overflowed)"
    )


def unitarity_deviation(links, name: str = "links") -> tuple[float, tuple, float, tuple]:
    """(max |U^dag U - 1|, its (site, mu), max |det U - 1|, its (site, mu)) over finite links (L1..L4, 4, N, N)."""
    u = links_shape(links, name)
    n = u.shape[-1]
    e_max, e_at, d_max, d_at = -1.0, ((0, 0, 0, 0), 0), -1.0, ((0, 0, 0, 0), 0)
    for t0, slab in _slabs(u):
        flat = slab.reshape(-1, n, n).astype(np.complex128, copy=False)
        for i in range(0, flat.shape[0], BLOCK):
            blk = flat[i : i + BLOCK]
            m = blk.shape[0]
            if m < BLOCK:
                blk = np.concatenate([blk, np.broadcast_to(np.eye(n, dtype=np.complex128), (BLOCK - m, n, n))])
            e, ie, d, idd = (np.asarray(v) for v in _block_deviation(jnp.asarray(blk)))
            if e > e_max:
                e_max, e_at = float(e), _site(slab.shape[:5], t0, i + int(ie))
            if d > d_max:
                d_max, d_at = float(d), _site(slab.shape[:5], t0, i + int(idd))
    return e_max, e_at, d_max, d_at


def project_links(links) -> np.ndarray:
    """The nearest SU(N) links: polar factor of the SVD, det fixed by a central phase (module docstring).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex, finite.
    Returns:
      (L1, L2, L3, L4, 4, N, N) complex128 special unitary matrices.
    Raises:
      ValueError / TypeError: wrong shape or dtype, non-finite entries, or singular links (no nearest SU(N)).
    """
    u = np.asarray(_finite(links_shape(links), "links"), dtype=np.complex128)
    n = u.shape[-1]
    x, s, vh = np.linalg.svd(u)
    if float(np.min(s)) <= 1e-12 * max(float(np.max(s)), 1e-300):
        raise ValueError(
            f"links must be invertible to be projected onto SU({n}); found a singular value {np.min(s):.3e}"
        )
    w = x @ vh
    det = np.linalg.det(w)
    return w * (det ** (-1.0 / n))[..., None, None]


def _finite(u, name):
    """u itself, or the ValueError counting and locating non-finite entries."""
    count, links, first = 0, 0, []
    for t0, slab in _slabs(u):
        fin = np.isfinite(slab)
        if fin.all():
            continue
        bad = ~fin.all(axis=(5, 6))
        count += int(np.sum(~fin))
        links += int(np.sum(bad))
        for idx in np.argwhere(bad)[: _SHOW - len(first)]:
            first.append(((int(idx[0]), int(idx[1]), int(idx[2]), int(idx[3]) + t0), int(idx[4])))
    if count:
        raise _finite_error(name, u, count, links, first)
    return u


def check_finite(links, *, name: str = "links"):
    """Links after the shape, dtype and finiteness checks only (no unitarity test): for writers of damaged data.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex (numpy array or np.memmap, returned as given).
      name: the argument's name in messages.
    Raises:
      ValueError: wrong shape, empty, too large for memory, NaN or inf entries (counted and located);
        TypeError: a non-complex dtype.
    """
    return _finite(links_shape(links, name), name)


class CheckedLinks:
    """Links that passed `check_links` with the default tolerance, held (not an array) for the next package function.

    A function that asks several observables of the same links (the fit of link arrays) checks them once
    and hands them on in this holder; `check_links` returns the held array without checking again.  Never
    returned to users; the array is the caller's, unchanged.
    """

    __slots__ = ("array",)

    def __init__(self, array):
        self.array = array


def check_links(links, *, name: str = "links", tol: float | None = None, project: bool = False):
    """Links after the shape, dtype, finiteness and special-unitarity checks (module docstring).

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex (numpy array or np.memmap, returned as given), or a
        `CheckedLinks` holder (its array returned without a second check unless ``tol`` or ``project`` is given).
      name: the argument's name in messages.
      tol: largest accepted max(|U^dag U - 1|, |det U - 1|); default `UNITARITY_TOL`.
      project: project onto SU(N) (`project_links`) instead of refusing links beyond ``tol``.
    Returns:
      the links (a new complex128 array when projected).
    Raises:
      ValueError: wrong shape, empty, NaN or inf entries (counted and located), links beyond ``tol``
        (naming the worst link and value); TypeError: a non-complex dtype.
    """
    if isinstance(links, CheckedLinks):
        if tol is None and not project:
            return links.array
        links = links.array
    u = _finite(links_shape(links, name), name)
    tol = UNITARITY_TOL if tol is None else float(tol)
    if project:
        return project_links(u)
    e, where_e, d, where_d = unitarity_deviation(u, name)
    if e > tol or d > tol:
        n = u.shape[-1]
        what = (
            f"max |U^dag U - 1| = {e:.3e} at site {where_e[0]} direction mu={where_e[1]}"
            if e > tol
            else f"max |det U - 1| = {d:.3e} at site {where_d[0]} direction mu={where_d[1]}"
        )
        raise ValueError(
            f"{name} must be SU({n}) matrices within {tol:.0e}; found {what} "
            f"(max |U^dag U - 1| = {e:.3e}, max |det U - 1| = {d:.3e} over the lattice); scaled or damaged "
            "links give meaningless observables; if only rounding is off, project them onto SU(N) with "
            "instantonkit.project_links(links) (or check_links(..., project=True))"
        )
    return u
