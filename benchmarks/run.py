"""One entry point for every benchmark: runs each ``benchmarks/bench_*.py`` and prints one table.

Each benchmark module exposes ``run(quick) -> list of rows``, a row being a dict
``{figure, value, unit, ratio, reference}``: ``ratio`` compares the figure with the reference
measured in the same run (or with a stated goal) and ``reference`` names it.  This runner collects
the rows of all modules, tags each with its module name, and prints

* an aligned text table (default), or a markdown table (``--markdown``, for the README), or JSON
  (``--json``);
* a header line describing the machine (processor count, platform, Python, numpy and jax versions),
  since every figure depends on it.

Usage (from the repository root)::

    python -m benchmarks [--quick] [--smoke] [--markdown | --json] [--only fields lattice]
    python benchmarks/run.py --quick

``--quick`` passes ``quick=True`` to every module (the smaller sizes, fewer configurations and shared
compiled kernels or clusters they define) and leaves out :data:`QUICK_SKIP` (the Dask cluster
benchmark) unless ``--only`` names it: the whole run targets about a minute on a quiet two-core
machine, and its figures are indications (rows say where a quick size makes a ratio less
representative); the full run (no flag) gives the reference figures.  ``--smoke`` is
``--quick`` with the configurations cut further (see :data:`SMOKE`, applied to the keyword
arguments a module's ``run`` accepts) so CI can check in well under a minute that nothing rotted.
Timings are printed, never checked; the exit status is 1 when a module failed (its row says why).
The runner ends with the total wall time, each module's wall time, the CPU time and the load average
(on a shared machine the wall time grows with the load; the CPU time much less).
"""

from __future__ import annotations

import argparse
import importlib
import inspect
import json
import math
import os
import platform
import sys
import time
import traceback

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

__all__ = [
    "best_time",
    "discover",
    "collect",
    "machine_description",
    "format_table",
    "format_markdown",
    "print_rows",
    "main",
    "SMOKE",
    "QUICK_TARGET_S",
    "QUICK_SKIP",
    "summary_lines",
]

#: Extra keyword arguments for ``--smoke``, per module, used only where ``run`` accepts them.
SMOKE = {
    "bench_geometry": {"k_algebraic": 2, "k_integral": 1, "rtol": 1e-4},
    "bench_fields": {"points": 1024, "ks": (1,), "ranks": (1,)},
    "bench_calorons": {"points": 1024},
    "bench_limits": {"parts": ("densities",), "points": 4096},
    "bench_cluster": {"parts": ("scaling",), "scaling_size": 4},
    "bench_smoothing": {"size": 4, "parts": ("timing",), "groups": ("su2",)},
    "bench_mixtures": {"size": 4},
    "bench_operators": {"size": 4, "flow_size": 4, "presets": (("symanzik", "action"),), "actions": ("symanzik",)},
}

#: What ``--quick`` aims at on a quiet two-core machine, in seconds (printed, never checked).
QUICK_TARGET_S = 60.0

#: Modules that --quick leaves out unless named with --only: starting Dask workers alone costs about
#: 30 s of CPU, half the quick budget (``--quick --only cluster`` runs it).
QUICK_SKIP = ("bench_cluster",)

COLUMNS = ("figure", "value", "unit", "ratio", "reference")
_HERE = os.path.dirname(os.path.abspath(__file__))


def best_time(fn, repeats: int = 1) -> float:
    """Best wall time of ``repeats`` calls of ``fn()``, in seconds (the figure every module times with)."""
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def discover(directory: str = _HERE) -> list[str]:
    """Names of the benchmark modules (``bench_*.py``) in ``directory``, sorted."""
    return sorted(f[:-3] for f in os.listdir(directory) if f.startswith("bench_") and f.endswith(".py"))


def _select(names: list[str], only) -> list[str]:
    if not only:
        return names
    wanted = []
    for w in only:
        full = w if w.startswith("bench_") else f"bench_{w}"
        if full not in names:
            raise ValueError(f"unknown benchmark {w!r}; available: {[n[6:] for n in names]}")
        wanted.append(full)
    return wanted


def _kwargs(fn, quick: bool, extra: dict) -> dict:
    """Keyword arguments for ``fn``: quick, plus those of ``extra`` that its signature accepts."""
    params = inspect.signature(fn).parameters
    kw = {k: v for k, v in extra.items() if k in params}
    if "quick" in params:
        kw["quick"] = quick
    return kw


