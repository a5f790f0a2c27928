"""One batching loop for every compiled per-point kernel (floor 0).

A kernel compiled for a batch of ``size`` rows is run over ``m`` rows in pieces of ``size``; the last
piece is padded with copies of its first row and the padding is sliced off.  Memory is bounded by one
batch, and the number of compiled shapes stays small.

Why batch sizes are fixed (bit reproducibility): XLA's code for a vmapped kernel depends on the batch
size it was compiled for, and so can the last bit of its results (seen for the closed-form link:
~2e-16 between batches of 256 and 4096).  Callers that must give the same bits for the same rows
whatever the surrounding call (the local and the chunked lattice paths) pass one fixed ``size`` per
problem.  Callers that only need results to rounding may let the last batch shrink to a power of two
(``shrink_last=True``), which saves work on small inputs.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

__all__ = ["run_batched", "padded_size"]

#: Smallest padded batch when the last batch shrinks (keeps the number of compiled shapes small).
MIN_BATCH = 16


def padded_size(rows: int, size: int, *, shrink_last: bool) -> int:
    """Batch size used for a piece of ``rows`` rows (rows <= size)."""
    if rows >= size or not shrink_last:
        return size
    return min(size, max(MIN_BATCH, 1 << int(np.ceil(np.log2(max(rows, 1))))))


def run_batched(
    kernel: Callable,
    arrays: Sequence[np.ndarray],
    size: int,
    *,
    shrink_last: bool = False,
    out: np.ndarray | tuple[np.ndarray, ...] | None = None,
    args_before: tuple = (),
    args_after: tuple = (),
):
    """Run ``kernel(*args_before, *batches, *args_after)`` over the rows of ``arrays`` in batches of ``size``.

    arrays: equal-length (m, ...) numpy arrays batched together (row i of each belongs together).
    Returns an (m, ...) numpy array (written into ``out`` when given), or None when m == 0 and no
    ``out`` is given.  A kernel returning a tuple writes into ``out``, a tuple of arrays (returned).
    """
    m = int(arrays[0].shape[0])
    if any(int(a.shape[0]) != m for a in arrays):
        raise ValueError(f"batched arrays must have equal length; found {[int(a.shape[0]) for a in arrays]}")
    parts = []
    for start in range(0, m, size):
        stop = min(start + size, m)
        rows = stop - start
        width = padded_size(rows, size, shrink_last=shrink_last)
        batch = []
        for a in arrays:
            piece = a[start:stop]
            if width > rows:  # pad with copies of the piece's first row, sliced off below
                piece = np.concatenate([piece, np.broadcast_to(a[start], (width - rows,) + a.shape[1:])])
            batch.append(piece)
        res = kernel(*args_before, *batch, *args_after)
        if isinstance(out, tuple):  # a kernel of several outputs, one array each
            for o, r in zip(out, res):
                o[start:stop] = np.asarray(r)[:rows]
            continue
        res = np.asarray(res)[:rows]
        if out is not None:
            out[start:stop] = res
        else:
            parts.append(res)
    if out is not None:
        return out
    return np.concatenate(parts) if parts else None
