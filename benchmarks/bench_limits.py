"""Every row of the limits table in one run, each with its ratio to a reference measured in the same run.

Rows (ratio column: figure / reference, or figure / goal where the reference is a goal):

* ``total_charge`` of random ADHM data k = 3 at rtol 1e-10: time and |Q - 3| (goal 10 s, 1e-10);
* ``verify`` on exact k = 4 data with defaults: time and verdict (goal 15 s; ``--quick``: k = 1);
* closed-form action density, points/s at k = 1 / 2 / 4 / 8; k = 1 against the bare numpy formula
  48 rho^4/(x^2+rho^2)^4 timed on the same points (goal <= 1.5x its time);
* the plain-numpy finite-difference pipeline at k = 4, reused from ``bench_fields`` when it offers it;
* lattice link cost (``bench_lattice.link_costs``): the README's charge-2 start (Magnus path) per link
  against closed-form BPST per link (goal <= 5x), its 24^4 periodic start (goal 15 s), ``bpst_field``
  links against ADHM k = 1 links of the same field (goal 1x), and a stress case without a goal;
* first calls (first call minus second call, in a fresh process): closed-form density, user callable,
  ``verify(bpst())``, autodiff field strength k = 1..4, the compilations of a five-value parameter scan
  (``ParametrisedField``, goal 1) and of a closure rebuilt with the same code and value (goal 0); the same
  process again on a warm persistent compilation cache (``INSTANTONKIT_COMPILE_CACHE``).

It uses only the public instantonkit API (and the other benchmark modules' public helpers where they
exist), so it keeps working while their internals change.  ``--quick`` (about 20 s on a quiet two-core
machine) shows the finite-difference and link rows that ``bench_fields`` and ``bench_lattice`` measured
earlier in the same run instead of measuring them again, and skips the warm-compile-cache process.
"""

from __future__ import annotations

import argparse
import inspect
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

import instantonkit as ik
from benchmarks.run import best_time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _row(figure, value, unit="", ratio=None, reference="") -> dict:
    return {"figure": figure, "value": value, "unit": unit, "ratio": ratio, "reference": reference}


def _best(fn, repeats: int = 2) -> float:
    return best_time(fn, repeats)


# -- integrals and verdicts ------------------------------------------------------------------------


def integral_rows(quick: bool) -> list[dict]:
    """total_charge k = 3 at rtol 1e-10 (the default route and budget; quick: 1M points), the volume rule
    on the same budget as the reference, and verify on exact data."""
    data = ik.random_adhm(3, seed=3)
    budget = 1_000_000 if quick else 4_000_000
    t0 = time.perf_counter()
    res = ik.total_charge(data, rtol=1e-10, max_points=budget)
    dt = time.perf_counter() - t0
    t0 = time.perf_counter()
    vol = ik.total_charge(data, rtol=1e-10, max_points=budget, route="volume")
    dt_vol = time.perf_counter() - t0
    err, err_vol = abs(float(res.value) - 3.0), abs(float(vol.value) - 3.0)
    rows = [
        _row(
            "total_charge, random ADHM k=3, rtol 1e-10: time",
            dt,
            "s",
            dt / 10.0,
            f"t / goal 10 s; route {res.route}, {'converged' if res.converged else 'NOT converged'}, first call "
            f"(compilation included); volume rule {dt_vol:.1f} s, {'converged' if vol.converged else 'NOT converged'}",
        ),
        _row(
            "total_charge, random ADHM k=3: |Q - 3|",
            err,
            "",
            err / 1e-10,
            f"goal 1e-10 (Q = k for ADHM data, Atiyah, Hitchin, Drinfeld, Manin 1978); reported error {res.error:.1e}; "
            f"volume rule |Q - 3| = {err_vol:.1e} with {vol.evaluations:,} points ({budget:.0e} budget)",
        ),
    ]
    k = 1 if quick else 4  # quick: k = 1 keeps the run under about two minutes
    exact = ik.random_adhm(k, seed=40 + k)
    t0 = time.perf_counter()
    verdict = ik.verify(exact)
    dt = time.perf_counter() - t0
    passed = bool(getattr(verdict, "passed", False))
    rows.append(
        _row(
            f"verify, exact ADHM k={k}, defaults: time ({'PASSED' if passed else 'FAILED'})",
            dt,
            "s",
            dt / 15.0,
            "t / goal 15 s (goal stated for k = 4)",
        )
    )
    return rows


# -- closed-form densities ----------------------------------------------------------------------------


