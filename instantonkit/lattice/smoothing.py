"""Smoothing of lattice link arrays: gradient flow, cooling, the 1x1 + 2x2 improved action and an
improved charge.

Links are arrays ``(L1, L2, L3, L4, 4, N, N)`` complex128 (`instantonkit.lattice.observables`); the
smoothing routines treat the lattice as periodic (n + L mu_hat = n).  Cooling sweeps and measurements are
vectorised jax computations over the lattice in float64 (jnp.roll for the shifts), for SU(2), SU(3) or any
SU(N), and so is one step of the Wilson flow; the force of an action with longer loops (or on an anisotropic
lattice) is computed plane by plane on worker threads (`instantonkit.lattice.forces`) between the compiled
stages of the integrator.

Normalisations (g = 1, beta = 2N, so that every action tends to the continuum action with
``int s = 8 pi^2`` for a unit instanton, conventions module):

* m x m loop action ``S_m = sum_x sum_{mu < nu} 2 Re tr(1 - P^{m x m}_{mu nu}(x))``; S_1 is the
  Wilson action of `instantonkit.lattice.observables.wilson_action` and S_2 -> 16 S_cont.
* improved action of Garcia Perez, Gonzalez-Arroyo, Snippe and van Baal (Nucl. Phys. B 413 (1994) 535,
  from memory; tests/test_smoothing.py checks its a^2 coefficient):
  ``S(eps) = sum_{x, mu, nu} [(4 - eps)/3 Tr(1 - P_1x1) + (eps - 1)/48 Tr(1 - P_2x2)]``,
  the sum over ordered pairs (mu, nu), i.e. ``S(eps) = (4 - eps)/3 S_1 + (eps - 1)/48 S_2``.  eps = 1 is
  the Wilson action; (4 - eps)/3 + 16 (eps - 1)/48 = 1 gives the continuum limit for every eps; the
  tree-level a^2 term of an instanton is ``S(eps) = 8 pi^2 [1 - (eps/5)(a/rho)^2 + O(a^4)]`` (same paper,
  from memory; checked by test_improved_action_a2_coefficient_is_minus_eps_over_5; it follows from
  the Wilson expansion 1 - (1/5)(a/rho)^2 and S_2(a) = 16 S_1(2a)).
* the force of an action ``S = sum_links -2 Re tr(U_mu(x) Sigma_mu(x)) + ...`` (Sigma the weighted sum of
  the staples that close every loop through the link) is ``Z = -P_ah(U Sigma)``, P_ah the traceless
  anti-Hermitian part, i.e. Z = -g0^2 d S with the Lie derivative of Luescher (JHEP 08 (2010) 071,
  section 2 for the Wilson action, from memory; our S equals his g0^2 S_w summed over oriented
  plaquettes).  tests/test_smoothing.py checks Z against finite differences of S.

Every front door checks its links first (`instantonkit.core._links.check_links`: finite, SU(N) within 1e-8).
A flow whose effective step exceeds `flow_step_bound` (the real stability interval of a third-order
Runge-Kutta scheme over the largest frequency of the linearised flow) is refused before it starts, and a
flow or cooling run whose driving action rises between two measurements stops with an error.

Cooling with the 2x2 loops uses 8 colours per direction (see `_colours`), so every sweep is an
exact sequential sweep; the gradient flow of S(eps) is offered beside it (`gradient_flow`).
"""

from __future__ import annotations

import dataclasses
import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core.conventions import CHARGE_DENSITY_FACTOR  # noqa: F401  (kept importable here)
from . import operators as _operators
from .forces import plane_force
from .loops import (  # re-exported: the measurements the flows and cooling drive
    _dag,
    _links,
    _measure,
    _mm,
    _total_staple,
    _traceless_antihermitian,
    improved_action,
    improved_charge,
    improved_charge_density,
    improved_coefficients,
    instanton_size,
    loop_action,
    loop_clover_charge,
)
from .observables import PLANES  # noqa: F401  (kept importable here)
from .operators import get_operator
from .rectangles import colour_period, colours, loop_sums, plane_loop_sums, staple
from .stability import (  # noqa: F401
    ACTION_RISE_TOL,
    RK3_STABILITY,
    _check_rise,
    flow_step_bound,
    flow_steps,
    max_flow_frequency,
    monitored_run,
    operator_flow_frequency,
    run_cooling,
    run_flow,
)
from .staples import action_weights, staple_weights, weighted_staple

