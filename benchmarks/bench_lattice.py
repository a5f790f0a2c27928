"""Time and peak memory of lattice starts (BPST, closed-form links) for SU(2) and SU(3).

Goals (issue 5): a 32^4 SU(2) BPST start in <= 30 s on two cores, cost linear in the volume, peak
memory <= 1.5x the output array.  Usage: ``python benchmarks/bench_lattice.py [--quick] [--sizes 16 24 32]``.
Quick mode uses 8^4 only; ``--disk 64`` writes the 64^4 SU(3) start to a memmap on disk.  Peak memory is the growth of the resident set (resource.getrusage) over
the run, measured in a fresh child process per start so earlier runs do not hide it.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import resource
import sys
import time

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))



def _one(size: int, group: str, queue) -> None:
    import numpy as np

    import instantonkit as ik
    from instantonkit import lattice as lat

    data = ik.bpst(size=2.0)  # rho / a = 4, singular gauge (periodic start)
    lat.lattice_links(data, (16, 16, 4, 1), 0.5, group=group)  # compile (full-size batches) outside the timing
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    n = 3 if group == "su3" else 2
    out = np.empty((size,) * 4 + (4, n, n), dtype=np.complex128)
    out.fill(0)  # touch the output pages so they count in the baseline, not as overhead
    base_out = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    lat.lattice_links(data, (size,) * 4, 0.5, group=group, out=out)
    sec = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    queue.put({"seconds": sec, "out_bytes": out.nbytes, "extra_kib": peak - base_out, "base_kib": base_out - base})


def _disk(size: int, group: str, directory: str, queue) -> None:
    import os

    import numpy as np

    import instantonkit as ik
    from instantonkit import lattice as lat

    data = ik.bpst(size=2.0)
    n = 3 if group == "su3" else 2
    path = os.path.join(directory, f"start_{group}_{size}.dat")
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.complex128, shape=(size,) * 4 + (4, n, n))
    t0 = time.perf_counter()
    lat.lattice_links(data, (size,) * 4, 0.5, group=group, out=out)
    out.flush()
    sec = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    queue.put({"seconds": sec, "file_bytes": os.path.getsize(path), "peak_kib": peak})
    del out
    os.remove(path)


def disk_start(size: int = 64, group: str = "su3", directory: str | None = None) -> list[dict]:
    """A BPST start written straight to a .npy memmap on disk (issue 5: 64^4 SU(3) within 24 GiB)."""
    import tempfile

    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    with tempfile.TemporaryDirectory(dir=directory) as tmp:
        p = ctx.Process(target=_disk, args=(size, group, tmp, q))
        p.start()
        r = q.get()
        p.join()
    gib = 1024**3
    return [
        {"figure": f"{group} {size}^4 BPST start to disk (memmap)", "value": round(r["seconds"], 1), "unit": "s",
         "ratio": None, "reference": f"file {r['file_bytes'] / gib:.2f} GiB"},
        {"figure": f"{group} {size}^4 peak resident memory", "value": round(r["peak_kib"] / 1024**2, 2), "unit": "GiB",
         "ratio": round(r["peak_kib"] * 1024 / (24 * gib), 3), "reference": "limit 24 GiB"},
    ]


def _measure(size: int, group: str) -> dict:
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_one, args=(size, group, q))
    p.start()
    res = q.get()
    p.join()
    return res


def run(quick: bool = False, sizes=None) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference}; ratio = value / goal where a goal exists."""
    sizes = [8] if quick else (sizes or [16, 24, 32])
    rows = []
    per_site = {}
    for group in ("su2", "su3"):
        for size in sizes:
            r = _measure(size, group)
            vol = size**4
            per_site[(group, size)] = r["seconds"] / vol
            goal = 30.0 if (group == "su2" and size == 32) else None
            rows.append(
                {
                    "figure": f"{group} {size}^4 BPST start time",
                    "value": round(r["seconds"], 3),
                    "unit": "s",
                    "ratio": round(r["seconds"] / goal, 3) if goal else None,
                    "reference": "goal <= 30 s (32^4 SU(2))" if goal else "",
                }
            )
            total = r["out_bytes"] + 1024 * max(r["extra_kib"], 0)
            rows.append(
                {
                    "figure": f"{group} {size}^4 peak memory / output array",
                    "value": round(total / r["out_bytes"], 3),
                    "unit": "x",
                    "ratio": round(total / r["out_bytes"] / 1.5, 3),
                    "reference": "goal <= 1.5x the output (extra resident memory beyond it)",
                }
            )
        smallest = min(sizes)
        for size in sizes:
            if size != smallest:
                rows.append(
                    {
                        "figure": f"{group} time per site {size}^4 / {smallest}^4",
                        "value": round(per_site[(group, size)] / per_site[(group, smallest)], 3),
                        "unit": "x",
                        "ratio": None,
                        "reference": "1.0 for cost linear in volume",
                    }
                )
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="8^4 only")
    ap.add_argument("--sizes", type=int, nargs="*", default=None)
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    ap.add_argument("--disk", type=int, default=None, metavar="L",
                    help="only write an L^4 SU(3) start to a memmap on disk (e.g. 64) and report time and memory")
    args = ap.parse_args(argv)
    rows = disk_start(args.disk) if args.disk else run(args.quick, args.sizes)
    from benchmarks.run import print_rows

    print_rows(rows, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
