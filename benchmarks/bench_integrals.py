"""The integrals at their default tolerance: total_charge of random ADHM data, k = 1..4 at 1e-10, k = 8 at 1e-8.

Rows per charge k: time (the first call for this k in the process, compilation included; the ratio to
the volume rule and the overhead use a second, compiled call), points,
|Q - k|, the reported error and its ratio to the true error (must be >= 1), and the integrator's
overhead: its time over the time of evaluating the same number of points of the density alone, measured
in the same run (so the figure does not depend on the machine's load the way seconds do).  The default
route for ADHM data is Osborn's flux (instantonkit.integrals.flux); each case also runs the adaptive volume rule
(``route='volume'``, the reference) on the same budget, and the time, points and |Q - k| rows give the
ratios to it.  ``run(quick)`` returns rows {figure, value, unit, ratio, reference}; ``quick`` caps every
integral at 300,000 points and runs k = 1 and 4 only.  Q = k for ADHM data (Atiyah, Hitchin, Drinfeld, Manin,
Phys. Lett. A 65 (1978) 185).
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

if __package__ in (None, ""):  # run as a script: make the repository importable for benchmarks.run
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import instantonkit as ik
from instantonkit.engine import fields
from instantonkit.integrals import drivers as integrals

#: (k, tolerance) of the rows: the goals (k <= 4 to 1e-10 in <= 10 s, k = 8 to 1e-8 in <= 60 s).
CASES = ((1, 1e-10, 10.0), (2, 1e-10, 10.0), (3, 1e-10, 10.0), (4, 1e-10, 10.0), (8, 1e-8, 60.0))
#: Charges of the quick run (each k compiles its own kernels, which is most of a quick case's time).
QUICK_KS = (1, 4)
#: Budget of the quick run (points per integral).
QUICK_POINTS = 300_000
#: Budget for k = 8 in the full run: beyond it a loaded two-core machine takes many minutes.
K8_POINTS = 1_000_000


def _rate(data, n: int = 4 * integrals.ENGINE_CHUNK) -> float:
    """Points per second of the charge density alone (compiled, in ENGINE_CHUNK batches)."""
    pts = np.random.default_rng(0).normal(scale=2.0, size=(n, 4))
    fields.evaluate(data, pts[: integrals.ENGINE_CHUNK], "charge_density", chunk_size=integrals.ENGINE_CHUNK)
    t = time.perf_counter()
    fields.evaluate(data, pts, "charge_density", chunk_size=integrals.ENGINE_CHUNK)
    return n / (time.perf_counter() - t)


def _charge(data, tol, budget, route="auto"):
    t = time.perf_counter()
    res = integrals.total_charge(data, rtol=tol, atol=tol, max_points=budget, route=route)
    return res, time.perf_counter() - t


def run(quick: bool = False, ks=None, reference: bool = True) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} for total_charge of random ADHM data (seed = k).

    Each case runs twice on the same budget: by the default route and by the volume rule, the reference
    (``reference=False`` skips those runs and the ratios to them).
    """
    rows = []
    for k, tol, goal in CASES:
        if (ks is not None and k not in ks) or (ks is None and quick and k not in QUICK_KS):
            continue
        data = ik.random_adhm(k, seed=k)
        budget = QUICK_POINTS if quick else (K8_POINTS if k == 8 else integrals.DEFAULT_MAX_POINTS)
        rate = _rate(data)
        res, dt = _charge(data, tol, budget)
        _, dt_warm = _charge(data, tol, budget)  # compiled: the same work again
        ref = None
        if reference:
            ref, dt_ref = _charge(data, tol, budget, route="volume")
        err = abs(res.value - k)
        tag = f"total_charge, random ADHM k = {k} at {tol:g}"
        state = "converged" if res.converged else "NOT converged"
        if ref is None:
            ref_note, ratio_pts, ratio_err, ratio_t = "", None, None, None
        else:
            err_ref = abs(ref.value - k)
            ref_note = (
                f"; volume rule: {ref.evaluations:,} points, |Q - k| = {err_ref:.1e}, error {ref.error:.1e}, "
                f"{'converged' if ref.converged else 'NOT converged'}, {dt_ref:.1f} s"
            )
            ratio_pts = res.evaluations / max(ref.evaluations, 1)
            ratio_err = err / max(err_ref, 1e-300)
            ratio_t = dt_warm / dt_ref
        rows += [
            dict(
                figure=f"{tag}: time",
                value=dt,
                unit="s",
                ratio=dt / goal,
                reference=f"ratio to the goal {goal:g} s; {state}; route {res.route}",
            ),
            dict(
                figure=f"{tag}: time compiled / volume rule's time",
                value=ratio_t,
                unit="x",
                ratio=ratio_t,
                reference=f"{dt_warm:.2f} s on a second call; volume rule (its density compiled by then) on the same budget"
                + ("" if ref is None else f" {dt_ref:.1f} s"),
            ),
            dict(
                figure=f"{tag}: points",
                value=res.evaluations,
                unit="points",
                ratio=ratio_pts,
                reference=f"ratio to the volume rule on the same budget {budget:,}" + ref_note,
            ),
            dict(
                figure=f"{tag}: |Q - k|",
                value=err,
                unit="",
                ratio=ratio_err,
                reference=f"ratio to the volume rule; goal {tol:g} (Q = k, Atiyah, Hitchin, Drinfeld, Manin 1978)",
            ),
            dict(
                figure=f"{tag}: reported error",
                value=res.error,
                unit="",
                ratio=res.error / max(err, 1e-300),
                reference="ratio = reported / true error, must be >= 1",
            ),
            dict(
                figure=f"{tag}: integrator overhead",
                value=dt_warm * rate / max(res.evaluations, 1),
                unit="x",
                ratio=None,
                reference=f"second call's time / (points / density rate {rate:.3g} points/s, same run)",
            ),
        ]
    return rows


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="300,000 points per integral, k = 1 and 4 only")
    p.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = p.parse_args(argv)
    from benchmarks.run import print_rows  # deferred as in the other scripts

    print_rows(run(args.quick), args.json)


if __name__ == "__main__":
    main()
