"""Lattice starts: link variables of a continuum field, and gauge-invariant lattice observables.

Links (conventions module): ``U_mu(n)`` is the parallel transporter along the straight segment
``z(t) = x_n + t a mu_hat``, ``t in [0, 1]``, the solution at ``t = 1`` of ``dW/dt = W(t) G(t)``,
``G(t) = a A_mu(z(t))``, ``W(0) = 1`` (path-ordered exponential, earlier points to the LEFT), so
``U_mu(n) -> g(x_n) U_mu(n) g(x_n + a mu_hat)^-1`` under a gauge transformation.  Site ``n`` sits at
``x_n = origin + a n``; arrays are ``(L1, L2, L3, L4, 4, N, N)`` complex128.

Transporters are computed in one of two ways:

* closed form, when the field offers the hook ``closed_link(x, d) -> (N, N)`` (`instantonkit.engine.fields.FieldHooks`;
  jax-traceable, ``x`` the start and ``d`` the displacement, both ``(4,)``): charge-1 SU(2) ADHM data
  and ``ansatz.BPSTField`` (BPST in either gauge, see `bpst_link`), and the translations and
  gauge transformations of such fields;
* Gauss-Legendre Magnus steps of order six (three nodes per step; Blanes, Casas, Ros, BIT 40 (2000)
  434 and Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151, from memory; the order is checked in
  the tests against scipy), halving the step until two successive results differ by less than
  ``rtol`` in every entry.

A unitary (and det-1) projection is applied at the end only as rounding cleanup; the deviation found
before it is reported in `LinkReport`.  The observables of link arrays (plaquettes, Wilson
action, clover) live in `instantonkit.lattice.observables` and are re-exported here.

Results and reports: `lattice_links` always returns the links; `lattice_start` returns a
frozen `LatticeStart` (``.links`` and ``.report``, a `LinkReport`).  The old
``lattice_links(..., return_report=True)`` still returns ``(links, report)`` with a DeprecationWarning.

Boundaries, one for all directions or one per direction (`instantonkit.lattice.boundaries`): 'periodic'
wraps the field's own links (the jump of A across the faces is measured per direction for every
wrapped direction, `boundary_mismatch`, and a `BoundaryActionWarning` names the
directions and the remedies when the action exceeds BOUNDARY_WARN_FRACTION = 1 % of 8 pi^2); 'window'
puts the field times a smooth window on the torus in that direction (`instantonkit.ansatz.periodic`: no
mismatch, the same sector, a small action excess; never across a field's period); 'open' uses exact
links.  `continuum_reference` gives the
matched continuum figures (the action of the field put on the lattice, in the same box, and the
expected Wilson action with the artefact `wilson_artefact`).

Singular points on sites or links: fields with the ``gauge_twin`` hook (singular-gauge ADHM data and
BPST) have the links that touch a singular point built in the twin's regular gauge and transformed
back at every other site (`_slice_links`), so every plaquette is right.

Files: a start's report carries the field's ``record()`` (``LinkReport.field``); ``io.save_lattice(path,
start)`` stores it, `field_from_record` / `field_from_file` rebuild the field and
`regenerate` the start.

Chunked starts belong to the distributed layer: ``instantonkit.cluster.lattice_links`` /
``cluster.lattice_start``.  This module never imports it; the old ``lattice_links(..., backend="dask")``
still works (DeprecationWarning) through the executor that ``instantonkit.cluster`` registers with
`register_chunked_backend` when it is imported (the `ChunkedExecutor` protocol).
"""

from __future__ import annotations

import dataclasses
import time
import warnings
from collections.abc import Callable, Sequence
from typing import Protocol

import numpy as np

