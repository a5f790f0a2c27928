"""Fit exact ADHM data to sampled action densities by least squares: one driver, one model per realisation.

The model is the exact action density of ADHM data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65
(1978) 185) of k well-separated instantons, as a function of a parameter vector theta.  Each of the two
realisations of `instantonkit.adhm.base` offers one small parametrisation object (`ExactModel`):

* `QuaternionicModel` (SU(2), `ADHMData`; the construction of `instantonkit.adhm.moduli.multi_instanton`):
  diag(B) = p(a_i), Lambda_i = rho_i u_i, the off-diagonal of B from the constraint.  theta =
  [a_i (4k), log rho_i (k), omega_j (3 (k - 1))] with u_j = uref_j exp(omega_j) and u_1 = 1: the global
  Sp(1) rotation Lambda -> q Lambda is gauge (3 of the 8k moduli), so 8k - 3 gauge-invariant parameters.
  Sizes and orientations are separate coordinates, so the weakly determined orientations do not bend
  the valley of the well determined sizes.  SU(2) only (the gauge fixing of Sp(n > 1) is not written).
* `UnitaryModel` (SU(N > 2), `UnitaryADHMData`; the construction of
  `instantonkit.adhm.unitary_moduli.unitary_multi_instanton`): diag(B_a) = z_a(a_i),
  I_i = rho_i e_0^T g_i^dag, J^i = rho_i g_i e_1, then the off-diagonal of B1, B2 (weight 1) and I, J
  (weight 0.1) moved onto both moment maps.  theta = [a_i (4k), log rho_i (k), omega (P)] with
  g_j = g_j^ref C(X_j) (C the Cayley map, X_j = sum_p omega_p basis[p, j] anti-Hermitian) and g_1 fixed;
  X_j runs over the complement in u(N) of the directions that leave the data unchanged up to gauge
  (`orientation_basis`).  For k = 2, N = 3: 8 + 2 + 6 = 16 = 4kN - (N^2 - 1), the gauge-invariant count.
  The orientations are nuisance parameters (a representative, up to gauge and stabilisers); some enter
  the density only weakly, so the fit uses 'trf' and drops near-null directions from the covariance.

Both build their data through the one constraint solve of `instantonkit.adhm.base` (the builder's
Gauss-Newton run for a fixed number of unrolled steps, so jax.jacfwd differentiates the density through
it; why that is the implicit-function derivative: `instantonkit.adhm.moduli.solve_constraint_unrolled`),
and the one driver `fit_model` screens seeded random orientation starts by cost, refines the best few
(`instantonkit.fit._lsq.best_of_trials`) and propagates the curvature to the reported moduli.
"""

from __future__ import annotations

import dataclasses
from functools import partial
from typing import Any, ClassVar, Protocol, runtime_checkable

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from ..adhm.base import (
    anti_hermitian_basis,
    pack_unitary,
    solve_moment_maps,
    solve_quaternionic_constraint,
    unitary_weights,
    unpack_unitary,
)
from ..adhm.moduli import UNROLLED_STEPS, multi_instanton
from ..adhm.quaternionic import ADHMData
from ..adhm.unitary import UnitaryADHMData, complex_coordinates
from ..core import _validate
from ..core import quaternion as qt
from ..core.conventions import point_to_quaternion
from ._lsq import ModuliFit, best_of_trials, padded_samples

__all__ = [
    "ExactModel",
    "QuaternionicModel",
    "UnitaryModel",
    "fit_model",
    "ExactFit",
    "UnitaryFit",
    "fit_exact",
    "fit_unitary",
    "exact_density",
    "relative_orientations",
    "unitary_data",
    "orientation_basis",
]

#: Condition number of J^T J above which the quaternionic model's covariance is a pseudo-inverse.
_MAX_CONDITION = 1e14
#: Unrolled Gauss-Newton steps of the SU(N) moment-map solve (converged in about 4 for separated lumps).
_UNITARY_STEPS = 10
#: Weights of the SU(N) solve: off-diagonal of B and the entries of I, J (those of unitary_multi_instanton).
_W_B, _W_IJ = 1.0, 0.1


