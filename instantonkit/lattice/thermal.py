"""Finite-temperature lattices: anisotropic spacings, the weights of the anisotropic Wilson action, and
the constant limit at spatial infinity of a caloron of non-trivial holonomy.

Spacings.  Every lattice start and observable that takes ``spacing=`` accepts one number a (all four
directions) or four numbers (a1, a2, a3, a4) in (x1, x2, x3, x4) order; a finite-temperature lattice
N_s^3 x N_t has (a_s, a_s, a_s, a_t), anisotropy xi = a_s / a_t, and a field periodic in x4 with
period beta needs N_t a_t = beta (`thermal_spacings` makes such a tuple; a start refuses a mismatch,
`instantonkit.lattice.boundaries.check_period`).  A start stores one float when the four are equal
and the tuple otherwise (``LinkReport.spacing``); ``LinkReport.spacings`` and the file metadata
(``spacings``) always hold the four.

Anisotropic Wilson action (derivation; the xi weights are common practice, from memory, e.g. Karsch,
Nucl. Phys. B 205 (1982) 285).  A plaquette of the (mu, nu) plane is U_p = exp(a_mu a_nu F_mu nu + ...)
(conventions module, F anti-Hermitian and traceless), so

    1 - Re tr U_p / N = -(a_mu a_nu)^2 tr F_mu nu^2 / (2N) + O(a^6),

and a sum over sites is an integral with the cell volume V = a1 a2 a3 a4: sum_n -> int d^4x / V.
The continuum action is S = int s, s = -1/2 sum_{mu,nu} tr F_mu nu F_mu nu = -sum_{mu<nu} tr F_mu nu^2.
Hence S_W = beta sum_n sum_{mu<nu} w_mu nu (1 - Re tr U_p / N) tends to S exactly when

    beta w_mu nu (a_mu a_nu)^2 / (2N V) = 1,  i.e. (with beta = 2N)  w_mu nu = V / (a_mu a_nu)^2
    = a_rho a_sigma / (a_mu a_nu)  ({rho, sigma} the other two directions).

For (a_s, a_s, a_s, a_t) this is w = a_t / a_s = 1/xi for the three spatial planes and w = a_s / a_t
= xi for the three temporal ones: S_W = beta [ (1/xi) sum_spatial (1 - Re tr U_p / N) + xi
sum_temporal (1 - Re tr U_p / N) ], beta = 2N, and S_W -> 8 pi^2 |Q| for a self-dual field as a -> 0
(checked in tests/test_thermal.py).  All four equal gives w = 1, the isotropic action.

Holonomy.  A caloron of non-trivial holonomy in its periodic gauge tends to a constant B at spatial
infinity, B_4 = (2 pi omega / beta) u_3 (u_3 = -i sigma_3; Kraan, van Baal, Nucl. Phys. B 533 (1998)
627, from memory), so 1/2 tr P -> cos 2 pi omega.  Windowing such a field to zero at the spatial faces
would make the holonomy trivial there and put a large action into the layer; a start windows it about
B instead (`asymptotic_potential`, `instantonkit.ansatz.periodic.TorusWindow`).
"""

from __future__ import annotations

import numpy as np

from ..core import _validate as _v
from ..engine.fields import hook

__all__ = ["plane_weights", "anisotropy", "thermal_spacings", "asymptotic_potential"]

#: The six lattice planes (mu, nu), mu < nu (the order of `instantonkit.lattice.observables.PLANES`).
PLANES = ((0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3))
_U3 = np.array([[-1j, 0.0], [0.0, 1j]])  # u_3 = -i sigma_3 (conventions module)


def plane_weights(spacing) -> np.ndarray:
    """Weights w_mu nu = a_rho a_sigma / (a_mu a_nu) of the anisotropic Wilson action, plane order `PLANES`; (6,) float64.

    spacing: one a > 0 (all weights 1.0 exactly) or four (a1, a2, a3, a4) (module docstring for the
    derivation: S_W -> int s as a -> 0 with beta = 2N).
    """
    a = _v.spacings("spacing", spacing)
    if np.all(a == a[0]):
        return np.ones(6)
    out = []
    for mu, nu in PLANES:
        rho, sig = (d for d in range(4) if d not in (mu, nu))
        out.append(a[rho] * a[sig] / (a[mu] * a[nu]))
    return np.asarray(out)


