"""The adaptive integrator under `instantonkit.integrals.drivers` (floor 4): per-centre hyperspherical
rules refined where the error is, with error estimates and a decay probe at infinity.

It knows densities (callables ``points (M, 4) -> (M,) float64``) and layouts, not fields.  Each piece
of the partition of unity (one per centre) is adaptive in two ways: Gauss-Legendre radial levels in
``u`` (``r = L u / (1 - u)``; cut into panels about far neighbours' distances), and for every radial
node (a shell) its own angular level of a product rule on S^3 (or S^2 x the x4 circle), oriented with
more nodes in the angle from the neighbour that dominates the shell (quadrature.shell_axes).  Error
estimates: differences of the last two levels (radially the largest seen at the level), enlarged when
they converge slowly (``_piece_error``), plus a rounding floor.  `integrate_adaptive` runs one
integral; `final_rule` gives its final rule as points and weights, for sampling the field there."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import Any, NamedTuple

import numpy as np

from . import quadrature as _quad
from . import singular as _sing
from .singular import DivergentIntegralError, SingularDensityError

__all__ = [
    "IntegralResult",
    "DivergentIntegralError",
    "SingularDensityError",
    "FieldEvaluationError",
    "Layout",
    "integrate_adaptive",
    "final_rule",
    "MAX_RADIAL_LEVEL",
    "MAX_ANGULAR_LEVEL",
]

#: Radial Gauss-Legendre nodes per radial level: slow growth first (most lumps converge by 48-64).
_RADIAL_COUNTS = (16, 24, 32, 40, 48, 64, 80, 96, 128, 160, 192, 256)

#: Finest radial level: the last entry of _RADIAL_COUNTS (256 nodes in u).
MAX_RADIAL_LEVEL = len(_RADIAL_COUNTS) - 1

#: Finest angular level: S^3 parameter 3 + 2 * 20 = 43 (2 * 43^3 = 159,014 points per shell).
MAX_ANGULAR_LEVEL = 20

#: Decay probe: radii _PROBE_RADIUS x (field extent) x 2^j, j < _PROBE_RADII, far outside every lump.
_PROBE_RADIUS = 16.0
_PROBE_RADII = 4
#: Decay probe: rays per radius, directions drawn with a fixed seed (the same probe on every run).
_PROBE_RAYS = 8
_PROBE_SEED = 12345
#: A density falling slower than |x|^-(d + _DECAY_MARGIN) is refused: its tail error is not estimable.
_DECAY_MARGIN = 0.75
#: ... and called divergent (rather than too slow) when it falls no faster than |x|^-(d + _DIVERGENCE_MARGIN).
_DIVERGENCE_MARGIN = 0.05
#: Values below this are zero for the decay probe (far below any density that matters, above denormals).
_PROBE_ZERO = 1e-290
#: The probed tail counts as rounding noise when |f| R^d x _PROBE_AREA <= _PROBE_NOISE x (integral so far).
_PROBE_AREA = 20.0
_PROBE_NOISE = 1e-15

#: Error factor without history (no earlier difference): the difference of two levels, times 3.
_ERROR_FACTOR = 3.0
#: Smallest error factor with history: never claim better than twice the last difference.
_MIN_ERROR_FACTOR = 2.0
#: Largest convergence ratio q used in the geometric tail q / (1 - q) (keeps the factor finite).
_MAX_ERROR_RATIO = 0.9
#: Rounding floor of an error estimate, in units of eps sum |w f|.
_ROUNDING_FLOOR = 64

#: A round refines the largest errors until the rest is below this fraction of the tolerance.
_REFINE_TARGET = 0.5
#: A piece refines its shells (not its radial level) while their error exceeds this share of its tolerance ...
_ANGULAR_SHARE = 0.25
#: ... or this fraction of its radial error.
_ANGULAR_OVER_RADIAL = 0.1

#: Oriented shell rules and radial panels (see _shell_orientation and _piece_radial_nodes; _ASPECT = 1 and
#: _PANELS = False give the earlier rules, the reference of earlier measurements): aspect, dominance, separation in
#: rho_j; panel cuts at d_ij -+ _PANEL_HALF_WIDTH rho_j, panels >= _PANEL_MIN_LENGTH in u, >= _PANEL_MIN nodes.
_ASPECT, _DOMINANCE, _PANEL_SEPARATION = 4, 10.0, 6.0
_PANELS, _PANEL_HALF_WIDTH, _PANEL_MIN_LENGTH, _PANEL_MIN = True, 2.0, 0.02, 6
#: ... used for layouts of at most this many centres: measured on random ADHM data, both gain 4.6x at
#: k = 2 (1e-10: 0.87M points, converged, vs 4M not) and lose at k = 4 and 8 (bench_integrals).
_ORIENTED_MAX_CENTRES = 2

_EPS = float(np.finfo(np.float64).eps)

#: The search for singular points (`instantonkit.integrals.singular`) runs once: when the error has not halved for
#: this many rounds, or when the integral stops unconverged.
_STALL_ROUNDS = 6


# -- errors and results ----------------------------------------------------------------------------


class FieldEvaluationError(RuntimeError):
    """Evaluating the field failed (an exception inside the field, or a non-finite value)."""


@dataclasses.dataclass(frozen=True)
class IntegralResult:
    """An integral with its error estimate.

    quantity: what was integrated; value, error: the estimate and its estimated absolute error;
    evaluations: density evaluations used (all rounds); rule: the rule of the final round;
    converged: whether ``error <= max(atol, rtol |value|)``; message: why not (budget), else "";
    route: 'volume' (the adaptive volume rule) or 'osborn' (Osborn's flux route, `instantonkit.integrals.flux`).
    """

    quantity: str
    value: float
    error: float
    evaluations: int
    rule: str
    converged: bool
    message: str = ""
    route: str = "volume"

    def __float__(self) -> float:
        return float(self.value)

    def __str__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        text = f"{self.quantity} = {self.value:.12g} +- {self.error:.1e} ({state}, {self.evaluations:,} points)"
        return text + (f"; {self.message}" if self.message else "")

    def to_dict(self) -> dict:
        """Plain-dict form (floats, ints, strings, bools)."""
        return dataclasses.asdict(self)


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


#: Background gluing (R^4, two or more centres; see _Gluing): OFF by default, measured worse.  Random ADHM data
#: (seed = k), rtol 1e-10, 0.6-1M points: k = 3 true error 1.8e-8 (plain gluing) vs 3e-8..8.5e-6 (background,
#: core fraction 0.3..0.7, scale 1..2); k = 4 1.0e-7 vs 1.2e-6..4.8e-5: the background piece takes the lumps'
#: tails beyond y_i (10-25% of Q) as features of size y_i seen from the mean centre.  Core radius y_i = _CORE_FRACTION x (distance to the nearest other centre), at least rho_i, and
#: the background scale R = _BACKGROUND_SCALE x the layout's extent.
_BACKGROUND, _CORE_FRACTION, _BACKGROUND_SCALE = False, 0.3, 1.0


@dataclasses.dataclass(frozen=True)
class _Gluing:
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
    def of(cls, layout: Layout) -> _Gluing:
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


# -- decay at infinity -----------------------------------------------------------------------------


def _check_decay(name: str, values: np.ndarray, radii: np.ndarray, layout: Layout, magnitude: float) -> None:
    """Raise DivergentIntegralError when the probed density falls slower than |x|^-(d + _DECAY_MARGIN)."""
    dim = layout.dim
    p_exp = _quad.decay_exponent(values, radii, dim, magnitude, zero=_PROBE_ZERO, area=_PROBE_AREA, noise=_PROBE_NOISE)
    if p_exp is None or p_exp >= dim + _DECAY_MARGIN:
        return
    verdict = "diverges" if p_exp <= dim + _DIVERGENCE_MARGIN else "converges too slowly to estimate"
    raise DivergentIntegralError(
        f"the {name} density falls like |x|^-{p_exp:.2f} along rays at radii {radii[0]:.3g}..{radii[-1]:.3g} "
        f"about {np.round(layout.centres.mean(0), 6).tolist()}; its integral over "
        f"{'R^3 x S^1' if layout.periodic else 'R^4'} {verdict} (it needs a fall faster than |x|^-{dim + 1})"
    )


# -- levels and error estimates ------------------------------------------------------------------------


def _piece_error(diff: float, previous: float, magnitude: float) -> tuple[float, float]:
    """Error estimate of the finer of two levels, and |diff| to remember.

    |diff| bounds the error of the coarser level and, when the levels converge fast, generously that
    of the finer one.  To stay an upper bound when they converge slowly or erratically, the estimate is
    |diff| max(2, 3 q / (1 - q)) with q = |diff| / |previous diff| (<= 0.9; the geometric tail is
    |diff| q / (1 - q)), or 3 |diff| without history, plus a rounding floor 64 eps sum |w f|.
    """
    d = abs(diff)
    factor = _ERROR_FACTOR
    if np.isfinite(previous) and previous > 0:
        q = min(d / previous, _MAX_ERROR_RATIO)
        factor = max(_MIN_ERROR_FACTOR, _ERROR_FACTOR * q / (1.0 - q))
    return d * factor + _ROUNDING_FLOOR * _EPS * magnitude, d


def _radial_count(level: int) -> int:
    """Radial Gauss-Legendre nodes of radial level l (_RADIAL_COUNTS, the last entry beyond)."""
    return _RADIAL_COUNTS[min(level, len(_RADIAL_COUNTS) - 1)]


def _angular_counts(level: int, periodic: bool, aspect: int = 1) -> tuple[int, int, int]:
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


def _shell_size(level: int, periodic: bool, aspect: int = 1) -> int:
    """Points of one shell at angular level ``level``."""
    n_psi, n, nt = _angular_counts(level, periodic, aspect)
    return 2 * n * n * nt if periodic else 2 * n_psi * n * n


def _greedy(errors: np.ndarray, target: float) -> list[int]:
    """Indices of the largest errors, largest first, until the rest sums to <= target."""
    errors = np.asarray(errors, dtype=np.float64)
    rest = float(np.sum(errors))
    out = []
    for j in np.argsort(-errors):
        if rest <= target:
            break
        out.append(int(j))
        rest = float(np.sum(np.delete(errors, out)))
    return out


# -- the adaptive state ----------------------------------------------------------------------------------


class _Piece:
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
        self.r, self.wr = _piece_radial_nodes(self, lr)
        self.la = np.asarray(init_levels, dtype=int)
        n = self.r.shape[0]
        self.val, self.err, self.diff, self.mag = np.zeros(n), np.full(n, math.inf), np.full(n, math.nan), np.zeros(n)
        self.axis, self.aspect = _shell_orientation(self, self.r, self.layout)

    def sizes(self, levels) -> int:
        """Points of all shells at angular ``levels`` (n,)."""
        return sum(_shell_size(int(lev), self.layout.periodic, int(a)) for lev, a in zip(levels, self.aspect))

    def levels_for(self, lr: int) -> np.ndarray:
        """Angular levels for the shells of radial level lr: the larger level of the neighbouring old shells."""
        r_new = _piece_radial_nodes(self, lr)[0]
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
            self.radial_err, _ = _piece_error(self.level_diff, self.last_radial_diff, 0.0)
        else:
            self.radial_err = math.inf


def _piece_radial_nodes(piece: _Piece, lr: int) -> tuple[np.ndarray, np.ndarray]:
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


class _ShellRequest(NamedTuple):
    """One shell to evaluate: kind 'lo'/'hi' (the first pair of levels of a new shell) or 'up' (next level)."""

    piece: _Piece
    kind: str
    shell: int
    level: int


class _Plan(NamedTuple):
    """A piece's refinement in one round: kind 'angular' (shells: indices) or 'radial' (shells: initial levels)."""

    piece: _Piece
    kind: str
    shells: Any


@dataclasses.dataclass
class _State:
    """The state of one adaptive integral: its layout, pieces and the points spent."""

    layout: Layout
    pieces: list
    evaluations: int = 0
    rounds: int = 0
    top: list = dataclasses.field(default_factory=list)
    probes: int = 0

    @classmethod
    def start(cls, layout: Layout) -> _State:
        g = _Gluing.of(layout)
        pieces = [_Piece(i, g.centres[i], float(g.radial[i]), layout.dim, layout, g) for i in range(g.centres.shape[0])]
        return cls(layout, pieces)

    @property
    def value(self) -> float:
        return math.fsum(p.value for p in self.pieces)

    @property
    def error(self) -> float:
        return math.fsum(p.error for p in self.pieces)


def _shell_orientation(piece: _Piece, r: np.ndarray, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
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


def _shell_rule(piece: _Piece, j: int, level: int, layout: Layout) -> tuple[np.ndarray, np.ndarray]:
    """Points (M, 4) and weights (M,) of shell j of ``piece`` at angular level ``level``."""
    period = layout.period
    _, n, nt = _angular_counts(level, layout.periodic)
    a, r, wr = piece.centre, piece.r[j], piece.wr[j]
    if period is None:
        n_psi, n, _ = _angular_counts(level, False, int(piece.aspect[j]))
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


# -- the steps of one integral ---------------------------------------------------------------------------


def _new_level_requests(piece: _Piece, lr: int, init) -> list[_ShellRequest]:
    """Move ``piece`` to radial level lr; each new shell is evaluated at two angular levels (lo, lo + 1)."""
    piece.set_radial_level(lr, init)
    reqs = []
    for j in range(piece.r.shape[0]):
        lo = max(int(piece.la[j]) - 1, 0)  # the pair (lo, lo + 1) gives the first error estimate
        piece.la[j] = lo + 1
        reqs += [_ShellRequest(piece, "lo", j, lo), _ShellRequest(piece, "hi", j, lo + 1)]
    return reqs


def _evaluate(state: _State, density, requests: Sequence[_ShellRequest], extra=None):
    """All shells of a round (and ``extra`` points) in one density call.

    Returns ([(sum w f, sum |w f|) per request], density at ``extra``); adds the points to the state.
    """
    chunks = [_shell_rule(q.piece, q.shell, q.level, state.layout) for q in requests]
    sizes = [c[0].shape[0] for c in chunks]
    allpts = [c[0] for c in chunks] + ([extra] if extra is not None else [])
    pts = np.concatenate(allpts) if allpts else np.zeros((0, 4))
    vals = density(pts) if allpts else np.zeros(0)
    state.top = _sing.keep_peaks(state.top, pts, vals, 0.25 * float(np.min(state.layout.scales)))
    out, start = [], 0
    for (_, w), m in zip(chunks, sizes):
        v = vals[start : start + m]
        out.append((float(np.sum(w * v)), float(np.sum(np.abs(w * v)))))
        start += m
    state.evaluations += int(sum(sizes) + (0 if extra is None else extra.shape[0]))
    return out, vals[start:]


def _singularities(state: _State, density, name: str) -> str:
    """ "" or the sentence naming an integrable singular point; SingularDensityError for a non-integrable one."""
    mag = sum(float(np.sum(p.mag)) for p in state.pieces)
    note, spent = _sing.search(density, state.top, state.layout.centres, float(np.min(state.layout.scales)), mag, name)
    state.probes += spent
    return note


def _apply(requests: Sequence[_ShellRequest], sums) -> None:
    """Store the shell sums in their pieces, with the error estimate of each shell's last two levels."""
    lows = {}
    for (p, kind, j, lev), (v, mag) in zip(requests, sums):
        if kind == "lo":
            lows[(id(p), j)] = v
        elif kind == "hi":
            v0 = lows[(id(p), j)]
            p.err[j], p.diff[j] = _piece_error(v - v0, math.nan, mag)
            p.val[j], p.mag[j] = v, mag
        else:  # 'up'
            p.err[j], p.diff[j] = _piece_error(v - p.val[j], p.diff[j], mag)
            p.val[j], p.mag[j], p.la[j] = v, mag, lev


def _level_need(piece: _Piece, lr: int, init, layout: Layout) -> int:
    """Points of moving ``piece`` to radial level lr with initial angular levels ``init`` (lo and hi per shell)."""
    r_new = _piece_radial_nodes(piece, lr)[0]
    asp = _shell_orientation(piece, r_new, layout)[1]
    return sum(
        _shell_size(int(max(lev - 1, 0)), layout.periodic, int(a))
        + _shell_size(int(max(lev, 1)), layout.periodic, int(a))
        for lev, a in zip(init, asp)
    )


def _initial_rounds(state: _State, density, name: str, max_points: int) -> str:
    """Radial levels 0 and 1 of every piece (each shell at two angular levels), and the decay probe.

    Returns "" or, when radial level 1 does not fit ``max_points``, the budget message (the integral
    then stops after level 0 with an infinite error estimate).
    Raises ValueError naming max_points when not even level 0 and the probe fit.
    """
    radii = _PROBE_RADIUS * state.layout.extent * 2.0 ** np.arange(_PROBE_RADII)  # rays about the mean centre
    probe = _quad.ray_points(state.layout.centres.mean(axis=0), radii, state.layout.dim, _PROBE_RAYS, _PROBE_SEED)
    init0 = [np.ones(_piece_radial_nodes(p, 0)[0].shape[0], dtype=int) for p in state.pieces]
    need0 = probe.shape[0] + sum(_level_need(p, 0, i0, state.layout) for p, i0 in zip(state.pieces, init0))
    if need0 > max_points:
        raise ValueError(
            f"max_points must be at least {need0:,} for this layout of {len(state.pieces)} centre(s) "
            f"(the first round); found {max_points:,}"
        )
    reqs0 = []
    for p, i0 in zip(state.pieces, init0):
        reqs0 += _new_level_requests(p, 0, i0)
    res0, probe_vals = _evaluate(state, density, reqs0, probe)
    magnitude = float(sum(mag for q, (_, mag) in zip(reqs0, res0) if q.kind == "hi"))
    _check_decay(name, probe_vals, radii, state.layout, magnitude)
    _apply(reqs0, res0)
    for p in state.pieces:
        p.prev_value = p.value
    inits = [p.levels_for(1) for p in state.pieces]
    need1 = sum(_level_need(p, 1, init, state.layout) for p, init in zip(state.pieces, inits))
    if state.evaluations + need1 > max_points:
        return (
            f"budget spent: the second round needs {need1:,} more points, beyond max_points = {max_points:,} "
            f"({state.evaluations:,} used); no error estimate of the radial rule yet"
        )
    reqs1 = []
    for p, init in zip(state.pieces, inits):
        reqs1 += _new_level_requests(p, 1, init)
    res1, _ = _evaluate(state, density, reqs1)
    _apply(reqs1, res1)
    for p in state.pieces:
        p.update_radial_error()
    state.rounds = 1
    return ""


def _plan_round(state: _State, tol: float) -> tuple[list[_Piece], list[_Plan], int]:
    """Choose the pieces that carry the error and how each refines: (chosen, plans, points needed).

    A piece refines the angular level of its worst shells while their error is not small beside its
    share of the tolerance and its radial error (or at the finest radial level); else it moves to the
    next radial level, whose new shells start at the levels of their old neighbours.
    """
    periodic = state.layout.periodic
    errs = np.array([p.error for p in state.pieces])
    chosen = [state.pieces[i] for i in _greedy(errs, _REFINE_TARGET * tol)]
    share = tol / len(state.pieces)
    plans, need = [], 0
    for p in chosen:
        if p.angular_err > max(_ANGULAR_SHARE * share, _ANGULAR_OVER_RADIAL * p.radial_err) or p.lr >= MAX_RADIAL_LEVEL:
            idx = [j for j in _greedy(p.err, _REFINE_TARGET * p.angular_err) if p.la[j] < MAX_ANGULAR_LEVEL]
            if idx:  # worst shells all at the finest angular level: refine radially, or nothing is left here
                plans.append(_Plan(p, "angular", idx))
                need += sum(_shell_size(int(p.la[j]) + 1, periodic, int(p.aspect[j])) for j in idx)
                continue
        if p.lr < MAX_RADIAL_LEVEL:
            init = p.levels_for(p.lr + 1)
            plans.append(_Plan(p, "radial", init))
            need += _level_need(p, p.lr + 1, init, state.layout)
    return chosen, plans, need


def _plan_requests(plans: Sequence[_Plan]) -> list[_ShellRequest]:
    """The shells of a round's plans (a radial step also remembers the piece's value before it)."""
    reqs: list[_ShellRequest] = []
    for p, kind, arg in plans:
        if kind == "angular":
            reqs += [_ShellRequest(p, "up", j, int(p.la[j]) + 1) for j in arg]
        else:
            old = p.value
            p.last_radial_diff = abs(old - p.prev_value) if np.isfinite(p.prev_value) else math.nan
            p.prev_value = old
            reqs += _new_level_requests(p, p.lr + 1, arg)
    return reqs


def _stop_message(plans, need: int, state: _State, max_points: int, error: float, tol: float) -> str:
    """Why refinement stops short of the tolerance ("" when the next round fits the budget)."""
    if plans and need > 0 and state.evaluations + need <= max_points:
        return ""
    if plans and need > 0:
        return (
            f"budget spent: the next round needs {need:,} more points, beyond max_points = {max_points:,} "
            f"({state.evaluations:,} used); estimated error {error:.1e} > tolerance {tol:.1e}"
        )
    return f"finest levels reached; estimated error {error:.1e} > tolerance {tol:.1e}"


def _rule_description(state: _State) -> str:
    """One line naming the final rule: domain, pieces, radial nodes and angular parameters per piece."""
    layout, periodic = state.layout, state.layout.periodic
    kind = f"R^3 x S^1 (period {layout.period:g})" if periodic else "R^4"
    parts = []
    for p in state.pieces:
        lo, hi = int(p.la.min()), int(p.la.max())
        n_lo, n_hi = _angular_counts(lo, periodic)[1], _angular_counts(hi, periodic)[1]
        sphere = "S^2 x circle" if periodic else "S^3"
        parts.append(f"{p.r.shape[0]} radial nodes (L = {p.L:.3g}), {sphere} parameter {n_lo}..{n_hi}")
    k = len(state.pieces)
    return (
        f"{kind}, {k} piece(s) glued by a partition of unity; Gauss-Legendre in u, r = L u/(1-u), "
        f"product rules per shell, adaptive per shell: " + "; ".join(parts[:4]) + ("; ..." if k > 4 else "")
    )


def final_rule(state: _State, max_points: int) -> _quad.Rule:
    """The final rule with every shell at min(its angular level, cap), the largest cap giving <= max_points."""
    cap = MAX_ANGULAR_LEVEL
    while cap > 0:
        total = sum(p.sizes(np.minimum(p.la, cap)) for p in state.pieces)
        if total <= max_points:
            break
        cap -= 1
    pts, wts = [], []
    for p in state.pieces:
        for j, lev in enumerate(np.minimum(p.la, cap)):
            a, w = _shell_rule(p, j, int(lev), state.layout)
            pts.append(a)
            wts.append(w)
    desc = _rule_description(state) + (f"; angular levels capped at {cap}" if cap < MAX_ANGULAR_LEVEL else "")
    return _quad.Rule(np.concatenate(pts), np.concatenate(wts), desc)


def integrate_adaptive(
    density, name: str, layout: Layout, *, rtol: float, atol: float, max_points: int, sink
) -> tuple[IntegralResult, _State]:
    """One adaptive integral: the initial rounds, then planned rounds until converged or stopped.

    Every round evaluates at least one shell (a round that would add none stops with its reason), so
    there are at most max_points / (smallest shell) rounds and the time is bounded by the budget's
    evaluations; a stalled or unconverged integral is searched once for a singular point
    (`instantonkit.integrals.singular.search`, SingularDensityError when it is not integrable)."""
    state = _State.start(layout)
    first = _initial_rounds(state, density, name, max_points)
    converged, message, note, searched, best, stalled = False, "", "", False, math.inf, 0
    max_rounds = max_points // _shell_size(0, layout.periodic)  # each round evaluates >= 1 shell of >= this
    while True:
        value, error = state.value, state.error
        tol = max(atol, rtol * abs(value))
        if first:
            message = first
            break
        if sink is not None:
            sink(
                dict(
                    quantity=name,
                    round=state.rounds,
                    evaluations=state.evaluations,
                    value=value,
                    error=error,
                    done=False,
                )
            )
        if error <= tol:
            converged = True
            break
        best, stalled = (error, 0) if error < 0.5 * best else (best, stalled + 1)
        if stalled >= _STALL_ROUNDS and not searched:  # the error does not fall: a singular point?
            note, searched = _singularities(state, density, name), True
        chosen, plans, need = _plan_round(state, tol)
        message = _stop_message(plans, need, state, max_points, error, tol)
        if state.rounds >= max_rounds:
            message = f"{state.rounds:,} refinement rounds (the most {max_points:,} points allow); error {error:.1e}"
        if message:
            break
        reqs = _plan_requests(plans)
        sums, _ = _evaluate(state, density, reqs)
        _apply(reqs, sums)
        for p in chosen:
            p.update_radial_error()
        state.rounds += 1
    if not converged and not searched:
        note = _singularities(state, density, name)
    if note:
        message = f"{message}; {note} ({state.probes:,} probe points beside the budget)"
    if sink is not None:
        sink(
            dict(quantity=name, round=state.rounds, evaluations=state.evaluations, value=value, error=error, done=True)
        )
    res = IntegralResult(
        name, float(value), float(error), state.evaluations, _rule_description(state), converged, message
    )
    return res, state