__all__ = [
    "SmoothingRecord",
    "RK3_STABILITY",
    "max_flow_frequency",
    "flow_step_bound",
    "operator_flow_frequency",
    "gradient_flow",
    "wilson_flow",
    "cool",
    "loop_action",
    "improved_action",
    "improved_coefficients",
    "loop_clover_charge",
    "improved_charge",
    "improved_charge_density",
    "instanton_size",
]


# -- small matrix helpers (AoS layout: (..., N, N)) -----------------------------------------------------


def _expm_su(x):
    """exp(X) of traceless anti-Hermitian X; (..., N, N) -> SU(N).

    N = 2: X^2 = -det(X) 1 = -theta^2 1 (Cayley-Hamilton), so exp X = cos(theta) 1 + sin(theta)/theta X;
    otherwise exp X = V exp(-i w) V^dag from the eigen-decomposition (numpy/jax eigh) of the Hermitian
    i X.  Both are exact to rounding and unitary to rounding.
    """
    n = x.shape[-1]
    if n == 2:
        det = jnp.real(x[..., 0, 0] * x[..., 1, 1] - x[..., 0, 1] * x[..., 1, 0])
        th = jnp.sqrt(jnp.maximum(det, 0.0))
        return jnp.cos(th)[..., None, None] * jnp.eye(2) + jnp.sinc(th / jnp.pi)[..., None, None] * x
    h = 1j * x
    h = 0.5 * (h + _dag(h))
    w, v = jnp.linalg.eigh(h)
    return _mm(v * jnp.exp(-1j * w)[..., None, :], _dag(v))


# -- loops and staples ------------------------------------------------------------------------------------


def _force(u, c):
    """Z(U) = -P_ah(U_mu Sigma_mu) of the plaquette action c S_W, direction by direction on the whole lattice;
    (L1..L4, 4, N, N) (module docstring).  Traceable: the Wilson flow runs it inside one compiled step
    (`_rk3_step`), which XLA fuses with the integrator's stages; for the plaquettes alone that is faster than
    the plane-by-plane `plane_force` (16^4 SU(2): 205 against 259 ms a step; SU(3) equal), which every action with
    longer loops takes."""
    return jnp.stack(
        [-_traceless_antihermitian(_mm(u[..., mu, :, :], _total_staple(u, mu, c, 0.0, False))) for mu in range(4)],
        axis=4,
    )


def _rk3(u, h, force):
    """One step of Luescher's third-order Runge-Kutta integrator (JHEP 08 (2010) 071, eqs. (C.1)-(C.3),
    from memory; the third order is checked by test_runge_kutta_integrator_is_third_order):
    W1 = exp(Z0/4) W0, W2 = exp(8/9 Z1 - 17/36 Z0) W1, V(t + h) = exp(3/4 Z2 - 8/9 Z1 + 17/36 Z0) W2,
    Z_i = h Z(W_i).  ``force`` may be traceable (the step is then traceable) or not (`plane_force`, whose
    planes run on worker threads: the stages between the forces are compiled by `_advance`)."""
    z0 = force(u)
    w1 = _advance(u, (z0,), (0.25 * h,))
    z1 = force(w1)
    w2 = _advance(w1, (z0, z1), (-(17.0 / 36.0) * h, (8.0 / 9.0) * h))
    z2 = force(w2)
    return _advance(w2, (z0, z1, z2), ((17.0 / 36.0) * h, -(8.0 / 9.0) * h, 0.75 * h))


@jax.jit
def _advance(w, zs, cs):
    """exp(sum_k c_k Z_k) W, one stage of `_rk3`; zs: Z_k (L1..L4, 4, N, N), cs: the scalars c_k."""
    x = cs[0] * zs[0]
    for c, z in zip(cs[1:], zs[1:], strict=True):
        x = x + c * z
    return _mm(_expm_su(x), w)


@jax.jit
def _rk3_step(u, h, c):
    """`_rk3` with the force of the plaquette action c S_W, one compiled step (the Wilson flow: c = 1)."""
    return _rk3(u, h, lambda v: _force(v, c))


def _loop_step(u, h, force):
    """`_rk3` with a force that is not traceable, e.g. `plane_force` of a loop action."""
    return _rk3(jnp.asarray(u), h, force)


