"""Hypothesis strategies for instantonkit objects: quaternions, points, SU(2) matrices and ADHM data.

For users who test their own code on instanton configurations, and for instantonkit's own tests::

    from hypothesis import given
    from instantonkit.testing import adhm_data, points

    @given(adhm_data(k=st.integers(1, 3)), points())
    def test_something(data, x): ...

This module imports ``hypothesis`` (a test extra, ``pip install instantonkit[test]``); the package
itself never imports it, so ``import instantonkit`` works without hypothesis installed.
All arrays are float64 (complex128 for matrices) numpy arrays.
"""

from __future__ import annotations

import numpy as np
from hypothesis import assume
from hypothesis import strategies as st

from .adhm.moduli import multi_instanton, random_adhm
from .adhm.quaternionic import ADHMData
from .adhm.unitary import UnitaryADHMData
from .adhm.unitary_moduli import random_unitary_adhm
from .core import _validate
from .core import quaternion as qt

__all__ = [
    "finite_floats",
    "quaternions",
    "unit_quaternions",
    "imaginary_quaternions",
    "points",
    "su2_matrices",
    "orthogonal_matrices",
    "adhm_data",
    "unitary_adhm_data",
]

#: Quaternions drawn by `unit_quaternions` come from vectors at least this long (then normalised).
_MIN_RAW_NORM = 1e-3

#: Drawn centres closer than this are redrawn (nearly coinciding centres make the constraint solve fail).
_MIN_CENTRE_DISTANCE = 1e-3


def _as_strategy(value) -> st.SearchStrategy:
    """A strategy stays a strategy; a plain value becomes ``st.just(value)``."""
    return value if isinstance(value, st.SearchStrategy) else st.just(value)


def finite_floats(bound: float = 10.0) -> st.SearchStrategy:
    """Finite float64 numbers in ``[-bound, bound]`` (no NaN, no inf, no subnormals)."""
    bound = _validate.positive_float("bound", bound)
    return st.floats(-bound, bound, allow_nan=False, allow_infinity=False, allow_subnormal=False)


def _vectors(size: int, bound: float) -> st.SearchStrategy:
    return st.lists(finite_floats(bound), min_size=size, max_size=size).map(lambda v: np.asarray(v, dtype=np.float64))


def quaternions(bound: float = 10.0) -> st.SearchStrategy:
    """General quaternions ``(w, x, y, z)`` with components in ``[-bound, bound]``; draws (4,) float64."""
    return _vectors(4, bound)


def unit_quaternions() -> st.SearchStrategy:
    """Unit quaternions (points of SU(2)); draws (4,) float64 with ``|q| = 1`` to rounding.

    Drawn as a normalised vector of components in [-1, 1] (vectors shorter than 1e-3 are rejected).
    """

    def normalise(v):
        n = float(np.linalg.norm(v))
        assume(n >= _MIN_RAW_NORM)
        return v / n

    return _vectors(4, 1.0).map(normalise)


def imaginary_quaternions(max_angle: float = 3.0) -> st.SearchStrategy:
    """Pure imaginary quaternions ``(0, x, y, z)`` with ``|v| <= max_angle``; draws (4,) float64."""
    if not (0 < max_angle < np.pi):
        raise ValueError(f"max_angle must lie in (0, pi) for exp/log round trips; found {max_angle!r}")

    def clip(v):
        n = float(np.linalg.norm(v))
        out = np.concatenate([[0.0], v if n <= max_angle else v * (max_angle / n)])
        return out

    return _vectors(3, max_angle).map(clip)


def points(bound: float = 5.0, shape: tuple[int, ...] = ()) -> st.SearchStrategy:
    """Euclidean points ``(x1, x2, x3, x4)`` with coordinates in ``[-bound, bound]``.

    Draws shape + (4,) float64 (shape ``()`` gives a single point (4,)).
    """
    size = int(np.prod(shape, dtype=int)) * 4
    return _vectors(size, bound).map(lambda v: v.reshape(tuple(shape) + (4,)))


def su2_matrices() -> st.SearchStrategy:
    """SU(2) matrices (unitary, det 1): images of unit quaternions; draws (2, 2) complex128."""
    return unit_quaternions().map(lambda q: np.asarray(qt.to_matrix(q)))


