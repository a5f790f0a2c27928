"""Constituents of a caloron as ``verify`` shows them: the holonomy and fractions (inputs) and the action in balls.

A charge-1 caloron of holonomy mu_1 <= ... <= mu_N splits into N constituent monopoles with action
fractions nu_m = mu_{m+1} - mu_m (mu_{N+1} = 1 + mu_1); far apart, the action in a ball about the m-th
constituent approaches nu_m 8 pi^2 per period (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627 and
Phys. Lett. B 435 (1998) 389; Lee, Lu, Phys. Rev. D 58 (1998) 025011; from memory).  The fractions
come with the field (the ``constituents`` hook) and are shown as inputs; `ball_fractions` integrates
the action density over balls about the constituents as the check that they are where the action is.
"""

from __future__ import annotations

import numpy as np

from ..core import _validate
from ..core.conventions import INSTANTON_ACTION
from ..engine import fields as _fields
from ..integrals import quadrature as _quad
from ..integrals.drivers import ENGINE_CHUNK
from .report import HOW_BALLS, HOW_INPUT, Row

__all__ = ["ball_fractions", "constituent_rows"]

#: Gauss-Legendre nodes in r, in cos(theta) (phi gets twice as many) and midpoints in t per ball.
_RADIAL, _POLAR, _TIME = 40, 24, 16


def ball_fractions(field, radius=None, *, n_radial: int = _RADIAL, n_polar: int = _POLAR, n_time: int = _TIME):
    """Action in a ball about each constituent, per period, in units of 8 pi^2: (fractions (n,), radii (n,)).

    S_m = int_{|x_vec - y_m| < R_m} int_0^beta s d^4x / (8 pi^2), by a product rule: Gauss-Legendre in u,
    r = R (e^(a u) - 1) / (e^a - 1) with a = log(1 + 2 pi R / beta) (``n_radial``; nodes cluster in the
    core), in cos(theta) (``n_polar``), the trapezoid rule in phi (2 n_polar) and in t
    (``n_time``, spectral for periodic integrands).  R_m defaults to half the distance to the nearest
    other constituent, so the balls do not overlap; S_m approaches the fraction nu_m as the
    constituents separate (tests/test_caloron_density.py).
    Args:
      field: a field with the ``constituents`` and ``period`` hooks (a caloron).
      radius: one radius for every ball, or (n,) radii, > 0; default as above.
      n_radial, n_polar, n_time: nodes of the rule (positive integers).
    Returns:
      (fractions (n,) float64, radii (n,) float64).
    Raises:
      ValueError for a field without constituents or period, non-positive radii or node counts.
    """
    cons, period = _fields.hook(field, "constituents"), _fields.hook(field, "period")
    if cons is None or period is None:
        raise ValueError(
            f"ball_fractions needs a caloron (hooks 'constituents' and 'period'); found {type(field).__name__}"
        )
    pos, _ = cons()
    pos = np.asarray(pos, dtype=np.float64)
    beta = float(period)
    n = pos.shape[0]
    if radius is None:
        dist = np.linalg.norm(pos[:, None, :3] - pos[None, :, :3], axis=-1) + np.diag(np.full(n, np.inf))
        radii = 0.5 * dist.min(axis=1) if n > 1 else np.full(n, beta)
    else:
        radii = np.broadcast_to(np.asarray(_validate.real_array("radius", radius)), (n,)).astype(np.float64)
    if not np.all(np.isfinite(radii) & (radii > 0)):
        raise ValueError(f"ball radii must be finite and > 0; found {np.asarray(radii).tolist()}")
    nr = _validate.budget("n_radial", n_radial)
    npol = _validate.budget("n_polar", n_polar)
    nt = _validate.budget("n_time", n_time)
    u, wu = _quad.legendre01(nr)
    dirs, wd = _quad.sphere2_nodes(npol)
    t = (np.arange(nt) + 0.5) * beta / nt
    out = np.empty(n)
    # r = R (e^(a u) - 1) / (e^a - 1), a = log(1 + R / w), w = beta / 2 pi: nodes where the core is
    a = np.log1p(radii / (beta / (2.0 * np.pi)))
    for m in range(n):
        r = radii[m] * np.expm1(a[m] * u) / np.expm1(a[m])
        wr = wu * radii[m] * a[m] * np.exp(a[m] * u) / np.expm1(a[m]) * r**2
        xyz = pos[m, :3] + r[:, None, None] * dirs[None, :, :]
        pts = np.concatenate(
            [
                np.broadcast_to(xyz[:, :, None, :], (nr, dirs.shape[0], nt, 3)),
                np.broadcast_to((pos[m, 3] + t)[None, None, :, None], (nr, dirs.shape[0], nt, 1)),
            ],
            axis=-1,
        )
        s = _fields.evaluate(field, pts.reshape(-1, 4), "action_density", chunk_size=ENGINE_CHUNK)
        s = np.asarray(s).reshape(nr, -1, nt)
        out[m] = np.einsum("r,d,rdt->", wr, wd, s) * (beta / nt) / INSTANTON_ACTION
    return out, np.asarray(radii, dtype=np.float64)


def constituent_rows(field) -> list[Row]:
    """Rows of the report for a caloron: its holonomy and fractions (inputs) and the action in balls.

    Empty for fields without the ``constituents`` hook.  The ball rows are plain numbers (no status):
    they approach the fractions only as the constituents separate.
    """
    cons = _fields.hook(field, "constituents")
    if cons is None or _fields.hook(field, "period") is None:
        return []
    rows = []
    hol = _fields.hook(field, "asymptotic_holonomy")
    if hol is not None:
        mu = np.asarray(hol(), dtype=np.float64)
        text = ", ".join(f"{v:.6g}" for v in mu)
        value = float(np.mean(np.cos(2.0 * np.pi * mu)))
        rows.append(Row(f"holonomy mu = ({text}): tr P at infinity / N", value, None, HOW_INPUT, "input"))
    pos, frac = cons()
    balls, radii = ball_fractions(field)
    for m, (p, nu) in enumerate(zip(np.asarray(pos), np.asarray(frac))):
        where = ", ".join(f"{v:.4g}" for v in p[:3])
        rows.append(Row(f"constituent {m + 1} at ({where}): action fraction nu", float(nu), None, HOW_INPUT, "input"))
        rows.append(
            Row(
                f"constituent {m + 1}: S in a ball of radius {radii[m]:.3g} / 8 pi^2",
                float(balls[m]),
                None,
                HOW_BALLS,
                "",
                "approaches nu as the constituents separate",
            )
        )
    return rows
