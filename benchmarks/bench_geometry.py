"""Cost of the moduli-space metric (instantonkit.adhm.metric) by its two routes.

Rows (see :func:`run`):

* the algebraic metric of random charge-4 SU(2) data in the standard chart (32 x 32), a call after the
  first (goal <= 1 s; ratio: time / goal), and its first call (tracing and compilation included);
* the integral route for random charge-2 data (16 x 16) at ``rtol`` 1e-8 (goal <= 60 s; ratio:
  time / goal), with its largest difference to the algebraic route and its error estimate; quick mode
  integrates to 1e-6 instead (the goal then is an indication only).

Usage: ``python benchmarks/bench_geometry.py [--quick]``.  The machine is often shared: the wall time
grows with the load.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import numpy as np

import instantonkit as ik
from benchmarks.run import best_time

ALGEBRAIC_GOAL_S = 1.0
INTEGRAL_GOAL_S = 60.0


def _row(figure, value, unit, ratio, reference):
    return dict(figure=figure, value=value, unit=unit, ratio=ratio, reference=reference)


def run(quick: bool = False, k_algebraic: int = 4, k_integral: int = 2, rtol: float | None = None) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} (module docstring)."""
    rows = []
    data = ik.random_adhm(k_algebraic, seed=11)
    t0 = time.perf_counter()
    ik.moduli_metric(data)
    first = time.perf_counter() - t0
    again = best_time(lambda: ik.moduli_metric(data), 3)
    rows.append(
        _row(
            f"algebraic metric, k = {k_algebraic} ({8 * k_algebraic} x {8 * k_algebraic})",
            again,
            "s",
            again / ALGEBRAIC_GOAL_S,
            f"goal {ALGEBRAIC_GOAL_S:g} s",
        )
    )
    rows.append(_row(f"algebraic metric, k = {k_algebraic}, first call", first, "s", first / ALGEBRAIC_GOAL_S, "goal"))
    tol = rtol if rtol is not None else (1e-6 if quick else 1e-8)
    two = ik.random_adhm(k_integral, seed=3)
    alg = ik.moduli_metric(two).metric
    t0 = time.perf_counter()
    res = ik.moduli_metric(two, route="integral", rtol=tol)
    took = time.perf_counter() - t0
    diff = float(np.max(np.abs(res.metric - alg)))
    rows.append(
        _row(
            f"integral metric, k = {k_integral}, rtol {tol:g} ({res.evaluations:,} points)",
            took,
            "s",
            took / INTEGRAL_GOAL_S,
            f"goal {INTEGRAL_GOAL_S:g} s (for rtol 1e-8); max |integral - algebraic| {diff:.1e}, estimate {res.error:.1e}",
        )
    )
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    for r in run(args.quick):
        print(f"{r['figure']:<60} {r['value']:10.3g} {r['unit']:<3} ratio {r['ratio']:.3g}  ({r['reference']})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
