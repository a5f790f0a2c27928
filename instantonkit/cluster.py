"""Past one machine: lattice starts, point-set evaluations and ensembles in chunks on Dask, stored in Zarr.

Every chunk is computed by the kernels of the local path (:func:`instantonkit.lattice.block_links`
for links, :func:`instantonkit.fields.evaluate` for densities).  Links are bit-identical to the
single-process start (the compiled batch size is fixed per lattice, :func:`instantonkit.lattice.link_batch`);
densities agree with ``fields.evaluate`` on the same points to rounding (about 1e-15 relative: XLA's
code for the last, padded batch of a call depends on its size, which depends on the chunk).

Stores are Zarr (format 3) directories on a file system every worker sees under the same absolute path.  A store holds the
result array (``links`` or ``values``) and a small array ``chunk_report`` with one row per chunk:
``[done, unitarity before, unitarity after, Magnus steps, refinement difference]``.  A task writes
its chunk (Zarr's local store writes a temporary file and renames it, so a chunk is either all there
or absent) and only then its row, so a row with ``done = 1`` always means a complete chunk.  A store
whose rows are not all done is partial: calling again with the same parameters computes only the
missing chunks; a store made with other parameters is never overwritten unless ``overwrite=True``.
The generation parameters, a fingerprint of the field (its potential at three fixed points) and,
once complete, the quality report are the JSON attribute ``instantonkit`` of the store.

Schedulers: a ``dask.distributed.Client`` the caller passes, ``None`` for a temporary local cluster
(``n_workers`` processes, one thread each), or ``"sync"`` to run the chunks in this process.

Needs the optional extra ``distributed`` (dask[distributed], zarr): ``pip install 'instantonkit[distributed]'``.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
import os
import shutil
import time
import uuid
from pathlib import Path
from typing import Callable

import numpy as np

from . import lattice as _lat
from .fields import as_field, as_points, output_shape
from .fields import evaluate as _evaluate

__all__ = [
    "start_links",
    "evaluate",
    "evaluate_grid",
    "ensemble",
    "Ensemble",
    "StoreStatus",
    "store_status",
    "load_member",
    "member_seed",
    "default_chunks",
]

#: Bytes of result per chunk aimed at by :func:`default_chunks`.
CHUNK_BYTES = 1 << 25
_EXTRA = "pip install 'instantonkit[distributed]'"
_ATTR = "instantonkit"
_REPORT = "chunk_report"
_FORMAT = 1
_QUANTITIES = ("potential", "field_strength", "action_density", "charge_density", "self_duality_residual")


def _require(*modules):
    """Import the optional modules or raise ImportError naming the extra to install."""
    import importlib

    out = []
    for name in modules:
        try:
            out.append(importlib.import_module(name))
        except ImportError as err:
            raise ImportError(f"the chunked backend needs the optional extra 'distributed' ({_EXTRA}); {name!r} is not installed") from err
    return out[0] if len(out) == 1 else out


# -- chunk geometry ------------------------------------------------------------------------------------


def default_chunks(shape, bytes_per_site: int, target: int = CHUNK_BYTES) -> tuple:
    """Chunk shape for an array of ``shape`` sites: the whole array halved along its longest axis
    (the last among equals) until a chunk holds at most ``target`` bytes."""
    c = [int(v) for v in shape]
    while math.prod(c) * bytes_per_site > target and max(c) > 1:
        i = max(range(len(c)), key=lambda j: (c[j], j))
        c[i] = -(-c[i] // 2)
    return tuple(c)


def _check_chunks(chunks, shape, what: str) -> tuple:
    """Validate a chunk shape against the leading ``shape``; ValueError naming the expected length."""
    if isinstance(chunks, (int, np.integer)) and not isinstance(chunks, bool):
        chunks = (int(chunks),) * len(shape)
    try:
        if any(isinstance(v, bool) for v in chunks):
            raise TypeError("booleans are not chunk sizes")
        c = tuple(int(v) for v in chunks)
    except TypeError as err:
        raise TypeError(f"chunks must be {len(shape)} positive integers (one per axis of {what}); found {chunks!r}") from err
    if len(c) != len(shape) or any(v < 1 for v in c) or any(int(v) != v for v in chunks):
        raise ValueError(f"chunks must be {len(shape)} positive integers (one per axis of {what} {tuple(shape)}); found {tuple(chunks)!r}")
    return tuple(min(v, s) for v, s in zip(c, shape))


def _grid(shape, chunks) -> tuple:
    return tuple(-(-s // c) for s, c in zip(shape, chunks))


def _region(index, shape, chunks) -> tuple:
    """The slices of chunk ``index`` over the leading axes."""
    return tuple(slice(i * c, min((i + 1) * c, s)) for i, s, c in zip(index, shape, chunks))


# -- jobs: what one chunk computes -----------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class _LinkChunk:
    """Links of one box of sites of one start: region over (L1, L2, L3, L4) -> (links, stats row)."""

    spec: object

    def __call__(self, region):
        stats: dict = {}
        arr, before, after = self.spec.block([r.start for r in region], [r.stop for r in region], stats)
        row = [before, after, float(stats.get("max_steps", 0)), float(stats.get("refinement_diff", 0.0))]
        return arr, row


@dataclasses.dataclass(frozen=True)
class _MemberChunk:
    """Links of one box of one ensemble member: region over (n, L1, ..., L4), member axis chunk 1."""

    spec: object

    def __call__(self, region):
        arr, row = _LinkChunk(self.spec)(region[1:])
        return arr[None], row


@dataclasses.dataclass(frozen=True)
class _GridChunk:
    """A quantity on the sites origin + a n of one box of a grid."""

    field: object
    quantity: str
    method: str
    origin: np.ndarray
    spacing: float

    def __call__(self, region):
        grids = np.meshgrid(*[np.arange(r.start, r.stop, dtype=np.float64) for r in region], indexing="ij")
        pts = self.origin + self.spacing * np.stack(grids, axis=-1)
        return _evaluate(self.field, pts, self.quantity, method=self.method), [0.0, 0.0, 0.0, 0.0]


@dataclasses.dataclass(frozen=True)
class _PointChunk:
    """A quantity on one block of a point array of shape (..., 4): a Zarr array read at the region
    (cheap to ship to a worker), or, for numpy points, just the block itself (``sliced``)."""

    field: object
    quantity: str
    method: str
    points: object
    sliced: bool = False

    def __call__(self, region):
        pts = self.points if self.sliced else self.points[region]
        return _evaluate(self.field, np.asarray(pts), self.quantity, method=self.method), [0.0, 0.0, 0.0, 0.0]


@dataclasses.dataclass(frozen=True)
class _Job:
    """A chunked array to fill: ``name`` in the store, full ``shape``, chunking of the leading axes,
    trailing axes whole; ``task(index)`` is the picklable callable region -> (block, stats row)."""

    kind: str
    name: str
    shape: tuple
    lead: int
    chunks: tuple
    dtype: str
    params: dict
    tasks: Callable

    @property
    def grid(self):
        return _grid(self.shape[: self.lead], self.chunks)

    @property
    def zchunks(self):
        return self.chunks + tuple(self.shape[self.lead :])


# -- field fingerprints (what a store was made from) -----------------------------------------------


def _describe(obj, depth: int = 0):
    """A JSON description of a field: its type and its dataclass fields, arrays as nested lists."""
    if depth > 32:
        return repr(type(obj).__name__)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        out = {"type": f"{type(obj).__module__}.{type(obj).__qualname__}"}
        for f in dataclasses.fields(obj):
            out[f.name] = _describe(getattr(obj, f.name), depth + 1)
        return out
    if isinstance(obj, (bool, int, float, str)) or obj is None:
        return obj
    if isinstance(obj, (tuple, list)):
        return [_describe(v, depth + 1) for v in obj]
    if callable(obj):
        name = f"{getattr(obj, '__module__', '?')}.{getattr(obj, '__qualname__', type(obj).__name__)}"
        return {"callable": name, "code": _code_fingerprint(obj)}
    try:
        arr = np.asarray(obj)
    except Exception:  # pragma: no cover - exotic leaves
        return repr(type(obj).__name__)
    if arr.dtype.kind in "biuf":
        return arr.astype(np.float64).tolist()
    if arr.dtype.kind == "c":
        return [arr.real.tolist(), arr.imag.tolist()]
    return repr(type(obj).__name__)


def _code_fingerprint(fn, depth: int = 0) -> str | None:
    """sha256 of a Python function's bytecode, constants, names, defaults and closure values (nested
    functions followed), so a rebuilt callable with other captured numbers is told apart; None for
    objects without code (their module globals are not looked at)."""
    import hashlib

    code = getattr(fn, "__code__", None)
    if code is None or depth > 8:
        return None
    h = hashlib.sha256()

    def feed(v):
        if hasattr(v, "co_code"):
            h.update(v.co_code)
            h.update(repr(v.co_names).encode())
            for c in v.co_consts:
                feed(c)
        elif callable(v) and hasattr(v, "__code__"):
            h.update(str(_code_fingerprint(v, depth + 1)).encode())
        elif isinstance(v, (bool, int, float, complex, str, bytes, type(None))):
            h.update(repr(v).encode())
        elif isinstance(v, (tuple, list)):
            for x in v:
                feed(x)
        else:
            try:
                arr = np.asarray(v)
                h.update(arr.tobytes() if arr.dtype.kind in "biufc" else type(v).__qualname__.encode())
            except Exception:
                h.update(type(v).__qualname__.encode())

    feed(code)
    feed(fn.__defaults__ or ())
    for cell in fn.__closure__ or ():
        try:
            feed(cell.cell_contents)
        except ValueError:  # an empty cell
            h.update(b"<empty>")
    return h.hexdigest()


def _domain_probe(field, origin, spacing, shape) -> list | None:
    """The potential at three points inside the region of a lattice or grid (between sites), so a
    field that changed only there is told apart from the stored one."""
    t = np.array([0.21, 0.5, 0.83])[:, None]
    pts = np.asarray(origin) + spacing * ((np.asarray(shape) - 1) * t + 0.137)
    return _probe(field, pts)


_PROBES = np.array([[0.3127, -0.4711, 0.5903, 0.7321], [-1.1731, 0.2237, -0.6183, 0.4142], [2.2361, 1.7321, -1.4142, -0.5772]])


def _probe(field, points=None) -> list | None:
    """The potential at three fixed points (or ``points``; re, im parts), or None where it is not finite there."""
    from .fields import potential

    try:
        a = potential(field, _PROBES if points is None else points)
    except (ValueError, TypeError):
        return None
    return [a.real.ravel().tolist(), a.imag.ravel().tolist()]


def _same_params(stored: dict, asked: dict) -> list:
    """Names of the parameters that differ (probes compared to 1e-10 relative, the rest exactly)."""
    diff = []
    for key in sorted(set(stored) | set(asked)):
        a, b = stored.get(key), asked.get(key)
        if key.endswith("_probe") and a is not None and b is not None:
            a, b = np.asarray(a), np.asarray(b)
            if a.shape != b.shape or not np.allclose(a, b, rtol=1e-10, atol=1e-12):
                diff.append(key)
        elif a != b:
            diff.append(key)
    return diff


# -- stores ---------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class StoreStatus:
    """What a store holds: kind ('lattice_links', 'evaluate', 'evaluate_grid', 'ensemble'), the
    generation parameters, chunks done / total, whether it is complete, and the report if complete."""

    path: str
    kind: str
    params: dict
    chunks_done: int
    chunks_total: int
    complete: bool
    report: dict | None

    def __str__(self):
        state = "complete" if self.complete else f"partial ({self.chunks_done} of {self.chunks_total} chunks)"
        return f"instantonkit store, {self.kind}: {state}"


def _meta(group) -> dict | None:
    meta = dict(group.attrs).get(_ATTR)
    return meta if isinstance(meta, dict) and meta.get("format") == _FORMAT else None


def store_status(path) -> StoreStatus:
    """Read a store's state without computing anything; ValueError if ``path`` is not an instantonkit store."""
    zarr = _require("zarr")
    path = os.fspath(path)
    try:
        group = zarr.open_group(path, mode="r")
    except Exception as err:
        raise ValueError(f"{path!r} is not a Zarr store written by instantonkit ({type(err).__name__}: {err})") from err
    meta = _meta(group)
    if meta is None:
        raise ValueError(f"{path!r} is a Zarr store without instantonkit metadata (attribute {_ATTR!r} format {_FORMAT})")
    rows = np.asarray(group[_REPORT][...])
    done = int(np.sum(rows[..., 0] == 1.0))
    total = int(np.prod(rows.shape[:-1]))
    return StoreStatus(path, meta["kind"], meta["params"], done, total, done == total, meta.get("report"))


