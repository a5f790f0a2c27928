"""Fit exact SU(2) ADHM data (all gauge-invariant moduli) to sampled action densities by least squares.

Model: the exact action density of the charge-k data built by `instantonkit.adhm.moduli.multi_instanton`
(Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185): diag(B) = p(a_i), Lambda's columns
Lambda_i = rho_i u_i, the off-diagonal of B solved from the constraint by
`instantonkit.adhm.moduli.solve_constraint_unrolled` (differentiable, see there why unrolled steps
give the implicit-function derivative).  The density is the engine's per-point closed form
``ADHMData.action_density`` under jax.vmap inside the jitted residual.

Parameters (8k - 3 real numbers): the centres a_i (4k), log rho_1, and Lambda_j in R^4 for j >= 2.
Lambda_1 = rho_1 is real: the global Sp(1) rotation Lambda -> q Lambda is a gauge transformation that
leaves every density unchanged (3 of the 8k moduli), so it is fixed this way; the remaining 8k - 3
are the gauge-invariant moduli (centres, sizes and the relative orientations u_1-bar u_j = u_j).
SU(2) only: for Sp(n > 1) the gauge fixing of Sp(n) acting on Lambda is not implemented.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from ..adhm.moduli import UNROLLED_STEPS, multi_instanton, solve_constraint_unrolled
from ..adhm.quaternionic import ADHMData
from ..core import quaternion as qt
from ..core.conventions import point_to_quaternion
from ._lsq import ModuliFit, best_of_trials, padded_samples

__all__ = ["ExactFit", "fit_exact", "relative_orientations"]

#: Random orientation sets screened (one density evaluation each) before the least-squares runs.
_SCREEN = 48
#: Best screened starts refined by least squares (the best result is kept).
_REFINE = 3
#: Evaluations of the short trial run from each refined start.
_TRIAL_NFEV = 40
#: xtol, ftol and gtol of the exact fit (near float64 rounding, so the fit stops at the optimum).
_FIT_TOL = 1e-12
#: Function evaluations allowed per parameter.
_NFEV_PER_PARAM = 100


def n_params(k: int) -> int:
    """Number of fitted parameters, 8k - 3 (k = 1: centre and size only)."""
    return 8 * k - 3


def _unpack(theta, k, uref):
    """theta (8k - 3,) -> centres (k, 4), Lambda (1, k, 4) (jax).

    theta = [a_i (4k), log rho_i (k), omega_j (3 (k - 1))]: Lambda_j = rho_j uref_j exp(omega_j) with
    uref_1 = 1 and omega_1 = 0 (the gauge fixing).  Sizes and orientations are separate coordinates, so
    the weakly determined orientations do not bend the least-squares valley of the well determined sizes.
    """
    c = theta[: 4 * k].reshape(k, 4)
    rho = jnp.exp(theta[4 * k : 5 * k])
    omega = jnp.concatenate([jnp.zeros((1, 3)), theta[5 * k :].reshape(k - 1, 3)], axis=0)
    u = qt.qmul(jnp.asarray(uref), qt.qexp(jnp.concatenate([jnp.zeros((k, 1)), omega], axis=1)))
    return c, (rho[:, None] * u)[None]


def _pack(centres, sizes, orientations):
    """Start (centres (k, 4), sizes (k,), orientations (k, 4)) -> (theta with omega = 0, uref (k, 4) with uref_1 = 1)."""
    o = np.asarray(orientations, dtype=float)
    o = o / np.linalg.norm(o, axis=1, keepdims=True)
    conj = o[0] * np.array([1.0, -1.0, -1.0, -1.0])
    uref = _qmul_np(np.broadcast_to(conj, o.shape), o)  # global gauge rotation: u_1 -> 1
    k = o.shape[0]
    theta = np.concatenate(
        [np.asarray(centres, float).reshape(-1), np.log(np.asarray(sizes, float)), np.zeros(3 * (k - 1))]
    )
    return theta, uref


def _qmul_np(a, b):
    return np.asarray(qt.qmul(jnp.asarray(a), jnp.asarray(b)))


def _data(theta, k, uref, steps=UNROLLED_STEPS):
    c, lam = _unpack(theta, k, uref)
    diag = point_to_quaternion(c)
    b = solve_constraint_unrolled(lam, diag, steps=steps)
    return ADHMData(lam, b)


def exact_density(theta, uref, pts, k):
    """Exact action density of the data of (theta, uref) at pts (M, 4) -> (M,) (jax-traceable)."""
    data = _data(theta, k, uref)
    return jax.vmap(data.action_density)(pts)


def _derived(theta, k, uref):
    """Gauge-invariant moduli of theta: centres (k, 4), sizes (k,), orientations (k, 4) (u_1 = 1)."""
    c, lam = _unpack(theta, k, uref)
    cols = lam[0]
    r = jnp.sqrt(jnp.sum(cols**2, axis=1))
    return c, r, cols / r[:, None]


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
class ExactFit(ModuliFit):
    """Result of `fit_exact`.

    data: fitted ADHMData (SU(2), charge +k); centers (k, 4), sizes (k,), orientations (k, 4) unit
    quaternions u_j relative to u_1 (row 0 = 1); covariance: {'centers': (k, 4), 'sizes': (k,),
    'orientations': (k, 4)} one-sigma statistical errors; chi2: weighted sum of squared residuals;
    dof: samples minus parameters; rms: relative rms residual; success: bool; message: str.
    """


def fit_exact(
    pts, s, k: int, w, centres0, sizes0, *, seed: int = 0, orientations0=None, noise_known: bool = False
) -> ExactFit:
    """Least-squares fit of exact SU(2) ADHM data to action-density samples, from a superposition start.

    pts: (M, 4); s: (M,) action density; w: (M,) weights of the squared residuals (1 / sigma_i^2 for
    known noise); centres0 (k, 4), sizes0 (k,): the start (the superposition fit); orientations0:
    optional (k, 4) start; otherwise _SCREEN seeded random relative orientations are screened and
    the best _REFINE refined.  Residuals: sqrt(w) (model - s) / max|s| (so weights only need to be
    relative); chi2 is reported for the weights as given: sum w (model - s)^2.
    Errors: sqrt(diag((J^T W J)^-1)) scaled by chi2 / dof unless ``noise_known`` (then the
    weights are taken as 1 / sigma^2 exactly), propagated to (centres, sizes, orientations).
    """
    smax = float(np.max(np.abs(s)))
    m = pts.shape[0]
    pts_j, sw, s_j = padded_samples(pts, s, w, smax)

    def resid(theta, uref):
        return sw * (exact_density(theta, uref, pts_j, k) - s_j)

    f = jax.jit(resid)
    jac = jax.jit(jax.jacfwd(resid))
    rng = np.random.default_rng(seed)
    c0 = np.asarray(centres0, float)
    r0 = np.asarray(sizes0, float)
    cands = []
    if orientations0 is not None:
        cands.append(np.asarray(orientations0, float))
    cands.append(np.tile([1.0, 0.0, 0.0, 0.0], (k, 1)))
    if k >= 2:
        for _ in range(_SCREEN):
            o = rng.normal(size=(k, 4))
            cands.append(o / np.linalg.norm(o, axis=1, keepdims=True))
    starts = []
    for o in cands:
        try:
            multi_instanton(c0, r0, o)  # the constraint must be solvable at the start
        except ValueError:
            continue
        starts.append(_pack(c0, r0, o))
    if not starts:
        raise ValueError("the ADHM constraint cannot be solved at the superposition start")
    costs = [float(np.sum(np.asarray(f(jnp.asarray(t), jnp.asarray(u))) ** 2)) for t, u in starts]
    starts = [starts[i] for i in np.argsort(costs)[: (_REFINE if k >= 2 else 1)]]
    npar = n_params(k)

    def run(t0, uref, budget):
        u_j = jnp.asarray(uref)
        return scipy.optimize.least_squares(
            lambda t: np.asarray(f(jnp.asarray(t), u_j)),
            t0,
            jac=lambda t: np.asarray(jac(jnp.asarray(t), u_j)),
            method="lm",
            x_scale="jac",
            xtol=_FIT_TOL,
            ftol=_FIT_TOL,
            gtol=_FIT_TOL,
            max_nfev=budget,
        )

    best, uref, nfev = best_of_trials(starts, run, _TRIAL_NFEV, _NFEV_PER_PARAM * (npar + 1))
    theta = best.x
    uref = jnp.asarray(uref)
    data = _data(jnp.asarray(theta), k, uref)
    data = ADHMData(np.asarray(data.lam), np.asarray(data.B))  # validated (constraint checked) host copy
    dof = max(m - npar, 1)
    chi2 = float(np.sum(best.fun**2)) * smax**2
    jj = best.jac.T @ best.jac
    cond = float(np.linalg.cond(jj))
    cov = np.linalg.pinv(jj) if not np.isfinite(cond) or cond > 1e14 else np.linalg.inv(jj)
    cov = cov * (1.0 / smax**2 if noise_known else float(np.sum(best.fun**2)) / dof)
    dj = jax.jacfwd(lambda t: jnp.concatenate([a.reshape(-1) for a in _derived(t, k, uref)]))(jnp.asarray(theta))
    dj = np.asarray(dj)
    var = np.abs(np.einsum("ip,pq,iq->i", dj, cov, dj))
    err = np.sqrt(var)
    c, r, o = (np.asarray(a) for a in _derived(jnp.asarray(theta), k, uref))
    errors = {
        "centers": err[: 4 * k].reshape(k, 4),
        "sizes": err[4 * k : 5 * k],
        "orientations": err[5 * k :].reshape(k, 4),
    }
    return ExactFit(
        data=data,
        centers=c,
        sizes=r,
        orientations=o,
        errors=errors,
        chi2=chi2,
        dof=dof,
        rms=float(np.sqrt(np.sum(best.fun**2) / m)),
        success=bool(best.success),
        message=f"{best.message} ({nfev} evaluations over {len(starts)} start(s))",
        condition=cond,
    )
