"""One ADHM concept, two realisations (quaternionic SU(2)/Sp(n), complex SU(N)): data, moduli, constraint solves, k x k kernels, zero modes.

Modules (floor 3 of the package; the floors inside are in DEVELOPERS.md):

* ``_kxk``: Batch-major k x k kernels of ADHM densities: the points on the last axis, so XLA vectorises across them.
* ``base``: What every realisation of ADHM data offers, and the one constraint solve they share.
* ``kernels``: Quaternionic kernels of ADHM data and the closed-form links of charge one.
* ``metric``: The L^2 metric of the instanton moduli space, its volume form, and its geodesics.
* ``moduli``: ADHM data from moduli: single instantons, well-separated multi-instantons (the constraint solved),
* ``quaternionic``: ADHM data for SU(2) = Sp(1) and Sp(n) multi-instantons, its validation and its constructors.
* ``tangent``: Tangent vectors of ADHM data and the bosonic zero modes they give, in closed form.
* ``unitary``: Complex ADHM data for SU(N) (U(N)) multi-instantons, its validation and fields (constructors: `instantonkit.adhm.unitary_moduli`).
* ``unitary_moduli``: Complex ADHM data from moduli and from other data.
* ``zero_mode_phase``: The U(1) phase of the zero modes of complex (SU(N)) ADHM data: the flat part a, its ray integral theta.
* ``zero_modes``: Normalisable zero modes of the fundamental Dirac operator in an ADHM background, in closed form.
"""

# ``instantonkit.adhm`` was the module now in ``quaternionic``: its API stays here.
from . import quaternionic as _front
from .quaternionic import *  # noqa: F403
from .quaternionic import __all__  # noqa: F401


def __getattr__(name):
    """The seams of ``quaternionic`` that 'adhm' offered outside ``__all__`` (package-internal)."""
    return getattr(_front, name)
