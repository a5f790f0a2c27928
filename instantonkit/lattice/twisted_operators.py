"""Loop operators on a twisted torus: the action, field strength and charge of any m x n loop set with the
twist's Z_N factors.

Which loops carry the twist.  `instantonkit.lattice.twist` puts the factor z_mu nu = exp(2 pi i n_mu nu / N) on
the plaquettes of plane (mu, nu) at the corner sheet x_mu = c_mu, x_nu = c_nu (every x_rho, x_sigma).  An
e x f loop of plane (mu, nu) is the ordered product of the e f plaquettes it encloses, each conjugated by a path
from the loop's base (the lattice Stokes theorem, common practice); z is central, so the twisted loop is
z^k W, k the number of twisted plaquettes enclosed.  The loop with corner x and extent e along mu, f along nu
encloses the plaquettes x + i mu + j nu (0 <= i < e, 0 <= j < f), hence the corner one exactly when

    (c_mu - x_mu) mod L_mu < e   and   (c_nu - x_nu) mod L_nu < f,

and at most once (the lattice refuses loops longer than an extent).  The same loop traversed the other way
(the ordered plane (nu, mu), and the conjugate leaves) gets conj(z) = z_nu mu; every clover leaf of plane
(mu, nu) is oriented mu -> nu and gets z when its rectangle holds the corner.  Since a singular gauge
transformation moves the twisted plaquettes but leaves every twisted plaquette unchanged
(`instantonkit.lattice.twist`), it leaves every twisted loop unchanged too.  With z = 1 the operators are those of
`instantonkit.lattice.operators`.

How it is computed.  The untwisted operator runs over the whole lattice (`instantonkit.lattice.operators`);
only what touches a twisted corner is redone, on a block of links around it:

* the action: S_tw = S + sum over the loops that hold a corner of kappa (Re tr W - Re tr(z W)), kappa =
  c V / (m n a_mu a_nu)^2 the loop's weight (both orientations of each term, a square twice, as in S);
* the field strength and charge density: at the sites within the longest side E of a twisted corner sheet
  (2E values of x_mu and of x_nu) every term's clover is rebuilt from its four leaves, each with its factor,
  on a block with E more sites on either side, and F (and q from it) replace the untwisted values there.

A zero twist returns the untwisted operators themselves (the same bits).  Links ``(L1, L2, L3, L4, 4, N, N)``
complex128 on the torus (a twist needs it; no open boundaries).  Anisotropic spacings are taken as by
`instantonkit.lattice.operators` (the twist factors do not depend on them).
"""

from __future__ import annotations

import numpy as np

from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from .observables import PLANES
from .operators import (
    get_operator,
    operator_action,
    operator_charge,
    operator_charge_density,
    operator_field_strength,
)
from .twist import _twisted_planes, twist_corner, twist_tensor

__all__ = [
    "twisted_operator_action",
    "twisted_operator_field_strength",
    "twisted_operator_charge_density",
    "twisted_operator_charge",
]


def _setup(links, twist, operator, spacing, corner):
    u = _check_links(links)
    n = u.shape[-1]
    tensor = twist_tensor(twist, n)
    c = twist_corner(corner, u.shape[:4])
    op = get_operator(operator)
    a = _v.spacings("spacing", spacing)
    if op.extent > min(u.shape[:4]):
        raise ValueError(
            f"operator {op.name!r} has loops of side {op.extent}, longer than the smallest lattice extent "
            f"{min(u.shape[:4])} (shape {tuple(u.shape[:4])})"
        )
    return u, tensor, c, n, op, a


# -- numpy helpers on blocks of links ------------------------------------------------------------------------


def _dag(m):
    return np.conj(np.swapaxes(m, -1, -2))


def _sh(x, d, s):
    """x(n + s d_hat) within a block (periodic roll; callers keep only sites whose reach stays inside)."""
    return np.roll(x, -s, axis=d) if s else x


def _mm(x, y):
    """Stacked matrix products (..., N, N) (einsum: faster than matmul on views of small matrices)."""
    return np.einsum("...ij,...jk->...ik", x, y)


def _long(b, d, e, cache=None):
    """D^e_d(x) = U_d(x) U_d(x + d) ... U_d(x + (e - 1) d) on a block; (b1..b4, N, N) (memoised in ``cache``)."""
    if cache is not None and (d, e) in cache:
        return cache[(d, e)]
    one = b[..., d, :, :]
    out = one
    for k in range(1, e):
        out = _mm(out, _sh(one, d, k))
    if cache is not None:
        cache[(d, e)] = out
    return out


def _block(u, axes):
    """Links of the sites axes[0] x ... x axes[3] (index arrays into the lattice, repeats allowed)."""
    return np.asarray(u[np.ix_(*axes)])


def _ah(m, n):
    """P_ah(M) = (M - M^dag)/2 - tr(M - M^dag)/(2N) (as `instantonkit.lattice.loops`); (..., N, N)."""
    x = 0.5 * (m - _dag(m))
    return x - (np.trace(x, axis1=-2, axis2=-1) / n)[..., None, None] * np.eye(n)


