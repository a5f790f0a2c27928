"""Timings and accuracies of instantonkit.verification.checks: charge and action integrals, verify().

Prints a table; ``--quick`` runs the small cases only, ``--long`` adds verify on charge-4 data.  ``run(quick)`` returns the rows as dicts
{figure, value, unit, ratio, reference} for scripts.  Timings include JIT compilation (first call of
each field structure), which is what a user sees in a fresh process.
"""

from __future__ import annotations

import argparse
import time

import instantonkit as ik
from instantonkit.__main__ import DEMO_CHARGE, demo_configuration
from instantonkit.ansatz import classic as ansatz
from instantonkit.core.conventions import INSTANTON_ACTION
from instantonkit.verification import checks


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def run(quick: bool = False, long: bool = False) -> list[dict]:
    """Measure the verify figures (``long``: also verify k = 4); rows {figure, value, unit, ratio, reference}."""
    rows = []
    bp = ik.bpst((0.3, -0.2, 0.5, 0.1), 1.3)
    res, dt = _timed(lambda: checks.total_charge(bp, rtol=0.0, atol=1e-8))
    rows.append(
        dict(
            figure="BPST charge to 1e-8: time",
            value=dt,
            unit="s",
            ratio=dt / 10.0,
            reference="goal 10 s on two cores",
        )
    )
    rows.append(
        dict(
            figure="BPST charge: |Q - 1|",
            value=abs(res.value - 1.0),
            unit="",
            ratio=abs(res.value - 1) / 1e-8,
            reference="Q = 1 (Belavin, Polyakov, Schwartz, Tyupkin 1975); goal 1e-8",
        )
    )
    rows.append(dict(figure="BPST charge: points", value=res.evaluations, unit="points", ratio=None, reference=""))
    res2, dt2 = _timed(lambda: checks.total_charge(bp, rtol=0.0, atol=1e-8))
    rows.append(
        dict(
            figure="BPST charge to 1e-8: time, compiled",
            value=dt2,
            unit="s",
            ratio=dt2 / 10.0,
            reference="same call again (kernels cached)",
        )
    )
    cases = [("random ADHM k = 2", ik.random_adhm(2, seed=2, spread=3.0), 2)]
    cal = ansatz.caloron(0.7, 2.0)
    if not quick:
        cases += [
            ("random ADHM k = 3", ik.random_adhm(3, seed=3, spread=3.0), 3),
            ("'t Hooft k = 2", ansatz.thooft([[0.0, 0, 0, 0], [3.5, 0.5, 0, 0.5]], [1.0, 0.8]), 2),
            ("Sp(2) data k = 2", ik.random_adhm(2, rank=2, seed=1, spread=3.0), 2),
        ]
    for name, f, k in cases:
        r, dt = _timed(lambda: checks.total_action(f, rtol=0.0, atol=1e-8 * INSTANTON_ACTION))  # noqa: B023
        err = abs(r.value / INSTANTON_ACTION - k)
        rows.append(
            dict(
                figure=f"{name}: |S/8pi^2 - k|",
                value=err,
                unit="",
                ratio=err / 1e-8,
                reference="S = 8 pi^2 k (Atiyah, Hitchin, Drinfeld, Manin 1978); goal 1e-8",
            )
        )
        rows.append(
            dict(
                figure=f"{name}: reported error / true error",
                value=r.error / INSTANTON_ACTION,
                unit="",
                ratio=(r.error / INSTANTON_ACTION) / max(err, 1e-300),
                reference="must be >= 1",
            )
        )
        rows.append(
            dict(figure=f"{name}: action time", value=dt, unit="s", ratio=None, reference=f"{r.evaluations:,} points")
        )
    r, dt = _timed(lambda: checks.total_action(cal, rtol=0.0, atol=1e-8 * INSTANTON_ACTION))
    rows.append(
        dict(
            figure="Harrington-Shepard caloron: |S/8pi^2 - 1| per period",
            value=abs(r.value / INSTANTON_ACTION - 1),
            unit="",
            ratio=abs(r.value / INSTANTON_ACTION - 1) / 1e-8,
            reference="Harrington, Shepard, Phys. Rev. D 17 (1978) 2122",
        )
    )
    rows.append(
        dict(figure="caloron action time", value=dt, unit="s", ratio=None, reference=f"{r.evaluations:,} points")
    )
    for k in (1, 2, 3, 4) if long else (1, 2, 3) if not quick else ():
        data = ik.random_adhm(k, seed=k, spread=3.0)
        rep, dt = _timed(lambda: checks.verify(data))  # noqa: B023 - called at once
        rows.append(
            dict(
                figure=f"verify(random ADHM k = {k}), default settings: time",
                value=dt,
                unit="s",
                ratio=dt / 15.0 if k == 4 else None,
                reference=f"verdict {rep.verdict} (a verdict with default settings)"
                + ("; ratio to the goal 15 s" if k == 4 else ""),
            )
        )
    if not quick:
        rep, dt = _timed(lambda: checks.verify(demo_configuration(), expected_charge=DEMO_CHARGE))
        rows.append(
            dict(
                figure="verify(demo k = 3): time",
                value=dt,
                unit="s",
                ratio=dt / 60.0,
                reference="python -m instantonkit goal: well under a minute",
            )
        )
        rows.append(
            dict(figure="verify(demo k = 3): passed", value=float(rep.passed), unit="", ratio=None, reference="")
        )
    return rows


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="small cases only")
    p.add_argument("--json", action="store_true", help="print the rows as JSON")
    p.add_argument("--long", action="store_true", help="also verify random ADHM data of charge 4 (minutes)")
    args = p.parse_args(argv)
    from benchmarks.run import print_rows  # deferred as in the other scripts: run() works without the package

    print_rows(run(args.quick, args.long), args.json)


if __name__ == "__main__":
    main()