def _is_empty_dir(p: Path) -> bool:
    return p.is_dir() and not any(p.iterdir())


def _prepare(job: _Job, path: str, overwrite: bool):
    """Open the store for ``job``: create it, resume it (same parameters), or refuse; returns (group, rows)."""
    zarr = _require("zarr")
    p = Path(path)
    if p.exists() and not _is_empty_dir(p):
        try:
            group = zarr.open_group(path, mode="r+")
            meta = _meta(group)
        except Exception:
            group, meta = None, None
        if meta is None:
            raise ValueError(f"{path!r} exists and is not an instantonkit store; refusing to touch it (choose another path)")
        if meta["kind"] != job.kind or _same_params(meta["params"], job.params):
            if not overwrite:
                if meta["kind"] != job.kind:
                    raise ValueError(
                        f"the store {path!r} holds a {meta['kind']!r} result, not {job.kind!r}; "
                        "pass overwrite=True to replace it, or choose another path"
                    )
                raise ValueError(
                    f"the store {path!r} was made with other parameters (differs in: {', '.join(_same_params(meta['params'], job.params))}); "
                    "pass overwrite=True to replace it, or choose another path"
                )
        elif not overwrite:
            rows = group[_REPORT]
            if tuple(rows.shape[:-1]) != job.grid or meta.get("chunks") != list(job.chunks):
                raise ValueError(
                    f"the store {path!r} holds this {job.kind} result in chunks {tuple(meta.get('chunks', ()))}; "
                    f"asked for chunks {job.chunks} (resume with the stored chunks, or pass overwrite=True)"
                )
            return group, rows
        shutil.rmtree(p)
    group = zarr.open_group(path, mode="w")
    group.create_array(
        job.name, shape=job.shape, chunks=job.zchunks, dtype=job.dtype, fill_value=0, compressors=None,
        config={"write_empty_chunks": True},
    )
    rows = group.create_array(
        _REPORT, shape=job.grid + (5,), chunks=(1,) * len(job.grid) + (5,), dtype="f8", fill_value=0.0,
        config={"write_empty_chunks": True},
    )
    group.attrs[_ATTR] = {
        "format": _FORMAT, "kind": job.kind, "name": job.name, "params": job.params, "chunks": list(job.chunks),
        "complete": False, "store_id": uuid.uuid4().hex,
    }
    return group, rows


