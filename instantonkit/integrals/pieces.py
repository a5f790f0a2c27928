"""The pieces of the adaptive cubature: the layout, the partition of unity, radial and angular levels, shell rules.

Each piece of the partition of unity (one per centre, `Gluing`) carries its own radial
Gauss-Legendre level in ``u`` (``r = L u / (1 - u)``, cut into panels about far neighbours' distances)
and, per radial node (a shell), an angular level of a product rule on S^3 (or S^2 x the x4 circle),
oriented towards the neighbour that dominates the shell.  How the pieces are refined is
`instantonkit.integrals.cubature`'s plan; here is what a piece and a shell are.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import quadrature as _quad
from .estimates import piece_error

#: Radial Gauss-Legendre nodes per radial level: slow growth first (most lumps converge by 48-64).
RADIAL_COUNTS = (16, 24, 32, 40, 48, 64, 80, 96, 128, 160, 192, 256)


#: Oriented shell rules and radial panels (see shell_orientation and piece_radial_nodes; _ASPECT = 1 and
#: _PANELS = False give the earlier rules, the reference of earlier measurements): aspect, dominance, separation in
#: rho_j; panel cuts at d_ij -+ _PANEL_HALF_WIDTH rho_j, panels >= _PANEL_MIN_LENGTH in u, >= _PANEL_MIN nodes.
_ASPECT, _DOMINANCE, _PANEL_SEPARATION = 4, 10.0, 6.0
_PANELS, _PANEL_HALF_WIDTH, _PANEL_MIN_LENGTH, _PANEL_MIN = True, 2.0, 0.02, 6
#: ... used for layouts of at most this many centres: measured on random ADHM data, both gain 4.6x at
#: k = 2 (1e-10: 0.87M points, converged, vs 4M not) and lose at k = 4 and 8 (bench_integrals).
_ORIENTED_MAX_CENTRES = 2


# -- where the field lives ---------------------------------------------------------------------------


@dataclasses.dataclass(frozen=True)
class Layout:
    """Where a field's action sits, for the quadrature: one rule per centre.

    centres: (m, 4) float64; scales: (m,) float64 > 0; period: the x4 period (float) or None on R^4;
    source: where the numbers came from ('user hints', "the field's layout()", ...).
    """

    centres: np.ndarray
    scales: np.ndarray
    period: float | None
    source: str

    @property
    def periodic(self) -> bool:
        return self.period is not None

    @property
    def dim(self) -> int:
        """Dimension of the non-compact directions: 4 on R^4, 3 on R^3 x S^1."""
        return 3 if self.period is not None else 4

    @property
    def extent(self) -> float:
        """Largest scale plus the largest distance of a centre from the mean centre."""
        c0 = self.centres.mean(axis=0)
        return float(np.max(self.scales) + np.max(np.linalg.norm(self.centres - c0, axis=1)))


#: Background gluing (R^4, two or more centres; see Gluing): OFF by default, measured worse.  Random ADHM data
#: (seed = k), rtol 1e-10, 0.6-1M points: k = 3 true error 1.8e-8 (plain gluing) vs 3e-8..8.5e-6 (background,
#: core fraction 0.3..0.7, scale 1..2); k = 4 1.0e-7 vs 1.2e-6..4.8e-5: the background piece takes the lumps'
#: tails beyond y_i (10-25% of Q) as features of size y_i seen from the mean centre.  Core radius y_i = _CORE_FRACTION x (distance to the nearest other centre), at least rho_i, and
#: the background scale R = _BACKGROUND_SCALE x the layout's extent.
_BACKGROUND, _CORE_FRACTION, _BACKGROUND_SCALE = False, 0.3, 1.0


@dataclasses.dataclass(frozen=True)
class Gluing:
    """The pieces of the partition of unity: centres (m, 4), scales (m,), log amplitudes (m,) or None, radial scales.

    Without a background: one piece per layout centre (weights phi_i = (rho_i / (d^2 + rho_i^2))^4,
    radial scales of quadrature.radial_scales).  With one (R^4, >= 2 centres): the layout's pieces
    plus a last piece about the mean centre c with scale R, and amplitudes A_i chosen so that piece
    i and the background weigh the same at distance y_i from a_i.  A piece's weight then falls off
    beyond y_i, so no piece reaches into the region between and beyond the lumps, where the density
    is far from a sum of lumps; the background piece, centred where that far field is smooth, takes
    it, and near each core it only sees the smooth phi_0 f / (A_i phi_i) (the lumps of ADHM data are
    BPST-shaped there to ~1e-6, measured).  Core pieces get the radial scale rho_i (a lone lump's best).
    """

    centres: np.ndarray
    scales: np.ndarray
    log_amp: np.ndarray | None
    radial: np.ndarray
    background: bool

    @classmethod
    def of(cls, layout: Layout) -> Gluing:
        c, s = layout.centres, layout.scales
        m = c.shape[0]
        if m == 1 or layout.periodic or not _BACKGROUND:
            return cls(c, s, None, _quad.radial_scales(c, s), False)
        c0 = c.mean(axis=0)
        big = _BACKGROUND_SCALE * layout.extent
        dist = np.linalg.norm(c[:, None] - c[None], axis=-1) + np.diag(np.full(m, np.inf))
        y = np.maximum(s, _CORE_FRACTION * np.min(dist, axis=1))
        p = _quad.DEFAULT_PARTITION_POWER
        log_bg = p * np.log(big) - p * np.log(np.sum((c - c0) ** 2, axis=1) + big**2)
        log_amp = log_bg - (p * np.log(s) - p * np.log(y**2 + s**2))
        return cls(np.vstack([c, c0]), np.append(s, big), np.append(log_amp, 0.0), np.append(s, big), True)

    def weights(self, points: np.ndarray, index: int, period) -> np.ndarray:
        """Partition weight (M,) of piece ``index`` at points (M, 4)."""
        return _quad.partition_weights(points, self.centres, self.scales, period=period, log_amplitudes=self.log_amp)[
            :, index
        ]


# -- levels ------------------------------------------------------------------------------------------


def _radial_count(level: int) -> int:
    """Radial Gauss-Legendre nodes of radial level l (RADIAL_COUNTS, the last entry beyond)."""
    return RADIAL_COUNTS[min(level, len(RADIAL_COUNTS) - 1)]


def angular_counts(level: int, periodic: bool, aspect: int = 1) -> tuple[int, int, int]:
    """Angular level a -> (n_psi, n_perp, time nodes).

    R^4: the isotropic S^3 parameter n = 3 + 2a (aspect 1), or n_perp = 3 + a, n_psi = aspect n_perp
    for a shell oriented towards a dominant neighbour; R^3 x S^1: S^2 parameter 2 + 2a and 8 + 4a
    trapezoid nodes in x4 (n_psi unused, 0).
    """
    if periodic:
        return 0, 2 + 2 * level, 8 + 4 * level
    if aspect <= 1:
        return 3 + 2 * level, 3 + 2 * level, 0

    return aspect * (3 + level), 3 + level, 0


def shell_size(level: int, periodic: bool, aspect: int = 1) -> int:
    """Points of one shell at angular level ``level``."""
    n_psi, n, nt = angular_counts(level, periodic, aspect)
    return 2 * n * n * nt if periodic else 2 * n_psi * n * n


# -- the adaptive state ----------------------------------------------------------------------------------


class Piece:
    """Adaptive state of one piece: radial nodes, and per radial node (shell) its angular level and value.

    r, wr: (n,) radial nodes and weights of level ``lr``; la: (n,) angular level per shell; val, mag,
    err, diff: (n,) value, sum |w f|, error estimate and last difference per shell; prev_value and
    last_radial_diff: the piece's value at the previous radial level and the difference before that.
    """

    def __init__(self, index, centre, radial_scale, dim, layout=None, gluing=None):
        self.index, self.centre, self.L, self.dim = index, centre, radial_scale, dim
        self.gluing = gluing
        self.layout, self.axis, self.aspect, self.lr = layout, None, None, -1
        self.prev_value, self.last_radial_diff, self.radial_err, self.level_diff = math.nan, math.nan, math.inf, 0.0
        self.r = self.wr = self.la = self.val = self.err = self.diff = self.mag = None

    def set_radial_level(self, lr: int, init_levels: np.ndarray) -> None:
        self.lr, self.level_diff = lr, 0.0
        self.r, self.wr = piece_radial_nodes(self, lr)
        self.la = np.asarray(init_levels, dtype=int)
        n = self.r.shape[0]
        self.val, self.err, self.diff, self.mag = np.zeros(n), np.full(n, math.inf), np.full(n, math.nan), np.zeros(n)
        self.axis, self.aspect = shell_orientation(self, self.r, self.layout)

    def sizes(self, levels) -> int:
        """Points of all shells at angular ``levels`` (n,)."""
        return sum(shell_size(int(lev), self.layout.periodic, int(a)) for lev, a in zip(levels, self.aspect))

    def levels_for(self, lr: int) -> np.ndarray:
        """Angular levels for the shells of radial level lr: the larger level of the neighbouring old shells."""
        r_new = piece_radial_nodes(self, lr)[0]
        j = np.clip(np.searchsorted(self.r, r_new), 1, self.r.shape[0] - 1)
        return np.maximum(self.la[j - 1], self.la[j])

    @property
    def value(self) -> float:
        return math.fsum(self.val)

    @property
    def angular_err(self) -> float:
        return float(np.sum(self.err))

    @property
    def error(self) -> float:
        return self.radial_err + self.angular_err

    def update_radial_error(self) -> None:
        """The radial error from the largest difference to the previous radial level seen at this level.

        The previous level's value is frozen with its angular error; refining the angles of this level
        moves the difference, and it can shrink by cancelling that frozen error rather than because the
        radial rule converged.  Measured on random ADHM data (spread 3, atol 2.5e-7 x 8 pi^2): charge 4,
        seed 1, piece 3: 6.2e-7 at the step, 1.6e-8 after the angles refined, true error 3.7e-7.  Keeping
        the largest, charge 4 (seeds 1, 4) and 5 (seed 5) end 1e-8..3e-8 from 8 pi^2 k (were 3.4e-7..5.8e-7
        under estimates of 2.2e-7..2.5e-7).  Not a proof: two levels can miss the same narrow structure (a
        neighbour's lump 5-8 rho away seen through the partition at ~1e-6 of its weight); seed 4 piece 1
        kept 4.4e-8 with a true error of 6.3e-7 at 40 nodes, and was refined only because that was enough.
        """
        if np.isfinite(self.prev_value):
            self.level_diff = max(abs(self.value - self.prev_value), self.level_diff)
            self.radial_err, _ = piece_error(self.level_diff, self.last_radial_diff, 0.0)
        else:
            self.radial_err = math.inf


def piece_radial_nodes(piece: Piece, lr: int) -> tuple[np.ndarray, np.ndarray]:
    """Radial nodes and weights of piece i at radial level lr (`instantonkit.integrals.quadrature.radial_panel_nodes`).

    One centre (or the reference rules, _PANELS False): one Gauss-Legendre rule in u.  Several: the
    u-interval is cut at r = d_ij -+ _PANEL_HALF_WIDTH rho_j around the distance of every neighbour
    farther than _PANEL_SEPARATION rho_j (measured here: cuts between overlapping lumps cost more than
    they gain), so the narrow structure a far neighbour leaves in the radial integrand gets its own panel.
    """
    n = _radial_count(lr)
    layout = piece.layout
    plain = layout is None or not 1 < layout.centres.shape[0] <= _ORIENTED_MAX_CENTRES or not _PANELS
    if plain or (piece.gluing is not None and piece.gluing.background):
        return _quad.radial_nodes(n, piece.L, piece.dim)
    d = np.linalg.norm((layout.centres - piece.centre[None, :])[:, : piece.dim], axis=1)
    others = (np.arange(d.shape[0]) != piece.index) & (d >= _PANEL_SEPARATION * layout.scales)
    cuts = np.concatenate(
        [d[others] - _PANEL_HALF_WIDTH * layout.scales[others], d[others] + _PANEL_HALF_WIDTH * layout.scales[others]]
    )
    return _quad.radial_panel_nodes(
        n, piece.L, piece.dim, cuts[cuts > 0], min_length=_PANEL_MIN_LENGTH, min_nodes=_PANEL_MIN
    )


def shell_orientation(piece: Piece, r: np.ndarray, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    """Axis (n, 4) and aspect (n,) of the S^3 rules of the shells of radii r (n,) about piece i.

    See `instantonkit.integrals.quadrature.shell_axes`; aspect 1 everywhere on R^3 x S^1, for one centre,
    and with the reference rules (_ASPECT = 1).
    """
    n = r.shape[0]
    plain = layout.periodic or not 1 < layout.centres.shape[0] <= _ORIENTED_MAX_CENTRES or _ASPECT <= 1
    if plain or (piece.gluing is not None and piece.gluing.background):
        return np.tile(np.array([0.0, 0.0, 0.0, 1.0]), (n, 1)), np.ones(n, dtype=int)
    return _quad.shell_axes(
        layout.centres,
        layout.scales,
        piece.index,
        r,
        aspect=_ASPECT,
        dominance=_DOMINANCE,
        separation=_PANEL_SEPARATION,
    )


def shell_rule(piece: Piece, j: int, level: int, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    """Points (M, 4) and weights (M,) of shell j of ``piece`` at angular level ``level``."""
    period = layout.period
    _, n, nt = angular_counts(level, layout.periodic)
    a, r, wr = piece.centre, piece.r[j], piece.wr[j]
    if period is None:
        n_psi, n, _ = angular_counts(level, False, int(piece.aspect[j]))
        dirs, wd = (
            _quad.sphere3_oriented(n_psi, n, piece.axis[j]) if layout.centres.shape[0] > 1 else _quad.sphere3_nodes(n)
        )
        pts = a[None, :] + r * dirs
        w = wr * wd
    else:
        dirs, wd = _quad.sphere2_nodes(n)
        t = a[3] - 0.5 * period + period * (np.arange(nt) + 0.5 * (nt % 2)) / nt
        xs = np.broadcast_to((a[:3][None, :] + r * dirs)[:, None, :], (dirs.shape[0], nt, 3))
        tt = np.broadcast_to(t[None, :, None], (dirs.shape[0], nt, 1))
        pts = np.concatenate([xs, tt], axis=-1).reshape(-1, 4)
        w = (wr * wd[:, None] * np.full(nt, period / nt)[None, :]).reshape(-1)
    if piece.gluing.centres.shape[0] > 1:
        w = w * piece.gluing.weights(pts, piece.index, period)
    return pts, w
