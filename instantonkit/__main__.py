"""``python -m instantonkit``: build a three-instanton configuration and print its verification report.

The default configuration is our own: three SU(2) instantons of sizes 1.0, 0.7 and 1.2 at well
separated centres with distinct orientations, solved exactly by :func:`instantonkit.multi_instanton`.
The report shows the charge, action/8 pi^2, the self-duality residual, the ADHM constraint residual
and the independent routes (Osborn's density).  Options change the tolerance, the budget, or print
the plain-dict form as JSON.
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np

from .adhm import ADHMData
from .moduli import multi_instanton
from .checks import verify
from .integrals import DEFAULT_MAX_POINTS

#: Instanton number of the default configuration (the report checks it).
DEMO_CHARGE = 3

#: Centres (x1, x2, x3, x4), sizes and orientations (unit quaternions) of the default configuration.
DEMO_CENTERS = np.array([[0.0, 0.0, 0.0, 0.0], [4.0, 1.0, 0.0, -1.0], [-1.5, 3.5, 1.0, 2.0]])
DEMO_SIZES = np.array([1.0, 0.7, 1.2])
DEMO_ORIENTATIONS = np.array(
    [[1.0, 0.0, 0.0, 0.0], [np.cos(0.4), np.sin(0.4), 0.0, 0.0], [np.cos(1.1), 0.0, np.sin(1.1) * 0.6, np.sin(1.1) * 0.8]]
)


def demo_configuration() -> ADHMData:
    """The default three-instanton ADHM data (charge 3, SU(2))."""
    return multi_instanton(DEMO_CENTERS, DEMO_SIZES, DEMO_ORIENTATIONS)


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="python -m instantonkit",
        description="Verify a default three-instanton configuration: charge, action/8pi^2, self-duality, ADHM constraint.",
    )
    p.add_argument("--rtol", type=float, default=1e-6, help="tolerance of the integrals, relative and absolute (default 1e-6)")
    p.add_argument("--budget", type=int, default=DEFAULT_MAX_POINTS, help="max density evaluations per integral")
    p.add_argument("--no-routes", action="store_true", help="skip the independent routes (Osborn's density)")
    p.add_argument("--json", action="store_true", help="print the report as JSON instead of a table")
    return p


def main(argv=None) -> int:
    """Run the report; returns the exit status (0 when the verification passed)."""
    args = _parser().parse_args(argv)
    data = demo_configuration()
    start = time.perf_counter()
    report = verify(data, expected_charge=DEMO_CHARGE, rtol=args.rtol, atol=args.rtol, max_points=args.budget,
                    routes=not args.no_routes)
    elapsed = time.perf_counter() - start
    if args.json:
        print(json.dumps(report.to_dict(), indent=2, default=float))
    else:
        print(f"Default configuration: {DEMO_CHARGE} SU(2) instantons")
        for c, r in zip(DEMO_CENTERS, DEMO_SIZES):
            print(f"  centre {np.array2string(c, precision=2)}  size {r:g}")
        print(report)
        print(f"  time: {elapsed:.1f} s")
    return 0 if report.passed else 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
