"""Argument checks shared by every module (floor 0): one wording, one result for the same input.

Each check returns the normalised value or raises ``TypeError`` (wrong kind of object) or
``ValueError`` (right kind, wrong value) naming the argument, what was expected and what was found.
Booleans are never accepted as numbers (``rtol=True`` is refused everywhere).
"""

from __future__ import annotations

import numbers
import os

import jax
import numpy as np

__all__ = [
    "is_tracer",
    "positive_int",
    "nonnegative_int",
    "positive_float",
    "finite_float",
    "real_array",
    "point",
    "points_array",
    "points",
    "positive_vector",
    "distinct_points",
    "sign",
    "choice",
    "lattice_shape",
    "machine_memory",
    "affordable",
    "file_path",
    "adhm_affordable",
    "MAX_POINTS",
    "budget",
    "bounded_work",
]

#: The largest number of points an integral, a sample or a count of evaluations may ask for: at 10^6
#: density evaluations a second (well above the rate of the autodiff densities of this package, an
#: assumption, not a measurement) 10^11 points take more than a day of one core, so a larger request is
#: a typo, not a run (10^15 would take ~30 years).
MAX_POINTS = 10**11

# the least memory one lattice site takes: four SU(2) links of 2 x 2 complex128 (4 * 4 * 16 bytes)
SITE_BYTES = 256


