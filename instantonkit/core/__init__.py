"""The ground floor: conventions, quaternions, validation, batching, configuration, pytree helpers.

Modules (floor 0 of the package; the floors inside are in DEVELOPERS.md):

* ``_atomic``: Whole-or-nothing file writes: a temporary file beside the target, renamed onto it when complete.
* ``_batching``: One batching loop for every compiled per-point kernel.
* ``_config``: Switch JAX to float64 before anything is traced, and optionally keep compiled kernels on disk.
* ``_links``: The one check of link values shared by the observables, smoothing, the finder and the file loader.
* ``_progress``: Progress of long work (lattice starts, chunked runs and ensembles, flows and cooling) on a terminal.
* ``_pytree``: One flatten/unflatten for the library's frozen-dataclass pytrees (fields, ansaetze, wrappers), and their memo key.
* ``_validate``: Argument checks shared by every module: one wording, one result for the same input.
* ``conventions``: The one place where instantonkit's signs and normalisations are written down.
* ``quaternion``: Quaternions and quaternionic matrices as real arrays, and the 't Hooft symbols.
"""

from . import _config  # noqa: F401  (float64 before anything is traced)
