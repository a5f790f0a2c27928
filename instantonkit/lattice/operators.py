"""Lattice operators made of m x n Wilson loops with coefficients: actions, field strengths, charges.

One mechanism for every improved operator in use.  A `LoopOperator` is a set of terms (m, n, c): the
m x n rectangles (both orientations; a square once) with coefficient c, normalised so that
``sum_i c_i = 1`` (every term tends to the continuum with weight c_i).  On a lattice with spacings
a = (a1, a2, a3, a4) (cell volume V = a1 a2 a3 a4):

* action (beta = 2N, g = 1, so that it tends to the continuum Yang-Mills action, conventions module)

      S = sum_i c_i sum_x sum_{mu != nu} V / (m_i n_i a_mu a_nu)^2  Re tr(1 - W^{m_i x n_i}_{mu nu}(x)),

  the sum over ordered planes with extent m along mu (`instantonkit.lattice.rectangles`); the Wilson
  action is {(1, 1): 1}, the 1x1 + 2x2 action S(eps) of `instantonkit.lattice.loops` is
  {(1, 1): (4 - eps)/3, (2, 2): (eps - 1)/3}, a Luescher-Weisz action with plaquette and rectangle
  coefficients (c0, c1), c0 + 8 c1 = 1, is {(1, 1): c0, (1, 2): 8 c1} (Luescher and Weisz,
  Commun. Math. Phys. 97 (1985) 59, from memory);
* field strength F_mu nu = sum_i c_i F^{(m_i, n_i)}_mu nu, F^{(m, n)} the clover of the m x n loops
  divided by its area m n a_mu a_nu (both orientations averaged), = F_mu nu + O(a^2);
* charge density q = -(1/32 pi^2) eps tr F F from that F (``combine='field'``, Bilson-Thompson,
  Leinweber, Williams, Ann. Phys. 304 (2003) 1, from memory) or the same combination of the charge
  densities of each F^{(m, n)} (``combine='density'``, de Forcrand, Garcia Perez, Stamatescu,
  Nucl. Phys. B 499 (1997) 409, from memory); Q = sum_x V q.

Anisotropic spacings (derivation). An m x n loop of plane (mu, nu) with m along mu spans m a_mu x n a_nu, its
flux is the mean of F over that rectangle, m n a_mu a_nu [F + ((m a_mu)^2 d_mu^2 + (n a_nu)^2 d_nu^2) F / 24 +
...], and the weight c V / (m n a_mu a_nu)^2 (V the cell volume; sum_x V -> int d^4x) makes its leading term c
(continuum density of the plane). Each term counts both orientations, m along mu and m along nu, with the same
c, so its a^2 term in plane (mu, nu) is c (m^2 + n^2) / 2 (a_mu^2 d_mu^2 + a_nu^2 d_nu^2) / 24 (times the
plane's density): the a_mu^2 and the a_nu^2 parts carry the same moment sum c (m^2 + n^2) (the moments of the
next paragraph), and a set with no isotropic a^2 term has none at any anisotropy; likewise the a^4 parts a_mu^4,
a_nu^4 carry sum c (m^4 + n^4) and a_mu^2 a_nu^2 carries sum c m^2 n^2. The clovers are divided by the same
areas and average the two orientations, so the field strength and charge keep their improvement too
(tests/test_anisotropic_smoothing.py checks the action on a BPST start at a_t = a_s / 2).

Tree-level a-expansion (abelian, smooth fields): the m x n terms differ from the continuum by
a^2 (m^2 + n^2) X + a^4 [(m^4 + n^4) Y + m^2 n^2 Z] + ..., X, Y, Z not depending on (m, n)
(the flux of a rectangle is the mean of F over it; common practice), so a set with
``sum c (m^2 + n^2) = 0`` has no a^2 term and one with also ``sum c (m^4 + n^4) = sum c m^2 n^2 = 0`` no
a^4 term (`LoopOperator.moments`).  For a BPST instanton the Wilson action has S / 8 pi^2 = 1 - (1/5)
(a/rho)^2 + ... (Garcia Perez, Gonzalez-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994) 535, from
memory), so a set's a^2 coefficient is -(1/10) sum c (m^2 + n^2) (`LoopOperator.action_a2`).

Measurements go plane by plane: the loops of a plane (mu, nu) never leave it, so the lattice is cut into
blocks across the two other axes (`CHUNK_SITES` sites, no halo) and one compiled kernel per lattice shape
computes every loop of the operator on a block; memory beyond the links is one plane's field strength.
"""