# -- results ------------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class ExactFit(ModuliFit):
    """Result of `fit_exact` (the quaternionic model).

    data: fitted ADHMData (SU(2), charge +k); centers (k, 4), sizes (k,), orientations (k, 4) unit
    quaternions u_j relative to u_1 (row 0 = 1); errors: {'centers': (k, 4), 'sizes': (k,),
    'orientations': (k, 4)} one-sigma statistical errors; chi2: weighted sum of squared residuals;
    dof: samples minus parameters; rms: relative rms residual; success: bool; message: str;
    condition: of J^T J; null: 0 (no direction is dropped).
    """


@dataclasses.dataclass(frozen=True)
class UnitaryFit(ModuliFit):
    """Result of `fit_unitary` (the SU(N) model).

    data: fitted UnitaryADHMData; centers (k, 4), sizes (k,); orientations (k, N, N): the fitted
    representative g_i (g_1 the reference; determined only up to gauge and stabilisers); errors:
    {'centers', 'sizes'} one-sigma statistical errors; chi2, dof, rms, success, message, condition
    (of the column-scaled J^T J on the kept directions); null: number of dropped near-null directions.
    """


# -- the model interface ------------------------------------------------------------------------------


@runtime_checkable
class ExactModel(Protocol):
    """One realisation's parametrisation of exact ADHM data for `fit_model` (hashable: a jit static argument).

    The class attributes hold the fit's options: orientation starts screened (``screen``, for k >= 2)
    and refined (``refine``), evaluations of each short trial (``trial_nfev``) and per parameter of the
    final run (``nfev_per_param``), xtol = ftol = gtol (``tol``), further ``least_squares`` options
    (``lsq_options``), the relative singular value below which a direction counts as null (``null_rcond``;
    None keeps all), the message when no start is solvable (``unsolvable``) and the result class.
    """

    screen: ClassVar[int]
    refine: ClassVar[int]
    trial_nfev: ClassVar[int]
    nfev_per_param: ClassVar[int]
    tol: ClassVar[float]
    lsq_options: ClassVar[dict]
    null_rcond: ClassVar[float | None]
    unsolvable: ClassVar[str]
    result: ClassVar[type]

    @property
    def k(self) -> int:
        """The charge: number of instantons."""

    def n_params(self, ctx: Any) -> int:
        """Length of the parameter vector theta."""

    def candidates(self, rng: np.random.Generator, orientations0: Any) -> list:
        """The orientation starts: ``orientations0`` (if given) first, then seeded draws from ``rng``."""

    def pack(self, centres, sizes, orientation) -> tuple[np.ndarray, Any] | None:
        """(theta (P,), ctx: the fixed reference the parameters are relative to), or None if not solvable there."""

    def data(self, theta, ctx) -> Any:
        """ADHM data of theta (jax-traceable), built through the one constraint solve of `instantonkit.adhm.base`."""

    def host_data(self, data) -> Any:
        """The validated numpy copy of the model's ``data`` (the constraint checked)."""

    def moduli(self, theta, ctx) -> dict:
        """The reported moduli with errors (jax): 'centers' (k, 4), 'sizes' (k,), and possibly more."""

    def orientations(self, theta, ctx) -> np.ndarray:
        """The reported orientations (numpy)."""


def exact_density(model: ExactModel, theta, ctx, pts):
    """Exact action density of the model's data at pts (M, 4) -> (M,) (jax-traceable; `ADHMConstruction` hook)."""
    return jax.vmap(model.data(theta, ctx).action_density)(pts)


# -- the quaternionic (SU(2)) model -------------------------------------------------------------------


def _qmul_np(a, b):
    return np.asarray(qt.qmul(jnp.asarray(a), jnp.asarray(b)))


def relative_orientations(data: ADHMData) -> np.ndarray:
    """u_1-bar u_j for the unit columns u_j of Lambda (SU(2)); (k, 4), row 0 = (1, 0, 0, 0).

    Invariant under the global gauge rotation Lambda -> q Lambda; each row is defined up to sign (the
    O(k) redundancy Lambda -> Lambda O, B -> O^T B O includes flipping the sign of a column).
    """
    cols = np.asarray(data.lam)[0]
    u = cols / np.linalg.norm(cols, axis=1, keepdims=True)
    conj = u[0] * np.array([1.0, -1.0, -1.0, -1.0])
    return _qmul_np(np.broadcast_to(conj, u.shape), u)


