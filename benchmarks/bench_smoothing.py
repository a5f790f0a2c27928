"""Smoothing of lattice starts: time per flow step and cooling sweep, and what a BPST start becomes.

Timings (compilation excluded): one RK3 step of the Wilson flow, one Wilson cooling sweep and one
eps = -1 cooling sweep (8-colour, 2x2 staples) on L^4 SU(2) and SU(3) lattices (L = 16, quick 8).
Physics: S_W / 8 pi^2, the clover and the improved charge and the size rho/a along the Wilson flow of a
periodic 16^4 rho/a = 3 singular-gauge start (which carries the periodic boundary jump: S_W / 8 pi^2
= 1.14 at t = 0), and rho/a after Wilson (eps = 1) and over-improved (eps = -1) cooling of a periodic
12^4 rho/a = 2 start.  Usage: ``python benchmarks/bench_smoothing.py [--quick]``.

Quick mode (about 15 s on a quiet two-core machine; compilation is most of it, so it compiles each
kernel once and reuses it): one 12^4 SU(2) rho/a = 2 start serves the timings, a flow to t = 0.5 and
8 cooling sweeps of each kind; SU(3) times only the flow step, on 8^4, as a per-link multiple of the
SU(2) step.  The full run's 16^4 rho/a = 3 flow is the reference for the flow figures.
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


def _timing_rows(size: int, repeat: int, groups, flow_only=(), su2_start=None, per_link=None) -> list[dict]:
    """Seconds per flow step and cooling sweep on ``size``^4 lattices of each group.

    flow_only: groups timed on the flow step alone (quick mode's SU(3)); su2_start: SU(2) links of
    the right shape to time on instead of a new start.  Ratios: per-link time of a cooling sweep over
    the flow step's on the same lattice; for SU(3), its per-link time over SU(2)'s for the same step
    (``per_link``: a dict shared between calls, so a later call can compare with an earlier one's).
    """
    import jax.numpy as jnp

    import instantonkit as ik
    from instantonkit.lattice import smoothing as sm
    from instantonkit.lattice import starts as lat

    rows = []
    per_link = {} if per_link is None else per_link
    for group in groups:
        if group == "su2" and su2_start is not None:
            u = jnp.asarray(su2_start)
        else:
            u = jnp.asarray(lat.lattice_links(ik.bpst(size=size / 5), (size,) * 4, 1.0, group=group))
        links = u.shape[0] * u.shape[1] * u.shape[2] * u.shape[3] * 4
        colours2 = jnp.asarray(sm._colours(u.shape[:4], False))
        colours8 = jnp.asarray(sm._colours(u.shape[:4], True))
        c1, c2 = sm.improved_coefficients(-1.0)
        cases = [
            ("Wilson flow RK3 step (step 0.02)", lambda v: sm._rk3_step(v, 0.02, 1.0)),
            ("Wilson cooling sweep", lambda v, colours2=colours2: sm._cool_sweep(v, colours2, 1.0, 0.0, False, 2, 3)),
            (
                "eps = -1 cooling sweep (8 colours)",
                lambda v, colours8=colours8, c1=c1, c2=c2: sm._cool_sweep(v, colours8, c1, c2, True, 8, 3),
            ),
        ]
        if group in flow_only:
            cases = cases[:1]
        for i, (name, fn) in enumerate(cases):
            sec = _timed(fn, u, repeat)
            per_link[(group, i)] = sec / links
            ref = f"per {links} links" + ("; hits = 3 for SU(3)" if "cooling" in name else "")
            if group != "su2" and ("su2", i) in per_link:
                ratio = per_link[(group, i)] / per_link[("su2", i)]
                ref += "; ratio: per-link time / SU(2)'s" + (" (other lattice size)" if flow_only else "")
            elif i > 0:
                ratio = per_link[(group, i)] / per_link[(group, 0)]
                ref += "; ratio: x the flow step"
            else:
                ratio = None
            rows.append(
                {
                    "figure": f"{group} {u.shape[0]}^4 {name}",
                    "value": round(sec, 4),
                    "unit": "s",
                    "ratio": None if ratio is None else round(ratio, 3),
                    "reference": ref,
                }
            )
    return rows


def _start(size: int, rho: float):
    """A periodic singular-gauge BPST start of size^4 sites, rho/a = rho, SU(2); numpy links."""
    import instantonkit as ik
    from instantonkit.lattice import starts as lat

    return lat.lattice_links(ik.bpst(size=rho), (size,) * 4, 1.0)


def _flow_rows(size: int, times, rho: float = 3.0, u=None, note: str = "") -> list[dict]:
    import numpy as np

    from instantonkit.lattice import smoothing as sm

    u = _start(size, rho) if u is None else u
    _, rec = sm.wilson_flow(u, max(times), 0.02, every=5)
    rows = []
    for t in times:
        i = int(np.argmin(np.abs(rec.time - t)))
        tag = f"Wilson flow of {size}^4 rho/a = {rho:g} start, t = {rec.time[i]:.2f}"
        rows += [
            {
                "figure": f"{tag}: S_W / 8 pi^2",
                "value": round(float(rec.wilson_action[i] / EIGHT_PI2), 4),
                "unit": "",
                "ratio": None,
                "reference": f"open-box lattice value 1 - (1/5)(a/rho)^2 = {1 - 0.2 / rho**2:.3f}{note}",
            },
            {
                "figure": f"{tag}: clover Q",
                "value": round(float(rec.clover_charge[i]), 4),
                "unit": "",
                "ratio": None,
                "reference": f"1 - 0.8 (a/rho)^2 ~ {1 - 0.8 / rho**2:.2f} (a^2 error of the operator){note}",
            },
            {
                "figure": f"{tag}: improved Q",
                "value": round(float(rec.improved_charge[i]), 4),
                "unit": "",
                "ratio": None,
                "reference": f"1 (charge of the start){note}",
            },
            {
                "figure": f"{tag}: size rho/a",
                "value": round(float(rec.size[i]), 3),
                "unit": "a",
                "ratio": None,
                "reference": f"moment estimate; start rho/a = {rho:g}{note}",
            },
        ]
    return rows


def _cooling_rows(size: int, sweeps: int, u=None) -> list[dict]:
    import numpy as np

    from instantonkit.lattice import smoothing as sm

    u = _start(size, 2.0) if u is None else u
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
    """Rows {figure, value, unit, ratio, reference} (see the module docstring).

    size: L of the timing lattices (default 16 full; quick: 12 for SU(2), 8 for SU(3), unless given).
    """
    if not quick:
        rows = []
        if "timing" in parts:
            rows += _timing_rows(size or 16, 3, groups)
        if "flow" in parts:
            rows += _flow_rows(16, (0.0, 0.5, 1.0, 2.0, 4.0))
        if "cooling" in parts:
            rows += _cooling_rows(12, 30)
        return rows
    # quick: one 12^4 rho/a = 2 start, so the flow and the cooling reuse the kernels the timings compiled
    shared = 12
    u = _start(shared, 2.0) if (size in (None, shared) or {"flow", "cooling"} & set(parts)) else None
    rows, per_link = [], {}
    if "timing" in parts:
        if "su2" in groups:
            start = u if size in (None, shared) else None
            rows += _timing_rows(size or shared, 2, ("su2",), su2_start=start, per_link=per_link)
        rest = tuple(g for g in groups if g != "su2")
        if rest:
            rows += _timing_rows(size or 8, 2, rest, flow_only=rest, per_link=per_link)
    note = "; quick: 12^4 rho/a = 2 start, the full run's 16^4 rho/a = 3 flow is the reference"
    if "flow" in parts:
        rows += _flow_rows(shared, (0.0, 0.5), rho=2.0, u=u, note=note)
    if "cooling" in parts:
        rows += _cooling_rows(shared, 8, u=u)
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
