"""The lattice torus: site positions and origins, and fields made smooth on it by a window (floor 5).

A charge-k instanton does not fit a 4-torus without a mismatch at the faces when its links are simply
wrapped (``boundary="periodic"``).  `TorusWindow` removes the mismatch by construction:

    A_w(x) = w(x~) A(x~),   x~ = lo + ((x - lo) mod P)   (the box [lo, lo + P) repeated),
    w(x) = prod_i s(u_i / delta_i),   u_i = distance of x_i to the nearer face of the box,
    s(t) = 35 t^4 - 84 t^5 + 70 t^6 - 20 t^7 on [0, 1], 0 below, 1 above (common practice: the
    polynomial step whose first three derivatives vanish at both ends), so w = 1 in the bulk (every
    u_i >= delta_i) and w = 0 with three derivatives on the faces: A_w is C^3 across the faces, F_w is
    C^2, and a polynomial window keeps the Gauss-Legendre reference integral of
    `instantonkit.lattice.references.continuum_reference` exact in the window's own factors.

A_w is periodic and C^3 on the torus away from the singular points of A inside the box.  With A in
a gauge that is singular at the instanton centres (singular-gauge ADHM data, the default of
``ik.bpst()`` and ``ik.multi_instanton``) the winding of the pure-gauge singularities fixes the
bundle, so the charge of A_w on the torus is exactly that of A (k), while the action changes by the
small excess

    S_w - 8 pi^2 k = int_layer (s_w - s) - int_outside the box s,
    F_w = w F + (w^2 - w) [A_mu, A_nu] + d_mu w A_nu - d_nu w A_mu          (closed form used here).

In singular gauge A ~ rho^2 / r^3 and F ~ rho^2 / r^4, so for a box of half-width R and a layer of
width delta = f R both pieces fall as (rho / R)^4 (layer ~ rho^4 / (f R^4), tail ~ rho^4 / ((1 - f) R)^4).
Measured (`instantonkit.lattice.references.continuum_reference`, BPST rho = 1 in singular gauge at the
centre of a box of side L, f = 0.5; ``benchmarks/bench_lattice.py --periodic``): S_w / 8 pi^2 - 1 =
0.221, 0.060, 0.022, 0.0029 for L / rho = 4, 6, 8, 12.  A field in a gauge that does not decay
(regular gauge: A ~ 1/r) must not be windowed: the window would cut the winding at infinity and
change the sector (nothing checks this; use singular gauge).

A field whose potential tends to a constant B at spatial infinity (a caloron of non-trivial holonomy
in its periodic gauge: B_4 = 2 pi omega u_3 / beta, so that 1/2 tr P -> cos 2 pi omega) is windowed
about B, A_w = B + w (A - B) (``background=B``): windowing A itself to zero would make the holonomy
trivial at the faces, and the layer, where A_4 falls from B to 0, would carry an action of order
(2 pi omega)^2 (area / width) / beta (measured: 4.4 x 8 pi^2 on a 4 x 16^3 start of omega = 1/4,
rho = beta / 2, a = beta / 4).  With B constant and [B_mu, B_nu] = 0, F_w is the formula above with A
replaced by A - B (the derivatives of B vanish and its commutator terms cancel), and only the tails
A - B ~ 1/r of the constituents are windowed.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate as _v
from ..core._pytree import PytreeFields
from ..engine.fields import action_from_f, as_field, charge_from_f, hook

#: Parameters as arrays (numpy, or jax tracers under jit/grad).
Array = jax.Array | np.ndarray

__all__ = [
    "TorusWindow",
    "window_field",
    "smooth_step",
    "DEFAULT_WINDOW_WIDTH",
    "default_origin",
    "resolve_origin",
    "site_points",
]

#: Width of the window's layer as a fraction of each half-box (delta_i = width * P_i / 2).
DEFAULT_WINDOW_WIDTH = 0.5


def smooth_step(t):
    """The C^3 step s(t) = 35 t^4 - 84 t^5 + 70 t^6 - 20 t^7 on [0, 1], 0 below 0, 1 above 1 (common practice)."""
    t = jnp.clip(jnp.asarray(t, dtype=jnp.float64), 0.0, 1.0)
    return t**4 * (35.0 + t * (-84.0 + t * (70.0 - 20.0 * t)))


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class TorusWindow(PytreeFields):
    """The field ``field`` windowed onto the torus ``[lo, lo + box)``: A_w = w A (module docstring).

    field: a field (decaying, e.g. singular gauge); lo: (4,) the lower faces; box: (4,) the periods
    P_i > 0; width: (4,) layer widths delta_i, 0 < delta_i <= P_i / 2; directions: four booleans, the
    directions (x1, x2, x3, x4) that are windowed and wrapped (default all; a direction left out keeps
    A as it is there, e.g. the period of a caloron in x4, and its factor of w is 1); background: None
    (A_w = w A) or the constant (4, N, N) anti-Hermitian limit B of A at spatial infinity, with
    commuting components (A_w = B + w (A - B), module docstring).  Closed-form field
    strength (and densities) when the wrapped field has ``field_strength``; hint, layout and charge forwarded.
    """

    field: object
    lo: Array
    box: Array
    width: Array
    directions: tuple = (True, True, True, True)
    background: Array | None = None

    _leaves = ("field", "lo", "box", "width", "background")
    _static = ("directions",)

    def __post_init__(self):
        object.__setattr__(self, "field", as_field(self.field))
        dirs = self.directions
        if (
            not isinstance(dirs, (tuple, list))
            or len(dirs) != 4
            or not all(isinstance(d, (bool, np.bool_)) for d in dirs)
        ):
            raise TypeError(f"directions must be four booleans (x1, x2, x3, x4); found {dirs!r:.80}")
        object.__setattr__(self, "directions", tuple(bool(d) for d in dirs))
        period = hook(self.field, "period")
        if period is not None and self.directions[3]:
            raise ValueError(
                f"the field is periodic in x4 with period {float(period)!r}; a window across its period would cut "
                "it: window x1, x2, x3 only (directions=(True, True, True, False))"
            )
        if _v.is_tracer(self.lo) or _v.is_tracer(self.box) or _v.is_tracer(self.width):
            return
        lo = np.asarray(self.lo, dtype=np.float64).reshape(-1)
        box = np.asarray(self.box, dtype=np.float64).reshape(-1)
        width = np.asarray(self.width, dtype=np.float64).reshape(-1)
        for name, v in (("lo", lo), ("box", box), ("width", width)):
            if v.shape != (4,) or not np.all(np.isfinite(v)):
                raise ValueError(
                    f"{name} must be a finite (4,) array; found {np.asarray(getattr(self, name)).tolist()!r}"
                )
        if np.any(box <= 0):
            raise ValueError(f"box must be positive in every direction; found {box.tolist()}")
        if np.any(width <= 0) or np.any(width > box / 2 + 1e-12):
            raise ValueError(
                f"width must satisfy 0 < width_i <= box_i / 2; found width {width.tolist()} for box {box.tolist()}"
            )
        object.__setattr__(self, "lo", lo)
        object.__setattr__(self, "box", box)
        object.__setattr__(self, "width", width)
        if self.background is not None and not _v.is_tracer(self.background):
            bg = np.asarray(self.background)
            if bg.ndim != 3 or bg.shape[0] != 4 or bg.shape[1] != bg.shape[2] or not np.all(np.isfinite(bg)):
                raise ValueError(f"background must be a finite (4, N, N) constant potential; found shape {bg.shape}")
            comm = np.einsum("mij,njk->mnik", bg, bg) - np.einsum("nij,mjk->mnik", bg, bg)
            if np.max(np.abs(comm), initial=0.0) > 1e-12 * max(1.0, float(np.max(np.abs(bg))) ** 2):
                raise ValueError("background must have commuting components [B_mu, B_nu] = 0")
            object.__setattr__(self, "background", bg.astype(np.complex128))

    # -- the window ------------------------------------------------------------------------------
    def wrap(self, x):
        """x~ = lo + ((x - lo) mod P), the point of the fundamental box; (4,) -> (4,)."""
        lo, box = jnp.asarray(self.lo), jnp.asarray(self.box)
        x = jnp.asarray(x, dtype=jnp.float64)
        return jnp.where(np.asarray(self.directions), lo + jnp.mod(x - lo, box), x)

    def window(self, y):
        """w(y) = prod_i s(u_i / delta_i) over the windowed directions i at a point y of the box; (4,) -> ()."""
        lo, box, width = jnp.asarray(self.lo), jnp.asarray(self.box), jnp.asarray(self.width)
        u = jnp.minimum(y - lo, lo + box - y)
        return jnp.prod(jnp.where(np.asarray(self.directions), smooth_step(u / width), 1.0))

    def potential(self, x):
        """A_w(x) = w(x~) A(x~) at one point (4,) -> (4, N, N)."""
        y = self.wrap(x)
        if self.background is None:
            return self.window(y) * self.field.potential(y)
        bg = jnp.asarray(self.background)
        return bg + self.window(y) * (self.field.potential(y) - bg)

    @property
    def field_strength(self):
        """F_w = w F + (w^2 - w)[A_mu, A_nu] + d_mu w A_nu - d_nu w A_mu from the wrapped field's closed-form F."""
        fs = hook(self.field, "field_strength")
        if fs is None:
            raise AttributeError("the wrapped field has no closed-form field_strength")

        def field_strength(x):
            y = self.wrap(x)
            w = self.window(y)
            dw = jax.grad(self.window)(y)
            a = self.field.potential(y)
            if self.background is not None:
                a = a - jnp.asarray(self.background)  # F_w of B + w (A - B): the same formula in A - B
            comm = jnp.einsum("mij,njk->mnik", a, a) - jnp.einsum("nij,mjk->mnik", a, a)
            da = dw[:, None, None, None] * a[None] - dw[None, :, None, None] * a[:, None]
            return w * fs(y) + (w * w - w) * comm + da

        return field_strength

    @property
    def generator_batch(self):
        """A_w.d at a batch of points (m, 4) = w(x~) (A.d)(x~) from the wrapped field's hook (when it has one)."""
        inner = hook(self.field, "generator_batch")
        if inner is None:
            raise AttributeError("the wrapped field has no generator_batch hook")

        def generator_batch(points, dirs):
            y = jax.vmap(self.wrap)(jnp.asarray(points, dtype=jnp.float64))
            if self.background is None:
                return jax.vmap(self.window)(y)[:, None, None] * inner(y, dirs)
            bd = jnp.einsum("mij,km->kij", jnp.asarray(self.background), jnp.asarray(dirs, dtype=jnp.float64))
            return bd + jax.vmap(self.window)(y)[:, None, None] * (inner(y, dirs) - bd)

        return generator_batch

    @property
    def action_density(self):
        fs = self.field_strength
        return lambda x: action_from_f(fs(x))

    @property
    def charge_density(self):
        fs = self.field_strength
        return lambda x: charge_from_f(fs(x))

    # -- forwarded hooks --------------------------------------------------------------------------
    @property
    def hint(self):
        h = hook(self.field, "hint")
        if h is None:
            raise AttributeError("the wrapped field has no hint")
        return h

    @property
    def layout(self):
        h = hook(self.field, "layout")
        if h is None:
            raise AttributeError("the wrapped field has no layout")
        return h

    @property
    def charge(self):
        """The sector on the torus: that of the wrapped field (fixed by its singular points inside)."""
        c = hook(self.field, "charge")
        if c is None:
            raise AttributeError("the wrapped field has no charge")
        return c

    @property
    def period(self):
        """The wrapped field's period in x4 (x4 is never windowed for a field with a period)."""
        p = hook(self.field, "period")
        if p is None:
            raise AttributeError("the wrapped field has no period")
        return p

    @property
    def record(self):
        """Field hook: the wrapped field's record with the window added (``window``: lo, box, width)."""
        rec = hook(self.field, "record")
        if rec is None:
            raise AttributeError("the wrapped field has no record hook")

        def record():
            out = dict(rec())
            out["window"] = {
                "lo": [float(v) for v in self.lo],
                "box": [float(v) for v in self.box],
                "width": [float(v) for v in self.width],
            }
            if not all(self.directions):
                out["window"]["directions"] = list(self.directions)
            if self.background is not None:
                bg = np.asarray(self.background)
                out["window"]["background"] = {"re": bg.real.tolist(), "im": bg.imag.tolist()}
            return out

        return record

    def describe(self) -> str:
        inner = self.field.describe() if hasattr(self.field, "describe") else type(self.field).__name__
        only = "" if all(self.directions) else f" in {[f'x{i + 1}' for i, d in enumerate(self.directions) if d]} only"
        return f"{inner}, windowed onto the torus of periods {[float(v) for v in self.box]} (layer {[float(v) for v in self.width]}){only}"


