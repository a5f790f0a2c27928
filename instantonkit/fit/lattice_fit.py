"""Instantons from link arrays: the colour rank of the links, their clover densities, then the finder.

Colour rank.  A field whose gauge group reduces to SU(r) x (trivial) inside SU(N) (e.g. an SU(2) instanton
embedded in SU(3)) has N - r colour directions annihilated by its field strength everywhere, in a
gauge-covariant sense: v(x) with F_mu nu(x) v(x) = 0 and v parallel transported between sites (common
practice: the holonomy group of a reducible connection fixes the vectors of the trivial block).  The
test is made gauge invariant by carrying every clover F(x) to one base site along a fixed maximal tree
of links (axis 4 from site 0, then 3, 2, 1: P(x) = product of the links on the path, F(x) -> P F P^dag),
so neither a constant SU(N) rotation of an embedding nor a site-dependent gauge hides the null space.
The transported blocks of the sites with action density >= ``ACTION_FLOOR`` of the largest are stacked
into one (16 m N, N) matrix; its singular values, relative to the largest, below ``RANK_THRESHOLD`` count
as null.  Measured (open 8^4 and 10^4 lattices, a = 1 and 0.8, rho = 1 to 1.6): SU(2) links put in a
block and rotated by a constant SU(3) matrix give 4.5e-16 to 1.7e-15 (after a random gauge too);
charge-1 and common-subgroup charge-2 complex ADHM data, embeddings whose null vector turns from site to
site in the ADHM gauge, give 8.5e-13 to 8.7e-13 (the links' Magnus tolerance is 1e-12; without the tree
they give 0.08 to 0.10, i.e. look genuine); genuine SU(3) charge-2 data give 0.43 to 0.64.  1e-6 sits six
orders above the largest floor and five below the genuine values.  Charge-1 SU(N) instantons are
embeddings of SU(2) (common practice), so they infer rank 2; genuine SU(N) configurations close to an
embedding have a small but finite smallest singular value and count as genuine once it exceeds the
threshold.  Without ``rank``, `find_lattice_instantons` fits SU(r) with the inferred r (= N for
genuine SU(N) links; an SU(r) field embedded in SU(N) is fitted as SU(r)).

Error budget.  Links are checked first (finite, SU(N) within 1e-8).  The finder's systematic is the model
error of continuum densities; for links that were smoothed the caller passes the run's record and the
sizes' systematic gains the drift the run caused (`_smoothing_systematic`); raw links whose Wilson
action exceeds ``ROUGH_FACTOR`` x 8 pi^2 k are rough: systematic not estimated, advice to smooth first.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core._links import CheckedLinks, check_links
from ..core.conventions import ACTION_DENSITY_FACTOR, INSTANTON_ACTION
from ..engine.fields import action_from_f
from ..lattice import observables as _obs
from ..lattice.smoothing import SmoothingRecord
from .finder import InstantonFit, MixedFit, find_instantons

__all__ = ["ColourRank", "colour_rank", "find_lattice_instantons"]

_QUANTITIES = ("action", "charge")

#: Relative singular value of the stacked, transported clover F below which a colour direction is null
#: (the module docstring gives the measured floors, ~1e-15 to ~1e-12, and genuine values, ~0.4).
RANK_THRESHOLD = 1e-6

#: Sites with action density below this fraction of the largest are left out of the stack: the lumps
#: carry the colour structure, and far from them F is at the level of the links' own errors.
ACTION_FLOOR = 1e-3


@dataclasses.dataclass(frozen=True)
class ColourRank:
    """Result of `colour_rank`: the rank r of the field's colour structure inside SU(N).

    rank: r = N - dim(common null space); n: N of the links; singular_values: (N,) float64, of the
    stacked transported clover F relative to the largest, descending; gap: sigma_r / sigma_{r+1} (inf
    when r = N); threshold: the relative threshold used; sites: number of sites in the stack;
    null_vectors: (N, N - r) complex128, an orthonormal basis of the null space at the tree's base site 0.
    """

    rank: int
    n: int
    singular_values: np.ndarray
    gap: float
    threshold: float
    sites: int
    null_vectors: np.ndarray

    def describe(self) -> str:
        """One sentence: the inferred rank, the singular values and the gap."""
        sv = ", ".join(f"{v:.2e}" for v in self.singular_values)
        kind = f"genuine SU({self.n})" if self.rank == self.n else f"SU({self.rank}) embedded in SU({self.n})"
        gap = (
            "no null direction"
            if self.rank == self.n
            else f"gap sigma_{self.rank} / sigma_{self.rank + 1} = {self.gap:.1e}"
        )
        return (
            f"colour rank {self.rank} inferred from the links ({kind}): relative singular values of the stacked "
            f"clover F on {self.sites} sites {sv}; threshold {self.threshold:.0e}; {gap}"
        )

    def __str__(self) -> str:
        return self.describe()


def _tree_transporters(u: np.ndarray) -> np.ndarray:
    """Products of links from site 0 to every site along the maximal tree (axis 4, 3, 2, then 1); (L1, .., L4, N, N).

    P(n + mu) = P(n) U_mu(n), so P(n) -> g(0) P(n) g(n)^dag under U_mu(n) -> g(n) U_mu(n) g(n + mu)^dag.
    """
    n = u.shape[-1]
    p = np.zeros(u.shape[:4] + (n, n), dtype=np.complex128)
    p[0, 0, 0, 0] = np.eye(n)
    for t in range(1, u.shape[3]):
        p[0, 0, 0, t] = p[0, 0, 0, t - 1] @ u[0, 0, 0, t - 1, 3]
    for z in range(1, u.shape[2]):
        p[0, 0, z] = p[0, 0, z - 1] @ u[0, 0, z - 1, :, 2]
    for y in range(1, u.shape[1]):
        p[0, y] = p[0, y - 1] @ u[0, y - 1, :, :, 1]
    for x in range(1, u.shape[0]):
        p[x] = p[x - 1] @ u[x - 1, :, :, :, 0]
    return p


def colour_rank(links, *, spacing=1.0, boundary: str = "periodic", threshold: float = RANK_THRESHOLD):
    """The colour rank of a lattice gauge field: N minus the dimension of the common null space of its clover F.

    The clover F_mu nu(x) of every site with appreciable action is carried to site 0 along a maximal tree
    of links (gauge invariant; module docstring), the (N, N) blocks are stacked and the singular values of
    the stack below ``threshold`` times the largest count as null directions.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links, N >= 2.
      spacing: lattice spacing a > 0, or four (a1, a2, a3, a4) > 0.
      boundary: 'periodic' or 'open' (open: sites whose clovers leave the lattice are skipped).
      threshold: relative singular value in (0, 1) below which a direction is null.
    Returns:
      `ColourRank` (rank, relative singular values (N,), gap, null vectors (N, N - rank)).
    Raises:
      ValueError / TypeError naming the bad argument; ValueError when the links carry no field strength.
    """
    u = check_links(links)
    n = u.shape[-1]
    if n < 2:
        raise ValueError(f"links must be N x N matrices with N >= 2; found N = {n}")
    thr = _validate.positive_float("threshold", threshold)
    if thr >= 1:
        raise ValueError(f"threshold must be in (0, 1); found {thr!r}")
    f = _obs.clover_field_strength(CheckedLinks(u), spacing=spacing, boundary=boundary).reshape((-1, 16, n, n))
    p = _tree_transporters(np.asarray(u)).reshape((-1, n, n))
    ok = np.isfinite(f).all(axis=(1, 2, 3))
    f, p = f[ok], p[ok]
    s = ACTION_DENSITY_FACTOR * np.real(np.einsum("xmij,xmji->x", f, f))  # s = -1/2 sum tr F F (conventions)
    smax = float(np.max(s)) if s.size else 0.0
    if not smax > 0:
        raise ValueError(
            f"the links carry no field strength (largest clover action density {smax!r}); no rank to infer"
        )
    sel = s >= ACTION_FLOOR * smax
    ft = np.einsum("xij,xmjk,xlk->xmil", p[sel], f[sel], p[sel].conj())
    _, sig, vh = np.linalg.svd(ft.reshape(-1, n), full_matrices=False)
    rel = sig / sig[0]
    rank = int(np.sum(rel >= thr))
    gap = float(rel[rank - 1] / max(rel[rank], np.finfo(float).tiny)) if rank < n else float("inf")
    return ColourRank(rank, n, rel, gap, thr, int(np.sum(sel)), vh[rank:].conj().T)


def find_lattice_instantons(
    links,
    k,
    *,
    spacing=1.0,
    origin=None,
    boundary: str = "periodic",
    quantity: str = "charge",
    model: str | None = None,
    rank: int | None = None,
    smoothing: SmoothingRecord | None = None,
    **options,
):
    """Fit instantons to a lattice gauge field given as links, from the lattice's own densities.

    The density is the clover charge density (quantity='charge', `observables.clover_charge_density`)
    or the clover action density s = -1/2 sum tr F F of the clover field strength (quantity='action'),
    at the sites x_n = origin + a n (origin defaults to 0); open boundaries drop the sites whose
    clovers leave the lattice.  The continuum model is fitted to these O(a^2)-accurate densities.
    Without ``rank`` the colour rank r is inferred from the links (`colour_rank`): r = 2 (SU(2)
    links, or an SU(2) field embedded in SU(N)) fits SU(2) with model 'exact' by default; r > 2 fits
    SU(r) with model 'superposition' by default (centres and sizes: the clover densities' O((a / rho)^2)
    artefacts exceed the superposition's model error, and the exact SU(r) fit of
    `instantonkit.fit.exact_fit`, model='exact', costs 20-50 s on its first call).  The fit's
    ``notes`` say what was inferred.

    Args:
      links: (L1, L2, L3, L4, 4, N, N) complex links.
      k: as in `find_instantons` (an integer, or (k_plus, k_minus) for quantity='charge').
      spacing: lattice spacing a > 0, or four (a1, a2, a3, a4) > 0 (anisotropic lattices: sites at
        origin_mu + a_mu n_mu, clover densities and the Wilson action with the four spacings).
      origin: (4,) position of site 0, default (0, 0, 0, 0).
      boundary: 'periodic' or 'open'.
      quantity: 'charge' or 'action'.
      model: None (chosen from the rank, above), 'exact' or 'superposition'.
      rank: None (inferred) or the N of the SU(N) instantons, as in `find_instantons`.
      smoothing: the `instantonkit.lattice.smoothing.SmoothingRecord` of the flow or cooling run that made
        these links, if any: its systematic enters the error budget (`_smoothing_systematic`).
        Without it, links whose Wilson action exceeds ``ROUGH_FACTOR`` times 8 pi^2 k are called rough
        (noisy): their systematic is NaN (not estimable) and the advice is to smooth them first.
      options: passed to `find_instantons`.
    Returns:
      InstantonFit (or MixedFit), positions in the lattice's coordinates, ``notes`` naming the rank.
    Raises:
      ValueError / TypeError naming the bad argument.
    """
    _validate.choice("quantity", quantity, _QUANTITIES)
    if smoothing is not None and not isinstance(smoothing, SmoothingRecord):
        raise TypeError(
            f"smoothing must be the SmoothingRecord of wilson_flow / gradient_flow / cool or None; found "
            f"{type(smoothing).__name__}"
        )
    links = CheckedLinks(check_links(links))  # checked once: the observables below take them as they are
    if model is not None:
        _validate.choice("model", model, ("exact", "superposition"))
    a = _validate.spacing_value("spacing", spacing)  # one float, or four (a1, a2, a3, a4) when they differ
    org = np.zeros(4) if origin is None else _validate.point("origin", origin)
    if rank is None:
        inferred = colour_rank(links, spacing=a, boundary=boundary)
        rank, note = inferred.rank, inferred.describe()
    else:
        note = f"colour rank {rank} given by the caller (not inferred from the links)"
    if model is None:
        model = "exact" if rank == 2 else "superposition"
    if quantity == "charge":
        dens = _obs.clover_charge_density(links, spacing=a, boundary=boundary)
    else:
        fmn = _obs.clover_field_strength(links, spacing=a, boundary=boundary)
        flat = fmn.reshape((-1,) + fmn.shape[4:])
        dens = np.asarray(jax.vmap(action_from_f)(jnp.asarray(np.nan_to_num(flat)))).reshape(fmn.shape[:4])
        dens = np.where(np.isnan(fmn).any(axis=(4, 5, 6, 7)), np.nan, dens)
    shape = dens.shape
    grids = np.meshgrid(*[np.arange(n, dtype=np.float64) for n in shape], indexing="ij")
    sites = org + (np.asarray(a) if isinstance(a, tuple) else a) * np.stack(grids, axis=-1)
    ok = np.isfinite(dens)
    a_text = f"{a:g}" if isinstance(a, float) else "(" + ", ".join(f"{v:g}" for v in a) + ")"
    lattice_note = f"; lattice artefacts of the clover density, O((a / rho)^2) with a = {a_text}, are not included"
    fit = find_instantons(
        sites[ok], dens[ok], k, quantity=quantity, model=model, rank=rank, _lattice_note=lattice_note, **options
    )
    k_total = sum(k) if isinstance(k, tuple | list) else k
    s_w = _obs.wilson_action(links, boundary=boundary, spacing=a if isinstance(a, tuple) else None)

    def finish(f):
        return _smoothing_systematic(dataclasses.replace(f, notes=f.notes + (note,)), smoothing, s_w, k_total)

    if isinstance(fit, MixedFit):
        return dataclasses.replace(fit, instantons=finish(fit.instantons), anti_instantons=finish(fit.anti_instantons))
    assert isinstance(fit, InstantonFit)
    return finish(fit)


#: Links whose Wilson action exceeds this many times 8 pi^2 k (the self-duality bound S >= 8 pi^2 |Q| is
#: saturated by k smooth instantons, Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) carry
#: action the fitted lumps do not explain: rough or noisy links.
ROUGH_FACTOR = 2.0


def _smoothing_systematic(fit: InstantonFit, record, s_w: float, k: int) -> InstantonFit:
    """The fit with the systematic of the links' smoothing (or of their roughness) in its error budget.

    Smoothed links (``record`` given): the sizes' systematic gains, in quadrature, the relative drift of the
    record's size estimate rho/a (`instantonkit.lattice.smoothing.instanton_size`) from the first to the last
    measurement, times each fitted size (the flow or cooling moves sizes, lattice flows shrink them); the
    record holds no positions or orientations, so their systematic is NaN, "not estimated".  Raw links
    above ROUGH_FACTOR 8 pi^2 k: every systematic is NaN and the reasons advise smoothing first.  Other
    raw links keep the finder's budget with a note to pass the record if they were smoothed.
    """
    stat, syst = fit.statistical, dict(fit.systematic)
    stat_text = fit.error_budget.split("; systematic")[0]
    model_text = fit.error_budget[len(stat_text) :].removeprefix("; ").replace("systematic = 0 (", "model error 0 (")
    reasons = list(fit.reasons)
    if record is not None:
        what = (
            f"the flow to t = {float(record.time[-1]):g} a^2"
            if record.kind == "flow"
            else f"{int(record.time[-1])} cooling sweep(s)"
        )
        drift = abs(float(record.size[-1]) / float(record.size[0]) - 1.0) if record.size.size else float("nan")
        if not np.isfinite(drift):
            drift = float("nan")
        syst["sizes"] = np.sqrt(np.asarray(syst["sizes"]) ** 2 + (drift * fit.sizes) ** 2)
        for key in syst:
            if key != "sizes":
                syst[key] = np.full_like(np.asarray(syst[key], dtype=float), np.nan)
        budget = (
            f"{stat_text}; systematic = the model ({model_text}) in quadrature with what {what} did to the links "
            f"(S_W {float(record.wilson_action[0]):.4g} -> {float(record.wilson_action[-1]):.4g}): sizes "
            f"+- {100 * drift:.2g} % (drift of the record's size estimate rho/a "
            f"{float(record.size[0]):.4g} -> {float(record.size[-1]):.4g}); centres"
            f"{' and orientations' if 'orientations' in syst else ''}: not estimated (the record holds no positions)"
        )
    elif s_w > ROUGH_FACTOR * INSTANTON_ACTION * k:
        syst = {key: np.full_like(np.asarray(v, dtype=float), np.nan) for key, v in syst.items()}
        budget = (
            f"{stat_text}; systematic: not estimated (the links are rough: S_W = {s_w:.4g} exceeds "
            f"{ROUGH_FACTOR:g} x 8 pi^2 k = {ROUGH_FACTOR * INSTANTON_ACTION * k:.4g}, so the fitted lumps do not "
            "explain their action)"
        )
        reasons.append(
            f"the links are rough (S_W = {s_w:.4g} > {ROUGH_FACTOR:g} x 8 pi^2 k): smooth them first "
            "(instantonkit.wilson_flow or instantonkit.cool) and pass the run's record as smoothing="
        )
    else:
        return dataclasses.replace(
            fit,
            error_budget=fit.error_budget
            + "; if these links were smoothed, pass the flow's or cooling's record as smoothing= to include its effect",
        )
    # NaN systematic = not estimated: the total then holds the statistical part (finder's convention)
    total = {key: np.sqrt(np.asarray(stat[key]) ** 2 + np.nan_to_num(syst.get(key, 0.0)) ** 2) for key in stat}
    return dataclasses.replace(
        fit, systematic=syst, uncertainties=total, error_budget=budget, reasons=tuple(reasons), ambiguous=bool(reasons)
    )