def _eps_terms(c1: float, c2: float, two: bool) -> tuple[tuple, np.ndarray]:
    """(pairs, omega) of S(eps) = c1 S_1 + c2 S_2 for `plane_force`: the 1x1 loops with weight c1 and, with the
    2x2 loops, those with c2 in every plane (the staple Sigma = c1 Sigma^(1) + c2 Sigma^(2))."""
    pairs = ((1, 1), (2, 2)) if two else ((1, 1),)
    w = np.array([c1, c2] if two else [c1], dtype=np.float64)
    return pairs, np.broadcast_to(w[:, None, None], (len(pairs), 4, 4))


def _operator_terms(op) -> tuple[tuple, np.ndarray, jnp.ndarray]:
    """(pairs, omega, w) of a loop operator's isotropic action: w_i = c_i / (m_i n_i)^2, the same in every plane."""
    w = np.array([float(c) / (m * k) ** 2 for m, k, c in op.terms])
    return op.pairs, np.broadcast_to(w[:, None, None], (len(w), 4, 4)), jnp.asarray(w)


@functools.partial(jax.jit, static_argnames=("pairs",))
def _measure_op(u, weights, pairs):
    """`_measure` with the driving action of a loop operator: sum_i w_i sum_{x, mu != nu} (N - Re tr W)."""
    row = _measure(u, 1.0, 0.0, False)
    s = jnp.sum(weights * loop_sums(u, pairs))
    return row.at[1].set(s)


@functools.partial(jax.jit, static_argnames=("pairs",))
def _measure_w(u, kappa, wilson_kappa, pairs):
    """The record row on an anisotropic lattice: [S_W, S_op, Q_clover, Q_imp, NaN], the actions with the area
    weights kappa (len(pairs), 12) and wilson_kappa (12,) per ordered plane (`instantonkit.lattice.staples.
    action_weights`); both charges are sums of V q with V q independent of the spacings (every term eps F F
    holds each direction once)."""
    row = _measure(u, 1.0, 0.0, False)
    s = jnp.sum(kappa * plane_loop_sums(u, pairs))
    sw = jnp.sum(wilson_kappa * plane_loop_sums(u, ((1, 1),))[0])
    return jnp.stack([sw, s, row[2], row[3], jnp.nan])


def _aniso_weights(op, a):
    """`instantonkit.lattice.staples.action_weights` of a loop operator as jax arrays."""
    kappa, per = action_weights(op.terms, a)
    return jnp.asarray(kappa), jnp.asarray(per)


# -- cooling -----------------------------------------------------------------------------------------------


def _su2_part(w):
    """The real-SU(2)-span part of a complex 2 x 2 block (..., 2, 2): [[a, b], [-b*, a*]] with
    a = (w00 + w11*)/2, b = (w01 - w10*)/2, so that Re tr(g w) = Re tr(g v) for every g in SU(2)."""
    a = 0.5 * (w[..., 0, 0] + jnp.conj(w[..., 1, 1]))
    b = 0.5 * (w[..., 0, 1] - jnp.conj(w[..., 1, 0]))
    return a, b


def _maximise(u, sigma, hits: int):
    """The SU(N) matrix maximising Re tr(U Sigma), by Cabibbo-Marinari SU(2)-subgroup steps (Cabibbo and
    Marinari, Phys. Lett. B 119 (1982) 387, from memory; no update raising the action is checked by
    test_su3_cooling_lowers_the_wilson_action_every_sweep_and_keeps_links_in_su3): for each subgroup (i, j)
    the 2 x 2 block w of W = U Sigma, its SU(2)-span part v = k s (k >= 0), and U <- G U with G = s^dag in
    rows/columns (i, j), which maximises Re tr(G W) exactly.  For N = 2 one step gives the exact maximiser
    Sigma^dag / sqrt(det) (the staple sum is in the real span of SU(2)); for N >= 3 ``hits`` passes over
    the N(N-1)/2 subgroups, each never lowering Re tr(U Sigma)."""
    n = u.shape[-1]
    pairs = [(i, j) for i in range(n) for j in range(i + 1, n)]
    for _ in range(1 if n == 2 else hits):
        for i, j in pairs:
            w = _mm(u, sigma)
            blk = w[..., [i, j], :][..., :, [i, j]]
            a, b = _su2_part(blk)
            k = jnp.sqrt(jnp.abs(a) ** 2 + jnp.abs(b) ** 2)
            safe = k > 0
            kk = jnp.where(safe, k, 1.0)
            a = jnp.where(safe, a / kk, 1.0)
            b = jnp.where(safe, b / kk, 0.0)
            # s = [[a, b], [-b*, a*]], g = s^dag = [[a*, -b], [b*, a]]
            ri, rj = u[..., i, :], u[..., j, :]
            new_i = jnp.conj(a)[..., None] * ri - b[..., None] * rj
            new_j = jnp.conj(b)[..., None] * ri + a[..., None] * rj
            u = u.at[..., i, :].set(new_i).at[..., j, :].set(new_j)
    return u


