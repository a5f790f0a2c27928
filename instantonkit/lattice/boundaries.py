"""Boundary conditions per lattice direction: the one reading of ``boundary=`` for starts and observables.

``boundary=`` takes either one choice for all four directions (a string, e.g. ``"periodic"``) or one
choice per direction: a sequence of four strings in (x1, x2, x3, x4) order, e.g.
``("window", "window", "window", "periodic")`` for a field periodic in time and windowed in space.
Lattice starts know 'periodic', 'window' and 'open' (`START_BOUNDARIES`), link observables
'periodic' and 'open' (`OBSERVABLE_BOUNDARIES`).

A field with a period in x4 (the ``period`` hook, e.g. a caloron on R^3 x S^1):

* a window is never applied across the period: the single string ``"window"`` windows x1, x2, x3
  and keeps x4 periodic, and an explicit ``"window"`` for x4 is refused (ValueError);
* a periodic x4 needs the lattice to close on the period, L4 a = beta (relative tolerance
  `PERIOD_RTOL`); otherwise the links would not close and a ValueError names both numbers;
* 'open' in x4 stays open (exact links, nothing wrapped), and the default 'periodic' wraps x4.

Boundary figures of a start (link mismatch, boundary action, see ``lattice.boundary_mismatch``) are
kept per direction; `warn_boundary` raises `BoundaryActionWarning` naming the directions
whose faces carry the action.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..core import _validate as _v

__all__ = [
    "DIRECTIONS",
    "START_BOUNDARIES",
    "OBSERVABLE_BOUNDARIES",
    "PERIOD_RTOL",
    "BOUNDARY_WARN_FRACTION",
    "BoundaryActionWarning",
    "per_direction",
    "canonical",
    "resolve_start",
    "check_period",
    "combine",
    "face_figures",
    "warn_boundary",
]

#: The names of the four lattice directions, in the order of a per-direction spec.
DIRECTIONS = ("x1", "x2", "x3", "x4")
#: Boundaries of a start: 'periodic' (the field's links wrapped as they are), 'window' (the field
#: windowed onto the torus in that direction, `instantonkit.ansatz.periodic`; periodic links) and 'open'.
START_BOUNDARIES = ("periodic", "window", "open")
#: Boundaries of link observables: wrap around, or use only what lies inside.
OBSERVABLE_BOUNDARIES = ("periodic", "open")
#: Relative tolerance of L4 a = beta for a field periodic in x4 with a periodic x4 (common practice: a
#: few hundred float64 roundings; a lattice that misses the period by more does not close).
PERIOD_RTOL = 1e-9
#: Boundary action (as a fraction of 8 pi^2) above which a start raises BoundaryActionWarning.
BOUNDARY_WARN_FRACTION = 0.01
_EIGHT_PI2 = 8.0 * np.pi**2


class BoundaryActionWarning(UserWarning):
    """A start whose wrapped links carry more boundary action than BOUNDARY_WARN_FRACTION of 8 pi^2."""


def per_direction(name: str, spec, choices) -> tuple:
    """``spec`` as four choices in (x1, x2, x3, x4) order; ValueError/TypeError naming the bad entry and the choices.

    spec: one string of ``choices`` (all directions) or a sequence of four such strings.
    """
    if isinstance(spec, str):
        _v.choice(name, spec, choices)
        return (spec,) * 4
    if isinstance(spec, (bytes, dict)) or not isinstance(spec, (list, tuple)):
        raise TypeError(
            f"{name} must be one of {choices} or a sequence of four of them in (x1, x2, x3, x4) order; "
            f"found {type(spec).__name__} {spec!r:.80}"
        )
    if len(spec) != 4:
        raise ValueError(
            f"{name} must have one entry per direction (x1, x2, x3, x4), four in all; found {len(spec)}: {list(spec)!r:.80}"
        )
    for i, entry in enumerate(spec):
        if not isinstance(entry, str):
            raise TypeError(
                f"{name}[{i}] ({DIRECTIONS[i]}) must be one of {choices}; found {type(entry).__name__} {entry!r:.40}"
            )
        if entry not in choices:
            raise ValueError(f"{name}[{i}] ({DIRECTIONS[i]}) must be one of {choices}; found {entry!r}")
    return tuple(spec)


def canonical(name: str, spec, choices):
    """``spec`` checked and kept in the form given: a string, or a tuple of four strings (lists become tuples)."""
    dirs = per_direction(name, spec, choices)
    return spec if isinstance(spec, str) else dirs


def check_period(period: float, length: int, spacing: float, *, direction: int = 3) -> None:
    """ValueError unless the lattice extent L a equals the field's period within PERIOD_RTOL (naming both numbers).

    spacing: the spacing of that direction (a_4 = a_t for x4 on an anisotropic lattice)."""
    extent = float(length) * float(spacing)
    if not abs(extent - period) <= PERIOD_RTOL * max(abs(period), abs(extent)):
        raise ValueError(
            f"the field is periodic in {DIRECTIONS[direction]} with period {period!r}, but the lattice extent "
            f"in {DIRECTIONS[direction]} is L{direction + 1} * a = {int(length)} * {float(spacing)!r} = {extent!r}: "
            f"periodic links would not close; choose L{direction + 1} * a equal to the period, or boundary 'open' "
            f"in {DIRECTIONS[direction]}"
        )


def resolve_start(boundary, period, shape, spacing) -> tuple:
    """The boundary of each direction of a start (module docstring): four strings of START_BOUNDARIES.

    boundary: as given to the start; period: the field's period in x4 (None for a field on R^4);
    shape: (L1, L2, L3, L4); spacing: a, or four (a1, a2, a3, a4) (x4 checked with a4).  Raises ValueError/TypeError for a bad spec, an explicit
    window across the period, or a periodic x4 whose extent misses the period.
    """
    dirs = list(per_direction("boundary", boundary, START_BOUNDARIES))
    if period is None:
        return tuple(dirs)
    beta = float(period)
    if dirs[3] == "window":
        if not isinstance(boundary, str):
            raise ValueError(
                f"boundary[3] (x4) is 'window', but the field is periodic in x4 with period {beta!r}: a window "
                "across the field's period would cut it; use 'periodic' (or 'open') for x4"
            )
        dirs[3] = "periodic"  # the single string windows the non-periodic directions only
    if dirs[3] == "periodic":
        check_period(beta, shape[3], float(np.broadcast_to(np.asarray(spacing, dtype=np.float64), (4,))[3]))
    return tuple(dirs)


def combine(mismatch, action):
    """The compatible scalars of per-direction figures: (max mismatch, summed action), None where none was measured."""
    m = [v for v in (mismatch or ()) if v is not None]
    s = [v for v in (action or ()) if v is not None]
    return (max(m) if m else None), (float(sum(s)) if s else None)


def face_figures(links, exact, mu: int) -> tuple:
    """(link mismatch, action error, wrapped action) of the faces of direction mu of a wrapped start.

    The sites n_mu = L_mu (one period beyond the last) are identified with n_mu = 0: the mismatch is
    max |U_nu(n_mu = L) - U_nu(n_mu = 0)| over nu != mu; the action error sums, over the plaquettes
    crossing the face (n_mu = L - 1, n_nu <= L_nu - 2), the Wilson action (beta = 2N; Wilson, Phys.
    Rev. D 10 (1974) 2445) with the wrapped link minus that with the exact one; the wrapped action is
    the first of the two.  links: (L1, L2, L3, L4, 4, N, N) (numpy slicing; only the two faces are
    read); exact: the exact links U_nu at n_mu = L for nu != mu in increasing order, the shape of a
    face with a direction axis of 3, (..., 1 at mu, ..., 3, N, N).
    """
    shape = tuple(links.shape[:4])
    n, lm = links.shape[-1], shape[mu]
    beta = 2.0 * n
    others = [nu for nu in range(4) if nu != mu]
    wrap = np.asarray(links[(slice(None),) * mu + (slice(0, 1),)])[..., others, :, :]
    mismatch, err, total = float(np.max(np.abs(exact - wrap))), 0.0, 0.0
    last = np.asarray(links[(slice(None),) * mu + (slice(lm - 1, lm),)])  # sites n_mu = L - 1
    for j, nu in enumerate(others):
        ln = shape[nu]
        if ln < 2:
            continue
        sl = [slice(None)] * 4
        sl[nu] = slice(0, ln - 1)
        sl_up = [slice(None)] * 4
        sl_up[nu] = slice(1, ln)
        u_mu = last[tuple(sl)][..., mu, :, :]
        u_mu_up = last[tuple(sl_up)][..., mu, :, :]
        u_nu = last[tuple(sl)][..., nu, :, :]
        left = np.conj(np.swapaxes(u_nu @ u_mu_up, -1, -2))
        for label, u_far in (("wrap", wrap[tuple(sl)][..., j, :, :]), ("exact", exact[tuple(sl)][..., j, :, :])):
            tr = np.real(np.einsum("...ij,...ji->...", u_mu @ u_far, left))
            s = beta * float(np.sum(1.0 - tr / n))
            if label == "wrap":
                total += s
                err += s
            else:
                err -= s
    return mismatch, err, total


def warn_boundary(report, stacklevel: int = 3) -> None:
    """Raise `BoundaryActionWarning` when a start's boundary action exceeds BOUNDARY_WARN_FRACTION of 8 pi^2.

    report: a ``lattice.LinkReport``; the message names the per-direction fractions and the largest.
    """
    frac = report.boundary_action_fraction
    if frac is None or abs(frac) <= BOUNDARY_WARN_FRACTION:
        return
    per = getattr(report, "boundary_action_error_by_direction", None) or (None,) * 4
    parts = [f"{d} {v / _EIGHT_PI2:.3g}" for d, v in zip(DIRECTIONS, per) if v is not None]
    sizes = [abs(v) if v is not None else -1.0 for v in per]
    worst = DIRECTIONS[int(np.argmax(sizes))] if max(sizes) >= 0 else None  # the first of equals
    where = f" (per direction: {', '.join(parts)}; mostly across the {worst} faces)" if worst else ""
    warnings.warn(
        f"the wrapped links of this start carry a boundary action of {frac:.3g} x 8 pi^2{where} "
        f"(more than {BOUNDARY_WARN_FRACTION:g}; link mismatch {report.boundary_link_mismatch:.3g}): the field does not fit "
        "the torus. Remedies: boundary='window' (the field windowed smoothly onto the torus, same sector, "
        "small computed action excess, see instantonkit.ansatz.periodic; per direction, e.g. "
        "('window', 'window', 'window', 'periodic')), a larger box, a field in singular gauge "
        "(regular-gauge fields do not decay), or boundary='open'; compare with lattice.continuum_reference",
        BoundaryActionWarning,
        stacklevel=stacklevel,
    )
