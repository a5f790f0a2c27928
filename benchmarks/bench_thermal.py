"""Finite-temperature starts: a caloron of non-trivial holonomy on N_t x N_s^3, and anisotropic observables.

Full run: the wall time of a 6 x 32^3 start of ``ik.caloron(rho, beta, holonomy=0.25)`` (beta = 1,
rho = beta / 2, a = beta / 6, spatial boundaries windowed about the holonomy; goal <= 30 s on two
cores), split into the first call (with the compilation of the caloron's Magnus kernel), a second
call of the same start (compiled) and one at the looser Magnus target rtol = 1e-10 (about half the
potential evaluations; the links move by about 1e-10, far below the lattice artefacts), with S_W / 8 pi^2, the clover charge and 1/2 tr of the lattice
Polyakov loop at the box corner (cos 2 pi omega = 0, Kraan, van Baal, Nucl. Phys. B 533 (1998) 627,
from memory), and the constituent finder on the links (`ik.find_lattice_constituents`, clover charge
density): its time and how far the found constituents lie from the field's (the maxima of the density
sit inside the constituents while the cores overlap: 0.785 beta apart here).  Quick mode (a few seconds): the caloron's kernel alone compiles for about 30 s, so quick
mode times an anisotropic BPST start (closed-form links, 8^3 x 16, a_s = 2 a_t) and the anisotropic
Wilson action and clover charge density on it; the caloron figures come from the full run.
The CPU seconds beside each start tell what a quiet machine would take when the wall time is
inflated by other work (measured on a shared two-core machine at a load average of about 14: compiled,
rtol 1e-12, 20.8 s of CPU in 106 s of wall time; rtol 1e-10, 14.1 s of CPU).
Usage: ``python benchmarks/bench_thermal.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import warnings

if __package__ in (None, ""):  # run as a script: make ``import benchmarks`` work from anywhere
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

EIGHT_PI2 = 8.0 * 3.141592653589793**2


def _quick_rows() -> list[dict]:
    import numpy as np

    import instantonkit as ik
    from instantonkit.lattice import observables as obs
    from instantonkit.lattice import starts as lat

    sp, shape = (0.5, 0.5, 0.5, 0.25), (8, 8, 8, 16)
    field = ik.bpst_field(size=1.0, gauge="singular")
    lat.lattice_links(field, shape, sp, boundary="open")  # compile (the kernel's batch depends on the shape)
    t0 = time.perf_counter()
    start = lat.lattice_start(field, shape, sp, boundary="open")
    t_start = time.perf_counter() - t0
    t0 = time.perf_counter()
    s_w = obs.wilson_action(start.links, spacing=sp, boundary="open")
    t_action = time.perf_counter() - t0
    t0 = time.perf_counter()
    q = float(np.nansum(obs.clover_charge_density(start.links, spacing=sp, boundary="open")) * np.prod(sp))
    t_charge = time.perf_counter() - t0
    sites = float(np.prod(shape))
    return [
        dict(
            figure="anisotropic BPST start 8^3 x 16 (a_s = 2 a_t, closed form)",
            value=t_start,
            unit="s",
            ratio=sites / t_start,
            reference="ratio: sites per second",
        ),
        dict(
            figure="anisotropic Wilson action, 8^3 x 16",
            value=t_action,
            unit="s",
            ratio=s_w / EIGHT_PI2,
            reference="ratio: S_W / 8 pi^2 (box of 4 rho, open)",
        ),
        dict(
            figure="anisotropic clover charge density, 8^3 x 16",
            value=t_charge,
            unit="s",
            ratio=q,
            reference="ratio: Q",
        ),
    ]


def _caloron_rows(n_t: int = 6, n_s: int = 32, omega: float = 0.25) -> list[dict]:
    import numpy as np

    import instantonkit as ik
    from instantonkit.lattice import observables as obs
    from instantonkit.lattice import polyakov as pl
    from instantonkit.lattice import starts as lat

    beta = 1.0
    field = ik.caloron(0.5 * beta, beta, np.zeros(4), holonomy=omega)
    shape, a = (n_s, n_s, n_s, n_t), beta / n_t
    times, cpus, starts = [], [], {}
    for rtol in (1e-12, 1e-12, 1e-10):  # first call compiles; then the default rtol and a looser one
        t0, c0 = time.perf_counter(), time.process_time()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            starts[rtol] = lat.lattice_start(field, shape, a, boundary="window", rtol=rtol)
        times.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    start, loose = starts[1e-12], starts[1e-10]
    diff = float(np.max(np.abs(start.links - loose.links)))
    t0, c0 = time.perf_counter(), time.process_time()
    found = ik.find_lattice_constituents(
        start.links, 2, spacing=a, origin=start.report.origin, quantity="charge", period=beta
    )
    t_find, c_find = time.perf_counter() - t0, time.process_time() - c0
    want = field.constituents()[0][:, :3]
    off = max(float(np.min(np.linalg.norm(want - p, axis=1))) for p in found.positions)
    tr = 0.5 * np.trace(pl.lattice_polyakov_loop(start.links)[0, 0, 0]).real
    s_w = obs.wilson_action(start.links) / EIGHT_PI2
    q = obs.clover_charge(start.links)
    label = f"caloron start {n_t} x {n_s}^3 (omega = {omega:g}, a = beta/{n_t}, window)"
    return [
        dict(
            figure=f"{label}, first call",
            value=times[0],
            unit="s",
            ratio=times[0] / 30.0,
            reference=f"ratio: over the 30 s goal (compilation included); CPU {cpus[0]:.1f} s",
        ),
        dict(
            figure=f"{label}, compiled, rtol 1e-12",
            value=times[1],
            unit="s",
            ratio=times[1] / 30.0,
            reference=f"ratio: over the 30 s goal; CPU {cpus[1]:.1f} s",
        ),
        dict(
            figure=f"{label}, compiled, rtol 1e-10",
            value=times[2],
            unit="s",
            ratio=times[2] / 30.0,
            reference=f"ratio: over the 30 s goal; CPU {cpus[2]:.1f} s; links differ by {diff:.1e}",
        ),
        dict(
            figure=f"{label}: constituent finder on the links (clover charge)",
            value=t_find,
            unit="s",
            ratio=off,
            reference=(
                f"ratio: largest distance / beta of a found constituent from the field's; CPU {c_find:.1f} s; "
                f"fractions {', '.join(f'{v:.3f}' for v in found.fractions)} (2 omega, 1 - 2 omega = 0.5)"
            ),
        ),
        dict(figure=f"{label}: S_W / 8 pi^2", value=s_w, unit="", ratio=None, reference="-> 1 as a -> 0"),
        dict(figure=f"{label}: clover Q", value=q, unit="", ratio=None, reference="1 per period"),
        dict(
            figure=f"{label}: 1/2 tr P at the box corner",
            value=tr,
            unit="",
            ratio=None,
            reference=f"cos 2 pi omega = {np.cos(2 * np.pi * omega):.3g} (Kraan, van Baal 1998)",
        ),
    ]


def run(quick: bool = False, n_s: int | None = None) -> list[dict]:
    """Rows {figure, value, unit, ratio, reference} (see the module docstring); n_s: N_s of the caloron start."""
    if quick:
        return _quick_rows()
    return _quick_rows() + _caloron_rows(n_s=n_s or 32)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    args = parser.parse_args()
    from benchmarks.run import print_rows

    print_rows(run(quick=args.quick))