def _colours(shape, two: bool) -> np.ndarray:
    """Colour of every link, (4, L1, L2, L3, L4) int, such that links of one direction and colour share no
    loop of the action, so they can be updated at once (an exact sequential sweep).

    Wilson action: the parity of n1 + n2 + n3 + n4 (2 colours).  With 2 x 2 loops the links of direction
    mu in one loop differ by (+-1 in mu) and/or (+-1 or +-2 in one other direction), so the colour
    (n_mu mod 2, sum_{nu != mu} n_nu mod 4) separates them (8 colours; needs L_nu divisible by 4).
    """
    idx = np.indices(shape)
    out = np.empty((4,) + tuple(shape), dtype=np.int32)
    for mu in range(4):
        if not two:
            out[mu] = idx.sum(axis=0) % 2
        else:
            rest = (idx.sum(axis=0) - idx[mu]) % 4
            out[mu] = (idx[mu] % 2) * 4 + rest
    return out


def _operator_colours(shape, op, what: str):
    """(colours (4, L1..L4) int32 jax, their number) of `instantonkit.lattice.rectangles.colours` for a loop
    operator's cooling; ValueError naming the shape when an extent is not a multiple of the colouring's period."""
    period = colour_period(op.pairs)
    if any(s % period for s in shape):
        raise ValueError(
            f"{what} with the action {op.name!r} (loops of side up to {op.extent}) needs every lattice extent "
            f"divisible by {period}; found shape {tuple(shape)}"
        )
    arr, ncol = colours(shape, op.pairs)
    return jnp.asarray(arr), ncol


def _colour_sweep(u, colours, ncol: int, hits: int, staple_of):
    """One exact sequential sweep, direction by direction and colour by colour: the links of direction mu and
    colour c become the maximisers (`_maximise`) of Re tr(U Sigma) for their staple Sigma = staple_of(v, mu)
    of the current links v.  The one colour loop of every cooling run (plain and twisted); colours: (4, L1..L4)
    int in 0..ncol-1 (links of one direction and colour share no loop of the action).  Traceable."""
    for mu in range(4):

        def body(c, v, mu=mu):
            new = _maximise(v[..., mu, :, :], staple_of(v, mu), hits)
            sel = (colours[mu] == c)[..., None, None]
            return v.at[..., mu, :, :].set(jnp.where(sel, new, v[..., mu, :, :]))

        u = jax.lax.fori_loop(0, ncol, body, u)
    return u


@functools.partial(jax.jit, static_argnames=("pairs", "ncol", "hits"))
def _cool_sweep_op(u, cols, weights, pairs, ncol: int, hits: int):
    """A cooling sweep of a loop operator's action (colours of `instantonkit.lattice.rectangles.colours`)."""
    return _colour_sweep(u, cols, ncol, hits, lambda v, mu: staple(v, mu, pairs, weights))


@functools.partial(jax.jit, static_argnames=("pairs", "ncol", "hits"))
def _cool_sweep_w(u, cols, omega, pairs, ncol: int, hits: int):
    """A cooling sweep of a loop operator's action with a staple weight per (direction, plane) (anisotropic)."""
    return _colour_sweep(u, cols, ncol, hits, lambda v, mu: weighted_staple(v, mu, pairs, omega))


@functools.partial(jax.jit, static_argnames=("two", "ncol", "hits"))
def _cool_sweep(u, colours, c1, c2, two: bool, ncol: int, hits: int):
    """A cooling sweep of S(eps) (colours of `_colours`)."""
    return _colour_sweep(u, colours, ncol, hits, lambda v, mu: _total_staple(v, mu, c1, c2, two))


# -- measurements -------------------------------------------------------------------------------------------


# -- stability -----------------------------------------------------------------------------------------------


