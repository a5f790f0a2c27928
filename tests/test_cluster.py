"""Specification of the chunked backend (Dask scheduling, Zarr stores, resumption, ensembles).

The physics of the links and densities is specified against published formulas in test_lattice.py
and test_fields.py for the local path; here the chunked path is required to reproduce the local
path bit for bit, so those checks carry over.
"""

import os
import signal
import subprocess
import sys
import textwrap

import dask.array as da
import distributed
import numpy as np
import pytest
import zarr

import instantonkit as ik
from instantonkit import cluster
from instantonkit.lattice import starts as lat

TWO = ik.multi_instanton([[0.0, 0.0, 0.0, 0.0], [1.4, 0.3, -0.5, 0.7]], [1.1, 0.8])
SHAPE = (4, 4, 4, 6)
RTOL = 1e-8


@pytest.fixture(scope="module")
def client():
    """A two-worker local cluster (one thread per worker), shared by the tests of this module."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=":0") as lc:
        with distributed.Client(lc) as c:
            yield c


@pytest.fixture(scope="module")
def two_local():
    """The single-process reference start of the charge-2 field (Magnus path) and its report."""
    res = lat.lattice_start(TWO, SHAPE, 1.0, rtol=RTOL)
    return res.links, res.report


def _report_without_time(rep):
    d = rep.as_metadata()
    d.pop("seconds")
    return d


# -- bit identity with the local path --------------------------------------------------------------


@pytest.mark.slow
def test_two_worker_cluster_start_is_bit_identical_to_local(client, two_local, tmp_path):
    ref, _ = two_local
    z = cluster.lattice_links(TWO, SHAPE, 1.0, rtol=RTOL, chunks=(2, 4, 3, 4), store=tmp_path / "s.zarr", client=client)
    assert np.array_equal(np.asarray(z[...]), ref)


@pytest.mark.slow
def test_chunked_report_equals_local_report(client, two_local, tmp_path):
    _, rep = two_local
    rep2 = cluster.lattice_start(
        TWO, SHAPE, 1.0, rtol=RTOL, chunks=(4, 2, 4, 3), store=tmp_path / "s.zarr", client=client
    ).report
    assert _report_without_time(rep2) == _report_without_time(rep)


def test_closed_form_su3_start_in_this_process_is_bit_identical(tmp_path):
    field = ik.bpst(size=1.5)
    ref = ik.lattice_links(field, (5, 4, 4, 6), 0.8, group="su3", embedding=(0, 2))
    z = cluster.lattice_links(
        field,
        (5, 4, 4, 6),
        0.8,
        group="su3",
        embedding=(0, 2),
        chunks=(2, 3, 4, 5),
        store=tmp_path / "s",
        client="sync",
    )
    assert z.shape == (5, 4, 4, 6, 4, 3, 3) and z.dtype == np.complex128
    assert np.array_equal(np.asarray(z[...]), ref)


def test_without_store_a_lazy_dask_array_is_returned():
    field = ik.bpst(size=1.2)
    lazy = cluster.lattice_links(field, (4, 4, 4, 4), 1.0, chunks=(2, 4, 4, 3))
    assert isinstance(lazy, da.Array)
    assert lazy.chunks[:4] == ((2, 2), (4,), (4,), (3, 1))
    assert np.array_equal(lazy.compute(scheduler="sync"), ik.lattice_links(field, (4, 4, 4, 4), 1.0))


def test_sp2_start_uses_the_fields_own_group(tmp_path):
    field = ik.embed_sp(ik.bpst(size=1.3), 2)
    ref = ik.lattice_links(field, (3, 3, 3, 4), 1.0, group=None, rtol=1e-6)
    z = cluster.lattice_links(
        field, (3, 3, 3, 4), 1.0, group=None, rtol=1e-6, chunks=(3, 2, 3, 2), store=tmp_path / "s", client="sync"
    )
    assert z.shape[-2:] == (4, 4)
    assert np.array_equal(np.asarray(z[...]), ref)


# -- stores: parameters, reuse, refusal ------------------------------------------------------------


def test_store_records_the_generation_parameters_and_report(tmp_path):
    field = ik.bpst(center=(0.1, 0.0, 0.0, 0.0), size=1.2)
    cluster.lattice_links(field, (4, 4, 4, 4), 0.9, chunks=(4, 4, 2, 2), store=tmp_path / "s", client="sync")
    st = cluster.store_status(tmp_path / "s")
    assert st.kind == "lattice_links" and st.complete and (st.chunks_done, st.chunks_total) == (4, 4)
    assert st.params["shape"] == [4, 4, 4, 4] and st.params["spacing"] == 0.9 and st.params["group"] == "su2"
    assert st.params["field"]["type"].endswith("ADHMData")
    assert st.report["method"] == "closed" and st.report["unitarity_after"] < 1e-14
    assert st.report["boundary_link_mismatch"] is not None  # always measured for periodic starts, as locally
    meta = zarr.open_group(str(tmp_path / "s"), mode="r").attrs["instantonkit"]
    assert meta["runs"][-1]["chunks_computed"] == 4


def test_complete_store_is_returned_without_computing(tmp_path):
    field = ik.bpst(size=1.2)
    kw = dict(chunks=(2, 4, 4, 4), store=tmp_path / "s", client="sync")
    first = np.asarray(cluster.lattice_links(field, (4, 4, 4, 4), 1.0, **kw)[...])
    calls = []
    again = cluster.lattice_links(field, (4, 4, 4, 4), 1.0, progress=lambda d, t: calls.append(d), **kw)
    assert calls == [] and np.array_equal(np.asarray(again[...]), first)
    last = zarr.open_group(str(tmp_path / "s"), mode="r").attrs["instantonkit"]["runs"][-1]
    assert (last["chunks_computed"], last["chunks_reused"]) == (0, 2)


def test_store_made_with_other_parameters_is_refused_naming_them(tmp_path):
    field = ik.bpst(size=1.2)
    cluster.lattice_links(field, (4, 4, 4, 4), 1.0, chunks=4, store=tmp_path / "s", client="sync")
    with pytest.raises(ValueError, match="spacing"):
        cluster.lattice_links(field, (4, 4, 4, 4), 0.5, chunks=4, store=tmp_path / "s", client="sync")
    with pytest.raises(ValueError, match="field_probe"):  # same parameters, another field
        cluster.lattice_links(ik.bpst(size=1.3), (4, 4, 4, 4), 1.0, chunks=4, store=tmp_path / "s", client="sync")


def test_overwrite_replaces_a_store_made_with_other_parameters(tmp_path):
    field = ik.bpst(size=1.2)
    cluster.lattice_links(field, (4, 4, 4, 4), 1.0, chunks=4, store=tmp_path / "s", client="sync")
    z = cluster.lattice_links(field, (4, 4, 4, 4), 0.5, chunks=4, store=tmp_path / "s", client="sync", overwrite=True)
    assert cluster.store_status(tmp_path / "s").params["spacing"] == 0.5
    assert np.array_equal(np.asarray(z[...]), ik.lattice_links(field, (4, 4, 4, 4), 0.5))


def test_resuming_with_other_chunks_is_refused(tmp_path):
    field = ik.bpst(size=1.2)
    cluster.lattice_links(field, (4, 4, 4, 4), 1.0, chunks=(4, 4, 4, 2), store=tmp_path / "s", client="sync")
    with pytest.raises(ValueError, match=r"chunks \(4, 4, 4, 2\)"):
        cluster.lattice_links(field, (4, 4, 4, 4), 1.0, chunks=(4, 4, 2, 4), store=tmp_path / "s", client="sync")


def test_a_directory_that_is_not_a_store_is_never_touched(tmp_path):
    d = tmp_path / "mine"
    d.mkdir()
    (d / "notes.txt").write_text("keep me")
    for overwrite in (False, True):
        with pytest.raises(ValueError, match="not an instantonkit store"):
            cluster.lattice_links(ik.bpst(), (2, 2, 2, 2), 1.0, store=d, client="sync", overwrite=overwrite)
    assert (d / "notes.txt").read_text() == "keep me"


def test_store_status_of_a_foreign_path_is_a_clear_error(tmp_path):
    with pytest.raises(ValueError, match="not a Zarr store"):
        cluster.store_status(tmp_path / "nothing-here")


# -- resumption ---------------------------------------------------------------------------------------

_KILLED_RUN = """
import os, signal
import instantonkit as ik

