"""Wilson flow and cooling on a twisted torus: the staples carry the twist's centre factors.

The twisted Wilson action (`instantonkit.lattice.twist`) is S = sum_p 2 (N - Re tr(z_p U_p)) (beta = 2N).
The link U_mu(n) sits in the plaquette of plane (mu, nu) at n (first link) and in the one at n - nu_hat
(third link, conjugated), so its share is -2 Re tr(U_mu(n) Sigma~_mu(n)) + const with the twisted staple

    Sigma~_mu(n) = sum_{nu != mu} [ z_mu nu(n) U_nu(n+mu) U_mu(n+nu)^dag U_nu(n)^dag
                                   + conj(z_mu nu(n-nu)) U_nu(n+mu-nu)^dag U_mu(n-nu)^dag U_nu(n-nu) ],

z_nu mu = conj(z_mu nu) (the plaquette of plane (nu, mu) is that of (mu, nu) reversed).  With z = 1 it is
the Wilson staple of `instantonkit.lattice.loops`.  The flow and cooling are those of
`instantonkit.lattice.smoothing`, driven by this staple: the force Z = -P_ah(U Sigma~) (Luescher, JHEP 08
(2010) 071, from memory), the same third-order Runge-Kutta steps with `smoothing`'s exact SU(N)
exponential, the same stability bound, the same maximisation of Re tr(U Sigma~) for cooling (centre
factors keep the staple sum in the real span of SU(2) for N = 2) on the same checkerboard colours.

The Wilson flow (at spacing 1) is one compiled step of `smoothing`'s integrator (`smoothing._rk3`) with the
staple Sigma~ above; a loop operator's or an anisotropic flow is `smoothing._loop_step`, whose force is that of
`instantonkit.lattice.forces`, plane by plane, with each loop's centre factor.  A cooling sweep is `smoothing`'s
colour loop (`smoothing._colour_sweep`, on the colours of `smoothing._colours`) with the staple Sigma~ above.

Any loop operator's action (``action=``, `instantonkit.lattice.operators`) and anisotropic spacings
(``spacing=``) drive the same flow and cooling (cooling with the staples of `instantonkit.lattice.staples`):
every m x n loop that holds a twisted corner plaquette carries the twist's factor (`instantonkit.lattice.twisted_operators`
derives which), so its staples do, and the force in physical flow time has the staple weights
c / ((m n)^2 a_nu^2) of `instantonkit.lattice.smoothing.gradient_flow`.  The driving action is measured by
`instantonkit.lattice.twisted_operators.twisted_operator_action`.
"""

from __future__ import annotations

import dataclasses
import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from .forces import plane_force
from .loops import _dag, _links, _mm, _sh, _traceless_antihermitian
from .operators import get_operator
from .smoothing import _check_periodic_shape, _colour_sweep, _colours, _loop_step, _operator_colours, _rk3
from .stability import (
    RK3_STABILITY,
    flow_step_bound,
    flow_steps,
    operator_flow_frequency,
    run_cooling,
    run_flow,
)
from .staples import phase_fields, staple_weights, weighted_staple
from .twist import _twisted_planes, twist_corner, twist_tensor, twisted_clover_charge, twisted_wilson_action
from .twisted_operators import twisted_operator_action

__all__ = ["TwistedRecord", "twisted_flow", "twisted_cool"]


@dataclasses.dataclass(frozen=True, eq=False)
class TwistedRecord:
    """Observables along a twisted flow or cooling run, one entry per measurement; all (m,) float64.

    time: flow time (units a^2 for spacing 1; physical units with ``spacing``) or sweeps done (cooling);
    wilson_action: the twisted Wilson action (beta = 2N, `instantonkit.lattice.twist.twisted_wilson_action`;
    with the anisotropic plane weights of `instantonkit.lattice.thermal` on an anisotropic lattice);
    clover_charge: the twisted clover charge; kind: 'flow' or 'cooling'; action: the driving action (the
    Wilson action, or the loop operator's: `instantonkit.lattice.twisted_operators.twisted_operator_action`);
    operator: its name ('' for the Wilson action of the default path).
    """

    time: np.ndarray
    wilson_action: np.ndarray
    clover_charge: np.ndarray
    kind: str
    action: np.ndarray | None = None
    operator: str = ""


