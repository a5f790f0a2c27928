"""Ensembles of random multi-instanton lattice starts, computed in parallel, and their members."""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence

import numpy as np

from ..adhm.moduli import random_adhm
from ..adhm.quaternionic import ADHMData
from ..ansatz.mixtures import random_mixture
from ..core import _validate as _v
from ..lattice.references import field_from_record
from ..lattice.starts import StartSpec, default_origin
from ._optional import require
from .geometry import Job, check_chunks, default_chunks
from .links import link_report, site_bytes
from .schedule import lazy, run
from .store import REPORT, Column, finish_store, store_path, store_status
from .tasks import MemberChunk

__all__ = ["member_seed", "Ensemble", "ensemble", "load_member"]


def member_seed(seed: int, i: int) -> np.random.SeedSequence:
    """The seed of ensemble member ``i``: SeedSequence(seed, spawn_key=(i,)), the i-th child of
    SeedSequence(seed).spawn(n) for any n > i, so a member does not depend on the ensemble size."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer; found {seed!r}")
    return np.random.SeedSequence(int(seed), spawn_key=(int(i),))


@dataclasses.dataclass(frozen=True)
class Ensemble:
    """Random multi-instanton starts: ``links`` (n, L1, L2, L3, L4, 4, N, N) (Zarr or dask array),
    ``members`` the ADHM data of each (torus mixtures for k = (k_plus, k_minus)), ``seeds`` the per-member seeds (see `member_seed`),
    ``reports`` one `instantonkit.lattice.starts.LinkReport` per member (None without a store)."""

    links: object
    members: tuple
    seeds: tuple
    reports: tuple | None

    def __len__(self):
        return len(self.members)


def _ensemble_defaults(shape, a, spread, size_range):
    extent = float(np.min(np.asarray(shape) * a))  # a: (4,) spacings
    spread = extent / 10.0 if spread is None else float(spread)
    size_range = (extent / 16.0, extent / 8.0) if size_range is None else tuple(float(v) for v in size_range)
    if not (np.isfinite(spread) and spread >= 0):
        raise ValueError(f"spread must be finite and >= 0; found {spread!r}")
    if len(size_range) != 2 or not (0 < size_range[0] <= size_range[1] < np.inf):
        raise ValueError(f"size_range must be (low, high) with 0 < low <= high; found {size_range!r}")
    return spread, size_range


def _mixed_counts(k, rank) -> tuple[int, int]:
    """(k+, k-) of a mixed ensemble's ``k``, checked (SU(2) only)."""
    if len(k) != 2:
        raise ValueError(f"k must be a charge >= 1 or (k_plus, k_minus); found {tuple(k)!r:.80}")
    kp, km = (_v.nonnegative_int("k (k_plus, k_minus)", v) for v in k)
    if kp + km < 1:
        raise ValueError(f"k = (k_plus, k_minus) must hold at least one object; found ({kp}, {km})")
    if rank != 1:
        raise ValueError(f"instanton-anti-instanton ensembles are SU(2): rank must be 1; found {rank!r}")
    return kp, km