from __future__ import annotations

import dataclasses
import numbers
from collections.abc import Mapping, Sequence
from fractions import Fraction

import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._links import check_links as _check_links
from ..core.conventions import CHARGE_DENSITY_FACTOR
from . import boundaries as _bd
from . import threads
from .observables import PLANES
from .rectangles import charge_terms_packed, pack_metric, plane_fields, plane_fields_packed, plane_loops, plane_traces

__all__ = [
    "LoopOperator",
    "loop_operator",
    "rectangle_action",
    "epsilon_action",
    "five_loop_coefficients",
    "OPERATOR_PRESETS",
    "get_operator",
    "operator_action",
    "operator_field_strength",
    "operator_charge_density",
    "operator_charge",
]

#: Sites per block of the measurements (plane by plane, `_plane_chunks`): 2^15 sites are 9.4 MB of SU(3)
#: links along a plane's two axes, small enough for the cache-bound products (measured in the benchmarks).
CHUNK_SITES = 1 << 15
#: Sites per block inside a chunk (the compiled kernel runs over the blocks one after the other, so the
#: products of a block stay in the cache).
BLOCK_SITES = 1 << 8
#: The longest loop side a set may use (longer loops are not improvement; they would only cost).
MAX_EXTENT = 8
#: Relative tolerance of the sum rule sum c = 1 for float coefficients (exact for rationals).
SUM_RULE_RTOL = 1e-12
_COMBINE = ("field", "density")


@dataclasses.dataclass(frozen=True)
class LoopOperator:
    """A set of m x n Wilson loops with coefficients (module docstring), checked by `loop_operator`.

    terms: ((m, n, c), ...) with m <= n, c a Fraction (exact presets) or a float; combine: 'field' or
    'density' (how the charge density is formed); name and source: for tables and reports.
    """

    terms: tuple
    name: str = "custom"
    combine: str = "density"
    source: str = ""

    @property
    def pairs(self) -> tuple:
        """((m, n), ...) in term order."""
        return tuple((m, n) for m, n, _ in self.terms)

    @property
    def coefficients(self) -> np.ndarray:
        """(len(terms),) float64."""
        return np.array([float(c) for _, _, c in self.terms])

    @property
    def extent(self) -> int:
        """The longest loop side."""
        return max(n for _, n, _ in self.terms)

    def moments(self) -> dict:
        """The tree-level sums: 'sum' (= 1), 'a2' = sum c (m^2 + n^2), 'a4' = sum c (m^4 + n^4),
        'a4_mixed' = sum c m^2 n^2 (exact Fractions when every coefficient is rational)."""
        exact = all(isinstance(c, (Fraction, int)) for _, _, c in self.terms)
        cs = [(m, n, Fraction(c) if exact else float(c)) for m, n, c in self.terms]
        return {
            "sum": sum(c for _, _, c in cs),
            "a2": sum(c * (m * m + n * n) for m, n, c in cs),
            "a4": sum(c * (m**4 + n**4) for m, n, c in cs),
            "a4_mixed": sum(c * m * m * n * n for m, n, c in cs),
        }

    def action_a2(self) -> float:
        """The tree-level a^2 coefficient of the action of a BPST instanton, S / 8 pi^2 = 1 + k (a/rho)^2:
        k = -(1/10) sum c (m^2 + n^2) (module docstring)."""
        return -float(self.moments()["a2"]) / 10.0 + 0.0


def _coefficient(key, value):
    if isinstance(value, bool) or not isinstance(value, (numbers.Real, Fraction)):
        raise TypeError(f"coefficient of loop {key} must be a real number; found {type(value).__name__} {value!r}")
    if isinstance(value, (Fraction, int)):
        return Fraction(value)
    out = float(value)
    if not np.isfinite(out):
        raise ValueError(f"coefficient of loop {key} must be finite; found {value!r}")
    return out


def _loop_key(key):
    ok = isinstance(key, tuple) and len(key) == 2 and all(isinstance(k, int) and not isinstance(k, bool) for k in key)
    if not ok:
        raise TypeError(f"a loop must be a tuple (m, n) of two integers; found {key!r}")
    m, n = key
    if not (1 <= m <= MAX_EXTENT and 1 <= n <= MAX_EXTENT):
        raise ValueError(f"loop sides must lie in 1..{MAX_EXTENT}; found {key}")
    return (min(m, n), max(m, n))


