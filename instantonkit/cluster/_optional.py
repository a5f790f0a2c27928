"""The optional dependencies of the distributed layer (dask[distributed], zarr), imported only when used."""

from __future__ import annotations

import importlib

#: How to install the optional extra, named in the ImportError.
EXTRA = "pip install 'instantonkit[distributed]'"


def require(*modules):
    """Import the optional modules or raise ImportError naming the extra to install; one module or a list."""
    out = []
    for name in modules:
        try:
            out.append(importlib.import_module(name))
        except ImportError as err:
            raise ImportError(
                f"the chunked backend needs the optional extra 'distributed' ({EXTRA}); {name!r} is not installed"
            ) from err
    return out[0] if len(out) == 1 else out