from ..ansatz.periodic import DEFAULT_WINDOW_WIDTH, default_origin, resolve_origin, site_points, window_field  # noqa: F401  (re-exported)
from ..core import _progress
from ..core import _validate as _v
from ..engine.fields import as_field, hook, output_shape
from . import boundaries as _bd
from . import observables as _obs
from . import thermal as _th
from .boundaries import BOUNDARY_WARN_FRACTION, START_BOUNDARIES, BoundaryActionWarning, warn_boundary
from .observables import (  # noqa: F401  (re-exported: the lattice namespace offers the observables of its starts)
    BOUNDARIES,
    PLANES,
    average_plaquette,
    clover_charge,
    clover_charge_density,
    clover_field_strength,
    gauge_transform,
    gauge_transform_links,
    plaquette_traces,
    plaquettes,
    random_gauge,
    wilson_action,
)
from .reports import LatticeStart, LinkReport, record_of  # noqa: F401  (re-exported)
from .sites import block_links, site_links  # noqa: F401  (re-exported)
from .thermal import anisotropy, asymptotic_potential, plane_weights, thermal_spacings  # noqa: F401  (re-exported)
from .transport import (  # noqa: F401  (re-exported: the transporters and link figures belong to the lattice namespace too)
    LINK_CHUNK,
    LinkStats,
    bpst_link,
    chunk_size,
    embed_links,
    finish_batched,
    link_batch,
    parallel_transporter,
    project_special_unitary,
    transporters,
    unitarity_deviation,
)

__all__ = [
    "LinkReport",
    "LinkStats",
    "LatticeStart",
    "StartSpec",
    "ChunkedExecutor",
    "register_chunked_backend",
    "block_links",
    "link_batch",
    "lattice_links",
    "lattice_start",
    "parallel_transporter",
    "bpst_link",
    "site_points",
    "default_origin",
    "resolve_origin",
    "boundary_mismatch",
    "unitarity_deviation",
    "BoundaryActionWarning",
    "BOUNDARY_WARN_FRACTION",
    "START_BOUNDARIES",
] + _obs.__all__
__all__ += _th.__all__  # the finite-temperature helpers

_GROUPS = ("su2", "su3", None)
_METHODS = ("auto", "closed", "magnus")
_BACKENDS = ("local", "dask")
_EIGHT_PI2 = 8.0 * np.pi**2


