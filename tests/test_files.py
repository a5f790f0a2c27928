"""Specification of how lattice files are written: interrupted writes leave nothing, modes, errors, formats.

Signals (common practice on POSIX): SIGTERM is what batch schedulers and ``timeout`` send and may be
handled; SIGKILL cannot be, so its leftovers are found by the next write; a process killed by a signal
it did not handle reports the negative signal number as its return code (Python's subprocess).
"""

from __future__ import annotations

import errno
import os
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from instantonkit.core import _atomic
from instantonkit.lattice import files as lio

ROOT = Path(__file__).resolve().parents[1]

# The child writes an ILDG file of a (4, 4, 4, 4) SU(3) lattice from a memory map that reads each time
# slice slowly and says so, so the parent signals it while the temporary file is open and half written.
_SLOW_WRITER = textwrap.dedent(
    """
    import sys, time
    import numpy as np
    from instantonkit import io as lio

    class Slow(np.memmap):
        def __getitem__(self, key):
            print("slice", flush=True)
            time.sleep(0.5)
            return super().__getitem__(key)

    directory = sys.argv[1]
    base = np.lib.format.open_memmap(directory + "/src.npy", mode="w+", dtype=np.complex128, shape=(4, 4, 4, 4, 4, 3, 3))
    base[:] = np.eye(3)
    base.flush()
    slow = base.view(Slow)
    lio.save_lattice(directory + "/out/links.ildg", slow)
    print("done", flush=True)
    """
)


def _start_writer(tmp_path):
    (tmp_path / "out").mkdir()
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen(
        [sys.executable, "-c", _SLOW_WRITER, str(tmp_path)], stdout=subprocess.PIPE, text=True, env=env
    )
    assert proc.stdout is not None
    for _ in range(2):  # two slices read: the temporary file exists and holds part of the payload
        assert proc.stdout.readline().strip() == "slice"
    return proc


def _parts(directory) -> list[str]:
    return sorted(n for n in os.listdir(directory) if n.endswith(".part"))


def test_sigterm_during_a_save_leaves_no_temporary_file_and_still_ends_the_process(tmp_path):
    proc = _start_writer(tmp_path)
    assert len(_parts(tmp_path / "out")) == 1  # the write is under way
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(timeout=60) == -signal.SIGTERM  # the default action of SIGTERM, as without the handler
    assert os.listdir(tmp_path / "out") == []


def test_sigkill_leftover_is_removed_by_the_next_save_into_the_directory(tmp_path):
    proc = _start_writer(tmp_path)
    proc.kill()
    assert proc.wait(timeout=60) == -signal.SIGKILL
    assert len(_parts(tmp_path / "out")) == 1  # SIGKILL cannot be caught: the half-written file stays
    lio.save_lattice(tmp_path / "out" / "next.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert os.listdir(tmp_path / "out") == ["next.npz"]


def test_leftover_of_a_live_writer_is_kept_and_reported_when_stale(tmp_path):
    live = os.getppid()  # a process that is alive while the test runs
    name = f".instantonkit-{_atomic._host()}-{live}-{'0' * 16}.part"
    fresh = f".instantonkit-otherhost-{live}-{'1' * 16}.part"
    for n in (name, fresh):
        (tmp_path / n).write_bytes(b"partial")
    old = time.time() - 2 * _atomic.STALE_SECONDS
    os.utime(tmp_path / name, (old, old))
    with pytest.warns(_atomic.LeftoverWarning, match=f"PID {live} \\(alive\\)"):
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert sorted(os.listdir(tmp_path)) == sorted([name, fresh, "a.npz"])  # neither removed


def test_stale_leftover_of_the_earlier_writer_is_reported_not_removed(tmp_path):
    (tmp_path / ".tmp-ab12cd34.part").write_bytes(b"partial")
    old = time.time() - 2 * _atomic.STALE_SECONDS
    os.utime(tmp_path / ".tmp-ab12cd34.part", (old, old))
    with pytest.warns(_atomic.LeftoverWarning, match="earlier version"):
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert sorted(os.listdir(tmp_path)) == [".tmp-ab12cd34.part", "a.npz"]


def test_program_sigterm_handler_is_left_in_charge_and_restored_after_the_save(tmp_path):
    seen = []

    def handler(signum, frame):
        seen.append(signum)

    before = signal.signal(signal.SIGTERM, handler)
    try:
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
        assert signal.getsignal(signal.SIGTERM) is handler
    finally:
        signal.signal(signal.SIGTERM, before)
    assert signal.getsignal(signal.SIGTERM) is before


def test_default_sigterm_action_is_restored_after_the_save(tmp_path):
    before = signal.signal(signal.SIGTERM, signal.SIG_DFL)
    try:
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
        assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL
    finally:
        signal.signal(signal.SIGTERM, before)


@pytest.mark.parametrize("umask,mode", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_file_mode_follows_the_umask_like_open(tmp_path, umask, mode):
    # open() creates files with 0o666 & ~umask (POSIX open(2), common practice)
    old = os.umask(umask)
    try:
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "a.npz").st_mode) == mode


