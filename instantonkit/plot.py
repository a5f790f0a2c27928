"""Pictures of a field: density maps on 2-D slices, stacks of slices, and convergence curves.

matplotlib is an optional extra (``pip install instantonkit[plot]``); it is imported inside the
functions, never when instantonkit is imported.  Every function returns the matplotlib Figure.

Coordinates passed in (``at``, ``extent``, ``values``) are positions in the same units as the
points of `instantonkit.engine.fields`; the axes show them in units of a length scale ``L`` (the
field's ``hint()`` scale, e.g. the size rho of a BPST instanton, or ``scale=``), and densities are
shown as the dimensionless ``s L^4`` and ``q L^4`` (s and q have dimension length^-4).  Quantities:

* ``"action"``: ``s(x) = -1/2 sum tr F F`` (conventions module);
* ``"charge"``: ``q(x) = -1/(32 pi^2) eps tr F F`` (diverging colours, symmetric about 0);
* ``"residual"``: ``|F - *F| / |F|`` (0 for self-dual, 2 for anti-self-dual fields).

Points where the field is singular (e.g. the centre of a singular gauge in a scalar ansatz) are
left blank (NaN) rather than failing the whole picture.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from .engine import fields as _fields

__all__ = ["density_slice", "slice_panels", "convergence", "scan_plot", "QUANTITIES", "AXES"]

#: Axis names of a point (x1, x2, x3, x4); x4 is Euclidean time.
AXES = ("x1", "x2", "x3", "x4")

#: quantity name -> (engine quantity, colour-bar label with {u} for the unit symbol, diverging?)
QUANTITIES = {
    "action": ("action_density", "action density  s · {u}⁴", False),
    "charge": ("charge_density", "charge density  q · {u}⁴", True),
    "residual": ("self_duality_residual", "self-duality residual  |F − ⋆F| / |F|", False),
}

#: Points per compiled call when evaluating a picture.
_CHUNK = 4096
#: Power of the length unit that makes each quantity dimensionless (s, q ~ length^-4).
_LENGTH_POWER = {"action": 4, "charge": 4, "residual": 0}


def _pyplot():
    """matplotlib.pyplot, or an ImportError naming the extra to install."""
    try:
        import matplotlib.pyplot as plt
    except ImportError as err:  # pragma: no cover - depends on the environment
        raise ImportError("instantonkit.plot needs matplotlib: pip install 'instantonkit[plot]'") from err
    return plt


# -- argument checks ---------------------------------------------------------------------------------


def _axis_index(name, what: str) -> int:
    if not isinstance(name, str) or name not in AXES:
        raise ValueError(f"{what} must be one of {AXES}; found {name!r}")
    return AXES.index(name)


def _plane(plane) -> tuple[int, int]:
    if isinstance(plane, str) or not isinstance(plane, Sequence) or len(plane) != 2:
        raise ValueError(f"plane must be a pair of axis names such as ('x1', 'x2'); found {plane!r}")
    i, j = _axis_index(plane[0], "plane axis"), _axis_index(plane[1], "plane axis")
    if i == j:
        raise ValueError(f"plane needs two different axes; found {tuple(plane)!r}")
    return i, j


def _quantity(quantity) -> tuple[str, str, bool]:
    if quantity not in QUANTITIES:
        raise ValueError(f"quantity must be one of {tuple(QUANTITIES)}; found {quantity!r}")
    return QUANTITIES[quantity]


def _resolution(resolution) -> int:
    if isinstance(resolution, bool) or not isinstance(resolution, (int, np.integer)) or resolution < 2:
        raise ValueError(f"resolution must be an integer >= 2; found {resolution!r}")
    return int(resolution)


def _scale_and_centre(field, scale) -> tuple[float, np.ndarray]:
    """Length scale L > 0 and centre (4,) from ``scale`` / ``field.hint()``, else (1, 0)."""
    centre, hint_scale = np.zeros(4), 1.0
    if hasattr(field, "hint"):
        c, s = field.hint()
        centre, hint_scale = np.asarray(c, dtype=np.float64).reshape(4), float(s)
    L = hint_scale if scale is None else scale
    try:
        L = float(L)
    except (TypeError, ValueError) as err:
        raise TypeError(f"scale must be a positive number; found {scale!r}") from err
    if not (np.isfinite(L) and L > 0):
        raise ValueError(f"scale must be finite and > 0; found {L!r}")
    return L, centre


def _base_point(at, centre: np.ndarray, fixed: Sequence[int]) -> np.ndarray:
    """The point (4,) through which the slice passes.

    at None: the centre; a full (4,) point: that point; otherwise one number per fixed (off-plane)
    axis, in increasing axis order, with the plane coordinates of the centre.
    """
    base = centre.copy()
    if at is None:
        return base
    arr = np.asarray(at, dtype=np.float64).reshape(-1)
    if arr.shape == (4,):
        base = arr.copy()
    elif arr.shape == (len(fixed),):
        base[list(fixed)] = arr
    else:
        raise ValueError(
            f"at must be a full point (4,) or the {len(fixed)} off-plane coordinate(s) "
            f"{tuple(AXES[i] for i in fixed)}; found shape {np.shape(at)}"
        )
    if not np.all(np.isfinite(base)):
        raise ValueError(f"at must be finite; found {np.asarray(at).tolist()}")
    return base


def _extent(extent, base: np.ndarray, i: int, j: int, L: float) -> tuple[float, float, float, float]:
    """(lo_i, hi_i, lo_j, hi_j): a half-width about the base point (default 3 L) or four bounds."""
    if extent is None:
        extent = 3.0 * L
    arr = np.asarray(extent, dtype=np.float64).reshape(-1)
    if arr.shape == (1,):
        h = float(arr[0])
        if not (np.isfinite(h) and h > 0):
            raise ValueError(f"extent (a half-width) must be finite and > 0; found {h!r}")
        return base[i] - h, base[i] + h, base[j] - h, base[j] + h
    if arr.shape != (4,):
        raise ValueError(f"extent must be a half-width or (lo1, hi1, lo2, hi2); found shape {np.shape(extent)}")
    if not np.all(np.isfinite(arr)) or arr[1] <= arr[0] or arr[3] <= arr[2]:
        raise ValueError(f"extent (lo1, hi1, lo2, hi2) needs finite lo < hi; found {arr.tolist()}")
    return float(arr[0]), float(arr[1]), float(arr[2]), float(arr[3])


def _grid(base, i, j, ext, n) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cell-centred grid on the (i, j) plane through ``base``: points (n, n, 4) [row = j, col = i], u, v."""
    hu, hv = (ext[1] - ext[0]) / n, (ext[3] - ext[2]) / n
    u = ext[0] + hu * (np.arange(n) + 0.5)
    v = ext[2] + hv * (np.arange(n) + 0.5)
    pts = np.broadcast_to(base, (n, n, 4)).copy()
    pts[..., i] = u[None, :]
    pts[..., j] = v[:, None]
    return pts, u, v


