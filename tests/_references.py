"""Continuum references and checks that several test modules share (imported by name;
tests/ is on the path because it is not a package)."""

import numpy as np
import scipy.linalg as sla
from scipy import integrate, special

from instantonkit.lattice import smoothing as sm


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


def force_finite_difference(links, force, action, site=(1, 2, 3, 0), mu=2, seed=2, h=1e-4):
    """Both sides of d/ds S(exp(s X) U)|_{s=0} = 2 tr(X Z) on one link (Z = -g0^2 dS; Luescher, JHEP 08 (2010) 071,
    section 2, from memory): a central finite difference of `action` with scipy's expm, and the force's prediction.

    links: (*dims, 4, 2, 2) complex128 SU(2) links; force: the force Z at those links, same shape; action: a callable
    of links returning the action; X is one random traceless anti-Hermitian 2 x 2 matrix (numpy seed `seed`) moving
    the link at `site` in direction `mu`.  Returns (finite difference, 2 Re tr(X Z)).
    """
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = 0.5 * (x - x.conj().T)
    x = x - np.trace(x) / 2 * np.eye(2)
    where = tuple(site) + (mu,)

    def s(t):
        v = links.copy()
        v[where] = sla.expm(t * x) @ v[where]
        return action(v)

    fd = (s(h) - s(-h)) / (2 * h)
    return fd, 2.0 * np.real(np.trace(x @ np.asarray(force)[where]))


def noisy_links(links, amp, seed):
    """Links multiplied by exp(amp X), X random traceless anti-Hermitian (a rough configuration; numpy seed ``seed``).

    links: (*dims, 4, N, N) complex128; the same shape back.
    """
    rng = np.random.default_rng(seed)
    n = links.shape[-1]
    z = rng.normal(size=links.shape) + 1j * rng.normal(size=links.shape)
    x = 0.5 * (z - np.conj(np.swapaxes(z, -1, -2)))
    x = x - np.trace(x, axis1=-2, axis2=-1)[..., None, None] * np.eye(n) / n
    return np.asarray(sm._expm_su(amp * x)) @ links


def haar_links(shape, n=2, seed=0):
    """Haar-random SU(n) links (`instantonkit.lattice.observables.random_gauge` per direction): rough, far from smooth.

    shape: (L1, L2, L3, L4); returns (L1..L4, 4, n, n) complex128.
    """
    from instantonkit.lattice import observables as obs

    return np.stack([obs.random_gauge(shape, n, seed=seed + mu) for mu in range(4)], axis=4)
