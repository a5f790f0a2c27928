"""Integration: quadrature rules, the adaptive cubature, Osborn's flux route, the integral drivers.

Modules (floor 2 of the package; the floors inside are in DEVELOPERS.md):

* ``cubature``: The adaptive integrator under `instantonkit.integrals.drivers`: per-centre hyperspherical
* ``decay``: The decay probe of the adaptive cubature: a density that falls too slowly at infinity is refused.
* ``drivers``: Integrals over R^4 (or R^3 x one period) of a field's densities, with error estimates.
* ``estimates``: The error model of the adaptive cubature: what two levels of a rule say.
* ``flux``: Integrals of ADHM data through Osborn's flux: the ball |x - c| < R by its boundary sphere, the rest by volume.
* ``pieces``: The pieces of the adaptive cubature: layout, partition of unity, radial and angular levels, shell rules.
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
