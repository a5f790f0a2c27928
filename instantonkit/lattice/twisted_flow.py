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

The Runge-Kutta stages are `smoothing`'s (`smoothing._rk3` takes the force as an argument); the colour
loop of a cooling sweep is written here around the imported kernels (`_maximise`, `_colours`), since
`smoothing`'s sweeps take their staples from `loops` and `operators`.
"""

from __future__ import annotations

import dataclasses
import functools
import math

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _progress
from ..core import _validate as _v
from .loops import _dag, _links, _mm, _sh, _traceless_antihermitian
from .smoothing import _check_periodic_shape, _colours, _maximise, _rk3
from .stability import RK3_STABILITY, _check_rise, flow_step_bound
from .twist import _twisted_planes, twist_corner, twist_tensor, twisted_clover_charge, twisted_wilson_action

__all__ = ["TwistedRecord", "twisted_flow", "twisted_cool"]


@dataclasses.dataclass(frozen=True, eq=False)
class TwistedRecord:
    """Observables along a twisted flow or cooling run, one entry per measurement; all (m,) float64.

    time: flow time t / a^2 (flow) or sweeps done (cooling); wilson_action: the twisted Wilson action
    (beta = 2N, `instantonkit.lattice.twist.twisted_wilson_action`); clover_charge: the twisted clover
    charge; kind: 'flow' or 'cooling'.
    """

    time: np.ndarray
    wilson_action: np.ndarray
    clover_charge: np.ndarray
    kind: str


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
    """Z(U) = -P_ah(U_mu Sigma~_mu) for the four directions; (L1..L4, 4, N, N)."""
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
    """One exact sequential sweep: direction by direction, checkerboard colour by colour."""
    for mu in range(4):

        def body(c, v, mu=mu):
            new = _maximise(v[..., mu, :, :], _twisted_staple(v, mu, z), hits)
            sel = (colours[mu] == c)[..., None, None]
            return v.at[..., mu, :, :].set(jnp.where(sel, new, v[..., mu, :, :]))

        u = jax.lax.fori_loop(0, 2, body, u)
    return u


def _prepare(links, twist, corner):
    u = _links(links)
    n = u.shape[-1]
    tensor = twist_tensor(twist, n)
    c = twist_corner(corner, u.shape[:4])
    return u, tensor, c, _factor_fields(tensor, u.shape[:4], n, c)


def _measure(u, tensor, c):
    v = np.asarray(u)
    return twisted_wilson_action(v, tensor, corner=c), twisted_clover_charge(v, tensor, corner=c)


def twisted_flow(links, twist, t: float, step: float = 0.01, *, corner=None, every: int = 1, progress=None):
    """Wilson flow dV/dt = Z(V) V of the twisted Wilson action, to flow time ``t`` (units a^2).

    Luescher's third-order Runge-Kutta scheme (as `instantonkit.lattice.smoothing.wilson_flow`) with the
    twisted staple (module docstring); with a zero twist it is the Wilson flow to rounding.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex, periodic.
        twist: the twist tensor (`instantonkit.lattice.twist.twist_tensor`).
        t: flow time >= 0 in lattice units; n = ceil(t / step) equal steps of t / n.
        step: nominal step > 0, the effective step below `flow_step_bound` (0.157).
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
    u, tensor, c, z = _prepare(links, twist, corner)
    steps = math.ceil(tt / h - 1e-9) if tt > 0 else 0
    link_count = float(np.prod(u.shape[:5]))
    _v.bounded_work("t", steps * link_count, f"t / step = {tt:g} / {h:g} = {steps:.3e} steps of {link_count:.0f} links")
    n = int(steps)
    h = tt / n if n else h
    bound = flow_step_bound(1.0)
    if n and h > bound:
        raise ValueError(
            f"step must be below the stability bound {bound:.4f} of the third-order Runge-Kutta Wilson flow "
            f"(h lambda_max <= {RK3_STABILITY:.4f}); found an effective step {h:g} (t = {tt:g}, step = {step!r})"
        )
    times, rows = [0.0], [_measure(u, tensor, c)]
    report = _progress.sink(progress, "twisted flow steps")
    for i in range(1, n + 1):
        u = _rk3_step(u, h, z)
        if report is not None:
            report(i, n)
        if i % every == 0 or i == n:
            times.append(i * h)
            rows.append(_measure(u, tensor, c))
            _check_rise(
                rows[-2][0],
                rows[-1][0],
                "twisted flow",
                f"between flow times {times[-2]:g} and {times[-1]:g} (step {i} of {n})",
                f"use a smaller step, e.g. step={0.25 * h:.3g}",
            )
    r = np.asarray(rows, dtype=float).reshape(-1, 2)
    return np.asarray(u), TwistedRecord(np.asarray(times, float), r[:, 0], r[:, 1], "flow")


def twisted_cool(links, twist, sweeps: int, *, corner=None, hits: int = 3, every: int = 1, progress=None):
    """Cooling of the twisted Wilson action: each link in turn maximises Re tr(U Sigma~) (module docstring).

    As `instantonkit.lattice.smoothing.cool` with eps = 1 (checkerboard sweeps, even extents; SU(N >= 3):
    ``hits`` Cabibbo-Marinari passes), with the twisted staple.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex, periodic, even extents.
        twist: the twist tensor; sweeps: >= 1; corner: as `twisted_flow`; hits: subgroup passes (N >= 3);
        every: measure every ``every`` sweeps; progress: as `twisted_flow`.
    Returns:
        (links complex128 numpy, `TwistedRecord` with time = sweeps done).
    Raises:
        ValueError / TypeError on a bad argument or shape, links that are not SU(N), or a rising action.
    """
    sweeps = _v.positive_int("sweeps", sweeps)
    hits = _v.positive_int("hits", hits)
    every = _v.positive_int("every", every)
    u, tensor, c, z = _prepare(links, twist, corner)
    link_count = float(np.prod(u.shape[:5]))
    _v.bounded_work("sweeps", hits * sweeps * link_count, f"{sweeps} sweeps of {link_count:.0f} links")
    _check_periodic_shape(u.shape[:4], False, "twisted cooling")
    colours = jnp.asarray(_colours(u.shape[:4], False))
    times, rows = [0], [_measure(u, tensor, c)]
    report = _progress.sink(progress, "twisted cooling sweeps")
    for i in range(1, sweeps + 1):
        u = _cool_sweep(u, colours, z, hits)
        if report is not None:
            report(i, sweeps)
        if i % every == 0 or i == sweeps:
            times.append(i)
            rows.append(_measure(u, tensor, c))
            _check_rise(
                rows[-2][0], rows[-1][0], "twisted cooling", f"between sweeps {times[-2]} and {i}", "check the links"
            )
    r = np.asarray(rows, dtype=float).reshape(-1, 2)
    return np.asarray(u), TwistedRecord(np.asarray(times, float), r[:, 0], r[:, 1], "cooling")