# -- front doors ---------------------------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True, eq=False)
class SmoothingRecord:
    """Observables along a flow or a cooling run, one entry per measurement; all (m,) float64.

    time: flow time t / a^2 (flow; in the units of ``t`` when a spacing is given) or sweeps done (cooling);
    wilson_action: S_W (beta = 2N; with the anisotropic plane weights of `instantonkit.lattice.thermal` on an
    anisotropic lattice); action: the driving action S(eps) (= S_W for eps = 1), or the loop operator's action
    when one drives the run; clover_charge: Q of the 1x1 clover; improved_charge: `improved_charge`; size:
    `instanton_size` (rho/a; NaN on an anisotropic lattice); eps: NaN when a loop operator drives the run;
    operator: its name ('' for S(eps)).
    """

    time: np.ndarray
    wilson_action: np.ndarray
    action: np.ndarray
    clover_charge: np.ndarray
    improved_charge: np.ndarray
    size: np.ndarray
    eps: float
    kind: str
    operator: str = ""

    @classmethod
    def _from(cls, times, rows, eps, kind, operator=""):
        r = np.asarray(rows, dtype=float).reshape(-1, 5)
        return cls(np.asarray(times, float), r[:, 0], r[:, 1], r[:, 2], r[:, 3], r[:, 4], float(eps), kind, operator)


def _driver(eps, action):
    """(operator or None, c1, c2, two) of ``eps`` / ``action`` (one of them; eps = 1 is the default)."""
    if action is None:
        c1, c2 = improved_coefficients(eps)
        return None, c1, c2, c2 != 0.0
    if isinstance(eps, bool) or not isinstance(eps, (int, float)) or float(eps) != 1.0:
        raise ValueError(f"give eps or action, not both: action={action!r} drives the run; found eps={eps!r}")
    op = get_operator(action)
    return op, 1.0, 0.0, False


def _check_periodic_shape(shape, two: bool, what: str):
    if two and any(s % 4 for s in shape):
        raise ValueError(f"{what} with 2x2 loops needs every lattice extent divisible by 4; found shape {tuple(shape)}")
    if any(s % 2 for s in shape):
        raise ValueError(f"{what} needs even lattice extents (checkerboard); found shape {tuple(shape)}")