# -- evaluation that tolerates singular points -------------------------------------------------------


def _evaluate_masked(field, pts: np.ndarray, quantity: str, method: str) -> np.ndarray:
    """The engine's ``quantity`` on pts (M, 4); points where it is not finite become NaN.

    The engine raises ValueError for a non-finite result anywhere in a call; the failing calls are
    split (blocks of 64, then single points) so only the singular points are lost.
    """

    def run(p, chunk):
        return np.asarray(_fields.evaluate(field, p, quantity, method=method, chunk_size=chunk), dtype=np.float64)

    def singular(err):
        return "not finite" in str(err)

    try:
        return run(pts, _CHUNK)
    except ValueError as err:
        if not singular(err):
            raise
    out = np.full(pts.shape[0], np.nan)
    for start in range(0, pts.shape[0], 64):
        block = np.arange(start, min(start + 64, pts.shape[0]))
        try:
            out[block] = run(pts[block], 64)
            continue
        except ValueError as err:
            if not singular(err):
                raise
        for p in block:
            try:
                out[p] = run(pts[p : p + 1], 1)[0]
            except ValueError as err:
                if not singular(err):
                    raise
    return out


def _values(field, pts_grid, quantity, method):
    qname = _quantity(quantity)[0]
    flat = pts_grid.reshape(-1, 4)
    return _evaluate_masked(field, flat, qname, method).reshape(pts_grid.shape[:-1])