class StaleTaskError(RuntimeError):
    """A chunk task of an earlier run found its store replaced (``overwrite=True``) and wrote nothing."""


def _check_store_id(path: str, store_id: str) -> None:
    import zarr

    try:
        now = zarr.open_group(path, mode="r").attrs[_ATTR].get("store_id")
    except Exception:  # the store is gone or being replaced
        now = None
    if now != store_id:
        raise StaleTaskError(f"the store {path!r} was replaced since this task was submitted; its chunk was not written")


def _write_chunk(path: str, name: str, task, index: tuple, shape: tuple, chunks: tuple, store_id: str):
    """Worker task: compute chunk ``index``, write it, then mark it done; returns (index, stats row).

    The store's identity is checked before each write, so a task left running by an interrupted run
    cannot write into a store that has since been replaced."""
    import zarr

    arr, row = task(_region(index, shape, chunks))
    _check_store_id(path, store_id)
    zarr.open_array(path, path=name, mode="r+")[_region(index, shape, chunks)] = arr
    _check_store_id(path, store_id)
    zarr.open_array(path, path=_REPORT, mode="r+")[tuple(index)] = np.asarray([1.0] + list(row))
    return tuple(index), row


@contextlib.contextmanager
def _scheduler(client, n_workers):
    """Yield the client to run on: the caller's, a temporary local cluster, or None for 'sync'."""
    if isinstance(client, str):
        if client != "sync":
            raise ValueError(f"client must be a dask.distributed.Client, None or 'sync'; found {client!r}")
        yield None
        return
    if client is not None:
        if not (hasattr(client, "map") and hasattr(client, "submit")):
            raise TypeError(f"client must be a dask.distributed.Client, None or 'sync'; found {type(client).__name__}")
        yield client
        return
    distributed = _require("distributed")
    if n_workers is not None and (isinstance(n_workers, bool) or not isinstance(n_workers, (int, np.integer))):
        raise TypeError(f"n_workers must be an integer >= 1 or None; found {n_workers!r}")
    n = int(os.cpu_count() or 1) if n_workers is None else int(n_workers)
    if n < 1:
        raise ValueError(f"n_workers must be >= 1; found {n_workers!r}")
    with distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        with distributed.Client(cluster) as c:
            yield c