def density_rows(quick: bool, ks=(1, 2, 4, 8), points: int | None = None) -> list[dict]:
    """Points/s of the closed-form action density; k = 1 against the bare numpy BPST formula."""
    n = int(points) if points else (100_000 if quick else 1_000_000)
    rows = []
    rng = np.random.default_rng(0)
    goals = {4: 1e6, 8: 1.5e5}
    for k in ks:
        data = ik.bpst((0.1, -0.2, 0.3, 0.0), 1.1) if k == 1 else ik.random_adhm(k, seed=k)
        centre, scale = data.hint()
        pts = np.asarray(centre) + 2.0 * float(scale) * rng.normal(size=(n, 4))
        ik.action_density(data, pts[:1024])
        ik.action_density(data, pts)  # compile every batch shape first
        t = _best(lambda data=data, pts=pts: ik.action_density(data, pts))
        goal = goals.get(k)
        rows.append(
            _row(
                f"closed-form action density, SU(2) k={k}",
                n / t,
                "points/s",
                (n / t) / goal if goal else None,
                f"rate / goal {goal:.2g}" if goal else "",
            )
        )
        if k == 1:
            c, rho = np.array([0.1, -0.2, 0.3, 0.0]), 1.1

            def bare(pts=pts, c=c, rho=rho):
                r2 = np.sum((pts - c) ** 2, axis=-1)
                return 48.0 * rho**4 / (r2 + rho**2) ** 4

            tn = _best(bare)
            # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4/(x^2+rho^2)^4
            dev = float(np.max(np.abs(ik.action_density(data, pts[:4096]) - bare()[:4096])))
            rows.append(
                _row(
                    "k=1 closed form time / bare numpy 48 rho^4/(x^2+rho^2)^4",
                    t / tn,
                    "x",
                    (t / tn) / 1.5,
                    f"ratio / goal 1.5; max deviation {dev:.1e}",
                )
            )
    return rows


def fd_rows(quick: bool) -> list[dict]:
    """The numpy finite-difference pipeline at k = 4, from bench_fields when it offers it."""
    try:
        from benchmarks import bench_fields
    except ImportError as err:  # pragma: no cover - the module is part of the repository
        return [_row(f"numpy finite-difference pipeline: bench_fields not importable ({err})", float("nan"))]
    fn = getattr(bench_fields, "fd_rows", None) or getattr(bench_fields, "_fd_rows", None)
    if fn is None:
        return [_row("numpy finite-difference pipeline: not offered by bench_fields", float("nan"))]
    n = getattr(bench_fields, "FD_POINTS_QUICK", 200) if quick else getattr(bench_fields, "FD_POINTS_FULL", 2000)
    # quick: the rows bench_fields measured earlier in this process, if it did
    got = fn(n, reuse=quick) if "reuse" in inspect.signature(fn).parameters else fn(n)
    return [dict(r, figure=f"(bench_fields) {r['figure']}") for r in got]


# -- lattice links ----------------------------------------------------------------------------------


def _link_time(field, size: int, rtol: float | None = None) -> tuple[float, float]:
    """Seconds per link and potential evaluations per link of an open ``size``^4 start (spacing 4 / size)."""
    shape, spacing = (size,) * 4, 4.0 / size
    kw = {} if rtol is None else {"rtol": rtol}
    # open boundaries: only the cost per link is wanted here, not a start that fits the torus
    ik.lattice_start(field, shape, spacing, boundary="open", **kw)  # compile
    t0 = time.perf_counter()
    rep = ik.lattice_start(field, shape, spacing, boundary="open", **kw).report
    return (time.perf_counter() - t0) / (4 * size**4), rep.potential_evaluations / (4 * size**4)


def lattice_rows(quick: bool) -> list[dict]:
    """The link rows from bench_lattice.link_costs (the README's charge-2 start against closed-form
    BPST, the 24^4 start, bpst_field against ADHM k = 1), then a stress case: overlapping random charge-2
    data at the default rtol 1e-12 on a coarse lattice, against closed-form BPST on the same lattice."""
    from benchmarks import bench_lattice

    reused = quick and quick in getattr(bench_lattice, "_LINK_COSTS", {})
    rows = bench_lattice.link_costs(quick, reuse=quick)  # quick: bench_lattice's rows of this run, if any
    if reused:
        rows = [dict(r, reference=f"{r['reference']}; measured by bench_lattice in this run") for r in rows]
    size = 6 if quick else 12
    closed, _ = _link_time(ik.bpst_field((0.0, 0.0, 0.0, 0.0), 1.0), size)
    two, evals = _link_time(ik.random_adhm(2, seed=7, spread=1.0), size)
    rows.append(
        _row(
            f"stress case: overlapping random charge-2 links (rtol 1e-12, a = {4 / size:.2g}) / closed-form BPST, {size}^4",
            two / closed,
            "x",
            None,
            f"{evals:.1f} potential evaluations per link (no goal: the rtol asks for finer steps)",
        )
    )
    return rows


# -- first calls ------------------------------------------------------------------------------------