def _limits(arrays, diverging: bool) -> tuple[float, float]:
    finite = [a[np.isfinite(a)] for a in arrays]
    finite = [a for a in finite if a.size]
    if not finite:
        return (-1.0, 1.0) if diverging else (0.0, 1.0)
    lo, hi = min(float(a.min()) for a in finite), max(float(a.max()) for a in finite)
    if diverging:
        m = max(abs(lo), abs(hi)) or 1.0
        return -m, m
    if hi <= lo:
        hi = lo + (abs(lo) or 1.0)
    return lo, hi


def _dimensionless(values, quantity, L):
    return values * L ** _LENGTH_POWER[quantity]


def _position_text(base, fixed, L, unit) -> str:
    where = ", ".join(f"{AXES[k]} = {base[k] / L:.3g} {unit}" for k in fixed)
    return f"{where}   ({unit} = {L:.3g})" if where else f"{unit} = {L:.3g}"


# -- public ------------------------------------------------------------------------------------------


def density_slice(
    field,
    plane=("x1", "x2"),
    at=None,
    *,
    extent=None,
    resolution: int = 121,
    quantity: str = "action",
    ax=None,
    scale=None,
    unit_label: str = "ρ",
    method: str = "auto",
    cmap=None,
    log: bool = False,
    title: str | None = None,
):
    """Map of a density of ``field`` on the 2-D slice through a point spanned by two axes; returns the Figure.

    plane: two axis names of ('x1', 'x2', 'x3', 'x4') (horizontal, vertical); at: None (the slice
    through the field's centre from ``hint()``, else the origin), the off-plane coordinates in
    increasing axis order (e.g. (x3, x4) for the (x1, x2) plane), or a full point (4,) on which the
    slice is centred.  extent: half-width of the square about that point (default 3 L), or
    (lo1, hi1, lo2, hi2).  resolution: pixels per side (cell-centred grid of resolution^2 points).
    quantity: 'action' | 'charge' | 'residual'.  scale: the length unit L of the labels (default
    ``field.hint()[1]``, else 1), shown as ``unit_label``.  ax: an Axes to draw into (its figure is
    returned).  log: logarithmic colours (action and residual).  Axes labels read 'x1 / ρ', the colour
    bar 's · ρ⁴'; the aspect is equal.  Singular points are left blank.
    """
    plt = _pyplot()
    from matplotlib import colors

    field = _fields.as_field(field)
    i, j = _plane(plane)
    _, cbar_label, diverging = _quantity(quantity)
    n = _resolution(resolution)
    L, centre = _scale_and_centre(field, scale)
    fixed = [k for k in range(4) if k not in (i, j)]
    base = _base_point(at, centre, fixed)
    ext = _extent(extent, base, i, j, L)
    pts, _, _ = _grid(base, i, j, ext, n)
    vals = _dimensionless(_values(field, pts, quantity, method), quantity, L)
    if ax is None:
        fig, ax = plt.subplots(figsize=(5.2, 4.4), layout="constrained")
    else:
        fig = ax.figure
    lo, hi = _limits([vals], diverging)
    if log and not diverging:
        pos = vals[np.isfinite(vals) & (vals > 0)]
        low = float(pos.min()) if pos.size else 1e-12
        norm: colors.Normalize = colors.LogNorm(vmin=max(low, hi * 1e-8), vmax=hi if hi > 0 else 1.0)
    else:
        norm = colors.Normalize(vmin=lo, vmax=hi)
    im = ax.imshow(
        vals,
        origin="lower",
        extent=tuple(v / L for v in ext),
        cmap=cmap or ("RdBu_r" if diverging else "magma"),
        norm=norm,
        interpolation="nearest",
    )
    ax.set_aspect("equal")
    ax.set_xlabel(f"{AXES[i]} / {unit_label}")
    ax.set_ylabel(f"{AXES[j]} / {unit_label}")
    fig.colorbar(im, ax=ax, label=cbar_label.format(u=unit_label))
    ax.set_title(title if title is not None else _position_text(base, fixed, L, unit_label))
    return fig