@dataclasses.dataclass(frozen=True)
class StartSpec:
    """The validated parameters of one lattice start (what `lattice_links` was asked for).

    Documented seam of the chunked layer (`instantonkit.cluster`): it builds a spec with
    `make`, computes boxes with `block` and assembles the report with `report`.

    field: a field object; shape: (L1, L2, L3, L4); spacing: a, or the tuple (a1, a2, a3, a4) when they
    differ (`spacings`: the four as an array; `instantonkit.lattice.thermal`); origin: (4,) float64 (site 0);
    group / embedding / boundary / rtol / method: as in `lattice_links` (boundary as given,
    lists made tuples); n_field: N of the field; n_out: N of the links (3 for 'su3'); window: the layer
    width when a direction is windowed; boundaries: the boundary of each direction as applied.  Build it with `make`, which raises
    ValueError/TypeError naming the bad argument and the value found.
    """

    field: object
    shape: tuple
    spacing: float | tuple
    origin: np.ndarray
    group: str | None
    embedding: tuple
    boundary: str | tuple
    rtol: float
    method: str
    n_field: int
    n_out: int
    window: float | None = None
    boundaries: tuple = ("periodic",) * 4

    @classmethod
    def make(
        cls,
        field,
        shape,
        spacing,
        *,
        origin=None,
        group="su2",
        embedding=(0, 1),
        boundary="periodic",
        rtol=1e-12,
        method="auto",
        window=DEFAULT_WINDOW_WIDTH,
    ):
        field = as_field(field)
        shape = _v.lattice_shape("shape", shape, in_memory=False)  # the local start checks its own array
        a, av = _v.spacing_value("spacing", spacing), _v.spacings("spacing", spacing)
        if group not in _GROUPS:
            raise ValueError(f"group must be one of {_GROUPS}; found {group!r}")
        boundary = _bd.canonical("boundary", boundary, START_BOUNDARIES)
        _v.choice("method", method, _METHODS)
        rtol = _v.positive_float("rtol", rtol)
        period = hook(field, "period")  # N_t a_t = beta checked before the potential is traced
        dirs = _bd.resolve_start(boundary, None if period is None else float(period), shape, av)
        n_field = output_shape(field, "potential")[0][-1]  # memoised per field structure
        if group == "su2" and n_field != 2:
            raise ValueError(f"group 'su2' needs a 2 x 2 (SU(2)) field; found N = {n_field} (use group=None)")
        if group == "su3" and n_field not in (2, 3):
            raise ValueError(
                f"group 'su3' needs an SU(2) field (embedded) or an SU(3) field; found N = {n_field} (use group=None)"
            )
        try:
            emb = tuple(embedding)
        except TypeError as err:
            raise TypeError(f"embedding must be two distinct indices in 0..2; found {embedding!r}") from err
        if not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in emb):
            raise TypeError(f"embedding must be two distinct indices in 0..2; found {embedding!r}")
        emb = tuple(int(v) for v in emb)
        if group == "su3" and (len(emb) != 2 or emb[0] == emb[1] or not all(0 <= v < 3 for v in emb)):
            raise ValueError(f"embedding must be two distinct indices in 0..2; found {embedding!r}")
        n_out = 3 if group == "su3" else n_field
        org = resolve_origin(field, shape, av, origin)
        width = None
        if "window" in dirs:  # about the field's constant limit at spatial infinity when it has one (holonomy)
            width = _v.positive_float("window", window)
            wdirs, bg = tuple(d == "window" for d in dirs), _th.asymptotic_potential(field)
            field = window_field(field, shape, av, org, width=width, directions=wdirs, background=bg)
        return cls(
            field, shape, a, org, group, emb, boundary, float(rtol), method, int(n_field), int(n_out), width, dirs
        )

    @property
    def spacings(self) -> np.ndarray:
        """(a1, a2, a3, a4) float64 of the four directions."""
        return _v.spacings("spacing", self.spacing)

    @property
    def links_shape(self) -> tuple:
        """(L1, L2, L3, L4, 4, N, N) of the links."""
        return self.shape + (4, self.n_out, self.n_out)

    def block(self, lo, hi) -> tuple:
        """Links of the sites lo <= n < hi; ((h1, h2, h3, h4, 4, N, N), LinkStats), see `block_links`."""
        return block_links(
            self.field,
            lo,
            hi,
            self.origin,
            self.spacings,
            n_field=self.n_field,
            group=self.group,
            embedding=self.embedding,
            method=self.method,
            rtol=self.rtol,
            batch=link_batch(self.shape),
        )

    def boundary_figures(self, links):
        """Per-direction (link_mismatch, action_error) of `boundary_mismatch`: two 4-tuples, None
        for an open direction; (None, None) when every direction is open."""
        wrapped = tuple(d != "open" for d in self.boundaries)
        if not any(wrapped):
            return None, None
        bm = boundary_mismatch(
            self.field,
            links,
            self.spacing,
            origin=self.origin,
            group=self.group,
            embedding=self.embedding,
            rtol=self.rtol,
            method=self.method,
            directions=wrapped,
        )
        return bm["link_mismatch_by_direction"], bm["action_error_by_direction"]

    def report(self, stats: LinkStats, seconds: float, mismatch=None, action_err=None) -> LinkReport:
        """The `LinkReport` of a finished start from its combined `LinkStats` and the
        per-direction figures of `boundary_figures` (the scalars are their max and sum)."""
        mis, err = _bd.combine(mismatch, action_err)
        return LinkReport(
            shape=self.shape,
            spacing=self.spacing,
            origin=tuple(float(v) for v in self.origin),
            group=self.group,
            embedding=self.embedding,
            boundary=self.boundary,
            rtol=self.rtol,
            method=stats.method or "closed",
            max_steps=int(stats.max_steps),
            refinement_diff=float(stats.refinement_diff),
            unitarity_before=float(stats.unitarity_before),
            unitarity_after=float(stats.unitarity_after),
            boundary_link_mismatch=mis,
            boundary_action_error=err,
            seconds=float(seconds),
            boundary_action_fraction=None if err is None else float(err) / _EIGHT_PI2,
            window=self.window,
            field=record_of(self.field),
            potential_evaluations=int(stats.evaluations),
            boundaries=self.boundaries,
            boundary_link_mismatch_by_direction=None if mismatch is None else tuple(mismatch),
            boundary_action_error_by_direction=None if action_err is None else tuple(action_err),
        )


# -- the chunked backend, registered by the distributed layer -------------------------------------------


class ChunkedExecutor(Protocol):
    """What a chunked backend offers `lattice_links` (``instantonkit.cluster`` registers one as 'dask').

    ``executor(spec, *, chunks, store, client, overwrite, progress, return_report)`` computes the start
    ``spec`` (`StartSpec`) in chunks and returns the links (or ``(links, LinkReport)`` with
    ``return_report=True``); it must use `StartSpec.block` so that the bits equal the local path's.
    """

    def __call__(self, spec: StartSpec, *, chunks, store, client, overwrite: bool, progress, return_report: bool): ...


