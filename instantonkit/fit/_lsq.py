"""What the exact-moduli fit builds on (floor 0): padded samples, the best-of-trials driver, the result record.

Used by the one driver of `instantonkit.fit.exact_fit` for both ADHM realisations (the per-realisation
parametrisations live there too).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from typing import Any

import jax.numpy as jnp
import numpy as np

__all__ = ["ModuliFit", "padded_samples", "best_of_trials"]


@dataclasses.dataclass(frozen=True)
class ModuliFit:
    """The fields every exact-moduli fit reports (the subclasses document their shapes).

    null: directions of the parameters the density does not see, dropped from the covariance.
    """

    data: Any
    centers: np.ndarray
    sizes: np.ndarray
    orientations: np.ndarray
    errors: dict
    chi2: float
    dof: int
    rms: float
    success: bool
    message: str
    condition: float
    null: int = 0


def padded_samples(pts, s, w, smax: float):
    """Samples padded to a power of two (at least 64) with zero-weight copies of the first one, so one
    compiled kernel serves a size class; -> (points, sqrt(w) / smax, s) as jax arrays."""
    m = pts.shape[0]
    pad = (1 << max(int(np.ceil(np.log2(max(m, 1)))), 6)) - m
    pts_j = jnp.asarray(np.concatenate([pts, np.repeat(pts[:1], pad, axis=0)]))
    sw = jnp.asarray(np.concatenate([np.sqrt(w), np.zeros(pad)]) / smax)
    s_j = jnp.asarray(np.concatenate([s, np.repeat(s[:1], pad)]))
    return pts_j, sw, s_j


def best_of_trials(
    starts: Sequence[tuple[np.ndarray, Any]], run: Callable, trial_nfev: int, full_nfev: int
) -> tuple[Any, Any, int]:
    """A short run ``run(t0, extra, budget)`` from each start (t0, extra), then the best to convergence.

    One start runs with the full budget at once (a start in a bad valley crawls, so several get short
    trials first).  Returns (the best scipy result, its ``extra``, function evaluations in all).
    """
    nfev, trials = 0, []
    for t0, extra in starts:
        sol = run(t0, extra, trial_nfev if len(starts) > 1 else full_nfev)
        nfev += sol.nfev
        trials.append((sol.cost, sol, extra))
    _, best, extra = min(trials, key=lambda item: item[0])
    if len(starts) > 1 and best.status == 0:  # budget used up: continue to convergence
        best = run(best.x, extra, full_nfev)
        nfev += best.nfev
    return best, extra, nfev