def anisotropy(spacing) -> float:
    """xi = a_s / a_t of spacings (a_s, a_s, a_s, a_t) (one number: 1.0); ValueError when the spatial three differ."""
    a = _v.spacings("spacing", spacing)
    if not (a[0] == a[1] == a[2]):
        raise ValueError(
            f"spacing must have equal spatial spacings (a_s, a_s, a_s, a_t) for an anisotropy a_s / a_t; found {a.tolist()}"
        )
    return float(a[0] / a[3])


def thermal_spacings(period, n_t, *, spatial=None, anisotropy: float | None = None) -> tuple:
    """Spacings (a_s, a_s, a_s, a_t) of an N_s^3 x N_t lattice at period beta: a_t = beta / N_t.

    Args:
      period: beta > 0 (the field's period in x4).
      n_t: N_t >= 1, the number of time slices.
      spatial: a_s > 0; or ``anisotropy`` xi > 0 (a_s = xi a_t); neither: a_s = a_t.
    Returns:
      tuple of four floats (a_s, a_s, a_s, a_t), with n_t * a_t equal to beta within rounding.
    Raises:
      ValueError / TypeError: beta <= 0, n_t < 1, a bad a_s or xi, or both given (naming the value).
    """
    beta = _v.positive_float("period", period)
    nt = _v.positive_int("n_t", n_t)
    a_t = beta / nt
    if spatial is not None and anisotropy is not None:
        raise ValueError(
            f"give spatial= or anisotropy=, not both; found spatial={spatial!r}, anisotropy={anisotropy!r}"
        )
    if spatial is not None:
        a_s = _v.positive_float("spatial", spatial)
    elif anisotropy is not None:
        a_s = _v.positive_float("anisotropy", anisotropy) * a_t
    else:
        a_s = a_t
    return (a_s, a_s, a_s, a_t)


def asymptotic_potential(field) -> np.ndarray | None:
    """The constant limit B (4, N, N) of a periodic field's potential at spatial infinity, or None for B = 0 / unknown.

    Read from the field's ``record()`` (data, not its class): a Kraan-van Baal caloron (kind
    'holonomy_caloron', its translations and its windows) has B_4 = (2 pi omega / beta) u_3 and
    B_i = 0 (module docstring), an SU(N) caloron (kind 'sun_caloron') B_4 = 2 pi i diag(mu) / beta;
    every other field (Harrington-Shepard calorons, fields on R^4, fields
    without a record) None, and a start windows it to zero as before.
    """
    if hook(field, "period") is None:
        return None
    rec_hook = hook(field, "record")
    if rec_hook is None:
        return None
    rec = rec_hook()
    while isinstance(rec, dict) and rec.get("kind") == "translated":  # a shift leaves the constant alone
        rec = rec.get("field")
    if not isinstance(rec, dict) or rec.get("kind") not in ("holonomy_caloron", "sun_caloron"):
        return None
    if isinstance(rec.get("window"), dict) and "background" in rec["window"]:
        return None  # already windowed about its limit: nothing is left at the faces
    if rec["kind"] == "sun_caloron":  # B_4 = 2 pi i diag(mu) / beta (instantonkit.ansatz.caloron_nahm)
        mu = np.asarray(rec["holonomy"], dtype=np.float64)
        sun = np.zeros((4, mu.shape[0], mu.shape[0]), dtype=np.complex128)
        sun[3] = np.diag(2j * np.pi * mu / float(rec["period"]))
        return sun
    omega, beta = float(rec["holonomy"]), float(rec["period"])
    if omega == 0.0:
        return None
    out = np.zeros((4, 2, 2), dtype=np.complex128)
    out[3] = (2.0 * np.pi * omega / beta) * _U3
    return out