def loop_operator(coefficients, *, name: str = "custom", combine: str = "density", source: str = "") -> LoopOperator:
    """A checked `LoopOperator` from ``{(m, n): c}`` (or a sequence of ``(m, n, c)``).

    (m, n) and (n, m) name the same term (both orientations are always taken); c is an int, a
    Fraction (kept exact) or a finite float.  The continuum normalisation sum c = 1 must hold
    (exactly for rationals, to `SUM_RULE_RTOL` for floats); zero coefficients are dropped.

    Raises:
        TypeError: not a mapping or sequence, or a coefficient that is not a real number.
        ValueError: a loop that is not two integers in 1..`MAX_EXTENT`, a term given twice, a
            coefficient that is not finite, no term, a sum that is not 1 (naming the sum found),
            an unknown ``combine``.
    """
    _v.choice("combine", combine, _COMBINE)
    if not isinstance(name, str) or not name:
        raise TypeError(f"name must be a non-empty string; found {name!r}")
    if isinstance(coefficients, Mapping):
        items = list(coefficients.items())
    elif isinstance(coefficients, Sequence) and not isinstance(coefficients, str):
        items = []
        for t in coefficients:
            if not (isinstance(t, Sequence) and len(t) == 3):
                raise TypeError(f"each term must be (m, n, c); found {t!r}")
            items.append(((t[0], t[1]), t[2]))
    else:
        raise TypeError(
            f"coefficients must be a mapping {{(m, n): c}} or a sequence of (m, n, c); found {coefficients!r}"
        )
    terms: dict = {}
    for key, value in items:
        k = _loop_key(tuple(key) if isinstance(key, list) else key)
        if k in terms:
            raise ValueError(f"loop {k} is given twice (m x n and n x m are one term, both orientations)")
        terms[k] = _coefficient(key, value)
    terms = {k: c for k, c in terms.items() if c != 0}
    if not terms:
        raise ValueError(f"an operator needs at least one loop with a non-zero coefficient; found {coefficients!r}")
    total = sum(terms.values())
    scale = sum(abs(c) for c in terms.values())
    exact = all(isinstance(c, Fraction) for c in terms.values())
    if (total != 1) if exact else abs(float(total) - 1.0) > SUM_RULE_RTOL * max(float(scale), 1.0):
        raise ValueError(
            f"the coefficients of {name!r} must sum to 1 (the continuum normalisation: every m x n term tends to "
            f"c times the continuum); found sum {total} for {dict(terms)}"
        )
    ordered = tuple((m, n, terms[(m, n)]) for m, n in sorted(terms))
    return LoopOperator(ordered, name=name, combine=combine, source=source)


def rectangle_action(c1, *, name: str = "rectangle") -> LoopOperator:
    """The Luescher-Weisz form c0 S_plaq + c1 S_rect with c0 = 1 - 8 c1: {(1, 1): 1 - 8 c1, (1, 2): 8 c1}.

    Luescher and Weisz, Commun. Math. Phys. 97 (1985) 59 (from memory): c0 + 8 c1 = 1 normalises it;
    c1 = -1/12 is the tree-level Symanzik action.
    """
    if isinstance(c1, bool) or not isinstance(c1, (numbers.Real, Fraction)):
        raise TypeError(f"c1 must be a real number; found {c1!r}")
    c = Fraction(c1) if isinstance(c1, (int, Fraction)) else _v.finite_float("c1", c1)
    return loop_operator({(1, 1): 1 - 8 * c, (1, 2): 8 * c}, name=name, source="Luescher-Weisz form c0 + 8 c1 = 1")


def epsilon_action(eps) -> LoopOperator:
    """The 1x1 + 2x2 action S(eps) = (4 - eps)/3 S_1 + (eps - 1)/48 S_2 of Garcia Perez, Gonzalez-Arroyo,
    Snippe and van Baal (Nucl. Phys. B 413 (1994) 535, from memory) = {(1, 1): (4 - eps)/3, (2, 2): (eps - 1)/3}
    (S_2 -> 16 S, so (eps - 1)/48 S_2 = (eps - 1)/3 of the normalised 2x2 term); eps exact if rational."""
    if isinstance(eps, bool) or not isinstance(eps, (numbers.Real, Fraction)):
        raise TypeError(f"eps must be a real number; found {eps!r}")
    e = Fraction(eps) if isinstance(eps, (int, Fraction)) else _v.finite_float("eps", eps)
    return loop_operator(
        {(1, 1): (4 - e) / 3, (2, 2): (e - 1) / 3}, name=f"eps={float(e):g}", source="Garcia Perez et al. 1994"
    )