def _factor_fields(tensor, shape, n, corner):
    """z_mu nu(n) for ordered pairs as a (4, 4, L1..L4) complex128 array (1 off the corner, z_nu mu = conj z_mu nu)."""
    z = np.ones((4, 4) + tuple(shape), dtype=np.complex128)
    for _, mu, nu, f in _twisted_planes(tensor, n):
        sl: list[int | slice] = [slice(None)] * 4
        sl[mu], sl[nu] = corner[mu], corner[nu]
        z[(mu, nu, *sl)] = f
        z[(nu, mu, *sl)] = np.conj(f)
    return jnp.asarray(z)


def _twisted_staple(u, mu: int, z):
    """Sigma~_mu(n) (module docstring); u: (L1..L4, 4, N, N), z: (4, 4, L1..L4) -> (L1..L4, N, N)."""
    umu = u[..., mu, :, :]
    out = 0.0
    for nu in range(4):
        if nu == mu:
            continue
        unu = u[..., nu, :, :]
        up = _mm(_sh(unu, mu, 1), _mm(_dag(_sh(umu, nu, 1)), _dag(unu)))
        dn_nu = _sh(unu, nu, -1)  # U_nu(n - nu)
        down = _mm(_dag(_sh(dn_nu, mu, 1)), _mm(_dag(_sh(umu, nu, -1)), dn_nu))
        zup = z[mu, nu][..., None, None]
        zdown = jnp.conj(_sh(z[mu, nu], nu, -1))[..., None, None]
        out = out + zup * up + zdown * down
    return out


@jax.jit
def _force(u, z):
    """Z(U) = -P_ah(U_mu Sigma~_mu) for the four directions; (L1..L4, 4, N, N) (the twisted Wilson action: one
    fused compiled step, as `instantonkit.lattice.smoothing._force` for the untwisted one)."""
    return jnp.stack(
        [-_traceless_antihermitian(_mm(u[..., mu, :, :], _twisted_staple(u, mu, z))) for mu in range(4)], axis=4
    )


@jax.jit
def _rk3_step(u, h, z):
    """Luescher's third-order Runge-Kutta step with the twisted force: `instantonkit.lattice.smoothing`'s
    integrator (`smoothing._rk3`, the one written copy of the three stages) driven by `_force`."""
    return _rk3(u, h, lambda v: _force(v, z))


@functools.partial(jax.jit, static_argnames=("hits",))
def _cool_sweep(u, colours, z, hits: int):
    """One exact sequential sweep: direction by direction, checkerboard colour by colour (`smoothing._colour_sweep`)."""
    return _colour_sweep(u, colours, 2, hits, lambda v, mu: _twisted_staple(v, mu, z))


@functools.partial(jax.jit, static_argnames=("pairs", "ncol", "hits"))
def _cool_sweep_op(u, cols, omega, phases, pairs, ncol: int, hits: int):
    """A cooling sweep of a loop operator's twisted action (colours of `instantonkit.lattice.rectangles.colours`)."""
    return _colour_sweep(u, cols, ncol, hits, lambda v, mu: weighted_staple(v, mu, pairs, omega, phases))


class _Driver:
    """What a twisted run with ``action=`` or anisotropic ``spacing=`` needs: the operator, weights, phases."""

    def __init__(self, u, tensor, c, action, a):
        self.op = get_operator("wilson" if action is None else action)
        self.a = a
        self.tensor, self.corner = tensor, c
        n = u.shape[-1]
        self.omega = jnp.asarray(staple_weights(self.op.terms, a))
        ph = phase_fields(tensor, u.shape[:4], n, c, self.op.pairs)
        self.phases = {k: jnp.asarray(v) for k, v in ph.items()}

    def measure(self, u):
        """(twisted Wilson action, twisted clover charge, driving action)."""
        v = np.asarray(u)
        sw = twisted_operator_action(v, self.tensor, "wilson", spacing=self.a, corner=self.corner)
        q = twisted_clover_charge(v, self.tensor, corner=self.corner)
        s = (
            sw
            if self.op.name == "wilson"
            else twisted_operator_action(v, self.tensor, self.op, spacing=self.a, corner=self.corner)
        )
        return sw, q, s