def _run(job: _Job, path: str, client, overwrite: bool, progress, n_workers):
    """Fill the store of ``job`` chunk by chunk; returns (group, rows ndarray, computed, reused, seconds)."""
    t0 = time.perf_counter()
    group, rows = _prepare(job, path, overwrite)
    flags = np.asarray(rows[...])[..., 0] == 1.0
    todo = [idx for idx in np.ndindex(*job.grid) if not flags[idx]]
    total, reused = int(np.prod(job.grid)), int(flags.sum())
    done = reused
    if todo:
        with _scheduler(client, n_workers) as c:
            store_id = group.attrs[_ATTR].get("store_id")
            args = [(path, job.name, job.tasks(idx), idx, job.shape[: job.lead], job.chunks, store_id) for idx in todo]
            if c is None:
                for a in args:
                    _write_chunk(*a)
                    done += 1
                    if progress is not None:
                        progress(done, total)
            else:
                from distributed import as_completed

                token = f"{os.getpid()}-{time.time_ns()}"
                pending = {
                    c.submit(_write_chunk, *a, key=f"instantonkit-chunk-{token}-{'-'.join(map(str, a[3]))}", pure=False)
                    for a in args
                }
                try:
                    for fut in as_completed(list(pending)):
                        fut.result()
                        pending.discard(fut)
                        fut.release()  # workers drop the finished task's record: memory stays flat over many chunks
                        done += 1
                        if progress is not None:
                            progress(done, total)
                finally:
                    for fut in pending:
                        fut.cancel()
    rows_now = np.asarray(rows[...])
    missing = int(np.sum(rows_now[..., 0] != 1.0))
    if missing:  # pragma: no cover - a chunk task returned without its row
        raise RuntimeError(f"{missing} of {total} chunks of {path!r} are not marked done after the run")
    return group, rows_now, len(todo), reused, time.perf_counter() - t0