_EXECUTORS: dict = {}


def register_chunked_backend(name: str, executor: ChunkedExecutor) -> None:
    """Make ``executor`` the chunked backend ``name`` of `lattice_links` (called by ``instantonkit.cluster``)."""
    _v.choice("name", name, tuple(b for b in _BACKENDS if b != "local"))
    if not callable(executor):
        raise TypeError(f"executor must be callable; found {type(executor).__name__}")
    _EXECUTORS[name] = executor


def _local_start(spec: StartSpec, out, progress) -> tuple:
    """Fill the links of ``spec`` one time slice at a time; (links, combined LinkStats)."""
    shape = spec.shape
    full = spec.links_shape
    if out is None:
        _v.affordable("shape", 16.0 * float(np.prod(full)), f"the links of a {shape} lattice ({full} complex128)")
        out = np.empty(full, dtype=np.complex128)
    elif tuple(out.shape) != full or out.dtype != np.complex128:
        raise ValueError(f"out must have shape {full} and dtype complex128; found {tuple(out.shape)} {out.dtype}")
    stats = LinkStats()
    progress = _progress.sink(progress, "lattice start, time slices")
    for t in range(shape[3]):
        block, block_stats = spec.block((0, 0, 0, t), shape[:3] + (t + 1,))
        stats = stats.merge(block_stats)
        out[:, :, :, t : t + 1] = block
        if progress is not None:
            progress(t + 1, shape[3])
    if hasattr(out, "flush"):
        out.flush()
    return out, stats


_START_DOC_ARGS = """
    Args:
      field: a field (`instantonkit.engine.fields.Field`) or a callable A(x) -> (4, N, N).
      shape: (L1, L2, L3, L4) positive integers.
      spacing: a > 0, or four (a1, a2, a3, a4) > 0 in (x1, x2, x3, x4) order (anisotropic, e.g.
        (a_s, a_s, a_s, a_t) of `instantonkit.lattice.thermal.thermal_spacings`).
      origin: (4,) position of site 0 (default `default_origin`: the field's centre in the
        middle of the central hypercube, so no link touches it).
      group: 'su2' (N = 2), 'su3' (an SU(3) field's own links, e.g. rank-3 UnitaryADHMData; or SU(2)
        links embedded in the ``embedding`` = (i, j) rows and columns of 3 x 3 identities) or None (the field's N).
      boundary: one choice for all directions, or a sequence of four in (x1, x2, x3, x4) order, e.g.
        ``("window", "window", "window", "periodic")`` (`instantonkit.lattice.boundaries`). A field with a
        period in x4 (``period`` hook) is never windowed across it: the single string 'window' keeps x4
        periodic, an explicit 'window' for x4 is a ValueError, and a periodic x4 needs L4 * a = period
        (ValueError naming both otherwise; a4 on an anisotropic lattice).  The choices: 'periodic' (the link from the last site points to site 0; use a field that decays
        fast, e.g. singular gauge; the mismatch is always measured, see `boundary_mismatch`, and
        a `BoundaryActionWarning` is raised when the boundary action exceeds
        BOUNDARY_WARN_FRACTION = 1 % of 8 pi^2), 'window' (the field times a smooth window that takes
        A to zero near the faces, `instantonkit.ansatz.periodic`: smooth on the torus, same sector,
        no boundary mismatch, a small action excess given by `continuum_reference`; Magnus
        links) or 'open' (every link is the exact transporter to x + a mu_hat; observables then use
        only plaquettes inside).
      window: layer width of boundary='window' as a fraction of each half-box (default 0.5).
      rtol: refinement target of the Magnus quadrature (unused by closed forms).
      method: 'auto', 'closed' or 'magnus' (see `parallel_transporter`).
      out: optional preallocated array or np.memmap of shape (L1, L2, L3, L4, 4, N, N), complex128,
        filled one time slice at a time.
      progress: None (a line on stderr on a terminal), False, True or progress(done, total) per time slice.
"""


