"""The constant-curvature field on a twisted 4-torus: 't Hooft's abelian solution of fractional charge (floor 4).

't Hooft (Commun. Math. Phys. 81 (1981) 267, from memory; see also van Baal, Commun. Math. Phys. 85
(1982) 529) found the Yang-Mills fields of constant field strength on the torus
T^4 = [0, L1) x [0, L2) x [0, L3) x [0, L4) with twisted boundary conditions.  Our choice, written out:

    T = diag(-1/N, ..., -1/N, (N-1)/N)           (traceless Hermitian, tr T^2 = (N-1)/N; SU(2): -sigma_3/2),
    f12 = 2 pi / (L1 L2),  f34 = 2 pi / (L3 L4),
    A_1 = 0,  A_2 = -i f12 x1 T,  A_3 = 0,  A_4 = -i f34 x3 T         (x in the box, anti-Hermitian),
    F_12 = -i f12 T,  F_34 = -i f34 T,  every other F_mu nu = 0      (constant, abelian).

Transition functions (conventions module: a gauge transformation is A -> g A g^-1 + g d g^-1) glue the
faces, A(x + L_mu e_mu) = Omega_mu(x) A(x) Omega_mu(x)^-1 + Omega_mu(x) d Omega_mu(x)^-1, with

    Omega_1(x) = exp(i f12 L1 x2 T),  Omega_3(x) = exp(i f34 L3 x4 T),  Omega_2 = Omega_4 = 1,

and they close up to the centre (the cocycle; 't Hooft, Nucl. Phys. B 153 (1979) 141, from memory)

    Omega_mu(x + L_nu e_nu) Omega_nu(x) = exp(-2 pi i n_mu nu / N) Omega_nu(x + L_mu e_mu) Omega_mu(x)

with the twist n_12 = n_34 = 1 (and n_13 = n_14 = n_23 = n_24 = 0), since exp(2 pi i T) = exp(-2 pi i / N).
The sign in exp(-2 pi i n / N) is the one that matches the lattice convention of
`instantonkit.lattice.twist` (twisted plaquette z_mu nu U_p with z = exp(+2 pi i n_mu nu / N)): the exact
links of this field (`instantonkit.lattice.twist.constant_flux_links`) carry exp(-2 pi i n / N) on the
corner plaquette, which z removes.

Totals (s = -1/2 sum tr F F and q = -1/(32 pi^2) eps tr F F, conventions module; V = L1 L2 L3 L4):

    s = (f12^2 + f34^2) (N-1)/N,              S = 4 pi^2 (N-1)/N (r + 1/r),  r = L1 L2 / (L3 L4),
    q = f12 f34 (N-1)/N / (4 pi^2),           Q = (N-1)/N  (1/2 for SU(2); = -1/N mod 1),

so S = 8 pi^2 Q (r + 1/r)/2 >= 8 pi^2 Q with equality, self-duality F_12 = F_34, exactly when
L1 L2 = L3 L4 ('t Hooft 1981, from memory).  For SU(2) the self-dual field has Q = 1/2 and S = 4 pi^2.
For N >= 3 this abelian choice gives Q = (N-1)/N; 't Hooft's charge 1/N solutions need non-abelian
(twist-eater) transition functions in an SU(k) x SU(N-k) x U(1) block and are not built here.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._pytree import PytreeFields
from ..engine.fields import action_from_f, charge_from_f

__all__ = ["ConstantFluxField", "constant_flux", "flux_generator"]

Array = jax.Array | np.ndarray


def flux_generator(n: int = 2) -> np.ndarray:
    """The generator T = diag(-1/N, ..., -1/N, (N-1)/N) of the constant flux; (N, N) float64 (module docstring)."""
    n = _check_n(n)
    t = np.full(n, -1.0 / n)
    t[-1] = (n - 1.0) / n
    return np.diag(t)


def _check_n(n) -> int:
    n = _v.positive_int("n", n)
    if n < 2:
        raise ValueError(f"n (the N of SU(N)) must be at least 2; found {n}")
    return n


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ConstantFluxField(PytreeFields):
    """'t Hooft's constant-curvature SU(N) field on the twisted torus of sides ``box`` (module docstring).

    box: (4,) float64 sides (L1, L2, L3, L4) > 0; n: N of SU(N) (>= 2).  The potential is that of the
    fundamental box [0, L) (at other points it is the same formula, not the periodic image: the torus is
    glued by `transition`).  Closed-form field strength and densities; `total_action`, `total_charge` and
    `is_self_dual` give the exact totals.
    """

    box: Array
    n: int = 2

    _leaves = ("box",)
    _static = ("n",)

    def __post_init__(self):
        object.__setattr__(self, "n", _check_n(self.n))
        if _v.is_tracer(self.box):
            return
        box = _v.positive_vector("box", self.box, 4)
        object.__setattr__(self, "box", box)

    # -- the field ---------------------------------------------------------------------------------------
    def fluxes(self):
        """(f12, f34) = (2 pi / (L1 L2), 2 pi / (L3 L4))."""
        b = jnp.asarray(self.box)
        return 2.0 * jnp.pi / (b[0] * b[1]), 2.0 * jnp.pi / (b[2] * b[3])

    def potential(self, x):
        """A_mu(x) = (0, -i f12 x1 T, 0, -i f34 x3 T); (4,) -> (4, N, N) complex128."""
        x = jnp.asarray(x, dtype=jnp.float64)
        f12, f34 = self.fluxes()
        t = jnp.asarray(flux_generator(self.n), dtype=jnp.complex128)
        zero = jnp.zeros_like(t)
        return jnp.stack([zero, -1j * f12 * x[0] * t, zero, -1j * f34 * x[2] * t])

    def field_strength(self, x):
        """F_12 = -F_21 = -i f12 T, F_34 = -F_43 = -i f34 T, the rest 0; (4,) -> (4, 4, N, N) complex128."""
        del x
        f12, f34 = self.fluxes()
        t = jnp.asarray(flux_generator(self.n), dtype=jnp.complex128)
        f = jnp.zeros((4, 4, self.n, self.n), dtype=jnp.complex128)
        f = f.at[0, 1].set(-1j * f12 * t).at[1, 0].set(1j * f12 * t)
        return f.at[2, 3].set(-1j * f34 * t).at[3, 2].set(1j * f34 * t)

    def action_density(self, x):
        """s = -1/2 sum tr F F (conventions module) = (f12^2 + f34^2) (N-1)/N."""
        return action_from_f(self.field_strength(x))

    def charge_density(self, x):
        """q = -1/(32 pi^2) eps tr F F (conventions module) = f12 f34 (N-1)/N / (4 pi^2)."""
        return charge_from_f(self.field_strength(x))

    def transition(self, mu: int, x):
        """Omega_mu(x): A(x + L_mu e_mu) = Omega A(x) Omega^-1 + Omega d Omega^-1; (N, N) complex128.

        Omega_1 = exp(i f12 L1 x2 T), Omega_3 = exp(i f34 L3 x4 T), Omega_2 = Omega_4 = 1 (module docstring);
        ``mu`` is zero-based (0 .. 3).
        """
        mu = _v.choice("mu", mu, (0, 1, 2, 3))
        x = jnp.asarray(x, dtype=jnp.float64)
        f12, f34 = self.fluxes()
        b = jnp.asarray(self.box)
        diag = jnp.diagonal(jnp.asarray(flux_generator(self.n)))
        if mu == 0:
            phase = f12 * b[0] * x[1]
        elif mu == 2:
            phase = f34 * b[2] * x[3]
        else:
            phase = 0.0 * x[0]
        return jnp.diag(jnp.exp(1j * phase * diag))

    # -- totals ------------------------------------------------------------------------------------------
    def total_action(self) -> float:
        """S = 4 pi^2 (N-1)/N (r + 1/r), r = L1 L2 / (L3 L4) (module docstring; 4 pi^2 for self-dual SU(2))."""
        b = np.asarray(self.box)
        r = b[0] * b[1] / (b[2] * b[3])
        return float(4.0 * np.pi**2 * (self.n - 1) / self.n * (r + 1.0 / r))

    def total_charge(self) -> float:
        """Q = (N-1)/N (1/2 for SU(2)), whatever the sides."""
        return (self.n - 1) / self.n

    def is_self_dual(self, rtol: float = 1e-12) -> bool:
        """True when L1 L2 = L3 L4 within ``rtol`` (then F_12 = F_34 and S = 8 pi^2 Q)."""
        b = np.asarray(self.box)
        return bool(abs(b[0] * b[1] - b[2] * b[3]) <= rtol * max(b[0] * b[1], b[2] * b[3]))

    def describe(self) -> str:
        b = np.asarray(self.box)
        return (
            f"constant-flux SU({self.n}) field on the twisted torus {b[0]:g} x {b[1]:g} x {b[2]:g} x {b[3]:g} "
            f"(n_12 = n_34 = 1; Q = {self.total_charge():.6g}, S = {self.total_action():.10g})"
        )


def constant_flux(box=(1.0, 1.0, 1.0, 1.0), n: int = 2) -> ConstantFluxField:
    """'t Hooft's constant-curvature field on the twisted torus L1 x L2 x L3 x L4 (n_12 = n_34 = 1).

    Args:
      box: (4,) sides (L1, L2, L3, L4) > 0; self-dual when L1 L2 = L3 L4.
      n: N of SU(N), >= 2 (charge (N-1)/N: 1/2 for SU(2)).
    Returns:
      ConstantFluxField, with closed-form field strength and densities and the exact totals.
    Raises:
      ValueError / TypeError: a box that is not four positive finite numbers, n < 2 or not an integer.
    """
    return ConstantFluxField(box, n)