def test_missing_directory_error_names_the_users_path(tmp_path):
    target = tmp_path / "no" / "such" / "a.npz"
    with pytest.raises(FileNotFoundError) as err:
        lio.save_lattice(target, np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert err.value.filename == str(target) and "does not exist" in str(err.value)
    assert str(tmp_path / "no" / "such") in str(err.value) and ".part" not in str(err.value)


def test_disk_full_error_names_the_users_path_and_leaves_nothing(tmp_path, monkeypatch):
    def full(*args, **kw):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(lio, "_save_npz", full)
    with pytest.raises(OSError) as err:
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert err.value.errno == errno.ENOSPC and err.value.filename == str(tmp_path / "a.npz")
    assert ".part" not in str(err.value) and err.value.__cause__ is None
    assert os.listdir(tmp_path) == []


def test_refused_permission_names_the_users_path_not_the_temporary_one(tmp_path, monkeypatch):
    def refuse(directory):
        raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), os.path.join(directory, ".x.part"))

    monkeypatch.setattr(_atomic, "_create_temp", refuse)  # what a read-only directory does (also as root)
    with pytest.raises(PermissionError) as err:
        lio.save_lattice(tmp_path / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert err.value.filename == str(tmp_path / "a.npz") and ".part" not in str(err.value)


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root ignores directory permissions")
def test_permission_error_names_the_users_path(tmp_path):
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    with pytest.raises(PermissionError) as err:
        lio.save_lattice(locked / "a.npz", np.zeros((1, 1, 1, 1, 4, 2, 2), complex))
    assert err.value.filename == str(locked / "a.npz") and ".part" not in str(err.value)


# -- formats -----------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def unit3():
    return np.broadcast_to(np.eye(3, dtype=complex), (2, 2, 2, 2, 4, 3, 3)).copy()


@pytest.mark.parametrize("name,fmt", [("a.ildg", "ildg"), ("a.lime", "ildg"), ("a.npz", "npz"), ("A.NPZ", "npz")])
def test_format_follows_the_extension(tmp_path, unit3, name, fmt):
    lio.save_lattice(tmp_path / name, unit3)
    head = (tmp_path / name).read_bytes()[:4]
    assert (head == lio.LIME_MAGIC.to_bytes(4, "big")) if fmt == "ildg" else head[:2] == b"PK"
    assert lio.load_lattice(tmp_path / name)[1]["format"] == fmt


@pytest.mark.parametrize("name,fmt", [("a.ildg", "npz"), ("a.npz", "ildg"), ("a.lime", "npz")])
def test_format_contradicting_the_extension_is_refused(tmp_path, unit3, name, fmt):
    with pytest.raises(ValueError, match="does not match the extension"):
        lio.save_lattice(tmp_path / name, unit3, format=fmt)
    assert os.listdir(tmp_path) == []


def test_unknown_extension_without_format_lists_the_choices(tmp_path, unit3):
    with pytest.raises(ValueError, match=r"\*\.npz.*\*\.ildg.*\*\.lime"):
        lio.save_lattice(tmp_path / "a.dat", unit3)
    lio.save_lattice(tmp_path / "a.dat", unit3, format="ildg")  # an explicit format serves any other name
    assert lio.load_lattice(tmp_path / "a.dat")[1]["format"] == "ildg"