def _clean_row(module: str, row) -> dict:
    """A row with all five columns (missing ratio / reference become None / ''), plus the module name."""
    if not isinstance(row, dict) or "figure" not in row or "value" not in row:
        raise TypeError(f"{module}: a row must be a dict with at least 'figure' and 'value'; found {row!r}")
    out = {"benchmark": module[6:] if module.startswith("bench_") else module}
    out["figure"] = str(row["figure"])
    out["value"] = row["value"]
    out["unit"] = str(row.get("unit", "") or "")
    out["ratio"] = row.get("ratio")
    out["reference"] = str(row.get("reference", "") or "")
    return out


def _failure_row(module: str, err: BaseException, seconds: float) -> dict:
    return {
        "benchmark": module[6:],
        "figure": f"FAILED: {type(err).__name__}: {err}",
        "value": math.nan,
        "unit": "",
        "ratio": None,
        "reference": f"after {seconds:.1f} s",
        "failed": True,
    }


def collect(
    quick: bool = False,
    *,
    only=None,
    smoke: bool = False,
    package: str = "benchmarks",
    names: list[str] | None = None,
    log=None,
    timings: dict | None = None,
) -> list[dict]:
    """Run the selected benchmark modules and return all their rows (failures become FAILED rows).

    quick / smoke: see the module docstring; only: short names ('fields') or module names; names:
    the module names to consider (default :func:`discover`); log: a callable receiving progress text;
    timings: a dict that receives, per module name, ``(wall seconds, CPU seconds)`` (CPU: this process
    and its finished child processes).
    """
    mods = _select(discover() if names is None else list(names), only)
    if quick and not smoke and not only:
        mods = [m for m in mods if m not in QUICK_SKIP]
    rows: list[dict] = []
    for name in mods:
        t0, c0 = time.perf_counter(), _cpu_seconds()
        if log:
            log(f"running {name} ...")
        try:
            mod = importlib.import_module(f"{package}.{name}")
            fn = getattr(mod, "run", None)
            if not callable(fn):
                raise AttributeError(f"{name} has no run(quick) function")
            extra = SMOKE.get(name, {}) if smoke else {}
            got = fn(**_kwargs(fn, quick or smoke, extra))
            if not isinstance(got, (list, tuple)):
                raise TypeError(f"{name}.run returned {type(got).__name__}, expected a list of row dicts")
            rows.extend(_clean_row(name, r) for r in got)
        except Exception as err:  # one broken benchmark must not hide the others
            if log:
                log(traceback.format_exc())
            rows.append(_failure_row(name, err, time.perf_counter() - t0))
        wall, cpu = time.perf_counter() - t0, _cpu_seconds() - c0
        if timings is not None:
            timings[name] = (wall, cpu)
        if log:
            log(f"{name}: {wall:.1f} s (CPU {cpu:.1f} s)")
    return rows


def _cpu_seconds() -> float:
    """User + system CPU seconds of this process and its finished children (nan where unavailable)."""
    try:
        import resource
    except ImportError:  # pragma: no cover - not on POSIX
        return math.nan
    me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


def summary_lines(timings: dict, mode: str) -> list[str]:
    """The closing lines: total wall time, per-module wall times, CPU time and load; in quick mode, its target.

    timings: ``{module name: (wall s, CPU s)}`` as filled by :func:`collect`; mode: 'full', 'quick' or 'smoke'.
    """
    wall = sum(w for w, _ in timings.values())
    cpu = sum(c for _, c in timings.values())
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan
    per = ", ".join(f"{n[6:] if n.startswith('bench_') else n} {w:.1f} s" for n, (w, _) in timings.items())
    lines = [
        f"total wall time {wall:.1f} s (CPU {cpu:.1f} s; 1-minute load average {load:.2f} at the end); "
        f"per module: {per}"
    ]
    if mode == "quick":
        lines.append(
            f"quick mode: smaller sizes and fewer configurations, targets about {QUICK_TARGET_S / 60:.0f} minute on a "
            "quiet two-core machine; run without --quick for the reference figures (full sizes, many minutes); "
            f"left out: {', '.join(n[6:] for n in QUICK_SKIP)} (--quick --only {' '.join(n[6:] for n in QUICK_SKIP)} runs it)"
        )
    return lines


