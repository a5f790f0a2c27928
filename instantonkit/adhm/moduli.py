"""ADHM data from moduli: single instantons, well-separated multi-instantons (the constraint solved),
random valid data, Sp(n) embeddings and block sums (floor 3, above `instantonkit.adhm.quaternionic`).

The data class, its validation and its fields live in `instantonkit.adhm.quaternionic`; this module only
builds data.  ``multi_instanton`` fixes the diagonal of B to the centres and Lambda's columns to the
sizes and orientations, and solves the 3k(k-1)/2 real equations of the ADHM constraint for the
off-diagonal part of B by minimum-norm Gauss-Newton steps (the moduli count 8k for SU(2) is checked
in the tests from the rank of the constraint Jacobian).  Both the builder and the differentiable
`solve_constraint_unrolled` (used by `instantonkit.fit.exact_fit`) run the one solve of
`instantonkit.adhm.base.solve_quaternionic_constraint`: the builder to a tolerance, the fit for a fixed
number of unrolled steps.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core.conventions import point_to_quaternion
from .base import solve_quaternionic_constraint
from .quaternionic import CONSTRAINT_TOL, UNIT_TOL, ADHMData

__all__ = ["bpst", "multi_instanton", "random_adhm", "embed_sp", "block_sum", "solve_constraint_unrolled"]

#: Centres closer than this times max(1, largest size) count as coinciding (the constraint solve degenerates).
_COINCIDENT_CENTRES = 1e-8
#: Fresh draws random_adhm tries when the constraint solver fails for a draw (failures are rare).
_RANDOM_DRAWS = 20
#: Gauss-Newton steps of the off-diagonal constraint solve (it converges quadratically in a few).
_SOLVER_STEPS = 60
#: Gauss-Newton steps unrolled by solve_constraint_unrolled (from B_off = 0 the numpy solve needs 4-7 for
#: separated lumps; the extra steps are no-ops at rounding level and keep the derivative converged).
UNROLLED_STEPS = 12
#: Default target of the constraint solve: 100 times below CONSTRAINT_TOL, so solved data always validate.
_SOLVE_TOL = 1e-12


# -- constructors ---------------------------------------------------------------------------------


def _check_centers_sizes(centers, sizes):
    """centers (k, 4) (a single (4,) point promoted) and sizes (k,) > 0 (one number broadcast), distinct centres."""
    c = _validate.points_array("centers", centers, shape_text="(k, 4)")
    r = _validate.positive_vector("sizes", sizes, c.shape[0])
    _validate.distinct_points("centers", c, _COINCIDENT_CENTRES * max(1.0, float(np.max(r))), noun="centers")
    return c, r


def unit_orientations(orientations, k: int, rank: int) -> np.ndarray:
    """Orientations -> (k, n, 4) quaternionic unit vectors (columns of Lambda, normalised)."""
    if orientations is None:
        o = np.zeros((k, rank, 4))
        o[:, 0, 0] = 1.0
        return o
    o = np.asarray(orientations)
    if np.iscomplexobj(o):  # SU(2) matrices
        if o.shape == (2, 2):
            o = o[None]
        if o.shape != (k, 2, 2):
            raise ValueError(f"SU(2) orientations must have shape (k, 2, 2) = ({k}, 2, 2); found {o.shape}")
        dev = float(np.max(np.abs(np.einsum("kji,kjl->kil", o.conj(), o) - np.eye(2))))
        det = float(np.max(np.abs(np.linalg.det(o) - 1.0)))
        if max(dev, det) > UNIT_TOL:
            raise ValueError(f"orientation matrices must be in SU(2); max deviation {max(dev, det):.3e}")
        q = np.asarray(qt.from_matrix(o))
        o = np.zeros((k, rank, 4))
        o[:, 0] = q
        return o
    o = _validate.real_array("orientations", o)
    if o.shape == (4,) and k == 1:
        o = o[None]
    if o.shape == (k, 4):
        full = np.zeros((k, rank, 4))
        full[:, 0] = o
        o = full
    if o.shape != (k, rank, 4):
        raise ValueError(f"orientations must have shape (k, 4) or (k, n, 4) = ({k}, {rank}, 4); found {o.shape}")
    norms = np.sqrt(np.sum(o**2, axis=(1, 2)))
    dev = float(np.max(np.abs(norms - 1.0)))
    if dev > UNIT_TOL:
        raise ValueError(f"orientations must be unit quaternions (vectors); max | |u| - 1 | = {dev:.3e}")
    return o


def bpst(center=(0.0, 0.0, 0.0, 0.0), size: float = 1.0, orientation=(1.0, 0.0, 0.0, 0.0)) -> ADHMData:
    """Charge-1 SU(2) ADHM data of the BPST instanton: Lambda = rho u, B = p(a).

    Then Delta^dag Delta = (|x - a|^2 + rho^2) 1 (Belavin, Polyakov, Schwartz, Tyupkin,
    Phys. Lett. B 59 (1975) 85).

    Args:
      center: (4,) point a.
      size: rho > 0, a real number.
      orientation: unit quaternion (4,) or SU(2) matrix (2, 2).
    Returns:
      ADHMData with lam (1, 1, 4) and B (1, 1, 4); charge +1.
    Raises:
      ValueError for a centre not of shape (4,) or not finite, rho <= 0 or not finite, or an
      orientation that is not a unit quaternion / SU(2) matrix; TypeError for non-real input.
    """
    c = _validate.point("center", center)[None]
    r = np.array([_validate.positive_float("size", size)])
    o = np.asarray(orientation)
    u = unit_orientations(o[None] if o.shape == (4,) else o, 1, 1)
    lam = r[None, :, None] * np.swapaxes(u, 0, 1)
    b = np.asarray(point_to_quaternion(c))[:, None, :]
    return ADHMData(lam, b)


def multi_instanton(centers, sizes, orientations=None, *, rank: int = 1, tol: float = _SOLVE_TOL) -> ADHMData:
    """Exact charge-k Sp(n) ADHM data with given centres, sizes and orientations.

    centers: (k, 4) points a_i (the diagonal of B is p(a_i)); sizes: (k,) rho_i > 0 (or one number);
    orientations: None (all 1), (k, 4) unit quaternions, (k, 2, 2) SU(2) matrices, or (k, n, 4)
    quaternionic unit vectors (the directions of the columns of Lambda); rank: n of Sp(n).
    The 2k(k-1) real off-diagonal entries of B are solved (minimum-norm Gauss-Newton, the one solve
    of `instantonkit.adhm.base`) so that the
    3k(k-1)/2 real constraint equations hold to ``tol`` (scaled by 1 + max rho^2 + max |a|^2).

    Args:
      centers: (k, 4) float64 points a_i, distinct (a single (4,) point means k = 1).
      sizes: (k,) float64 rho_i > 0, or one number for all.
      orientations: None, (k, 4), (k, 2, 2) complex or (k, n, 4) (see above).
      rank: n >= 1 of Sp(n) (1 is SU(2)).
      tol: tolerance > 0 of the constraint solve (relative, see above).
    Returns:
      ADHMData with lam (n, k, 4) and B (k, k, 4); charge +k.
    Raises:
      ValueError for bad shapes, non-finite or non-positive values, coinciding centres,
      non-unit orientations, or when no solution is found (for example centres too close for the
      sizes); TypeError for a non-integer (or boolean) rank or non-real arrays.
    """
    rank = _validate.positive_int("rank", rank)
    tol = _validate.positive_float("tol", tol)
    c, r = _check_centers_sizes(centers, sizes)
    k = c.shape[0]
    _validate.adhm_affordable(k, rank, k_name="centers")
    u = unit_orientations(orientations, k, rank)  # (k, n, 4)
    lam = np.swapaxes(u, 0, 1) * r[None, :, None]
    diag = np.asarray(point_to_quaternion(c))
    scale = 1.0 + float(np.max(r) ** 2 + np.max(np.sum(c**2, axis=1)))
    b, res, it = solve_quaternionic_constraint(lam, diag, steps=_SOLVER_STEPS, tol=tol * scale)
    b, res, it = np.asarray(b), float(res), int(it)
    if not (res <= tol * scale):
        raise ValueError(
            f"could not solve the ADHM constraint for k = {k}: residual {res:.3e} after {it} steps "
            f"(tolerance {tol * scale:.1e}); the centres may be too close for the requested sizes"
        )
    return ADHMData(lam, b)


def random_adhm(k: int, rank: int = 1, *, seed=0, spread: float = 2.0, size_range=(0.5, 1.5)) -> ADHMData:
    """Random valid charge-k Sp(n) data: centres ~ N(0, spread^2), sizes ~ U(size_range), Haar orientations.

    Reproducible for a given ``seed`` (int or numpy Generator).  Retries new draws (up to
    _RANDOM_DRAWS) when the constraint solver fails for a draw.

    Args:
      k: charge, an integer >= 1.
      rank: n >= 1 of Sp(n).
      seed: int, None or numpy Generator.
      spread: standard deviation > 0 of the centres.
      size_range: (low, high) of the uniform sizes, 0 < low <= high.
    Returns:
      ADHMData with lam (n, k, 4) and B (k, k, 4); charge +k.
    Raises:
      TypeError / ValueError for bad arguments (naming them); ValueError when no draw succeeds.
    """
    k = _validate.positive_int("k", k)
    rank = _validate.positive_int("rank", rank)
    _validate.adhm_affordable(k, rank)
    spread = _validate.positive_float("spread", spread)
    low, high = (_validate.positive_float("size_range", v) for v in size_range)
    if low > high:
        raise ValueError(f"size_range must be (low, high) with low <= high; found {tuple(size_range)!r}")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    last = None
    for _ in range(_RANDOM_DRAWS):
        centers = rng.normal(scale=spread, size=(k, 4))
        sizes = rng.uniform(low, high, size=k)
        o = rng.normal(size=(k, rank, 4))
        o /= np.sqrt(np.sum(o**2, axis=(1, 2), keepdims=True))
        try:
            return multi_instanton(centers, sizes, o, rank=rank)
        except ValueError as err:  # pragma: no cover - rare
            last = err
    raise ValueError(f"random_adhm failed to find valid data in {_RANDOM_DRAWS} draws: {last}")


def embed_sp(data: ADHMData, rank: int, row: int = 0) -> ADHMData:
    """Embed Sp(n) data into Sp(rank), rank >= n, by padding Lambda with zero rows (rows row..row+n-1 hold it).

    Args:
      data: ADHMData of Sp(n), lam (n, k, 4).
      rank: target rank >= n (an integer).
      row: first row of Lambda holding the data, 0 <= row <= rank - n.
    Returns:
      ADHMData with lam (rank, k, 4), the same B, chirality and gauge; the field is the Sp(n) one
      in the block of colours 2 row .. 2 (row + n) - 1, zero elsewhere.
    Raises:
      TypeError for a non-integer (or boolean) rank or row; ValueError when the data do not fit.
    """
    if not isinstance(data, ADHMData):
        raise TypeError(f"data must be ADHMData; found {data!r} ({type(data).__name__})")
    rank = _validate.positive_int("rank", rank)
    _validate.adhm_affordable(data.k, rank)
    row = _validate.nonnegative_int("row", row)
    if rank < data.rank or row < 0 or row + data.rank > rank:
        raise ValueError(f"cannot embed Sp({data.rank}) data at row {row} into Sp({rank})")
    lam = np.zeros((rank, data.k, 4))
    lam[row : row + data.rank] = np.asarray(data.lam)
    return dataclasses.replace(data, lam=lam)


def block_sum(first: ADHMData, second: ADHMData, *, stack_ranks: bool = False, tol: float = CONSTRAINT_TOL) -> ADHMData:
    """Direct sum of two data sets: Lambda = [L1 L2], B = diag(B1, B2); charge k1 + k2.

    With ``stack_ranks=True`` the result is Sp(n1 + n2) data with Lambda = diag(L1, L2), which is
    always exact.  Otherwise both must have the same rank and the sum is exact only when
    Lambda_1^dag Lambda_2 is real; if not, a ValueError reports the violation (use
    `multi_instanton` to re-solve the combined constraint).

    Args:
      first, second: ADHMData with lam (n1, k1, 4), (n2, k2, 4) of the same chirality.
      stack_ranks: put the two in separate colour blocks (Sp(n1 + n2)) instead of side by side.
      tol: accepted |Im(Lambda_1^dag Lambda_2)| (> 0), also the tolerance of the result.
    Returns:
      ADHMData with lam (n, k1 + k2, 4) (n = n1 = n2, or n1 + n2 when stacked) and B (k1 + k2, k1 + k2, 4).
    Raises:
      ValueError for different chiralities, different ranks (unstacked) or an inexact sum.
    """
    tol = _validate.positive_float("tol", tol)
    for name, value in (("first", first), ("second", second)):
        if not isinstance(value, ADHMData):
            raise TypeError(f"{name} must be ADHMData; found {value!r} ({type(value).__name__})")
    if first.chirality != second.chirality:
        raise ValueError("block_sum needs data of the same chirality")
    k1, k2 = first.k, second.k
    if stack_ranks:
        n1, n2 = first.rank, second.rank
        lam = np.zeros((n1 + n2, k1 + k2, 4))
        lam[:n1, :k1] = np.asarray(first.lam)
        lam[n1:, k1:] = np.asarray(second.lam)
    else:
        if first.rank != second.rank:
            raise ValueError(f"ranks differ ({first.rank} and {second.rank}); pass stack_ranks=True")
        lam = np.concatenate([np.asarray(first.lam), np.asarray(second.lam)], axis=1)
        cross = np.asarray(qt.qmat_mul(qt.qmat_dagger(first.lam), second.lam))[..., 1:]
        viol = float(np.max(np.abs(cross)))
        if viol > tol:
            raise ValueError(
                f"block sum is not exact: Im(Lambda_1^dag Lambda_2) has max {viol:.3e}; "
                "use multi_instanton to solve the combined constraint"
            )
    b = np.zeros((k1 + k2, k1 + k2, 4))
    b[:k1, :k1] = np.asarray(first.B)
    b[k1:, k1:] = np.asarray(second.B)
    return ADHMData(lam, b, chirality=first.chirality, tol=tol)


# -- a differentiable constraint solve (jax) -------------------------------------------------------


def solve_constraint_unrolled(lam, diag, *, steps: int = UNROLLED_STEPS, start=None):
    """B solving the ADHM constraint for given Lambda and diagonal, by ``steps`` unrolled Gauss-Newton steps in jax.

    The solve of `multi_instanton` (`instantonkit.adhm.base.solve_quaternionic_constraint`, from
    ``B_off = 0``, or from ``start`` (m, 4) held constant) run for a fixed number of steps, so that
    jax.jvp / jax.jacfwd / jax.grad differentiate through it.  Each step is ``E <- E - J^T (J J^T)^-1 r(E)`` with r the imaginary
    parts of (Lambda^dag Lambda + B^dag B)_{i<j} and J = dr/dE (exact, r is quadratic in E).

    Why unrolled steps give the right derivative: at a converged iterate r = 0, and the derivative of
    one more step is dE' = (1 - J^+ J) dE - J^+ (dr/dtheta) dtheta -- the implicit-function-theorem
    derivative -J^+ dr/dtheta on the range of J^T plus the (converged) derivative of the gauge choice
    the iteration makes along the null space of J.  Newton converges quadratically, so after the few
    steps the solve needs the extra ones change neither value nor derivative beyond rounding, and
    the Jacobian is exactly that of the function the caller evaluates (no mismatch between a
    numerical solve and a separately coded implicit derivative).

    lam: (n, k, 4); diag: (k, 4) quaternions of the diagonal of B -> B: (k, k, 4) symmetric (jax).
    """
    return solve_quaternionic_constraint(lam, diag, steps=int(steps), start=start)[0]
