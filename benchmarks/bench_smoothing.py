"""Smoothing of lattice starts: time per flow step and cooling sweep, and what a BPST start becomes.

Timings (compilation excluded): one RK3 step of the Wilson flow, one Wilson cooling sweep and one
eps = -1 cooling sweep (8-colour, 2x2 staples) on L^4 SU(2) and SU(3) lattices (L = 16, quick 8).
Physics: S_W / 8 pi^2, the clover and the improved charge and the size rho/a along the Wilson flow of a
periodic 16^4 rho/a = 3 singular-gauge start (which carries the boundary jump of issue 14: S_W / 8 pi^2
= 1.14 at t = 0), and rho/a after Wilson (eps = 1) and over-improved (eps = -1) cooling of a periodic
12^4 rho/a = 2 start.  Usage: ``python benchmarks/bench_smoothing.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

EIGHT_PI2 = 8.0 * 3.141592653589793**2


def _timed(fn, u, repeat: int) -> float:
    """Seconds per call of fn(u) -> jax array, after one warm-up call (compilation)."""
    fn(u).block_until_ready()
    t0 = time.perf_counter()
    v = u
    for _ in range(repeat):
        v = fn(v)
    v.block_until_ready()
    return (time.perf_counter() - t0) / repeat


def _timing_rows(size: int, repeat: int, groups) -> list[dict]:
    import jax.numpy as jnp

    import instantonkit as ik
    from instantonkit import lattice as lat
    from instantonkit import smoothing as sm

    rows = []
    for group in groups:
        u = jnp.asarray(lat.lattice_links(ik.bpst(size=size / 5), (size,) * 4, 1.0, group=group))
        colours2 = jnp.asarray(sm._colours(u.shape[:4], False))
        colours8 = jnp.asarray(sm._colours(u.shape[:4], True))
        c1, c2 = sm.improved_coefficients(-1.0)
        cases = [
            ("Wilson flow RK3 step (step 0.02)", lambda v: sm._rk3_step(v, 0.02, 1.0, 0.0, False)),
            ("Wilson cooling sweep", lambda v, colours2=colours2: sm._cool_sweep(v, colours2, 1.0, 0.0, False, 2, 3)),
            (
                "eps = -1 cooling sweep (8 colours)",
                lambda v, colours8=colours8, c1=c1, c2=c2: sm._cool_sweep(v, colours8, c1, c2, True, 8, 3),
            ),
        ]
        for name, fn in cases:
            sec = _timed(fn, u, repeat)
            rows.append(
                {
                    "figure": f"{group} {size}^4 {name}",
                    "value": round(sec, 4),
                    "unit": "s",
                    "ratio": None,
                    "reference": f"per {size**4 * 4} links; hits = 3 for SU(3)"
                    if "cooling" in name
                    else f"per {size**4 * 4} links",
                }
            )
    return rows


def _flow_rows(size: int, times) -> list[dict]:
    import numpy as np

    import instantonkit as ik
    from instantonkit import lattice as lat
    from instantonkit import smoothing as sm

    rho = 3.0
    u = lat.lattice_links(ik.bpst(size=rho), (size,) * 4, 1.0)
    _, rec = sm.wilson_flow(u, max(times), 0.02, every=5)
    rows = []
    for t in times:
        i = int(np.argmin(np.abs(rec.time - t)))
        tag = f"Wilson flow of {size}^4 rho/a = 3 start, t = {rec.time[i]:.2f}"
        rows += [
            {
                "figure": f"{tag}: S_W / 8 pi^2",
                "value": round(float(rec.wilson_action[i] / EIGHT_PI2), 4),
                "unit": "",
                "ratio": None,
                "reference": "open-box lattice value 1 - (1/5)(a/rho)^2 = 0.978",
            },
            {
                "figure": f"{tag}: clover Q",
                "value": round(float(rec.clover_charge[i]), 4),
                "unit": "",
                "ratio": None,
                "reference": "1 - 0.8 (a/rho)^2 ~ 0.91 (a^2 error of the operator)",
            },
            {
                "figure": f"{tag}: improved Q",
                "value": round(float(rec.improved_charge[i]), 4),
                "unit": "",
                "ratio": None,
                "reference": "1 (charge of the start)",
            },
            {
                "figure": f"{tag}: size rho/a",
                "value": round(float(rec.size[i]), 3),
                "unit": "a",
                "ratio": None,
                "reference": "moment estimate; start rho/a = 3",
            },
        ]
    return rows


def _cooling_rows(size: int, sweeps: int) -> list[dict]:
    import numpy as np

    import instantonkit as ik
    from instantonkit import lattice as lat
    from instantonkit import smoothing as sm

    u = lat.lattice_links(ik.bpst(size=2.0), (size,) * 4, 1.0)
    rows = []
    early = min(8, sweeps)
    for eps in (1.0, -1.0):
        _, rec = sm.cool(u, sweeps, eps=eps)
        tag = f"eps = {eps:+.0f} cooling of {size}^4 rho/a = 2 start"
        rows.append(
            {
                "figure": f"{tag}: rho/a after {early} sweeps",
                "value": round(float(rec.size[early]), 3),
                "unit": "a",
                "ratio": round(float(rec.size[early] / rec.size[0]), 3),
                "reference": f"ratio to the start's estimate {rec.size[0]:.3f}",
            }
        )
        lost = np.nonzero(np.abs(rec.clover_charge) < 0.5)[0]
        rows.append(
            {
                "figure": f"{tag}: sweeps until clover |Q| < 0.5",
                "value": int(rec.time[lost[0]]) if lost.size else float("nan"),
                "unit": "sweeps",
                "ratio": None,
                "reference": f"'-': Q kept for all {sweeps} sweeps",
            }
        )
        rows.append(
            {
                "figure": f"{tag}: after {sweeps} sweeps S(eps) / 8 pi^2",
                "value": round(float(rec.action[-1] / EIGHT_PI2), 4),
                "unit": "",
                "ratio": None,
                "reference": f"rho/a {rec.size[-1]:.3f}, clover Q {rec.clover_charge[-1]:.3f}, improved Q {rec.improved_charge[-1]:.3f}",
            }
        )
    return rows


def run(quick: bool = False, size=None, parts=("timing", "flow", "cooling"), groups=("su2", "su3")) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} (see the module docstring)."""
    rows = []
    if "timing" in parts:
        rows += _timing_rows(size or (8 if quick else 16), 2 if quick else 3, groups)
    if "flow" in parts:
        rows += _flow_rows(16, (0.0, 1.0) if quick else (0.0, 0.5, 1.0, 2.0, 4.0))
    if "cooling" in parts:
        rows += _cooling_rows(12, 8 if quick else 30)
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="8^4 timings, shorter flow and cooling")
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = ap.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(args.quick), args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
