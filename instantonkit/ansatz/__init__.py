"""Classic ansaetze ('t Hooft, JNR, BPST fields) and fields on R^3 x S^1 (calorons, windows).

Modules (floor 4 of the package; the floors inside are in DEVELOPERS.md):

* ``caloron_psi``: Kraan-van Baal's psi of a charge-1 SU(N) caloron and s = -1/2 box box log psi in closed form.
* ``calorons``: Calorons: instantons on R^3 x S^1: Harrington-Shepard and Kraan-van Baal (SU(2), any holonomy).
* ``calorons_sun``: SU(N) calorons of charge 1 (Kraan-van Baal): N constituent monopoles, densities in closed form.
* ``classic``: Classic instanton ansaetze as fields: 't Hooft, Jackiw-Nohl-Rebbi, Harrington-Shepard, BPST.
* ``mixtures``: Instantons and anti-instantons in the sum ansatz (R^4 and the torus), random ensembles, the ratio ansatz.
* ``mixture_totals``: The integrated action and charge of a mixture with error bars, beside its count n+ - n-.
* ``periodic``: The lattice torus: site positions and origins, and fields made smooth on it by a window.
* ``twisted``: 't Hooft's constant-curvature field of charge 1/N on the twisted 4-torus.
* ``scalar``: The scalar ansatz A = -1/2 eta-bar d log(phi) u: closed forms shared by 't Hooft, JNR and calorons.
"""

# ``instantonkit.ansatz`` was the module now in ``classic``: its API stays here.
from . import classic as _front
from .classic import *  # noqa: F403
from .classic import __all__  # noqa: F401


def __getattr__(name):
    """The seams of ``classic`` that 'ansatz' offered outside ``__all__`` (package-internal)."""
    return getattr(_front, name)
