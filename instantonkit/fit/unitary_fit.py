"""Fit exact SU(N > 2) ADHM data (centres, sizes; orientations as nuisance parameters) to action densities.

Model: the exact action density of the complex charge-k data of well-separated instantons built as in
`instantonkit.adhm.unitary_moduli.unitary_multi_instanton` (Atiyah, Hitchin, Drinfeld, Manin, Phys.
Lett. A 65 (1978) 185; the complex form of `instantonkit.adhm.unitary`): diag(B_a) = z_a(a_i),
I_i = rho_i e_0^T g_i^dag, J^i = rho_i g_i e_1, then the off-diagonal of B1, B2 (weight 1) and I, J
(weight 0.1) moved by weighted minimum-norm Gauss-Newton onto both moment maps.  That iteration is
one jax function shared with the builder (`instantonkit.adhm.base.solve_moment_maps`); here it runs
``_STEPS`` unrolled steps from the same start with the same weights (`unitary_data`, the builder's
data to rounding, tests/test_finder.py), so jax.jacfwd
differentiates the density through the constraint solve (why unrolled Newton steps give the
implicit-function derivative: `instantonkit.adhm.moduli.solve_constraint_unrolled`).

Parameters: the centres a_i (4k), log rho_i (k) and, for j >= 2, a relative rotation g_j = g_j^ref C(X_j)
(C the Cayley map, X_j anti-Hermitian) with g_1 = g_1^ref fixed (the global U(N) rotation is gauge).
X_j runs over the orthogonal complement in u(N) of the directions that do not change the data up to
gauge: the stabiliser of instanton j's embedding (u(N - 2) on the colours outside e_0, e_1 and the
phase i(E_00 + E_11), which U(k) undoes) and, for j = 2 only, the global rotations that fix instanton 1
up to gauge (they act on all g_j at once).  For k = 2, N = 3 this leaves 8 + 2 + 6 = 16 = 4kN - (N^2 - 1)
parameters, the gauge-invariant count.  Some relative orientations still enter the density only
weakly (through the lumps' interaction), so the fit uses scipy's 'trf' with x_scale='jac' and the
errors drop near-null directions of the curvature (see `fit_unitary`).  The reported centres are
diag(B) (= a_i) and the sizes ``UnitaryADHMData.sizes()`` of the fitted data, the same definitions as
for the data the densities came from; the orientations are a representative only (up to gauge and
stabilisers).
"""

from __future__ import annotations

import dataclasses
from functools import partial

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from ..adhm.base import pack_unitary, solve_moment_maps, unitary_weights, unpack_unitary
from ..adhm.unitary import UnitaryADHMData, complex_coordinates
from ._lsq import ModuliFit, best_of_trials, padded_samples

__all__ = ["UnitaryFit", "fit_unitary", "unitary_data", "orientation_basis"]

#: Unrolled Gauss-Newton steps of the constraint solve (converged in about 4 for well-separated lumps).
_STEPS = 10
#: Weights of the solve: off-diagonal of B and the entries of I, J (those of unitary_multi_instanton).
_W_B, _W_IJ = 1.0, 0.1
#: Random orientation sets screened (one density evaluation each) before the least-squares runs.
_SCREEN = 24
#: Best screened starts refined by a short least-squares run (the best is run to convergence).
_REFINE = 3
#: Evaluations of each short trial run.
_TRIAL_NFEV = 30
#: xtol, ftol and gtol of the fit.
_FIT_TOL = 1e-13
#: Function evaluations allowed per parameter in the final run.
_NFEV_PER_PARAM = 60
#: Singular values of the column-scaled Jacobian below this fraction of the largest count as null
#: directions (not seen by the density); they are dropped from the covariance.
_NULL_RCOND = 1e-8


def _haar(n: int, rng) -> np.ndarray:
    """Haar-random U(n): QR of a complex Gaussian with the phases of R's diagonal removed (common practice)."""
    z = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    q, r = np.linalg.qr(z)
    return q * (np.diag(r) / np.abs(np.diag(r)))