def ensemble(
    n: int,
    k: int | tuple[int, int],
    shape,
    spacing,
    *,
    seed: int = 0,
    rank: int = 1,
    gauge: str = "singular",
    spread: float | None = None,
    size_range=None,
    group: str | None = "su2",
    embedding=(0, 1),
    boundary: str | Sequence[str] = "periodic",
    rtol: float = 1e-12,
    method: str = "auto",
    chunks=None,
    store=None,
    client=None,
    overwrite: bool = False,
    progress=None,
    n_workers=None,
    boundary_figures: bool = False,
) -> Ensemble:
    """``n`` random charge-``k`` Sp(``rank``) multi-instanton lattice starts, computed in parallel.

    Member i is ``random_adhm(k, rank, seed=default_rng(member_seed(seed, i)), spread, size_range)``
    in ``gauge``: centres ~ N(0, spread^2) about the lattice middle (default spread: a tenth of the
    shortest extent L a), sizes ~ U(size_range) (default (L a / 16, L a / 8)).  Every member shares
    the lattice: origin -a (floor(L / 2) - 1/2), so the middle hypercube is centred on 0.  Spacing:
    one a or four (a1, a2, a3, a4) per direction (anisotropic lattices; extents L_mu a_mu).  Links as
    in `instantonkit.lattice.starts.lattice_links`; chunks: (c1, c2, c3, c4) per member.  store:
    Zarr directory (resumable; members' ADHM data and seeds in its attributes) or None for a dask
    array.  Rebuild member i from a store with `load_member`.

    ``k = (k_plus, k_minus)``: member i is instead ``random_mixture(k_plus, k_minus, a L, lo=origin - a/2,
    sizes=size_range, seed=default_rng(member_seed(seed, i)), overlap="ignore")``
    (`instantonkit.ansatz.mixtures`): the sum ansatz on the lattice's own torus, centres uniform in
    it (``spread`` and ``gauge`` do not apply), SU(2) only (rank 1).  ``boundary_figures=True`` adds
    each periodic member's boundary mismatch to its report (read in this process, member by member).

    Args:
      n: members (>= 1); k: charge (>= 1), or (k_plus, k_minus) for instanton-anti-instanton mixtures; shape: (L1, L2, L3, L4); spacing: a > 0 or four (a1, a2, a3, a4).
      seed, rank, gauge, spread, size_range: the random ADHM data (see above).
      group, embedding, boundary, rtol, method: as in `instantonkit.lattice.starts.lattice_links`.
      chunks, store: as in `instantonkit.cluster.lattice_links` (chunks per member).
      client, n_workers, overwrite, progress: as in `instantonkit.cluster.lattice_links`.
      boundary_figures: add the periodic boundary figures to each member's report.
    Returns:
      Ensemble: ``links`` (n, L1, L2, L3, L4, 4, N, N) complex128 (Zarr or dask array), ``members``,
      ``seeds`` and ``reports`` (None without a store).
    Raises:
      ValueError / TypeError: a bad argument (naming it); a store made with other parameters.
      ImportError: without the optional extra ``distributed``.
    """
    n = _v.positive_int("n (members)", n)
    mixed = isinstance(k, (tuple, list))
    counts = _mixed_counts(k, rank) if mixed else None
    k = sum(counts) if counts else _v.positive_int("k (charge)", k)
    shape = _v.lattice_shape("shape", shape, in_memory=False)
    spacing = _v.spacing_value("spacing", spacing)  # one float, or four when they differ (as starts keep it)
    a = _v.spacings("spacing", spacing)
    if not mixed:
        _v.adhm_affordable(k, _v.positive_int("rank", rank), k_name="k (charge)")
    # this process holds every member's seed, ADHM data (4 k (k + rank) float64) and start record
    member_bytes = 256.0 + 32.0 * k * (k + rank)
    _v.affordable("n (members)", n * member_bytes, f"the records of {n} members")
    spread, size_range = _ensemble_defaults(shape, a, spread, size_range)
    origin = default_origin(None, shape, a)  # no field: the middle hypercube is centred on 0
    seeds = tuple(member_seed(seed, i) for i in range(int(n)))
    members: tuple
    if counts:
        box = a * np.asarray(shape, dtype=np.float64)
        members = tuple(
            random_mixture(
                *counts, box, lo=origin - a / 2.0, sizes=size_range, seed=np.random.default_rng(s), overlap="ignore"
            )
            for s in seeds
        )
    else:
        members = tuple(
            dataclasses.replace(
                random_adhm(k, rank, seed=np.random.default_rng(s), spread=spread, size_range=size_range), gauge=gauge
            )
            for s in seeds
        )
    specs = [
        StartSpec.make(
            m,
            shape,
            spacing,
            origin=origin,
            group=group,
            embedding=embedding,
            boundary=boundary,
            rtol=rtol,
            method=method,
        )
        for m in members
    ]
    chunks = (
        default_chunks(shape, site_bytes(specs[0])) if chunks is None else check_chunks(chunks, shape, "the lattice")
    )
    params = {
        "n": int(n),
        "k": list(counts) if counts else int(k),
        "seed": int(seed),
        "rank": int(rank),
        "gauge": gauge,
        "spread": spread,
        "size_range": list(size_range),
        "shape": list(shape),
        "spacing": list(spacing) if isinstance(spacing, tuple) else spacing,  # as JSON keeps it
        "origin": origin.tolist(),
        "group": group,
        "embedding": list(specs[0].embedding),
        "boundary": specs[0].boundary if isinstance(specs[0].boundary, str) else list(specs[0].boundary),
        "rtol": float(rtol),
        "method": method,
        "members": [
            m.record() if counts else {"lam": np.asarray(m.lam).tolist(), "B": np.asarray(m.B).tolist()}
            for m in members
        ],
    }
    tasks = [MemberChunk(s) for s in specs]
    job = Job(
        "ensemble",
        "links",
        (int(n),) + specs[0].links_shape,
        5,
        (1,) + chunks,
        "complex128",
        params,
        lambda idx: tasks[idx[0]],
    )
    if store is None:
        return Ensemble(lazy(job), members, seeds, None)
    zarr = require("zarr")
    path = store_path(store)
    group_, rows, computed, reused, seconds = run(job, path, client, overwrite, progress, n_workers)
    links = zarr.open_array(path, path="links", mode="r")
    reports = tuple(
        link_report(s, rows[i], seconds, MemberView(links, i), boundary_figures) for i, s in enumerate(specs)
    )
    finish_store(group_, {"members": [r.as_metadata() for r in reports]}, computed, reused, seconds)
    return Ensemble(links, members, seeds, reports)


