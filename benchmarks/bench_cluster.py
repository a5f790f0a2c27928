"""The chunked Dask/Zarr backend: scaling from one to two workers, and worker memory per chunk.

Scaling: one charge-2 ADHM start (``multi_instanton``, singular gauge, no closed form, so the Magnus
path with rtol 1e-8; 6^4 sites in quick mode, 12^4 in full mode, SU(2), spacing 0.5) computed by
``cluster.lattice_start(..., store=..., client=c)`` on a ``LocalCluster`` of W = 1 and W = 2
worker processes (one thread each), and by ``lattice.lattice_links`` in this process for reference.
The chunks are single time slices (L, L, L, 1), the boxes the local path computes one at a time,
so every path runs the same kernel calls and the figures compare the parallel runs, not chunk
shapes.  Cluster start-up and JIT compilation are not timed: before the timed call each worker
computes a throw-away start of one chunk (same field, same chunk shape and origin, through the same
store-writing path) into its own scratch store, and this process computes one time slice and one
periodic boundary check first.  The wall time of the whole call is reported and, separately, its
chunk phase (store opened, chunks computed and written: ``LinkReport.seconds``); the rest is the
part the calling process does alone (mainly the periodic boundary check, read back from the store).
Every chunked result is checked bit for bit against the local one.  For scale, each cluster then
runs the whole start with ``backend="local"`` in every worker at once: twice the time alone (one
worker) over the time side by side (two workers) is what two processes that share nothing gain on
this machine, the ceiling for the 2-worker speedup.

Memory: a BPST start (closed-form links, ``group="su3"``, size 2, spacing 0.5) on a fresh
2-worker cluster per configuration: two lattice sizes with the same chunk shape and one with a chunk
twice as large (quick: 16^4 with 8^4-site chunks only, on the one cluster that quick mode shares
between all its runs; full: 16^4, 32^4 and 48^4 with 8 x 8 x 16 x 16 chunks, then 48^4 with 16 on the second axis;
the larger chunk runs on the largest lattice it divides).  Each worker is
warmed as above, then (``client.run``) releases free heap to the system (glibc ``malloc_trim``),
resets its peak resident set (Linux: ``"5"`` to ``/proc/self/clear_refs``) and records its resident
set; after the run its peak resident set (``VmHWM``) is read.  The growth, peak minus the resident
set before, is the memory the run needed on that worker; the larger of the two workers is reported,
in MiB and as a multiple of the chunk's result bytes (sites x 4 x 3 x 3 x 16).  Where the peak cannot
be reset, ``ru_maxrss`` is used instead (it then includes the warm-up's peak; the rows say so).
The growth includes what the workers keep per finished chunk until the call returns (dask's task
records), so it can rise a little with the number of chunks per worker.

Workers run with dask's default environment, which includes ``MALLOC_TRIM_THRESHOLD_=65536``;
``--no-malloc-trim`` (``run(malloc_trim=False)``) leaves it out, for comparison.  The 1-minute load
average before the scaling part is in the first row: on two cores any other work skews the figures.

Usage: ``python benchmarks/bench_cluster.py [--quick] [--part scaling|memory] [--no-malloc-trim] [--json]``.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import sys
import tempfile
import time

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

SPACING = 0.5
SCALING_RTOL = 1e-8
MiB = float(1 << 20)
_TRIM_KEY = "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_"


# -- worker-side helpers (run in the worker processes through client.submit / client.run) -------------


def _warm_worker(field, extents, spacing, options: dict, directory: str) -> int:
    """Compute one throw-away start per chunk extent in this process (JIT, imports, store path)."""
    import instantonkit as ik

    for i, ext in enumerate(extents):
        path = os.path.join(directory, f"warm-{os.getpid()}-{i}")
        ik.cluster.lattice_links(field, ext, spacing, chunks=ext, store=path, client="sync", boundary="open", **options)
    return os.getpid()


def _local_in_worker(field, shape, spacing, rtol) -> float:
    """Seconds of the whole start with backend='local' in this process (the result is dropped)."""
    import instantonkit as ik

    t = time.perf_counter()
    ik.lattice_links(field, shape, spacing, rtol=rtol)
    return time.perf_counter() - t


def _status_kib(key: str) -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1])
    raise RuntimeError(f"{key} not found in /proc/self/status")


def _mem_mark() -> tuple:
    """Free heap back to the system, reset the peak resident set; (resident KiB now, method)."""
    import ctypes
    import gc

    gc.collect()
    with contextlib.suppress(OSError, AttributeError):
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        method = "VmHWM"
    except OSError:
        method = "ru_maxrss"
    return _status_kib("VmRSS"), method


def _mem_peak(method: str) -> int:
    """Peak resident set in KiB since :func:`_mem_mark` (VmHWM), or over the process life (ru_maxrss)."""
    if method == "VmHWM":
        return _status_kib("VmHWM")
    import resource

    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)


# -- helpers in this process ---------------------------------------------------------------------------


@contextlib.contextmanager
def _cluster(n_workers: int, malloc_trim: bool = True):
    """A LocalCluster of ``n_workers`` processes, one thread each, and its Client (logs below ERROR silenced).

    No dashboard; the scheduler's small HTTP server (which it starts anyway) gets a free local port
    instead of the default one, which may be taken.  ``malloc_trim=False`` leaves out the
    ``MALLOC_TRIM_THRESHOLD_`` that dask's nanny puts in every worker's environment by default."""
    import logging

    import dask
    from distributed import Client, LocalCluster

    http = {"dashboard": False, "dashboard_address": "127.0.0.1:0"}
    env = contextlib.nullcontext() if malloc_trim else dask.config.set({_TRIM_KEY: None})
    with (
        env,
        LocalCluster(
            n_workers=n_workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=None,
            scheduler_kwargs=http,
            silence_logs=logging.ERROR,
        ) as cluster,
        Client(cluster) as client,
    ):
        client.wait_for_workers(n_workers)
        yield client


def _extents(shape, chunks) -> list:
    """The distinct box shapes of the chunks of ``shape`` (edge chunks may be smaller)."""
    import itertools

    per_axis = [sorted({c} | ({s % c} if s % c else set())) for s, c in zip(shape, chunks)]
    return [tuple(e) for e in itertools.product(*per_axis)]


def _warm_all(client, field, shape, chunks, options: dict, directory: str) -> None:
    """Run :func:`_warm_worker` once on every worker of ``client`` (pinned to that worker)."""
    workers = list(client.scheduler_info()["workers"])
    futures = [
        client.submit(
            _warm_worker,
            field,
            _extents(shape, chunks),
            SPACING,
            options,
            directory,
            workers=[w],
            allow_other_workers=False,
            pure=False,
        )
        for w in workers
    ]
    pids = client.gather(futures)
    if len(set(pids)) != len(workers):
        raise RuntimeError(f"warm-up ran in {len(set(pids))} processes for {len(workers)} workers")


def _warm_here(spec, chunks, options: dict, directory: str) -> None:
    """Warm this process: the chunked call's own steps (field probe, store) and the periodic boundary
    check of the full lattice (run on zero links: the same shapes, so the same compiled kernels)."""
    import numpy as np

    _warm_worker(spec.field, _extents(spec.shape, chunks), spec.spacing, options, directory)
    spec.boundary_figures(np.zeros(spec.links_shape, dtype=np.complex128))


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def _fmt_chunks(chunks) -> str:
    return "x".join(str(c) for c in chunks)


# -- 1. scaling ---------------------------------------------------------------------------------------


@contextlib.contextmanager
def _shared(client):
    """``client`` as a context manager that leaves it open (a cluster shared by several parts)."""
    yield client


def _scale_down(client, n: int) -> None:
    """Retire workers of ``client``'s LocalCluster until ``n`` remain (no new process is started)."""
    client.cluster.scale(n)
    deadline = time.monotonic() + 60
    while len(client.scheduler_info()["workers"]) > n:
        if time.monotonic() > deadline:
            raise RuntimeError(f"the cluster did not scale down to {n} workers within 60 s")
        time.sleep(0.1)


