"""Staples of m x n loops with a weight per (direction, plane) and a Z_N phase per loop: the cooling of a loop
operator's action on anisotropic lattices and on twisted tori, the weights and phases of every flow's force.

The flows take the same staples plane by plane (`instantonkit.lattice.forces`, checked against `weighted_staple`
in tests/test_forces.py); cooling updates one direction and colour at a time and takes them here.

Links are ``(L1, L2, L3, L4, 4, N, N)`` complex128, shifts periodic (``jnp.roll``).  The action is

    S = sum_i sum_x sum_{mu != nu} kappa_i[mu, nu] (N - Re tr(Z^{e x f}_{mu nu}(x) W^{e x f}_{mu nu}(x)))

over the ordered planes, both orientations (e, f) = (m_i, n_i), (n_i, m_i) of each term (a square once per
ordered plane), W the loop of `instantonkit.lattice.rectangles` with corner x, extent e along mu and f along nu,
and Z a centre element (1 off a twist; `phase_fields`).  The share of S holding the link U_mu(x) is
-2 Re tr(U_mu(x) Sigma_mu(x)) + const; this module returns Sigma_mu up to the direction's own factor: with the
*staple weights* omega_i[mu, nu] = kappa_i[mu, nu] * g_mu (g_mu > 0 any factor of the direction mu),

    Sigma_mu = sum_i sum_{nu != mu} omega_i[mu, nu] (1/2) [Sigma^{m x n}_{mu nu} + Sigma^{n x m}_{mu nu}]

(a square: omega Sigma^{m x m}), Sigma^{e x f}_{mu nu} the sum of the staples of U_mu(x) in every e x f loop
of the plane, each times its loop's phase.  (Cooling only needs Sigma up to a positive factor per direction;
the flow's force -P_ah(U Sigma) needs g_mu = a_mu^2 / V, `instantonkit.lattice.smoothing`.)

Phases.  The loop W^{e x f}_{mu nu}(y) below the long link D^e_mu(x) (corner y = x - f nu) enters S as
Re tr(Z(y) W(y)) = Re tr(conj(Z(y)) W(y)^dag), and W(y)^dag holds D^e_mu(x) itself, so its staple carries
conj(Z(x - f nu)); the loop above (corner x) holds D^e_mu(x) and carries Z(x).  With every phase 1 this is the
staple of `instantonkit.lattice.rectangles.staple` (tests/test_twisted_operators.py checks both reductions).
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np

from .loops import _long, _longs_along, _plane_staples, _sh, _spread
from .observables import ORDERED_PLANES


def orientations(pairs: tuple) -> tuple:
    """The loop shapes (e, f) (e along the first direction of an ordered plane) of a set of terms: (m, n) and
    (n, m) for each (m, n), sorted."""
    return tuple(sorted({(m, n) for m, n in pairs} | {(n, m) for m, n in pairs}))


def _long_staple(d, mu, e, f, nu, phase):
    """Staples of the long link D^e_mu(x) in its two e x f loops of plane (mu, nu) (up and down,
    `instantonkit.lattice.loops._plane_staples`), phased; phase: (L1..L4) complex Z^{e x f}_{mu nu} or None (all 1)."""
    up, down = _plane_staples(d, mu, e, f, nu)
    if phase is None:
        return up + down
    return phase[..., None, None] * up + jnp.conj(_sh(phase, nu, -f))[..., None, None] * down


def weighted_staple(u, mu: int, pairs: tuple, omega, phases=None):
    """Sigma_mu(x) of the module docstring; (L1..L4, N, N).

    Args:
        u: (L1..L4, 4, N, N) complex links.
        mu: the link direction (static).
        pairs: ((m, n), ...) the terms (static).
        omega: (len(pairs), 4, 4) float staple weights omega_i[mu, nu].
        phases: None (no twist) or {(e, f): (4, 4, L1..L4) complex} for every shape of `orientations`:
            Z^{e x f}_{mu nu}(x) (`phase_fields`).
    Traceable (the cooling sweeps call it inside their jit).
    """
    shapes = orientations(pairs)
    extents = sorted({e for s in shapes for e in s})
    d = {e: [_long(u, nu, e) for nu in range(4)] for e in extents}
    out = 0.0
    for i, (m, n) in enumerate(pairs):
        share = 1.0 if m == n else 0.5
        for e, f in [(m, n)] if m == n else [(m, n), (n, m)]:
            sd = 0.0
            for nu in range(4):
                if nu == mu:
                    continue
                ph = None if phases is None else phases[(e, f)][mu, nu]
                sd = sd + (share * omega[i, mu, nu]) * _long_staple(d, mu, e, f, nu, ph)
            out = out + _spread(_longs_along(u, d, mu, e), {e: sd}, mu)
    return out


def phase_fields(tensor, shape, n: int, corner, pairs: tuple) -> dict:
    """Z^{e x f}_{mu nu}(x) for every loop shape of ``pairs``: {(e, f): (4, 4, L1..L4) complex128 numpy}.

    The twisted plaquettes of `instantonkit.lattice.twist` are those of plane (mu, nu) at the corner sheet
    x_mu = c_mu, x_nu = c_nu, each times z_mu nu = exp(2 pi i n_mu nu / N).  A loop is the ordered product of
    the plaquettes it encloses, each conjugated by a path from the loop's base (the lattice Stokes theorem,
    common practice), and z is central, so the twisted loop is z^k W with k the number of corner plaquettes
    enclosed: the e x f loop with corner x encloses the plaquettes x + i mu + j nu (0 <= i < e, 0 <= j < f),
    hence the corner one exactly when (c_mu - x_mu) mod L_mu < e and (c_nu - x_nu) mod L_nu < f (once, as
    e <= L_mu and f <= L_nu).  The reversed plane gets z_nu mu = conj(z_mu nu) (the same loop traversed the
    other way).
    """
    idx = np.indices(tuple(shape))
    out = {}
    for e, f in orientations(pairs):
        z = np.ones((4, 4) + tuple(shape), dtype=np.complex128)
        for mu in range(4):
            for nu in range(4):
                if mu == nu or tensor[mu, nu] == 0:
                    continue
                inside = ((corner[mu] - idx[mu]) % shape[mu] < e) & ((corner[nu] - idx[nu]) % shape[nu] < f)
                z[mu, nu] = np.where(inside, np.exp(2j * np.pi * tensor[mu, nu] / n), 1.0)
        out[(e, f)] = z
    return out


def action_weights(terms: tuple, a) -> tuple:
    """(kappa (len(terms), 12), Wilson kappa (12,)) float64: c V / (m n a_mu a_nu)^2 per term and ordered plane
    (the area normalisation of `instantonkit.lattice.operators`; for the plaquette the anisotropic Wilson weights
    of `instantonkit.lattice.thermal`), a = (a1, a2, a3, a4)."""
    a = np.asarray(a, dtype=np.float64)
    vol = float(np.prod(a))
    per = np.array([vol / (a[mu] * a[nu]) ** 2 for mu, nu in ORDERED_PLANES])
    kappa = np.array([[float(c) / (m * n) ** 2 * w for w in per] for m, n, c in terms])
    return kappa, per


def staple_weights(terms: tuple, a) -> np.ndarray:
    """omega_i[mu, nu] = c_i / ((m_i n_i)^2 a_nu^2) of the flow in physical time: kappa = c V / (m n a_mu a_nu)^2
    (the action's area normalisation, `instantonkit.lattice.operators`) times g_mu = a_mu^2 / V (module
    docstring of `instantonkit.lattice.smoothing`); (len(terms), 4, 4) float64, a = (a1, a2, a3, a4).
    All spacings 1: c / (m n)^2, the weights of the isotropic flow."""
    a = np.asarray(a, dtype=np.float64)
    out = np.zeros((len(terms), 4, 4))
    for i, (m, n, c) in enumerate(terms):
        for mu in range(4):
            for nu in range(4):
                if mu != nu:
                    out[i, mu, nu] = float(c) / ((m * n) ** 2 * a[nu] ** 2)
    return out
