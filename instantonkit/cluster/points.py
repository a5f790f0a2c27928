"""Point-set and grid evaluations in chunks (densities by `instantonkit.engine.fields.evaluate`)."""

from __future__ import annotations

import math
import os

import numpy as np

from ..core import _validate as _v
from ..engine.fields import as_field, as_points, output_shape
from ..engine.fields import evaluate as _evaluate
from ..lattice.starts import resolve_origin
from ._optional import require
from .fingerprint import describe, domain_probe, points_fingerprint, probe
from .geometry import Job, check_chunks, default_chunks, region
from .schedule import lazy, run
from .store import finish_store, store_path
from .tasks import GridChunk, PointChunk

__all__ = ["evaluate", "evaluate_grid", "QUANTITIES"]

#: The quantities a chunked evaluation can compute (those of `instantonkit.engine.fields.evaluate`).
QUANTITIES = ("potential", "field_strength", "action_density", "charge_density", "self_duality_residual")


def check_quantity(quantity):
    if quantity not in QUANTITIES:
        raise ValueError(f"quantity must be one of {QUANTITIES}; found {quantity!r}")


def value_bytes(trail, dtype) -> int:
    return int(np.prod(trail, dtype=np.int64)) * np.dtype(dtype).itemsize


def absolute_zarr(arr):
    """The Zarr array reopened by its absolute path when it lives in a local store opened by a relative
    one: a worker started in another directory would otherwise read missing chunks as fill values."""
    zarr = require("zarr")
    root = getattr(getattr(arr, "store", None), "root", None)
    if root is not None:
        full = os.path.abspath(os.fspath(root))
        if not os.path.isdir(full):
            raise ValueError(
                f"the Zarr points' store {os.fspath(root)!r} is not found from this directory; open them by an absolute path"
            )
        arr = zarr.open_array(full, path=arr.path, mode="r")
    done, total = arr.nchunks_initialized, arr.nchunks
    if done < total:
        raise ValueError(
            f"the Zarr points have {done} of {total} chunks written; the missing ones would read as fill values"
        )
    return arr


def evaluate(
    field,
    points,
    quantity: str,
    *,
    method: str = "auto",
    chunks=None,
    store=None,
    client=None,
    overwrite=False,
    progress=None,
    n_workers=None,
):
    """``quantity`` of ``field`` on a large point array (..., 4) in chunks of its leading axes.

    points: numpy array, Zarr array or dask array of shape (..., 4) float.  quantity and method as in
    `instantonkit.engine.fields.evaluate`.  chunks: one size per leading axis (default about 32 MiB
    of result).  store: Zarr directory to write (numpy or Zarr points; resumable) -> ``zarr.Array``
    (..., *trailing); None -> a dask array.  Values equal ``fields.evaluate`` to rounding (module notes).  A resumed
    store must have the same points: numpy points are hashed whole, Zarr points by location and ends.

    Args:
      field: a field or a callable A(x).
      points: (..., 4) float numpy, Zarr or dask array.
      quantity: 'potential', 'field_strength', 'action_density', 'charge_density' or 'self_duality_residual'.
      method: as in `instantonkit.engine.fields.evaluate`.
      chunks: one size per leading axis of the points (default about CHUNK_BYTES of result).
      store: Zarr directory (numpy or Zarr points) or None for a dask array.
      client, n_workers, overwrite, progress: as in `instantonkit.cluster.lattice_links`.
    Returns:
      (..., *trailing) values (e.g. (...,) for densities, (..., 4, N, N) for the potential): a
      read-only ``zarr.Array`` (store given) or a dask array.
    Raises:
      ValueError / TypeError: bad points, quantity, chunks or store; a store made from other points.
      ImportError: without the optional extra ``distributed``.
    """
    check_quantity(quantity)
    field = as_field(field)
    if not hasattr(points, "shape") or len(points.shape) < 1 or points.shape[-1] != 4:
        raise ValueError(f"points must be an array of shape (..., 4); found shape {getattr(points, 'shape', None)}")
    lead = tuple(int(v) for v in points.shape[:-1])
    if math.prod(lead) == 0:
        raise ValueError(f"nothing to evaluate: points has shape {tuple(points.shape)}")
    trail, dtype = output_shape(field, quantity, method)
    is_dask = type(points).__module__.startswith("dask")
    if not is_dask:
        if not hasattr(points, "__getitem__"):
            raise TypeError(f"points must be a numpy, Zarr or dask array; found {type(points).__name__}")
        if type(points).__module__.startswith("zarr"):
            pts = absolute_zarr(points)
        else:  # a copy for the lazy array, which must not see later changes of the caller's array
            pts = np.array(points) if store is None else np.asarray(points)
            as_points(pts)  # dtype / finiteness checks with their messages
        chunks = (
            default_chunks(lead, value_bytes(trail, dtype))
            if chunks is None
            else check_chunks(chunks, lead, "the points")
        )
        if store is None:  # lazily: dask slices the points, each task gets its own block
            points, is_dask = require("dask.array").from_array(pts, chunks=chunks + (4,)), True
    if is_dask:
        if store is not None:
            raise ValueError("store= needs numpy or Zarr points (write the dask points with .to_zarr first)")
        pts = (
            points.rechunk(points.chunks[:-1] + ((4,),))
            if chunks is None
            else points.rechunk(check_chunks(chunks, lead, "the points") + (4,))
        )
        fn = lambda blk: _evaluate(field, blk, quantity, method=method)  # noqa: E731
        new = len(trail)
        return require("dask.array").map_blocks(
            fn,
            pts,
            dtype=dtype,
            drop_axis=pts.ndim - 1,
            new_axis=list(range(pts.ndim - 1, pts.ndim - 1 + new)) or None,
            chunks=pts.chunks[:-1] + tuple((s,) for s in trail),
        )
    if isinstance(pts, np.ndarray):  # each task gets its own block, not the whole array

        def tasks(idx):
            return PointChunk(field, quantity, method, pts[region(idx, lead, chunks)], sliced=True)
    else:
        shared = PointChunk(field, quantity, method, pts)

        def tasks(idx):
            return shared

    params = {
        "field": describe(field),
        "field_probe": probe(field),
        "quantity": quantity,
        "method": method,
        "points_shape": list(lead) + [4],
        "points": points_fingerprint(pts),
    }
    job = Job("evaluate", "values", lead + tuple(trail), len(lead), chunks, np.dtype(dtype).name, params, tasks)
    return run_values(job, store, client, overwrite, progress, n_workers)


