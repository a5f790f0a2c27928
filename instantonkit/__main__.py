"""``python -m instantonkit``: the demo report, or ``verify`` of a user's field.

``python -m instantonkit`` builds our default configuration (three SU(2) instantons of sizes 1.0,
0.7 and 1.2 at well separated centres with distinct orientations, solved exactly by
`instantonkit.multi_instanton`) and prints its verification report.

``python -m instantonkit verify TARGET [options]`` verifies a field given as

* ``module:attribute`` -- ``module`` importable, or a path to a ``.py`` file; the attribute (dotted
  names allowed) is a field object (anything with ``potential(x)``), a callable potential
  ``A(x): (4,) -> (4, N, N)``, or a callable without arguments that returns a field;
* a saved ADHM data file ``.npz`` (see `save_adhm`): arrays ``lam`` (n, k, 4) and ``B``
  (k, k, 4) float64, optional ``chirality`` (+1 / -1, default +1) and ``gauge`` ('singular' /
  'regular', default 'singular').

Options: ``--charge K`` (the expected instanton number), ``--charge-tol``, ``--rtol``, ``--period P``,
``--center x1,x2,x3,x4[;...]``, ``--scale S[,S2,...]``, ``--budget N``, ``--no-routes``, ``--json``
(the report as a JSON object).  Exit status: 0 PASSED, 1 FAILED, 3 INCONCLUSIVE, 2 bad arguments
(one line on stderr, never a traceback).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import inspect
import json
import sys
import time
from pathlib import Path

import numpy as np

from .adhm.moduli import multi_instanton
from .adhm.quaternionic import ADHMData
from .engine import fields as _fields
from .verification.checks import FAILED, PASSED, verify

#: Instanton number of the default configuration (the report checks it).
DEMO_CHARGE = 3

#: Centres (x1, x2, x3, x4), sizes and orientations (unit quaternions) of the default configuration.
DEMO_CENTERS = np.array([[0.0, 0.0, 0.0, 0.0], [4.0, 1.0, 0.0, -1.0], [-1.5, 3.5, 1.0, 2.0]])
DEMO_SIZES = np.array([1.0, 0.7, 1.2])
DEMO_ORIENTATIONS = np.array(
    [
        [1.0, 0.0, 0.0, 0.0],
        [np.cos(0.4), np.sin(0.4), 0.0, 0.0],
        [np.cos(1.1), 0.0, np.sin(1.1) * 0.6, np.sin(1.1) * 0.8],
    ]
)

#: Exit status per verdict (2 is for bad arguments).
EXIT_STATUS = {PASSED: 0, FAILED: 1, "INCONCLUSIVE": 3}


class UsageError(Exception):
    """A bad command-line argument: printed as one line, exit status 2."""


def demo_configuration() -> ADHMData:
    """The default three-instanton ADHM data (charge 3, SU(2))."""
    return multi_instanton(DEMO_CENTERS, DEMO_SIZES, DEMO_ORIENTATIONS)


def save_adhm(path, data: ADHMData) -> None:
    """Write ADHM data in the file format ``verify`` reads: .npz with lam, B, chirality, gauge."""
    np.savez(
        path,
        lam=np.asarray(data.lam),
        B=np.asarray(data.B),
        chirality=np.int64(data.chirality),
        gauge=np.str_(data.gauge),
    )


def load_adhm(path) -> ADHMData:
    """Read ADHM data written by `save_adhm` (the constraint is validated by ADHMData)."""
    try:
        with np.load(path, allow_pickle=False) as z:
            if "lam" not in z or "B" not in z:
                raise UsageError(f"{path}: an ADHM data file needs arrays 'lam' and 'B'; found {sorted(z.files)}")
            chir = int(z["chirality"]) if "chirality" in z else 1
            gauge = str(z["gauge"]) if "gauge" in z else "singular"
            return ADHMData(
                np.asarray(z["lam"], dtype=np.float64),
                np.asarray(z["B"], dtype=np.float64),
                chirality=chir,
                gauge=gauge,
            )
    except (OSError, ValueError, TypeError) as err:
        raise UsageError(f"cannot read ADHM data from {path}: {err}") from err


def _import(module: str):
    if module.endswith(".py") or Path(module).is_file():
        path = Path(module)
        if not path.is_file():
            raise UsageError(f"no such file: {module}")
        spec = importlib.util.spec_from_file_location(path.stem, path)
        if spec is None or spec.loader is None:
            raise UsageError(f"cannot import {module}")
        mod = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(mod)
        return mod
    return importlib.import_module(module)


def load_target(target: str):
    """The field named by ``target`` (module:attribute or a .npz ADHM data file); UsageError if not."""
    if target.endswith(".npz"):
        if not Path(target).is_file():
            raise UsageError(f"no such file: {target}")
        return load_adhm(target)
    if ":" not in target:
        raise UsageError(f"target must be module:attribute or an ADHM data file .npz; found {target!r}")
    module, attr = target.rsplit(":", 1)
    try:
        obj = _import(module)
        for part in attr.split("."):
            obj = getattr(obj, part)
    except UsageError:
        raise
    except Exception as err:  # the user's module may raise anything while importing
        raise UsageError(f"cannot load {target}: {type(err).__name__}: {err}") from err
    if hasattr(obj, "potential"):
        return obj
    if not callable(obj):
        raise UsageError(f"{target} is neither a field (an object with potential(x)) nor a callable")
    try:
        params = [
            p
            for p in inspect.signature(obj).parameters.values()
            if p.default is p.empty and p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)
        ]
        factory = not params
    except (TypeError, ValueError):  # no signature (a builtin): a potential
        factory = False
    if factory:
        try:
            obj = obj()
        except Exception as err:
            raise UsageError(f"calling {target}() failed: {type(err).__name__}: {err}") from err
        if not hasattr(obj, "potential"):
            raise UsageError(f"{target}() returned {type(obj).__name__}, not a field")
        return obj
    return _fields.as_field(obj)


def _floats(name: str, text: str) -> np.ndarray:
    try:
        rows = [[float(v) for v in part.split(",")] for part in text.split(";") if part.strip()]
        return np.array(rows, dtype=np.float64)
    except ValueError:
        raise UsageError(f"--{name} must be comma-separated numbers (';' between centres); found {text!r}") from None


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit status 2)."""

    def error(self, message):  # noqa: D401 - argparse's hook
        raise UsageError(message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="python -m instantonkit",
        description="Verify the default three-instanton configuration, or a field: "
        "python -m instantonkit verify module:attribute | data.npz [options].",
    )
    p.add_argument("--rtol", type=float, default=None, help="relative tolerance of the integrals (default 0)")
    p.add_argument("--budget", type=int, default=None, help="max density evaluations per integral")
    p.add_argument("--no-routes", action="store_true", help="skip the independent routes (Osborn's density)")
    p.add_argument("--json", action="store_true", help="print the report as JSON instead of a table")
    return p


