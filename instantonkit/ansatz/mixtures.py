"""Instantons and anti-instantons together: the sum ansatz on R^4 and on the torus, random ensembles.

**Sum ansatz** (singular gauge).  Each object i (centre a_i, size rho_i, orientation Omega_i, sign
s_i = +1 instanton, -1 anti-instanton) contributes the singular-gauge BPST potential, with y = x - a_i,

    A^(i)_mu = Omega_i [rho_i^2 E_{a mu nu} y_nu / (y^2 (y^2 + rho_i^2))] u_a Omega-bar_i,
    E = eta-bar (s = +1: `instantonkit.ansatz.classic.BPSTField`, gauge 'singular'),
    E = eta     (s = -1: its parity image, `instantonkit.engine.transforms.anti`, since P eta-bar_a P = eta_a),

and A = sum_i A^(i) (Diakonov, Petrov, Nucl. Phys. B 245 (1984) 259; Shuryak, Verbaarschot,
Nucl. Phys. B 341 (1990) 1; Schäfer, Shuryak, Rev. Mod. Phys. 70 (1998) 323; all from memory).
In colour components (A_mu = A^a_mu u_a, [u_b, u_c] = 2 eps_{bca} u_a) the field strength is taken in
closed form, F^a_mu nu = d_mu A^a_nu - d_nu A^a_mu + 2 eps_{abc} A^b_mu A^c_nu, with
d_mu (g E_{b nu l} y_l) = g E_{b nu mu} + (d_mu g) E_{b nu l} y_l for each object's radial factor g.

What it is and is not.  The sum is not a solution: s and q are those of m separate objects only when
the objects are far apart (their interaction falls off as the dipole-dipole term ~ rho_i^2 rho_j^2 / R^4
of the reviews above, from memory; measured here for a pair of unit size, aligned orientations,
separated along x1: S / 8 pi^2 - 2 = 1.4e-2, 9.5e-4, 6.1e-5 at R = 4, 8, 16, i.e. (S / 8 pi^2 - 2) R^4
= 3.6, 3.9, 3.98; tests/test_mixtures.py checks the R^-4 law).  Near each centre the other objects'
potential B is not rotated by the singular gauge function, so F ~ [g^-1 dg, B] ~ |B(a_i)| / |x - a_i|
and s ~ |B(a_i)|^2 / |x - a_i|^2 there: integrable in four dimensions, finite everywhere else.  The
charge is nonetheless exactly the count: A decays as rho^2 / |x|^3 and near each centre it is the pure
gauge g^{-1} dg of winding s_i plus a bounded part, so the Chern-Simons flux gives
int q = sum_i s_i = n+ - n- for any separation (on the torus the outer flux cancels between opposite
faces, the same count).  ``charge`` and ``pole_count`` show n+ - n- as the construction's input; the
integrals (`instantonkit.ansatz.mixture_totals.mixture_totals`) measure the field's own S and Q with error bars.

**Ratio ansatz.**  For objects of one sign the 't Hooft ansatz phi = 1 + sum rho_i^2 / |x - a_i|^2 is
an exact solution (`ratio_ansatz`; 't Hooft 1976 unpublished, Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977)
1642, from memory) with aligned orientations.  For mixed signs only the sum ansatz is offered.

**Torus.**  The singular-gauge tail rho^2 E y / y^4 = -(rho^2 / 2) E d(1 / y^2) is the gradient of the
four-dimensional Coulomb potential, whose sum over images converges only conditionally (as in Ewald
sums it needs a neutralising background), so the images are not summed.  Instead each object is its
minimum image times a smooth cut-off chi(|y|) = 1 - step((|y| - r1) / (r2 - r1)), r2 = min_i P_i / 2,
r1 = (1 - taper) r2, with the C-infinity step step(t) = e^{-1/t} / (e^{-1/t} + e^{-1/(1-t)}) on [0, 1] (common
practice): A is then exactly periodic and smooth (chi vanishes before the minimum image switches),
and the charge is exactly n+ - n- (argument above).  What is dropped is each object's own tail beyond r1,
|A^(i)| <= rho_i^2 / r^3 per colour component, i.e. (rho / r1)^3 relative to the core scale 1 / rho
(``tail`` of `TorusMixture`; ``accuracy=`` refuses boxes that cannot meet it); the action gains an
excess ~ (rho / r1)^4 from the cut-off layer (as for the window of `instantonkit.ansatz.periodic`).
A smooth rather than a polynomial step makes the densities smooth and periodic, so the midpoint rule of
`instantonkit.ansatz.mixture_totals` converges fast on the torus.

SU(3) and larger: the fields are SU(2); lattice starts embed them (``group=``, ``embedding=`` of
`instantonkit.lattice.starts.lattice_links`), every object in the same SU(2) subgroup.
"""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Callable