# -- the action ------------------------------------------------------------------------------------------


def _corner_loop_traces(u, mu, nu, e, f, c):
    """tr W^{e x f}_{mu nu}(x) (complex) at the corners whose loop holds the corner plaquette of (mu, nu):
    x_mu = c_mu - e + 1 .. c_mu, x_nu = c_nu - f + 1 .. c_nu (mod L), all x_rho, x_sigma; (e, f, La, Lb) ordered
    as the lattice axes.  Computed on a block 2e x 2f sites wide in (mu, nu) (its first e x f corners are exact)."""
    shape = u.shape[:4]
    axes = [np.arange(s) for s in shape]
    axes[mu] = (c[mu] - e + 1 + np.arange(2 * e)) % shape[mu]
    axes[nu] = (c[nu] - f + 1 + np.arange(2 * f)) % shape[nu]
    b = _block(u, axes)
    dm, dn = _long(b, mu, e), _long(b, nu, f)
    left = _mm(dm, _sh(dn, mu, e))
    right = _mm(dn, _sh(dm, nu, f))
    tr = np.sum(left * np.conj(right), axis=(-2, -1))  # tr(left right^dag)
    keep: list = [slice(None)] * 4
    keep[mu], keep[nu] = slice(0, e), slice(0, f)
    return tr[tuple(keep)]


def twisted_operator_action(links, twist, operator="wilson", *, spacing=1.0, corner=None) -> float:
    """The action of a loop operator on a twisted torus: every loop that holds a twisted corner plaquette times
    its factor (module docstring); beta = 2N, so it tends to the continuum action.

    ``operator='wilson'`` is `instantonkit.lattice.twist.twisted_wilson_action`; a zero twist gives
    `instantonkit.lattice.operators.operator_action` bit for bit.

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex links of a periodic lattice.
        twist: the twist tensor (`instantonkit.lattice.twist.twist_tensor`: (4, 4) integers or {(mu, nu): n}).
        operator: a preset name (`instantonkit.lattice.operators.OPERATOR_PRESETS`), a `LoopOperator` or
            {(m, n): c}.
        spacing: one a > 0 or four (a1, a2, a3, a4) (a loop of plane (mu, nu) spans m a_mu x n a_nu).
        corner: the site of the twisted plaquettes (default the last site).
    Returns:
        float.
    Raises:
        ValueError / TypeError: bad links, twist, operator, spacing or corner; loops longer than the lattice.
    """
    u, tensor, c, n, op, a = _setup(links, twist, operator, spacing, corner)
    planes = _twisted_planes(tensor, n)
    base = operator_action(u, op, spacing=spacing)
    if not planes:
        return base
    vol = float(np.prod(a))
    total = 0.0
    for _, mu, nu, z in planes:
        for m, k, coef in op.terms:
            w = float(coef) * vol / (m * k * a[mu] * a[nu]) ** 2
            for e, f in ((m, k), (k, m)):  # the ordered planes (mu, nu) and (nu, mu); a square twice, as in S
                tr = _corner_loop_traces(u, mu, nu, e, f, c)
                total += w * float(np.sum(np.real(tr) - np.real(z * tr)))
    return base + total


# -- field strength and charge ---------------------------------------------------------------------------


def _leaves(b, rho, sig, e, f, cache):
    """The four e x f leaves at x in plane (rho, sig), oriented rho -> sig, with the offsets of their rectangles:
    [((s_rho, s_sig), leaf)], the rectangle [x_rho + s_rho, + e) x [x_sig + s_sig, + f) (as
    `instantonkit.lattice.rectangles`' clover leaves)."""
    dmu, dnu = _long(b, rho, e, cache), _long(b, sig, f, cache)
    dmu_m = _sh(dmu, rho, -e)  # D_rho(x - e rho)
    dnu_m = _sh(dnu, sig, -f)  # D_sig(x - f sig)

    def path(w, x, y, z):
        return _mm(_mm(w, x), _mm(y, z))

    return [
        ((0, 0), path(dmu, _sh(dnu, rho, e), _dag(_sh(dmu, sig, f)), _dag(dnu))),
        ((-e, 0), path(dnu, _dag(_sh(dmu_m, sig, f)), _dag(_sh(dnu, rho, -e)), dmu_m)),
        ((-e, -f), path(_dag(dmu_m), _dag(_sh(dnu_m, rho, -e)), _sh(dmu_m, sig, -f), dnu_m)),
        ((0, -f), path(_dag(dnu_m), _sh(dmu, sig, -f), _sh(dnu_m, rho, e), _dag(dmu))),
    ]


