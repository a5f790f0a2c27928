"""Progress of long work (lattice starts, chunked runs and ensembles, flows and cooling) on a terminal.

Every long loop of the package takes ``progress=``: ``None`` (the default) shows one updating line on
stderr when stderr is a terminal and stays silent otherwise (a batch job's log, a notebook's captured
stream, a test); ``False`` is silent; ``True`` shows the line wherever stderr goes; a callable is called
as ``progress(done, total)`` after each step instead.  The environment variable
``INSTANTONKIT_PROGRESS=0`` silences the default everywhere (``=1`` turns it on).
"""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Callable

__all__ = ["ProgressSink", "sink"]

#: What a loop calls after each step: ``progress(done, total)``.
ProgressSink = Callable[[int, int], None]

#: Redraw the line at most this often (seconds), except for the last step.
_MIN_INTERVAL = 0.2


def _default_on() -> bool:
    env = os.environ.get("INSTANTONKIT_PROGRESS", "").strip().lower()
    if env in ("0", "false", "no", "off"):
        return False
    if env in ("1", "true", "yes", "on"):
        return True
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):  # a replaced or closed stream
        return False


def sink(progress, label: str) -> ProgressSink | None:
    """The callable a loop reports to, or None (silent); see the module docstring for ``progress``.

    progress: None | bool | callable(done, total); label: what the line names ('lattice start').
    """
    if callable(progress) and not isinstance(progress, bool):
        return progress
    if progress is not None and not isinstance(progress, bool):
        raise TypeError(f"progress must be None, a bool or a callable(done, total); found {type(progress).__name__}")
    on = _default_on() if progress is None else progress
    if not on:
        return None
    start = time.perf_counter()
    last = [-1.0]

    def show(done: int, total: int) -> None:
        now = time.perf_counter()
        if done < total and now - last[0] < _MIN_INTERVAL:
            return
        last[0] = now
        elapsed = now - start
        left = elapsed * (total - done) / done if 0 < done < total else 0.0
        pct = 100.0 * done / total if total else 100.0
        tail = f", about {left:.0f} s left" if done < total else ""
        end = "\n" if done >= total else ""
        sys.stderr.write(f"\r[instantonkit] {label}: {done}/{total} ({pct:.0f} %), {elapsed:.1f} s{tail}   {end}")
        sys.stderr.flush()

    return show
