"""Lattice starts in chunks: the front doors ``lattice_links`` / ``lattice_start`` and the executor
registered with `instantonkit.lattice.starts.register_chunked_backend` for the deprecated
``lattice_links(..., backend="dask")``."""

from __future__ import annotations

from ..lattice import starts as _lat
from ..lattice.starts import LatticeStart, LinkStats, StartSpec
from ._optional import require
from .fingerprint import describe, domain_probe, probe
from .geometry import Job, check_chunks, default_chunks
from .schedule import lazy, run
from .store import finish_store, rows_stats, store_path
from .tasks import LinkChunk

__all__ = ["start_links", "lattice_links", "lattice_start"]

#: Bytes of one site's links per (output) matrix entry: four directions, complex128.
_SITE_ENTRY_BYTES = 4 * 16


def site_bytes(spec: StartSpec) -> int:
    """Bytes of the links of one site of ``spec``: 4 directions x N x N complex128."""
    return _SITE_ENTRY_BYTES * spec.n_out * spec.n_out


def spec_params(spec: StartSpec) -> dict:
    """The generation parameters of a start as stored (and compared on resume)."""
    return {
        "field": describe(spec.field),
        "field_probe": probe(spec.field),
        "domain_probe": domain_probe(spec.field, spec.origin, spec.spacings, spec.shape),
        "shape": list(spec.shape),
        "spacing": list(spec.spacing) if isinstance(spec.spacing, tuple) else spec.spacing,  # as JSON keeps it
        "origin": [float(v) for v in spec.origin],
        "group": spec.group,
        "embedding": list(spec.embedding),
        "boundary": spec.boundary if isinstance(spec.boundary, str) else list(spec.boundary),  # as JSON keeps it
        "rtol": spec.rtol,
        "method": spec.method,
    }


def link_report(spec: StartSpec, rows, seconds, links, boundary: bool = True):
    """LinkReport of a finished chunked start from its chunk rows, with the periodic boundary figures
    (`instantonkit.lattice.starts.StartSpec.boundary_figures`, read from the faces of ``links`` in this
    process, as the local path always does; ``boundary=False``, for ensemble members that did not ask
    for them, leaves them None)."""
    mismatch, action_err = spec.boundary_figures(links) if boundary else (None, None)
    return spec.report(rows_stats(rows), seconds, mismatch, action_err)


class FaceLinks:
    """The links of a start as `instantonkit.lattice.starts.boundary_mismatch` reads them, computed on demand.

    For the lazy path (no store): indexing by a box of sites (slices of the four site axes) computes
    that box with `StartSpec.block`, the kernel path of every start, so the figures equal the
    local path's bit for bit; boundary_mismatch reads only the two faces n_mu = 0 and n_mu = L - 1 of
    each direction (8 / L of the lattice's sites, less where faces meet).  shape: the links' shape.
    """

    def __init__(self, spec: StartSpec):
        self.spec = spec
        self.shape = spec.links_shape

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        lo, hi = [], []
        for i, size in enumerate(self.spec.shape):
            k = key[i] if i < len(key) else slice(None)
            if not isinstance(k, slice) or k.step not in (None, 1):
                raise TypeError(f"FaceLinks takes unit-step slices of the site axes; found {k!r}")
            start, stop, _ = k.indices(size)
            lo.append(start)
            hi.append(stop)
        links = self.spec.block(lo, hi)[0]
        rest = key[4:]
        return links[(slice(None),) * 4 + rest] if rest else links


def _start(spec: StartSpec, *, chunks, store, client, overwrite, progress, n_workers, stacklevel: int):
    """Links of ``spec`` in chunks: (links, report or None); the one implementation of the front doors.

    The periodic boundary figures are always measured, as on the local path, and a
    `instantonkit.lattice.starts.BoundaryActionWarning` is raised above BOUNDARY_WARN_FRACTION: from the
    store's faces, or without a store from the faces computed in this process (`FaceLinks`),
    whose figures then go with a report that holds no chunk rows (None is returned for it).
    """
    chunks = (
        default_chunks(spec.shape, site_bytes(spec))
        if chunks is None
        else check_chunks(chunks, spec.shape, "the lattice")
    )
    task = LinkChunk(spec)
    job = Job("lattice_links", "links", spec.links_shape, 4, chunks, "complex128", spec_params(spec), lambda idx: task)
    if store is None:
        if any(b != "open" for b in spec.boundaries):
            faces = spec.report(LinkStats(), 0.0, *spec.boundary_figures(FaceLinks(spec)))
            _lat.warn_boundary(faces, stacklevel=stacklevel)
        return lazy(job), None
    zarr = require("zarr")
    path = store_path(store)
    group, rows, computed, reused, seconds = run(job, path, client, overwrite, progress, n_workers)
    links = zarr.open_array(path, path="links", mode="r")
    report = link_report(spec, rows, seconds, links)
    finish_store(group, report.as_metadata(), computed, reused, seconds)
    _lat.warn_boundary(report, stacklevel=stacklevel)
    return links, report


