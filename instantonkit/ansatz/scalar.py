"""The scalar ansatz A_mu = -1/2 eta-bar_{a mu nu} d_nu log(phi) u_a: closed forms shared by 't Hooft, JNR and calorons.

For a positive harmonic phi the potential is self-dual; F, s and q come in closed form from phi, its
gradient and Hessian (formulas and sources in `instantonkit.ansatz.classic`).  A subclass of
`ScalarAnsatz` gives ``_derivs(x, hessian)`` -> (phi, grad (4,), Hess (4, 4) or None).  Also the
argument checks the ansatz constructors share.
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core._pytree import PytreeFields
from ..core.conventions import LEVI_CIVITA, PI, QUATERNION_BASIS

#: The coefficient c of A_mu = c eta-bar_{a mu nu} d_nu log(phi) u_a that makes the ansatz self-dual.
ANSATZ_COUPLING = -0.5


#: 't Hooft's eta-bar symbols, (3, 4, 4).
ETA_BAR = qt.thooft_eta_bar()
_EPS3 = np.zeros((3, 3, 3))
_EPS3[0, 1, 2] = _EPS3[1, 2, 0] = _EPS3[2, 0, 1] = 1.0
_EPS3[0, 2, 1] = _EPS3[2, 1, 0] = _EPS3[1, 0, 2] = -1.0
#: The 2 x 2 images of the quaternion units i, j, k, (3, 2, 2) complex128.
UNITS_C = QUATERNION_BASIS[1:]

# -- validation helpers ---------------------------------------------------------------------------


def positive_scalar(name: str, value) -> np.ndarray:
    """A number > 0 as a 0-d float64 array (the pytree leaf)."""
    return np.asarray(_validate.positive_float(name, _validate.real_array(name, value, ())))


# -- the scalar-ansatz field (shared closed forms) ------------------------------------------------


def _components(phi, grad, hess):
    """v_{a mu} (3, 4) of A = c v u_a and F^a_mu nu (3, 4, 4) from phi (), grad (4,), hess (4, 4)."""
    c = ANSATZ_COUPLING
    w = grad / phi
    wmat = hess / phi - jnp.outer(w, w)
    v = jnp.einsum("amn,n->am", ETA_BAR, w)
    d = jnp.einsum("anl,ml->amn", ETA_BAR, wmat)  # eta-bar_{a nu l} W_mu l
    f = c * (d - jnp.swapaxes(d, 1, 2)) + 2.0 * c * c * jnp.einsum("abc,bm,cn->amn", _EPS3, v, v)
    return v, f


class ScalarAnsatz(PytreeFields):
    """Field protocol for A_mu = c eta-bar_{a mu nu} d_nu log(phi) u_a; subclasses give ``_derivs``."""

    def _derivs(self, x):  # pragma: no cover - abstract
        raise NotImplementedError

    def phi(self, x):
        """The harmonic scalar phi at one point (4,) -> () float64."""
        return self._derivs(jnp.asarray(x, dtype=jnp.float64), hessian=False)[0]

    def potential(self, x):
        """A_mu = -1/2 eta-bar_{a mu nu} d_nu log(phi) u_a at one point (4,) -> (4, 2, 2) complex."""
        phi, grad, _ = self._derivs(jnp.asarray(x, dtype=jnp.float64), hessian=False)
        v = jnp.einsum("amn,n->am", ETA_BAR, grad / phi)
        return ANSATZ_COUPLING * jnp.einsum("am,aij->mij", v, UNITS_C)

    def _f_components(self, x):
        return _components(*self._derivs(jnp.asarray(x, dtype=jnp.float64)))[1]

    def field_strength(self, x):
        """Closed-form F_mu nu from phi, its gradient and Hessian at one point (4,) -> (4, 4, 2, 2) complex."""
        return jnp.einsum("amn,aij->mnij", self._f_components(x), UNITS_C)

    def action_density(self, x):
        """s = sum_{a mu nu} (F^a_mu nu)^2 (= -1/2 sum tr F F) at one point (4,) -> ()."""
        return jnp.sum(self._f_components(x) ** 2)

    def charge_density(self, x):
        """q = 1/(16 pi^2) eps_{mu nu rho sigma} F^a_mu nu F^a_rho sigma at one point (4,) -> ()."""
        f = self._f_components(x)
        return jnp.einsum("mnrs,amn,ars->", LEVI_CIVITA, f, f) / (16.0 * PI**2)