def gradient_flow(
    links, t: float, step: float = 0.01, *, eps: float = 1.0, action=None, spacing=1.0, every: int = 1, progress=None
):
    """Gradient flow dV/dt = Z(V) V, Z = -g0^2 dS(eps) (module docstring), to flow time ``t``.

    Integrated with Luescher's third-order Runge-Kutta scheme (JHEP 08 (2010) 071, appendix C) with
    exact exponentials of traceless anti-Hermitian matrices, so the links stay in SU(N) to rounding.
    eps = 1 is the Wilson flow; another eps flows by the improved action S(eps) (2x2 loops included).
    The lattice is periodic.

    Anisotropic lattices (``spacing`` = (a1, a2, a3, a4)): the action is that of `instantonkit.lattice.operators`
    (each m x n loop of plane (mu, nu) weighted by c V / (m n a_mu a_nu)^2, so S -> the continuum action), and
    the flow of the continuum field, dB_mu/dt = -dS/dB_mu with links exp(a_mu B_mu), is on the links
    dV_mu/dt = -(a_mu^2 / V) (dS)_mu V: the variation exp(s X) U_mu(x) is a change s X / a_mu of B_mu over the
    link's cell of volume V, so dS = (V / a_mu) dS/dB_mu (derivation; the isotropic a = 1 case is Luescher's
    flow in units a^2).  The staple weights are then c / ((m n)^2 a_nu^2) (`instantonkit.lattice.staples`).

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        t: flow time >= 0 in physical units (a^2 for spacing 1); n = ceil(t / step) equal steps of t / n.
        step: nominal step > 0 in the units of t (0.01-0.05 a^2 is common practice for the Wilson flow); the
            effective step must lie below `flow_step_bound` (0.157 a^2 for the Wilson flow).
        eps: the action parameter of `improved_action`.
        action: instead of eps, a loop operator whose action drives the flow (a preset name such as
            'symanzik', 'iwasaki', 'dbw2', '5li', a `instantonkit.lattice.operators.LoopOperator` or
            {(m, n): c}); its step bound is `flow_step_bound(action=...)`.
        spacing: one a > 0 (t and step in units of length^2: the flow in lattice units runs to t / a^2; the
            same bits for one number and four equal ones) or four (a1, a2, a3, a4) (anisotropic, above;
            the record's ``size`` is then NaN).
        every: measure after every ``every`` steps (and at t = 0 and the end).
        progress: None (a line on stderr on a terminal), False, True or progress(done, total) per step.
    Returns:
        (links (same shape) complex128 numpy, `SmoothingRecord`; times in the units of t).
    Raises:
        ValueError / TypeError on a bad argument (spacing: not one or four finite numbers > 0), links that
        are not finite SU(N) matrices, a step beyond `flow_step_bound`, or an action that rises between two
        measurements (an unstable flow, naming the step, the actions before and after and a smaller step).
    """
    tt = _v.finite_float("t", t)
    if tt < 0:
        raise ValueError(f"t must be >= 0; found {t!r}")
    h = _v.positive_float("step", step)
    every = _v.positive_int("every", every)
    op, c1, c2, two = _driver(eps, action)
    a = _v.spacings("spacing", spacing)
    aniso = not np.all(a == a[0])
    scale = 1.0 if aniso else float(a[0]) ** 2  # isotropic: run in lattice units t / a^2
    tt, h = tt / scale, h / scale
    u = _links(links)
    n, h = flow_steps(tt, h, float(np.prod(u.shape[:5])))
    if aniso:
        flow_op = op if op is not None else _operators.epsilon_action(float(eps))
        bound = flow_step_bound(action=flow_op, spacing=a)
        lam = operator_flow_frequency(flow_op, spacing=a)
        what = f"the action {flow_op.name!r} at spacings {a.tolist()}"
        pairs, omega = flow_op.pairs, staple_weights(flow_op.terms, a)
        kappa, wk = _aniso_weights(flow_op, a)
        measure = lambda v: _measure_w(v, kappa, wk, flow_op.pairs)  # noqa: E731
    elif op is None:
        bound, lam, what = flow_step_bound(eps), max_flow_frequency(float(eps)), f"eps = {float(eps):g}"
        pairs, omega = _eps_terms(c1, c2, two)
        measure = lambda v: _measure(v, c1, c2, two)  # noqa: E731
    else:
        bound, lam, what = flow_step_bound(action=op), operator_flow_frequency(op), f"the action {op.name!r}"
        pairs, omega, w = _operator_terms(op)
        measure = lambda v: _measure_op(v, w, op.pairs)  # noqa: E731
    if not aniso and pairs == ((1, 1),):  # the plaquettes alone (isotropic): one fused compiled step, `_force`
        wc = float(omega[0, 0, 1])
        step_fn = lambda v: _rk3_step(v, h, wc)  # noqa: E731
    else:
        force = plane_force(u.shape[:4], pairs, omega)
        step_fn = lambda v: _loop_step(v, h, force)  # noqa: E731
    if n and h > bound:
        raise ValueError(
            f"step must be below the stability bound {_fmt(bound * scale)} of the third-order Runge-Kutta flow for "
            f"{what} (h lambda_max <= {RK3_STABILITY:.4f}, lambda_max = {lam / scale:.4g}: "
            f"flow_step_bound); found an effective step {h * scale:g} (t = {tt * scale:g}, step = {step!r}); use "
            f"step <= {0.25 * bound * scale:.3g} (0.01-0.05 a^2 is common practice)"
        )
    u, times, rows = run_flow(
        u, step_fn, measure, n, h, scale, every=every, progress=progress, label="flow steps", kind="flow", driving=1
    )
    return np.asarray(u), _record(times, rows, eps, "flow", op)


def _fmt(x: float) -> str:
    return f"{x:.4f}" if x >= 0.01 else f"{x:.4g}"


def _record(times, rows, eps, kind, op):
    name = "" if op is None else op.name
    return SmoothingRecord._from(times, [np.asarray(r) for r in rows], math.nan if op else eps, kind, name)


def wilson_flow(links, t: float, step: float = 0.01, *, every: int = 1, progress=None):
    """The Wilson flow (Luescher, JHEP 08 (2010) 071): `gradient_flow` with eps = 1."""
    return gradient_flow(links, t, step, eps=1.0, every=every, progress=progress)


