"""The Zarr store protocol: layout, metadata, the chunk report, and the atomic write of one chunk.

A store is a Zarr (format 3) group: the result array (``links`` or ``values``) and ``chunk_report``,
one row per chunk with the columns `REPORT_COLUMNS` (`Column`).  A task writes its chunk
(atomically, by Zarr's local store) and only then its row, so ``done = 1`` always means a complete chunk.
The attribute `ATTR` holds the kind, the parameters, the chunking, a ``store_id`` that every task
checks before writing, the runs and the final report.
"""

from __future__ import annotations

import dataclasses
import enum
import os
import shutil
import uuid
from pathlib import Path

import numpy as np

from ..lattice.starts import LinkStats
from ._optional import require
from .fingerprint import same_params
from .geometry import Job, region

__all__ = [
    "ATTR",
    "REPORT",
    "FORMAT",
    "Column",
    "REPORT_COLUMNS",
    "NO_STATS",
    "stats_row",
    "rows_stats",
    "StoreStatus",
    "store_status",
    "read_meta",
    "prepare",
    "StaleTaskError",
    "check_store_id",
    "write_chunk",
    "finish_store",
    "store_path",
]

#: Name of the store attribute that holds instantonkit's metadata.
ATTR = "instantonkit"
#: Name of the chunk-report array.
REPORT = "chunk_report"
#: Version of the store layout (stores of other versions are not read).
FORMAT = 2  # 2: the chunk report gained the POTENTIAL_EVALUATIONS column


class Column(enum.IntEnum):
    """The columns of the chunk report, named once (index into the last axis of ``chunk_report``)."""

    DONE = 0
    UNITARITY_BEFORE = 1
    UNITARITY_AFTER = 2
    MAGNUS_STEPS = 3
    REFINEMENT_DIFF = 4
    POTENTIAL_EVALUATIONS = 5


#: Column names of the chunk report, in order.
REPORT_COLUMNS = tuple(c.name.lower() for c in Column)
#: The stats row of a chunk without link figures (densities).
NO_STATS = [0.0] * (len(Column) - 1)


def stats_row(stats: LinkStats) -> list:
    """The report columns after DONE for one chunk's `instantonkit.lattice.starts.LinkStats`."""
    return [
        float(stats.unitarity_before),
        float(stats.unitarity_after),
        float(stats.max_steps),
        float(stats.refinement_diff),
        float(stats.evaluations),
    ]


def rows_stats(rows) -> LinkStats:
    """The combined `instantonkit.lattice.starts.LinkStats` of report rows (..., len(Column))."""
    rows = np.asarray(rows)
    steps = int(np.max(rows[..., Column.MAGNUS_STEPS]))
    return LinkStats(
        method="magnus" if steps > 0 else "closed",
        max_steps=steps,
        refinement_diff=float(np.max(rows[..., Column.REFINEMENT_DIFF])),
        unitarity_before=float(np.max(rows[..., Column.UNITARITY_BEFORE])),
        unitarity_after=float(np.max(rows[..., Column.UNITARITY_AFTER])),
        evaluations=int(np.sum(rows[..., Column.POTENTIAL_EVALUATIONS])),
    )


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


def read_meta(group) -> dict | None:
    meta = dict(group.attrs).get(ATTR)
    return meta if isinstance(meta, dict) and meta.get("format") == FORMAT else None


def store_status(path) -> StoreStatus:
    """Read a store's state without computing anything; ValueError if ``path`` is not an instantonkit store.

    Args:
      path: a store directory.
    Returns:
      StoreStatus: kind, parameters, chunks done / total, completeness and the report.
    Raises:
      ValueError: ``path`` is not a Zarr store written by instantonkit.
      ImportError: without the optional extra ``distributed``.
    """
    zarr = require("zarr")
    path = os.fspath(path)
    try:
        group = zarr.open_group(path, mode="r")
    except Exception as err:
        raise ValueError(f"{path!r} is not a Zarr store written by instantonkit ({type(err).__name__}: {err})") from err
    meta = read_meta(group)
    if meta is None:
        raise ValueError(f"{path!r} is a Zarr store without instantonkit metadata (attribute {ATTR!r} format {FORMAT})")
    rows = np.asarray(group[REPORT][...])
    done = int(np.sum(rows[..., Column.DONE] == 1.0))
    total = int(np.prod(rows.shape[:-1]))
    return StoreStatus(path, meta["kind"], meta["params"], done, total, done == total, meta.get("report"))