def _verify_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="python -m instantonkit verify", description="Verify a field: module:attribute or data.npz.")
    p.add_argument("target", help="module:attribute (module importable or a .py path) or ADHM data .npz")
    p.add_argument("--charge", type=int, default=None, help="the expected instanton number")
    p.add_argument("--charge-tol", type=float, default=1e-6, help="tolerance of |Q - n| and of the margin (1e-6)")
    p.add_argument("--rtol", type=float, default=0.0, help="relative tolerance of the integrals (default 0)")
    p.add_argument("--period", type=float, default=None, help="x4 period (R^3 x S^1)")
    p.add_argument("--center", default=None, help="x1,x2,x3,x4 (several centres separated by ';')")
    p.add_argument("--scale", default=None, help="scale, or one per centre separated by ','")
    p.add_argument("--budget", type=int, default=None, help="max density evaluations per integral")
    p.add_argument("--no-routes", action="store_true", help="skip the independent routes")
    p.add_argument("--json", action="store_true", help="print the report as JSON")
    return p


def _print(report, args, elapsed: float, header: str = "") -> None:
    if args.json:
        d = report.to_dict()
        d["seconds"] = elapsed
        print(json.dumps(d, indent=2, default=float))
    else:
        if header:
            print(header)
        print(report)
        print(f"  time: {elapsed:.1f} s")


def _run(argv) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    start = time.perf_counter()
    if argv and argv[0] == "verify":
        args = _verify_parser().parse_args(argv[1:])
        field = load_target(args.target)
        center = None if args.center is None else _floats("center", args.center)
        scale = None if args.scale is None else _floats("scale", args.scale).ravel()
        tol = args.charge_tol
        report = verify(
            field,
            expected_charge=args.charge,
            rtol=args.rtol,
            center=center,
            scale=scale,
            period=args.period,
            max_points=args.budget,
            charge_tol=tol,
            duality_tol=tol,
            routes=not args.no_routes,
        )
        _print(report, args, time.perf_counter() - start)
        return EXIT_STATUS[report.verdict]
    args = _parser().parse_args(argv)
    data = demo_configuration()
    report = verify(
        data,
        expected_charge=DEMO_CHARGE,
        rtol=0.0 if args.rtol is None else args.rtol,
        max_points=args.budget,
        routes=not args.no_routes,
    )
    header = f"Default configuration: {DEMO_CHARGE} SU(2) instantons\n" + "\n".join(
        f"  centre {np.array2string(c, precision=2)}  size {r:g}" for c, r in zip(DEMO_CENTERS, DEMO_SIZES)
    )
    _print(report, args, time.perf_counter() - start, header)
    return EXIT_STATUS[report.verdict]


def main(argv=None) -> int:
    """Run the demo or ``verify``; returns the exit status (0 PASSED, 1 FAILED, 3 INCONCLUSIVE, 2 usage)."""
    try:
        return _run(argv)
    except (UsageError, ValueError, TypeError) as err:
        text = " ".join(str(err).split())
        sys.stderr.write(f"python -m instantonkit: error: {text}\n")
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
