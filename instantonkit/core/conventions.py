"""The one place where instantonkit's signs and normalisations are written down.

Every formula in the library cites this module; the prose twin is ``docs/conventions.md``.

Summary (all Euclidean, metric delta_{mu nu}):

* Points are real arrays ``(..., 4)`` ordered ``(x1, x2, x3, x4)``; ``x4`` is Euclidean time.
* Quaternions are real arrays ``(..., 4)`` ordered ``(w, x, y, z)``, ``w`` the real part.
  The units map to 2x2 complex matrices as ``1 -> 1``, ``i -> -i sigma_1``, ``j -> -i sigma_2``,
  ``k -> -i sigma_3`` (`QUATERNION_BASIS`); this is an algebra homomorphism, onto SU(2) for unit
  quaternions, and quaternionic conjugation becomes the Hermitian adjoint.
* A point ``x`` is the quaternion ``p(x)`` whose matrix is ``x4 * 1 + i x.sigma``, i.e. components
  ``(w, x, y, z) = (x4, -x1, -x2, -x3)`` (`point_to_quaternion`).  Equivalently
  ``p(x) = sum_mu x_mu e_mu`` with ``e_mu`` = `E_MU`.
* Gauge fields are anti-Hermitian: ``D_mu = d_mu + A_mu``,
  ``F_mu nu = d_mu A_nu - d_nu A_mu + [A_mu, A_nu]``; a gauge transformation ``g(x)`` acts as
  ``A -> g A g^-1 + g d g^-1``, ``F -> g F g^-1``.
* Action density ``s(x) = -1/2 sum_{mu nu} tr F_mu nu F_mu nu`` (`ACTION_DENSITY_FACTOR`), so a unit
  instanton has ``int s = 8 pi^2`` (`INSTANTON_ACTION`).  Coupling: ``S_YM = (1/g^2) int s``.
* Charge density ``q(x) = -1/(32 pi^2) eps_{mu nu rho sigma} tr F_mu nu F_rho sigma`` with
  ``eps_1234 = +1`` (`CHARGE_DENSITY_FACTOR`, `LEVI_CIVITA`).
* Dual: ``(*F)_mu nu = 1/2 eps_{mu nu rho sigma} F_rho sigma``.  An **instanton** is self-dual
  (``F = *F``) with ``Q = +1`` per unit; an anti-instanton is anti-self-dual with ``Q = -1``.
* Lattice links (used by `instantonkit.lattice.starts`): ``U_mu(n)`` is the parallel transporter along
  the straight segment ``z(t) = x + t a mu_hat``, ``t in [0, 1]``, solving ``dW/dt = a W(t) A_mu(z(t))``
  with ``W(0) = 1``, i.e. the path-ordered exponential with *earlier* points to the *left*.  Under a gauge
  transformation ``U_mu(n) -> g(x) U_mu(n) g(x + a mu_hat)^-1`` and the plaquette
  ``U_mu(n) U_nu(n+mu) U_mu(n+nu)^dag U_nu(n)^dag = exp(a^2 F_mu nu + O(a^3))``.
"""

from __future__ import annotations

import itertools

import numpy as np

__all__ = [
    "PI",
    "INSTANTON_ACTION",
    "ACTION_DENSITY_FACTOR",
    "CHARGE_DENSITY_FACTOR",
    "LEVI_CIVITA",
    "QUATERNION_BASIS",
    "E_MU",
    "point_to_quaternion",
    "quaternion_to_point",
    "hermitian_from_antihermitian",
    "antihermitian_from_hermitian",
    "action_with_coupling",
]

PI = float(np.pi)

#: The action of one (anti-)instanton, ``int s d^4x = 8 pi^2`` for ``|Q| = 1``.
INSTANTON_ACTION = 8.0 * PI**2

#: ``s = ACTION_DENSITY_FACTOR * sum_{mu nu} tr F_mu nu F_mu nu``.
ACTION_DENSITY_FACTOR = -0.5

#: ``q = CHARGE_DENSITY_FACTOR * eps_{mu nu rho sigma} tr F_mu nu F_rho sigma``.
CHARGE_DENSITY_FACTOR = -1.0 / (32.0 * PI**2)


def _levi_civita() -> np.ndarray:
    eps = np.zeros((4, 4, 4, 4))
    for perm in itertools.permutations(range(4)):
        inversions = sum(1 for a in range(4) for b in range(a + 1, 4) if perm[a] > perm[b])
        eps[perm] = -1.0 if inversions % 2 else 1.0
    return eps


#: ``LEVI_CIVITA[m, n, r, s] = eps_{m+1, n+1, r+1, s+1}`` with ``eps_1234 = +1``; shape (4, 4, 4, 4).
LEVI_CIVITA = _levi_civita()

_SIGMA = np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]], dtype=np.complex128)

#: Matrices of the quaternion units ``(1, i, j, k) -> (1, -i sigma_1, -i sigma_2, -i sigma_3)``; (4, 2, 2).
QUATERNION_BASIS = np.concatenate([np.eye(2, dtype=np.complex128)[None], -1j * _SIGMA])

#: ``E_MU[mu] = d p(x) / d x_mu`` as quaternions: ``e_1 = -i, e_2 = -j, e_3 = -k, e_4 = 1``; (4, 4).
E_MU = np.array([[0.0, -1.0, 0.0, 0.0], [0.0, 0.0, -1.0, 0.0], [0.0, 0.0, 0.0, -1.0], [1.0, 0.0, 0.0, 0.0]])


def point_to_quaternion(x):
    """Map points to their quaternions, ``p(x) = (x4, -x1, -x2, -x3)``.

    x: (..., 4) float (x1, x2, x3, x4)  ->  (..., 4) float (w, x, y, z).
    Works for numpy and jax arrays (it only indexes and negates).
    """
    return x[..., (3, 0, 1, 2)] * np.array([1.0, -1.0, -1.0, -1.0])


def quaternion_to_point(q):
    """Inverse of `point_to_quaternion`: (..., 4) quaternion -> (..., 4) point."""
    return q[..., (1, 2, 3, 0)] * np.array([-1.0, -1.0, -1.0, 1.0])


def hermitian_from_antihermitian(a, coupling: float = 1.0):
    """Convert an anti-Hermitian field of this library to the Hermitian convention.

    Hermitian convention: ``D = d - i g A^H``; ours: ``D = d + A``; hence ``A^H = i A / g``.
    The same factor converts field strengths: ``F^H = i F / g``.
    """
    return 1j * a / coupling


def antihermitian_from_hermitian(a_h, coupling: float = 1.0):
    """Convert a Hermitian-convention field ``A^H`` (``D = d - i g A^H``) to ours: ``A = -i g A^H``."""
    return -1j * coupling * a_h


def action_with_coupling(action, coupling: float):
    """Yang-Mills action with coupling ``g``: ``S = (1/g^2) int s``; ``action`` is ``int s`` (g = 1)."""
    return action / coupling**2