def _record(times, rows, kind, op_name):
    r = np.asarray(rows, dtype=float).reshape(-1, 3)
    return TwistedRecord(np.asarray(times, float), r[:, 0], r[:, 1], kind, r[:, 2], op_name)


def _prepare(links, twist, corner):
    u = _links(links)
    n = u.shape[-1]
    tensor = twist_tensor(twist, n)
    c = twist_corner(corner, u.shape[:4])
    return u, tensor, c, _factor_fields(tensor, u.shape[:4], n, c)


def _measure(u, tensor, c):
    v = np.asarray(u)
    return twisted_wilson_action(v, tensor, corner=c), twisted_clover_charge(v, tensor, corner=c)


def twisted_flow(
    links,
    twist,
    t: float,
    step: float = 0.01,
    *,
    action=None,
    spacing=1.0,
    corner=None,
    every: int = 1,
    progress=None,
):
    """Gradient flow dV/dt = Z(V) V of the twisted Wilson action (or of a loop operator's twisted action), to
    flow time ``t``.

    Luescher's third-order Runge-Kutta scheme (as `instantonkit.lattice.smoothing.wilson_flow`) with the
    twisted staple (module docstring); with a zero twist it is the Wilson flow to rounding.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex, periodic.
        twist: the twist tensor (`instantonkit.lattice.twist.twist_tensor`).
        t: flow time >= 0 (units a^2 for spacing 1, else physical units); n = ceil(t / step) equal steps.
        step: nominal step > 0, the effective step below `flow_step_bound` (0.157 a^2 for the Wilson action;
            ``flow_step_bound(action=..., spacing=...)`` for another).
        action: None (the twisted Wilson action) or a loop operator (a preset name such as 'symanzik' or
            '5li', a `instantonkit.lattice.operators.LoopOperator` or {(m, n): c}) whose twisted action
            (`instantonkit.lattice.twisted_operators.twisted_operator_action`) drives the flow.
        spacing: one a > 0 or four (a1, a2, a3, a4): the flow of `instantonkit.lattice.smoothing.gradient_flow`
            in physical time, with the twist.
        corner: the site of the twisted plaquettes (default the last site).
        every: measure after every ``every`` steps (and at t = 0 and the end).
        progress: None (a line on stderr on a terminal), False, True or progress(done, total) per step.
    Returns:
        (links complex128 numpy, `TwistedRecord`).
    Raises:
        ValueError / TypeError on a bad argument, links that are not SU(N), a step beyond the bound, or a
        twisted action that rises between two measurements.
    """
    tt = _v.finite_float("t", t)
    if tt < 0:
        raise ValueError(f"t must be >= 0; found {t!r}")
    h = _v.positive_float("step", step)
    every = _v.positive_int("every", every)
    a = _v.spacings("spacing", spacing)
    u, tensor, c, z = _prepare(links, twist, corner)
    generic = action is not None or not np.all(a == a[0])
    scale = 1.0 if generic else float(a[0]) ** 2  # the Wilson path runs in lattice units t / a^2
    tt, h = tt / scale, h / scale
    n, h = flow_steps(tt, h, float(np.prod(u.shape[:5])))
    if generic:
        drv = _Driver(u, tensor, c, action, a)
        bound = flow_step_bound(action=drv.op, spacing=a)
        what = f"the action {drv.op.name!r} (lambda_max = {operator_flow_frequency(drv.op, spacing=a):.4g})"
        if drv.op.pairs == ((1, 1),) and np.all(np.asarray(drv.omega) == 1.0):  # the plaquettes at spacing 1
            step_fn = lambda v: _rk3_step(v, h, z)  # noqa: E731
        else:
            force = plane_force(u.shape[:4], drv.op.pairs, drv.omega, drv.phases)
            step_fn = lambda v: _loop_step(v, h, force)  # noqa: E731
        measure, name = drv.measure, drv.op.name
    else:
        bound, what, name = flow_step_bound(1.0), "the Wilson action", ""
        step_fn = lambda v: _rk3_step(v, h, z)  # noqa: E731

        def measure(v):
            sw, q = _measure(v, tensor, c)
            return sw, q, sw

    if n and h > bound:
        raise ValueError(
            f"step must be below the stability bound {bound * scale:.4g} of the third-order Runge-Kutta flow of "
            f"{what} (h lambda_max <= {RK3_STABILITY:.4f}); found an effective step {h * scale:g} "
            f"(t = {tt * scale:g}, step = {step!r})"
        )
    u, times, rows = run_flow(
        u,
        step_fn,
        measure,
        n,
        h,
        scale,
        every=every,
        progress=progress,
        label="twisted flow steps",
        kind="twisted flow",
        driving=2,
    )
    return np.asarray(u), _record(times, rows, "flow", name)


