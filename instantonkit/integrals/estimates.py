"""The error model of the adaptive cubature (`instantonkit.integrals.cubature`): what two levels of a rule say.

The estimate of the finer of two levels is the difference of their values, enlarged when they converge
slowly (a geometric tail), plus a rounding floor; see `piece_error`.
"""

from __future__ import annotations

import numpy as np

_EPS = float(np.finfo(np.float64).eps)


#: Error factor without history (no earlier difference): the difference of two levels, times 3.
_ERROR_FACTOR = 3.0
#: Smallest error factor with history: never claim better than twice the last difference.
_MIN_ERROR_FACTOR = 2.0
#: Largest convergence ratio q used in the geometric tail q / (1 - q) (keeps the factor finite).
_MAX_ERROR_RATIO = 0.9
#: Rounding floor of an error estimate, in units of eps sum |w f|.
_ROUNDING_FLOOR = 64


# -- levels and error estimates ------------------------------------------------------------------------


def piece_error(diff: float, previous: float, magnitude: float) -> tuple[float, float]:
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
