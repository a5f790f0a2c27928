"""SU(N) calorons of charge 1 (Kraan-van Baal): N constituent monopoles, densities in closed form, the potential.

Holonomy mu_1 <= ... <= mu_N with sum mu_m = 0 (the Polyakov loop at spatial infinity is conjugate to
diag(exp(2 pi i mu_m))), constituents at chosen positions y_m with action fractions
nu_m = mu_{m+1} - mu_m (mu_{N+1} = 1 + mu_1); the action density is s = -1/2 box box log psi with
psi = 1/2 tr(A_N ... A_1) - cos(2 pi t / beta) (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from
memory; closed form in `instantonkit.ansatz.caloron_psi`).  The potential, periodic in x4 with
A_4 -> 2 pi i diag(mu) / beta far from the constituents, is the Nahm transform of piecewise-constant
Nahm data (`instantonkit.ansatz.caloron_nahm`, where the construction is derived).
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._pytree import PytreeFields
from ..core.conventions import PI
from .caloron_nahm import caloron_potential_point, constituent_positions
from .caloron_psi import caloron_action_density
from .scalar import positive_scalar

#: |sum mu| accepted as zero, and the tolerance of the ordering mu_m <= mu_{m+1}.
_MU_TOL = 1e-12


def holonomy_eigenphases(holonomy) -> np.ndarray:
    """mu (N,) checked: finite, N >= 2, ascending, summing to 0, mu_N - mu_1 <= 1.

    Raises ValueError naming the value (the sum, the first descending pair or the spread).
    """
    mu = _validate.real_array("holonomy", holonomy, (None,), shape_text="(N,) with N >= 2")
    if mu.shape[0] < 2:
        raise ValueError(f"holonomy must hold N >= 2 eigenphases mu_m; found {mu.tolist()}")
    down = np.nonzero(np.diff(mu) < -_MU_TOL)[0]
    if down.size:
        m = int(down[0])
        raise ValueError(
            f"holonomy eigenphases must be ordered mu_1 <= ... <= mu_N; found mu_{m + 1} = {mu[m]!r} > "
            f"mu_{m + 2} = {mu[m + 1]!r} in {mu.tolist()}"
        )
    if abs(float(mu.sum())) > _MU_TOL * max(1.0, float(np.abs(mu).sum())):
        raise ValueError(f"holonomy eigenphases must sum to 0 (SU(N)); found sum {float(mu.sum())!r} for {mu.tolist()}")
    if mu[-1] - mu[0] > 1.0 + _MU_TOL:
        raise ValueError(
            f"holonomy eigenphases must satisfy mu_N - mu_1 <= 1; found {float(mu[-1] - mu[0])!r} for {mu.tolist()}"
        )
    return mu


def fractions_of(mu: np.ndarray) -> np.ndarray:
    """nu_m = mu_{m+1} - mu_m, nu_N = 1 + mu_1 - mu_N: the constituents' action fractions (N,), summing to 1."""
    return np.append(np.diff(mu), 1.0 + mu[0] - mu[-1])


