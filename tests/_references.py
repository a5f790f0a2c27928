"""Continuum references that several test modules compare lattice quantities with (imported by name;
tests/ is on the path because it is not a package)."""

import numpy as np
from scipy import integrate, special


def bpst_box_action(rho, lo, hi):
    """Integral of the BPST density 48 rho^4 / (x^2 + rho^2)^4 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59
    (1975) 85) over a box.

    Schwinger's parametrisation 1/X^4 = (1/3!) int_0^inf u^3 e^{-u X} du (common practice) turns the
    box integral into one scipy quad over u of u^3 e^{-u rho^2} prod_i (sqrt(pi/u)/2)(erf(sqrt(u) hi_i) - erf(sqrt(u) lo_i)).
    """
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)

    def integrand(u):
        su = np.sqrt(u)
        box = np.prod(0.5 * np.sqrt(np.pi / u) * (special.erf(su * hi) - special.erf(su * lo)))
        return u**3 * np.exp(-u * rho**2) * box

    val, _ = integrate.quad(integrand, 0.0, np.inf, epsabs=0.0, epsrel=1e-12, limit=200)
    return 8.0 * rho**4 * val