def _block_fields(u, axes, tensor, c, n, op, a):
    """Every term's twisted clover F^{(m, n)} (physical units) on a block of sites; (terms, 6, b1..b4, N, N)."""
    shape = u.shape[:4]
    b = _block(u, axes)
    coords = np.meshgrid(*axes, indexing="ij", sparse=True)
    cache: dict = {}
    out = []
    for m, k, _ in op.terms:
        planes = []
        for rho, sig in PLANES:
            z = np.exp(2j * np.pi * tensor[rho, sig] / n)
            part = 0.0
            for e, f in [(m, k)] if m == k else [(m, k), (k, m)]:
                q = 0.0
                for (sr, ss), leaf in _leaves(b, rho, sig, e, f, cache):
                    if tensor[rho, sig]:
                        held = ((c[rho] - coords[rho] - sr) % shape[rho] < e) & (
                            (c[sig] - coords[sig] - ss) % shape[sig] < f
                        )
                        leaf = np.where(held[..., None, None], z * leaf, leaf)
                    q = q + leaf
                part = part + _ah(q, n)
            scale = 4.0 * m * k * a[rho] * a[sig] * (1 if m == k else 2)
            planes.append(part / scale)
        out.append(np.stack(planes))
    return np.stack(out)


def _charge(f):
    """q = 8 c (tr F12 F34 - tr F13 F24 + tr F14 F23), c = conventions.CHARGE_DENSITY_FACTOR; f: (6, ..., N, N)."""

    def tr(x, y):
        return np.real(np.einsum("...ij,...ji->...", x, y))

    return 8.0 * CHARGE_DENSITY_FACTOR * (tr(f[0], f[5]) - tr(f[1], f[4]) + tr(f[2], f[3]))


def _bands(u, tensor, c, n, op, a):
    """Per twisted plane: (band index arrays (4), total F (6, band, N, N), q (band)) at the sites near its corner."""
    shape = u.shape[:4]
    big = op.extent
    coeffs = op.coefficients
    out = []
    for _, mu, nu, _ in _twisted_planes(tensor, n):
        axes = [np.arange(s) for s in shape]
        band = [np.arange(s) for s in shape]
        keep: list = [slice(None)] * 4
        for d in (mu, nu):
            width = min(2 * big, shape[d])  # x_d = c_d - E + 1 .. c_d + E, or every x_d on a short axis
            start = c[d] - big + 1
            band[d] = (start + np.arange(width)) % shape[d]
            axes[d] = (start - big + np.arange(width + 2 * big)) % shape[d]
            keep[d] = slice(big, big + width)
        f = _block_fields(u, axes, tensor, c, n, op, a)[(slice(None), slice(None), *keep)]
        total = np.tensordot(coeffs, f, axes=1)
        if op.combine == "field":
            q = _charge(total)
        else:
            q = sum(coeffs[i] * _charge(f[i]) for i in range(len(coeffs)))
        out.append((band, total, q))
    return out


def twisted_operator_field_strength(links, twist, operator="clover", *, spacing=1.0, corner=None) -> np.ndarray:
    """F_mu nu = sum_i c_i F^{(m_i, n_i)}_mu nu with twisted leaves (physical units); (L1, L2, L3, L4, 4, 4, N, N) complex128.

    ``operator='clover'`` is `instantonkit.lattice.twist.twisted_clover_field_strength`; a zero twist gives
    `instantonkit.lattice.operators.operator_field_strength` bit for bit.  Arguments as `twisted_operator_action`.
    """
    u, tensor, c, n, op, a = _setup(links, twist, operator, spacing, corner)
    out = operator_field_strength(u, op, spacing=spacing)
    for band, total, _ in _bands(u, tensor, c, n, op, a):
        ix = np.ix_(*band)
        for p, (mu, nu) in enumerate(PLANES):
            out[ix + (mu, nu)] = total[p]
            out[ix + (nu, mu)] = -total[p]
    return out


def twisted_operator_charge_density(links, twist, operator="clover", *, spacing=1.0, corner=None) -> np.ndarray:
    """The charge density q of a loop operator with twisted leaves (physical units, sum of V q = Q); (L1, L2, L3, L4) float64.

    ``operator.combine`` says how q is formed (`instantonkit.lattice.operators`); a zero twist gives
    `instantonkit.lattice.operators.operator_charge_density` bit for bit.  Arguments as `twisted_operator_action`.
    """
    u, tensor, c, n, op, a = _setup(links, twist, operator, spacing, corner)
    q = operator_charge_density(u, op, spacing=spacing)
    for band, _, qb in _bands(u, tensor, c, n, op, a):
        q[np.ix_(*band)] = qb
    return q


def twisted_operator_charge(links, twist, operator="clover", *, spacing=1.0, corner=None) -> float:
    """Q = sum_x V q(x) of `twisted_operator_charge_density` (arguments as `twisted_operator_action`)."""
    u, tensor, c, n, op, a = _setup(links, twist, operator, spacing, corner)
    if not _twisted_planes(tensor, n):
        return operator_charge(u, op, spacing=spacing)
    q = operator_charge_density(u, op, spacing=spacing)
    for band, _, qb in _bands(u, tensor, c, n, op, a):
        q[np.ix_(*band)] = qb
    return float(np.prod(a)) * float(np.sum(q))