def orthogonal_matrices(k: int) -> st.SearchStrategy:
    """Real orthogonal ``k x k`` matrices (both determinants) from the QR of a seeded Gaussian; (k, k)."""
    k = _validate.positive_int("k", k)

    def build(seed):
        rng = np.random.default_rng(seed)
        q, r = np.linalg.qr(rng.normal(size=(k, k)))
        return q * np.sign(np.diag(r))[None, :]

    return st.integers(0, 2**32 - 1).map(build)


@st.composite
def _adhm_from_moduli(draw, k: int, rank: int, spread: float, size_range):
    centers = np.stack([draw(points(bound=spread)) for _ in range(k)])
    sizes = np.asarray([draw(st.floats(*size_range, allow_nan=False, allow_infinity=False)) for _ in range(k)])
    raw = np.stack([draw(_vectors(4 * rank, 1.0)).reshape(rank, 4) for _ in range(k)])
    norms = np.sqrt(np.sum(raw**2, axis=(1, 2)))
    assume(bool(np.all(norms >= _MIN_RAW_NORM)))
    if k > 1:
        dist = np.linalg.norm(centers[:, None] - centers[None], axis=-1) + np.diag(np.full(k, np.inf))
        assume(float(np.min(dist)) > _MIN_CENTRE_DISTANCE)
    try:
        return multi_instanton(centers, sizes, raw / norms[:, None, None], rank=rank)
    except ValueError:  # no exact solution found for this draw: let hypothesis draw another
        assume(False)


#: Default charges drawn by `adhm_data` (small k keeps the constraint solve fast).
_DEFAULT_K = st.integers(1, 3)


def adhm_data(
    k=_DEFAULT_K,
    rank=1,
    *,
    chirality=1,
    source: str = "seed",
    spread: float = 2.0,
    size_range=(0.5, 1.5),
) -> st.SearchStrategy:
    """Valid ADHM data (`instantonkit.adhm.quaternionic.ADHMData`) of drawn charge and rank.

    k, rank, chirality: ints or strategies of ints (k >= 1, rank >= 1, chirality +1 or -1).
    source: ``"seed"`` draws a seed for `instantonkit.adhm.quaternionic.random_adhm` (fast, shrinks to
    seed 0); ``"moduli"`` draws centres (coordinates in ``[-spread, spread]``), sizes in
    ``size_range`` and orientations, and solves with `instantonkit.adhm.quaternionic.multi_instanton`.
    ``chirality=-1`` returns the anti-instanton partner (`ADHMData.conjugate`).
    """
    _validate.choice("source", source, ("seed", "moduli"))
    lo, hi = size_range
    if not (0 < lo <= hi and np.isfinite(hi)):
        raise ValueError(f"size_range must satisfy 0 < low <= high < inf; found {size_range!r}")

    @st.composite
    def build(draw) -> ADHMData:
        kk = draw(_as_strategy(k))
        nn = draw(_as_strategy(rank))
        ch = draw(_as_strategy(chirality))
        ch = _validate.sign("chirality", ch)
        if source == "seed":
            seed = draw(st.integers(0, 2**32 - 1))
            data = random_adhm(kk, nn, seed=seed, spread=spread, size_range=size_range)
        else:
            data = draw(_adhm_from_moduli(kk, nn, spread, size_range))
        return data if ch == 1 else data.conjugate()

    return build()


def unitary_adhm_data(k=st.integers(1, 3), rank=st.integers(2, 4), *, spread: float = 1.5) -> st.SearchStrategy:  # noqa: B008
    """Valid complex SU(N) ADHM data (`instantonkit.adhm.unitary.UnitaryADHMData`) of drawn k and N.

    k, rank: ints or strategies of ints (k >= 1, rank >= 2); a drawn seed goes to
    `instantonkit.adhm.unitary_moduli.random_unitary_adhm` (generic data, shrinks to seed 0).
    """

    @st.composite
    def build(draw) -> UnitaryADHMData:
        kk, nn = draw(_as_strategy(k)), draw(_as_strategy(rank))
        return random_unitary_adhm(kk, nn, seed=draw(st.integers(0, 2**32 - 1)), spread=spread)

    return build()
