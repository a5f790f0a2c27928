"""The superposition model of `instantonkit.fit.finder`: a sum of BPST profiles fitted by least squares.

    s(x) ~ sum_i 48 rho_i^4 / (|x - a_i|^2 + rho_i^2)^4

(Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85), fitted with
scipy.optimize.least_squares on the parameters (a_i, log rho_i), the Jacobian by jax.jacfwd; its start
(the tallest distinct peaks, then greedy subtraction), the covariance of the fit, and the matching of
two sets of centres.
"""

from __future__ import annotations

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize

from .peaks import BPST_PEAK

#: Peak of one BPST action density: s(a) = _BPST_PEAK / rho^4 (Belavin, Polyakov, Schwartz, Tyupkin,
#: Phys. Lett. B 59 (1975) 85), used to read a size off a peak.
_BPST_PEAK = BPST_PEAK

#: Fitted parameters per instanton: the centre (4) and log rho (1); the fit needs more samples than 5 k.
_PARAMS_PER_INSTANTON = 5

#: xtol, ftol and gtol of the least-squares fit: near float64 rounding, so the fit stops at the optimum.
_FIT_TOL = 1e-14

#: Function evaluations allowed per fitted parameter (the Levenberg-Marquardt fit needs a few tens).
_NFEV_PER_PARAM = 200

#: Floor of a peak height before dividing by it (an exhausted residual density gives a huge size, not inf).
_TINY = 1e-300

#: Condition number of J^T J above which the curvature counts as near-singular (ambiguous fit).
_MAX_CONDITION = 1e12


def superposition_density(points, centers, sizes):
    """Sum of BPST action densities 48 rho_i^4 / (|x - a_i|^2 + rho_i^2)^4.

    points: (M, 4); centers: (k, 4); sizes: (k,) -> (M,) (numpy or jax, traceable).
    """
    d2 = jnp.sum((points[:, None, :] - centers[None, :, :]) ** 2, axis=-1)
    r2 = sizes[None, :] ** 2
    return jnp.sum(_BPST_PEAK * r2**2 / (d2 + r2) ** 4, axis=1)


def _greedy_start(pts: np.ndarray, s: np.ndarray, k: int, peaks=None):
    """Start centres and sizes: the k tallest distinct peaks (sizes from their heights), then greedy subtraction."""
    centers: list = []
    sizes: list = []
    rest = s.copy()
    if peaks is not None:
        for c, h in zip(*peaks):
            if len(centers) == k:
                break
            rho = (_BPST_PEAK / max(h, _TINY)) ** 0.25
            centers.append(c)
            sizes.append(rho)
            rest = rest - np.asarray(superposition_density(pts, c[None], np.array([rho])))
    while len(centers) < k:
        i = int(np.argmax(rest))
        rho = (_BPST_PEAK / max(rest[i], _TINY)) ** 0.25
        centers.append(pts[i])
        sizes.append(rho)
        rest = rest - np.asarray(superposition_density(pts, pts[i][None], np.array([rho])))
    return np.array(centers), np.array(sizes)


# -- the superposition fit ---------------------------------------------------------------------------


def _unpack(theta, k):
    t = theta.reshape(k, _PARAMS_PER_INSTANTON)
    return t[:, :4], jnp.exp(t[:, 4])


def _fit_superposition(pts, s, sw, c0, r0, signs=None):
    """Least squares of the (signed) BPST superposition; returns (centres, sizes, cov, sol, var)."""
    k = c0.shape[0]
    theta0 = np.concatenate([c0, np.log(r0)[:, None]], axis=1).reshape(-1)
    pts_j, s_j, sw_j = jnp.asarray(pts), jnp.asarray(s), jnp.asarray(sw)
    sg = jnp.ones(k) if signs is None else jnp.asarray(signs, dtype=float)

    def resid(theta):
        c, r = _unpack(theta, k)
        d2 = jnp.sum((pts_j[:, None, :] - c[None, :, :]) ** 2, axis=-1)
        r2 = r[None, :] ** 2
        model = jnp.sum(sg[None, :] * _BPST_PEAK * r2**2 / (d2 + r2) ** 4, axis=1)
        return sw_j * (model - s_j)

    f = jax.jit(resid)
    jac = jax.jit(jax.jacfwd(resid))
    npar = _PARAMS_PER_INSTANTON * k
    sol = scipy.optimize.least_squares(
        lambda t: np.asarray(f(jnp.asarray(t))),
        theta0,
        jac=lambda t: np.asarray(jac(jnp.asarray(t))),
        method="lm",
        xtol=_FIT_TOL,
        ftol=_FIT_TOL,
        gtol=_FIT_TOL,
        max_nfev=_NFEV_PER_PARAM * (npar + 1),
    )
    c, r = (np.asarray(a) for a in _unpack(jnp.asarray(sol.x), k))
    return c, r, sol


def _covariance(jmat, scale):
    """(J^T J)^-1 * scale and the condition number (pinv when near-singular)."""
    jtj = jmat.T @ jmat
    cond = float(np.linalg.cond(jtj))
    inv = np.linalg.pinv(jtj) if not np.isfinite(cond) or cond > _MAX_CONDITION else np.linalg.inv(jtj)
    return inv * scale, cond


def _quad(a, b):
    return {key: np.sqrt(a[key] ** 2 + np.nan_to_num(b[key]) ** 2) for key in a}  # NaN: not estimated


def _match(ref, other):
    """Permutation p with other[p[i]] nearest ref[i] (greedy by distance)."""
    k = ref.shape[0]
    dist = np.linalg.norm(ref[:, None] - other[None], axis=-1)
    p = -np.ones(k, dtype=int)
    for flat in np.argsort(dist, axis=None):
        i, j = divmod(int(flat), k)
        if p[i] < 0 and j not in p:
            p[i] = j
    return p