def _is_empty_dir(p: Path) -> bool:
    return p.is_dir() and not any(p.iterdir())


def prepare(job: Job, path: str, overwrite: bool):
    """Open the store for ``job``: create it, resume it (same parameters), or refuse; returns (group, rows)."""
    zarr = require("zarr")
    p = Path(path)
    if p.exists() and not _is_empty_dir(p):
        try:
            group = zarr.open_group(path, mode="r+")
            meta = read_meta(group)
        except Exception:
            group, meta = None, None
        if meta is None:
            raise ValueError(
                f"{path!r} exists and is not an instantonkit store; refusing to touch it (choose another path)"
            )
        if meta["kind"] != job.kind or same_params(meta["params"], job.params):
            if not overwrite:
                if meta["kind"] != job.kind:
                    raise ValueError(
                        f"the store {path!r} holds a {meta['kind']!r} result, not {job.kind!r}; "
                        "pass overwrite=True to replace it, or choose another path"
                    )
                raise ValueError(
                    f"the store {path!r} was made with other parameters (differs in: {', '.join(same_params(meta['params'], job.params))}); "
                    "pass overwrite=True to replace it, or choose another path"
                )
        elif not overwrite:
            rows = group[REPORT]
            if tuple(rows.shape[:-1]) != job.grid or meta.get("chunks") != list(job.chunks):
                raise ValueError(
                    f"the store {path!r} holds this {job.kind} result in chunks {tuple(meta.get('chunks', ()))}; "
                    f"asked for chunks {job.chunks} (resume with the stored chunks, or pass overwrite=True)"
                )
            return group, rows
        shutil.rmtree(p)
    group = zarr.open_group(path, mode="w")
    group.create_array(
        job.name,
        shape=job.shape,
        chunks=job.zchunks,
        dtype=job.dtype,
        fill_value=0,
        compressors=None,
        config={"write_empty_chunks": True},
    )
    rows = group.create_array(
        REPORT,
        shape=job.grid + (len(Column),),
        chunks=(1,) * len(job.grid) + (len(Column),),
        dtype="f8",
        fill_value=0.0,
        config={"write_empty_chunks": True},
    )
    group.attrs[ATTR] = {
        "format": FORMAT,
        "kind": job.kind,
        "name": job.name,
        "params": job.params,
        "chunks": list(job.chunks),
        "complete": False,
        "store_id": uuid.uuid4().hex,
    }
    return group, rows


class StaleTaskError(RuntimeError):
    """A chunk task of an earlier run found its store replaced (``overwrite=True``) and wrote nothing."""


def check_store_id(path: str, store_id: str) -> None:
    zarr = require("zarr")
    try:
        now = zarr.open_group(path, mode="r").attrs[ATTR].get("store_id")
    except Exception:  # the store is gone or being replaced
        now = None
    if now != store_id:
        raise StaleTaskError(
            f"the store {path!r} was replaced since this task was submitted; its chunk was not written"
        )


def write_chunk(path: str, name: str, task, index: tuple, shape: tuple, chunks: tuple, store_id: str):
    """Worker task: compute chunk ``index``, write it, then mark it done; returns (index, stats row).

    The store's identity is checked before each write, so a task left running by an interrupted run
    cannot write into a store that has since been replaced."""
    zarr = require("zarr")
    arr, row = task(region(index, shape, chunks))
    check_store_id(path, store_id)
    zarr.open_array(path, path=name, mode="r+")[region(index, shape, chunks)] = arr
    check_store_id(path, store_id)
    zarr.open_array(path, path=REPORT, mode="r+")[tuple(index)] = np.asarray([1.0] + list(row))
    return tuple(index), row


def finish_store(group, report: dict | None, computed: int, reused: int, seconds: float):
    meta = dict(group.attrs[ATTR])
    old = meta.get("report")
    if computed == 0 and isinstance(old, dict) and isinstance(report, dict):  # nothing new: keep what was measured
        report = {**report, **{k: v for k, v in old.items() if report.get(k) is None or k == "seconds"}}
    runs = list(meta.get("runs", [])) + [{"chunks_computed": computed, "chunks_reused": reused, "seconds": seconds}]
    meta.update(complete=True, report=report, runs=runs)
    group.attrs[ATTR] = meta


def store_path(store) -> str:
    if not isinstance(store, (str, os.PathLike)):
        raise TypeError(f"store must be a path (str or os.PathLike) of a Zarr directory; found {type(store).__name__}")
    return os.path.abspath(os.fspath(store))  # workers may start elsewhere: they get the absolute path
