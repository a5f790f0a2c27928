"""Chunk geometry: chunk shapes, the chunk grid, the region of one chunk, and the description of a chunked job."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

import numpy as np

__all__ = ["CHUNK_BYTES", "default_chunks", "check_chunks", "grid", "region", "Job"]

#: Bytes of result per chunk aimed at by `default_chunks` (32 MiB: large enough that task overhead is
#: small, small enough that a worker holds a few chunks and their temporaries in memory).
CHUNK_BYTES = 1 << 25


def default_chunks(shape, bytes_per_site: int, target: int = CHUNK_BYTES) -> tuple:
    """Chunk shape for an array of ``shape`` sites: the whole array halved along its longest axis
    (the last among equals) until a chunk holds at most ``target`` bytes."""
    c = [int(v) for v in shape]
    while math.prod(c) * bytes_per_site > target and max(c) > 1:
        i = max(range(len(c)), key=lambda j: (c[j], j))
        c[i] = -(-c[i] // 2)
    return tuple(c)


def check_chunks(chunks, shape, what: str) -> tuple:
    """Validate a chunk shape against the leading ``shape``; ValueError naming the expected length."""
    if isinstance(chunks, (int, np.integer)) and not isinstance(chunks, bool):
        chunks = (int(chunks),) * len(shape)
    try:
        if any(isinstance(v, bool) for v in chunks):
            raise TypeError("booleans are not chunk sizes")
        c = tuple(int(v) for v in chunks)
    except TypeError as err:
        raise TypeError(
            f"chunks must be {len(shape)} positive integers (one per axis of {what}); found {chunks!r}"
        ) from err
    if len(c) != len(shape) or any(v < 1 for v in c) or any(int(v) != v for v in chunks):
        raise ValueError(
            f"chunks must be {len(shape)} positive integers (one per axis of {what} {tuple(shape)}); found {tuple(chunks)!r}"
        )
    return tuple(min(v, s) for v, s in zip(c, shape))


def grid(shape, chunks) -> tuple:
    return tuple(-(-s // c) for s, c in zip(shape, chunks))


def region(index, shape, chunks) -> tuple:
    """The slices of chunk ``index`` over the leading axes."""
    return tuple(slice(i * c, min((i + 1) * c, s)) for i, s, c in zip(index, shape, chunks))


@dataclasses.dataclass(frozen=True)
class Job:
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
        return grid(self.shape[: self.lead], self.chunks)

    @property
    def zchunks(self):
        return self.chunks + tuple(self.shape[self.lead :])