@dataclasses.dataclass(frozen=True)
class QuaternionicModel:
    """SU(2) ADHM data of k instantons, 8k - 3 parameters (module docstring); ctx = uref (k, 4), uref_1 = 1."""

    k: int
    screen: ClassVar[int] = 48
    refine: ClassVar[int] = 3
    trial_nfev: ClassVar[int] = 40
    nfev_per_param: ClassVar[int] = 100
    tol: ClassVar[float] = 1e-12
    lsq_options: ClassVar[dict] = {"method": "lm"}
    null_rcond: ClassVar[float | None] = None
    unsolvable: ClassVar[str] = "the ADHM constraint cannot be solved at the superposition start"
    result: ClassVar[type] = ExactFit

    def __post_init__(self):
        object.__setattr__(self, "k", _validate.positive_int("k", self.k))

    def n_params(self, ctx=None) -> int:
        """8k - 3 (k = 1: centre and size only)."""
        return 8 * self.k - 3

    def candidates(self, rng, orientations0=None) -> list:
        """orientations0 (if given), all 1, then for k >= 2 ``screen`` random unit-quaternion sets (k, 4)."""
        k = self.k
        out = [] if orientations0 is None else [np.asarray(orientations0, float)]
        out.append(np.tile([1.0, 0.0, 0.0, 0.0], (k, 1)))
        for _ in range(self.screen if k >= 2 else 0):
            o = rng.normal(size=(k, 4))
            out.append(o / np.linalg.norm(o, axis=1, keepdims=True))
        return out

    def pack(self, centres, sizes, orientation):
        """(theta with omega = 0, uref with uref_1 = 1), or None when the constraint is not solvable there."""
        try:
            multi_instanton(centres, sizes, orientation)  # the builder's solve must succeed at the start
        except ValueError:
            return None
        o = np.asarray(orientation, dtype=float)
        o = o / np.linalg.norm(o, axis=1, keepdims=True)
        conj = o[0] * np.array([1.0, -1.0, -1.0, -1.0])
        uref = _qmul_np(np.broadcast_to(conj, o.shape), o)  # global gauge rotation: u_1 -> 1
        theta = np.concatenate(
            [np.asarray(centres, float).reshape(-1), np.log(np.asarray(sizes, float)), np.zeros(3 * (self.k - 1))]
        )
        return theta, jnp.asarray(uref)

    def _unpack(self, theta, uref):
        """theta -> centres (k, 4), Lambda (1, k, 4) (jax)."""
        k = self.k
        c = theta[: 4 * k].reshape(k, 4)
        rho = jnp.exp(theta[4 * k : 5 * k])
        omega = jnp.concatenate([jnp.zeros((1, 3)), theta[5 * k :].reshape(k - 1, 3)], axis=0)
        u = qt.qmul(jnp.asarray(uref), qt.qexp(jnp.concatenate([jnp.zeros((k, 1)), omega], axis=1)))
        return c, (rho[:, None] * u)[None]

    def data(self, theta, uref):
        c, lam = self._unpack(theta, uref)
        b, _, _ = solve_quaternionic_constraint(lam, point_to_quaternion(c), steps=UNROLLED_STEPS)
        return ADHMData(lam, b)

    def host_data(self, data) -> ADHMData:
        return ADHMData(np.asarray(data.lam), np.asarray(data.B))  # validated (constraint checked)

    def moduli(self, theta, uref) -> dict:
        """Centres (k, 4), sizes (k,), orientations (k, 4) relative to u_1 (jax)."""
        c, lam = self._unpack(theta, uref)
        cols = lam[0]
        r = jnp.sqrt(jnp.sum(cols**2, axis=1))
        return {"centers": c, "sizes": r, "orientations": cols / r[:, None]}

    def orientations(self, theta, uref) -> np.ndarray:
        return np.asarray(self.moduli(theta, uref)["orientations"])


# -- the unitary (SU(N)) model ------------------------------------------------------------------------


