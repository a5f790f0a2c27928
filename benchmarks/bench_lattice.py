"""Time and peak memory of lattice starts (BPST, closed-form links) for SU(2) and SU(3).

Goals: a 32^4 SU(2) BPST start in <= 30 s on two cores, cost linear in the volume, peak
memory <= 1.5x the output array.  Usage: ``python benchmarks/bench_lattice.py [--quick] [--sizes 16 24 32]``.
Link-cost rows (`link_costs`): charge-2 Magnus links against closed-form BPST links per link,
the 24^4 SU(3) charge-2 start, bpst_field against ADHM k = 1 links.  Quick mode uses 8^4 only (12^4 for the charge-2 start); ``--periodic [--quick] [--charge-two]`` measures the periodic starts
(wrapped against windowed boundary, the window's excess against the box); ``--disk 64`` writes the 64^4 SU(3) start to a memmap on disk.  Peak memory is the growth of the resident set (resource.getrusage) over
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
    from instantonkit.lattice import starts as lat

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
    from instantonkit.lattice import starts as lat

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
    """A BPST start written straight to a .npy memmap on disk (goal: 64^4 SU(3) within 24 GiB)."""
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
        {
            "figure": f"{group} {size}^4 BPST start to disk (memmap)",
            "value": round(r["seconds"], 1),
            "unit": "s",
            "ratio": None,
            "reference": f"file {r['file_bytes'] / gib:.2f} GiB",
        },
        {
            "figure": f"{group} {size}^4 peak resident memory",
            "value": round(r["peak_kib"] / 1024**2, 2),
            "unit": "GiB",
            "ratio": round(r["peak_kib"] * 1024 / (24 * gib), 3),
            "reference": "limit 24 GiB",
        },
    ]


def _measure(size: int, group: str) -> dict:
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_one, args=(size, group, q))
    p.start()
    res = q.get()
    p.join()
    return res


#: The rows of :func:`link_costs` computed in this process, per ``quick`` (for ``reuse``).
_LINK_COSTS: dict = {}


def link_costs(quick: bool = False, reuse: bool = False) -> list[dict]:
    """Link-cost rows, measured side by side in this process (compilation outside the timings):
    per-link cost of a charge-2 Magnus start against a closed-form BPST start, the README's charge-2
    SU(3) start (24^4, 12^4 in quick mode; periodic, boundary figures included) and ``bpst_field``
    links against ADHM k = 1 links of the same instanton.

    reuse: return the rows this process already measured with the same ``quick`` (copies), if any,
    instead of measuring again (the quick run of all benchmarks shows them twice but times them once)."""
    if reuse and quick in _LINK_COSTS:
        return [dict(r) for r in _LINK_COSTS[quick]]
    import warnings

    import instantonkit as ik
    from instantonkit.lattice import starts as lat

    two = ik.multi_instanton(centers=[[-3, 0, 0, 0], [3, 0.5, 0, 0]], sizes=[1.0, 1.0])
    one, field = ik.bpst(size=1.0), ik.bpst_field(size=1.0, gauge="singular")
    size, start = (8, 12) if quick else (16, 24)

    def timed(f, shape, boundary="open"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", lat.BoundaryActionWarning)
            lat.lattice_start(f, shape[:3] + (1,), 0.5, group="su3", rtol=1e-8, boundary=boundary)  # compile
            t0 = time.perf_counter()
            rep = lat.lattice_start(f, shape, 0.5, group="su3", rtol=1e-8, boundary=boundary).report
            return time.perf_counter() - t0, rep.potential_evaluations

    links = 4 * size**4
    (t_two, evals), (t_one, _), (t_field, _) = (timed(f, (size,) * 4) for f in (two, one, field))
    t_start, _ = timed(two, (start,) * 4, boundary="periodic")
    per_link = evals / links  # potential evaluations per Magnus link; a closed link is one closed-form evaluation
    row = lambda figure, value, unit, ratio, ref: {  # noqa: E731 - one row dict
        "figure": figure,
        "value": round(value, 3),
        "unit": unit,
        "ratio": ratio,
        "reference": ref,
    }
    rows = [
        row(
            f"charge-2 Magnus links per link / closed-form BPST, {size}^4 su3",
            t_two / t_one,
            "x",
            round(t_two / t_one / 5.0, 3),
            f"goal <= 5x; {1e6 * t_one / links:.2f} us/link closed, same run",
        ),
        row(
            f"charge-2 Magnus links: potential evaluations per link, {size}^4 su3",
            per_link,
            "",
            round(t_two / t_one / per_link, 3),
            "ratio: start time per potential evaluation / per closed-form link (an error-estimated link "
            "needs >= 9 evaluations: one Magnus step against two)",
        ),
        row(
            f"charge-2 su3 start {start}^4 (periodic, rtol 1e-8)",
            t_start,
            "s",
            round(t_start * (24 / start) ** 4 / 15.0, 3),
            "goal <= 15 s at 24^4"
            + (
                ""
                if start == 24
                else f"; quick: ratio from the {start}^4 time x {(24 / start) ** 4:g} (linear in volume)"
            ),
        ),
        row(
            f"bpst_field links / ADHM k = 1 links, {size}^4 su3",
            t_field / t_one,
            "x",
            round(t_field / t_one, 3),
            "goal 1.0 (equal cost), same run",
        ),
    ]
    _LINK_COSTS[quick] = [dict(r) for r in rows]
    return rows


def run(quick: bool = False, sizes=None) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference}; ratio = value / goal where a goal exists."""
    rows = link_costs(quick)
    sizes = [8] if quick else (sizes or [16, 24, 32])
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


