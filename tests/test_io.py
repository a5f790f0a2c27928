"""Specification of lattice files: npz with parameters, ILDG (LIME records), atomic writes, corrupt files."""

import os
import struct
import zipfile

import numpy as np
import pytest

from instantonkit.core import _validate
from instantonkit.core._links import check_finite
from instantonkit.lattice import files as lio
from instantonkit.lattice import references
from instantonkit.lattice import starts as lat


def _su3_links(shape, seed=0):
    g = lat.random_gauge(shape, 3, seed=seed)  # Haar SU(3) matrices, reused as links
    h = lat.random_gauge(shape, 3, seed=seed + 1)
    return np.stack([g, h, g @ h, h @ g], axis=4)


@pytest.fixture(scope="module")
def links3():
    return _su3_links((3, 4, 2, 5))


def test_npz_round_trip_is_bit_exact_and_keeps_metadata(tmp_path, links3):
    meta = {"field": "bpst", "spacing": 0.5, "shape": [3, 4, 2, 5]}
    lio.save_lattice(tmp_path / "a.npz", links3, metadata=meta)
    back, info = lio.load_lattice(tmp_path / "a.npz")
    assert back.dtype == np.complex128 and np.array_equal(back.view(np.uint8), links3.view(np.uint8))
    assert info["format"] == "npz" and info["metadata"] == meta


def test_ildg_records_and_headers_follow_the_lime_standard(tmp_path, links3):
    # LIME header: magic 0x456789ab, version 1, MB/ME flag bits, 64-bit length, 128-byte type,
    # data padded to 8 bytes; records ildg-format, ildg-binary-data, ildg-data-lfn (ILDG file format
    # and LIME specifications, from memory; no independent reader is run, so this pins the layout written in
    # instantonkit.lattice.files' docstring)
    path = tmp_path / "a.ildg"
    lio.save_lattice(path, links3, format="ildg", lfn="lfn://test/a", metadata={"k": 1})
    raw = path.read_bytes()
    recs = lio.read_lime_records(path)
    assert [r["type"] for r in recs] == ["ildg-format", "ildg-binary-data", "ildg-data-lfn", "instantonkit-metadata"]
    assert [(r["mb"], r["me"]) for r in recs] == [(True, False), (False, False), (False, True), (True, True)]
    pos = 0
    for r in recs:
        magic, version, flags, length = struct.unpack(">IHHQ", raw[pos : pos + 16])
        assert magic == 0x456789AB and version == 1 and length == r["length"]
        assert raw[pos + 16 : pos + 144].rstrip(b"\0").decode() == r["type"]
        assert r["offset"] == pos + 144
        pos = r["offset"] + length + (-length) % 8
        assert raw[r["offset"] + length : pos] == b"\0" * ((-length) % 8)
    assert pos == len(raw)
    xml = raw[recs[0]["offset"] : recs[0]["offset"] + recs[0]["length"]].decode()
    for tag in (
        "<field>su3gauge</field>",
        "<precision>64</precision>",
        "<lx>3</lx>",
        "<ly>4</ly>",
        "<lz>2</lz>",
        "<lt>5</lt>",
    ):
        assert tag in xml
    assert recs[1]["length"] == 3 * 4 * 2 * 5 * 4 * 9 * 16


def test_ildg_binary_order_is_t_z_y_x_then_direction_then_row_major(tmp_path, links3):
    # site index ((t lz + z) ly + y) lx + x, four directions x, y, z, t, 3x3 row-major (re, im),
    # big-endian float64 (ILDG binary format, from memory; pinned here byte by byte, no independent reader)
    path = tmp_path / "b.ildg"
    lio.save_lattice(path, links3, format="ildg")
    rec = lio.read_lime_records(path)[1]
    raw = path.read_bytes()
    lx, ly, lz, lt = links3.shape[:4]
    x, y, z, t, mu, i, j = 2, 1, 1, 3, 2, 1, 0
    site = ((t * lz + z) * ly + y) * lx + x
    off = rec["offset"] + ((site * 4 + mu) * 9 + i * 3 + j) * 16
    re, im = struct.unpack(">dd", raw[off : off + 16])
    assert complex(re, im) == links3[x, y, z, t, mu, i, j]


def test_ildg_round_trip_is_bit_exact(tmp_path, links3):
    path = tmp_path / "c.ildg"
    lio.save_lattice(path, links3, format="ildg", metadata={"note": "demo"})
    back, info = lio.load_lattice(path)
    assert np.array_equal(back.view(np.uint8), np.ascontiguousarray(links3).view(np.uint8))
    assert info["ildg"] == {"field": "su3gauge", "precision": 64, "lx": 3, "ly": 4, "lz": 2, "lt": 5}
    assert info["metadata"] == {"note": "demo"}
    view, _ = lio.load_lattice(path, mmap=True)
    assert np.array_equal(np.asarray(view), links3)