import jax
import jax.numpy as jnp
import numpy as np
from scipy.spatial import cKDTree

from ..core import _validate as _v
from ..core import quaternion as qt
from ..core._pytree import PytreeFields
from ..engine.fields import action_from_f, charge_from_f
from ..engine.transforms import PARITY, anti
from .classic import ThooftField, thooft, unit_quaternion
from .scalar import ETA_BAR, UNITS_C

Array = jax.Array | np.ndarray

__all__ = [
    "Mixture",
    "OverlapWarning",
    "mixture",
    "instanton_pair",
    "torus_mixture",
    "random_mixture",
    "ratio_ansatz",
    "haar_orientations",
    "smooth_step_inf",
]

_ETA = qt.thooft_eta()  # (3, 4, 4)
_EPS3 = np.zeros((3, 3, 3))
_EPS3[0, 1, 2] = _EPS3[1, 2, 0] = _EPS3[2, 0, 1] = 1.0
_EPS3[0, 2, 1] = _EPS3[2, 1, 0] = _EPS3[1, 0, 2] = -1.0
_OVERLAP = ("warn", "error", "ignore")
_NAMES = {1: "instanton", -1: "anti-instanton"}


class OverlapWarning(UserWarning):
    """Two objects of a sum ansatz closer than the sum of their sizes (outside the ansatz's validity)."""


# -- the field ---------------------------------------------------------------------------------------


def smooth_step_inf(t):
    """The C-infinity step and its derivative on [0, 1] (0 below, 1 above; common practice):

    step = a / (a + b), a = e^{-1/t}, b = e^{-1/(1-t)};  step' = step (1 - step) (1/t^2 + 1/(1-t)^2).
    t: array (jax or numpy) -> (step, step') of the same shape, without NaN at the ends (safe under autodiff).
    """
    t = jnp.clip(jnp.asarray(t, dtype=jnp.float64), 0.0, 1.0)
    inner = (t > 0.0) & (t < 1.0)
    ts = jnp.where(inner, t, 0.5)
    a = jnp.exp(-1.0 / ts)
    b = jnp.exp(-1.0 / (1.0 - ts))
    step = a / (a + b)
    d = step * (1.0 - step) * (1.0 / ts**2 + 1.0 / (1.0 - ts) ** 2)
    return jnp.where(inner, step, jnp.where(t >= 1.0, 1.0, 0.0)), jnp.where(inner, d, 0.0)