def evaluate_grid(
    field,
    shape,
    spacing,
    quantity: str,
    *,
    origin=None,
    method: str = "auto",
    chunks=None,
    store=None,
    client=None,
    overwrite=False,
    progress=None,
    n_workers=None,
):
    """``quantity`` of ``field`` on the sites origin + a n of an L1 x L2 x L3 x L4 grid, never holding all points.

    shape, spacing, origin: as in `instantonkit.lattice.starts.lattice_links` (default origin puts the
    field's centre in the middle of the central hypercube; spacing one a or four (a1, a2, a3, a4), sites
    at origin_mu + a_mu n_mu, e.g. the (a_s, a_s, a_s, a_t) of `instantonkit.lattice.thermal.thermal_spacings`).  Returns a ``zarr.Array`` (store given)
    or a dask array of shape (L1, L2, L3, L4, *trailing); values equal
    ``fields.evaluate(field, lattice.site_points(shape, spacing, origin), quantity)`` to rounding.

    Args:
      field: a field or a callable A(x).
      shape: (L1, L2, L3, L4); spacing: a > 0 or four (a1, a2, a3, a4) > 0; origin: (4,) or None (the default origin).
      quantity, method: as in `evaluate`.
      chunks: (c1, c2, c3, c4) sites per chunk (default about CHUNK_BYTES of result).
      store: Zarr directory or None for a dask array.
      client, n_workers, overwrite, progress: as in `instantonkit.cluster.lattice_links`.
    Returns:
      (L1, L2, L3, L4, *trailing) values: ``zarr.Array`` or dask array.
    Raises:
      ValueError / TypeError: a bad argument (naming it); a store made with other parameters.
      ImportError: without the optional extra ``distributed``.
    """
    check_quantity(quantity)
    field = as_field(field)
    shape = _v.lattice_shape("shape", shape, in_memory=False)
    a = _v.spacing_value("spacing", spacing)  # one float, or four when they differ (as starts keep it)
    org = resolve_origin(field, shape, a, origin)
    trail, dtype = output_shape(field, quantity, method)
    chunks = (
        default_chunks(shape, value_bytes(trail, dtype)) if chunks is None else check_chunks(chunks, shape, "the grid")
    )
    task = GridChunk(field, quantity, method, org, np.asarray(a) if isinstance(a, tuple) else a)
    params = {
        "field": describe(field),
        "field_probe": probe(field),
        "domain_probe": domain_probe(field, org, _v.spacings("spacing", a), shape),
        "quantity": quantity,
        "method": method,
        "shape": list(shape),
        "spacing": list(a) if isinstance(a, tuple) else a,  # as JSON keeps it
        "origin": [float(v) for v in org],
    }
    job = Job(
        "evaluate_grid", "values", shape + tuple(trail), 4, chunks, np.dtype(dtype).name, params, lambda idx: task
    )
    return run_values(job, store, client, overwrite, progress, n_workers)


def run_values(job, store, client, overwrite, progress, n_workers):
    if store is None:
        return lazy(job)
    zarr = require("zarr")
    path = store_path(store)
    group, rows, computed, reused, seconds = run(job, path, client, overwrite, progress, n_workers)
    finish_store(group, None, computed, reused, seconds)
    return zarr.open_array(path, path="values", mode="r")