field = ik.multi_instanton([[0.0, 0.0, 0.0, 0.0], [1.4, 0.3, -0.5, 0.7]], [1.1, 0.8])

def die_after_two(done, total):
    if done == 2:
        os.kill(os.getpid(), signal.SIGKILL)  # a hard stop: no clean-up runs

ik.cluster.lattice_links(field, {shape}, 1.0, rtol={rtol}, chunks={chunks}, store={store!r}, client="sync", progress=die_after_two)
"""


@pytest.mark.slow
def test_a_killed_run_is_completed_by_the_next_call_with_nothing_lost(two_local, tmp_path):
    ref, _ = two_local
    store, chunks = str(tmp_path / "s"), (2, 2, 4, 6)
    script = _KILLED_RUN.format(shape=SHAPE, rtol=RTOL, chunks=chunks, store=store)
    proc = subprocess.run([sys.executable, "-c", textwrap.dedent(script)], capture_output=True, timeout=600)
    assert proc.returncode == -signal.SIGKILL, proc.stderr.decode()[-2000:]
    st = cluster.store_status(store)
    assert not st.complete and st.chunks_done == 2 and st.chunks_total == 4
    calls = []
    z = cluster.lattice_links(
        TWO,
        SHAPE,
        1.0,
        rtol=RTOL,
        chunks=chunks,
        store=store,
        client="sync",
        progress=lambda d, t: calls.append((d, t)),
    )
    assert calls == [(3, 4), (4, 4)]  # only the two missing chunks were computed
    assert np.array_equal(np.asarray(z[...]), ref)
    meta = zarr.open_group(store, mode="r").attrs["instantonkit"]
    assert meta["runs"][-1]["chunks_reused"] == 2 and meta["runs"][-1]["chunks_computed"] == 2


def test_a_chunk_written_but_not_marked_done_is_recomputed(tmp_path):
    field = ik.bpst(size=1.2)
    kw = dict(chunks=(2, 4, 4, 4), store=tmp_path / "s", client="sync")
    cluster.lattice_links(field, (4, 4, 4, 4), 1.0, **kw)
    links = zarr.open_array(str(tmp_path / "s"), path="links", mode="r+")
    links[2:4] = np.zeros((2, 4, 4, 4, 4, 2, 2))  # as if a task died after its data and before its row
    rows = zarr.open_array(str(tmp_path / "s"), path="chunk_report", mode="r+")
    rows[1, 0, 0, 0] = np.zeros(len(cluster.REPORT_COLUMNS))
    assert cluster.store_status(tmp_path / "s").chunks_done == 1
    z = cluster.lattice_links(field, (4, 4, 4, 4), 1.0, **kw)
    assert np.array_equal(np.asarray(z[...]), ik.lattice_links(field, (4, 4, 4, 4), 1.0))


@pytest.mark.slow
@pytest.mark.long
def test_killing_a_worker_mid_run_completes_the_store_without_duplicates(two_local, tmp_path):
    ref, _ = two_local
    with (
        distributed.LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=":0") as lc,
        distributed.Client(lc) as c,
    ):
        pids = sorted(c.run(os.getpid).values())
        killed = []

        def kill_one(done, total):
            if done == 1 and not killed:
                os.kill(pids[0], signal.SIGKILL)
                killed.append(pids[0])

        store = tmp_path / "s"
        z = cluster.lattice_links(
            TWO, SHAPE, 1.0, rtol=RTOL, chunks=(1, 2, 4, 3), store=store, client=c, progress=kill_one
        )
        assert killed and killed[0] not in c.run(os.getpid).values()  # the nanny started a new worker process
    assert np.array_equal(np.asarray(z[...]), ref)
    chunk_files = [f for _, _, files in os.walk(store / "links" / "c") for f in files]
    assert len(chunk_files) == 4 * 2 * 1 * 2  # one file per chunk, no leftovers of interrupted writes
    assert cluster.store_status(store).complete


# -- point sets and grids -------------------------------------------------------------------------
# Densities agree with fields.evaluate to rounding only: XLA's code for the last, padded batch of a
# call depends on its size, which depends on the chunk.


def _to_rounding(a, b) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    return a.shape == b.shape and np.allclose(a, b, rtol=1e-13, atol=1e-14 * float(np.max(np.abs(b))))


def test_grid_values_are_bit_identical_to_the_local_evaluation(tmp_path):
    shape, a = (4, 3, 5, 4), 0.7
    z = cluster.evaluate_grid(TWO, shape, a, "action_density", chunks=(2, 3, 2, 4), store=tmp_path / "g", client="sync")
    pts = lat.site_points(shape, a, lat.default_origin(TWO, shape, a))
    assert z.shape == shape and _to_rounding(np.asarray(z[...]), ik.action_density(TWO, pts))


ANISO = (0.5, 0.5, 0.5, 0.25)  # a thermal lattice's (a_s, a_s, a_s, a_t), xi = 2


def test_an_anisotropic_grid_gives_the_local_values_at_origin_plus_a_mu_n_mu(tmp_path):
    # four spacings as the starts take them (instantonkit.lattice.thermal); the chunks see the same sites
    shape = (3, 2, 3, 4)
    z = cluster.evaluate_grid(
        TWO, shape, ANISO, "charge_density", chunks=(2, 2, 2, 3), store=tmp_path / "g", client="sync"
    )
    pts = lat.site_points(shape, ANISO, lat.default_origin(TWO, shape, ANISO))
    assert _to_rounding(np.asarray(z[...]), ik.charge_density(TWO, pts))
    assert cluster.store_status(tmp_path / "g").params["spacing"] == list(ANISO)


def test_grid_field_strength_keeps_the_trailing_axes():
    field = ik.bpst(size=1.0)
    lazy = cluster.evaluate_grid(field, (2, 2, 3, 2), 0.5, "field_strength", chunks=(1, 2, 2, 2))
    pts = lat.site_points((2, 2, 3, 2), 0.5, lat.default_origin(field, (2, 2, 3, 2), 0.5))
    assert lazy.shape == (2, 2, 3, 2, 4, 4, 2, 2)
    assert _to_rounding(lazy.compute(scheduler="sync"), ik.field_strength(field, pts))


def test_points_from_numpy_zarr_and_dask_give_the_local_values(tmp_path):
    rng = np.random.default_rng(3)
    pts = rng.normal(scale=2.0, size=(7, 9, 4))
    ref = ik.charge_density(TWO, pts)
    z = cluster.evaluate(TWO, pts, "charge_density", chunks=(3, 4), store=tmp_path / "a", client="sync")
    assert _to_rounding(z[...], ref)
    zp = zarr.create_array(str(tmp_path / "pts"), shape=pts.shape, chunks=(4, 9, 4), dtype="f8")
    zp[...] = pts
    z2 = cluster.evaluate(TWO, zp, "charge_density", chunks=(4, 9), store=tmp_path / "b", client="sync")
    assert _to_rounding(z2[...], ref)
    lazy = cluster.evaluate(TWO, da.from_array(pts, chunks=(2, 5, 4)), "charge_density")
    assert _to_rounding(lazy.compute(scheduler="sync"), ref)


@pytest.mark.slow
def test_grid_values_on_the_cluster_match(client, tmp_path):
    shape = (3, 4, 4, 5)
    z = cluster.evaluate_grid(
        TWO, shape, 0.6, "self_duality_residual", chunks=(3, 2, 4, 2), store=tmp_path / "g", client=client
    )
    pts = lat.site_points(shape, 0.6, lat.default_origin(TWO, shape, 0.6))
    assert _to_rounding(np.asarray(z[...]), ik.self_duality_residual(TWO, pts))


@pytest.mark.slow
def test_without_a_client_a_temporary_local_cluster_is_used(tmp_path):
    shape = (2, 3, 2, 4)
    z = cluster.evaluate_grid(TWO, shape, 0.9, "action_density", chunks=(1, 3, 2, 4), store=tmp_path / "g", n_workers=1)
    pts = lat.site_points(shape, 0.9, lat.default_origin(TWO, shape, 0.9))
    assert _to_rounding(np.asarray(z[...]), ik.action_density(TWO, pts))


def test_a_store_of_other_points_is_refused(tmp_path):
    pts = np.random.default_rng(4).normal(size=(6, 4))
    cluster.evaluate(TWO, pts, "action_density", chunks=(3,), store=tmp_path / "a", client="sync")
    with pytest.raises(ValueError, match="differs in: points"):
        cluster.evaluate(TWO, pts + 1.0, "action_density", chunks=(3,), store=tmp_path / "a", client="sync")


def test_dask_points_cannot_go_to_a_store(tmp_path):
    with pytest.raises(ValueError, match="numpy or Zarr points"):
        cluster.evaluate(TWO, da.zeros((4, 4)), "action_density", store=tmp_path / "x")


def test_unknown_quantity_is_refused():
    with pytest.raises(ValueError, match="quantity must be one of"):
        cluster.evaluate_grid(TWO, (2, 2, 2, 2), 1.0, "energy")


def test_points_with_a_wrong_last_axis_are_refused():
    with pytest.raises(ValueError, match=r"\(\.\.\., 4\); found shape \(5, 3\)"):
        cluster.evaluate(TWO, np.zeros((5, 3)), "action_density")


# -- ensembles -------------------------------------------------------------------------------------


def test_member_seed_is_the_spawned_child_of_numpy():
    # numpy's SeedSequence.spawn(n) gives children with spawn_key (i,) (numpy documentation, common practice)
    children = np.random.SeedSequence(42).spawn(5)
    for i, child in enumerate(children):
        assert np.array_equal(cluster.member_seed(42, i).generate_state(4), child.generate_state(4))


def test_ensemble_members_do_not_depend_on_the_ensemble_size():
    small = cluster.ensemble(2, 2, (4, 4, 4, 4), 1.0, seed=11, rtol=1e-6)
    large = cluster.ensemble(3, 2, (4, 4, 4, 4), 1.0, seed=11, rtol=1e-6)
    for a, b in zip(small.members, large.members):
        assert np.array_equal(np.asarray(a.lam), np.asarray(b.lam)) and np.array_equal(np.asarray(a.B), np.asarray(b.B))
    other = cluster.ensemble(2, 2, (4, 4, 4, 4), 1.0, seed=12, rtol=1e-6)
    assert not np.array_equal(np.asarray(other.members[0].B), np.asarray(small.members[0].B))


def test_ensemble_members_are_valid_charge_k_data_inside_the_box():
    ens = cluster.ensemble(4, 3, (8, 8, 8, 8), 1.0, seed=5)
    assert len(ens) == 4 and isinstance(ens.links, da.Array) and ens.links.shape == (4, 8, 8, 8, 8, 4, 2, 2)
    for m in ens.members:
        assert m.k == 3 and m.constraint_residual() < 1e-12
        assert np.all((np.asarray(m.sizes()) >= 0.5) & (np.asarray(m.sizes()) <= 1.0))  # (L a / 16, L a / 8)


def test_an_anisotropic_ensemble_member_is_its_local_start_bit_for_bit(tmp_path):
    # DEVELOPERS.md, chunked evaluation: the chunked path gives the local bits, for four spacings too
    shape = (2, 2, 2, 4)
    ens = cluster.ensemble(
        1, 1, shape, ANISO, seed=4, rtol=1e-8, chunks=(1, 2, 2, 4), store=tmp_path / "e", client="sync"
    )
    local = lat.lattice_links(ens.members[0], shape, ANISO, origin=lat.default_origin(None, shape, ANISO), rtol=1e-8)
    assert np.array_equal(np.asarray(ens.links[0]), local)
    assert ens.reports[0].spacings == ANISO and cluster.store_status(tmp_path / "e").params["spacing"] == list(ANISO)


def test_an_ensemble_of_four_equal_spacings_is_the_ensemble_of_one():
    one = cluster.ensemble(1, 1, (2, 2, 2, 2), 0.5, seed=4, rtol=1e-8)
    four = cluster.ensemble(1, 1, (2, 2, 2, 2), [0.5] * 4, seed=4, rtol=1e-8)
    assert np.array_equal(one.links.compute(scheduler="sync"), four.links.compute(scheduler="sync"))


@pytest.mark.slow
def test_ensemble_on_the_cluster_matches_each_members_local_start(client, tmp_path):
    ens = cluster.ensemble(
        3,
        2,
        (4, 4, 4, 4),
        1.0,
        seed=9,
        rtol=1e-6,
        chunks=(2, 4, 4, 4),
        store=tmp_path / "e",
        client=client,
        boundary_figures=True,
    )
    assert ens.links.shape == (3, 4, 4, 4, 4, 4, 2, 2) and len(ens.reports) == 3
    for i in range(3):
        links, data = cluster.load_member(tmp_path / "e", i)
        assert np.array_equal(np.asarray(data.B), np.asarray(ens.members[i].B))
        res = lat.lattice_start(data, (4, 4, 4, 4), 1.0, origin=np.full(4, -1.5), rtol=1e-6)
        ref, rep = res.links, res.report
        assert np.array_equal(links, ref)
        assert _report_without_time(ens.reports[i]) == _report_without_time(rep)


def test_load_member_of_a_partial_ensemble_is_a_clear_error(tmp_path):
    store = tmp_path / "e"

    def stop(done, total):
        if done == 1:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        cluster.ensemble(2, 1, (2, 2, 2, 2), 1.0, chunks=2, store=store, client="sync", progress=stop)
    with pytest.raises(ValueError, match="member 1 .* not complete"):
        cluster.load_member(store, 1)
    with pytest.raises(ValueError, match="0..1"):
        cluster.load_member(store, 2)


# -- argument checks --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kw, match",
    [
        (dict(backend="spark"), "backend must be one of"),
        (dict(backend="dask", chunks=(2, 2, 2)), r"4 positive integers .* found \(2, 2, 2\)"),
        (dict(backend="dask", chunks=(2, 0, 2, 2)), "positive integers"),
        (dict(backend="dask", return_report=True), "needs store="),
        (dict(chunks=(2, 2, 2, 2)), "need backend='dask'"),
        (dict(backend="dask", out=np.empty(1)), "out= is for the local backend"),
    ],
)
@pytest.mark.filterwarnings("ignore::DeprecationWarning")  # the deprecated backend= call, still checked
def test_bad_backend_arguments_are_refused(kw, match):
    with pytest.raises(ValueError, match=match):
        ik.lattice_links(ik.bpst(), (2, 2, 2, 2), 1.0, **kw)


def test_the_deprecated_dask_backend_call_still_gives_the_chunked_links(tmp_path):
    field = ik.bpst(size=1.2)
    with pytest.deprecated_call(match="cluster.lattice_links"):
        z = ik.lattice_links(
            field, (4, 4, 4, 4), 1.0, backend="dask", chunks=(2, 4, 4, 4), store=tmp_path / "s", client="sync"
        )
    with pytest.deprecated_call(match="lattice_start"):
        z2, rep = ik.lattice_links(
            field,
            (4, 4, 4, 4),
            1.0,
            backend="dask",
            chunks=(2, 4, 4, 4),
            store=tmp_path / "s",
            client="sync",
            return_report=True,
        )
    ref = cluster.lattice_start(field, (4, 4, 4, 4), 1.0, chunks=(2, 4, 4, 4), store=tmp_path / "s", client="sync")
    assert np.array_equal(np.asarray(z[...]), np.asarray(ref.links[...])) and np.array_equal(
        np.asarray(z2[...]), np.asarray(ref.links[...])
    )
    assert _report_without_time(rep) == _report_without_time(ref.report)
    assert np.array_equal(np.asarray(z[...]), ik.lattice_links(field, (4, 4, 4, 4), 1.0))


def test_a_lattice_start_needs_a_store():
    with pytest.raises(ValueError, match="needs store="):
        cluster.lattice_start(ik.bpst(), (2, 2, 2, 2), 1.0, store=None)


def test_a_bad_client_is_refused(tmp_path):
    with pytest.raises(ValueError, match="client must be"):
        cluster.lattice_links(ik.bpst(), (2, 2, 2, 2), 1.0, store=tmp_path / "s", client="threads")
    with pytest.raises(TypeError, match="client must be"):
        cluster.lattice_links(ik.bpst(), (2, 2, 2, 2), 1.0, store=tmp_path / "t", client=3)


def test_missing_optional_extra_names_it(monkeypatch):
    monkeypatch.setitem(sys.modules, "zarr", None)
    with pytest.raises(ImportError, match=r"instantonkit\[distributed\]"):
        cluster.store_status("anything")


def test_default_chunks_stay_under_the_byte_target():
    c = cluster.default_chunks((64, 64, 64, 64), 4 * 9 * 16)
    assert np.prod(c) * 4 * 9 * 16 <= cluster.CHUNK_BYTES
    assert all(64 % v == 0 for v in c)
    assert cluster.default_chunks((3, 3, 3, 3), 16) == (3, 3, 3, 3)


# -- robustness found in review --------------------------------------------------------------------


def test_a_task_of_a_replaced_store_writes_nothing(tmp_path):
    field = ik.bpst(size=1.2)
    store = str(tmp_path / "s")
    cluster.lattice_links(field, (2, 2, 2, 2), 1.0, chunks=(1, 2, 2, 2), store=store, client="sync")
    before = np.asarray(zarr.open_array(store, path="links", mode="r")[...])
    task = cluster.tasks.LinkChunk(lat.StartSpec.make(ik.bpst(size=2.0), (2, 2, 2, 2), 1.0))
    with pytest.raises(cluster.StaleTaskError, match="replaced"):  # a task of an earlier store's run
        cluster.store.write_chunk(store, "links", task, (0, 0, 0, 0), (2, 2, 2, 2), (1, 2, 2, 2), "an-old-store-id")
    assert np.array_equal(np.asarray(zarr.open_array(store, path="links", mode="r")[...]), before)


def test_zarr_points_with_unwritten_chunks_are_refused(tmp_path):
    zp = zarr.create_array(str(tmp_path / "pts"), shape=(6, 4), chunks=(3, 4), dtype="f8")
    zp[:3] = np.ones((3, 4))
    with pytest.raises(ValueError, match="1 of 2 chunks written"):
        cluster.evaluate(TWO, zp, "action_density", store=tmp_path / "v", client="sync")


def test_zarr_points_opened_relative_to_another_directory_are_refused(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    zp = zarr.create_array("pts", shape=(4, 4), chunks=(2, 4), dtype="f8")
    zp[...] = np.ones((4, 4))
    (tmp_path / "elsewhere").mkdir()
    monkeypatch.chdir(tmp_path / "elsewhere")
    with pytest.raises(ValueError, match="not found from this directory"):
        cluster.evaluate(TWO, zp, "action_density", client="sync")


def test_a_rebuilt_callable_with_other_captured_numbers_is_not_resumed(tmp_path):
    import jax.numpy as jnp

    s3 = jnp.array([[1.0, 0.0], [0.0, -1.0]])

    def make(c):
        def pot(x):
            return 1j * jnp.where(x[3] > 2.5, c, 0.1) * jnp.stack([s3] * 4)

        return pot

    kw = dict(origin=np.zeros(4), chunks=(1, 4, 4, 4), store=tmp_path / "g", client="sync")
    cluster.evaluate_grid(make(0.1), (4, 4, 4, 4), 1.0, "potential", **kw)
    with pytest.raises(ValueError, match="differs in: .*field"):
        cluster.evaluate_grid(make(0.9), (4, 4, 4, 4), 1.0, "potential", **kw)


def test_empty_point_arrays_are_a_clear_error():
    with pytest.raises(ValueError, match=r"nothing to evaluate: points has shape \(0, 4\)"):
        cluster.evaluate(TWO, np.zeros((0, 4)), "action_density")


def test_lazy_evaluation_on_numpy_points_ships_blocks_not_the_array():
    pts = np.random.default_rng(2).normal(size=(64, 4))
    lazy = cluster.evaluate(TWO, pts, "action_density", chunks=(16,))
    pts[:] = 0.0  # the lazy array holds its own copy
    assert lazy.numblocks == (4,)
    assert _to_rounding(
        lazy.compute(scheduler="sync"), ik.action_density(TWO, np.random.default_rng(2).normal(size=(64, 4)))
    )


def test_asking_again_keeps_the_boundary_figures_of_the_stored_report(tmp_path):
    field = ik.bpst(size=1.2)
    kw = dict(chunks=(2, 4, 4, 4), store=tmp_path / "s", client="sync")
    cluster.lattice_start(field, (4, 4, 4, 4), 1.0, **kw)
    first = cluster.store_status(tmp_path / "s").report["boundary_link_mismatch"]
    cluster.lattice_links(field, (4, 4, 4, 4), 1.0, **kw)
    assert first is not None and cluster.store_status(tmp_path / "s").report["boundary_link_mismatch"] == first


@pytest.mark.parametrize("n_workers", [0, -1])
def test_bad_worker_counts_are_refused(tmp_path, n_workers):
    with pytest.raises(ValueError, match="n_workers must be >= 1"):
        cluster.evaluate_grid(TWO, (2, 2, 2, 2), 1.0, "action_density", store=tmp_path / "g", n_workers=n_workers)


def test_another_kind_of_store_is_named_in_the_refusal(tmp_path):
    cluster.lattice_links(ik.bpst(), (2, 2, 2, 2), 1.0, store=tmp_path / "s", client="sync")
    with pytest.raises(ValueError, match="holds a 'lattice_links' result, not 'evaluate_grid'"):
        cluster.evaluate_grid(ik.bpst(), (2, 2, 2, 2), 1.0, "action_density", store=tmp_path / "s", client="sync")


# -- the periodic boundary, measured and warned about as on the local path ---------------------------

_REGULAR = ik.bpst(size=1.2).with_gauge("regular")  # does not decay: a large boundary action on a torus


def test_chunked_periodic_start_measures_its_boundary_and_warns_like_the_local_path(tmp_path):
    with pytest.warns(lat.BoundaryActionWarning):
        local = lat.lattice_start(_REGULAR, (4, 4, 4, 4), 1.0)
    with pytest.warns(lat.BoundaryActionWarning, match="boundary action"):
        cluster.lattice_links(_REGULAR, (4, 4, 4, 4), 1.0, chunks=(2, 4, 4, 3), store=tmp_path / "s", client="sync")
    rep = cluster.store_status(tmp_path / "s").report
    assert rep["boundary_action_fraction"] == local.report.boundary_action_fraction > 0.01
    assert rep["boundary_link_mismatch"] == local.report.boundary_link_mismatch


def test_lazy_chunked_start_measures_the_boundary_from_its_faces_and_warns(monkeypatch):
    seen = []
    monkeypatch.setattr(lat, "warn_boundary", lambda report, stacklevel=3: seen.append(report))
    lazy = cluster.lattice_links(_REGULAR, (4, 4, 4, 4), 1.0, chunks=(2, 4, 4, 3))
    assert isinstance(lazy, da.Array)  # still lazy: only the faces were computed, in this process
    bm = lat.boundary_mismatch(
        _REGULAR, ik.lattice_links(_REGULAR, (4, 4, 4, 4), 1.0, boundary="open"), 1.0
    )  # no warning: open
    assert len(seen) == 2 and seen[0].boundary_action_fraction == pytest.approx(bm["action_error"] / (8 * np.pi**2))
    assert seen[0].boundary_action_fraction > lat.BOUNDARY_WARN_FRACTION


def test_a_chunked_window_start_fits_the_torus_and_does_not_warn(tmp_path):
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error", lat.BoundaryActionWarning)
        st = cluster.lattice_start(
            ik.bpst(size=1.0), (4, 4, 4, 4), 1.5, boundary="window", rtol=1e-6, store=tmp_path / "s", client="sync"
        )
    assert abs(st.report.boundary_action_fraction) < 1e-12  # the windowed field is periodic: no jump