def _finish_store(group, report: dict | None, computed: int, reused: int, seconds: float):
    meta = dict(group.attrs[_ATTR])
    old = meta.get("report")
    if computed == 0 and isinstance(old, dict) and isinstance(report, dict):  # nothing new: keep what was measured
        report = {**report, **{k: v for k, v in old.items() if report.get(k) is None or k == "seconds"}}
    runs = list(meta.get("runs", [])) + [{"chunks_computed": computed, "chunks_reused": reused, "seconds": seconds}]
    meta.update(complete=True, report=report, runs=runs)
    group.attrs[_ATTR] = meta


def _lazy(job: _Job):
    """A dask array whose blocks are the chunks of ``job`` (nothing computed until asked)."""
    da = _require("dask.array")
    shape_lead = job.shape[: job.lead]

    def block(block_id=None):
        idx = tuple(block_id[: job.lead])
        return job.tasks(idx)(_region(idx, shape_lead, job.chunks))[0]

    chunks = tuple(
        tuple(min(c, s - i * c) for i in range(g)) for s, c, g in zip(shape_lead, job.chunks, job.grid)
    ) + tuple((s,) for s in job.shape[job.lead :])
    return da.map_blocks(block, dtype=np.dtype(job.dtype), chunks=chunks, meta=np.empty((0,) * len(job.shape), dtype=job.dtype))


def _store_path(store) -> str:
    if not isinstance(store, (str, os.PathLike)):
        raise TypeError(f"store must be a path (str or os.PathLike) of a Zarr directory; found {type(store).__name__}")
    return os.path.abspath(os.fspath(store))  # workers may start elsewhere: they get the absolute path


# -- lattice starts -------------------------------------------------------------------------------


def _spec_params(spec) -> dict:
    return {
        "field": _describe(spec.field),
        "field_probe": _probe(spec.field),
        "domain_probe": _domain_probe(spec.field, spec.origin, spec.spacing, spec.shape),
        "shape": list(spec.shape),
        "spacing": spec.spacing,
        "origin": [float(v) for v in spec.origin],
        "group": spec.group,
        "embedding": list(spec.embedding),
        "boundary": spec.boundary,
        "rtol": spec.rtol,
        "method": spec.method,
    }


def _link_report(spec, rows, seconds, links, boundary: bool):
    """LinkReport of a finished chunked start from its chunk rows; with ``boundary`` the periodic
    boundary figures too (read from the faces in this process, as the local path does when asked)."""
    stats = {
        "method": "magnus" if float(np.max(rows[..., 3])) > 0 else "closed",
        "max_steps": int(np.max(rows[..., 3])),
        "refinement_diff": float(np.max(rows[..., 4])),
    }
    mismatch, action_err = spec.boundary_figures(links) if boundary else (None, None)
    return spec.report(stats, float(np.max(rows[..., 1])), float(np.max(rows[..., 2])), seconds, mismatch, action_err)


def start_links(spec, *, chunks=None, store=None, client=None, overwrite=False, progress=None, return_report=False, n_workers=None):
    """A lattice start (:class:`instantonkit.lattice.StartSpec`) in chunks: Zarr array or lazy dask array.

    chunks: (c1, c2, c3, c4) sites per chunk (an int for all four; default :func:`default_chunks`,
    about 32 MiB).  store: Zarr directory to write (resumable, see the module notes) -> returns the
    read-only ``zarr.Array`` (L1, L2, L3, L4, 4, N, N) complex128; None -> a dask array of that shape
    and chunking, computed when asked.  client / n_workers: see the module notes.  progress(done,
    total) after each chunk.  With ``return_report=True`` (store needed) returns ``(links, LinkReport)``
    with the periodic boundary figures, as the local path does; the report (without them unless asked)
    is also the store's attribute.  Usually called as ``lattice_links(..., backend="dask")``.
    """
    site_bytes = 4 * spec.n_out * spec.n_out * 16
    chunks = default_chunks(spec.shape, site_bytes) if chunks is None else _check_chunks(chunks, spec.shape, "the lattice")
    task = _LinkChunk(spec)
    job = _Job("lattice_links", "links", spec.links_shape, 4, chunks, "complex128", _spec_params(spec), lambda idx: task)
    if store is None:
        if return_report:
            raise ValueError("return_report=True needs store= (the report is made from the written chunks)")
        return _lazy(job)
    zarr = _require("zarr")
    path = _store_path(store)
    group, rows, computed, reused, seconds = _run(job, path, client, overwrite, progress, n_workers)
    links = zarr.open_array(path, path="links", mode="r")
    report = _link_report(spec, rows, seconds, links, return_report)
    _finish_store(group, report.as_metadata(), computed, reused, seconds)
    return (links, report) if return_report else links