def test_ildg_from_memmap_input(tmp_path, links3):
    mm = np.lib.format.open_memmap(tmp_path / "u.npy", mode="w+", dtype=np.complex128, shape=links3.shape)
    mm[:] = links3
    lio.save_lattice(tmp_path / "m.ildg", mm, format="ildg")
    assert np.array_equal(lio.load_lattice(tmp_path / "m.ildg")[0], links3)


def _memmap_of(path, links):
    mm = np.lib.format.open_memmap(path, mode="w+", dtype=np.complex128, shape=links.shape)
    mm[:] = links
    return mm


def _no_second_pass(*args, **kwargs):
    raise AssertionError("the memory map was read by a separate check before it was written")


@pytest.mark.parametrize("fmt", ["npz", "ildg"])
def test_memmap_is_checked_as_it_is_written_in_one_pass(tmp_path, links3, monkeypatch, fmt):
    mm = _memmap_of(tmp_path / "u.npy", links3)
    monkeypatch.setattr(lio, "_check_finite", _no_second_pass)
    lio.save_lattice(tmp_path / f"m.{fmt}", mm)
    assert np.array_equal(lio.load_lattice(tmp_path / f"m.{fmt}")[0], links3)


@pytest.mark.parametrize("fmt", ["npz", "ildg"])
def test_memmap_larger_than_the_machine_memory_is_refused_before_writing(tmp_path, links3, monkeypatch, fmt):
    mm = _memmap_of(tmp_path / "u.npy", links3)
    monkeypatch.setattr(_validate, "machine_memory", lambda: 1000.0)
    with pytest.raises(ValueError, match=r"links is too large: .* this machine has 1\.000e\+03 bytes"):
        lio.save_lattice(tmp_path / f"m.{fmt}", mm)
    assert not (tmp_path / f"m.{fmt}").exists()


def test_npz_of_a_memmap_holds_the_members_numpy_savez_writes(tmp_path, links3):
    # reference: numpy.savez of the same arrays (numpy's own npz writer); member order and bytes, not zip timestamps
    lio.save_lattice(tmp_path / "m.npz", _memmap_of(tmp_path / "u.npy", links3))
    np.savez(
        tmp_path / "ref.npz",
        links=links3,
        metadata=np.array("{}"),
        instantonkit_npz_version=np.array(lio._NPZ_VERSION),
    )
    with zipfile.ZipFile(tmp_path / "m.npz") as got, zipfile.ZipFile(tmp_path / "ref.npz") as want:
        assert got.namelist() == want.namelist()
        assert all(got.read(name) == want.read(name) for name in want.namelist())


@pytest.mark.parametrize("fmt", ["npz", "ildg"])
def test_nan_in_a_memmap_gets_the_error_of_the_check_and_nothing_is_written(tmp_path, links3, fmt):
    bad = links3.copy()
    bad[2, 3, 1, 4, 1, 0, 2] = np.nan  # in the last x1 slice and the last time slice: read last
    bad[1, 0, 0, 4, 3, 2, 2] = np.inf
    mm = _memmap_of(tmp_path / "u.npy", bad)
    (tmp_path / "out").mkdir()
    with pytest.raises(ValueError) as want:
        check_finite(bad)
    with pytest.raises(ValueError) as got:
        lio.save_lattice(tmp_path / "out" / f"m.{fmt}", mm)
    assert str(got.value) == str(want.value)
    assert "found 2 NaN or inf entries in 2 of" in str(got.value)
    assert os.listdir(tmp_path / "out") == []