def default_positions(mu: np.ndarray, size: float, period: float, center, axis) -> np.ndarray:
    """Constituents on ``axis`` at neighbour distance pi rho^2 / beta, their nu-weighted mean at ``center``.

    For N = 2 these are the Kraan-van Baal SU(2) positions c - nu_2 d n and c + nu_1 d n.  (N, 3).
    """
    nu = fractions_of(mu)
    n = np.asarray(axis, dtype=np.float64)
    n = n / np.linalg.norm(n)
    d = PI * size**2 / period
    s = d * np.arange(mu.shape[0])
    s = s - nu @ s
    return np.asarray(center, dtype=np.float64)[:3] + s[:, None] * n[None, :]


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class SUNCaloronField(PytreeFields):
    """Kraan-van Baal SU(N) caloron of charge 1: period beta, holonomy mu, N constituents.

    s = -1/2 box box log psi, psi = 1/2 tr(A_N ... A_1) - cos(2 pi (x4 - t0) / beta) with
    A_m = (1/r_m) [[r_m, |y_{m+1} - y_m|], [0, r_{m+1}]] [[cosh, sinh], [sinh, cosh]](2 pi nu_m r_m / beta),
    r_m = |x_vec - y_m|, y_{N+1} = y_1 (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from memory);
    self-dual, so q = s / (8 pi^2); Q = +1 per period.  The potential by the Nahm transform
    (`instantonkit.ansatz.caloron_nahm`): periodic in x4, A_4 -> 2 pi i diag(mu) / beta far away, its
    autodiff s equal to the closed form (tests/test_caloron_nahm.py).  N = 2 is the SU(2) caloron of
    `instantonkit.ansatz.calorons.HolonomyCaloronField` (tests/test_caloron_density.py).
    period: beta > 0; holonomy: mu (N,) ascending, sum 0; positions: (N, 3) distinct points y_m;
    time: t0, the x4 of the caloron's centre.
    """

    period: jax.Array | np.ndarray
    holonomy: jax.Array | np.ndarray
    positions: jax.Array | np.ndarray
    time: jax.Array | np.ndarray = 0.0  # type: ignore[assignment]

    def __post_init__(self):
        if _validate.is_tracer(self.period, self.holonomy, self.positions, self.time):
            return
        object.__setattr__(self, "period", positive_scalar("period", self.period))
        mu = holonomy_eigenphases(self.holonomy)
        object.__setattr__(self, "holonomy", mu)
        n = mu.shape[0]
        pos = constituent_positions(self.positions, n, " (coincident constituents make psi vanish)")
        object.__setattr__(self, "positions", pos)
        object.__setattr__(self, "time", np.asarray(_validate.finite_float("time", self.time), dtype=np.float64))

    _leaves = ("period", "holonomy", "positions", "time")

    @property
    def charge(self) -> int:
        """Instanton number per period, +1."""
        return 1

    @property
    def rank(self) -> int:
        """N of SU(N)."""
        return int(np.shape(self.holonomy)[0])

    def _fractions(self):
        mu = jnp.asarray(self.holonomy)
        return jnp.append(jnp.diff(mu), 1.0 + mu[0] - mu[-1])

    def potential(self, x):
        """A_mu at one point (4,) -> (4, N, N) complex128: traceless, anti-Hermitian, periodic in x4.

        The Nahm transform of piecewise-constant Nahm data (`instantonkit.ansatz.caloron_nahm`); in its
        gauge A(x + beta e_4) = A(x) and A_4 -> 2 pi i diag(mu) / beta at spatial infinity.
        """
        return caloron_potential_point(
            x, jnp.asarray(self.positions), jnp.asarray(self.holonomy), jnp.asarray(self.period), jnp.asarray(self.time)
        )

    def density_batch(self, points, quantity: str):
        """Field hook: s = -1/2 box box log psi (or q = s / 8 pi^2) at a batch of points; (m, 4) -> (m,)."""
        pts = jnp.asarray(points) - jnp.concatenate([jnp.zeros(3), jnp.asarray(self.time)[None]])
        s = caloron_action_density(pts, jnp.asarray(self.positions), self._fractions(), jnp.asarray(self.period))
        return s if quantity == "action_density" else s / (8.0 * PI**2)

    def asymptotic_holonomy(self) -> np.ndarray:
        """Field hook: mu (N,), ascending, summing to 0."""
        return np.asarray(self.holonomy, dtype=np.float64).copy()

    def constituents(self):
        """Field hook: (positions (N, 4) at x4 = t0, fractions nu (N,))."""
        pos = np.asarray(self.positions, dtype=np.float64)
        t = np.full((pos.shape[0], 1), float(self.time))
        return np.concatenate([pos, t], axis=1), fractions_of(np.asarray(self.holonomy))

    def hint(self):
        """(centre (4,), scale): the nu-weighted mean of the constituents, max(beta, their spread)."""
        pos, nu = self.constituents()
        c = nu @ pos
        spread = float(np.max(np.linalg.norm(pos[:, :3] - c[:3], axis=1)))
        return c, max(float(self.period), spread)

    def layout(self):
        """(centres (m, 4), scales (m,)): each constituent of fraction nu > 0, scale beta / max(2 nu, 1/2)."""
        pos, nu = self.constituents()
        keep = nu > 0
        beta = float(self.period)
        return pos[keep], np.array([beta / max(2.0 * v, 0.5) for v in nu[keep]])

    def describe(self) -> str:
        mu = ", ".join(f"{v:g}" for v in np.asarray(self.holonomy))
        return f"Kraan-van Baal SU({self.rank}) caloron, period = {float(self.period):g}, holonomy mu = ({mu})"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'sun_caloron')."""
        return {
            "kind": "sun_caloron",
            "period": float(self.period),
            "holonomy": np.asarray(self.holonomy, dtype=np.float64).tolist(),
            "positions": np.asarray(self.positions, dtype=np.float64).tolist(),
            "time": float(self.time),
            "charge": 1,
        }