def start_links(
    spec, *, chunks=None, store=None, client=None, overwrite=False, progress=None, return_report=False, n_workers=None
):
    """A validated lattice start (`instantonkit.lattice.starts.StartSpec`) in chunks: Zarr array or lazy dask array.

    The executor behind the deprecated ``lattice.lattice_links(..., backend="dask")`` (registered with
    `instantonkit.lattice.starts.register_chunked_backend`); new code calls `lattice_links` or
    `lattice_start`.  Arguments as in `lattice_links`; with ``return_report=True`` (store
    needed) returns ``(links, LinkReport)``.  The periodic boundary figures are always measured (and
    warned about), as by the local path.
    """
    if store is None and return_report:
        raise ValueError("return_report=True needs store= (the report is made from the written chunks)")
    links, report = _start(
        spec,
        chunks=chunks,
        store=store,
        client=client,
        overwrite=overwrite,
        progress=progress,
        n_workers=n_workers,
        stacklevel=5,
    )
    return (links, report) if return_report else links


_DOC_ARGS = """
    Args:
      field, shape, spacing, origin, group, embedding, boundary, rtol, method: as in
        `instantonkit.lattice.starts.lattice_links` (validated the same way, by ``lattice.StartSpec.make``).
      chunks: (c1, c2, c3, c4) sites per chunk, or one int for all four (default
        `instantonkit.cluster.default_chunks`, about CHUNK_BYTES = 32 MiB of links).
      store: path of a Zarr directory to write chunk by chunk (resumable; see the package notes), or
        None for a lazy dask array.
      client: a ``dask.distributed.Client``, None for a temporary local cluster of ``n_workers``
        processes, or 'sync' to run the chunks in this process.
      overwrite: replace a store made with other parameters (else it is refused).
      progress: progress(done, total) after each chunk.
      n_workers: workers of the temporary local cluster (default: the number of CPUs).
"""


def lattice_links(
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
    chunks=None,
    store=None,
    client=None,
    overwrite=False,
    progress=None,
    n_workers=None,
):
    """Link variables of ``field`` computed in chunks, bit-identical to `instantonkit.lattice.starts.lattice_links`.
    {args}
    Returns:
      (L1, L2, L3, L4, 4, N, N) complex128 links: the read-only ``zarr.Array`` of the store, or a lazy
      dask array of that shape and chunking (store=None).  The report is the store's attribute;
      `lattice_start` returns it.  For periodic starts the boundary figures are always measured,
      as by the local path (from the store's faces; without a store from the 8 faces, computed in
      this process), and a `instantonkit.lattice.starts.BoundaryActionWarning` is raised above
      BOUNDARY_WARN_FRACTION = 1 % of 8 pi^2.
    Raises:
      ValueError / TypeError: a bad argument (naming it); a store made with other parameters or chunks.
      ImportError: without the optional extra ``distributed``.
    """
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
    )
    return _start(
        spec,
        chunks=chunks,
        store=store,
        client=client,
        overwrite=overwrite,
        progress=progress,
        n_workers=n_workers,
        stacklevel=4,
    )[0]


def lattice_start(
    field,
    shape,
    spacing,
    *,
    store,
    origin=None,
    group="su2",
    embedding=(0, 1),
    boundary="periodic",
    rtol=1e-12,
    method="auto",
    chunks=None,
    client=None,
    overwrite=False,
    progress=None,
    n_workers=None,
) -> LatticeStart:
    """A chunked lattice start with its report: `instantonkit.lattice.starts.LatticeStart` (``.links``, ``.report``).
    {args}
    Returns:
      LatticeStart: ``links`` the read-only ``zarr.Array`` (L1, L2, L3, L4, 4, N, N) complex128 and
      ``report`` its `instantonkit.lattice.starts.LinkReport` (with the periodic boundary figures, read
      from the store's faces in this process, as the local `instantonkit.lattice.starts.lattice_start`).
    Raises:
      ValueError / TypeError: a bad argument; store=None (the report is made from the written chunks).
      ImportError: without the optional extra ``distributed``.
    """
    if store is None:
        raise ValueError(
            "lattice_start needs store= (the report is made from the written chunks); use lattice_links for a lazy array"
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
    )
    links, report = _start(
        spec,
        chunks=chunks,
        store=store,
        client=client,
        overwrite=overwrite,
        progress=progress,
        n_workers=n_workers,
        stacklevel=4,
    )
    return LatticeStart(links, report)


for _fn in (lattice_links, lattice_start):
    if _fn.__doc__:  # (absent under python -OO)
        _fn.__doc__ = _fn.__doc__.format(args=_DOC_ARGS)


def register() -> None:
    """Register `start_links` as the 'dask' backend of `instantonkit.lattice.starts.lattice_links` (deprecated path)."""
    _lat.register_chunked_backend("dask", start_links)
