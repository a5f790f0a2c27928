"""Recover instanton positions and sizes from sampled action or charge densities by least squares.

Model (superposition of BPST profiles; Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85):

    s(x) ~ sum_i 48 rho_i^4 / (|x - a_i|^2 + rho_i^2)^4,        q(x) ~ +-s(x) / 8 pi^2,

fitted with scipy.optimize.least_squares on the parameters (a_i, log rho_i), the Jacobian by jax.jacfwd.
For well separated instantons the exact ADHM density differs from the superposition by corrections of
relative order (rho / distance)^2 near each peak, which sets the accuracy on exact ADHM densities
(see tests/test_finder.py for measured figures).  The superposition does not depend on orientations:
relative orientations only change the density where instantons overlap, and this finder does not fit
them (``orientations`` is None; the exact-ADHM refinement that would need a differentiable constraint
solve is not implemented).  ``data`` is the ADHM data built by :func:`instantonkit.adhm.multi_instanton`
from the fitted centres and sizes with trivial orientations.

Start: greedy peak picking -- the largest sample gives a centre and the size from the peak height
``s_max = 48 / rho^4``; its BPST profile is subtracted and the next peak is taken, k times.
Uncertainties: ``sqrt(diag(sigma^2 (J^T J)^-1))`` at the optimum, sigma^2 the residual variance.
They are statistical only and assume homoscedastic weighted residuals: pass ``weights = 1 / sigma_i^2``
for known noise (``1 / s_i^2`` for multiplicative noise); they do not include the model error of the
superposition for interacting (k >= 2) ADHM densities.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import scipy.optimize
import scipy.spatial

from . import _validate
from .moduli import multi_instanton
from .conventions import INSTANTON_ACTION
from .fields import as_points
from .transforms import PARITY

__all__ = ["InstantonFit", "find_instantons", "superposition_density", "count_peaks"]

_QUANTITIES = ("action", "charge")

#: Peak of one BPST action density: s(a) = _BPST_PEAK / rho^4 (Belavin et al. 1975), used to read a size off a peak.
_BPST_PEAK = 48.0

#: Fitted parameters per instanton: the centre (4) and log rho (1); the fit needs more samples than 5 k.
_PARAMS_PER_INSTANTON = 5

#: Samples compared with each sample to call it a local maximum (a lattice site has 8 nearest neighbours).
_PEAK_NEIGHBOURS = 16

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


@dataclasses.dataclass(frozen=True)
class InstantonFit:
    """Result of :func:`find_instantons`.

    centers: (k, 4) float64; sizes: (k,) float64; orientations: None (not determined by the model);
    uncertainties: {'centers': (k, 4), 'sizes': (k,)} one-sigma estimates; data: fitted ADHMData or None
    when the ADHM constraint could not be solved for the fitted moduli; ambiguous: bool; reasons: tuple
    of str; sign: +1 (instantons) or -1 (anti-instantons, from a negative charge density);
    rms: root-mean-square relative residual; n_peaks: distinct peaks found in the samples.
    """

    centers: np.ndarray
    sizes: np.ndarray
    uncertainties: dict
    data: object
    ambiguous: bool
    reasons: tuple
    sign: int
    rms: float
    n_peaks: int
    quantity: str
    orientations: object = None

    @property
    def k(self) -> int:
        """Number of fitted instantons."""
        return int(self.sizes.shape[0])

    def summary(self) -> str:
        """A readable table: one row per instanton with centre, size and their one-sigma errors."""
        kind = "instanton" if self.sign == 1 else "anti-instanton"
        lines = [
            (
                f"{self.k} {kind}(s) fitted to {self.quantity} density samples "
                f"(BPST superposition model; relative rms residual {self.rms:.2e}; {self.n_peaks} distinct peak(s))"
            ),
            f"{'#':>3} {'x1':>10} {'x2':>10} {'x3':>10} {'x4':>10} {'size':>10} {'+-centre':>10} {'+-size':>10}",
        ]
        dc = self.uncertainties["centers"]
        ds = self.uncertainties["sizes"]
        for i in range(self.k):
            c = " ".join(f"{v:10.4f}" for v in self.centers[i])
            lines.append(f"{i:>3} {c} {self.sizes[i]:10.4f} {np.max(dc[i]):10.2e} {ds[i]:10.2e}")
        lines.append("orientations: not determined (the superposition model does not depend on them)")
        if self.ambiguous:
            lines.append("AMBIGUOUS fit:")
            lines.extend(f"  - {r}" for r in self.reasons)
        else:
            lines.append("fit is unambiguous")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.summary()


# -- input checks -----------------------------------------------------------------------------------


def _check_inputs(points, density, k, weights, quantity):
    """Validated (points (M, 4), density (M,), weights (M,)) float64, or TypeError / ValueError naming the argument."""
    pts, _ = as_points(points)
    d = _validate.real_array("density", density).reshape(-1)
    if d.shape[0] != pts.shape[0]:
        raise ValueError(f"density must have one value per point ({pts.shape[0]}); found {d.shape[0]}")
    k = _validate.positive_int("k", k)
    need = _PARAMS_PER_INSTANTON * k
    if pts.shape[0] < need + 1:
        raise ValueError(f"need more than {_PARAMS_PER_INSTANTON} k = {need} samples for k = {k}; found {pts.shape[0]}")
    _validate.choice("quantity", quantity, _QUANTITIES)
    if weights is None:
        w = np.ones_like(d)
    else:
        w = _validate.real_array("weights", weights).reshape(-1)
        if w.shape != d.shape:
            raise ValueError(f"weights must have shape {d.shape}; found {w.shape}")
        if np.any(w < 0):
            raise ValueError(f"weights must be >= 0; found min {float(np.min(w))!r}")
    return pts, d, w


def _to_action(d: np.ndarray, quantity: str) -> tuple[np.ndarray, int]:
    """Density as an action-like positive density and its sign (q = +-s / 8 pi^2 for (anti-)self-dual fields)."""
    if quantity == "action":
        return d, 1
    sign = 1 if np.sum(d) >= 0 else -1
    return sign * d * INSTANTON_ACTION, sign


# -- peaks ------------------------------------------------------------------------------------------


def _neighbours(pts: np.ndarray, n_nb: int = _PEAK_NEIGHBOURS):
    tree = scipy.spatial.cKDTree(pts)
    dist, idx = tree.query(pts, k=min(n_nb + 1, pts.shape[0]))
    return dist[:, 1:], idx[:, 1:]


def count_peaks(points, density, *, min_fraction: float = 0.05) -> tuple[np.ndarray, np.ndarray]:
    """Distinct local maxima of sampled density: (centres (p, 4), heights (p,)), tallest first.

    A sample is a local maximum when it exceeds its _PEAK_NEIGHBOURS nearest samples; maxima above
    ``min_fraction`` of the tallest are merged when closer than the BPST size of the taller one
    (rho = (_BPST_PEAK / height)^(1/4)).  points: (..., 4); density: (...,) with one value per point.
    """
    pts, _ = as_points(points)
    d = _validate.real_array("density", density).reshape(-1)
    if d.shape[0] != pts.shape[0]:
        raise ValueError(f"density must have one value per point ({pts.shape[0]}); found {d.shape[0]}")
    _, idx = _neighbours(pts)
    is_max = np.all(d[:, None] > d[idx], axis=1) & (d > min_fraction * np.max(d))
    cand = np.flatnonzero(is_max)
    cand = cand[np.argsort(-d[cand])]
    kept: list[int] = []
    for c in cand:
        rho = (_BPST_PEAK / d[c]) ** 0.25
        if all(np.linalg.norm(pts[c] - pts[j]) > max(rho, (_BPST_PEAK / d[j]) ** 0.25) for j in kept):
            kept.append(int(c))
    return pts[kept], d[kept]


def _greedy_start(pts: np.ndarray, s: np.ndarray, k: int):
    rest = s.copy()
    centers, sizes = [], []
    for _ in range(k):
        i = int(np.argmax(rest))
        rho = (_BPST_PEAK / max(rest[i], _TINY)) ** 0.25
        centers.append(pts[i])
        sizes.append(rho)
        rest = rest - np.asarray(superposition_density(pts, pts[i][None], np.array([rho])))
    return np.array(centers), np.array(sizes)


# -- the fit -----------------------------------------------------------------------------------------


def _unpack(theta, k):
    t = theta.reshape(k, _PARAMS_PER_INSTANTON)
    return t[:, :4], jnp.exp(t[:, 4])


def find_instantons(points, density, k: int, *, weights=None, init=None, quantity: str = "action") -> InstantonFit:
    """Fit k (anti-)instantons to density samples; returns an :class:`InstantonFit`.

    points: (..., 4) sample positions (lattice sites or any point set); density: (...,) action density
    s (quantity='action') or charge density q (quantity='charge', its sign picks instantons or
    anti-instantons); weights: optional (...,) >= 0 per-sample weights of the squared residuals;
    init: optional (centres (k, 4), sizes (k,)) start instead of the peak picking.
    Residuals are sqrt(w) (model - s) / max|s|.

    Args:
      points: (..., 4) float64 sample positions.
      density: (...,) float64, one value per point (action or charge density).
      k: number of (anti-)instantons, a positive integer; more than 5 k samples are needed.
      weights: None or (...,) float64 >= 0.
      init: None or (centres (k, 4), sizes (k,) > 0).
      quantity: 'action' or 'charge'.
    Returns:
      InstantonFit with centers (k, 4), sizes (k,), one-sigma uncertainties, ADHM data and the
      reasons the fit may be ambiguous.
    Raises:
      ValueError / TypeError naming the bad argument; ValueError when the density is zero everywhere.
    """
    pts, d, w = _check_inputs(points, density, k, weights, quantity)
    s, sign = _to_action(d, quantity)
    smax = float(np.max(np.abs(s)))
    if smax <= 0:
        raise ValueError("density is zero everywhere; nothing to fit")
    peaks, _ = count_peaks(pts, s)
    if init is None:
        c0, r0 = _greedy_start(pts, s, k)
    else:
        c0 = _validate.real_array("init centres", init[0])
        r0 = _validate.real_array("init sizes", init[1])
        if c0.shape != (k, 4) or r0.shape != (k,) or np.any(r0 <= 0):
            raise ValueError(f"init must be (centres (k, 4), sizes (k,) > 0) with k = {k}; found {c0.shape}, {r0.shape}")
    theta0 = np.concatenate([c0, np.log(r0)[:, None]], axis=1).reshape(-1)
    sw = np.sqrt(w) / smax
    pts_j, s_j, sw_j = jnp.asarray(pts), jnp.asarray(s), jnp.asarray(sw)

    def resid(theta):
        c, r = _unpack(theta, k)
        return sw_j * (superposition_density(pts_j, c, r) - s_j)

    f = jax.jit(resid)
    jac = jax.jit(jax.jacfwd(resid))
    sol = scipy.optimize.least_squares(
        lambda t: np.asarray(f(jnp.asarray(t))),
        theta0,
        jac=lambda t: np.asarray(jac(jnp.asarray(t))),
        method="lm" if pts.shape[0] >= _PARAMS_PER_INSTANTON * k else "trf",
        xtol=_FIT_TOL,
        ftol=_FIT_TOL,
        gtol=_FIT_TOL,
        max_nfev=_NFEV_PER_PARAM * (_PARAMS_PER_INSTANTON * k + 1),
    )
    c, r = (np.asarray(a) for a in _unpack(jnp.asarray(sol.x), k))
    m, npar = pts.shape[0], _PARAMS_PER_INSTANTON * k
    var = float(np.sum(sol.fun**2)) / max(m - npar, 1)
    jtj = sol.jac.T @ sol.jac
    reasons = []
    cond = np.linalg.cond(jtj)
    if not np.isfinite(cond) or cond > _MAX_CONDITION:
        reasons.append(f"curvature J^T J is near-singular (condition number {cond:.1e})")
        cov = np.linalg.pinv(jtj) * var
    else:
        cov = np.linalg.inv(jtj) * var
    err = np.sqrt(np.abs(np.diag(cov))).reshape(k, _PARAMS_PER_INSTANTON)
    dc, ds = err[:, :4], err[:, 4] * r  # d rho = rho d log rho
    if not sol.success:
        reasons.append(f"least squares did not converge ({sol.message})")
    if k > peaks.shape[0]:
        reasons.append(f"k = {k} exceeds the {peaks.shape[0]} distinct peak(s) in the samples")
    for i in range(k):
        for j in range(i + 1, k):
            dist = float(np.linalg.norm(c[i] - c[j]))
            if dist < r[i] + r[j]:
                reasons.append(f"instantons {i} and {j} overlap: distance {dist:.3g} < size sum {r[i] + r[j]:.3g}")
    nn, _ = _neighbours(pts, 1)
    spacing = float(np.median(nn[:, 0]))
    extent = float(np.max(np.ptp(pts, axis=0)))
    for i in range(k):
        if r[i] < 0.5 * spacing:
            reasons.append(f"size {i} collapsed to {r[i]:.3g}, below half the sample spacing {spacing:.3g}")
        if r[i] > 0.5 * extent:
            reasons.append(f"size {i} exploded to {r[i]:.3g}, beyond half the sample extent {extent:.3g}")
    data = None
    try:
        data = _anti_data(c, r) if sign == -1 else multi_instanton(c, r)
    except ValueError as err_adhm:
        reasons.append(f"no ADHM data for the fitted moduli ({err_adhm})")
    rms = float(np.sqrt(np.mean(sol.fun**2)))
    return InstantonFit(
        centers=c,
        sizes=r,
        uncertainties={"centers": dc, "sizes": ds},
        data=data,
        ambiguous=bool(reasons),
        reasons=tuple(reasons),
        sign=sign,
        rms=rms,
        n_peaks=int(peaks.shape[0]),
        quantity=quantity,
    )


def _anti_data(centers, sizes):
    """Anti-instanton ADHM data with centres ``centers``: the parity image of data centred at P a_i."""
    return multi_instanton(np.asarray(centers) * PARITY, sizes).conjugate()