# -- point sets -------------------------------------------------------------------------------------


def _check_quantity(quantity):
    if quantity not in _QUANTITIES:
        raise ValueError(f"quantity must be one of {_QUANTITIES}; found {quantity!r}")


def _value_bytes(trail, dtype) -> int:
    return int(np.prod(trail, dtype=np.int64)) * np.dtype(dtype).itemsize


def _absolute_zarr(arr):
    """The Zarr array reopened by its absolute path when it lives in a local store opened by a relative
    one: a worker started in another directory would otherwise read missing chunks as fill values."""
    zarr = _require("zarr")
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
        raise ValueError(f"the Zarr points have {done} of {total} chunks written; the missing ones would read as fill values")
    return arr


def _points_fingerprint(pts) -> dict:
    """What a resumed point evaluation must match: the sha256 of numpy points; for Zarr points their
    location, shape and the sha256 of their first and last rows (reading every point is not worth it)."""
    import hashlib

    if isinstance(pts, np.ndarray):
        return {"sha256": hashlib.sha256(np.ascontiguousarray(pts, dtype=np.float64).tobytes()).hexdigest()}
    flat_first = np.asarray(pts[(0,) * (len(pts.shape) - 1)], dtype=np.float64)
    flat_last = np.asarray(pts[tuple(n - 1 for n in pts.shape[:-1])], dtype=np.float64)
    ends = hashlib.sha256(flat_first.tobytes() + flat_last.tobytes()).hexdigest()
    return {"zarr": f"{getattr(pts, 'store', '')}/{getattr(pts, 'path', '')}", "ends_sha256": ends}


def evaluate(field, points, quantity: str, *, method: str = "auto", chunks=None, store=None, client=None, overwrite=False, progress=None, n_workers=None):
    """``quantity`` of ``field`` on a large point array (..., 4) in chunks of its leading axes.

    points: numpy array, Zarr array or dask array of shape (..., 4) float.  quantity and method as in
    :func:`instantonkit.fields.evaluate`.  chunks: one size per leading axis (default about 32 MiB
    of result).  store: Zarr directory to write (numpy or Zarr points; resumable) -> ``zarr.Array``
    (..., *trailing); None -> a dask array.  Values equal ``fields.evaluate`` to rounding (module notes).  A resumed
    store must have the same points: numpy points are hashed whole, Zarr points by location and ends.
    """
    _check_quantity(quantity)
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
            pts = _absolute_zarr(points)
        else:  # a copy for the lazy array, which must not see later changes of the caller's array
            pts = np.array(points) if store is None else np.asarray(points)
            as_points(pts)  # dtype / finiteness checks with their messages
        chunks = default_chunks(lead, _value_bytes(trail, dtype)) if chunks is None else _check_chunks(chunks, lead, "the points")
        if store is None:  # lazily: dask slices the points, each task gets its own block
            points, is_dask = _require("dask.array").from_array(pts, chunks=chunks + (4,)), True
    if is_dask:
        if store is not None:
            raise ValueError("store= needs numpy or Zarr points (write the dask points with .to_zarr first)")
        pts = points.rechunk(points.chunks[:-1] + ((4,),)) if chunks is None else points.rechunk(_check_chunks(chunks, lead, "the points") + (4,))
        fn = lambda blk: _evaluate(field, blk, quantity, method=method)  # noqa: E731
        new = len(trail)
        return _require("dask.array").map_blocks(
            fn, pts, dtype=dtype, drop_axis=pts.ndim - 1, new_axis=list(range(pts.ndim - 1, pts.ndim - 1 + new)) or None,
            chunks=pts.chunks[:-1] + tuple((s,) for s in trail),
        )
    if isinstance(pts, np.ndarray):  # each task gets its own block, not the whole array

        def tasks(idx):
            return _PointChunk(field, quantity, method, pts[_region(idx, lead, chunks)], sliced=True)
    else:
        shared = _PointChunk(field, quantity, method, pts)

        def tasks(idx):
            return shared

    params = {
        "field": _describe(field), "field_probe": _probe(field), "quantity": quantity, "method": method,
        "points_shape": list(lead) + [4], "points": _points_fingerprint(pts),
    }
    job = _Job("evaluate", "values", lead + tuple(trail), len(lead), chunks, np.dtype(dtype).name, params, tasks)
    return _run_values(job, store, client, overwrite, progress, n_workers)


