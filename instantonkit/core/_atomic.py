"""Whole-or-nothing file writes: a temporary file beside the target, renamed onto it when complete.

The temporary file is named ``.instantonkit-<host>-<pid>-<random>.part`` in the target's directory, so
what an interrupted write leaves behind says who wrote it:

* an exception (KeyboardInterrupt included) removes it before it propagates;
* SIGTERM and SIGHUP (what batch schedulers, ``timeout`` and a closing terminal send) remove it too:
  for the duration of the write, in the main thread and only where the signal had Python's default
  action, a handler removes the temporary file, puts the default action back and sends the signal
  again, so the process ends as it would have (exit status included).  A handler the program installed
  itself is left alone (it decides whether the process ends; if it raises, the exception cleans up);
* SIGKILL cannot be caught: the next write into the same directory removes leftovers whose writer
  (same host, that PID) is no longer alive, and warns (`LeftoverWarning`) about stale ones it
  cannot judge (another host, or a PID that is alive again an hour later), and about stale
  ``.tmp-XXXXXXXX.part`` files of the earlier writer, whose names say nothing about their writer.

Files get mode ``0o666 & ~umask``, as ``open()`` would give them (the temporary file is created with
``os.open(..., 0o666)``, so the kernel applies the umask).  Errors name the user's path, never the
temporary one: a missing directory, a refused permission, a full disk are ``OSError`` subclasses of the
same errno whose ``filename`` is the target.
"""

from __future__ import annotations

import errno
import os
import re
import secrets
import signal
import socket
import threading
import time
import warnings
from collections.abc import Callable

__all__ = ["atomic_write", "sweep_leftovers", "LeftoverWarning", "TEMP_PATTERN", "OLD_TEMP_PATTERN", "STALE_SECONDS"]

#: Names of the temporary files: host, PID of the writer, random token.
TEMP_PATTERN = re.compile(r"^\.instantonkit-(?P<host>.+)-(?P<pid>\d+)-(?P<token>[0-9a-f]{16})\.part$")

#: A temporary file untouched this long whose writer cannot be shown dead is reported as stale.
STALE_SECONDS = 3600.0

#: Names the writer used before it put host and PID into them (mkstemp's): reported when stale, never removed.
OLD_TEMP_PATTERN = re.compile(r"^\.tmp-[A-Za-z0-9_]{8}\.part$")

_SIGNALS = tuple(getattr(signal, name) for name in ("SIGTERM", "SIGHUP") if hasattr(signal, name))


class LeftoverWarning(UserWarning):
    """A temporary file of an interrupted write that may belong to a live writer (so it was kept)."""


def _host() -> str:
    return re.sub(r"[^A-Za-z0-9_.]", "_", socket.gethostname()) or "host"


def _alive(pid: int) -> bool:
    """True when a process ``pid`` exists on this host (signal 0 probes without sending anything)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # it exists, owned by someone else
    except OSError:
        return True  # cannot tell: keep the file
    return True


def _age(path: str) -> float:
    """Seconds since ``path`` was last modified (inf when it is gone)."""
    try:
        return time.time() - os.stat(path).st_mtime
    except OSError:
        return float("inf")


def _size(path: str) -> int | str:
    try:
        return os.path.getsize(path)
    except OSError:
        return "?"


def sweep_leftovers(directory) -> tuple[list[str], list[str]]:
    """Remove the temporary files of dead writers in ``directory``; returns (removed, kept-and-reported) paths.

    A file of this host whose PID is not alive is removed.  Files of another host, or of a live PID,
    are kept; those not modified for `STALE_SECONDS` are reported with a `LeftoverWarning`
    (a live writer keeps its file fresh).  Files that vanish meanwhile (another sweep) are skipped.
    """
    directory = os.fspath(directory)
    try:
        names = os.listdir(directory)
    except OSError:
        return [], []
    host, me = _host(), os.getpid()
    removed, reported = [], []
    for name in names:
        m = TEMP_PATTERN.match(name)
        full = os.path.join(directory, name)
        if m is None:
            if OLD_TEMP_PATTERN.match(name) and STALE_SECONDS < _age(full) < float("inf"):
                reported.append(full)
                warnings.warn(
                    f"leftover temporary file {full!r} ({_size(full)} bytes) of an interrupted write by an earlier "
                    "version (its name does not say which process wrote it, so it was kept): remove it by hand",
                    LeftoverWarning,
                    3,
                )
            continue
        pid = int(m.group("pid"))
        if m.group("host") == host and pid != me and not _alive(pid):
            try:
                os.remove(full)
                removed.append(full)
            except FileNotFoundError:
                pass
            except OSError as err:
                reported.append(full)
                warnings.warn(f"cannot remove the leftover temporary file {full!r}: {err}", LeftoverWarning, 3)
            continue
        age = _age(full)
        if STALE_SECONDS < age < float("inf"):
            reported.append(full)
            who = f"PID {pid} (alive)" if m.group("host") == host else f"PID {pid} on host {m.group('host')!r}"
            warnings.warn(
                f"leftover temporary file {full!r} ({_size(full)} bytes, untouched for {age / 3600:.1f} h) "
                f"of {who} kept: its writer may still be running; remove it by hand if it is not",
                LeftoverWarning,
                3,
            )
    return removed, reported


def _create_temp(directory: str) -> tuple[int, str]:
    prefix = f".instantonkit-{_host()}-{os.getpid()}-"
    while True:
        tmp = os.path.join(directory, prefix + secrets.token_hex(8) + ".part")
        try:
            return os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o666), tmp
        except FileExistsError:
            continue


def _remove(tmp: str) -> None:
    try:
        os.remove(tmp)
    except OSError:
        pass


def _install_cleanup(tmp: str) -> dict:
    """Handlers removing ``tmp`` on the signals whose action is the default; returns the ones replaced."""
    if threading.current_thread() is not threading.main_thread():
        return {}
    previous = {}
    for sig in _SIGNALS:
        if signal.getsignal(sig) is not signal.SIG_DFL:
            continue  # ignored, or a handler of the program: it decides what happens

        def handler(signum, frame, _sig=sig):
            _remove(tmp)
            signal.signal(_sig, signal.SIG_DFL)
            os.kill(os.getpid(), _sig)  # the default action, as if we had not been here

        previous[sig] = signal.signal(sig, handler)
    return previous


def _user_error(err: OSError, path: str, directory: str) -> OSError:
    """The same kind of OSError, naming the user's path (and the directory when it is missing)."""
    if err.errno == errno.ENOENT and not os.path.isdir(directory):
        text = f"cannot write: the directory {directory!r} does not exist"
    else:
        text = f"cannot write: {err.strerror or err}"
    return type(err)(err.errno, text, path)


def atomic_write(path, write: Callable) -> None:
    """Call ``write(fileobj)`` on a temporary file beside ``path``, then rename it onto ``path`` (module docstring).

    Args:
      path: the file to write (str or os.PathLike); its directory must exist.
      write: callable taking a binary file object open for writing.
    Raises:
      OSError (FileNotFoundError, PermissionError, ...) naming ``path``; whatever ``write`` raises.
    """
    path = os.fspath(path)
    directory = os.path.dirname(os.path.abspath(path))
    sweep_leftovers(directory)
    try:
        fd, tmp = _create_temp(directory)
    except OSError as err:
        raise _user_error(err, path, directory) from None
    previous = _install_cleanup(tmp)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except OSError as err:
        _remove(tmp)
        raise _user_error(err, path, directory) from None
    except BaseException:
        _remove(tmp)
        raise
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
