"""Where a density is singular, and how fast it grows there (floor 1): the local power law |f| ~ r^-p.

It knows densities (callables ``points (M, 4) -> (M,) float64``), not fields.  `locate` climbs
from a start point to the largest |f| nearby by shrinking random clouds (a (1 + lambda) search whose
step follows its last move); `power_law` fits log <|f|> against log r on rays about a point, r
from ``scale / 8`` down to 1e-9 of the position's size, and returns the slope -p with the spread of
the local slopes.  A density ~ r^-p is integrable about a point of R^4 (or R^3 x S^1, locally R^4)
exactly when p < 4 (the volume element is r^3 dr, common practice).  `diagnose` runs both from
a few start points and gives the `Singularity` s found.

What it usually means for a potential written by hand: in singular gauge A_mu = -1/2 eta-bar_{a mu nu}
d_nu log(phi) u_a (conventions module), the poles of phi are pure gauge only for the factor -1/2 and
that symbol; another factor or sign leaves F ~ 1/r^2 there, s ~ r^-4, whose integral diverges
logarithmically ('t Hooft, Phys. Rev. D 14 (1976) 3432; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence

import numpy as np

__all__ = [
    "DivergentIntegralError",
    "SingularDensityError",
    "Singularity",
    "LOCAL_DIM",
    "locate",
    "power_law",
    "diagnose",
    "keep_peaks",
    "search",
    "HAND_WRITTEN_CAUSE",
]

#: Dimension of the neighbourhood of a point (R^4, or R^3 x S^1 locally): |f| ~ r^-p is integrable iff p < 4.
LOCAL_DIM = 4
#: A fitted power p counts as growth (a singular point) from this value on.
_GROWING = 1.0
#: The local slopes of an honest power law agree to this spread at least (smooth peaks fit p ~ 0 anyway).
_MIN_SPREAD = 0.02
#: Search: cloud size, steps, and the rays and radii of the fit (2^-3 .. 2^-_RADII_MAX times the scale).
_CLOUD, _CALL, _STEPS, _RAYS, _RADII_MIN, _RADII_MAX, _FIT_RADII = 32, 8192, 32, 12, 3, 34, 8
_SEED = 2718
#: keep_peaks keeps this many places; search runs only when max |f| scale^4 > _SUSPECT x sum |w f| (a spike).
_TOP, _SUSPECT = 12, 10.0

#: What a non-integrable point usually means for a potential written by hand.
HAND_WRITTEN_CAUSE = (
    "for a hand-written potential this usually means a wrong normalisation or sign: in singular gauge "
    "A = -1/2 eta-bar d log(phi) u is pure gauge at the poles of phi only with exactly that factor and symbol; "
    "any other factor or sign leaves F ~ 1/r^2 there (s ~ r^-4, a logarithmically divergent action)"
)


class DivergentIntegralError(ValueError):
    """The density falls too slowly at infinity, or grows too fast about a point, for its integral to exist."""


@dataclasses.dataclass(frozen=True)
class Singularity:
    """A point where |f| grows like r^-power; integrable iff power < 4 (within the fit's spread).

    point: (4,) float64; power, spread: the fitted p and the spread of the local slopes; radii: the
    smallest and largest radius of the fit; value: |f| at the smallest radius.
    """

    point: np.ndarray
    power: float
    spread: float
    radii: tuple[float, float]
    value: float

    @property
    def integrable(self) -> bool:
        """p < 4 beyond the fit's spread (the borderline p = 4 is log-divergent)."""
        return self.power + max(2.0 * self.spread, 0.05) < LOCAL_DIM

    def describe(self, name: str) -> str:
        """One sentence naming the point, the power law and what it means for the integral."""
        where = "(" + ", ".join(f"{v:.6g}" for v in self.point) + ")"
        law = f"|{name} density| ~ r^-{self.power:.2f} (+- {self.spread:.2f})"
        span = f"fitted on r = {self.radii[0]:.1e}..{self.radii[1]:.1e} about it"
        if self.integrable:
            return f"the {name} density is singular at x = {where}: {law}, {span}; integrable (p < 4) but slow"
        return (
            f"the {name} density is not integrable at x = {where}: {law}, {span}, and a density growing like "
            f"r^-p with p >= 4 has no finite integral in four dimensions"
        )


def _safe(density, pts: np.ndarray) -> tuple[np.ndarray, int]:
    """|density| at pts (non-finite or failing evaluations give nan), and the points spent."""
    try:
        v = np.abs(np.asarray(density(pts), dtype=np.float64))
    except (ValueError, RuntimeError, ArithmeticError):
        v = np.full(pts.shape[0], np.nan)
    return v, pts.shape[0]


def locate(density, starts: np.ndarray, scale: float, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, int]:
    """Climb from each start (m, 4) to the largest |f| nearby, all in one density call per step.

    Returns the points (m, 4), their step sizes at the end (m,) (about their distance to a pole) and
    the points spent.  Each step samples a Gaussian cloud about every point; a better sample moves the
    point and sets the step to about the move, else the step halves.
    """
    best = np.array(starts, dtype=np.float64)
    m = best.shape[0]
    cloud = max(_CLOUD, _CALL // m)
    fbest, spent = _safe(density, best)
    fbest = np.where(np.isfinite(fbest), fbest, 0.0)
    h = np.full(m, float(scale) / 4.0)
    floor = 1e-10 * (np.max(np.abs(best), axis=1) + float(scale))
    for _ in range(_STEPS):
        pts = best[:, None, :] + h[:, None, None] * rng.normal(size=(m, cloud, 4))
        v, n = _safe(density, pts.reshape(-1, 4))
        spent += n
        v = np.where(np.isfinite(v), v, -1.0).reshape(m, cloud)
        i = np.argmax(v, axis=1)
        vi = v[np.arange(m), i]
        up = vi > fbest
        move = np.linalg.norm(pts[np.arange(m), i] - best, axis=1)
        h = np.where(up, np.clip(2.0 * move, h / 4.0, 2.0 * h), h / 2.0)
        best = np.where(up[:, None], pts[np.arange(m), i], best)
        fbest = np.where(up, vi, fbest)
        if np.all(h < floor):
            break
    return best, h, spent


def power_law(density, point: np.ndarray, scale: float, inner: float, rng) -> tuple[Singularity | None, int]:
    """Fit log <|f|> over rays against log r about ``point``, r from scale / 8 down to max(inner, 1e-9 |x|)."""
    dirs = rng.normal(size=(_RAYS, 4))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    lo = max(100.0 * inner, 1e-9 * (float(np.max(np.abs(point))) + float(scale)))
    radii = float(scale) * 2.0 ** -np.arange(_RADII_MIN, _RADII_MAX)
    radii = radii[radii >= lo]
    if radii.shape[0] < 4:
        return None, 0
    pts = (point[None, None, :] + radii[:, None, None] * dirs[None]).reshape(-1, 4)
    v, spent = _safe(density, pts)
    mean = np.nanmean(v.reshape(radii.shape[0], _RAYS), axis=1)
    ok = np.isfinite(mean) & (mean > 0)
    if np.count_nonzero(ok) < 4:
        return None, spent
    lr, lf = np.log(radii[ok])[-_FIT_RADII:], np.log(mean[ok])[-_FIT_RADII:]
    slope = np.polyfit(lr, lf, 1)[0]
    local = np.diff(lf) / np.diff(lr)
    spread = max(float(np.std(local)), _MIN_SPREAD)
    found = Singularity(np.asarray(point), float(-slope), spread, (float(np.exp(lr[-1])), float(np.exp(lr[0]))), 0.0)
    found = dataclasses.replace(found, value=float(np.exp(lf[-1])))
    return found, spent


def diagnose(
    density: Callable[[np.ndarray], np.ndarray], starts: Sequence[np.ndarray], scale: float, limit: int = 6
) -> tuple[list[Singularity], int]:
    """Singular points reached from up to ``limit`` distinct starts, strongest first, and the points spent.

    A point counts when its fitted power is at least 1 (clear growth) and the local slopes agree
    (spread below a quarter of the power); duplicates (within 1e-6 of the scale) are merged.
    """
    rng = np.random.default_rng(_SEED)
    tried: list = []
    for s in starts:
        s = np.asarray(s, dtype=np.float64)
        if len(tried) < limit and all(np.linalg.norm(s - t) >= 0.05 * scale for t in tried):
            tried.append(s)
    if not tried:
        return [], 0
    points, inner, spent = locate(density, np.array(tried), scale, rng)
    found: list[Singularity] = []
    for point, h in zip(points, inner):
        if any(np.linalg.norm(point - f.point) < 1e-6 * scale + 1e3 * h for f in found):
            continue
        sing, m = power_law(density, point, scale, h, rng)
        spent += m
        if sing is not None and sing.power >= _GROWING and sing.spread < 0.25 * sing.power:
            found.append(sing)
    found.sort(key=lambda f: -f.power)
    return found, spent


class SingularDensityError(DivergentIntegralError):
    """The density grows like r^-p with p >= 4 about a point: no finite integral (``singularity`` says where)."""

    def __init__(self, message: str, singularity: Singularity):
        super().__init__(message)
        self.singularity = singularity


def keep_peaks(top: list, pts: np.ndarray, vals: np.ndarray, gap: float) -> list:
    """The largest |f| seen as [(|f|, point (4,))], at most _TOP of them, at places ``gap`` apart or more."""
    a = np.abs(vals)
    if a.shape[0] == 0:
        return top
    idx = np.argpartition(-a, min(8 * _TOP, a.shape[0]) - 1)[: 8 * _TOP]
    kept: list = []
    for v, x in sorted(top + [(float(a[i]), pts[i]) for i in idx], key=lambda t: -t[0]):
        if len(kept) < _TOP and np.isfinite(v) and all(np.linalg.norm(x - y) >= gap for _, y in kept):
            kept.append((v, x))
    return kept


def search(density, top: list, centres: np.ndarray, scale: float, magnitude: float, name: str) -> tuple[str, int]:
    """Singular points reached from the peaks ``top`` and the ``centres``: ("" or a note, points spent).

    Runs only when the largest |f| seen is a spike (max |f| scale^4 > _SUSPECT x ``magnitude``, the
    integral's sum |w f|).  Raises SingularDensityError naming every non-integrable point (p >= 4),
    its power law and `HAND_WRITTEN_CAUSE`; returns the description of an integrable one.
    """
    if not top or not top[0][0] * scale**4 > _SUSPECT * max(magnitude, 1e-300):
        return "", 0
    found, spent = diagnose(density, [x for _, x in top] + list(centres), scale)
    bad = [f for f in found if not f.integrable]
    if bad:
        raise SingularDensityError("; ".join(f.describe(name) for f in bad) + "; " + HAND_WRITTEN_CAUSE, bad[0])
    return (found[0].describe(name) if found else ""), spent