def _haar(n: int, rng) -> np.ndarray:
    """Haar-random U(n): QR of a complex Gaussian with the phases of R's diagonal removed (common practice)."""
    z = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    q, r = np.linalg.qr(z)
    return q * (np.diag(r) / np.abs(np.diag(r)))


def _u_basis(n: int) -> np.ndarray:
    """Orthonormal basis of u(n) (Frobenius inner product), (n^2, n, n) anti-Hermitian."""
    return anti_hermitian_basis(n, 1 / np.sqrt(2))


def _stabiliser(n: int) -> np.ndarray:
    """Right rotations g -> g exp(X) that leave (e_0^T g^dag, g e_1) unchanged up to a common U(1) gauge phase."""
    out = [np.diag([1j, 1j] + [0.0] * (n - 2))]
    out += [m for m in _u_basis(n) if np.allclose(m[:2], 0) and np.allclose(m[:, :2], 0)]
    return np.array(out)


def _vec(m: np.ndarray) -> np.ndarray:
    m = m.reshape(m.shape[0], -1)
    return np.concatenate([m.real, m.imag], axis=1)


def orientation_basis(gref) -> np.ndarray:
    """Generators of the relative rotations fitted at the reference orientations gref (k, N, N).

    Returns (P, k, N, N) complex: X_j = sum_p omega_p basis[p, j]; basis[:, 0] = 0 (g_1 fixed); for
    j >= 2 an orthonormal basis of the complement of instanton j's stabiliser (u(N - 2) on the colours
    outside e_0, e_1 and the phase i(E_00 + E_11), which U(k) undoes) and, for j = 2, of
    g_2^dag g_1 stab g_1^dag g_2 (the global rotations that fix instanton 1 act on all g_j at once).
    """
    g = np.asarray(gref, dtype=np.complex128)
    k, n = g.shape[0], g.shape[1]
    full, stab = _u_basis(n), _stabiliser(n)
    rows = []
    for j in range(1, k):
        gauge = list(stab)
        if j == 1:
            gauge += [g[1].conj().T @ g[0] @ s @ g[0].conj().T @ g[1] for s in stab]
        q = np.linalg.svd(_vec(np.array(gauge)), full_matrices=False)
        r = int(np.sum(q[1] > 1e-10 * q[1][0]))
        span = q[2][:r]
        rest = _vec(full) - (_vec(full) @ span.T) @ span
        _, _, vt = np.linalg.svd(rest, full_matrices=False)
        for v in vt[: n * n - r]:
            x = np.zeros((k, n, n), dtype=np.complex128)
            x[j] = (v[: n * n] + 1j * v[n * n :]).reshape(n, n)
            rows.append(x)
    return np.array(rows).reshape(-1, k, n, n)


def _cayley(x):
    n = x.shape[-1]
    eye = jnp.eye(n, dtype=jnp.complex128)
    return jnp.linalg.solve(eye - 0.5 * x, eye + 0.5 * x)


def _rotations(theta, gref, basis, k: int):
    """g_j = g_j^ref C(X_j) of theta (jax), (k, N, N)."""
    x = jnp.einsum("p,pkab->kab", theta[5 * k :].astype(jnp.complex128), basis)
    return jnp.einsum("kab,kbc->kac", gref, jax.vmap(_cayley)(x))


def unitary_data(theta, gref, basis, k: int, n: int, steps: int = _UNITARY_STEPS):
    """(B1, B2, I, J) (jax) of theta = [a (4k), log rho (k), omega (P)] (module docstring).

    The start and weights of `instantonkit.adhm.unitary_moduli.unitary_multi_instanton` (diag B fixed,
    off-diagonal weight 1, I and J 0.1), then ``steps`` unrolled steps of the one moment-map solve
    `instantonkit.adhm.base.solve_moment_maps` (the builder runs the same solve to a tolerance).
    """
    c = theta[: 4 * k].reshape(k, 4)
    rho = jnp.exp(theta[4 * k : 5 * k])
    g = _rotations(theta, gref, basis, k)
    z1, z2 = complex_coordinates(c)
    i0 = rho[:, None] * jnp.conj(g[:, :, 0])
    j0 = (rho[:, None] * g[:, :, 1]).T
    z0 = pack_unitary(jnp.diag(z1).astype(jnp.complex128), jnp.diag(z2).astype(jnp.complex128), i0, j0)
    z, _, _ = solve_moment_maps(z0, unitary_weights(k, n, _W_B, 0.0, _W_IJ), k, n, steps=steps)
    return unpack_unitary(z, k, n)


