"""Past one machine: lattice starts, point-set evaluations and ensembles in chunks on Dask, stored in Zarr.

Front doors: `lattice_links` / `lattice_start` (lattice starts), `evaluate` and
`evaluate_grid` (densities), `ensemble` / `load_member` (random starts) and
`store_status`.  One module per job: ``geometry`` (chunk shapes), ``tasks`` (what a chunk
computes), ``fingerprint`` (what a store was made from), ``store`` (the Zarr protocol and the chunk
report columns), ``schedule`` (clients, running a job), ``links``, ``points``, ``ensembles``.

Every chunk is computed by the kernels of the local path (`instantonkit.lattice.starts.block_links`
for links, `instantonkit.engine.fields.evaluate` for densities).  Links are bit-identical to the
single-process start (the compiled batch size is fixed per lattice, `instantonkit.lattice.starts.link_batch`);
densities agree with ``fields.evaluate`` on the same points to rounding (about 1e-15 relative: XLA's
code for the last, padded batch of a call depends on its size, which depends on the chunk).

Stores are Zarr (format 3) directories on a file system every worker sees under the same absolute path.  A store holds the
result array (``links`` or ``values``) and a small array ``chunk_report`` with one row per chunk:
``store.REPORT_COLUMNS`` = (done, unitarity before, unitarity after, Magnus steps, refinement difference, potential evaluations).  A task writes
its chunk (Zarr's local store writes a temporary file and renames it, so a chunk is either all there
or absent) and only then its row, so a row with ``done = 1`` always means a complete chunk.  A store
whose rows are not all done is partial: calling again with the same parameters computes only the
missing chunks; a store made with other parameters is never overwritten unless ``overwrite=True``.
The generation parameters, a fingerprint of the field (its potential at three fixed points) and,
once complete, the quality report are the JSON attribute ``instantonkit`` of the store.

Schedulers: a ``dask.distributed.Client`` the caller passes, ``None`` for a temporary local cluster
(``n_workers`` processes, one thread each), or ``"sync"`` to run the chunks in this process.

Needs the optional extra ``distributed`` (dask[distributed], zarr): ``pip install 'instantonkit[distributed]'``.
"""

from __future__ import annotations

from . import ensembles, fingerprint, geometry, links, points, schedule, store, tasks  # noqa: F401  (one module per job)
from .ensembles import Ensemble, ensemble, load_member, member_seed
from .geometry import CHUNK_BYTES, default_chunks
from .links import lattice_links, lattice_start, start_links
from .points import evaluate, evaluate_grid
from .store import REPORT_COLUMNS, StaleTaskError, StoreStatus, store_status

__all__ = [
    "lattice_links",
    "lattice_start",
    "start_links",
    "evaluate",
    "evaluate_grid",
    "ensemble",
    "Ensemble",
    "StoreStatus",
    "StaleTaskError",
    "store_status",
    "load_member",
    "member_seed",
    "default_chunks",
    "CHUNK_BYTES",
    "REPORT_COLUMNS",
]

links.register()  # the deprecated lattice.lattice_links(..., backend="dask") runs start_links