def machine_description() -> str:
    """One line naming the processor count, platform and the versions that set the figures."""
    import jax
    import numpy as np

    cpu = platform.processor() or platform.machine()
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        usable = os.cpu_count()
    return (
        f"{usable} usable cores ({os.cpu_count()} logical, {cpu}), {platform.system()} {platform.release()}, "
        f"Python {platform.python_version()}, numpy {np.__version__}, jax {jax.__version__} "
        f"({jax.default_backend()})"
    )


def _fmt_value(v) -> str:
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        if math.isnan(v):
            return "-"
        return f"{v:.4g}"
    return str(v)


def _fmt_ratio(r) -> str:
    return "" if r is None else _fmt_value(r)


def _cells(rows: list[dict]) -> list[tuple[str, ...]]:
    """Cells of the rows; the figure is prefixed with its module name when the runner tagged it."""
    return [
        (
            f"{r['benchmark']}: {r['figure']}" if "benchmark" in r else str(r["figure"]),
            _fmt_value(r["value"]),
            r.get("unit") or "",
            _fmt_ratio(r.get("ratio")),
            r.get("reference") or "",
        )
        for r in rows
    ]


def format_table(rows: list[dict]) -> str:
    """The rows as an aligned text table with the columns figure, value, unit, ratio, reference."""
    cells = _cells(rows)
    width = [max([len(h)] + [len(c[i]) for c in cells]) for i, h in enumerate(COLUMNS)]
    right = (False, True, False, True, False)

    def line(c):
        return "  ".join(s.rjust(w) if r else s.ljust(w) for s, w, r in zip(c, width, right)).rstrip()

    sep = "  ".join("-" * w for w in width)
    return "\n".join([line(COLUMNS), sep] + [line(c) for c in cells])


def print_rows(rows: list[dict], as_json: bool = False) -> None:
    """Print one module's rows: the aligned table of :func:`format_table`, or JSON (the scripts' own ``main``)."""
    print(json.dumps(rows, indent=1) if as_json else format_table(rows))


def format_markdown(rows: list[dict]) -> str:
    """The rows as a GitHub-flavoured markdown table (pipes in cells escaped)."""

    def esc(s):
        return s.replace("|", "\\|")

    out = ["| " + " | ".join(COLUMNS) + " |", "| --- | ---: | --- | ---: | --- |"]
    out += ["| " + " | ".join(esc(s) for s in c) + " |" for c in _cells(rows)]
    return "\n".join(out)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m benchmarks", description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes (each module's quick mode)")
    ap.add_argument("--smoke", action="store_true", help="quick mode with the fewest configurations (CI)")
    fmt = ap.add_mutually_exclusive_group()
    fmt.add_argument("--markdown", action="store_true", help="print the table as markdown")
    fmt.add_argument("--json", action="store_true", help="print the rows as JSON")
    ap.add_argument("--only", nargs="+", metavar="NAME", help="run only these benchmarks (e.g. fields lattice)")
    ap.add_argument("--list", action="store_true", help="list the benchmark modules and exit")
    ap.add_argument("--verbose", action="store_true", help="progress and tracebacks on stderr")
    args = ap.parse_args(argv)
    if args.list:
        print("\n".join(n[6:] for n in discover()))
        return 0
    log = (lambda s: print(s, file=sys.stderr, flush=True)) if args.verbose else None
    timings: dict = {}
    try:
        rows = collect(args.quick, only=args.only, smoke=args.smoke, log=log, timings=timings)
    except ValueError as err:
        ap.error(str(err))
    mode = "smoke" if args.smoke else ("quick" if args.quick else "full")
    machine = machine_description()
    summary = summary_lines(timings, mode)
    if args.json:
        seconds = {n[6:]: {"wall": w, "cpu": c} for n, (w, c) in timings.items()}
        out = {"machine": machine, "mode": mode, "rows": rows, "seconds": seconds, "summary": summary}
        print(json.dumps(out, indent=1, default=str))
    elif args.markdown:
        print(f"Machine: {machine}; mode: {mode}.\n")
        print(format_markdown(rows))
        print()
        print("\n\n".join(summary))
    else:
        print(f"machine: {machine}; mode: {mode}")
        print(format_table(rows))
        print("\n".join(summary))
    return 1 if any(r.get("failed") for r in rows) else 0


if __name__ == "__main__":
    sys.exit(main())