def periodic_figures(quick: bool = False, charge_two: bool = False) -> list[dict]:
    """Periodic-start rows: boundary action of the wrapped periodic start against boundary='window', the window's
    action excess against the box, and (``charge_two``) the README's 24^4 charge-2 start both ways (minutes)."""
    import warnings

    import numpy as np

    import instantonkit as ik
    from instantonkit.lattice import references
    from instantonkit.lattice import starts as lat

    e = 8 * np.pi**2
    rows = []

    def row(figure, value, reference=""):
        rows.append(
            {"figure": figure, "value": round(float(value), 5), "unit": "", "ratio": None, "reference": reference}
        )

    bpst = ik.bpst_field(size=1.0, gauge="singular")
    for box in (4.0, 6.0) if quick else (4.0, 6.0, 8.0, 12.0):
        ref = references.continuum_reference(bpst, (16,) * 4, box / 16, boundary="window", nodes=6)
        row(
            f"window excess S_w/8pi^2 - 1, box L = {box:g} rho",
            ref["excess_fraction"],
            "falls ~ (rho/L)^4 (instantonkit.ansatz.periodic)",
        )
    starts = [("shortest call bpst() 16^4, rho/a = 3", ik.bpst(), (16,) * 4, 1 / 3, 1e-10, "su2")]
    if charge_two:
        data = ik.multi_instanton(centers=[[-3, 0, 0, 0], [3, 0.5, 0, 0]], sizes=[1.0, 1.0])
        starts.append(("README charge-2 24^4 su3, rho/a = 2", data, (24,) * 4, 0.5, 1e-8, "su3"))
    for label, field, shape, a, rtol, group in starts:
        for boundary in ("periodic", "window"):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", lat.BoundaryActionWarning)
                st = lat.lattice_start(field, shape, a, boundary=boundary, rtol=rtol, group=group)
            ref = references.continuum_reference(field, shape, a, boundary=boundary, nodes=6)
            row(
                f"{label}, {boundary}: S_W / 8pi^2",
                lat.wilson_action(st.links) / e,
                f"expected {ref['expected_fraction']:.4f} (continuum_reference)",
            )
            row(f"{label}, {boundary}: clover Q", lat.clover_charge(st.links))
            row(
                f"{label}, {boundary}: boundary action / 8pi^2",
                st.report.boundary_action_fraction,
                "warning above 0.01",
            )
            row(f"{label}, {boundary}: seconds", st.report.seconds)
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="8^4 only")
    ap.add_argument("--sizes", type=int, nargs="*", default=None)
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    ap.add_argument(
        "--disk",
        type=int,
        default=None,
        metavar="L",
        help="only write an L^4 SU(3) start to a memmap on disk (e.g. 64) and report time and memory",
    )
    ap.add_argument(
        "--periodic",
        action="store_true",
        help="only the periodic-start figures (window excess, boundary action)",
    )
    ap.add_argument(
        "--charge-two", action="store_true", help="with --periodic: also the README's 24^4 charge-2 start (minutes)"
    )
    args = ap.parse_args(argv)
    if args.periodic:
        rows = periodic_figures(args.quick, args.charge_two)
    else:
        rows = disk_start(args.disk) if args.disk else run(args.quick, args.sizes)
    from benchmarks.run import print_rows

    print_rows(rows, args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
