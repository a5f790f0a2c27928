"""The results of `instantonkit.fit.finder.find_instantons`: one sign (`InstantonFit`) or both (`MixedFit`)."""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np


def verdict_lines(result, noun: str) -> list[str]:
    """The closing lines of a finder's summary: its error budget, notes and (un)ambiguous verdict with reasons.

    ``result`` offers ``error_budget``, ``notes``, ``ambiguous`` and ``reasons``; ``noun`` names it ("fit").
    """
    lines = [f"errors: {result.error_budget}"]
    lines.extend(f"note: {n}" for n in result.notes)
    if result.ambiguous:
        lines.append(f"AMBIGUOUS {noun}:")
        lines.extend(f"  - {r}" for r in result.reasons)
    else:
        lines.append(f"{noun} is unambiguous")
    return lines


@dataclasses.dataclass(frozen=True)
class InstantonFit:
    """Result of `find_instantons`.

    centers: (k, 4) float64; sizes: (k,) float64; orientations: (k, 4) unit quaternions u_j relative to
    u_1 (row 0 = 1; each row up to sign) from the exact model, None for the superposition model; for
    SU(N > 2) (k, N, N) complex unitary g_i of the fitted data (g_1 the fixed reference), a representative
    determined only up to gauge and stabilisers;
    uncertainties: {'centers': (k, 4), 'sizes': (k,)[, 'orientations': (k, 4)]} total one-sigma errors,
    the quadrature sum of ``statistical`` (noise, from the curvature of the fit) and ``systematic``
    (model error, see the module docstring); error_budget: a sentence saying which is which;
    data: fitted ADHMData (exact model) or ADHM data of the fitted centres and sizes with trivial
    orientations (superposition), None when the constraint could not be solved; ambiguous: bool;
    reasons: tuple of str; sign: +1 / -1; rms: relative rms residual of the reported model;
    chi2_dof: sum w r^2 / dof (a goodness of fit only when the noise ``sigma`` was given);
    explains_noise: True / False when the noise was given (chi2 / dof within 5 sigma of 1), else None;
    n_peaks: distinct peaks found; model: 'exact' or 'superposition'; superposition: the superposition
    fit {'centers', 'sizes'} the exact fit started from; notes: tuple of str, decisions taken before the
    fit (e.g. the colour rank inferred from links by `instantonkit.fit.lattice_fit.find_lattice_instantons`).
    """

    centers: np.ndarray
    sizes: np.ndarray
    uncertainties: dict
    data: object
    ambiguous: bool
    reasons: tuple
    sign: int
    rms: float
    n_peaks: int
    quantity: str
    orientations: Any = None
    statistical: dict = dataclasses.field(default_factory=dict)
    systematic: dict = dataclasses.field(default_factory=dict)
    error_budget: str = ""
    model: str = "superposition"
    chi2_dof: float = float("nan")
    explains_noise: object = None
    superposition: dict = dataclasses.field(default_factory=dict)
    notes: tuple = ()

    @property
    def k(self) -> int:
        """Number of fitted instantons."""
        return int(self.sizes.shape[0])

    def summary(self) -> str:
        """A readable table: one row per instanton with centre, size and their one-sigma errors."""
        kind = "instanton" if self.sign == 1 else "anti-instanton"
        model = "exact ADHM model" if self.model == "exact" else "BPST superposition model"
        lines = [
            (
                f"{self.k} {kind}(s) fitted to {self.quantity} density samples "
                f"({model}; relative rms residual {self.rms:.2e}; {self.n_peaks} distinct peak(s))"
            ),
            f"{'#':>3} {'x1':>10} {'x2':>10} {'x3':>10} {'x4':>10} {'size':>10} {'+-centre':>10} {'+-size':>10}",
        ]
        dc = self.uncertainties["centers"]
        ds = self.uncertainties["sizes"]
        for i in range(self.k):
            c = " ".join(f"{v:10.4f}" for v in self.centers[i])
            lines.append(f"{i:>3} {c} {self.sizes[i]:10.4f} {np.max(dc[i]):10.2e} {ds[i]:10.2e}")
        if self.orientations is None:
            lines.append("orientations: not determined (the superposition model does not depend on them)")
        elif np.ndim(self.orientations) == 3:
            n = np.shape(self.orientations)[1]
            lines.append(f"orientations: a fitted SU({n}) representative (up to gauge and stabilisers), see data")
        else:
            for i in range(self.k):
                lines.append(f"orientation {i} (relative to 0): " + " ".join(f"{v:8.4f}" for v in self.orientations[i]))
        if self.explains_noise is not None:
            verdict = "explains" if self.explains_noise else "does NOT explain"
            lines.append(f"chi2/dof = {self.chi2_dof:.3f}: the model {verdict} the density to its noise level")
        return "\n".join(lines + verdict_lines(self, "fit"))

    def __str__(self) -> str:
        return self.summary()


@dataclasses.dataclass(frozen=True)
class MixedFit:
    """Result of `find_instantons` with k = (k_plus, k_minus) on a charge density of both signs.

    instantons, anti_instantons: `InstantonFit` (superposition model, fitted jointly to
    q = (sum_+ s_i - sum_- s_j) / 8 pi^2; an instanton-anti-instanton pair is not self-dual, so there
    are no exact ADHM data for the whole); rms: relative rms residual of the joint fit.
    """

    instantons: InstantonFit
    anti_instantons: InstantonFit
    rms: float

    def summary(self) -> str:
        """Both tables, instantons first."""
        return self.instantons.summary() + "\n\n" + self.anti_instantons.summary()

    def __str__(self) -> str:
        return self.summary()