def _u_basis(n: int) -> np.ndarray:
    """Orthonormal basis of u(n) (Frobenius inner product), (n^2, n, n) anti-Hermitian."""
    out = []
    for a in range(n):
        for b in range(n):
            m = np.zeros((n, n), dtype=np.complex128)
            if a == b:
                m[a, a] = 1j
            elif a < b:
                m[a, b], m[b, a] = 1 / np.sqrt(2), -1 / np.sqrt(2)
            else:
                m[a, b], m[b, a] = 1j / np.sqrt(2), 1j / np.sqrt(2)
            out.append(m)
    return np.array(out)


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
    j >= 2 an orthonormal basis of the complement of instanton j's stabiliser (and, for j = 2, of
    g_2^dag g_1 stab g_1^dag g_2, the rotations fixing instanton 1), module docstring.
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
        u, sv, vt = np.linalg.svd(rest, full_matrices=False)
        comp = vt[: n * n - r]
        for v in comp:
            x = np.zeros((k, n, n), dtype=np.complex128)
            x[j] = (v[: n * n] + 1j * v[n * n :]).reshape(n, n)
            rows.append(x)
    return np.array(rows).reshape(-1, k, n, n)


def _cayley(x):
    n = x.shape[-1]
    eye = jnp.eye(n, dtype=jnp.complex128)
    return jnp.linalg.solve(eye - 0.5 * x, eye + 0.5 * x)


def unitary_data(theta, gref, basis, k: int, n: int, steps: int = _STEPS):
    """(B1, B2, I, J) (jax) of the parameters theta = [a (4k), log rho (k), omega (P)] (module docstring).

    The start and weights of `instantonkit.adhm.unitary_moduli.unitary_multi_instanton` (diag B fixed,
    off-diagonal weight 1, I and J 0.1), then ``steps`` unrolled steps of the one moment-map solve
    `instantonkit.adhm.base.solve_moment_maps` (the builder runs the same solve to a tolerance).
    """
    c = theta[: 4 * k].reshape(k, 4)
    rho = jnp.exp(theta[4 * k : 5 * k])
    x = jnp.einsum("p,pkab->kab", theta[5 * k :].astype(jnp.complex128), basis)
    g = jnp.einsum("kab,kbc->kac", gref, jax.vmap(_cayley)(x))
    z1, z2 = complex_coordinates(c)
    i0 = rho[:, None] * jnp.conj(g[:, :, 0])
    j0 = (rho[:, None] * g[:, :, 1]).T
    z0 = pack_unitary(jnp.diag(z1).astype(jnp.complex128), jnp.diag(z2).astype(jnp.complex128), i0, j0)
    z, _, _ = solve_moment_maps(z0, unitary_weights(k, n, _W_B, 0.0, _W_IJ), k, n, steps=steps)
    return unpack_unitary(z, k, n)


def _density(theta, gref, basis, pts, k, n):
    data = UnitaryADHMData(*unitary_data(theta, gref, basis, k, n))
    return jax.vmap(data.action_density)(pts)


@partial(jax.jit, static_argnums=(6, 7))
def _resid(theta, gref, basis, pts, sw, s, k, n):
    return sw * (_density(theta, gref, basis, pts, k, n) - s)


_jac = jax.jit(jax.jacfwd(_resid), static_argnums=(6, 7))


@partial(jax.jit, static_argnums=(3, 4))
def _moduli(theta, gref, basis, k, n):
    """Centres (k, 4) and sizes (k,) (UnitaryADHMData's definitions) of theta, flat (5k,)."""
    b1, b2, i, j = unitary_data(theta, gref, basis, k, n)
    sizes = jnp.sqrt(0.5 * (jnp.sum(jnp.abs(i) ** 2, axis=1) + jnp.sum(jnp.abs(j) ** 2, axis=0)))
    return jnp.concatenate([theta[: 4 * k], sizes])


_dmoduli = jax.jit(jax.jacfwd(_moduli), static_argnums=(3, 4))


@dataclasses.dataclass(frozen=True)
class UnitaryFit(ModuliFit):
    """Result of `fit_unitary`.

    data: fitted UnitaryADHMData; centers (k, 4), sizes (k,); orientations (k, N, N): the fitted
    representative g_i (g_1 the reference; determined only up to gauge and stabilisers); errors:
    {'centers', 'sizes'} one-sigma statistical errors; chi2, dof, rms, success, message, condition
    (of the column-scaled J^T J on the kept directions); null: number of dropped near-null directions.
    """

    null: int = 0