def scaling(size: int, malloc_trim: bool = True, client=None) -> list[dict]:
    """Rows: a charge-2 ADHM Magnus start of size^4 sites on 1 and 2 workers and in this process.

    client: a shared 2-worker client (quick mode): the 2-worker figures are taken on it,
    then it is scaled down to one worker for the 1-worker figures, instead of a fresh cluster for each
    (no worker start-up or compilation twice; the 1-worker figures then run on a worker that has run
    chunks before, which the rows say)."""
    import numpy as np

    import instantonkit as ik
    from instantonkit.lattice import starts as lat

    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan  # other work skews a 2-core figure
    field = ik.multi_instanton([[1.0, 0.0, 0.0, 0.0], [-1.0, 0.0, 0.0, 0.0]], [1.0, 1.0])
    shape = (size,) * 4
    chunks = (size, size, size, 1)
    spec = lat.StartSpec.make(field, shape, SPACING, rtol=SCALING_RTOL)
    options = {"rtol": SCALING_RTOL, "origin": spec.origin}
    name = f"k=2 ADHM {size}^4 SU(2) Magnus start (rtol {SCALING_RTOL:.0e}){_tag(malloc_trim)}"

    with tempfile.TemporaryDirectory() as tmp:
        _warm_here(spec, chunks, options, tmp)
    local, t_local = _timed(lambda: ik.lattice_links(field, shape, SPACING, rtol=SCALING_RTOL))
    _, t_boundary = _timed(lambda: spec.boundary_figures(local))

    total, phase, alone = {}, {}, {}
    shared = client
    for n in (1, 2) if shared is None else (2, 1):
        if shared is not None and n == 1:
            _scale_down(shared, 1)
        clus = _cluster(n, malloc_trim) if shared is None else _shared(shared)
        with tempfile.TemporaryDirectory() as tmp, clus as client:
            if shared is None or n == 2:
                _warm_all(client, field, shape, chunks, options, tmp)

            def call(name, client=client, tmp=tmp):
                return ik.cluster.lattice_start(
                    field,
                    shape,
                    SPACING,
                    rtol=SCALING_RTOL,
                    chunks=chunks,
                    store=os.path.join(tmp, name),
                    client=client,
                )

            if shared is not None and n == 2:
                # the shared cluster's first chunked call carries one-time costs that the 1-worker call,
                # made later on the same cluster, would not: make it untimed, so both compare alike
                call("throw-away")
            start, total[n] = _timed(lambda: call("start"))
            links, report = start.links, start.report
            phase[n] = report.seconds
            if not np.array_equal(np.asarray(links[...]), local):
                raise RuntimeError(f"the {n}-worker start differs from the local one")
            del links
            # the same whole start with backend='local' in every worker at once: what this machine
            # gives two processes that share nothing (its ceiling for the 2-worker speedup)
            alone[n] = max(
                client.gather(
                    [
                        client.submit(
                            _local_in_worker,
                            field,
                            shape,
                            SPACING,
                            SCALING_RTOL,
                            workers=[w],
                            allow_other_workers=False,
                            pure=False,
                        )
                        for w in client.scheduler_info()["workers"]
                    ]
                )
            )
    n_chunks = size
    ceiling = 2.0 * alone[1] / alone[2]
    how = (
        "fresh cluster per worker count"
        if shared is None
        else (
            f"quick: one 2-worker cluster, scaled down to 1; at {size}^4 the runs take tenths of a second, so "
            "every ratio of this start is rough (the full run's 12^4 gives the reference)"
        )
    )
    return [
        {
            "figure": f"{name}: local, one process",
            "value": round(t_local, 3),
            "unit": "s",
            "ratio": None,
            "reference": (
                f"lattice_links(backend='local'), compiled; max {report.max_steps} Magnus steps; "
                f"load average {load:.2f} before; {how}"
            ),
        },
        {
            "figure": f"{name}: dask, 1 worker",
            "value": round(total[1], 3),
            "unit": "s",
            "ratio": round(total[1] / t_local, 3),
            "reference": "x the local path (1.0 = no overhead)",
        },
        {
            "figure": f"{name}: dask, 2 workers",
            "value": round(total[2], 3),
            "unit": "s",
            "ratio": round(total[1] / total[2], 3),
            "reference": "speedup over 1 worker (ideal 2)",
        },
        {
            "figure": f"{name}: chunk phase, 1 worker",
            "value": round(phase[1], 3),
            "unit": "s",
            "ratio": round(phase[1] / t_local, 3),
            "reference": f"{n_chunks} chunks {_fmt_chunks(chunks)}, store writes included; x the local path",
        },
        {
            "figure": f"{name}: chunk phase, 2 workers",
            "value": round(phase[2], 3),
            "unit": "s",
            "ratio": round(phase[1] / phase[2], 3),
            "reference": "speedup over 1 worker (ideal 2)",
        },
        {
            "figure": f"{name}: serial part, 2 workers",
            "value": round(total[2] - phase[2], 3),
            "unit": "s",
            "ratio": round((total[2] - phase[2]) / total[2], 3),
            "reference": f"call minus chunk phase, fraction of the call; boundary check alone {t_boundary:.2f} s",
        },
        {
            "figure": f"{name}: 2 independent local starts at once, throughput",
            "value": round(ceiling, 3),
            "unit": "x",
            "ratio": round(phase[1] / phase[2] / ceiling, 3),
            "reference": (
                f"2 x {alone[1]:.2f} s alone / {alone[2]:.2f} s side by side, one per worker (the machine's ceiling); "
                "ratio = chunk-phase speedup / this"
            ),
        },
    ]