def lattice_start(
    field,
    shape,
    spacing,
    *,
    origin=None,
    group: str | None = "su2",
    embedding=(0, 1),
    boundary: str | Sequence[str] = "periodic",
    rtol: float = 1e-12,
    method: str = "auto",
    out=None,
    progress: Callable[[int, int], None] | None = None,
    window: float = DEFAULT_WINDOW_WIDTH,
) -> LatticeStart:
    """A lattice start with its quality report: `LatticeStart` (``.links``, ``.report``).
    {args}
    Returns:
      LatticeStart: ``links`` (L1, L2, L3, L4, 4, N, N) complex128 (``out`` when given) and ``report``
      (a `LinkReport`, with the periodic boundary figures of `boundary_mismatch`).
    Raises:
      ValueError / TypeError: a bad argument (naming it and the value found); a link through a
        singular point; Magnus steps not converging.
    """
    res = _run_start(
        field,
        shape,
        spacing,
        origin=origin,
        group=group,
        embedding=embedding,
        boundary=boundary,
        rtol=rtol,
        method=method,
        out=out,
        progress=progress,
        window=window,
    )
    warn_boundary(res.report, stacklevel=3)
    return res


def _run_start(
    field, shape, spacing, *, origin, group, embedding, boundary, rtol, method, out, progress, window
) -> LatticeStart:
    """The local start with its report (periodic boundary figures always measured); no warning."""
    t_start = time.perf_counter()
    spec = StartSpec.make(
        field,
        shape,
        spacing,
        origin=origin,
        group=group,
        embedding=embedding,
        boundary=boundary,
        rtol=rtol,
        method=method,
        window=window,
    )
    links, stats = _local_start(spec, out, progress)
    mismatch, action_err = spec.boundary_figures(links)
    return LatticeStart(links, spec.report(stats, time.perf_counter() - t_start, mismatch, action_err))


if lattice_start.__doc__:  # (absent under python -OO)
    lattice_start.__doc__ = lattice_start.__doc__.format(args=_START_DOC_ARGS)


def lattice_links(
    field,
    shape,
    spacing,
    *,
    origin=None,
    group: str | None = "su2",
    embedding=(0, 1),
    boundary: str | Sequence[str] = "periodic",
    rtol: float = 1e-12,
    method: str = "auto",
    out=None,
    progress: Callable[[int, int], None] | None = None,
    return_report: bool = False,
    backend: str = "local",
    chunks=None,
    store=None,
    client=None,
    overwrite: bool = False,
    window: float = DEFAULT_WINDOW_WIDTH,
):
    """Link variables of ``field`` on an L1 x L2 x L3 x L4 lattice; (L1, L2, L3, L4, 4, N, N) complex128.
    {args}
      return_report: deprecated; ``True`` returns ``(links, LinkReport)`` with a DeprecationWarning
        (use `lattice_start`, whose result has ``.links`` and ``.report``).
      backend, chunks, store, client, overwrite: deprecated; ``backend="dask"`` (DeprecationWarning)
        runs the chunked start of ``instantonkit.cluster.lattice_links`` (which takes the other four).
    Returns:
      The links (L1, L2, L3, L4, 4, N, N) complex128: a numpy array (``out`` when given); with the
      deprecated ``backend="dask"`` a ``zarr.Array`` (store given) or a lazy dask array.
    Raises:
      ValueError / TypeError: a bad argument (naming it and the value found); a link through a
        singular point; Magnus steps not converging.
      ImportError: ``backend="dask"`` without the optional extra ``distributed``.
    """
    _v.choice("backend", backend, _BACKENDS)
    if return_report:
        warnings.warn(
            "lattice_links(..., return_report=True) is deprecated; use lattice_start(...), whose result has .links and .report",
            DeprecationWarning,
            stacklevel=2,
        )
    if backend != "local":
        if out is not None:
            raise ValueError(
                "out= is for the local backend; the dask backend writes to store= (a Zarr path) or returns a dask array"
            )
        spec = StartSpec.make(
            field,
            shape,
            spacing,
            origin=origin,
            group=group,
            embedding=embedding,
            boundary=boundary,
            rtol=rtol,
            method=method,
            window=window,
        )
        warnings.warn(
            f"lattice_links(..., backend={backend!r}) is deprecated; use instantonkit.cluster.lattice_links(...) "
            "(or cluster.lattice_start(...) for the report)",
            DeprecationWarning,
            stacklevel=2,
        )
        executor = _EXECUTORS.get(backend)
        if executor is None:
            raise ImportError(
                f"no chunked backend {backend!r} is registered; import instantonkit.cluster (needs the extra 'distributed')"
            )
        return executor(
            spec,
            chunks=chunks,
            store=store,
            client=client,
            overwrite=overwrite,
            progress=progress,
            return_report=return_report,
        )
    if chunks is not None or store is not None or client is not None:
        raise ValueError("chunks=, store= and client= need backend='dask'")
    kw = dict(
        origin=origin,
        group=group,
        embedding=embedding,
        boundary=boundary,
        rtol=rtol,
        method=method,
        out=out,
        progress=progress,
        window=window,
    )
    res = _run_start(
        field, shape, spacing, **kw
    )  # the periodic boundary figures are always measured (and warned about)
    warn_boundary(res.report, stacklevel=3)
    if return_report:
        return res.links, res.report
    return res.links