@dataclasses.dataclass(frozen=True)
class UnitaryModel:
    """SU(N) ADHM data of k instantons (module docstring); ctx = (gref (k, N, N), basis (P, k, N, N))."""

    k: int
    n: int
    screen: ClassVar[int] = 24
    refine: ClassVar[int] = 3
    trial_nfev: ClassVar[int] = 30
    nfev_per_param: ClassVar[int] = 60
    tol: ClassVar[float] = 1e-13
    lsq_options: ClassVar[dict] = {"method": "trf", "tr_solver": "exact"}
    null_rcond: ClassVar[float | None] = 1e-8
    unsolvable: ClassVar[str] = "the SU(N) moment maps cannot be solved at the superposition start"
    result: ClassVar[type] = UnitaryFit

    def __post_init__(self):
        object.__setattr__(self, "k", _validate.positive_int("k", self.k))
        n = _validate.positive_int("rank", self.n)
        if n < 2:
            raise ValueError(f"rank must be >= 2; found {n}")
        object.__setattr__(self, "n", n)

    def n_params(self, ctx) -> int:
        """5k + P (P: the fitted relative rotations of ``ctx``'s basis)."""
        return 5 * self.k + int(ctx[1].shape[0])

    def candidates(self, rng, orientations0=None) -> list:
        """orientations0 (if given), then ``screen`` (k >= 2; else one) sets [1, Haar, ..., Haar] (k, N, N)."""
        out = [] if orientations0 is None else [np.asarray(orientations0, dtype=np.complex128)]
        eye = np.eye(self.n, dtype=np.complex128)
        for _ in range(self.screen if self.k >= 2 else 1):
            out.append(np.stack([eye] + [_haar(self.n, rng) for _ in range(self.k - 1)]))
        return out

    def pack(self, centres, sizes, orientation):
        basis = orientation_basis(orientation)
        theta = np.concatenate(
            [np.asarray(centres, float).ravel(), np.log(np.asarray(sizes, float)), np.zeros(basis.shape[0])]
        )
        return theta, (jnp.asarray(orientation), jnp.asarray(basis))

    def data(self, theta, ctx):
        gref, basis = ctx
        return UnitaryADHMData(*unitary_data(theta, gref, basis, self.k, self.n))

    def host_data(self, data) -> UnitaryADHMData:
        b1, b2, i, j = (np.asarray(a) for a in (data.B1, data.B2, data.I, data.J))
        return UnitaryADHMData(b1, b2, i, j)  # validated (both moment maps checked)

    def moduli(self, theta, ctx) -> dict:
        """Centres a_i = diag(B) (k, 4) and sizes (k,), UnitaryADHMData's definitions (jax)."""
        gref, basis = ctx
        _, _, i, j = unitary_data(theta, gref, basis, self.k, self.n)
        sizes = jnp.sqrt(0.5 * (jnp.sum(jnp.abs(i) ** 2, axis=1) + jnp.sum(jnp.abs(j) ** 2, axis=0)))
        return {"centers": theta[: 4 * self.k].reshape(self.k, 4), "sizes": sizes}

    def orientations(self, theta, ctx) -> np.ndarray:
        gref, basis = ctx
        return np.asarray(_rotations(jnp.asarray(theta), gref, basis, self.k))


# -- the one driver -----------------------------------------------------------------------------------


@partial(jax.jit, static_argnums=0)
def _resid(model, theta, ctx, pts, sw, s):
    return sw * (exact_density(model, theta, ctx, pts) - s)


_jac = jax.jit(jax.jacfwd(_resid, argnums=1), static_argnums=0)


def _flat_moduli(model, theta, ctx):
    """The reported moduli as one vector, keys in sorted order (the order jax gives a dict's leaves)."""
    moduli = model.moduli(theta, ctx)
    return jnp.concatenate([jnp.ravel(moduli[key]) for key in sorted(moduli)])