# -- 2. memory per chunk ------------------------------------------------------------------------------


def _memory_run(size: int, chunks: tuple, malloc_trim: bool = True, client=None) -> dict:
    """One BPST SU(3) start of size^4 sites in ``chunks`` on a fresh 2-worker cluster (or on the shared
    ``client``): time and worker peaks."""
    import instantonkit as ik
    from instantonkit.lattice import starts as lat

    field = ik.bpst(size=2.0)
    shape = (size,) * 4
    spec = lat.StartSpec.make(field, shape, SPACING, group="su3")
    options = {"group": "su3", "origin": spec.origin}
    fresh = client is None
    clus = _cluster(2, malloc_trim) if fresh else _shared(client)
    with tempfile.TemporaryDirectory() as tmp, clus as client:
        if fresh:  # quick (shared client): this process's first-call compilation stays in the call time
            _warm_here(spec, chunks, options, tmp)
        _warm_all(client, field, shape, chunks, options, tmp)
        before = client.run(_mem_mark)
        methods = {m for _, m in before.values()}
        method = "VmHWM" if methods == {"VmHWM"} else "ru_maxrss"
        start, seconds = _timed(
            lambda: ik.cluster.lattice_start(
                field, shape, SPACING, group="su3", chunks=chunks, store=os.path.join(tmp, "start"), client=client
            )
        )
        report = start.report
        peak = client.run(_mem_peak, method)
    growth = sorted((max(peak[w] - before[w][0], 0) * 1024 for w in before), reverse=True)
    return {"seconds": seconds, "phase": report.seconds, "growth": growth, "method": method}


