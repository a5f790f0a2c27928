"""Instanton-anti-instanton ensembles: the time of a lattice start and what the lattice charges say.

A random torus ensemble (`instantonkit.ansatz.mixtures.random_mixture`: 4 instantons and 4
anti-instantons, sizes uniform in [0.6, 0.9], uniform centres in the box of side 8, Haar orientations,
seed 0) is put on an L^4 periodic SU(2) lattice covering the torus (L = 16: a = 0.5, rho / a = 1.2 .. 1.8)
and timed from the call to the links, compilation included (what a user waits for; goal 30 s for
16^4).  Then the clover and the 1x1 + 2x2 improved charge of the start beside the construction's count
n+ - n- = 0, which is also the field's own integrated charge (exactly, see the module docstring of
`instantonkit.ansatz.mixtures`).  Usage: ``python benchmarks/bench_mixtures.py [--quick]``.

Quick mode: the same on 12^4 (a = 2/3); the 16^4 goal is the full run's.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

GOAL_S = 30.0


def run(quick: bool = False, size=None, group: str = "su2") -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} (see the module docstring).

    size: L of the lattice (default 16; quick 12); group: 'su2' or 'su3' (an embedding of the SU(2) links).
    """
    import numpy as np

    import instantonkit as ik

    n = int(size or (12 if quick else 16))
    field = ik.random_mixture(4, 4, (8.0,) * 4, sizes=(0.6, 0.9), seed=0, overlap="ignore")
    a, origin = field.lattice_geometry((n,) * 4)
    cpu0, t0 = time.process_time(), time.perf_counter()
    start = ik.lattice_start(field, (n,) * 4, a, origin=origin, group=group)
    links = np.asarray(start.links)
    wall, cpu = time.perf_counter() - t0, time.process_time() - cpu0
    label = f"{n}^4 {group.upper()} start of 4 I + 4 A (torus, a = {a:.3g})"
    goal = "goal 30 s at 16^4" + ("" if n == 16 else f"; this run {n}^4")
    clover = float(ik.clover_charge(links))
    improved = float(ik.improved_charge(links))
    return [
        {"figure": label + ", wall", "value": wall, "unit": "s", "ratio": wall / GOAL_S, "reference": goal},
        {"figure": label + ", CPU", "value": cpu, "unit": "s", "ratio": cpu / GOAL_S, "reference": goal},
        {
            "figure": "clover charge of the start",
            "value": clover,
            "unit": "",
            "ratio": float("nan"),
            "reference": f"count n+ - n- = {field.charge} (= the field's integrated Q)",
        },
        {
            "figure": "1x1 + 2x2 improved charge of the start",
            "value": improved,
            "unit": "",
            "ratio": float("nan"),
            "reference": f"count n+ - n- = {field.charge}",
        },
    ]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="12^4 instead of 16^4")
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = ap.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(args.quick), args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
