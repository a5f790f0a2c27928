"""Scheduling: the Dask client to run on, filling a store chunk by chunk, and lazy dask arrays of a job."""

from __future__ import annotations

import contextlib
import os
import time

import numpy as np

from ..core import _progress
from ._optional import require
from .geometry import Job, region
from .store import ATTR, Column, prepare, write_chunk

__all__ = ["scheduler", "run", "lazy"]


@contextlib.contextmanager
def scheduler(client, n_workers):
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
    distributed = require("distributed")
    if n_workers is not None and (isinstance(n_workers, bool) or not isinstance(n_workers, (int, np.integer))):
        raise TypeError(f"n_workers must be an integer >= 1 or None; found {n_workers!r}")
    n = int(os.cpu_count() or 1) if n_workers is None else int(n_workers)
    if n < 1:
        raise ValueError(f"n_workers must be >= 1; found {n_workers!r}")
    with distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0") as cluster:
        with distributed.Client(cluster) as c:
            yield c


def run(job: Job, path: str, client, overwrite: bool, progress, n_workers):
    """Fill the store of ``job`` chunk by chunk; returns (group, rows ndarray, computed, reused, seconds)."""
    t0 = time.perf_counter()
    group, rows = prepare(job, path, overwrite)
    flags = np.asarray(rows[...])[..., Column.DONE] == 1.0
    todo = [idx for idx in np.ndindex(*job.grid) if not flags[idx]]
    total, reused = int(np.prod(job.grid)), int(flags.sum())
    done = reused
    progress = _progress.sink(progress, f"{job.name} chunks")
    if todo:
        with scheduler(client, n_workers) as c:
            store_id = group.attrs[ATTR].get("store_id")
            args = [(path, job.name, job.tasks(idx), idx, job.shape[: job.lead], job.chunks, store_id) for idx in todo]
            if c is None:
                for a in args:
                    write_chunk(*a)
                    done += 1
                    if progress is not None:
                        progress(done, total)
            else:
                as_completed = require("distributed").as_completed
                token = f"{os.getpid()}-{time.time_ns()}"
                pending = {
                    c.submit(write_chunk, *a, key=f"instantonkit-chunk-{token}-{'-'.join(map(str, a[3]))}", pure=False)
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
    missing = int(np.sum(rows_now[..., Column.DONE] != 1.0))
    if missing:  # pragma: no cover - a chunk task returned without its row
        raise RuntimeError(f"{missing} of {total} chunks of {path!r} are not marked done after the run")
    return group, rows_now, len(todo), reused, time.perf_counter() - t0


def lazy(job: Job):
    """A dask array whose blocks are the chunks of ``job`` (nothing computed until asked)."""
    da = require("dask.array")
    shape_lead = job.shape[: job.lead]

    def block(block_id=None):
        idx = tuple(block_id[: job.lead])
        return job.tasks(idx)(region(idx, shape_lead, job.chunks))[0]

    chunks = tuple(
        tuple(min(c, s - i * c) for i in range(g)) for s, c, g in zip(shape_lead, job.chunks, job.grid)
    ) + tuple((s,) for s in job.shape[job.lead :])
    return da.map_blocks(
        block, dtype=np.dtype(job.dtype), chunks=chunks, meta=np.empty((0,) * len(job.shape), dtype=job.dtype)
    )