def memory(sizes, chunks: tuple, big_chunks, malloc_trim: bool = True, client=None) -> list[dict]:
    """Rows: peak worker memory growth for ``sizes`` with ``chunks``, and with ``big_chunks`` for the
    largest size they divide (else the largest size).  client: run every configuration on this shared
    2-worker client instead of a fresh cluster each (quick mode; the rows say so); big_chunks None: no
    run with the larger chunk."""
    site_bytes = 4 * 3 * 3 * 16
    fits = [s for s in sizes if big_chunks and all(s % c == 0 for c in big_chunks)]
    big_size = max(fits or sizes)
    runs = [(s, chunks) for s in sizes] + ([(big_size, big_chunks)] if big_chunks else [])
    rows, growth = [], {}
    for size, ch in runs:
        r = _memory_run(size, ch, malloc_trim, client)
        chunk_bytes = math.prod(ch) * site_bytes
        array_bytes = size**4 * site_bytes
        n_chunks = math.prod(-(-size // c) for c in ch)
        growth[(size, ch)] = r["growth"][0]
        note = "" if r["method"] == "VmHWM" else "; ru_maxrss, warm-up peak included"
        if client is not None:
            note += (
                "; quick: one cluster for all runs (earlier runs' records stay on the workers), "
                "call time includes this process's compilation; the full run compares sizes and chunks"
            )
        rows.append(
            {
                "figure": f"BPST SU(3) {size}^4, chunks {_fmt_chunks(ch)}: peak worker memory growth{_tag(malloc_trim)}",
                "value": round(r["growth"][0] / MiB, 2),
                "unit": "MiB",
                "ratio": round(r["growth"][0] / chunk_bytes, 3),
                "reference": (
                    f"x chunk {chunk_bytes / MiB:.2f} MiB; array {array_bytes / MiB:.0f} MiB in {n_chunks} chunks, "
                    f"call {r['seconds']:.1f} s (chunks {r['phase']:.1f} s); other worker {r['growth'][-1] / MiB:.2f} MiB{note}"
                ),
            }
        )
    small, big = min(sizes), max(sizes)
    if big != small:  # one size (quick mode): no lattice-size comparison
        rows.append(
            {
                "figure": f"memory growth {big}^4 / {small}^4, chunks {_fmt_chunks(chunks)}",
                "value": round(growth[(big, chunks)] / max(growth[(small, chunks)], 1), 3),
                "unit": "x",
                "ratio": None,
                "reference": f"1.0 = independent of the lattice (arrays differ {big**4 / small**4:.0f}x)",
            }
        )
    if not big_chunks:
        return rows
    rows.append(
        {
            "figure": f"memory growth chunks {_fmt_chunks(big_chunks)} / {_fmt_chunks(chunks)}, {big_size}^4",
            "value": round(growth[(big_size, big_chunks)] / max(growth[(big_size, chunks)], 1), 3),
            "unit": "x",
            "ratio": None,
            "reference": f"{math.prod(big_chunks) / math.prod(chunks):.0f} = proportional to the chunk",
        }
    )
    return rows


# -- protocol ------------------------------------------------------------------------------------------

PARTS = ("scaling", "memory")


def _tag(malloc_trim: bool) -> str:
    return "" if malloc_trim else " [no malloc trim]"


def run(
    quick: bool = False, parts=PARTS, scaling_size: int | None = None, memory_sizes=None, malloc_trim: bool = True
) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} of the parts asked for (see the module notes).

    scaling_size: L of the scaling start (default 6 quick, 12 full); memory_sizes: the L of the
    memory runs (default (16,) quick, (16, 32, 48) full); malloc_trim=False: workers without the
    MALLOC_TRIM_THRESHOLD_ that dask's nanny sets by default (for comparison).

    Quick mode starts one 2-worker cluster for everything (worker start-up and compilation are most of
    a small run's time): the memory runs first, then the scaling start on two workers, then on one
    after scaling the cluster down.  The full run starts a fresh cluster for every configuration."""
    unknown = set(parts) - set(PARTS)
    if unknown:
        raise ValueError(f"parts must be among {PARTS}; found {sorted(unknown)}")
    if not quick:
        rows = []
        if "scaling" in parts:
            rows += scaling(scaling_size or 12, malloc_trim)
        if "memory" in parts:
            rows += memory(memory_sizes or (16, 32, 48), (8, 8, 16, 16), (8, 16, 16, 16), malloc_trim)
        return rows
    mem: list[dict] = []
    scal: list[dict] = []
    with _cluster(2, malloc_trim) as client:
        if "memory" in parts:  # first: it needs both workers
            mem = memory(memory_sizes or (16,), (8, 8, 8, 8), None, malloc_trim, client=client)
        if "scaling" in parts:
            scal = scaling(scaling_size or 6, malloc_trim, client=client)
    return scal + mem


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one shared cluster: 6^4 scaling start; one 16^4 memory run")
    ap.add_argument("--part", choices=PARTS, action="append", help="run only this part (repeatable)")
    ap.add_argument(
        "--no-malloc-trim",
        action="store_true",
        help="workers without the MALLOC_TRIM_THRESHOLD_ that dask's nanny sets by default",
    )
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = ap.parse_args(argv)
    rows = run(args.quick, tuple(args.part) if args.part else PARTS, malloc_trim=not args.no_malloc_trim)
    from benchmarks.run import print_rows

    print_rows(rows, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