def fit_unitary(
    pts, s, k: int, rank: int, w, centres0, sizes0, *, seed: int = 0, orientations0=None, noise_known: bool = False
) -> UnitaryFit:
    """Least-squares fit of exact SU(N) data to action-density samples, from a superposition start.

    pts (M, 4), s (M,), w (M,) weights of the squared residuals; centres0 (k, 4), sizes0 (k,): the start;
    orientations0: optional (k, N, N) unitary start, otherwise _SCREEN seeded Haar-random orientation sets
    are screened by cost and the best _REFINE refined ('trf', x_scale='jac'), the best run to convergence.
    Residuals sqrt(w) (model - s) / max|s|.  Errors: the covariance is the pseudo-inverse of the
    column-scaled J^T J with singular values of J below _NULL_RCOND of the largest dropped (directions the
    density does not see; they are relative orientations, which the centres and sizes do not depend on to
    first order), scaled by chi2 / dof unless ``noise_known``, propagated to the centres and sizes by the
    derivative of (diag B, UnitaryADHMData.sizes) with respect to the parameters.
    """
    n = int(rank)
    smax = float(np.max(np.abs(s)))
    m = pts.shape[0]
    pts_j, sw, s_j = padded_samples(pts, s, w, smax)
    rng = np.random.default_rng(seed)
    cands = [] if orientations0 is None else [np.asarray(orientations0, dtype=np.complex128)]
    for _ in range(_SCREEN if k >= 2 else 1):
        cands.append(np.stack([np.eye(n, dtype=np.complex128)] + [_haar(n, rng) for _ in range(k - 1)]))
    theta0 = np.concatenate([np.asarray(centres0, float).ravel(), np.log(np.asarray(sizes0, float))])
    starts = []
    for g in cands:
        basis = orientation_basis(g)
        t0 = np.concatenate([theta0, np.zeros(basis.shape[0])])
        args = (jnp.asarray(g), jnp.asarray(basis))
        r = np.asarray(_resid(jnp.asarray(t0), *args, pts_j, sw, s_j, k, n))
        if np.all(np.isfinite(r)):
            starts.append((float(np.sum(r**2)), t0, args))
    if not starts:
        raise ValueError("the SU(N) moment maps cannot be solved at the superposition start")
    starts = sorted(starts, key=lambda item: item[0])[: (_REFINE if k >= 2 else 1)]
    npar = starts[0][1].size

    def run(t0, args, budget):
        return scipy.optimize.least_squares(
            lambda t: np.asarray(_resid(jnp.asarray(t), *args, pts_j, sw, s_j, k, n)),
            t0,
            jac=lambda t: np.asarray(_jac(jnp.asarray(t), *args, pts_j, sw, s_j, k, n)),
            method="trf",
            x_scale="jac",
            tr_solver="exact",
            xtol=_FIT_TOL,
            ftol=_FIT_TOL,
            gtol=_FIT_TOL,
            max_nfev=budget,
        )

    best, best_args, nfev = best_of_trials(
        [(t0, a) for _, t0, a in starts], run, _TRIAL_NFEV, _NFEV_PER_PARAM * (npar + 1)
    )
    g_ref, basis = best_args
    theta = jnp.asarray(best.x)
    b1, b2, i_mat, j_mat = (np.asarray(a) for a in unitary_data(theta, g_ref, basis, k, n))
    data = UnitaryADHMData(b1, b2, i_mat, j_mat)  # validated (both moment maps checked) host copy
    jmat = best.jac
    norms = np.linalg.norm(jmat, axis=0)
    norms = np.where(norms > 0, norms, 1.0)
    _, sv, vt = np.linalg.svd(jmat / norms, full_matrices=False)
    keep = sv > _NULL_RCOND * sv[0]
    cov = (vt[keep].T / sv[keep] ** 2) @ vt[keep] / np.outer(norms, norms)
    dof = max(m - int(np.sum(keep)), 1)
    cov = cov * (1.0 / smax**2 if noise_known else float(np.sum(best.fun**2)) / dof)
    dj = np.asarray(_dmoduli(theta, g_ref, basis, k, n))
    err = np.sqrt(np.abs(np.einsum("ip,pq,iq->i", dj, cov, dj)))
    g = np.einsum("kab,kbc->kac", np.asarray(g_ref), np.asarray(jax.vmap(_cayley)(_omega(best.x, basis, k))))
    return UnitaryFit(
        data=data,
        centers=data.centers(),
        sizes=data.sizes(),
        orientations=g,
        errors={"centers": err[: 4 * k].reshape(k, 4), "sizes": err[4 * k :]},
        chi2=float(np.sum(best.fun**2)) * smax**2,
        dof=dof,
        rms=float(np.sqrt(np.sum(best.fun**2) / m)),
        success=bool(best.success),
        message=f"{best.message} ({nfev} evaluations over {len(starts)} start(s))",
        condition=float(sv[keep][0] ** 2 / sv[keep][-1] ** 2),
        null=int(np.sum(~keep)),
    )


def _omega(x, basis, k):
    return jnp.einsum("p,pkab->kab", jnp.asarray(x[5 * k :]).astype(jnp.complex128), basis)