def five_loop_coefficients(c5) -> dict:
    """The one-parameter family of five loops (1x1, 2x2, 1x2, 1x3, 3x3) with no tree-level a^2 and a^4 term:
    c1 = (19 - 55 c5)/9, c2 = (1 - 64 c5)/9, c3 = (-64 + 640 c5)/45, c4 = 1/5 - 2 c5 (de Forcrand, Garcia
    Perez, Stamatescu, Nucl. Phys. B 499 (1997) 409, from memory; checked against `LoopOperator.moments`)."""
    c = Fraction(c5)
    return {
        (1, 1): (19 - 55 * c) / 9,
        (2, 2): (1 - 64 * c) / 9,
        (1, 2): (-64 + 640 * c) / 45,
        (1, 3): Fraction(1, 5) - 2 * c,
        (3, 3): c,
    }


def _blw(k: dict, name: str) -> LoopOperator:
    """From the coefficients k of unnormalised clovers (C^{m x n} -> m n F; sum k m n = 1) to c = k m n."""
    return loop_operator(
        {key: v * key[0] * key[1] for key, v in k.items()},
        name=name,
        combine="field",
        source="Bilson-Thompson, Leinweber, Williams, Ann. Phys. 304 (2003) 1 (from memory)",
    )


def _presets() -> dict:
    f = Fraction
    dfgs = "de Forcrand, Garcia Perez, Stamatescu, Nucl. Phys. B 499 (1997) 409 (from memory)"
    return {
        "wilson": loop_operator({(1, 1): 1}, name="wilson", source="Wilson, Phys. Rev. D 10 (1974) 2445"),
        "clover": loop_operator({(1, 1): 1}, name="clover", combine="field", source="common practice"),
        "symanzik": rectangle_action(f(-1, 12), name="symanzik"),
        "iwasaki": rectangle_action(f("-0.331"), name="iwasaki"),
        "dbw2": rectangle_action(f("-1.4069"), name="dbw2"),
        "eps0": loop_operator(
            {(1, 1): f(4, 3), (2, 2): f(-1, 3)}, name="eps0", source="Garcia Perez et al., Nucl. Phys. B 413 (1994) 535"
        ),
        "5li": loop_operator(five_loop_coefficients(f(1, 20)), name="5li", source=dfgs),
        "3loop": _blw({(1, 1): f(3, 2), (2, 2): f(-3, 20), (3, 3): f(1, 90)}, "3loop"),
        "5loop": _blw(
            {(1, 1): f(65, 36), (2, 2): f(-11, 180), (1, 2): f(-16, 45), (1, 3): f(1, 30), (3, 3): f(1, 180)}, "5loop"
        ),
    }


#: Named operators with published coefficients (the values are written "from memory" where they are):
#: 'wilson' (the plaquette), 'clover' (the 1x1 clover field strength), the Luescher-Weisz-form actions
#: 'symanzik' (tree-level, c1 = -1/12), 'iwasaki' (c1 = -0.331) and 'dbw2' (c1 = -1.4069) (Iwasaki,
#: UTHEP-118 (1983); Takaishi, Phys. Rev. D 54 (1996) 1050; both c1 from memory), 'eps0' (the 1x1 + 2x2
#: action and charge without a^2 term), '5li' (five loops, c5 = 1/20: the action and charge of de Forcrand
#: et al. 1997), '3loop' and '5loop' (the field strengths of Bilson-Thompson et al. 2003: k = 3/2, -3/20,
#: 1/90 for 1x1, 2x2, 3x3, and the five-loop k5 = 1/180).
OPERATOR_PRESETS: dict = _presets()