def twisted_cool(
    links, twist, sweeps: int, *, action=None, spacing=1.0, corner=None, hits: int = 3, every: int = 1, progress=None
):
    """Cooling of the twisted Wilson action (or of a loop operator's twisted action): each link in turn maximises
    Re tr(U Sigma~) (module docstring).

    As `instantonkit.lattice.smoothing.cool` (checkerboard sweeps, even extents; SU(N >= 3): ``hits``
    Cabibbo-Marinari passes), with the twisted staple.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex, periodic, even extents.
        twist: the twist tensor; sweeps: >= 1; corner: as `twisted_flow`; hits: subgroup passes (N >= 3);
        action: None (Wilson) or a loop operator, as `twisted_flow` (links coloured by
            `instantonkit.lattice.rectangles.colours`: extents divisible by 4 for loops of side 2 or 3);
        spacing: one a > 0 (cooling does not depend on it) or four (a1, a2, a3, a4) (the anisotropic action);
        every: measure every ``every`` sweeps; progress: as `twisted_flow`.
    Returns:
        (links complex128 numpy, `TwistedRecord` with time = sweeps done).
    Raises:
        ValueError / TypeError on a bad argument or shape, links that are not SU(N), or a rising action.
    """
    sweeps = _v.positive_int("sweeps", sweeps)
    hits = _v.positive_int("hits", hits)
    every = _v.positive_int("every", every)
    a = _v.spacings("spacing", spacing)
    u, tensor, c, z = _prepare(links, twist, corner)
    link_count = float(np.prod(u.shape[:5]))
    _v.bounded_work("sweeps", hits * sweeps * link_count, f"{sweeps} sweeps of {link_count:.0f} links")
    if action is not None or not np.all(a == a[0]):
        drv = _Driver(u, tensor, c, action, a)
        cols, ncol = _operator_colours(u.shape[:4], drv.op, "twisted cooling")
        sweep = lambda v: _cool_sweep_op(v, cols, drv.omega, drv.phases, drv.op.pairs, ncol, hits)  # noqa: E731
        measure, name = drv.measure, drv.op.name
    else:
        _check_periodic_shape(u.shape[:4], False, "twisted cooling")
        colours_w = jnp.asarray(_colours(u.shape[:4], False))
        sweep = lambda v: _cool_sweep(v, colours_w, z, hits)  # noqa: E731
        name = ""

        def measure(v):
            sw, q = _measure(v, tensor, c)
            return sw, q, sw

    u, times, rows = run_cooling(
        u,
        sweep,
        measure,
        sweeps,
        every=every,
        progress=progress,
        label="twisted cooling sweeps",
        kind="twisted cooling",
        driving=2,
        advice="check the links",
    )
    return np.asarray(u), _record(times, rows, "cooling", name)