_PROBE = r"""
import json, sys, time
import numpy as np
import jax.numpy as jnp
import instantonkit as ik
from instantonkit import fields
from instantonkit.core.conventions import point_to_quaternion

ks = json.loads(sys.argv[1])
out = {}
def first(name, fn):
    t0 = time.perf_counter(); fn(); a = time.perf_counter() - t0
    t0 = time.perf_counter(); fn(); b = time.perf_counter() - t0
    out[name] = a - b
pts = np.random.default_rng(0).normal(size=(64, 4))
first("closed-form density k=1", lambda: ik.action_density(ik.bpst(), pts))
def pot(x, p):  # a user ansatz: BPST as ADHM data built from its parameters (regular gauge)
    lam = jnp.zeros((1, 1, 4)).at[0, 0, 0].set(p["rho"])
    return ik.ADHMData(lam, point_to_quaternion(p["c"])[None, None], gauge="regular").potential(x)
def user(x):
    return pot(x, {"rho": 0.9, "c": jnp.zeros(4)})
first("user callable, action density", lambda: ik.action_density(user, pts))
first("verify(bpst())", lambda: ik.verify(ik.bpst()))
for k in ks:
    d = ik.random_adhm(k, seed=100 + k)
    first(f"autodiff field strength k={k}", lambda: ik.field_strength(d, pts, method="autodiff"))
kern = fields._kernel(("action_density", "auto"))
size = getattr(kern, "_cache_size", lambda: -1)
before = size()
t0 = time.perf_counter()
for rho in (0.5, 0.7, 0.9, 1.1, 1.3):
    ik.action_density(ik.ParametrisedField(pot, {"rho": rho, "c": np.zeros(4)}), pts)
out["scan seconds"] = time.perf_counter() - t0
out["scan compiles"] = size() - before
def closure(rho):
    return lambda x: pot(x, {"rho": rho, "c": jnp.zeros(4)})
ik.action_density(closure(0.6), pts)
before = size()
ik.action_density(closure(0.6), pts)
out["closure recompiles"] = size() - before
print(json.dumps(out))
"""


def _probe(ks, cache_dir: str | None) -> dict:
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    env.pop("INSTANTONKIT_COMPILE_CACHE", None)
    if cache_dir:
        env["INSTANTONKIT_COMPILE_CACHE"] = cache_dir
    res = subprocess.run(
        [sys.executable, "-c", _PROBE, json.dumps(list(ks))], env=env, capture_output=True, text=True, timeout=900
    )
    if res.returncode:
        raise RuntimeError(res.stderr[-2000:])
    return json.loads(res.stdout.strip().splitlines()[-1])


def first_call_rows(quick: bool) -> list[dict]:
    """First-call (compile) times in a fresh process, then in a second process on a warm cache."""
    ks = (1, 4) if quick else (1, 2, 3, 4)
    goals = {"closed-form density k=1": 0.5, "user callable, action density": 3.0, "verify(bpst())": 3.0}
    with tempfile.TemporaryDirectory() as tmp:
        cold = _probe(ks, tmp)
        # quick: one fresh process, not two; the warm compile cache's rows come from the full run
        warm = {} if quick else _probe(ks, tmp)
    rows = []
    for name, t in cold.items():
        if name.startswith("scan") or name.startswith("closure"):
            continue
        goal = goals.get(name, 3.0)
        rows.append(_row(f"first call, {name}", t, "s", t / goal, f"t / goal {goal:g} s"))
    rows.append(
        _row(
            "parameter scan, 5 values (ParametrisedField): compilations",
            cold["scan compiles"],
            "",
            cold["scan compiles"] / 1.0,
            f"goal 1; scan took {cold['scan seconds']:.2f} s",
        )
    )
    rows.append(
        _row("closure rebuilt, same code and value: recompilations", cold["closure recompiles"], "", None, "goal 0")
    )
    for name, t in warm.items():
        if name in cold and not (name.startswith("scan") or name.startswith("closure")):
            rows.append(
                _row(
                    f"second process, warm compile cache: {name}",
                    t,
                    "s",
                    t / cold[name] if cold[name] > 0 else None,
                    "t_warm / t_cold",
                )
            )
    return rows


PARTS = ("integrals", "densities", "fd", "lattice", "first_calls")


def run(quick: bool = False, parts=PARTS, points: int | None = None) -> list[dict]:
    """All rows of the limits table (``parts`` selects groups); rows {figure, value, unit, ratio, reference}.

    points: the number of points of the density rows (default 1e5 quick, 1e6 full; the smoke run uses few).
    """
    table = {
        "integrals": integral_rows,
        "densities": density_rows,
        "fd": fd_rows,
        "lattice": lattice_rows,
        "first_calls": first_call_rows,
    }
    rows: list[dict] = []
    for part in parts:
        if part not in table:
            raise ValueError(f"unknown part {part!r}; the parts are {PARTS}")
        rows += density_rows(quick, points=points) if part == "densities" else table[part](quick)
    return rows


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="The limits table: integrals, kernels, links, first calls.")
    parser.add_argument("--quick", action="store_true", help="smaller sizes (under about two minutes)")
    parser.add_argument("--parts", nargs="+", default=list(PARTS), choices=PARTS, help="row groups to run")
    args = parser.parse_args(argv)
    from benchmarks.run import print_rows

    print_rows(run(quick=args.quick, parts=args.parts))


if __name__ == "__main__":
    main()
