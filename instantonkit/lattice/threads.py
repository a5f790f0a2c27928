"""Chunks of a lattice computation on one thread per core.

A compiled kernel over a chunk of the lattice runs its cache-sized blocks one after the other on one core (the
blocks are too small for XLA to split), and a kernel call releases the interpreter lock, so the chunks of a
measurement or of a force go to the cores in turn: `map_chunks` calls a function on each chunk on `WORKERS`
threads and gives the results back in chunk order, so the thread count changes no bit of a result.

`WORKERS` is one thread per core this process may use (its CPU affinity), at most 8; the environment variable
``INSTANTONKIT_THREADS`` (read at import, an integer in 1..64) sets it instead, e.g. 1 on a node shared with
other jobs.  It may also be assigned at run time (``instantonkit.lattice.threads.WORKERS = 1``).
"""

from __future__ import annotations

import collections
import os
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ThreadPoolExecutor

__all__ = ["WORKERS", "THREADS_ENV", "MAX_WORKERS", "workers", "map_chunks", "run_chunks"]


def _cores() -> int:
    """The cores this process may use (its CPU affinity where the platform tells it)."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1


#: The environment variable that sets `WORKERS` (a positive integer up to `MAX_WORKERS`; unset or empty: one per core).
THREADS_ENV = "INSTANTONKIT_THREADS"
#: The most worker threads one may ask for (each holds up to two chunks in flight).
MAX_WORKERS = 64


def _workers_from_env(value: str | None) -> int:
    """`WORKERS` from the value of `THREADS_ENV` (None or empty: one per core, at most 8)."""
    if value is None or not value.strip():
        return max(1, min(8, _cores()))
    text = value.strip()
    if not text.isdigit() or not 1 <= int(text) <= MAX_WORKERS:
        raise ValueError(
            f"{THREADS_ENV} must be a positive integer up to {MAX_WORKERS} (the worker threads); found {value!r}"
        )
    return int(text)


#: Threads that run chunks side by side (module docstring; measured in the benchmarks: two threads take a
#: 32^4 SU(3) five-loop charge from 12.1 s to 7.5 s on two cores).
WORKERS = _workers_from_env(os.environ.get(THREADS_ENV))


def workers() -> int:
    """The checked `WORKERS` (it may be assigned at run time): an int in 1..`MAX_WORKERS`.

    Raises:
        ValueError / TypeError: naming ``instantonkit.lattice.threads.WORKERS`` and the value found.
    """
    n = WORKERS
    if isinstance(n, bool) or not isinstance(n, int):
        raise TypeError(f"instantonkit.lattice.threads.WORKERS must be an int; found {type(n).__name__} {n!r}")
    if not 1 <= n <= MAX_WORKERS:
        raise ValueError(f"instantonkit.lattice.threads.WORKERS must lie in 1..{MAX_WORKERS}; found {n}")
    return n


_END = object()


def map_chunks(fn: Callable, chunks: Iterable) -> Iterator:
    """fn(c) for each c of ``chunks``, computed on `WORKERS` threads and yielded in chunk order.

    The first call runs alone (it compiles the kernel of its shape, which the others of that shape share;
    chunks of another shape compile theirs in a worker); then at most 2 `WORKERS` chunks are taken from the
    iterator ahead of the results, so memory stays a few chunks.  ``fn`` runs compiled kernels (which release
    the interpreter lock) and may write into disjoint parts of an array; an exception in a call is raised here,
    in the caller's thread, and the calls not yet started are dropped (so are they when the consumer stops
    early).  The thread count is checked (`workers`) before the first call.
    """
    n = workers()
    it = iter(chunks)
    first = next(it, _END)
    if first is _END:
        return
    yield fn(first)
    if n == 1:
        for c in it:
            yield fn(c)
        return
    pool = ThreadPoolExecutor(n)
    try:
        pending: collections.deque = collections.deque()
        for c in it:
            pending.append(pool.submit(fn, c))
            if len(pending) >= 2 * n:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()
    finally:  # an error, an interrupt or a consumer that stops early: calls not yet started are dropped
        pool.shutdown(wait=True, cancel_futures=True)


def run_chunks(fn: Callable, chunks: Iterable) -> list:
    """[fn(c) for c in chunks] by `map_chunks` (chunk order, `WORKERS` threads)."""
    return list(map_chunks(fn, chunks))