def evaluate_grid(field, shape, spacing, quantity: str, *, origin=None, method: str = "auto", chunks=None, store=None, client=None, overwrite=False, progress=None, n_workers=None):
    """``quantity`` of ``field`` on the sites origin + a n of an L1 x L2 x L3 x L4 grid, never holding all points.

    shape, spacing, origin: as in :func:`instantonkit.lattice.lattice_links` (default origin puts the
    field's centre in the middle of the central hypercube).  Returns a ``zarr.Array`` (store given)
    or a dask array of shape (L1, L2, L3, L4, *trailing); values equal
    ``fields.evaluate(field, lattice.site_points(shape, spacing, origin), quantity)`` to rounding.
    """
    _check_quantity(quantity)
    field = as_field(field)
    shape = _lat._check_shape(shape)
    a = _lat._check_spacing(spacing)
    org = _lat.resolve_origin(field, shape, a, origin)
    trail, dtype = output_shape(field, quantity, method)
    chunks = default_chunks(shape, _value_bytes(trail, dtype)) if chunks is None else _check_chunks(chunks, shape, "the grid")
    task = _GridChunk(field, quantity, method, org, a)
    params = {
        "field": _describe(field), "field_probe": _probe(field), "domain_probe": _domain_probe(field, org, a, shape),
        "quantity": quantity, "method": method, "shape": list(shape), "spacing": a, "origin": [float(v) for v in org],
    }
    job = _Job("evaluate_grid", "values", shape + tuple(trail), 4, chunks, np.dtype(dtype).name, params, lambda idx: task)
    return _run_values(job, store, client, overwrite, progress, n_workers)


def _run_values(job, store, client, overwrite, progress, n_workers):
    if store is None:
        return _lazy(job)
    zarr = _require("zarr")
    path = _store_path(store)
    group, rows, computed, reused, seconds = _run(job, path, client, overwrite, progress, n_workers)
    _finish_store(group, None, computed, reused, seconds)
    return zarr.open_array(path, path="values", mode="r")


# -- ensembles ------------------------------------------------------------------------------------