_dmoduli = jax.jit(jax.jacfwd(_flat_moduli, argnums=1), static_argnums=0)


def _split_like(vec: np.ndarray, moduli: dict) -> dict:
    """Inverse of `_flat_moduli`: vec cut into the shapes of ``moduli``; 'centers', 'sizes' first, then sorted."""
    keys = sorted(moduli)
    parts = dict(zip(keys, np.split(vec, np.cumsum([np.size(moduli[key]) for key in keys])[:-1])))
    order = ["centers", "sizes"] + [key for key in keys if key not in ("centers", "sizes")]
    return {key: parts[key].reshape(np.shape(moduli[key])) for key in order}


@partial(jax.jit, static_argnums=0)
def _at_optimum(model, theta, ctx):
    """The model's data and reported moduli at theta (compiled once per model shape, not per fit)."""
    return model.data(theta, ctx), model.moduli(theta, ctx)


def _covariance(jmat: np.ndarray, null_rcond: float | None):
    """(J^T J)^-1 (unscaled), its condition number and the number of dropped directions.

    null_rcond None: the plain inverse (a pseudo-inverse above _MAX_CONDITION), condition of J^T J.
    Otherwise the pseudo-inverse of the column-scaled J^T J without the singular values of J below
    null_rcond times the largest (directions the density does not see), condition on the kept ones.
    """
    if null_rcond is None:
        jj = jmat.T @ jmat
        cond = float(np.linalg.cond(jj))
        cov = np.linalg.pinv(jj) if not np.isfinite(cond) or cond > _MAX_CONDITION else np.linalg.inv(jj)
        return cov, cond, 0
    norms = np.linalg.norm(jmat, axis=0)
    norms = np.where(norms > 0, norms, 1.0)
    _, sv, vt = np.linalg.svd(jmat / norms, full_matrices=False)
    keep = sv > null_rcond * sv[0]
    cov = (vt[keep].T / sv[keep] ** 2) @ vt[keep] / np.outer(norms, norms)
    return cov, float(sv[keep][0] ** 2 / sv[keep][-1] ** 2), int(np.sum(~keep))


def _check_samples(model, pts, s, w, centres0, sizes0):
    if not isinstance(model, ExactModel):
        raise TypeError(f"model must offer the ExactModel interface; found {type(model).__name__}")
    pts = _validate.points_array("pts", pts, shape_text="(M, 4)")
    m = pts.shape[0]
    s = _validate.real_array("s", s, (m,), shape_text=f"(M,) = ({m},)")
    w = _validate.real_array("w", w, (m,), shape_text=f"(M,) = ({m},)")
    if np.any(w < 0):
        raise ValueError(f"w must be >= 0; found {int(np.sum(w < 0))} negative weight(s)")
    if not np.any(s != 0):
        raise ValueError("s is zero everywhere; nothing to fit")
    c0 = _validate.real_array("centres0", centres0, (model.k, 4), shape_text=f"(k, 4) = ({model.k}, 4)")
    r0 = _validate.positive_vector("sizes0", sizes0, model.k)
    return pts, s, w, c0, r0


