"""Throughput of caloron densities and the time of a caloron's charge per period.

Rows (see :func:`run`), each with its ratio to a goal or a reference measured in the same run:

* points per second of the closed-form action density s = -1/2 box box log psi of the Kraan-van Baal
  SU(2) caloron (``HolonomyCaloronField``, omega = 0.25) through ``fields.evaluate``: ratio to the
  goal of 10^6 points/s;
* the same density by autodiff of the potential (``method="autodiff"``) on fewer points: the closed
  form's speed-up over it;
* first call (trace + compile + run) of the closed-form density;
* the charge per period, ``total_charge(field, rtol=0, atol=1e-11)``: seconds, compiled and with the
  first call's compilation, and |Q - 1|, ratio to the goal of 10 s;
* the SU(3) caloron's closed-form density (``SUNCaloronField``), points per second;
* the SU(3) caloron's potential (the Nahm transform, ``fields.potential``), points per second, and its
  first call (trace + compile + run).

Usage: ``python benchmarks/bench_calorons.py [--quick]``; 10^6 points by default, 10^5 with ``--quick``.
The machine is often shared: compare the ratios, not the absolute figures.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

import instantonkit as ik
from instantonkit.engine import fields

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from benchmarks.run import best_time  # noqa: E402

FULL_POINTS, QUICK_POINTS = 1_000_000, 100_000
AUTODIFF_POINTS_FULL, AUTODIFF_POINTS_QUICK = 20_000, 4_000
POTENTIAL_POINTS_FULL, POTENTIAL_POINTS_QUICK = 100_000, 20_000
DENSITY_GOAL = 1e6  # points/s
CHARGE_GOAL_S = 10.0


def _field():
    return ik.caloron(0.9, 1.3, (0.1, -0.2, 0.3, 0.4), holonomy=0.25, axis=(1.0, 0.5, -0.2))


def _points(n: int) -> np.ndarray:
    return np.random.default_rng(0).normal(scale=2.0, size=(n, 4))


def run(quick: bool = False, points: int | None = None) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} (see the module docstring)."""
    n = points or (QUICK_POINTS if quick else FULL_POINTS)
    field = _field()
    pts = _points(n)
    t0 = time.perf_counter()
    fields.evaluate(field, pts[:64], "action_density")
    first = time.perf_counter() - t0
    fields.evaluate(field, pts, "action_density")
    t_closed = best_time(lambda: fields.evaluate(field, pts, "action_density"), 2)
    rate = n / t_closed
    m = min(n, AUTODIFF_POINTS_QUICK if quick else AUTODIFF_POINTS_FULL)
    fields.evaluate(field, pts[:m], "action_density", method="autodiff")
    t_auto = best_time(lambda: fields.evaluate(field, pts[:m], "action_density", method="autodiff"), 1)
    rows = [
        {
            "figure": "SU(2) caloron s, closed form (omega = 0.25)",
            "value": rate,
            "unit": "points/s",
            "ratio": rate / DENSITY_GOAL,
            "reference": f"goal {DENSITY_GOAL:.0e} points/s; {n:,} points",
        },
        {
            "figure": "SU(2) caloron s, autodiff of the potential",
            "value": m / t_auto,
            "unit": "points/s",
            "ratio": rate / (m / t_auto),
            "reference": "ratio: closed form's speed-up",
        },
        {"figure": "SU(2) caloron s, first call (closed form)", "value": first, "unit": "s", "ratio": None},
    ]
    t0 = time.perf_counter()
    q = ik.total_charge(field, rtol=0.0, atol=1e-11)
    t_q = time.perf_counter() - t0
    t0 = time.perf_counter()
    ik.total_charge(_field(), rtol=0.0, atol=1e-11)
    t_q2 = time.perf_counter() - t0
    rows.append(
        {
            "figure": "SU(2) caloron Q per period to 1e-11 (compiled)",
            "value": t_q2,
            "unit": "s",
            "ratio": t_q2 / CHARGE_GOAL_S,
            "reference": f"goal <= {CHARGE_GOAL_S:g} s",
        }
    )
    rows.append(
        {
            "figure": "SU(2) caloron Q per period to 1e-11 (first call included)",
            "value": t_q,
            "unit": "s",
            "ratio": t_q / CHARGE_GOAL_S,
            "reference": f"goal <= {CHARGE_GOAL_S:g} s; |Q - 1| = {abs(float(q.value) - 1.0):.1e}",
        }
    )
    su3 = ik.caloron(0.9, 1.3, holonomy=(-0.3, 0.1, 0.2))
    fields.evaluate(su3, pts, "action_density")
    t3 = best_time(lambda: fields.evaluate(su3, pts, "action_density"), 1)
    rows.append(
        {"figure": "SU(3) caloron s, closed form", "value": n / t3, "unit": "points/s", "ratio": (n / t3) / rate}
    )
    rows[-1]["reference"] = "ratio: to the SU(2) closed form"
    m3 = min(n, POTENTIAL_POINTS_QUICK if quick else POTENTIAL_POINTS_FULL)
    t0 = time.perf_counter()
    fields.potential(su3, pts[:64])
    first3 = time.perf_counter() - t0
    fields.potential(su3, pts[:m3])
    tp = best_time(lambda: fields.potential(su3, pts[:m3]), 1)
    rows.append(
        {
            "figure": "SU(3) caloron potential (Nahm transform)",
            "value": m3 / tp,
            "unit": "points/s",
            "ratio": (m3 / tp) / (n / t3),
            "reference": f"ratio: to the SU(3) closed-form density; {m3:,} points",
        }
    )
    rows.append({"figure": "SU(3) caloron potential, first call", "value": first3, "unit": "s", "ratio": None})
    return rows


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--points", type=int, default=None)
    args = parser.parse_args(argv)
    for row in run(args.quick, args.points):
        ratio = "" if row.get("ratio") is None else f"  ratio {row['ratio']:.3g}"
        print(f"{row['figure']}: {row['value']:.4g} {row['unit']}{ratio}  {row.get('reference', '')}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
