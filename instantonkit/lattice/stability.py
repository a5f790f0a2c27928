"""When a flow or cooling run is unstable: the step bound of the flow integrator and the action-rise rule.

A flow whose effective step exceeds `flow_step_bound` (the real stability interval of a third-order
Runge-Kutta scheme over the largest frequency of the linearised flow) is refused before it starts, and a
run whose driving action rises between two measurements stops with an error (`_check_rise`).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ..core import _progress
from ..core import _validate as _v
from .loops import improved_coefficients
from .operators import epsilon_action, get_operator

#: Real stability interval [-RK3_STABILITY, 0] of every explicit three-stage third-order Runge-Kutta scheme,
#: whose stability function on dy/dt = lambda y is R(z) = 1 + z + z^2/2 + z^3/6 (Hairer and Wanner, Solving
#: Ordinary Differential Equations II, Springer 1996, section IV.2, from memory; the root is computed
#: below and checked by test_the_rk3_stability_bound_is_the_real_root_of_r_equal_minus_one): the real root of R(z) = -1,
#: 2.5127.  Luescher's integrator reduces to such a scheme on the linearised flow (its stages 1/4, 5/12, 1/3).
RK3_STABILITY = float(-min(r.real for r in np.roots([1.0 / 6.0, 0.5, 1.0, 2.0]) if abs(r.imag) < 1e-9))


#: Relative rise of the driving action between two measurements above which a run is unstable (rounding of
#: the lattice sums is ~1e-13 relative).
ACTION_RISE_TOL = 1e-9


@functools.lru_cache(maxsize=64)
def max_flow_frequency(eps: float = 1.0) -> float:
    """Largest eigenvalue lambda_max of the gradient flow of S(eps) linearised about the trivial field.

    Small fields A_mu(p) (momentum p, lattice units) flow by dA/dt = -M(p) A with the tree-level kernel
    M_nu rho = delta_nu rho sum_mu W_mu nu p_mu^2 - W_nu rho p_nu p_rho, p_mu = 2 sin(p_mu / 2), and the
    plane weights W_mu nu = c1 + c2 (4 cos^2(p_mu / 2)) (4 cos^2(p_nu / 2)) of the 1x1 and 2x2 loops
    (the 2x2 flux is (1 + e^{i p_mu})(1 + e^{i p_nu}) times the 1x1 flux; common practice).  Maximised over a
    17^4 grid of [0, pi]^4: 16 for the Wilson flow (the staggered mode, p = pi), 64/3 for eps = 0;
    tests/test_flow_stability.py checks both against power iteration of the module's own force.
    """
    c1, c2 = improved_coefficients(eps)
    p = np.linspace(0.0, np.pi, 17)
    grid = np.stack(np.meshgrid(p, p, p, p, indexing="ij"), axis=-1).reshape(-1, 4)
    ph = 2.0 * np.sin(grid / 2.0)
    c = 4.0 * np.cos(grid / 2.0) ** 2
    w = c1 + c2 * c[:, :, None] * c[:, None, :]
    m = -w * ph[:, :, None] * ph[:, None, :]
    diag = np.sum(w * (ph**2)[:, :, None], axis=1) - np.diagonal(w, axis1=1, axis2=2) * ph**2
    m[:, np.arange(4), np.arange(4)] = diag
    return float(np.max(np.linalg.eigvalsh(m)))


def _dirichlet(m: int, x):
    """sin(m x) / sin(x) = sum_{k=0}^{m-1} cos((m - 1 - 2k) x) (no 0/0 at x = 0)."""
    return sum(np.cos((m - 1 - 2 * k) * x) for k in range(m))


@functools.lru_cache(maxsize=64)
def _operator_frequency(terms: tuple, a: tuple = (1.0, 1.0, 1.0, 1.0)) -> float:
    p = np.linspace(0.0, np.pi, 17)
    grid = np.stack(np.meshgrid(p, p, p, p, indexing="ij"), axis=-1).reshape(-1, 4)
    ph = 2.0 * np.sin(grid / 2.0) / np.asarray(a)
    w = np.zeros((grid.shape[0], 4, 4))
    for m, n, c in terms:
        gm, gn = _dirichlet(m, grid / 2.0) ** 2, _dirichlet(n, grid / 2.0) ** 2
        w += float(c) / (m * n) ** 2 * 0.5 * (gm[:, :, None] * gn[:, None, :] + gn[:, :, None] * gm[:, None, :])
    m_ = -w * ph[:, :, None] * ph[:, None, :]
    diag = np.sum(w * (ph**2)[:, :, None], axis=1) - np.diagonal(w, axis1=1, axis2=2) * ph**2
    m_[:, np.arange(4), np.arange(4)] = diag
    return float(np.max(np.linalg.eigvalsh(m_)))


def operator_flow_frequency(operator, *, spacing=None) -> float:
    """Largest eigenvalue lambda_max of the gradient flow of a loop operator's action linearised about the
    trivial field (units 1/a^2 without ``spacing``; with ``spacing`` one a or four (a1, a2, a3, a4): physical
    units, flow time in units of length^2).

    As `max_flow_frequency` with the plane weights of the m x n terms: an m x n loop's flux is
    D_m(p_mu / 2) D_n(p_nu / 2) times the plaquette's, D_m(x) = sin(m x)/sin(x) up to a phase (common
    practice), so W_mu nu = sum_i c_i / (m_i n_i)^2 [G_m(p_mu) G_n(p_nu) + G_n(p_mu) G_m(p_nu)] / 2 with
    G_m = D_m^2.  16 for the Wilson action; the 1x1 + 2x2 set of eps gives `max_flow_frequency(eps)`.
    Anisotropic spacings: the action is normalised by each loop's area (`instantonkit.lattice.operators`),
    so for small fields A_mu (links exp(a_mu A_mu)) it is V sum_x (1/2) sum W_mu nu |k_mu A_nu - k_nu A_mu|^2
    with the lattice momenta k_mu = 2 sin(p_mu / 2) / a_mu, and the same kernel holds with p_mu-hat -> k_mu
    (16 / a^2 for the isotropic Wilson flow; derivation, no source).
    """
    terms = get_operator(operator).terms
    if spacing is None:
        return _operator_frequency(terms)
    return _operator_frequency(terms, tuple(float(x) for x in _v.spacings("spacing", spacing)))


def flow_step_bound(eps: float = 1.0, *, action=None, spacing=None) -> float:
    """Largest stable step of `gradient_flow`: RK3_STABILITY / `max_flow_frequency` (0.157 for the
    Wilson flow, 0.118 for eps = 0); beyond it the shortest wavelengths grow instead of being damped.
    With ``action`` (a loop operator, `instantonkit.lattice.operators`) the bound of its flow,
    RK3_STABILITY / `operator_flow_frequency`.  With ``spacing`` (one a or four) the bound in physical
    flow time (length^2) of the flow on that lattice (the action of ``eps`` as its 1x1 + 2x2 loop set)."""
    if spacing is not None:
        op = action if action is not None else epsilon_action(_v.finite_float("eps", eps))
        return RK3_STABILITY / operator_flow_frequency(op, spacing=spacing)
    if action is not None:
        return RK3_STABILITY / operator_flow_frequency(action)
    return RK3_STABILITY / max_flow_frequency(_v.finite_float("eps", eps))


def _check_rise(prev, cur, kind: str, where: str, advice: str):
    """Raise when the driving action rose from ``prev`` to ``cur`` beyond rounding (an unstable run)."""
    if cur - prev > ACTION_RISE_TOL * max(abs(prev), 1.0) or not np.isfinite(cur):
        raise ValueError(
            f"the {kind} is unstable: the action S(eps) rose from {prev:.10g} to {cur:.10g} {where}, where it "
            f"must fall; {advice}"
        )


def monitored_run(u, update, measure, n: int, *, every: int, progress, label: str, time_of, driving: int, check):
    """Apply ``update`` n times, measuring after every ``every``-th and the last, and stop when the action rises.

    The one loop of the flows and the cooling runs (plain and twisted): ``measure(u)`` gives a row whose entry
    ``driving`` is the action the update lowers; ``time_of(i)`` the record's time after i updates;
    ``check(prev, cur, t_prev, t_cur, i)`` raises on a rise (`_check_rise` with the run's wording).
    Returns (u, times, rows).
    """
    times, rows = [time_of(0)], [measure(u)]
    report = _progress.sink(progress, label)
    for i in range(1, n + 1):
        u = update(u)
        if report is not None:
            report(i, n)
        if i % every == 0 or i == n:
            times.append(time_of(i))
            rows.append(measure(u))
            check(float(rows[-2][driving]), float(rows[-1][driving]), times[-2], times[-1], i)
    return u, times, rows


def flow_steps(tt: float, h: float, link_count: float) -> tuple[int, float]:
    """(n, h): n = ceil(tt / h) equal steps of tt / n for flow time tt and nominal step h (both in the run's units),
    refused first when n steps of ``link_count`` links would be more work than `instantonkit.core._validate.
    bounded_work` allows (h is returned unchanged for tt = 0)."""
    steps = math.ceil(tt / h - 1e-9) if tt > 0 else 0
    _v.bounded_work("t", steps * link_count, f"t / step = {tt:g} / {h:g} = {steps:.3e} steps of {link_count:.0f} links")
    n = int(steps)
    return n, (tt / n if n else h)


def run_flow(
    u, step_fn, measure, n: int, h: float, scale: float, *, every: int, progress, label: str, kind: str, driving: int
):
    """`monitored_run` of n flow steps of size h (flow time i h scale after i steps, in the units of t): the one
    loop of the plain and the twisted flows, stopping with an error that names the flow times, the step and a
    step a quarter as large when the driving action (entry ``driving`` of a measured row) rises."""
    return monitored_run(
        u,
        step_fn,
        measure,
        n,
        every=every,
        progress=progress,
        label=label,
        time_of=lambda i: i * h * scale,
        driving=driving,
        check=lambda prev, cur, t0, t1, i: _check_rise(
            prev,
            cur,
            kind,
            f"between flow times {t0:g} and {t1:g} (step {i} of {n}, step size {h * scale:g})",
            f"use a smaller step, e.g. step={0.25 * h * scale:.3g}",
        ),
    )


def run_cooling(
    u, sweep, measure, sweeps: int, *, every: int, progress, label: str, kind: str, driving: int, advice: str
):
    """`monitored_run` of ``sweeps`` cooling sweeps (the record's time is the sweeps done): the one loop of the plain
    and the twisted cooling, stopping with an error that names the two sweeps and ``advice`` when the driving
    action (entry ``driving`` of a measured row) rises."""
    return monitored_run(
        u,
        sweep,
        measure,
        sweeps,
        every=every,
        progress=progress,
        label=label,
        time_of=lambda i: i,
        driving=driving,
        check=lambda prev, cur, t0, t1, i: _check_rise(prev, cur, kind, f"between sweeps {t0} and {i}", advice),
    )