def fit_model(
    model: ExactModel, pts, s, w, centres0, sizes0, *, seed: int = 0, orientations0=None, noise_known: bool = False
) -> ModuliFit:
    """Least-squares fit of the model's exact ADHM data to action-density samples, from a superposition start.

    pts (M, 4); s (M,) action density; w (M,) >= 0 weights of the squared residuals (1 / sigma_i^2 for
    known noise); centres0 (k, 4), sizes0 (k,) > 0: the start; orientations0: an optional start
    (the model's shape), otherwise ``model.screen`` seeded random orientation sets are screened by cost
    and the best ``model.refine`` refined, the best run to convergence.  Residuals sqrt(w) (model - s) /
    max|s| (weights need only be relative); chi2 is sum w (model - s)^2 for the weights as given.
    Errors: the covariance `_covariance` of J at the optimum, scaled by chi2 / dof unless
    ``noise_known`` (then the weights are 1 / sigma^2 exactly), propagated to ``model.moduli`` by
    its derivative.  Returns ``model.result`` (`ExactFit`, `UnitaryFit`).
    """
    pts, s, w, c0, r0 = _check_samples(model, pts, s, w, centres0, sizes0)
    smax = float(np.max(np.abs(s)))
    m = pts.shape[0]
    pts_j, sw, s_j = padded_samples(pts, s, w, smax)
    rng = np.random.default_rng(seed)
    screened = []
    for o in model.candidates(rng, orientations0):
        packed = model.pack(c0, r0, o)
        if packed is None:
            continue
        r = np.asarray(_resid(model, jnp.asarray(packed[0]), packed[1], pts_j, sw, s_j))
        if np.all(np.isfinite(r)):
            screened.append((float(np.sum(r**2)), packed))
    if not screened:
        raise ValueError(model.unsolvable)
    order = np.argsort([cost for cost, _ in screened], kind="stable")
    starts = [screened[i][1] for i in order[: (model.refine if model.k >= 2 else 1)]]
    npar = model.n_params(starts[0][1])

    def run(t0, ctx, budget):
        return scipy.optimize.least_squares(
            lambda t: np.asarray(_resid(model, jnp.asarray(t), ctx, pts_j, sw, s_j)),
            t0,
            jac=lambda t: np.asarray(_jac(model, jnp.asarray(t), ctx, pts_j, sw, s_j)),
            x_scale="jac",
            xtol=model.tol,
            ftol=model.tol,
            gtol=model.tol,
            max_nfev=budget,
            **model.lsq_options,
        )

    best, ctx, nfev = best_of_trials(starts, run, model.trial_nfev, model.nfev_per_param * (npar + 1))
    theta = jnp.asarray(best.x)
    cov, cond, null = _covariance(best.jac, model.null_rcond)
    dof = max(m - (npar - null), 1)
    cost = float(np.sum(best.fun**2))
    cov = cov * (1.0 / smax**2 if noise_known else cost / dof)
    dj = np.asarray(_dmoduli(model, theta, ctx))
    err = np.sqrt(np.abs(np.einsum("ip,pq,iq->i", dj, cov, dj)))
    data, moduli_j = _at_optimum(model, theta, ctx)
    moduli = {key: np.asarray(v) for key, v in moduli_j.items()}
    errors = _split_like(err, moduli)
    return model.result(
        data=model.host_data(data),
        centers=moduli["centers"],
        sizes=moduli["sizes"],
        orientations=model.orientations(theta, ctx),
        errors=errors,
        chi2=cost * smax**2,
        dof=dof,
        rms=float(np.sqrt(cost / m)),
        success=bool(best.success),
        message=f"{best.message} ({nfev} evaluations over {len(starts)} start(s))",
        condition=cond,
        null=null,
    )


def fit_exact(
    pts, s, k: int, w, centres0, sizes0, *, seed: int = 0, orientations0=None, noise_known: bool = False
) -> ExactFit:
    """`fit_model` with the SU(2) model `QuaternionicModel` (k): all 8k - 3 gauge-invariant moduli.

    orientations0: optional (k, 4) unit quaternions; errors for centres, sizes and relative orientations.
    """
    return fit_model(  # type: ignore[return-value]
        QuaternionicModel(k),
        pts,
        s,
        w,
        centres0,
        sizes0,
        seed=seed,
        orientations0=orientations0,
        noise_known=noise_known,
    )


def fit_unitary(
    pts, s, k: int, rank: int, w, centres0, sizes0, *, seed: int = 0, orientations0=None, noise_known: bool = False
) -> UnitaryFit:
    """`fit_model` with the SU(N) model `UnitaryModel` (k, rank): centres and sizes, orientations as nuisance.

    orientations0: optional (k, N, N) unitary start; errors for centres and sizes (near-null
    directions, relative orientations the density does not see, dropped from the covariance).
    """
    return fit_model(  # type: ignore[return-value]
        UnitaryModel(k, rank),
        pts,
        s,
        w,
        centres0,
        sizes0,
        seed=seed,
        orientations0=orientations0,
        noise_known=noise_known,
    )
