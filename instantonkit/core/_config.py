"""Switch JAX to float64 before anything is traced, and optionally keep compiled kernels on disk.

Importing any part of instantonkit imports this module first (through the package ``__init__``), so
users never have to configure JAX themselves (conventions: float64 everywhere by default).

Persistent compilation cache (opt-in, nothing is written unless asked for): set the environment
variable ``INSTANTONKIT_COMPILE_CACHE`` to a directory before importing instantonkit, or call
`enable_compile_cache` with one, and JAX stores every compiled kernel there, so a new process
skips the compilation of kernels an earlier one compiled (first calls drop from seconds to the
time of reading the file).  The value ``default`` means `DEFAULT_CACHE_DIR` (a directory
under the user's cache home, ``$XDG_CACHE_HOME`` or ``~/.cache``); an empty value or ``0`` leaves
the cache off.  The cache is JAX's own (``jax_compilation_cache_dir``); entries are keyed by the
program, the jax version and the machine, and it may be deleted at any time.

Lean compilation of derivative kernels (on by default): kernels that differentiate a potential
(``method="autodiff"``, user callables, fields without closed forms) are compiled with
`LEAN_COMPILER_OPTIONS`, XLA's CPU settings that skip most of its optimisation of the generated
code.  Their graphs (for ADHM data a jacobian of a jacobian) spent seconds there; measured in one run
(``benchmarks/bench_limits.py``) the compile time drops several-fold for about a third more run time
per point.  `set_lean_compile` (or ``INSTANTONKIT_LEAN_COMPILE=0`` before import) turns it off;
closed-form kernels always get the full optimisation.
"""

from __future__ import annotations

import os

import jax

jax.config.update("jax_enable_x64", True)

__all__ = [
    "enable_compile_cache",
    "compile_cache_dir",
    "CACHE_ENV",
    "DEFAULT_CACHE_DIR",
    "LEAN_ENV",
    "LEAN_COMPILER_OPTIONS",
    "set_lean_compile",
    "lean_compiler_options",
]

#: Environment variable naming the persistent compilation cache directory (unset: no cache).
CACHE_ENV = "INSTANTONKIT_COMPILE_CACHE"

#: Directory used for ``INSTANTONKIT_COMPILE_CACHE=default`` (in the user's cache home).
DEFAULT_CACHE_DIR = os.path.join(
    os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"), "instantonkit", "jax"
)

#: Kernels compiling faster than this are not stored (JAX's default, 1 s, would skip most of ours).
_MIN_COMPILE_SECONDS = 0.05


def enable_compile_cache(directory: str | os.PathLike | None = None) -> str:
    """Keep compiled kernels in ``directory`` (created if missing; None: DEFAULT_CACHE_DIR); returns its path.

    Raises:
      TypeError if directory is not a path; ValueError if it exists and is not a directory.
    """
    if directory is None:
        directory = DEFAULT_CACHE_DIR
    if not isinstance(directory, (str, os.PathLike)) or isinstance(directory, bool):
        raise TypeError(f"directory must be a path (str or os.PathLike); found {type(directory).__name__}")
    path = os.path.abspath(os.fspath(directory))
    if os.path.exists(path) and not os.path.isdir(path):
        raise ValueError(f"directory must be a directory; found a file at {path}")
    os.makedirs(path, exist_ok=True)
    jax.config.update("jax_compilation_cache_dir", path)
    jax.config.update("jax_persistent_cache_min_compile_time_secs", _MIN_COMPILE_SECONDS)
    return path


def compile_cache_dir() -> str | None:
    """The directory of the persistent compilation cache, or None when it is off."""
    # a config option, not a declared attribute of jax.config
    return jax.config.jax_compilation_cache_dir  # type: ignore[attr-defined]


#: Environment variable: ``0`` turns the lean compilation of derivative kernels off.
LEAN_ENV = "INSTANTONKIT_LEAN_COMPILE"

#: XLA options for kernels that differentiate a potential (CPU: no fusion emitters, no LLVM optimisation).
LEAN_COMPILER_OPTIONS = {"xla_cpu_use_fusion_emitters": False, "xla_backend_optimization_level": 0}

_lean = {"on": True, "supported": None}


def set_lean_compile(on: bool) -> None:
    """Compile derivative kernels with `LEAN_COMPILER_OPTIONS` (True, the default) or fully optimised.

    Applies to kernels compiled afterwards (compiled ones are kept).  Raises TypeError for a non-boolean.
    """
    if not isinstance(on, bool):
        raise TypeError(f"on must be a bool; found {type(on).__name__}")
    _lean["on"] = on


def lean_compiler_options() -> dict | None:
    """The options for derivative kernels, or None when lean compilation is off or this backend rejects them."""
    if not _lean["on"]:
        return None
    if _lean["supported"] is None:  # probe once: other backends or jax versions may not know the options
        try:
            jax.jit(lambda v: v + 1.0, compiler_options=dict(LEAN_COMPILER_OPTIONS)).lower(1.0).compile()
            _lean["supported"] = True
        except Exception:  # an unknown option: compile those kernels with the defaults
            _lean["supported"] = False
    return dict(LEAN_COMPILER_OPTIONS) if _lean["supported"] else None


def _from_environment() -> None:
    if os.environ.get(LEAN_ENV, "").strip() == "0":
        _lean["on"] = False
    value = os.environ.get(CACHE_ENV, "").strip()
    if value in ("", "0"):
        return
    enable_compile_cache(None if value == "default" else value)


_from_environment()