def cool(
    links, sweeps: int, *, eps: float = 1.0, action=None, spacing=1.0, hits: int = 3, every: int = 1, progress=None
):
    """Plain cooling: every link in turn replaced by the SU(N) matrix that minimises the action with the
    other links fixed, i.e. maximises Re tr(U Sigma) for its staple sum Sigma (SU(2): Sigma^dag normalised;
    SU(N >= 3): ``hits`` Cabibbo-Marinari SU(2)-subgroup passes, see `_maximise`).

    Sweeps go direction by direction and colour by colour: links of one direction and one colour share no
    loop, so updating them at once is the same as updating them one after the other.  Wilson action
    (eps = 1): checkerboard parity of the site (2 colours, even extents).  eps != 1 (1x1 + 2x2 action
    S(eps), staples of the 2x2 loops included): 8 colours (n_mu mod 2, sum_{nu != mu} n_nu mod 4),
    extents divisible by 4.  The lattice is periodic.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex.
        sweeps: number of sweeps >= 1 (sweeps x links x hits at most 1e11 elementary updates).
        eps: the action parameter of `improved_action` (1: Wilson).
        action: instead of eps, a loop operator whose action is minimised (as in `gradient_flow`); its
            links are coloured by `instantonkit.lattice.rectangles.colours` (extents divisible by 4 for
            loops of side 2 or 3).
        spacing: one a > 0 (an isotropic lattice: cooling does not depend on a) or four (a1, a2, a3, a4):
            the action minimised is then the anisotropic one of `gradient_flow` (the action of eps as its
            1x1 + 2x2 loop set; links coloured as for ``action``; the record's ``size`` NaN).
        hits: subgroup passes per link for N >= 3 (ignored for SU(2), where one step is exact).
        every: measure after every ``every`` sweeps (and before the first and after the last).
        progress: None (a line on stderr on a terminal), False, True or progress(done, total) per sweep.
    Returns:
        (links complex128 numpy, `SmoothingRecord` with time = sweeps done).
    Raises:
        ValueError / TypeError on a bad argument or lattice shape, links that are not finite SU(N)
        matrices, or an action that rises between two measurements (naming the sweeps and actions).
    """
    sweeps = _v.positive_int("sweeps", sweeps)
    hits = _v.positive_int("hits", hits)
    every = _v.positive_int("every", every)
    u = _links(links)
    link_count = float(np.prod(u.shape[:5]))
    _v.bounded_work("sweeps", sweeps * link_count, f"{sweeps} sweeps of {link_count:.0f} links")
    _v.bounded_work("hits", hits * sweeps * link_count, f"{hits} hits in {sweeps} sweeps of {link_count:.0f} links")
    op, c1, c2, two = _driver(eps, action)
    a = _v.spacings("spacing", spacing)
    shape = u.shape[:4]
    if not np.all(a == a[0]):
        cool_op = op if op is not None else _operators.epsilon_action(float(eps))
        cols, ncol = _operator_colours(shape, cool_op, "cooling")
        omega = jnp.asarray(staple_weights(cool_op.terms, a))
        kappa, wk = _aniso_weights(cool_op, a)
        sweep = lambda v: _cool_sweep_w(v, cols, omega, cool_op.pairs, ncol, hits)  # noqa: E731
        measure = lambda v: _measure_w(v, kappa, wk, cool_op.pairs)  # noqa: E731
    elif op is None:
        _check_periodic_shape(shape, two, "cooling")
        cols = jnp.asarray(_colours(shape, two))
        ncol = 8 if two else 2
        sweep, measure = (lambda v: _cool_sweep(v, cols, c1, c2, two, ncol, hits)), (lambda v: _measure(v, c1, c2, two))
    else:
        cols, ncol = _operator_colours(shape, op, "cooling")
        w = jnp.asarray([float(c) / (m * k) ** 2 for m, k, c in op.terms])
        sweep = lambda v: _cool_sweep_op(v, cols, w, op.pairs, ncol, hits)  # noqa: E731
        measure = lambda v: _measure_op(v, w, op.pairs)  # noqa: E731
    u, times, rows = run_cooling(
        u,
        sweep,
        measure,
        sweeps,
        every=every,
        progress=progress,
        label="cooling sweeps",
        kind="cooling",
        driving=1,
        advice="each cooling update minimises the action with the other links fixed, so the links have left "
        "SU(N) (check them with instantonkit.check_links)",
    )
    return np.asarray(u), _record(times, rows, eps, "cooling", op)
