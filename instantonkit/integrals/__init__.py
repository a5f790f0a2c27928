"""Integration: quadrature rules, the adaptive cubature, Osborn's flux route, the integral drivers.

Modules (floor 2 of the package; the floors inside are in DEVELOPERS.md):

* ``cubature``: The adaptive integrator under `instantonkit.integrals.drivers`: per-centre hyperspherical
* ``drivers``: Integrals over R^4 (or R^3 x one period) of a field's densities, with error estimates.
* ``flux``: Integrals of ADHM data through Osborn's flux: the ball |x - c| < R by its boundary sphere, the rest by volume.
* ``quadrature``: Quadrature rules for integrals over R^4 and over R^3 x [t0, t0 + beta), as point and weight arrays.
* ``singular``: Where a density is singular, and how fast it grows there: the local power law |f| ~ r^-p.
"""

# ``instantonkit.integrals`` was the module now in ``drivers``: its API stays here.
from . import drivers as _front
from .drivers import *  # noqa: F403
from .drivers import __all__  # noqa: F401


def __getattr__(name):
    """The seams of ``drivers`` that 'integrals' offered outside ``__all__`` (package-internal)."""
    return getattr(_front, name)