def window_field(
    field, shape, spacing, origin, *, width: float = DEFAULT_WINDOW_WIDTH, directions=(True,) * 4, background=None
) -> TorusWindow:
    """The field windowed onto the periodic box of a lattice: faces half a spacing before site 0 and after site L - 1.

    Args:
      field: a decaying field (singular gauge), see the module docstring.
      shape: (L1, L2, L3, L4); spacing: a > 0, or four (a1, a2, a3, a4) (anisotropic);
        origin: (4,) position of site 0.
      width: layer width as a fraction of each half-box, 0 < width <= 1 (default 0.5).
      directions: four booleans, the windowed directions (default all; see `TorusWindow`).
      background: None, or the constant limit B (4, N, N) of A at spatial infinity (see `TorusWindow`).
    Returns:
      TorusWindow with lo = origin - a/2, box = a L, width_i = width * a_i L_i / 2.
    Raises:
      ValueError: a bad shape, spacing, origin or width (naming it and the value found).
    """
    shape = _v.lattice_shape("shape", shape, in_memory=False)  # sizes only: nothing is allocated here
    a = _v.spacings("spacing", spacing)
    frac = _v.positive_float("width", width)
    if frac > 1.0:
        raise ValueError(f"width must be a fraction of the half-box in (0, 1]; found {width!r}")
    org = np.asarray(origin, dtype=np.float64)
    if org.shape != (4,) or not np.all(np.isfinite(org)):
        raise ValueError(f"origin must be a finite point of shape (4,); found {np.asarray(origin).tolist()!r}")
    box = a * np.asarray(shape, dtype=np.float64)
    return TorusWindow(field, org - a / 2.0, box, frac * box / 2.0, tuple(directions), background)


