"""Lattice work: links (transport), starts, observables, smoothing, files, continuum references.

Modules (floor 5 of the package; the floors inside are in DEVELOPERS.md):

* ``boundaries``: Boundary conditions per lattice direction: the one reading of ``boundary=`` for starts and observables.
* ``files``: Lattice files: numpy ``.npz`` with the generation parameters, and ILDG (LIME records) for SU(3).
* ``fused``: The fused SU(2) Magnus path of ``transport``: all steps of a link in one compiled kernel.
* ``magnus``: The Magnus kernels of ``transport``: sixth-order steps, their nodes and batches.
* ``operators``: Operators made of m x n Wilson loops with coefficients: actions, field strengths, charges.
* ``observables``: Gauge-invariant observables of lattice link arrays: plaquettes, Wilson action, clover field strength
* ``polyakov``: Polyakov loops: the continuum loop around the period, and lattice loops of time links.
* ``rectangles``: Rectangular m x n Wilson loops: their traces, clovers and staples.
* ``references``: What a lattice start is compared with and rebuilt from.
* ``reports``: The records of a lattice start: its quality report and the finished start.
* ``scan``: A scan of lattice operators against a/rho with continuum references in the same box.
* ``sites``: Links of lattice sites (and of a box of sites), singular points handled in a twin gauge.
* ``staples``: Staples of m x n loops with a weight per (direction, plane) and Z_N phases (anisotropic and twisted flows).
* ``smoothing``: Smoothing of lattice link arrays: gradient flow, cooling, the 1x1 + 2x2 improved action and an
* ``starts``: Lattice starts: link variables of a continuum field, and gauge-invariant lattice observables.
* ``thermal``: Finite-temperature lattices: anisotropic spacings, the anisotropic Wilson weights, a caloron's limit at infinity.
* ``transport``: Parallel transporters along straight segments: closed forms and sixth-order Magnus steps.
* ``twist``: Twisted boundary conditions: the twist tensor, twisted observables, the constant-flux links.
* ``twisted_flow``: Wilson flow and cooling on a twisted torus (any loop operator's action too).
* ``twisted_operators``: Loop operators on a twisted torus: action, field strength, charge with the twist's factors.
"""

# ``instantonkit.lattice`` was the module now in ``starts``: its API stays here.
from . import starts as _front
from .starts import *  # noqa: F403
from .starts import __all__  # noqa: F401


def __getattr__(name):
    """The seams of ``starts`` that 'lattice' offered outside ``__all__`` (package-internal)."""
    return getattr(_front, name)