def slice_panels(
    field,
    plane=("x1", "x2"),
    axis: str = "x4",
    values=(-1.0, 0.0, 1.0),
    *,
    at=None,
    extent=None,
    resolution: int = 81,
    quantity: str = "action",
    scale=None,
    unit_label: str = "ρ",
    method: str = "auto",
    ncols: int | None = None,
    contours=(0.1, 0.5),
    cmap=None,
    title: str | None = None,
):
    """A row (or grid) of slices at several positions along a third axis, one colour scale; returns the Figure.

    Each panel is the ``plane`` slice at ``axis`` = value (positions in field units, shown in units
    of L); the remaining axis is fixed by ``at`` (one number, or a full point (4,); default the centre).
    The same colour scale serves every panel, with one colour bar, and the level lines at the
    ``contours`` fractions of the largest |value| over all panels are drawn in each panel, so the
    panels read as cuts through the same isosurfaces.  Other keywords as in `density_slice`.
    """
    plt = _pyplot()
    from matplotlib import colors

    field = _fields.as_field(field)
    i, j = _plane(plane)
    k = _axis_index(axis, "axis")
    if k in (i, j):
        raise ValueError(f"axis must differ from the plane axes {tuple(plane)!r}; found {axis!r}")
    _, cbar_label, diverging = _quantity(quantity)
    n = _resolution(resolution)
    vals_along = np.asarray(values, dtype=np.float64).reshape(-1)
    if vals_along.size < 1 or not np.all(np.isfinite(vals_along)):
        raise ValueError(
            f"values must be one or more finite positions along {axis}; found {np.asarray(values).tolist()}"
        )
    lev = np.asarray(contours if contours is not None else (), dtype=np.float64).reshape(-1)
    if np.any((lev <= 0) | (lev >= 1)):
        raise ValueError(f"contours must be fractions in (0, 1) of the largest value; found {lev.tolist()}")
    L, centre = _scale_and_centre(field, scale)
    other = [m for m in range(4) if m not in (i, j, k)]
    base = _base_point(at, centre, other)
    ext = _extent(extent, base, i, j, L)
    maps = []
    for value in vals_along:
        b = base.copy()
        b[k] = value
        pts, _, _ = _grid(b, i, j, ext, n)
        maps.append(_dimensionless(_values(field, pts, quantity, method), quantity, L))
    lo, hi = _limits(maps, diverging)
    npan = len(maps)
    if ncols is None:
        ncols = min(npan, 4)
    if isinstance(ncols, bool) or not isinstance(ncols, (int, np.integer)) or ncols < 1:
        raise ValueError(f"ncols must be a positive integer; found {ncols!r}")
    nrows = -(-npan // ncols)
    fig, axes = plt.subplots(
        nrows,
        ncols,
        figsize=(3.0 * ncols + 1.2, 3.0 * nrows + 0.4),
        squeeze=False,
        layout="constrained",
        sharex=True,
        sharey=True,
    )
    norm = colors.Normalize(vmin=lo, vmax=hi)
    top = max(abs(lo), abs(hi))
    shown = tuple(v / L for v in ext)
    x = (ext[0] + (ext[1] - ext[0]) / n * (np.arange(n) + 0.5)) / L
    y = (ext[2] + (ext[3] - ext[2]) / n * (np.arange(n) + 0.5)) / L
    im = None
    for p, (value, m) in enumerate(zip(vals_along, maps)):
        a = axes[p // ncols, p % ncols]
        im = a.imshow(
            m,
            origin="lower",
            extent=shown,
            cmap=cmap or ("RdBu_r" if diverging else "magma"),
            norm=norm,
            interpolation="nearest",
        )
        levels = sorted(set((lev * top).tolist()))
        if diverging:
            levels = sorted(set([-v for v in levels] + levels))
        finite = np.where(np.isfinite(m), m, 0.0)
        if levels and np.ptp(finite) > 0:
            a.contour(x, y, finite, levels=levels, colors="white", linewidths=0.7)
        a.set_aspect("equal")
        a.set_title(f"{axis} = {value / L:.3g} {unit_label}")
        if p % ncols == 0:
            a.set_ylabel(f"{AXES[j]} / {unit_label}")
        if p // ncols == nrows - 1 or p + ncols >= npan:
            a.set_xlabel(f"{AXES[i]} / {unit_label}")
    for p in range(npan, nrows * ncols):
        axes[p // ncols, p % ncols].set_visible(False)
    fig.colorbar(im, ax=axes[:, :].ravel().tolist(), label=cbar_label.format(u=unit_label), shrink=0.9)
    if title is not None:
        fig.suptitle(title)
    elif other:
        fig.suptitle(_position_text(base, other, L, unit_label))
    return fig


# -- convergence ---------------------------------------------------------------------------------------


def _series(obj) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(n, value, error) arrays sorted by n from results, progress dicts, a mapping of arrays or a triple."""
    if isinstance(obj, Mapping):
        if "value" not in obj or "error" not in obj:
            raise ValueError(
                f"a convergence mapping needs keys 'value', 'error' and 'evaluations' (or 'n'); found {sorted(obj)}"
            )
        n = obj.get("evaluations", obj.get("n"))
        if n is None:
            raise ValueError("a convergence mapping needs 'evaluations' (or 'n') beside 'value' and 'error'")
        triple = (n, obj["value"], obj["error"])
    elif isinstance(obj, Sequence) and len(obj) and all(hasattr(r, "value") and hasattr(r, "evaluations") for r in obj):
        triple = ([r.evaluations for r in obj], [r.value for r in obj], [r.error for r in obj])
    elif isinstance(obj, Sequence) and len(obj) and all(isinstance(r, Mapping) for r in obj):
        try:
            triple = ([r["evaluations"] for r in obj], [r["value"] for r in obj], [r["error"] for r in obj])
        except KeyError as err:
            raise ValueError(
                f"each convergence record needs 'evaluations', 'value' and 'error'; missing {err}"
            ) from err
    elif isinstance(obj, Sequence) and len(obj) == 3:
        triple = tuple(obj)
    else:
        raise TypeError(
            "convergence data must be a sequence of results (with .evaluations, .value, .error), a list of "
            f"progress dicts, a mapping of arrays or a triple (n, value, error); found {type(obj).__name__}"
        )
    try:
        n, v, e = (np.asarray(t, dtype=np.float64).reshape(-1) for t in triple)
    except (TypeError, ValueError) as err:
        raise TypeError(f"convergence data must be numeric: {err}") from err
    if not (n.shape == v.shape == e.shape) or n.size == 0:
        raise ValueError(f"n, value and error must have the same non-zero length; found {n.size}, {v.size}, {e.size}")
    order = np.argsort(n, kind="stable")
    return n[order], v[order], e[order]


def convergence(
    data,
    *,
    reference: float | None = None,
    axes=None,
    xlabel: str = "density evaluations",
    ylabel: str = "value",
    title: str | None = None,
):
    """Convergence curves of integrals against the work spent; returns the Figure.

    data: one series or a mapping label -> series.  A series is a sequence of
    `instantonkit.verification.checks.IntegralResult` (or objects with ``evaluations``, ``value``, ``error``),
    the list of dicts that the ``progress=`` callback of the integrals receives, a mapping with keys
    'evaluations' (or 'n'), 'value', 'error', or a triple (n, value, error) of arrays.
    Left panel: value with error bars against n (and the ``reference`` line); right panel, log-log:
    the estimated error and, with a ``reference``, the true deviation |value - reference|.
    axes: two Axes to draw into.
    """
    plt = _pyplot()

    if isinstance(data, Mapping) and not ("value" in data and "error" in data):
        if not data:
            raise ValueError("convergence data mapping is empty")
        curves: list[tuple[str | None, tuple]] = [(str(label), _series(s)) for label, s in data.items()]
    else:
        curves = [(None, _series(data))]
    if reference is not None:
        reference = float(reference)
        if not np.isfinite(reference):
            raise ValueError(f"reference must be finite; found {reference!r}")
    if axes is None:
        fig, axes = plt.subplots(1, 2, figsize=(9.0, 3.6), layout="constrained")
    else:
        axes = list(np.ravel(axes))
        if len(axes) != 2:
            raise ValueError(f"axes must be two matplotlib Axes; found {len(axes)}")
        fig = axes[0].figure
    left, right = axes[0], axes[1]
    tiny = np.finfo(np.float64).tiny
    for label, (n, v, e) in curves:
        line = left.errorbar(n, v, yerr=e, marker="o", ms=3.5, capsize=2.5, label=label)
        colour = line[0].get_color()
        right.loglog(
            n,
            np.maximum(e, tiny),
            marker="o",
            ms=3.5,
            color=colour,
            label="estimated error" + (f" ({label})" if label else ""),
        )
        if reference is not None:
            right.loglog(
                n,
                np.maximum(np.abs(v - reference), tiny),
                marker="s",
                ms=3.5,
                ls="--",
                color=colour,
                label=f"|value − {reference:g}|" + (f" ({label})" if label else ""),
            )
    if reference is not None:
        left.axhline(reference, color="0.4", lw=0.8, ls=":", label=f"reference {reference:g}")
    left.set_xscale("log")
    left.set_xlabel(xlabel)
    left.set_ylabel(ylabel)
    right.set_xlabel(xlabel)
    right.set_ylabel("error")
    if any(lbl for lbl, _ in curves) or reference is not None:
        left.legend(fontsize="small")
    right.legend(fontsize="small")
    if title is not None:
        fig.suptitle(title)
    return fig


def scan_plot(table, *, ax=None):
    """Each operator's lattice / continuum ratio of a scan against a/rho, with its fitted 1 + A x^2 + B x^4.

    Args:
        table: a `instantonkit.lattice.scan.ScanTable`.
        ax: a matplotlib Axes to draw in (default: a new figure).
    Returns:
        the matplotlib Figure.
    Raises:
        TypeError: ``table`` is not a scan table (no ``rows`` and ``fits``).
    """
    if not (hasattr(table, "rows") and hasattr(table, "fits")):
        raise TypeError(f"table must be a ScanTable (instantonkit.lattice.scan); found {type(table).__name__}")
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(6.0, 4.0)) if ax is None else (ax.figure, ax)
    for (name, qty), fit in table.fits.items():
        sel = [r for r in table.rows if r["operator"] == name and r["quantity"] == qty]
        x = np.array([r["a_over_rho"] for r in sel])
        y = np.array([r["ratio"] for r in sel])
        (line,) = ax.plot(x, y, "o", label=f"{name} {qty}")
        if np.isfinite(fit["a2"]) and x.size:
            xs = np.linspace(0.0, float(np.max(x)), 50)
            ax.plot(xs, 1.0 + fit["a2"] * xs**2 + fit["a4"] * xs**4, "-", color=line.get_color(), lw=0.8)
    ax.axhline(1.0, color="0.5", lw=0.6)
    ax.set_xlabel("a / ρ")
    ax.set_ylabel("lattice / continuum (same box)")
    ax.legend(fontsize="small")
    return fig