def get_operator(operator) -> LoopOperator:
    """A `LoopOperator` from a preset name (`OPERATOR_PRESETS`), a `LoopOperator` or a coefficient mapping."""
    if isinstance(operator, LoopOperator):
        return loop_operator(operator.terms, name=operator.name, combine=operator.combine, source=operator.source)
    if isinstance(operator, str):
        key = operator.lower()
        if key not in OPERATOR_PRESETS:
            raise ValueError(f"operator must be one of {tuple(OPERATOR_PRESETS)} or a LoopOperator; found {operator!r}")
        return OPERATOR_PRESETS[key]
    if isinstance(operator, Mapping):
        return loop_operator(operator)
    raise TypeError(
        f"operator must be a preset name, a LoopOperator or a mapping {{(m, n): c}}; found {type(operator).__name__}"
    )


# -- measurements ------------------------------------------------------------------------------------------


def _spacings(spacing) -> np.ndarray:
    """Four positive spacings from one number or four."""
    if isinstance(spacing, bool):
        raise TypeError(f"spacing must be a positive number or four of them; found {spacing!r}")
    if isinstance(spacing, numbers.Real):
        return np.full(4, _v.positive_float("spacing", spacing))
    return _v.positive_vector("spacing", spacing, 4)


def _prepare(links, operator, spacing, boundary):
    op = get_operator(operator)
    a = _spacings(spacing)
    opened = tuple(b == "open" for b in _bd.per_direction("boundary", boundary, _bd.OBSERVABLE_BOUNDARIES))
    u = _check_links(links)
    shape = u.shape[:4]
    if op.extent > min(shape):
        raise ValueError(
            f"operator {op.name!r} has loops of side {op.extent}, longer than the smallest lattice extent "
            f"{min(shape)} (shape {tuple(shape)})"
        )
    return op, a, opened, u


def _plane_perm(mu: int, nu: int) -> tuple:
    """(mu, nu, r, s): the site axes of plane (mu, nu) first, then the other two in their order."""
    return (mu, nu) + tuple(r for r in range(4) if r not in (mu, nu))