@pytest.mark.parametrize("fmt", ["ildg", "npz"])
def test_truncated_file_is_rejected(tmp_path, links3, fmt):
    path = tmp_path / f"t.{fmt}"
    lio.save_lattice(path, links3, format=fmt)
    data = path.read_bytes()
    for cut in (len(data) // 2, len(data) - 9, 100):
        path.write_bytes(data[:cut])
        with pytest.raises(ValueError, match="truncated|corrupt"):
            lio.load_lattice(path)


def test_corrupt_magic_and_unknown_files_are_rejected(tmp_path, links3):
    path = tmp_path / "d.ildg"
    lio.save_lattice(path, links3, format="ildg")
    data = bytearray(path.read_bytes())
    rec = lio.read_lime_records(path)[1]
    data[rec["offset"] - 144] ^= 0xFF  # break the second record's magic
    path.write_bytes(bytes(data))
    with pytest.raises(ValueError, match="magic"):
        lio.load_lattice(path)
    (tmp_path / "e.bin").write_bytes(b"hello world")
    with pytest.raises(ValueError, match="neither"):
        lio.load_lattice(tmp_path / "e.bin")


def test_ildg_needs_su3_links_and_failed_writes_leave_nothing(tmp_path):
    u2 = lat.random_gauge((2, 2, 2, 2), 2)[..., None, :, :].repeat(4, axis=4)
    with pytest.raises(ValueError, match="3 x 3"):
        lio.save_lattice(tmp_path / "f.ildg", u2, format="ildg")
    assert os.listdir(tmp_path) == []


def test_existing_file_is_replaced_whole(tmp_path, links3):
    path = tmp_path / "g.npz"
    lio.save_lattice(path, links3[:1], metadata={"v": 1})
    lio.save_lattice(path, links3, metadata={"v": 2})
    back, info = lio.load_lattice(path)
    assert back.shape == links3.shape and info["metadata"] == {"v": 2}
    assert sorted(os.listdir(tmp_path)) == ["g.npz"]


@pytest.mark.parametrize(
    "args,exc,match",
    [
        ((np.zeros((2, 2, 2, 2, 4, 3, 3), complex),), ValueError, "format must be"),
        ((np.zeros((2, 2, 2, 4, 3, 3), complex),), ValueError, "shape"),
        ((np.zeros((2, 2, 2, 2, 4, 3, 3)),), TypeError, "complex"),
    ],
)
def test_bad_save_arguments(tmp_path, args, exc, match):
    fmt = "hdf5" if match == "format must be" else "npz"
    with pytest.raises(exc, match=match):
        lio.save_lattice(tmp_path / "h", *args, format=fmt)


# -- files that say what they hold ------------------------------------------------------------------------


@pytest.fixture(scope="module")
def charge_two_start():
    import instantonkit as ik

    data = ik.multi_instanton(centers=[[-1.0, 0, 0, 0], [1.0, 0.5, 0, 0]], sizes=[0.9, 1.1])
    return data, lat.lattice_start(data, (4,) * 4, 0.5, group="su3", boundary="open", rtol=1e-6)


@pytest.mark.parametrize("fmt", ["npz", "ildg"])
def test_charge_two_start_rebuilds_the_same_adhm_data_from_the_file_alone(tmp_path, charge_two_start, fmt):
    # JSON keeps float64 exactly (Python's repr round trip, common practice), so Lambda and B come back
    # bit for bit; the description sits in a record of its own and the ILDG records stay standard
    data, st = charge_two_start
    path = tmp_path / f"c2.{fmt}"
    lio.save_lattice(path, st, format=fmt)
    desc = lio.read_description(path)
    assert desc["field"]["kind"] == "adhm" and desc["field"]["gauge"] == "singular" and desc["field"]["chirality"] == 1
    assert (
        desc["field"]["group"] == "SU(2)"
        and desc["metadata"]["group"] == "su3"
        and desc["metadata"]["embedding"] == [0, 1]
    )
    assert np.allclose(desc["field"]["centres"], data.centers()) and np.allclose(desc["field"]["sizes"], data.sizes())
    back = references.field_from_file(path)
    assert np.array_equal(np.asarray(back.lam), np.asarray(data.lam)) and np.array_equal(
        np.asarray(back.B), np.asarray(data.B)
    )
    assert back.gauge == data.gauge and back.chirality == data.chirality
    links, info = lio.load_lattice(path)
    assert info["field"] == desc["field"] and "field" not in info["metadata"]
    assert np.array_equal(links, st.links)
    assert np.array_equal(references.regenerate(path).links, st.links)  # the file regenerates its start
    if fmt == "ildg":
        types = [r["type"] for r in lio.read_lime_records(path)]
        assert types[:2] == ["ildg-format", "ildg-binary-data"] and "instantonkit-field" in types


def test_bpst_field_and_window_records_rebuild_the_field():
    import instantonkit as ik

    f = ik.bpst_field(center=(0.1, 0.2, 0.3, 0.4), size=0.7, gauge="singular", orientation=(0.6, 0.8, 0.0, 0.0))
    st = lat.lattice_start(f, (4,) * 4, 0.5, boundary="window", rtol=1e-6)
    back = references.field_from_record(st.report.field)
    x = np.array([0.3, -0.2, 0.5, 0.1])
    from instantonkit.ansatz import periodic

    windowed = periodic.window_field(f, (4,) * 4, 0.5, lat.default_origin(f, (4,) * 4, 0.5))
    assert np.array_equal(np.asarray(back.potential(x)), np.asarray(windowed.potential(x)))
    inner = references.field_from_record(st.report.field, window=False)
    assert np.array_equal(np.asarray(inner.potential(x)), np.asarray(f.potential(x)))
    with pytest.raises(ValueError, match="kind must be one of"):
        references.field_from_record({"kind": "nothing"})