def _adjoint(orientations):
    """R_i (m, 3, 3) with Omega_i u_b Omega-bar_i = R_i[a, b] u_a (tr u_a u_c = -2 delta_ac)."""
    om = qt.to_matrix(jnp.asarray(orientations))  # (m, 2, 2)
    rot = jnp.einsum("aij,mjk,bkl,mil->mab", UNITS_C, om, UNITS_C, jnp.conj(om))
    return -0.5 * jnp.real(rot)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class Mixture(PytreeFields):
    """Sum ansatz of singular-gauge instantons and anti-instantons (module docstring), on R^4 or the torus.

    centres: (m, 4) float64; sizes: (m,) rho_i > 0; orientations: (m, 4) unit quaternions; signs: tuple of
    m values +1 / -1 (static).  On the torus (``torus=True``): lo, box (4,) the fundamental box
    [lo, lo + box) (centres stored wrapped into it) and ``taper`` the cut-off layer as a fraction of
    r2 = min(box) / 2; on R^4 lo and box are unused.  Build with `mixture`, `torus_mixture`,
    `random_mixture` or `instanton_pair`, which check the input.
    """

    centres: Array
    sizes: Array
    orientations: Array
    lo: Array
    box: Array
    signs: tuple
    torus: bool = False
    taper: float = 0.5

    _leaves = ("centres", "sizes", "orientations", "lo", "box")
    _static = ("signs", "torus", "taper")

    # -- counts (inputs of the construction) --------------------------------------------------------
    @property
    def n_plus(self) -> int:
        return sum(1 for s in self.signs if s > 0)

    @property
    def n_minus(self) -> int:
        return sum(1 for s in self.signs if s < 0)

    @property
    def charge(self) -> int:
        """n+ - n-, the construction's count (an input; ``mixture_totals`` integrates the field's own Q)."""
        return self.n_plus - self.n_minus

    def pole_count(self) -> tuple[int, str]:
        """Field hook: n+ - n- read off the construction (an input, not a check)."""
        return self.charge, f"sum ansatz: {self.n_plus} instanton(s) - {self.n_minus} anti-instanton(s)"

    @property
    def cutoff(self) -> tuple[float, float]:
        """(r1, r2) of the torus cut-off chi (module docstring); (inf, inf) on R^4."""
        if not self.torus:
            return float("inf"), float("inf")
        r2 = float(np.min(self.box)) / 2.0
        return (1.0 - float(self.taper)) * r2, r2

    @property
    def tail(self) -> float:
        """Dropped tail on the torus relative to the core scale: max_i (rho_i / r1)^3 (0 on R^4)."""
        return float(np.max(np.asarray(self.sizes) / self.cutoff[0]) ** 3) if self.torus else 0.0

    # -- per-object geometry (jax) ------------------------------------------------------------------
    def _tensors(self):
        """E_i (m, 3, 4, 4): eta-bar for instantons, eta for anti-instantons."""
        return jnp.asarray(np.stack([ETA_BAR if s > 0 else _ETA for s in self.signs]))

    def _displacements(self, x):
        """y_i (m, 4): x - a_i on R^4, the minimum image on the torus."""
        y = jnp.asarray(x, dtype=jnp.float64)[None, :] - jnp.asarray(self.centres)
        if self.torus:
            box = jnp.asarray(self.box)
            y = jnp.mod(y + box / 2.0, box) - box / 2.0
        return y

    def _radial(self, y):
        """g_i (m,) and dg_i / (y^2) factor h_i (m,) with d_mu g = h y_mu: g = chi rho^2 / (y^2 (y^2 + rho^2))."""
        r2 = jnp.sum(y * y, axis=-1)
        rho2 = jnp.asarray(self.sizes) ** 2
        f = rho2 / (r2 * (r2 + rho2))
        df = -rho2 * (2.0 * r2 + rho2) / (r2 * (r2 + rho2)) ** 2  # df / d(y^2)
        if not self.torus:
            return f, 2.0 * df
        rc = jnp.min(jnp.asarray(self.box)) / 2.0
        r1 = (1.0 - self.taper) * rc
        r = jnp.sqrt(r2)
        t = jnp.clip((r - r1) / (rc - r1), 0.0, 1.0)
        step, dstep = smooth_step_inf(t)
        chi = 1.0 - step
        dchi = -dstep / (rc - r1)  # d chi / dr
        return chi * f, 2.0 * chi * df + dchi * f / r

    def _colour(self, x):
        """(A^a_mu (3, 4), per-object pieces for F): colour components of the total potential."""
        y = self._displacements(x)
        e = self._tensors()
        g, h = self._radial(y)
        rot = _adjoint(self.orientations)
        ey = jnp.einsum("ibnl,il->ibn", e, y)  # E_{b nu l} y_l per object
        v = g[:, None, None] * ey  # (m, 3, 4)
        a = jnp.einsum("iab,ibn->an", rot, v)
        return a, (y, e, g, h, rot, ey)

    def potential(self, x):
        """A_mu at one point (4,) -> (4, 2, 2) complex: the sum of the objects' singular-gauge potentials."""
        a, _ = self._colour(x)
        return jnp.einsum("am,aij->mij", a, UNITS_C)

    def field_strength(self, x):
        """F_mu nu (4, 4, 2, 2) at one point: d_mu A_nu - d_nu A_mu (closed form per object) + [A_mu, A_nu]."""
        a, (y, e, g, h, rot, ey) = self._colour(x)
        dv = g[:, None, None, None] * jnp.transpose(e, (0, 1, 3, 2)) + h[:, None, None, None] * (
            y[:, None, :, None] * ey[:, :, None, :]
        )  # (m, b, mu, nu): d_mu v^b_nu
        lin = jnp.einsum("iab,ibmn->amn", rot, dv - jnp.swapaxes(dv, 2, 3))
        fcol = lin + 2.0 * jnp.einsum("abc,bm,cn->amn", _EPS3, a, a)
        return jnp.einsum("amn,aij->mnij", fcol, UNITS_C)

    def action_density(self, x):
        """s = -1/2 sum tr F F (conventions module) from the closed-form F; ()."""
        return action_from_f(self.field_strength(x))

    def charge_density(self, x):
        """q = -(1/32 pi^2) eps tr F F (conventions module) from the closed-form F; ()."""
        return charge_from_f(self.field_strength(x))

    def generator_batch(self, points, dirs):
        """A.d at a batch of points and directions (B, 4), (B, 4) -> (B, 2, 2) (the transporters' hook).

        Batch-major: A^a.d = sum_i g_i (R_i E_i)_{a nu l} y_il d_nu with the rotated tensors R_i E_i formed once.
        """
        pts = jnp.asarray(points, dtype=jnp.float64)
        y = pts[:, None, :] - jnp.asarray(self.centres)[None]  # (B, m, 4)
        if self.torus:
            box = jnp.asarray(self.box)
            y = jnp.mod(y + box / 2.0, box) - box / 2.0
        g, _ = self._radial(y)  # (B, m)
        rotated = jnp.einsum("iab,ibnl->ianl", _adjoint(self.orientations), self._tensors())
        a = jnp.einsum("Bi,ianl,Bil,Bn->Ba", g, rotated, y, jnp.asarray(dirs, dtype=jnp.float64))
        return jnp.einsum("Ba,aij->Bij", a, UNITS_C)

    # -- hooks ----------------------------------------------------------------------------------------
    def hint(self):
        """(centre (4,), scale): the box middle and min(box)/2 on the torus; mean and spread of the centres on R^4."""
        if self.torus:
            return np.asarray(self.lo) + np.asarray(self.box) / 2.0, float(np.min(self.box)) / 2.0
        c = np.asarray(self.centres)
        spread = float(np.max(np.linalg.norm(c - c.mean(0), axis=1))) if c.shape[0] > 1 else 0.0
        return c.mean(axis=0), float(max(np.max(self.sizes), spread))

    def layout(self) -> tuple[np.ndarray, np.ndarray]:
        """Field hook: the centres (m, 4) and sizes (m,), where the action sits."""
        return np.asarray(self.centres, dtype=np.float64).copy(), np.asarray(self.sizes, dtype=np.float64).copy()

    def lattice_geometry(self, shape) -> tuple[float, np.ndarray]:
        """(spacing a, origin (4,)) of a lattice of ``shape`` covering the torus: a = box_i / L_i, origin = lo + a/2.

        Raises ValueError on R^4, or when box_i / L_i differ between directions (naming them).
        """
        if not self.torus:
            raise ValueError("lattice_geometry is defined for a torus mixture only; found a mixture on R^4")
        shape = _v.lattice_shape("shape", shape, in_memory=False)
        steps = np.asarray(self.box) / np.asarray(shape, dtype=np.float64)
        if np.ptp(steps) > 1e-12 * float(np.max(steps)):
            raise ValueError(
                f"shape {tuple(shape)} does not cut the box {np.asarray(self.box).tolist()} into equal spacings; "
                f"found box_i / L_i = {steps.tolist()}"
            )
        a = float(steps[0])
        return a, np.asarray(self.lo) + a / 2.0

    def describe(self) -> str:
        where = f"on the torus of periods {np.asarray(self.box).tolist()}" if self.torus else "on R^4"
        return f"sum ansatz of {self.n_plus} instanton(s) and {self.n_minus} anti-instanton(s) {where}"

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the field exactly (kind 'mixture')."""
        out = {
            "kind": "mixture",
            "centres": np.asarray(self.centres, dtype=np.float64).tolist(),
            "sizes": np.asarray(self.sizes, dtype=np.float64).tolist(),
            "orientations": np.asarray(self.orientations, dtype=np.float64).tolist(),
            "signs": [int(s) for s in self.signs],
            "charge": self.charge,
        }
        if self.torus:
            out["torus"] = {
                "lo": np.asarray(self.lo).tolist(),
                "box": np.asarray(self.box).tolist(),
                "taper": float(self.taper),
            }
        return out


# -- construction and checks ----------------------------------------------------------------------------


def haar_orientations(n: int, rng) -> np.ndarray:
    """n Haar-random SU(2) orientations as unit quaternions (n, 4): normalised Gaussian 4-vectors.

    (The uniform measure on S^3 = SU(2) is the Haar measure; a normalised isotropic Gaussian is uniform
    on the sphere: Muller, Commun. ACM 2 (1959) 19, from memory.)
    """
    g = rng.standard_normal((int(n), 4))
    return g / np.linalg.norm(g, axis=1, keepdims=True)


def _signs(signs, m: int) -> tuple:
    vals = list(np.atleast_1d(np.asarray(signs)).reshape(-1)) if not isinstance(signs, (list, tuple)) else list(signs)
    if len(vals) != m:
        raise ValueError(f"signs must give one +1 or -1 per object ({m}); found {len(vals)} values")
    out = []
    for i, s in enumerate(vals):
        if isinstance(s, (bool, np.bool_)) or s not in (1, -1):
            raise ValueError(f"signs[{i}] must be +1 (instanton) or -1 (anti-instanton); found {s!r}")
        out.append(int(s))
    return tuple(out)


def _orientations(orientations, m: int) -> np.ndarray:
    if orientations is None:
        return np.tile(np.array([1.0, 0.0, 0.0, 0.0]), (m, 1))
    arr = np.asarray(orientations)
    if arr.ndim == 1 or arr.shape == (2, 2):
        raise ValueError(f"orientations must be one per object: (m, 4) or (m, 2, 2) with m = {m}; found {arr.shape}")
    if arr.shape[0] != m:
        raise ValueError(f"orientations must be one per object (m = {m}); found {arr.shape[0]} ({arr.shape})")
    out = np.empty((m, 4))
    for i in range(m):
        try:
            out[i] = unit_quaternion(arr[i])
        except (ValueError, TypeError) as err:
            raise type(err)(f"orientations[{i}]: {err}") from err
    return out


def _pair_distances(centres, box=None, lo=None, reach: float = np.inf):
    """(i, j, distance) of the pairs i < j closer than ``reach`` (minimum images on the torus [lo, lo + box)).

    A k-d tree (scipy.spatial.cKDTree, periodic when ``box`` is given) finds them without an m x m array.
    """
    if box is None:
        tree = cKDTree(centres)
    else:
        y = np.mod(centres - lo, box)
        tree = cKDTree(np.where(y >= box, 0.0, y), boxsize=box)
    pairs = tree.query_pairs(r=reach, output_type="ndarray") if np.isfinite(reach) else None
    if pairs is None:
        i, j = np.triu_indices(centres.shape[0], 1)
    else:
        i, j = pairs[:, 0], pairs[:, 1]
    d = centres[i] - centres[j]
    if box is not None:
        d = np.mod(d + box / 2.0, box) - box / 2.0
    return i, j, np.linalg.norm(d, axis=-1)


def _check_overlaps(centres, sizes, signs, overlap: str, box=None, lo=None) -> None:
    """Warn (or raise) for pairs closer than rho_i + rho_j, naming them (minimum-image distances on the torus)."""
    if overlap == "ignore" or centres.shape[0] < 2:
        return
    i, j, dist = _pair_distances(centres, box, lo, 2.0 * float(np.max(sizes)))
    reach = sizes[i] + sizes[j]
    close = dist < reach
    if not np.any(close):
        return
    i, j, dist, reach = i[close], j[close], dist[close], reach[close]
    worst = int(np.argmin(dist / reach))
    a, b = int(i[worst]), int(j[worst])
    text = (
        f"{i.size} pair(s) of objects overlap beyond the sum ansatz's validity (distance < rho_i + rho_j); the "
        f"closest: object {a} ({_NAMES[signs[a]]}, rho = {sizes[a]:.6g}) and object {b} ({_NAMES[signs[b]]}, "
        f"rho = {sizes[b]:.6g}) are {dist[worst]:.6g} apart, rho_{a} + rho_{b} = {reach[worst]:.6g}"
    )
    if overlap == "error":
        raise ValueError(text)
    warnings.warn(text, OverlapWarning, stacklevel=3)


def _common(centres, sizes, signs, orientations, overlap):
    _v.choice("overlap", overlap, _OVERLAP)
    c = _v.points_array("centres", centres, min_count=1, shape_text="(m, 4)")
    m = c.shape[0]
    rho = _v.positive_vector("sizes", sizes, m)
    return c, rho, _signs(signs, m), _orientations(orientations, m)


def mixture(centres, sizes, signs, orientations=None, *, overlap: str = "warn") -> Mixture:
    """Sum ansatz on R^4 of instantons (sign +1) and anti-instantons (sign -1) in singular gauge.

    Args:
      centres: (m, 4) float64 (a single (4,) point means m = 1).
      sizes: (m,) rho_i > 0, or one number for all.
      signs: m values +1 / -1.
      orientations: (m, 4) unit quaternions or (m, 2, 2) SU(2) matrices (default: the identity).
      overlap: 'warn' (default; `OverlapWarning`), 'error' (ValueError) or 'ignore' for pairs closer
        than rho_i + rho_j (outside the ansatz's validity).
    Returns:
      Mixture, a field of N = 2 with closed-form F; ``charge`` = n+ - n- (the count, an input).
    Raises:
      ValueError: bad shapes, non-finite centres, sizes <= 0, signs other than +-1, non-unit
        orientations, overlapping objects with overlap='error' (naming the pair and the numbers).
      TypeError: non-real arrays.
    """
    c, rho, s, om = _common(centres, sizes, signs, orientations, overlap)
    _check_overlaps(c, rho, s, overlap)
    return Mixture(c, rho, om, np.zeros(4), np.ones(4), s, False, 0.5)


def instanton_pair(
    separation, size=1.0, *, axis=(0.0, 0.0, 0.0, 1.0), center=(0.0, 0.0, 0.0, 0.0), orientation=None, overlap="warn"
) -> Mixture:
    """An instanton at c - (R/2) n and an anti-instanton at c + (R/2) n, both of size rho (sum ansatz on R^4).

    Args:
      separation: R > 0; size: rho > 0 (one for both, or (rho_I, rho_A)).
      axis: (4,) non-zero direction n (normalised here); center: (4,) midpoint c.
      orientation: the anti-instanton's relative orientation (unit quaternion or SU(2) matrix; default identity).
      overlap: as in `mixture`.
    Returns:
      Mixture with signs (+1, -1).
    Raises:
      ValueError / TypeError as `mixture`, and for R <= 0 or a zero axis.
    """
    r = _v.positive_float("separation", separation)
    n = _v.real_array("axis", axis, (4,))
    norm = float(np.linalg.norm(n))
    if not np.isfinite(norm) or norm == 0.0:
        raise ValueError(f"axis must be a finite non-zero (4,) vector; found {n.tolist()}")
    c = _v.point("center", center)
    n = n / norm
    om = [np.array([1.0, 0.0, 0.0, 0.0]), np.array([1.0, 0, 0, 0]) if orientation is None else orientation]
    return mixture(np.stack([c - r / 2 * n, c + r / 2 * n]), size, (1, -1), _orient_list(om), overlap=overlap)


def _orient_list(om) -> np.ndarray:
    return np.stack([unit_quaternion(o) for o in om])


def torus_mixture(
    centres,
    sizes,
    signs,
    box,
    orientations=None,
    *,
    lo=(0.0, 0.0, 0.0, 0.0),
    taper: float = 0.5,
    accuracy: float | None = None,
    overlap: str = "warn",
) -> Mixture:
    """Sum ansatz on the torus [lo, lo + box): each object's minimum image times the cut-off chi (module docstring).

    Args:
      centres, sizes, signs, orientations, overlap: as in `mixture` (centres are wrapped into the box;
        overlaps use minimum-image distances).
      box: (4,) periods P_i > 0; lo: (4,) lower corner.
      taper: the cut-off layer as a fraction of r2 = min(P) / 2, 0 < taper <= 1 (default 0.5).
      accuracy: if given, the largest dropped tail (rho_max / r1)^3 accepted (relative to 1 / rho).
    Returns:
      Mixture with ``torus=True``; ``tail`` the dropped tail, ``lattice_geometry(shape)`` the matching lattice.
    Raises:
      ValueError: as `mixture`; a bad box, lo or taper; a size rho_i >= r1 (the core would be cut);
        a tail above ``accuracy`` (naming rho, r1 and the tail).
    """
    c, rho, s, om = _common(centres, sizes, signs, orientations, overlap)
    p = _v.real_array("box", box, (4,))
    if not np.all(np.isfinite(p)) or np.any(p <= 0):
        raise ValueError(f"box must be four finite periods > 0; found {p.tolist()}")
    low = _v.point("lo", lo)
    tp = _v.positive_float("taper", taper)
    if tp > 1.0:
        raise ValueError(f"taper must lie in (0, 1]; found {taper!r}")
    inside = (c >= low) & (c < low + p)
    c = np.where(inside, c, low + np.mod(c - low, p))  # centres already in the box keep their bits
    r1 = (1.0 - tp) * float(np.min(p)) / 2.0
    big = int(np.argmax(rho))
    if rho[big] >= r1:
        raise ValueError(
            f"object {big} has rho = {rho[big]:.6g} >= r1 = {r1:.6g} (cut-off start, (1 - taper) min(box) / 2): "
            "the cut-off would cut its core; use a larger box or a smaller taper"
        )
    tail = float((rho[big] / r1) ** 3)
    if accuracy is not None:
        acc = _v.positive_float("accuracy", accuracy)
        if tail > acc:
            raise ValueError(
                f"the dropped tail (rho_max / r1)^3 = ({rho[big]:.6g} / {r1:.6g})^3 = {tail:.3e} exceeds accuracy "
                f"{acc:.3e}; need r1 >= {rho[big] / acc ** (1 / 3):.6g} (a larger box or a smaller taper)"
            )
    _check_overlaps(c, rho, s, overlap, box=p, lo=low)
    return Mixture(c, rho, om, low, p, s, True, float(tp))


def _draw_sizes(sizes, rng, n: int) -> np.ndarray:
    if callable(sizes):
        out = np.asarray(sizes(rng, n), dtype=np.float64).reshape(-1)
        if out.shape != (n,):
            raise ValueError(f"the sizes callable must return {n} values for (rng, {n}); found shape {out.shape}")
        return out
    arr = np.asarray(sizes)
    if arr.ndim == 0:
        return np.full(n, _v.positive_float("sizes", sizes))
    if arr.shape == (2,):
        low, high = (_v.positive_float("sizes (low, high)", v) for v in arr)
        if low > high:
            raise ValueError(f"sizes (low, high) must have low <= high; found {arr.tolist()}")
        return rng.uniform(low, high, n)
    raise ValueError(
        f"sizes must be a number (fixed), (low, high) (uniform) or a callable (rng, n) -> (n,); found {arr.shape}"
    )


def random_mixture(
    n_plus: int,
    n_minus: int,
    box,
    *,
    sizes: float | tuple | Callable = 1.0,
    seed: int | np.random.Generator | None = 0,
    lo=(0.0, 0.0, 0.0, 0.0),
    torus: bool = True,
    taper: float = 0.5,
    accuracy: float | None = None,
    overlap: str = "warn",
) -> Mixture:
    """A random ensemble: n+ instantons and n- anti-instantons, uniform centres in [lo, lo + box), Haar orientations.

    Draws from ``np.random.default_rng(seed)`` (or the Generator given) in this order: centres (m, 4)
    uniform, sizes, orientations (`haar_orientations`); instantons first.

    Args:
      n_plus, n_minus: counts >= 0, n+ + n- >= 1.
      box: (4,) box sides (the periods on the torus).
      sizes: a number (fixed), (low, high) (uniform) or a callable (rng, n) -> (n,) values.
      seed: int, Generator or None (fresh entropy); lo: (4,) corner; torus: the torus (`torus_mixture`)
        or R^4 (`mixture`, centres in the box).
      taper, accuracy, overlap: as in `torus_mixture`.
    Returns:
      Mixture.
    Raises:
      ValueError / TypeError: bad counts, box, sizes (shape, <= 0), seed; as `torus_mixture` / `mixture`.
    """
    npl = _v.nonnegative_int("n_plus", n_plus)
    nmi = _v.nonnegative_int("n_minus", n_minus)
    m = npl + nmi
    if m < 1:
        raise ValueError(f"n_plus + n_minus must be >= 1; found {npl} + {nmi}")
    _v.affordable("n_plus + n_minus", 512.0 * m, f"the parameters of {m} objects")
    if isinstance(seed, np.random.Generator):
        rng = seed
    elif seed is None or (isinstance(seed, (int, np.integer)) and not isinstance(seed, bool) and seed >= 0):
        rng = np.random.default_rng(seed)
    else:
        raise ValueError(f"seed must be a non-negative integer, a numpy Generator or None; found {seed!r:.80}")
    p = _v.real_array("box", box, (4,))
    if not np.all(np.isfinite(p)) or np.any(p <= 0):
        raise ValueError(f"box must be four finite sides > 0; found {p.tolist()}")
    low = _v.point("lo", lo)
    centres = low + rng.uniform(0.0, 1.0, (m, 4)) * p
    rho = _draw_sizes(sizes, rng, m)
    om = haar_orientations(m, rng)
    signs = (1,) * npl + (-1,) * nmi
    if torus:
        return torus_mixture(centres, rho, signs, p, om, lo=low, taper=taper, accuracy=accuracy, overlap=overlap)
    return mixture(centres, rho, signs, om, overlap=overlap)


def ratio_ansatz(centres, sizes, sign: int = 1):
    """The exact ratio ('t Hooft) ansatz of objects of one sign, centred at ``centres``.

    sign +1: ``thooft(centres, sizes)``, self-dual, charge +k; sign -1: its anti-self-dual partner
    ``anti(thooft(P centres, sizes))``, whose centres are ``centres`` (P = diag(-1, -1, -1, 1)).
    Orientations are aligned (the ansatz has 5k parameters).  There is no exact ratio ansatz of mixed
    signs: use `mixture` (sum ansatz).

    Raises:
      ValueError: a sign other than +-1, or as `instantonkit.ansatz.classic.thooft`.
    """
    if isinstance(sign, (bool, np.bool_)) or sign not in (1, -1):
        raise ValueError(
            f"sign must be +1 or -1 (the ratio ansatz is exact for objects of one sign); found {sign!r:.40}"
        )
    if sign > 0:
        return thooft(centres, sizes)
    c = _v.points_array("centres", centres, min_count=1, shape_text="(k, 4)")
    return anti(ThooftField(c * PARITY, sizes))
