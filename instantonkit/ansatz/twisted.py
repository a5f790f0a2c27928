"""The constant-curvature field on a twisted 4-torus: 't Hooft's solution of charge 1/N (floor 4).

't Hooft (Commun. Math. Phys. 81 (1981) 267, from memory; see also van Baal, Commun. Math. Phys. 85
(1982) 529) found Yang-Mills fields of constant, abelian field strength on the torus
T^4 = [0, L1) x [0, L2) x [0, L3) x [0, L4) with twisted boundary conditions; for SU(N) with charge 1/N
they live in U(1) x SU(N-1).  Our choice, written out (M = N - 1):

    H = diag(-M/N, 1/N, ..., 1/N)     (traceless Hermitian, tr H^2 = M/N; SU(2): H = -sigma_3 / 2),
    Phi12 = 2 pi / M,  Phi34 = 2 pi,  f12 = Phi12 / (L1 L2),  f34 = Phi34 / (L3 L4),
    A_1 = 0,  A_2 = -i f12 x1 H,  A_3 = 0,  A_4 = -i f34 x3 H         (x in the box, anti-Hermitian),
    F_12 = -i f12 H,  F_34 = -i f34 H,  every other F_mu nu = 0      (constant, abelian).

Transition functions (conventions module: a gauge transformation is A -> g A g^-1 + g d g^-1) glue the
faces, A(x + L_mu e_mu) = Omega_mu(x) A(x) Omega_mu(x)^-1 + Omega_mu(x) d Omega_mu(x)^-1, with

    Omega_1(x) = exp(i f12 L1 x2 H) E1,  Omega_2 = E2,  Omega_3(x) = exp(i f34 L3 x4 H),  Omega_4 = 1,

E1 = diag(1, S), E2 = diag(1, P): constant twist eaters in the SU(M) block, commuting with H, with S the cyclic shift
and P = diag(1, w, w^2, ...), w = exp(2 pi i / M) ('t Hooft's clock and shift, from memory), so
E1 E2 = exp(-2 pi i / M) E2 E1 on that block (each scaled to determinant 1; nothing for SU(2)).  They close
up to the centre (the cocycle; 't Hooft, Nucl. Phys. B 153 (1979) 141, from memory)

    Omega_mu(x + L_nu e_nu) Omega_nu(x) = exp(-2 pi i n_mu nu / N) Omega_nu(x + L_mu e_mu) Omega_mu(x)

with the twist n_12 = 1, n_34 = N - 1 (= -1 mod N; n_12 = n_34 = 1 for SU(2)) and the other n = 0:
exp(i Phi12 H) exp(-2 pi i / M on the block) = exp(-2 pi i / N) and exp(i Phi34 H) = exp(-2 pi i M / N).
The sign in exp(-2 pi i n / N) is the one that matches the lattice convention of
`instantonkit.lattice.twist` (twisted plaquette z_mu nu U_p with z = exp(+2 pi i n_mu nu / N)): the exact
links of this field (`instantonkit.lattice.twist.constant_flux_links`) carry exp(-2 pi i n / N) on the
corner plaquette, which z removes.

Totals (s = -1/2 sum tr F F and q = -1/(32 pi^2) eps tr F F, conventions module; V = L1 L2 L3 L4,
R = L3 L4 / (L1 L2)):

    s = (f12^2 + f34^2) M/N,           S = 4 pi^2 (M/N) (R / M^2 + 1/R),
    q = f12 f34 (M/N) / (4 pi^2),      Q = Phi12 Phi34 (M/N) / (4 pi^2) = 1/N,

so S >= 8 pi^2 Q = 8 pi^2 / N with equality, self-duality F_12 = F_34, exactly when L3 L4 = (N - 1) L1 L2
('t Hooft 1981, from memory).  For SU(2): Q = 1/2, S = 2 pi^2 (R + 1/R), self-dual with S = 4 pi^2 when
L1 L2 = L3 L4.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._pytree import PytreeFields
from ..engine.fields import action_from_f, charge_from_f

__all__ = ["ConstantFluxField", "constant_flux", "flux_generator", "twist_eaters", "constant_flux_twist"]

Array = jax.Array | np.ndarray


def flux_generator(n: int = 2) -> np.ndarray:
    """The generator H = diag(-(N-1)/N, 1/N, ..., 1/N) of the constant flux; (N, N) float64 (module docstring)."""
    n = _check_n(n)
    h = np.full(n, 1.0 / n)
    h[0] = -(n - 1.0) / n
    return np.diag(h)


def twist_eaters(n: int = 2) -> tuple[np.ndarray, np.ndarray]:
    """(E1, E2) = (diag(1, S), diag(1, P)) with S, P on the SU(N-1) block, E1 E2 = exp(-2 pi i / (N-1)) E2 E1 there; (N, N) complex128.

    S the cyclic shift (S e_j = e_{j+1}), P = diag(w^j), w = exp(2 pi i / (N-1)), each times a phase that
    makes its determinant 1 (module docstring); identities for SU(2).
    """
    n = _check_n(n)
    m = n - 1
    shift = np.roll(np.eye(m), 1, axis=0).astype(np.complex128)
    clock = np.diag(np.exp(2j * np.pi * np.arange(m) / m))
    out = []
    for block in (shift, clock):
        block = block * np.linalg.det(block) ** (-1.0 / m)
        e = np.eye(n, dtype=np.complex128)
        e[1:, 1:] = block
        out.append(e)
    return out[0], out[1]


def constant_flux_twist(n: int = 2) -> np.ndarray:
    """The twist of the constant-flux field: n_12 = 1, n_34 = N - 1 (antisymmetric); (4, 4) int64."""
    n = _check_n(n)
    t = np.zeros((4, 4), dtype=np.int64)
    t[0, 1], t[2, 3] = 1, n - 1
    return t - t.T


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
        """(f12, f34) = (2 pi / ((N - 1) L1 L2), 2 pi / (L3 L4))."""
        b = jnp.asarray(self.box)
        return 2.0 * jnp.pi / ((self.n - 1) * b[0] * b[1]), 2.0 * jnp.pi / (b[2] * b[3])

    def potential(self, x):
        """A_mu(x) = (0, -i f12 x1 H, 0, -i f34 x3 H); (4,) -> (4, N, N) complex128."""
        x = jnp.asarray(x, dtype=jnp.float64)
        f12, f34 = self.fluxes()
        t = jnp.asarray(flux_generator(self.n), dtype=jnp.complex128)
        zero = jnp.zeros_like(t)
        return jnp.stack([zero, -1j * f12 * x[0] * t, zero, -1j * f34 * x[2] * t])

    def field_strength(self, x):
        """F_12 = -F_21 = -i f12 H, F_34 = -F_43 = -i f34 H, the rest 0; (4,) -> (4, 4, N, N) complex128."""
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

        Omega_1 = exp(i f12 L1 x2 H) E1, Omega_2 = E2, Omega_3 = exp(i f34 L3 x4 H), Omega_4 = 1 (module
        docstring, E1 and E2 from `twist_eaters`); ``mu`` is zero-based (0 .. 3).
        """
        mu = _v.choice("mu", mu, (0, 1, 2, 3))
        x = jnp.asarray(x, dtype=jnp.float64)
        f12, f34 = self.fluxes()
        b = jnp.asarray(self.box)
        diag = jnp.diagonal(jnp.asarray(flux_generator(self.n)))
        e1, e2 = (jnp.asarray(e) for e in twist_eaters(self.n))
        if mu == 0:
            return jnp.diag(jnp.exp(1j * f12 * b[0] * x[1] * diag)) @ e1
        if mu == 1:
            return e2
        if mu == 2:
            return jnp.diag(jnp.exp(1j * f34 * b[2] * x[3] * diag))
        return jnp.eye(self.n, dtype=jnp.complex128)

    def twist(self) -> np.ndarray:
        """The twist tensor n_12 = 1, n_34 = N - 1 (`constant_flux_twist`); (4, 4) int64."""
        return constant_flux_twist(self.n)

    # -- totals ------------------------------------------------------------------------------------------
    def total_action(self) -> float:
        """S = 4 pi^2 (M/N) (R / M^2 + 1/R), M = N - 1, R = L3 L4 / (L1 L2) (module docstring; 8 pi^2 / N when self-dual)."""
        b = np.asarray(self.box)
        r = b[2] * b[3] / (b[0] * b[1])
        m = self.n - 1
        return float(4.0 * np.pi**2 * m / self.n * (r / m**2 + 1.0 / r))

    def total_charge(self) -> float:
        """Q = 1/N, whatever the sides."""
        return 1.0 / self.n

    def is_self_dual(self, rtol: float = 1e-12) -> bool:
        """True when L3 L4 = (N - 1) L1 L2 within ``rtol`` (then F_12 = F_34 and S = 8 pi^2 Q)."""
        b = np.asarray(self.box)
        lhs, rhs = b[2] * b[3], (self.n - 1) * b[0] * b[1]
        return bool(abs(lhs - rhs) <= rtol * max(lhs, rhs))

    def describe(self) -> str:
        b = np.asarray(self.box)
        return (
            f"constant-flux SU({self.n}) field on the twisted torus {b[0]:g} x {b[1]:g} x {b[2]:g} x {b[3]:g} "
            f"(n_12 = 1, n_34 = {self.n - 1}; Q = {self.total_charge():.6g}, S = {self.total_action():.10g})"
        )


def constant_flux(box=(1.0, 1.0, 1.0, 1.0), n: int = 2) -> ConstantFluxField:
    """'t Hooft's constant-curvature field of charge 1/N on the twisted torus L1 x L2 x L3 x L4 (n_12 = 1, n_34 = N - 1).

    Args:
      box: (4,) sides (L1, L2, L3, L4) > 0; self-dual when L3 L4 = (N - 1) L1 L2 (SU(2): L1 L2 = L3 L4).
      n: N of SU(N), >= 2 (charge 1/N: 1/2 for SU(2)).
    Returns:
      ConstantFluxField, with closed-form field strength and densities and the exact totals.
    Raises:
      ValueError / TypeError: a box that is not four positive finite numbers, n < 2 or not an integer.
    """
    return ConstantFluxField(box, n)
