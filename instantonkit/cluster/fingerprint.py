"""Field and point fingerprints: what a store was made from, so a resumed run can be refused when it differs."""

from __future__ import annotations

import dataclasses
import hashlib

import numpy as np

from ..engine.fields import potential

__all__ = ["describe", "code_fingerprint", "PROBES", "probe", "domain_probe", "same_params", "points_fingerprint"]

#: Relative / absolute tolerance on stored field probes (potentials agree far better than this on the same
#: field and machine; a changed field differs at O(1)).
PROBE_RTOL, PROBE_ATOL = 1e-10, 1e-12
#: Deepest nesting followed by `describe` and `code_fingerprint` (guards against cycles).
_MAX_DEPTH, _MAX_CODE_DEPTH = 32, 8


def describe(obj, depth: int = 0):
    """A JSON description of a field: its type and its dataclass fields, arrays as nested lists."""
    if depth > _MAX_DEPTH:
        return repr(type(obj).__name__)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        out = {"type": f"{type(obj).__module__}.{type(obj).__qualname__}"}
        for f in dataclasses.fields(obj):
            out[f.name] = describe(getattr(obj, f.name), depth + 1)
        return out
    if isinstance(obj, (bool, int, float, str)) or obj is None:
        return obj
    if isinstance(obj, (tuple, list)):
        return [describe(v, depth + 1) for v in obj]
    if callable(obj):
        name = f"{getattr(obj, '__module__', '?')}.{getattr(obj, '__qualname__', type(obj).__name__)}"
        return {"callable": name, "code": code_fingerprint(obj)}
    try:
        arr = np.asarray(obj)
    except Exception:  # pragma: no cover - exotic leaves
        return repr(type(obj).__name__)
    if arr.dtype.kind in "biuf":
        return arr.astype(np.float64).tolist()
    if arr.dtype.kind == "c":
        return [arr.real.tolist(), arr.imag.tolist()]
    return repr(type(obj).__name__)


def code_fingerprint(fn, depth: int = 0) -> str | None:
    """sha256 of a Python function's bytecode, constants, names, defaults and closure values (nested
    functions followed), so a rebuilt callable with other captured numbers is told apart; None for
    objects without code (their module globals are not looked at)."""
    code = getattr(fn, "__code__", None)
    if code is None or depth > _MAX_CODE_DEPTH:
        return None
    h = hashlib.sha256()

    def feed(v):
        if hasattr(v, "co_code"):
            h.update(v.co_code)
            h.update(repr(v.co_names).encode())
            for c in v.co_consts:
                feed(c)
        elif callable(v) and hasattr(v, "__code__"):
            h.update(str(code_fingerprint(v, depth + 1)).encode())
        elif isinstance(v, (bool, int, float, complex, str, bytes, type(None))):
            h.update(repr(v).encode())
        elif isinstance(v, (tuple, list)):
            for x in v:
                feed(x)
        else:
            try:
                arr = np.asarray(v)
                h.update(arr.tobytes() if arr.dtype.kind in "biufc" else type(v).__qualname__.encode())
            except Exception:
                h.update(type(v).__qualname__.encode())

    feed(code)
    feed(fn.__defaults__ or ())
    for cell in fn.__closure__ or ():
        try:
            feed(cell.cell_contents)
        except ValueError:  # an empty cell
            h.update(b"<empty>")
    return h.hexdigest()


def domain_probe(field, origin, spacing, shape) -> list | None:
    """The potential at three points inside the region of a lattice or grid (between sites), so a
    field that changed only there is told apart from the stored one."""
    t = np.array([0.21, 0.5, 0.83])[:, None]
    pts = np.asarray(origin) + spacing * ((np.asarray(shape) - 1) * t + 0.137)
    return probe(field, pts)


PROBES = np.array(
    [[0.3127, -0.4711, 0.5903, 0.7321], [-1.1731, 0.2237, -0.6183, 0.4142], [2.2361, 1.7321, -1.4142, -0.5772]]
)


def probe(field, points=None) -> list | None:
    """The potential at three fixed points (or ``points``; re, im parts), or None where it is not finite there."""
    try:
        a = potential(field, PROBES if points is None else points)
    except (ValueError, TypeError):
        return None
    return [a.real.ravel().tolist(), a.imag.ravel().tolist()]


def same_params(stored: dict, asked: dict) -> list:
    """Names of the parameters that differ (probes compared to 1e-10 relative, the rest exactly)."""
    diff = []
    for key in sorted(set(stored) | set(asked)):
        a, b = stored.get(key), asked.get(key)
        if key.endswith("probe") and a is not None and b is not None:
            a, b = np.asarray(a), np.asarray(b)
            if a.shape != b.shape or not np.allclose(a, b, rtol=PROBE_RTOL, atol=PROBE_ATOL):
                diff.append(key)
        elif a != b:
            diff.append(key)
    return diff


def points_fingerprint(pts) -> dict:
    """What a resumed point evaluation must match: the sha256 of numpy points; for Zarr points their
    location, shape and the sha256 of their first and last rows (reading every point is not worth it)."""
    if isinstance(pts, np.ndarray):
        return {"sha256": hashlib.sha256(np.ascontiguousarray(pts, dtype=np.float64).tobytes()).hexdigest()}
    flat_first = np.asarray(pts[(0,) * (len(pts.shape) - 1)], dtype=np.float64)
    flat_last = np.asarray(pts[tuple(n - 1 for n in pts.shape[:-1])], dtype=np.float64)
    ends = hashlib.sha256(flat_first.tobytes() + flat_last.tobytes()).hexdigest()
    return {"zarr": f"{getattr(pts, 'store', '')}/{getattr(pts, 'path', '')}", "ends_sha256": ends}
