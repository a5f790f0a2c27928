"""Recover instanton positions and sizes from sampled action or charge densities by least squares.

Model (superposition of BPST profiles; Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85):

    s(x) ~ sum_i 48 rho_i^4 / (|x - a_i|^2 + rho_i^2)^4,        q(x) ~ +-s(x) / 8 pi^2,

fitted with scipy.optimize.least_squares on the parameters (a_i, log rho_i), the Jacobian by jax.jacfwd.
For well separated instantons the exact ADHM density differs from the superposition by corrections of
relative order (rho / distance)^2 near each peak (measured: centres off by 4e-4 to 2e-2 for k = 2..4).
The superposition does not depend on orientations; with ``model="superposition"`` ``orientations`` is
None and ``data`` is built by `instantonkit.adhm.moduli.multi_instanton` from the fitted centres and
sizes with trivial orientations.

Exact model (``model="exact"``, the default): starting from the superposition fit, the exact SU(2)
ADHM data (centres, sizes and relative orientations: all 8k - 3 gauge-invariant moduli) are fitted by
`instantonkit.fit.exact_fit` (`fit_exact`) to the samples above ``_EXACT_FLOOR`` of the peak (at most
``_EXACT_MAX``, the largest); ``data`` is then the fitted ``ADHMData``.  Sp(n > 1) data are not fitted (SU(2) only).

SU(N > 2) (``rank=N``, genuine complex ADHM data).  ``model="exact"`` (the default): starting from the
superposition fit, exact SU(N) data of well-separated instantons (the construction of
`instantonkit.adhm.unitary_moduli.unitary_multi_instanton`) are fitted by `instantonkit.fit.exact_fit`
(`fit_unitary`) to the same samples as for SU(2): centres, sizes and, as nuisance parameters, one relative SU(N)
rotation per instanton (the first fixed: the global rotation is gauge; stabiliser directions removed).
``data`` = the fitted ``UnitaryADHMData``; ``orientations`` = the fitted representative (k, N, N), which
is determined only up to gauge and stabilisers (said in ``notes``); systematic = 0 for continuum SU(N)
densities.  ``model="superposition"``: centres and sizes only; systematic = the spread of refits of exact
SU(N) densities with the fitted centres and sizes and ``_SUN_DRAWS`` random orientations; ``data`` = SU(N)
data of the fitted centres and sizes, trivial orientations.  For anti-instantons (a charge density of
negative sign) ``data`` is None for N > 2 (complex data of anti-self-dual fields are not implemented).
An exact fit (SU(2) or SU(N)) no better than the superposition is flagged.

Start: the distinct peaks of `count_peaks` (plateaus and ties merged, so lumps between lattice
sites count once), sizes from the peak heights ``s_max = 48 / rho^4``; missing ones by greedy
subtraction of BPST profiles.
Uncertainties: ``statistical`` = sqrt(diag(sigma^2 (J^T W J)^-1)) of the reported model at its optimum
(sigma^2 from the residuals, or 1 when ``sigma`` is given); ``systematic`` = the model error: for the
superposition model |superposition - exact| per parameter (k >= 2; zero for k = 1 where BPST is exact),
for the exact model zero for continuum ADHM densities (lattice artefacts O((a / rho)^2) of densities
measured from links are not included and are named in ``error_budget``); ``uncertainties`` adds the two
in quadrature.  chi2 / dof is a goodness-of-fit statement only when ``sigma`` (the noise) is given.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..adhm.moduli import multi_instanton
from ..adhm.unitary_moduli import unitary_multi_instanton
from ..core import _validate
from ..core.conventions import INSTANTON_ACTION
from ..engine.fields import action_density, as_points
from ..engine.transforms import PARITY
from .exact_fit import fit_exact, fit_unitary
from .peaks import count_peaks, count_signed_peaks, sample_spacing
from .results import InstantonFit, MixedFit
from .superposition import (
    _MAX_CONDITION,
    _PARAMS_PER_INSTANTON,
    _covariance,
    _fit_superposition,
    _greedy_start,
    _match,
    _quad,
    superposition_density,
)

__all__ = [
    "InstantonFit",
    "MixedFit",
    "find_instantons",
    "superposition_density",
    "count_peaks",
    "count_signed_peaks",
]

_QUANTITIES = ("action", "charge")
_MODELS = ("exact", "superposition")

#: The exact fit uses the samples above this fraction of the peak (where the moduli are measured; the
#: far tail costs time and adds little).
_EXACT_FLOOR = 1e-3

#: At most this many samples (the largest) enter the exact fit (its cost is linear in them).
_EXACT_MAX = 4096

#: chi2 / dof accepted as "explained to the noise level": 1 + _CHI2_SIGMAS sqrt(2 / dof) (the chi2
#: distribution has mean dof and variance 2 dof; common practice).
_CHI2_SIGMAS = 5.0

#: Opposite-sign lumps below this fraction of the largest |q| are treated as noise.
_OPPOSITE_FRACTION = 0.05

#: SU(N > 2) model error of the superposition: refits of this many exact SU(N) densities (random orientations).
_SUN_DRAWS = 3


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


# -- the front door ------------------------------------------------------------------------------------


def find_instantons(
    points,
    density,
    k,
    *,
    weights=None,
    init=None,
    quantity: str = "action",
    model: str = "exact",
    sigma=None,
    seed: int = 0,
    systematics: bool = True,
    rank: int = 2,
    _lattice_note: str = "",
):
    """Fit k (anti-)instantons to density samples; returns an `InstantonFit` (a `MixedFit` for k = (k+, k-)).

    points: (..., 4) sample positions (lattice sites or any point set); density: (...,) action density
    s (quantity='action') or charge density q (quantity='charge', its sign picks instantons or
    anti-instantons); weights: optional (...,) >= 0 relative weights of the squared residuals;
    sigma: optional noise of the samples (a number or (...,)), weights then 1 / sigma^2 and chi2 / dof
    is a goodness-of-fit statement; init: optional (centres (k, 4), sizes (k,)) start instead of the
    peak picking; model: 'exact' (exact SU(2) ADHM data, all moduli, or for rank > 2 exact SU(N) data with
    orientations as nuisance parameters, from the superposition start) or
    'superposition' (sum of BPST profiles; its model error is then estimated from an exact fit).
    Residuals are sqrt(w) (model - s) / max|s|.

    Args:
      points: (..., 4) float64 sample positions.
      density: (...,) float64, one value per point (action or charge density).
      k: number of (anti-)instantons, a positive integer (more than 5 k samples are needed); or, for
        quantity='charge', a pair (k_plus, k_minus) of instantons and anti-instantons fitted jointly.
      weights: None or (...,) float64 >= 0.
      init: None or (centres (k, 4), sizes (k,) > 0).
      quantity: 'action' or 'charge'.
      model: 'exact' or 'superposition'.
      sigma: None, a number > 0 or (...,) > 0 (exclusive with weights).
      seed: seed of the random orientation starts of the exact fit.
      systematics: for model='superposition' and k >= 2, estimate the model error by an exact fit
        (False skips it: systematic errors are then NaN, "not estimated").
      rank: N of the SU(N) instantons behind the density (2, or N > 2 for genuine complex ADHM data,
        module docstring).
    Returns:
      InstantonFit with centers (k, 4), sizes (k,), orientations, statistical / systematic / total
      one-sigma uncertainties, ADHM data and the reasons the fit may be ambiguous.
    Raises:
      ValueError / TypeError naming the bad argument; ValueError when the density is zero everywhere.
    """
    if isinstance(k, tuple | list):
        return _find_mixed(points, density, k, weights=weights, sigma=sigma)
    _validate.choice("model", model, _MODELS)
    if _validate.positive_int("rank", rank) < 2:
        raise ValueError(f"rank must be >= 2 (the N of SU(N)); found rank {rank}")
    if sigma is not None:
        if weights is not None:
            raise ValueError("give either weights or sigma, not both")
        sg = _validate.real_array("sigma", sigma)
        if np.any(sg <= 0):
            raise ValueError(f"sigma must be > 0; found min {float(np.min(sg))!r}")
        weights = np.broadcast_to(1.0 / sg**2, np.shape(density)) if sg.ndim else np.full(np.shape(density), 1 / sg**2)
    pts, d, w = _check_inputs(points, density, k, weights, quantity)
    s, sign = _to_action(d, quantity)
    if quantity == "charge" and sigma is not None:
        w = w / INSTANTON_ACTION**2  # sigma is the noise of q; s = +-8 pi^2 q
    smax = float(np.max(np.abs(s)))
    if smax <= 0:
        raise ValueError("density is zero everywhere; nothing to fit")
    fit_pts = pts * PARITY if sign == -1 else pts  # anti-instantons: fit the parity image s(Px)
    peaks = count_peaks(fit_pts, s)
    reasons = []
    if quantity == "charge":
        opp = -sign * d
        if np.max(opp) > _OPPOSITE_FRACTION * np.max(np.abs(d)):
            n_opp = count_signed_peaks(pts, d)[-sign][0].shape[0]
            reasons.append(f"the charge density has {n_opp} lump(s) of the opposite sign; pass k = (k_plus, k_minus)")
    if init is None:
        c0, r0 = _greedy_start(fit_pts, s, k, peaks)
    else:
        c0 = _validate.real_array("init centres", init[0])
        r0 = _validate.real_array("init sizes", init[1])
        if c0.shape != (k, 4) or r0.shape != (k,) or np.any(r0 <= 0):
            raise ValueError(
                f"init must be (centres (k, 4), sizes (k,) > 0) with k = {k}; found {c0.shape}, {r0.shape}"
            )
        if sign == -1:
            c0 = c0 * PARITY
    sw = np.sqrt(w) / smax
    cs, rs, sol = _fit_superposition(fit_pts, s, sw, c0, r0)
    m, npar = pts.shape[0], _PARAMS_PER_INSTANTON * k
    var = float(np.sum(sol.fun**2)) / max(m - npar, 1)
    cov, cond = _covariance(sol.jac, 1.0 / smax**2 if sigma is not None else var)
    err = np.sqrt(np.abs(np.diag(cov))).reshape(k, _PARAMS_PER_INSTANTON)
    stat_sup = {"centers": err[:, :4], "sizes": err[:, 4] * rs}  # d rho = rho d log rho
    if not sol.success:
        reasons.append(f"least squares did not converge ({sol.message})")
    exact: Any = None
    notes: tuple = ()
    if k >= 2 and (model == "exact" or (systematics and rank == 2)):
        sel = s >= _EXACT_FLOOR * smax
        if sel.sum() > _EXACT_MAX:
            sel = np.zeros_like(sel)
            sel[np.argsort(-s)[:_EXACT_MAX]] = True
        if sel.sum() <= 8 * k:
            sel = np.ones_like(sel)
        try:
            if rank == 2:
                exact = fit_exact(fit_pts[sel], s[sel], k, w[sel], cs, rs, seed=seed, noise_known=sigma is not None)
            else:
                exact = fit_unitary(
                    fit_pts[sel], s[sel], k, rank, w[sel], cs, rs, seed=seed, noise_known=sigma is not None
                )
                notes = (
                    f"orientations: the fitted SU({rank}) representative g_i (g_1 fixed), determined only up to "
                    "gauge and stabilisers; the centres and sizes are gauge invariant",
                )
        except ValueError as err_exact:
            reasons.append(f"exact ADHM fit failed ({err_exact})")
    if model == "exact" and exact is not None:
        c, r, o = exact.centers, exact.sizes, exact.orientations
        stat = dict(exact.errors)
        syst = {key: np.zeros_like(v) for key, v in stat.items()}
        dof = exact.dof
        chi2 = exact.chi2
        rms = exact.rms
        cond = exact.condition
        data: Any = exact.data
        budget = (
            "statistical = noise, from the curvature of the exact ADHM fit; systematic = 0 (the model is exact "
            f"for SU({rank}) ADHM densities)" + _lattice_note
        )
        if not exact.success:
            reasons.append(f"exact fit did not converge ({exact.message})")
        if rms >= float(np.sqrt(np.mean(sol.fun[sel] ** 2))):  # the superposition on the same samples
            reasons.append(
                f"the exact SU({rank}) model (rms {rms:.2e}) does not improve on the superposition"
                + (
                    "; the density may come from SU(N > 2) instantons that are not embeddings (pass rank=N)"
                    if rank == 2
                    else ""
                )
            )
    else:
        c, r, o = cs, rs, None
        stat = stat_sup
        if exact is not None:
            p = _match(cs, exact.centers)
            syst = {"centers": np.abs(cs - exact.centers[p]), "sizes": np.abs(rs - exact.sizes[p])}
            budget = "statistical = noise, from the curvature of the superposition fit; systematic = |superposition - exact ADHM fit|"
        elif k >= 2 and rank > 2 and systematics:
            try:
                syst = _sun_model_error(fit_pts, w, cs, rs, rank, seed)
            except ValueError as err_sun:  # no SU(N) data for the fitted moduli
                reasons.append(f"SU({rank}) model error not estimated ({err_sun})")
                syst = {"centers": np.full_like(cs, np.nan), "sizes": np.full_like(rs, np.nan)}
            budget = (
                "statistical = noise, from the curvature of the superposition fit; systematic = spread of "
                f"superposition refits of exact SU({rank}) densities with random orientations"
            )
        elif k >= 2:
            syst = {"centers": np.full_like(cs, np.nan), "sizes": np.full_like(rs, np.nan)}
            budget = "statistical = noise, from the curvature of the superposition fit; systematic: not estimated"
        else:
            syst = {"centers": np.zeros_like(cs), "sizes": np.zeros_like(rs)}
            budget = "statistical = noise, from the curvature of the superposition fit; systematic = 0 (k = 1: BPST is exact)"
        if k == 1 and model == "exact":  # the BPST profile is the exact charge-1 density
            o = np.array([[1.0, 0.0, 0.0, 0.0]]) if rank == 2 else np.eye(rank, dtype=np.complex128)[None]
            budget = (
                "statistical = noise, from the curvature of the fit; systematic = 0 (k = 1: BPST is the exact density)"
            )
        budget += _lattice_note
        dof = max(m - npar, 1)
        chi2 = float(np.sum(sol.fun**2)) * smax**2
        rms = float(np.sqrt(np.mean(sol.fun**2)))
        data = None
        try:
            data = multi_instanton(cs, rs) if rank == 2 else unitary_multi_instanton(cs, rs, rank=rank)
        except ValueError as err_adhm:
            reasons.append(f"no ADHM data for the fitted moduli ({err_adhm})")
    if not np.isfinite(cond) or cond > _MAX_CONDITION * (1e4 if model == "exact" else 1.0):
        reasons.append(f"curvature J^T J is near-singular (condition number {cond:.1e})")
    chi2_dof = chi2 / dof
    explains = None
    if sigma is not None:
        explains = bool(chi2_dof <= 1.0 + _CHI2_SIGMAS * np.sqrt(2.0 / dof))
        if not explains:
            reasons.append(
                f"the {'exact' if o is not None else 'superposition'} model does not explain the density to its noise level (chi2/dof = {chi2_dof:.3g})"
            )
    if k > peaks[0].shape[0]:
        reasons.append(f"k = {k} exceeds the {peaks[0].shape[0]} distinct peak(s) in the samples")
    for i in range(k):
        for j in range(i + 1, k):
            dist = float(np.linalg.norm(c[i] - c[j]))
            if dist < r[i] + r[j]:
                reasons.append(f"instantons {i} and {j} overlap: distance {dist:.3g} < size sum {r[i] + r[j]:.3g}")
    spacing = sample_spacing(pts)
    extent = float(np.max(np.ptp(pts, axis=0)))
    for i in range(k):
        if r[i] < 0.5 * spacing:
            reasons.append(f"size {i} collapsed to {r[i]:.3g}, below half the sample spacing {spacing:.3g}")
        if r[i] > 0.5 * extent:
            reasons.append(f"size {i} exploded to {r[i]:.3g}, beyond half the sample extent {extent:.3g}")
    if sign == -1:  # back from the parity image
        c, cs = c * PARITY, cs * PARITY
        data = data.conjugate() if data is not None and rank == 2 else None
    return InstantonFit(
        centers=c,
        sizes=r,
        uncertainties=_quad(stat, syst),
        data=data,
        ambiguous=bool(reasons),
        reasons=tuple(reasons),
        sign=sign,
        rms=rms,
        n_peaks=int(peaks[0].shape[0]),
        quantity=quantity,
        orientations=o,
        statistical=stat,
        systematic=syst,
        error_budget=budget,
        model="exact" if o is not None else "superposition",
        chi2_dof=float(chi2_dof),
        explains_noise=explains,
        superposition={"centers": cs, "sizes": rs},
        notes=notes,
    )


def _sun_model_error(pts, w, cs, rs, rank, seed):
    """Max |superposition refit - truth| over exact SU(N) densities of (cs, rs) with random orientations."""
    rng, shape = np.random.default_rng(seed), (cs.shape[0], rank, rank)
    err_c, err_r = np.zeros_like(cs), np.zeros_like(rs)
    for _ in range(_SUN_DRAWS):
        g = np.linalg.qr(rng.normal(size=shape) + 1j * rng.normal(size=shape))[0]  # unitary (U(1) is gauge)
        truth = unitary_multi_instanton(cs, rs, g, rank=rank)
        s_true = action_density(truth, pts)
        c, r, _ = _fit_superposition(pts, s_true, np.sqrt(w) / float(np.max(s_true)), cs, rs)
        p = _match(truth.centers(), c)
        err_c = np.maximum(err_c, np.abs(c[p] - truth.centers()))
        err_r = np.maximum(err_r, np.abs(r[p] - truth.sizes()))
    return {"centers": err_c, "sizes": err_r}


def _find_mixed(points, density, k, *, weights, sigma):
    """Joint signed superposition fit of k = (k_plus, k_minus) lumps to a charge density."""
    if len(k) != 2:
        raise ValueError(f"k must be an integer or a pair (k_plus, k_minus); found {k!r}")
    kp, km = (_validate.nonnegative_int("k", v) for v in k)
    if kp + km < 1:
        raise ValueError(f"k must be an integer or a pair (k_plus, k_minus) with k_plus + k_minus >= 1; found {k!r}")
    if sigma is not None:
        weights = np.broadcast_to(
            1.0 / (_validate.real_array("sigma", sigma) * INSTANTON_ACTION) ** 2, np.shape(density)
        )
    pts, d, w = _check_inputs(points, density, kp + km, weights, "charge")
    q = d * INSTANTON_ACTION  # s-like units: +-s for (anti-)instanton lumps
    qmax = float(np.max(np.abs(q)))
    if qmax <= 0:
        raise ValueError("density is zero everywhere; nothing to fit")
    peaks = count_signed_peaks(pts, q)
    cp, rp = _greedy_start(pts, np.maximum(q, 0.0), kp, peaks[1]) if kp else (np.zeros((0, 4)), np.zeros(0))
    cm, rm = _greedy_start(pts, np.maximum(-q, 0.0), km, peaks[-1]) if km else (np.zeros((0, 4)), np.zeros(0))
    c0, r0 = np.concatenate([cp, cm]), np.concatenate([rp, rm])
    signs = np.concatenate([np.ones(kp), -np.ones(km)])
    sw = np.sqrt(w) / qmax
    c, r, sol = _fit_superposition(pts, q, sw, c0, r0, signs)
    m, npar = pts.shape[0], _PARAMS_PER_INSTANTON * (kp + km)
    var = float(np.sum(sol.fun**2)) / max(m - npar, 1)
    cov, cond = _covariance(sol.jac, 1.0 / qmax**2 if sigma is not None else var)
    err = np.sqrt(np.abs(np.diag(cov))).reshape(kp + km, _PARAMS_PER_INSTANTON)
    rms = float(np.sqrt(np.mean(sol.fun**2)))
    budget = (
        "statistical = noise, from the curvature of the joint superposition fit; systematic: not estimated "
        "(instanton-anti-instanton pairs are not self-dual; the superposition is their model)"
    )

    def part(idx, sign):
        stat = {"centers": err[idx, :4], "sizes": err[idx, 4] * r[idx]}
        syst = {key: np.zeros_like(v) for key, v in stat.items()}
        reasons = [] if sol.success else [f"least squares did not converge ({sol.message})"]
        n_found = peaks[sign][0].shape[0]
        if idx.size > n_found:
            reasons.append(f"k = {idx.size} exceeds the {n_found} distinct peak(s) of sign {sign:+d}")
        return InstantonFit(
            centers=c[idx],
            sizes=r[idx],
            uncertainties=_quad(stat, syst),
            data=None,
            ambiguous=bool(reasons),
            reasons=tuple(reasons),
            sign=sign,
            rms=rms,
            n_peaks=int(n_found),
            quantity="charge",
            statistical=stat,
            systematic=syst,
            error_budget=budget,
            model="superposition",
            chi2_dof=float(np.sum(sol.fun**2) * qmax**2 / max(m - npar, 1)),
            superposition={"centers": c[idx], "sizes": r[idx]},
        )

    return MixedFit(part(np.arange(kp), 1), part(np.arange(kp, kp + km), -1), rms)