def member_seed(seed: int, i: int) -> np.random.SeedSequence:
    """The seed of ensemble member ``i``: SeedSequence(seed, spawn_key=(i,)), the i-th child of
    SeedSequence(seed).spawn(n) for any n > i, so a member does not depend on the ensemble size."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer; found {seed!r}")
    return np.random.SeedSequence(int(seed), spawn_key=(int(i),))


@dataclasses.dataclass(frozen=True)
class Ensemble:
    """Random multi-instanton starts: ``links`` (n, L1, L2, L3, L4, 4, N, N) (Zarr or dask array),
    ``members`` the ADHM data of each, ``seeds`` the per-member seeds (see :func:`member_seed`),
    ``reports`` one :class:`instantonkit.lattice.LinkReport` per member (None without a store)."""

    links: object
    members: tuple
    seeds: tuple
    reports: tuple | None

    def __len__(self):
        return len(self.members)


def _ensemble_defaults(shape, a, spread, size_range):
    extent = min(shape) * a
    spread = extent / 10.0 if spread is None else float(spread)
    size_range = (extent / 16.0, extent / 8.0) if size_range is None else tuple(float(v) for v in size_range)
    if not (np.isfinite(spread) and spread >= 0):
        raise ValueError(f"spread must be finite and >= 0; found {spread!r}")
    if len(size_range) != 2 or not (0 < size_range[0] <= size_range[1] < np.inf):
        raise ValueError(f"size_range must be (low, high) with 0 < low <= high; found {size_range!r}")
    return spread, size_range


def ensemble(
    n: int,
    k: int,
    shape,
    spacing,
    *,
    seed: int = 0,
    rank: int = 1,
    gauge: str = "singular",
    spread: float | None = None,
    size_range=None,
    group: str | None = "su2",
    embedding=(0, 1),
    boundary: str = "periodic",
    rtol: float = 1e-12,
    method: str = "auto",
    chunks=None,
    store=None,
    client=None,
    overwrite: bool = False,
    progress=None,
    n_workers=None,
    boundary_figures: bool = False,
) -> Ensemble:
    """``n`` random charge-``k`` Sp(``rank``) multi-instanton lattice starts, computed in parallel.

    Member i is ``random_adhm(k, rank, seed=default_rng(member_seed(seed, i)), spread, size_range)``
    in ``gauge``: centres ~ N(0, spread^2) about the lattice middle (default spread: a tenth of the
    shortest extent L a), sizes ~ U(size_range) (default (L a / 16, L a / 8)).  Every member shares
    the lattice: origin -a (floor(L / 2) - 1/2), so the middle hypercube is centred on 0.  Links as
    in :func:`instantonkit.lattice.lattice_links`; chunks: (c1, c2, c3, c4) per member.  store:
    Zarr directory (resumable; members' ADHM data and seeds in its attributes) or None for a dask
    array.  Rebuild member i from a store with :func:`load_member`.  ``boundary_figures=True`` adds
    each periodic member's boundary mismatch to its report (read in this process, member by member).
    """
    from .adhm import random_adhm

    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"n (members) must be an integer >= 1; found {n!r}")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"k (charge) must be an integer >= 1; found {k!r}")
    shape = _lat._check_shape(shape)
    a = _lat._check_spacing(spacing)
    spread, size_range = _ensemble_defaults(shape, a, spread, size_range)
    origin = _lat.default_origin(None, shape, a)  # no field: the middle hypercube is centred on 0
    seeds = tuple(member_seed(seed, i) for i in range(int(n)))
    members = tuple(
        dataclasses.replace(random_adhm(k, rank, seed=np.random.default_rng(s), spread=spread, size_range=size_range), gauge=gauge)
        for s in seeds
    )
    specs = [
        _lat.StartSpec.make(m, shape, a, origin=origin, group=group, embedding=embedding, boundary=boundary, rtol=rtol, method=method)
        for m in members
    ]
    n_out = specs[0].n_out
    site_bytes = 4 * n_out * n_out * 16
    chunks = default_chunks(shape, site_bytes) if chunks is None else _check_chunks(chunks, shape, "the lattice")
    params = {
        "n": int(n), "k": int(k), "seed": int(seed), "rank": int(rank), "gauge": gauge, "spread": spread,
        "size_range": list(size_range), "shape": list(shape), "spacing": a, "origin": origin.tolist(),
        "group": group, "embedding": list(specs[0].embedding), "boundary": boundary, "rtol": float(rtol), "method": method,
        "members": [{"lam": np.asarray(m.lam).tolist(), "B": np.asarray(m.B).tolist()} for m in members],
    }
    tasks = [_MemberChunk(s) for s in specs]
    job = _Job("ensemble", "links", (int(n),) + specs[0].links_shape, 5, (1,) + chunks, "complex128", params, lambda idx: tasks[idx[0]])
    if store is None:
        return Ensemble(_lazy(job), members, seeds, None)
    zarr = _require("zarr")
    path = _store_path(store)
    group_, rows, computed, reused, seconds = _run(job, path, client, overwrite, progress, n_workers)
    links = zarr.open_array(path, path="links", mode="r")
    reports = tuple(_link_report(s, rows[i], seconds, _MemberView(links, i), boundary_figures) for i, s in enumerate(specs))
    _finish_store(group_, {"members": [r.as_metadata() for r in reports]}, computed, reused, seconds)
    return Ensemble(links, members, seeds, reports)


@dataclasses.dataclass(frozen=True)
class _MemberView:
    """links[i] of an ensemble array without reading it: shape and basic slicing only."""

    links: object
    i: int

    @property
    def shape(self):
        return tuple(self.links.shape[1:])

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        return self.links[(self.i,) + key]


def load_member(path, i: int):
    """Member ``i`` of an ensemble store: (links (L1, L2, L3, L4, 4, N, N) numpy, ADHMData)."""
    from .adhm import ADHMData

    st = store_status(path)
    if st.kind != "ensemble":
        raise ValueError(f"{os.fspath(path)!r} holds a {st.kind!r} store, not an ensemble")
    n = st.params["n"]
    if isinstance(i, bool) or not isinstance(i, (int, np.integer)) or not 0 <= i < n:
        raise ValueError(f"member index must be an integer in 0..{n - 1}; found {i!r}")
    zarr = _require("zarr")
    rows = np.asarray(zarr.open_array(os.fspath(path), path=_REPORT, mode="r")[i])
    if not np.all(rows[..., 0] == 1.0):
        raise ValueError(f"member {i} of {os.fspath(path)!r} is not complete ({int(np.sum(rows[..., 0] == 1.0))} of {rows[..., 0].size} chunks); run ensemble(...) again to finish it")
    m = st.params["members"][i]
    data = ADHMData(np.asarray(m["lam"]), np.asarray(m["B"]), gauge=st.params["gauge"])
    return np.asarray(zarr.open_array(os.fspath(path), path="links", mode="r")[i]), data