# -- lattice geometry -----------------------------------------------------------------------------------


def default_origin(field, shape, spacing) -> np.ndarray:
    """Origin that puts the field's centre (``field.hint()``, else 0) in the middle of the hypercube
    nearest the lattice middle, so no site and no link touches the centre: x_n = origin + a n.

    origin_i = centre_i - a_i (floor(L_i / 2) - 1/2); (4,) float64 (spacing: one a or four a_i).
    """
    shape = _v.lattice_shape("shape", shape, in_memory=False)  # sizes only: nothing is allocated here
    a = _v.spacings("spacing", spacing)
    centre = np.zeros(4)
    hint = hook(field, "hint")
    if hint is not None:
        centre = np.asarray(hint()[0], dtype=np.float64).reshape(4)
    return centre - a * (np.floor(np.asarray(shape) / 2.0) - 0.5)


def resolve_origin(field, shape, spacing, origin) -> np.ndarray:
    """``origin`` as a checked (4,) float64 point, or `default_origin` when it is None; ValueError naming the value."""
    org = default_origin(field, shape, spacing) if origin is None else _v.real_array("origin", origin)
    if org.shape != (4,) or not np.all(np.isfinite(org)):
        raise ValueError(f"origin must be a finite point of shape (4,); found {np.asarray(origin).tolist()!r}")
    return org


def site_points(shape, spacing, origin) -> np.ndarray:
    """Positions of the sites, x_n = origin + a n (per direction: a_i n_i); (L1, L2, L3, L4, 4) float64."""
    shape = _v.lattice_shape("shape", shape)
    a = _v.spacings("spacing", spacing)
    grids = np.meshgrid(*[np.arange(n, dtype=np.float64) for n in shape], indexing="ij")
    return np.asarray(origin, dtype=np.float64) + a * np.stack(grids, axis=-1)
