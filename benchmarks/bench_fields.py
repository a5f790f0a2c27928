"""Throughput and compile latency of the field layer (instantonkit.fields on ADHM data).

Figures (one row each, see :func:`run`):

* points per second of the action density and of the field strength for SU(2) and Sp(2) ADHM data
  with k = 1, 2, 4, 8, by the closed forms (``method="auto"``) and by autodiff
  (``method="autodiff"``); the autodiff rows carry the cost ratio t_autodiff / t_closed;
* the time of the k = 1 ADHM action density relative to plain numpy evaluating the BPST formula
  48 rho^4 / (|x - a|^2 + rho^2)^4 on the same points (goal: ratio <= 5);
* first-call latency of each kernel: the first call on 64 points, i.e. trace + compile (goal: <= 3 s).

Usage: ``python benchmarks/bench_fields.py [--quick] [--points N] [--ks 1 2 4 8] [--ranks 1 2]``;
10^6 points by default (long: about 10^3 s alone for k = 8 with autodiff), 10^4 with ``--quick``.
Figures vary with machine load; run on an idle machine.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

import instantonkit as ik
from instantonkit import fields

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

FULL_POINTS = 1_000_000
QUICK_POINTS = 10_000
KS = (1, 2, 4, 8)
RANKS = (1, 2)
LATENCY_POINTS = 64
COMPILE_GOAL_S = 3.0
NUMPY_GOAL_RATIO = 5.0

QUANTITIES = (("action_density", "action density"), ("field_strength", "field strength"))
METHODS = (("auto", "closed"), ("autodiff", "autodiff"))


def _data(k: int, rank: int) -> ik.ADHMData:
    """Benchmark configuration: a BPST (embedded in Sp(n) for rank > 1) for k = 1, random data otherwise."""
    if k == 1:
        base = ik.bpst((0.1, -0.2, 0.3, 0.0), 1.0)
        return base if rank == 1 else ik.embed_sp(base, rank)
    return ik.random_adhm(k, rank, seed=100 + 10 * k + rank)


def _points(data: ik.ADHMData, n: int, seed: int = 0) -> np.ndarray:
    """n points ~ centre + scale * N(0, 1) around the configuration; (n, 4) float64."""
    centre, scale = data.hint()
    return centre + scale * np.random.default_rng(seed).normal(size=(n, 4))


def _timed(fn, repeats: int = 1) -> float:
    """Best wall time of ``repeats`` calls, in seconds."""
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def _row(figure, value, unit, ratio=None, reference=None) -> dict:
    return {"figure": figure, "value": float(value), "unit": unit, "ratio": ratio, "reference": reference}


def _throughput_rows(data, label: str, pts: np.ndarray, repeats: int) -> list[dict]:
    """First-call latency and points/s for each (quantity, method) on one configuration.

    The latency is the wall time of the very first call on LATENCY_POINTS points (trace, compile and
    a negligible run), as a user meets it; the full point set is then warmed up once (its chunk shape
    compiles separately) before it is timed.
    """
    rows = []
    small = pts[:LATENCY_POINTS]
    for quantity, qname in QUANTITIES:
        t_closed = None
        for method, mname in METHODS:
            fn = lambda p: fields.evaluate(data, p, quantity, method=method)  # noqa: E731
            first = _timed(lambda: fn(small))
            rows.append(
                _row(
                    f"first-call latency, {qname}, {mname}, {label}",
                    first,
                    "s",
                    first / COMPILE_GOAL_S,
                    f"t / goal, goal <= {COMPILE_GOAL_S:g} s",
                )
            )
            fn(pts[: fields.DEFAULT_CHUNK])  # compile the chunk shape of the full run
            t = _timed(lambda: fn(pts), repeats)
            if method == "auto":
                t_closed = t
                rows.append(_row(f"{qname}, {mname}, {label}", len(pts) / t, "points/s"))
            else:
                rows.append(
                    _row(f"{qname}, {mname}, {label}", len(pts) / t, "points/s", t / t_closed, "t_autodiff / t_closed")
                )
    return rows


def _numpy_rows(n: int, repeats: int) -> list[dict]:
    """k = 1 ADHM action density against numpy's BPST formula on the same points."""
    center, rho = np.array([0.4, 0.3, -0.2, 0.1]), 1.5
    data = ik.bpst(center, rho)
    pts = _points(data, n, seed=1)

    def plain():
        # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85.
        return 48.0 * rho**4 / (np.sum((pts - center) ** 2, axis=-1) + rho**2) ** 4

    ik.action_density(data, pts)  # compile
    t_adhm = _timed(lambda: ik.action_density(data, pts), repeats)
    t_np = _timed(plain, max(repeats, 3))
    err = float(np.max(np.abs(ik.action_density(data, pts) / plain() - 1.0)))
    return [
        _row("numpy BPST formula", n / t_np, "points/s"),
        _row(
            "ADHM k=1 action density vs numpy",
            n / t_adhm,
            "points/s",
            t_adhm / t_np,
            f"t_adhm / t_numpy, goal <= {NUMPY_GOAL_RATIO:g} (max rel. difference {err:.1e})",
        ),
    ]


def run(quick: bool = False, points: int | None = None, ks=KS, ranks=RANKS) -> list[dict]:
    """Run the field benchmarks; returns rows {figure, value, unit, ratio, reference}.

    quick: 10^4 points instead of 10^6 (``points`` overrides both); ks, ranks: the configurations
    (k instantons of Sp(rank), rank 1 = SU(2)).  ``ratio`` is None where no comparison applies;
    ``reference`` names what the ratio compares, or the goal.
    """
    n = int(points) if points is not None else (QUICK_POINTS if quick else FULL_POINTS)
    if n < 1:
        raise ValueError(f"points must be >= 1; found {n}")
    repeats = 3 if n <= QUICK_POINTS else 1
    rows = []
    for rank in ranks:
        for k in ks:
            data = _data(int(k), int(rank))
            label = f"{data.group} k={k}"
            rows += _throughput_rows(data, label, _points(data, n), repeats)
    return rows + _numpy_rows(n, repeats)


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Field-layer throughput and compile latency.")
    parser.add_argument("--quick", action="store_true", help=f"{QUICK_POINTS} points instead of {FULL_POINTS}")
    parser.add_argument("--points", type=int, default=None, help="number of points (overrides --quick)")
    parser.add_argument("--ks", type=int, nargs="+", default=list(KS), help="instanton numbers k")
    parser.add_argument("--ranks", type=int, nargs="+", default=list(RANKS), help="n of Sp(n); 1 is SU(2)")
    args = parser.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(quick=args.quick, points=args.points, ks=args.ks, ranks=args.ranks))


if __name__ == "__main__":
    main()