def machine_memory() -> int:
    """The machine's physical memory in bytes (``os.sysconf``), or 0 where the system does not say."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 0


def affordable(name: str, nbytes: float, what: str) -> None:
    """Refuse, before allocating anything, a request whose memory estimate exceeds the machine's memory.

    The message names the argument, the estimate and the memory this machine has (``os.sysconf``).
    """
    total = machine_memory()
    if total and nbytes > total:
        raise ValueError(
            f"{name} is too large: {what} needs at least {nbytes:.3e} bytes; "
            f"this machine has {total:.3e} bytes of memory"
        )


def budget(name: str, value) -> int:
    """A number of points: an integer in [1, `MAX_POINTS`] (beyond it a run would not end within a day)."""
    out = positive_int(name, value)
    if out > MAX_POINTS:
        raise ValueError(
            f"{name} must be at most {MAX_POINTS:.0e} points (more would take over a day at 10^6 points a second); "
            f"found {out:.3e}"
        )
    return out


def bounded_work(name: str, units: float, what: str) -> None:
    """Refuse a run of more than `MAX_POINTS` elementary updates (over a day at 10^6 a second), naming ``name``."""
    if units > MAX_POINTS:
        raise ValueError(
            f"{name} is too large: {what} is {units:.3e} elementary updates, more than {MAX_POINTS:.0e} "
            "(over a day at 10^6 a second)"
        )


def adhm_affordable(k: int, rank: int, *, k_name: str = "k") -> None:
    """Refuse ADHM data of charge ``k`` and rank ``rank`` whose memory estimate exceeds the machine's.

    Estimates (float64): the data, 4 k (n + k) reals (Lambda n x k and B k x k quaternions, or B1, B2, I, J),
    then the dense Jacobian of a constraint solve, 3 k^2 residuals by 4 k (k + n) unknowns.
    ``k_name`` names what sets k in the message (e.g. "centers").
    """
    affordable("rank", 8.0 * 4.0 * float(rank) * float(k), f"data of rank {rank} and charge {k}")
    unknowns = 4.0 * float(k) * (float(k) + float(rank))
    affordable(k_name, 8.0 * 3.0 * float(k) ** 2 * unknowns, f"the constraint Jacobian of charge {k} and rank {rank}")


def file_path(name: str, value) -> str:
    """A file path: a non-empty ``str`` or ``os.PathLike`` (bytes and other objects refused), as ``str``."""
    if not isinstance(value, (str, os.PathLike)):
        raise TypeError(f"{name} must be a file path (str or os.PathLike); found {value!r} ({type(value).__name__})")
    out = os.fspath(value)
    if not isinstance(out, str):
        raise TypeError(f"{name} must be a text file path; found {out!r} ({type(out).__name__})")
    if not out:
        raise ValueError(f"{name} must be a non-empty file path; found ''")
    return out


def is_tracer(*values) -> bool:
    """True when any value is a jax tracer (value checks are skipped under tracing)."""
    return any(isinstance(v, jax.core.Tracer) for v in values)


def _is_bool(value) -> bool:
    return isinstance(value, (bool, np.bool_))


def positive_int(name: str, value) -> int:
    """An integer >= 1 (numpy integers accepted, booleans and floats refused)."""
    if _is_bool(value) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name} must be a positive integer; found {value!r} ({type(value).__name__})")
    if value < 1:
        raise ValueError(f"{name} must be a positive integer; found {value!r}")
    return int(value)


def nonnegative_int(name: str, value) -> int:
    """An integer >= 0 (booleans refused)."""
    if _is_bool(value) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name} must be a non-negative integer; found {value!r} ({type(value).__name__})")
    if value < 0:
        raise ValueError(f"{name} must be a non-negative integer; found {value!r}")
    return int(value)


def finite_float(name: str, value) -> float:
    """A finite real number (booleans refused)."""
    real_0d = (
        isinstance(value, np.ndarray)
        and value.shape == ()
        and np.issubdtype(value.dtype, np.number)
        and not np.issubdtype(value.dtype, np.complexfloating)
    )
    if (_is_bool(value) or not isinstance(value, numbers.Real)) and not real_0d:
        raise TypeError(f"{name} must be a real number; found {value!r} ({type(value).__name__})")
    out = float(value)
    if not np.isfinite(out):
        raise ValueError(f"{name} must be finite; found {out!r}")
    return out


def positive_float(name: str, value) -> float:
    """A finite real number > 0 (booleans refused)."""
    out = finite_float(name, value)
    if out <= 0:
        raise ValueError(f"{name} must be > 0; found {out!r}")
    return out


def spacings(name: str, value) -> np.ndarray:
    """Lattice spacings per direction; (4,) float64: one number a > 0 for all four directions, or four
    (a1, a2, a3, a4) > 0 in (x1, x2, x3, x4) order (booleans refused; errors name the entry)."""
    if isinstance(value, (str, bytes, dict)) or (
        not isinstance(value, (list, tuple, np.ndarray)) or np.ndim(value) == 0
    ):
        return np.full(4, positive_float(name, value))
    if len(value) != 4:
        raise ValueError(
            f"{name} must be one number or four (a1, a2, a3, a4) in (x1, x2, x3, x4) order; found {len(value)} values: "
            f"{list(value)!r:.80}"
        )
    return np.array([positive_float(f"{name}[{i}]", v) for i, v in enumerate(value)], dtype=np.float64)


def spacing_value(name: str, value) -> float | tuple:
    """``value`` as stored by lattice starts: one float when the four spacings are equal, else a tuple of four floats."""
    a = spacings(name, value)
    return float(a[0]) if np.all(a == a[0]) else tuple(float(v) for v in a)


def real_array(name: str, value, shape: tuple | None = None, *, shape_text: str | None = None) -> np.ndarray:
    """A finite float64 array; ``shape`` entries of ``None`` match any length."""
    arr = np.asarray(value)
    if arr.dtype == object or not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
        raise TypeError(f"{name} must be a real numeric array; found dtype {arr.dtype}")
    if arr.dtype == np.bool_:
        raise TypeError(f"{name} must be a real numeric array; found dtype bool")
    affordable(name, 8.0 * arr.size, f"a float64 copy of {arr.size} values")
    if shape is not None:
        ok = arr.ndim == len(shape) and all(s is None or s == n for s, n in zip(shape, arr.shape))
        if not ok:
            want = (
                shape_text
                or "(" + ", ".join("n" if s is None else str(s) for s in shape) + ("," if len(shape) == 1 else "") + ")"
            )
            raise ValueError(f"{name} must have shape {want}; found {arr.shape}")
    arr = arr.astype(np.float64)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite; found {int(np.sum(~np.isfinite(arr)))} NaN or inf value(s)")
    return arr


def point(name: str, value) -> np.ndarray:
    """One point of R^4: a finite (4,) float64 array."""
    return real_array(name, value, (4,))


def points_array(name: str, value, *, min_count: int = 1, shape_text: str = "(m, 4)") -> np.ndarray:
    """A list of points: (m, 4) float64 with m >= min_count; a single (4,) point is promoted to (1, 4).

    ``shape_text`` names the expected shape in messages (e.g. "(k, 4)" for k centres).
    """
    arr = np.asarray(value)
    if arr.ndim == 1:
        arr = arr.reshape(1, -1)
    arr = real_array(name, arr, (None, 4), shape_text=shape_text)
    if arr.shape[0] < min_count:
        raise ValueError(f"{name} must hold at least {min_count} point(s); found {arr.shape[0]}")
    return arr


def points(value, name: str = "points") -> tuple[np.ndarray, tuple[int, ...]]:
    """Points (..., 4) flattened: ((M, 4) float64 numpy array, leading shape).

    Raises TypeError for a jax tracer (points must be concrete here) or non-real input, and
    ValueError for a wrong last axis or non-finite values (counting the bad points).
    """
    if is_tracer(value):
        raise TypeError(f"{name} must be concrete arrays here; call a field's methods directly under jit")
    arr = np.asarray(value)
    if (
        arr.dtype == object
        or arr.dtype == np.bool_
        or not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer))
    ):
        raise TypeError(f"{name} must be a real numeric array; found dtype {arr.dtype}")
    if arr.ndim < 1 or arr.shape[-1] != 4:
        raise ValueError(f"{name} must have shape (..., 4); found {arr.shape}")
    affordable(name, 8.0 * arr.size, f"a float64 copy of {arr.size // 4} points")
    arr = arr.astype(np.float64, copy=False)
    finite = np.isfinite(arr)
    if not np.all(finite):
        bad = int(np.sum(~np.all(finite, axis=-1)))
        raise ValueError(f"{name} must be finite; found {bad} point(s) with NaN or inf")
    return arr.reshape(-1, 4), arr.shape[:-1]


def distinct_points(name: str, arr: np.ndarray, min_distance: float, *, noun: str = "points") -> np.ndarray:
    """``arr`` (m, 4) unchanged when no two rows are closer than ``min_distance``, else ValueError.

    The message names the closest pair: "centers 0 and 2 coincide (distance 0.000e+00); give distinct centers".
    """
    m = arr.shape[0]
    affordable(name, 32.0 * m * m, f"comparing {m} {noun} pairwise")
    if m > 1:
        d = np.linalg.norm(arr[:, None] - arr[None], axis=-1) + np.diag(np.full(m, np.inf))
        i, j = np.unravel_index(np.argmin(d), d.shape)
        if d[i, j] < min_distance:
            raise ValueError(f"{name} {i} and {j} coincide (distance {d[i, j]:.3e}); give distinct {noun}")
    return arr


def sign(name: str, value) -> int:
    """+1 or -1 as an int (numpy integers accepted; booleans, floats and other values refused)."""
    if _is_bool(value) or not isinstance(value, numbers.Integral) or value not in (1, -1):
        raise ValueError(f"{name} must be +1 or -1; found {value!r}")
    return int(value)


def positive_vector(name: str, value, length: int) -> np.ndarray:
    """A (length,) float64 array of finite values > 0; a scalar is broadcast."""
    arr = np.asarray(value)
    if arr.ndim == 0:
        arr = np.full(length, arr)
    arr = real_array(name, arr, (length,))
    if np.any(arr <= 0):
        raise ValueError(f"{name} must be > 0; found {arr.tolist()}")
    return arr


def choice(name: str, value, options: tuple):
    """One of ``options`` (compared with ==), else ValueError listing them."""
    if not any(value == o and type(value) is type(o) for o in options):
        raise ValueError(f"{name} must be one of {options}; found {value!r}")
    return value


#: Largest lattice a chunked run may write to disk (bytes of its links at SITE_BYTES per site): a petabyte.
MAX_STORED_BYTES = 1e15


def lattice_shape(name: str, value, *, in_memory: bool = True) -> tuple:
    """Four positive integers (L1, L2, L3, L4) as a tuple of ints (integral floats accepted, booleans refused).

    in_memory: the links will be held in memory (refused beyond the machine's memory); False for runs
    that write chunks to disk or a memmap (refused beyond MAX_STORED_BYTES).
    """
    if isinstance(value, (str, bytes)):
        raise TypeError(f"{name} must be a sequence of 4 integers (L1, L2, L3, L4); found the text {value!r}")
    try:
        items = tuple(value)
        s = tuple(int(v) for v in items)
    except (TypeError, ValueError, OverflowError) as err:
        raise TypeError(f"{name} must be a sequence of 4 integers (L1, L2, L3, L4); found {value!r}") from err
    if len(s) != 4 or any(v < 1 for v in s) or any(_is_bool(v) or int(v) != v for v in items):
        raise ValueError(f"{name} must be 4 positive integers (L1, L2, L3, L4); found {items!r}")
    sites = float(np.prod(np.array(s, dtype=np.float64)))
    what = f"a lattice of {sites:.3e} sites (four SU(2) links each)"
    if in_memory:
        affordable(name, SITE_BYTES * sites, what)
    elif SITE_BYTES * sites > MAX_STORED_BYTES:
        raise ValueError(
            f"{name} is too large: {what} needs at least {SITE_BYTES * sites:.3e} bytes; the limit of a stored run is {MAX_STORED_BYTES:.0e} bytes"
        )
    return s