if lattice_links.__doc__:
    lattice_links.__doc__ = lattice_links.__doc__.format(args=_START_DOC_ARGS)


def boundary_mismatch(
    field, links, spacing, *, origin=None, group="su2", embedding=(0, 1), rtol=1e-12, method="auto", directions=None
) -> dict:
    """How far a periodic lattice start is from the continuum field across the boundary.

    For each direction mu the sites x_n with n_mu = L_mu (one period beyond the last site) are
    identified with those of n_mu = 0.  Returns a dict with
    'link_mismatch': max |U_nu(x at n_mu = L) - U_nu(x at n_mu = 0)| over the faces (nu != mu),
    'action_error': sum over the plaquettes crossing one face (n_mu = L - 1, n_nu <= L_nu - 2) of the
    Wilson action (beta = 2N) with the wrapped link minus that with the exact link, and
    'boundary_action': the wrapped plaquettes' Wilson action itself; and the same per direction mu
    (4-tuples, None for a direction not measured): 'link_mismatch_by_direction',
    'action_error_by_direction', 'boundary_action_by_direction'.
    directions: four booleans, the wrapped directions to measure (default all); spacing: one a or four a_i.
    links: (L1, L2, L3, L4, 4, N, N) from `lattice_links` with the same parameters (any array
    with numpy slicing: numpy, memmap, Zarr; only the faces are read).
    """
    if not (hasattr(links, "shape") and hasattr(links, "__getitem__")):
        links = np.asarray(links)
    shape = tuple(links.shape[:4])
    n = links.shape[-1]
    a = _v.spacings("spacing", spacing)
    org = resolve_origin(field, shape, a, origin)
    figs: list = [(None, None, None)] * 4  # (mismatch, action error, wrapped action) per direction
    for mu in range(4):
        lm = shape[mu]
        if directions is None or directions[mu]:
            figs[mu] = (0.0, 0.0, 0.0)
        if lm < 2 or figs[mu][0] is None:
            continue
        # the face one period beyond: sites with n_mu = L_mu, all other indices free
        idx = [np.arange(s) for s in shape]
        idx[mu] = np.array([lm])
        g = np.stack(np.meshgrid(*idx, indexing="ij"), axis=-1).reshape(-1, 4).astype(np.float64)
        pts = org + a * g
        others = [nu for nu in range(4) if nu != mu]
        xs = np.repeat(pts, 3, axis=0)
        ds = np.tile(np.eye(4)[others] * a, (pts.shape[0], 1))
        u = project_special_unitary(parallel_transporter(field, xs, ds, method=method, rtol=rtol))
        if group == "su3" and u.shape[-1] == 2:
            u = embed_links(u, 3, embedding)
        face_shape = list(shape)
        face_shape[mu] = 1
        exact = u.reshape(tuple(face_shape) + (3, n, n))
        figs[mu] = _bd.face_figures(links, exact, mu)
    mis_mu, err_mu, tot_mu = zip(*figs)
    link_mis, err = _bd.combine(mis_mu, err_mu)
    total = float(sum(v for v in tot_mu if v is not None))
    figures = {"link_mismatch": link_mis or 0.0, "action_error": err or 0.0, "boundary_action": total}
    figures.update(link_mismatch_by_direction=mis_mu, action_error_by_direction=err_mu)
    figures["boundary_action_by_direction"] = tot_mu
    return figures
