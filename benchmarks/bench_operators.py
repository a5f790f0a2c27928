"""Loop operators: time of each preset's action and charge on an SU(3) lattice, and an improved-action flow step.

Timings: `operator_action` and `operator_charge` of every preset on L^4 SU(3) links (L = 32 full, 12
quick; the goal is at most 10 s a measurement at 32^4, ratio = time / 10 s), the first call (compiling
included) and the best later call, wall and CPU time, with the load average beside each figure (the
machine is shared: under load the wall time grows, the CPU time much less); and one RK3 step of the
gradient flow of the tree-level Symanzik and the 5Li actions on 16^4 SU(3) links (quick 8^4) as a
multiple of the Wilson flow step (goal: within 2x), by wall and by CPU time.  The links are random SU(3)
matrices near the identity (timing only: the cost does not depend on the values).
Usage: ``python benchmarks/bench_operators.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


#: The goal for one measurement on 32^4 SU(3) links (seconds).
GOAL_S = 10.0
#: The measurements of the quick run.
QUICK_PRESETS = (
    ("wilson", "action"),
    ("symanzik", "action"),
    ("5li", "action"),
    ("clover", "charge"),
    ("5loop", "charge"),
)


def _links(size: int, n: int, seed: int = 0):
    """Random SU(n) links exp(0.3 X) near the identity, (size^4, 4, n, n) complex128, built one time slice at a time."""
    import numpy as np

    from instantonkit.lattice import smoothing as sm

    rng = np.random.default_rng(seed)
    out = np.empty((size,) * 4 + (4, n, n), dtype=np.complex128)
    for t in range(size):
        z = rng.normal(size=(size,) * 3 + (4, n, n)) + 1j * rng.normal(size=(size,) * 3 + (4, n, n))
        x = 0.5 * (z - np.conj(np.swapaxes(z, -1, -2)))
        x = x - np.trace(x, axis1=-2, axis2=-1)[..., None, None] * np.eye(n) / n
        out[:, :, :, t] = np.asarray(sm._expm_su(0.3 * x))
    return out


def _seconds(fn, repeat: int = 1) -> dict:
    """First call and best of ``repeat`` later calls: {'first', 'wall', 'cpu', 'load'} (seconds; load: the
    1-minute load average after the timed calls)."""
    t0 = time.perf_counter()
    fn()
    first = time.perf_counter() - t0
    wall = cpu = float("inf")
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall, cpu = min(wall, time.perf_counter() - t0), min(cpu, time.process_time() - c0)
    return {"first": first, "wall": wall, "cpu": cpu, "load": os.getloadavg()[0]}


def _operator_rows(size: int, presets) -> list[dict]:
    from instantonkit.lattice import operators as ops

    u = _links(size, 3)
    rows = []
    for name, what in presets:
        fn = ops.operator_action if what == "action" else ops.operator_charge
        t = _seconds(lambda fn=fn, name=name: fn(u, name))
        rows.append(
            {
                "figure": f"su3 {size}^4 {name} {what}",
                "value": round(t["wall"], 3),
                "unit": "s",
                "ratio": round(t["wall"] / GOAL_S, 3) if size == 32 else None,
                "reference": f"CPU {t['cpu']:.2f} s, first call (compiling) {t['first']:.2f} s, load {t['load']:.1f}"
                + (f"; ratio: / the {GOAL_S:g} s goal" if size == 32 else ""),
            }
        )
    return rows


def _flow_rows(size: int, actions) -> list[dict]:
    import jax.numpy as jnp

    from instantonkit.lattice import operators as ops
    from instantonkit.lattice import smoothing as sm
    from instantonkit.lattice.forces import plane_force

    u = jnp.asarray(_links(size, 3, seed=1))
    h = 0.02
    wilson = _seconds(lambda: sm._rk3_step(u, h, 1.0).block_until_ready(), 2)
    rows = [
        {
            "figure": f"su3 {size}^4 Wilson flow RK3 step",
            "value": round(wilson["wall"], 4),
            "unit": "s",
            "ratio": None,
            "reference": f"step 0.02; CPU {wilson['cpu']:.3f} s, load {wilson['load']:.1f}",
        }
    ]
    for name in actions:
        pairs, omega, _ = sm._operator_terms(ops.get_operator(name))
        force = plane_force(u.shape[:4], pairs, omega)
        t = _seconds(lambda force=force: sm._loop_step(u, h, force).block_until_ready(), 2)
        rows.append(
            {
                "figure": f"su3 {size}^4 {name} flow RK3 step",
                "value": round(t["wall"], 4),
                "unit": "s",
                "ratio": round(t["wall"] / wilson["wall"], 3),
                "reference": f"ratio: x the Wilson step (goal 2); by CPU time {t['cpu'] / wilson['cpu']:.2f} "
                f"(CPU {t['cpu']:.3f} s); first call {t['first']:.1f} s; load {t['load']:.1f}",
            }
        )
    return rows


def run(
    quick: bool = False,
    size=None,
    flow_size=None,
    presets=None,
    actions=None,
) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference}; size: L of the operator lattice (32 full, 12 quick),
    flow_size: L of the flow lattice (16 full, 8 quick); presets: ((name, 'action' or 'charge'), ...)
    (default: every preset both ways in the full run, five in the quick run); actions: the flows timed
    beside the Wilson flow (default Symanzik and 5Li, quick Symanzik: each compiles for about 10 s)."""
    from instantonkit.lattice import operators as ops

    if presets is None:
        presets = QUICK_PRESETS if quick else tuple((p, w) for p in ops.OPERATOR_PRESETS for w in ("action", "charge"))
    if actions is None:
        actions = ("symanzik",) if quick else ("symanzik", "5li")
    rows = _operator_rows(size or (12 if quick else 32), presets)
    return rows + _flow_rows(flow_size or (8 if quick else 16), actions)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="12^4 operators, 8^4 flow steps")
    ap.add_argument("--json", action="store_true", help="print the rows as JSON")
    args = ap.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(args.quick), args.json)
    return 0


if __name__ == "__main__":
    sys.exit(main())