def _plane_chunks(u, mu: int, nu: int):
    """Yield (sel, b, x): the links along mu and nu of a chunk of sites in the blocked plane layout of
    `instantonkit.lattice.rectangles`, x: (c L_s / b, L_mu, L_nu, b, 2, N, N) complex128 numpy.

    With (mu, nu, r, s) = `_plane_perm`, a chunk holds all of L_mu, L_nu, L_s and a run of c along r
    (``sel`` indexes its sites), cut into blocks of b sites along s (block (i, j): r = r0 + i, s = j b ..
    j b + b - 1; `_blocks`).  Loops of the plane never leave it, so a chunk needs no halo; b is the
    largest divisor of L_s with at most `BLOCK_SITES` sites a block, c the largest divisor of L_r with
    at most `CHUNK_SITES` a chunk (one compiled kernel per lattice shape)."""
    perm = _plane_perm(mu, nu)
    shape = u.shape[:4]
    n = u.shape[-1]
    r, rs = perm[2], perm[3]
    plane = shape[mu] * shape[nu]
    b = max(d for d in range(1, shape[rs] + 1) if shape[rs] % d == 0 and d * plane <= max(BLOCK_SITES, plane))
    want = max(1, CHUNK_SITES // (plane * shape[rs]))
    c = max(d for d in range(1, shape[r] + 1) if shape[r] % d == 0 and d <= want)
    for r0 in range(0, shape[r], c):
        sel = tuple(slice(r0, r0 + c) if d == r else slice(None) for d in range(4))
        x = np.empty((c, shape[rs] // b, shape[mu], shape[nu], b, 2, n, n), dtype=np.complex128)
        for k, d in enumerate((mu, nu)):
            x[..., k, :, :] = _blocks(u[..., d, :, :], sel, perm, b)
        yield sel, b, x.reshape(-1, *x.shape[2:])


def _blocks(arr, sel, perm, b: int, lead: int = 0):
    """The view of ``arr`` at the chunk ``sel`` (site axes after ``lead`` leading axes) in the blocked
    plane layout (c, L_s / b, *lead, L_mu, L_nu, b, *rest) of `_plane_chunks`."""
    view = arr[(slice(None),) * lead + sel]
    axes = tuple(range(lead)) + tuple(lead + p for p in perm) + tuple(range(lead + 4, view.ndim))
    v = np.transpose(view, axes)  # (*lead, L_mu, L_nu, c, L_s, *rest)
    v = v.reshape(v.shape[: lead + 3] + (v.shape[lead + 3] // b, b) + v.shape[lead + 4 :])
    order = (lead + 2, lead + 3) + tuple(range(lead)) + (lead, lead + 1, lead + 4)
    return np.transpose(v, order + tuple(range(lead + 5, v.ndim)))


def _site_mask(shape, reach: int, opened):
    """Open directions: sites with reach <= x_d <= L_d - 1 - reach; (L1..L4) bool (None: all)."""
    if not any(opened):
        return None
    idx = np.meshgrid(*[np.arange(s) for s in shape], indexing="ij", sparse=True)
    ok = np.ones(tuple(shape), dtype=bool)
    for d in range(4):
        if opened[d]:
            ok = ok & (idx[d] >= reach) & (idx[d] <= shape[d] - 1 - reach)
    return ok


def operator_action(links, operator="wilson", *, spacing=1.0, boundary="periodic") -> float:
    """The action S of a loop operator (module docstring; beta = 2N, tends to the continuum action).

    Args:
        links: (L1, L2, L3, L4, 4, N, N) complex links.
        operator: a preset name (`OPERATOR_PRESETS`), a `LoopOperator` or ``{(m, n): c}``.
        spacing: the lattice spacing, one positive number or four (a1, a2, a3, a4) for an anisotropic
            lattice (a loop in plane (mu, nu) spans m a_mu x n a_nu).
        boundary: 'periodic' or 'open', or four of them in (x1, x2, x3, x4) order; open: only the loops
            whose links all join lattice sites.
    Returns:
        float.
    Raises:
        ValueError / TypeError: bad links (shape, dtype, finite, SU(N)), operator, spacing or boundary;
        loops longer than the lattice.
    """
    op, a, opened, u = _prepare(links, operator, spacing, boundary)
    shape = u.shape[:4]
    vol = float(np.prod(a))
    loops = plane_loops(op.pairs)
    total = 0.0
    for mu, nu in PLANES:
        parts = threads.run_chunks(
            lambda item: np.asarray(plane_traces(jnp.asarray(item[2]), loops)), _plane_chunks(u, mu, nu)
        )
        tr = np.sum(parts, axis=0)  # (loops, L_mu, L_nu)
        ia, ib = np.arange(shape[mu])[:, None], np.arange(shape[nu])[None, :]
        for m, n, c in op.terms:
            w = float(c) * vol / (m * n * a[mu] * a[nu]) ** 2
            for p, q in ((m, n), (n, m)):  # extent p along mu: the ordered plane (mu, nu), then (nu, mu)
                ok = ((ia <= shape[mu] - 1 - p) | (not opened[mu])) & ((ib <= shape[nu] - 1 - q) | (not opened[nu]))
                total += w * float(np.sum(np.where(ok, tr[loops.index((p, q))], 0.0)))
    return total


def _field_kernel(op, a, mu: int, nu: int, summed: bool, packed: bool = False):
    """x -> the clover field strengths of the operator's terms in plane (mu, nu) on the blocks x of a chunk of
    `_plane_chunks` (numpy, (nb, 1 or len(terms), L_mu, L_nu, b, N, N)): their c_i-weighted sum (summed) or
    F^{(m_i, n_i)} one by one; packed: each F as N^2 reals (`rectangles.plane_fields_packed`)."""
    kernel = plane_fields_packed if packed else plane_fields
    scales = jnp.asarray(
        [(float(c) if summed else 1.0) / ((8.0 if m != n else 4.0) * m * n * a[mu] * a[nu]) for m, n, c in op.terms]
    )
    return lambda x: np.asarray(kernel(jnp.asarray(x), scales, op.pairs, summed))


#: The planes of the charge density's three products tr F_{mu nu} F_{rho sigma} with their signs eps_{mu nu rho sigma}.
_COMPLEMENTS = (((0, 1), (2, 3), 1.0), ((0, 2), (1, 3), -1.0), ((0, 3), (1, 2), 1.0))


def _charge_density(u, op, a):
    """q per site, (L1..L4) float64 (periodic shifts; `_site_mask` says which sites to trust).

    q = 8 c sum eps tr F_{mu nu} F_{rho sigma} over the three complementary plane pairs (``combine='field'``),
    or sum_i c_i of that for each F^{(m_i, n_i)} (``'density'``); the first plane's field of a pair is kept
    whole, the second's is taken block by block.  The fields travel packed as N^2 reals (half the bytes of
    the complex matrices; `rectangles.plane_fields_packed`)."""
    shape = u.shape[:4]
    n = u.shape[-1]
    summed = op.combine == "field"
    k = 1 if summed else len(op.terms)
    coeffs = np.ones(1) if summed else op.coefficients
    f1 = np.empty((k,) + tuple(shape) + (n * n,), dtype=np.float64)
    metric = jnp.asarray(pack_metric(n))
    q = np.zeros(shape)
    for p1, p2, sign in _COMPLEMENTS:
        perm1, perm2 = _plane_perm(*p1), _plane_perm(*p2)
        fields1, fields2 = _field_kernel(op, a, *p1, summed, True), _field_kernel(op, a, *p2, summed, True)
        w = jnp.asarray(sign * 8.0 * CHARGE_DENSITY_FACTOR * coeffs)

        def keep(item, fields1=fields1, perm1=perm1):
            sel, b, x = item
            dest = _blocks(f1, sel, perm1, b, lead=1)
            dest[...] = fields1(x).reshape(dest.shape)

        def contract(item, fields2=fields2, perm2=perm2, w=w):
            sel, b, x = item
            f = fields2(x)
            g = np.ascontiguousarray(_blocks(f1, sel, perm2, b, lead=1)).reshape(f.shape)
            dest = _blocks(q, sel, perm2, b)
            dest += np.asarray(charge_terms_packed(f, g, w, metric)).reshape(dest.shape)

        threads.run_chunks(keep, _plane_chunks(u, *p1))
        threads.run_chunks(contract, _plane_chunks(u, *p2))
    return q


def operator_field_strength(links, operator="clover", *, spacing=1.0, boundary="periodic") -> np.ndarray:
    """F_mu nu = sum_i c_i F^{(m_i, n_i)}_mu nu at the sites (physical units); (L1, L2, L3, L4, 4, 4, N, N) complex128.

    Antisymmetric in (mu, nu), anti-Hermitian and traceless; open boundaries: NaN where a loop of the
    operator leaves the lattice.  Arguments as `operator_action`.
    """
    op, a, opened, u = _prepare(links, operator, spacing, boundary)
    shape = u.shape[:4]
    n = u.shape[-1]
    out = np.zeros(tuple(shape) + (4, 4, n, n), dtype=np.complex128)
    for mu, nu in PLANES:
        perm, fields = _plane_perm(mu, nu), _field_kernel(op, a, mu, nu, True)

        def write(item, mu=mu, nu=nu, perm=perm, fields=fields):
            sel, b, x = item
            fp = fields(x)[:, 0]
            dest = _blocks(out[..., mu, nu, :, :], sel, perm, b)
            dest[...] = fp.reshape(dest.shape)
            dest = _blocks(out[..., nu, mu, :, :], sel, perm, b)
            dest[...] = -fp.reshape(dest.shape)

        threads.run_chunks(write, _plane_chunks(u, mu, nu))
    mask = _site_mask(shape, op.extent, opened)
    if mask is not None:
        for mu, nu in PLANES:  # the diagonal F_mu mu stays 0
            out[~mask, mu, nu] = np.nan
            out[~mask, nu, mu] = np.nan
    return out


def operator_charge_density(links, operator="clover", *, spacing=1.0, boundary="periodic") -> np.ndarray:
    """The charge density q of a loop operator per site (physical units, sum of V q = Q); (L1, L2, L3, L4) float64.

    ``operator.combine`` says how q is formed (module docstring).  Open boundaries: NaN at the sites
    whose loops leave the lattice (within the operator's longest side of an open face).  Arguments as
    `operator_action`.
    """
    op, a, opened, u = _prepare(links, operator, spacing, boundary)
    q = _charge_density(u, op, a)
    mask = _site_mask(u.shape[:4], op.extent, opened)
    return q if mask is None else np.where(mask, q, np.nan)


def operator_charge(links, operator="clover", *, spacing=1.0, boundary="periodic") -> float:
    """Q = sum_x V q(x) of `operator_charge_density` (open boundaries: the sites whose loops fit)."""
    op, a, opened, u = _prepare(links, operator, spacing, boundary)
    q = _charge_density(u, op, a)
    mask = _site_mask(u.shape[:4], op.extent, opened)
    return float(np.prod(a)) * float(np.sum(q) if mask is None else np.sum(q[mask]))