@dataclasses.dataclass(frozen=True)
class MemberView:
    """links[i] of an ensemble array without reading it: shape and basic slicing only."""

    links: object
    i: int

    @property
    def shape(self):
        return tuple(self.links.shape[1:])

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        return self.links[(self.i,) + key]


def load_member(path, i: int):
    """Member ``i`` of an ensemble store: (links (L1, L2, L3, L4, 4, N, N) numpy, ADHMData or Mixture).

    Args:
      path: an ensemble store; i: member index, 0 <= i < n.
    Returns:
      (links (L1, L2, L3, L4, 4, N, N) complex128 numpy, the member's ADHMData, or its
      `instantonkit.ansatz.mixtures.Mixture` for k = (k_plus, k_minus)).
    Raises:
      ValueError: not an ensemble store, a bad index, or a member whose chunks are not all done.
    """
    st = store_status(path)
    if st.kind != "ensemble":
        raise ValueError(f"{os.fspath(path)!r} holds a {st.kind!r} store, not an ensemble")
    n = st.params["n"]
    if isinstance(i, bool) or not isinstance(i, (int, np.integer)) or not 0 <= i < n:
        raise ValueError(f"member index must be an integer in 0..{n - 1}; found {i!r}")
    zarr = require("zarr")
    rows = np.asarray(zarr.open_array(os.fspath(path), path=REPORT, mode="r")[i])
    if not np.all(rows[..., Column.DONE] == 1.0):
        raise ValueError(
            f"member {i} of {os.fspath(path)!r} is not complete ({int(np.sum(rows[..., Column.DONE] == 1.0))} of {rows[..., Column.DONE].size} chunks); run ensemble(...) again to finish it"
        )
    m = st.params["members"][i]
    if isinstance(st.params["k"], list):
        data = field_from_record(m)
    else:
        data = ADHMData(np.asarray(m["lam"]), np.asarray(m["B"]), gauge=st.params["gauge"])
    return np.asarray(zarr.open_array(os.fspath(path), path="links", mode="r")[i]), data
