"""Complex ADHM data from moduli and from other data (floor 4, above `instantonkit.adhm.unitary`).

Conversions (quaternionic SU(2) data -> complex N = 2 data; an SU(2) in SU(N) embedding of any
data), the constraint solver for well-separated charge-k SU(N) instantons (both moment maps to
<= 1e-12) and random valid data.  The data class and its fields live in `instantonkit.adhm.unitary`.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import quaternion as qt
from ..core._validate import adhm_affordable, nonnegative_int, positive_float, positive_int, real_array
from .base import moment_residual, pack_unitary, solve_moment_maps, unitary_weights, unpack_unitary
from .quaternionic import ADHMData
from .unitary import UnitaryADHMData, check_unitary, complex_coordinates

__all__ = [
    "from_quaternionic",
    "embed_unitary",
    "unitary_multi_instanton",
    "random_unitary_adhm",
    "constraint_jacobian",
]

#: Most Gauss-Newton steps of the constraint solve (it converges quadratically, in 3-6 from these starts).
_SOLVER_STEPS = 60

# -- conversions ---------------------------------------------------------------------------------------


def from_quaternionic(data: ADHMData, *, gauge: str | None = None) -> UnitaryADHMData:
    """N = 2 complex data of quaternionic SU(2) ADHM data (rank 1, chirality +1): the same field up to gauge.

    Writing the 2x2 matrix of each quaternion (QUATERNION_BASIS) as [[alpha, beta], [-conj beta, conj alpha]]
    with k x k matrices B_alpha, B_beta of the entries of B and rows lam_alpha, lam_beta of Lambda:
    B1 = B_alpha^dag, B2 = B_beta, I = [conj lam_alpha ; -lam_beta]^T, J = [lam_beta ; conj lam_alpha].
    Then Delta_complex = W Delta_image R for constant unitary W (rows) and permutation R (columns), so
    f^-1 equals the real Gram matrix Re(Delta^dag Delta) of the quaternionic data (derived here).
    """
    if not isinstance(data, ADHMData):
        raise TypeError(f"data must be ADHMData; found {type(data).__name__}")
    if data.rank != 1 or data.chirality != 1:
        raise ValueError(
            f"data must be SU(2) instanton data (rank 1, chirality +1); found rank {data.rank}, "
            f"chirality {data.chirality}"
        )
    mb = np.asarray(qt.to_matrix(np.asarray(data.B)))  # (k, k, 2, 2)
    ml = np.asarray(qt.to_matrix(np.asarray(data.lam)[0]))  # (k, 2, 2)
    b1 = mb[..., 0, 0].conj().T
    b2 = mb[..., 0, 1]
    la, lb = ml[:, 0, 0], ml[:, 0, 1]
    i = np.stack([la.conj(), -lb], axis=1)
    j = np.stack([lb, la.conj()], axis=0)
    return UnitaryADHMData(b1, b2, i, j, tol=data.tol, gauge=gauge or data.gauge)


def embed_unitary(data, rank: int, offset: int = 0) -> UnitaryADHMData:
    """Embed SU(N0) data (complex, or quaternionic SU(2)) into SU(rank): colours offset..offset+N0-1.

    I is padded with zero columns and J with zero rows, so the field is the SU(N0) field in that block.
    """
    if isinstance(data, ADHMData):
        data = from_quaternionic(data)
    if not isinstance(data, UnitaryADHMData):
        raise TypeError(f"data must be UnitaryADHMData or SU(2) ADHMData; found {type(data).__name__}")
    rank = positive_int("rank", rank)
    offset = nonnegative_int("offset", offset)
    adhm_affordable(data.k, rank)
    n0 = data.rank
    if offset + n0 > rank:
        raise ValueError(f"cannot embed SU({n0}) data at colour offset {offset} into SU({rank})")
    i = np.zeros((data.k, rank), dtype=np.complex128)
    j = np.zeros((rank, data.k), dtype=np.complex128)
    i[:, offset : offset + n0] = np.asarray(data.I)
    j[offset : offset + n0] = np.asarray(data.J)
    gauge = data.gauge if rank <= 2 * data.k else "singular"
    return dataclasses.replace(data, I=i, J=j, gauge=gauge)


# -- constraint solver ---------------------------------------------------------------------------------


def constraint_jacobian(data: UnitaryADHMData) -> np.ndarray:
    """(3k^2, 4k^2 + 4kN) real Jacobian of the moment maps at the data (package-internal seam).

    Rows: Re mu_R (upper triangle with the diagonal, row-major), Im mu_R (strict upper triangle),
    Re mu_C, Im mu_C (row-major).  Columns: the entries of B1, B2, I, J (each row-major, in that
    order), each entry as its real then imaginary part (`instantonkit.adhm.base.pack_unitary`).
    """
    k, n = data.k, data.rank
    resid = lambda z: moment_residual(*unpack_unitary(z, k, n))  # noqa: E731
    return np.asarray(
        jax.jacfwd(resid)(jnp.asarray(pack_unitary(*(np.asarray(a) for a in (data.B1, data.B2, data.I, data.J)))))
    )


def _solve(vec: np.ndarray, k: int, n: int, weights: np.ndarray, *, tol: float):
    """The shared moment-map solve (`instantonkit.adhm.base.solve_moment_maps`) from ``vec``, as numpy."""
    z, res, it = solve_moment_maps(vec, weights, k, n, steps=_SOLVER_STEPS, tol=tol)
    return np.asarray(z), float(res), int(it)


def unitary_multi_instanton(
    centers, sizes, orientations=None, *, rank: int = 3, tol: float = 1e-12, gauge: str = "singular"
) -> UnitaryADHMData:
    """Charge-k SU(N) data for well-separated instantons with given centres, sizes and orientations.

    centers: (k, 4) points a_i (B_a,ii = z_a(a_i), kept exactly); sizes: (k,) rho_i > 0 (or one number);
    orientations: None (all 1) or (k, N, N) unitary matrices g_i: instanton i starts as the SU(2)
    instanton in colours (0, 1) rotated by g_i, I_i = rho_i e_0^T g_i^dag, J^i = rho_i g_i e_1.
    The off-diagonal entries of B1, B2 (and, with a small weight, I and J, since for k >= 2 the 3k^2 - 3
    equations outnumber the 4k(k-1) off-diagonal unknowns at k = 2) are solved by weighted minimum-norm
    Gauss-Newton so that both moment maps hold to ``tol`` (scaled by 1 + max rho^2 + max |a|^2).
    For well-separated instantons the changes of I and J are O(rho^3 / distance^2).
    Raises ValueError when no solution is found (centres too close for the sizes).
    """
    rank = positive_int("rank", rank)
    if rank < 2:
        raise ValueError(f"rank must be >= 2; found {rank}")
    c = np.asarray(centers)
    c = real_array("centers", c[None] if c.ndim == 1 else c, (None, 4), shape_text="(k, 4)")
    k = c.shape[0]
    if k < 1:
        raise ValueError("centers must hold at least one point; found 0")
    adhm_affordable(k, rank, k_name="centers")
    r = np.asarray(sizes)
    r = real_array("sizes", np.full(k, r) if r.ndim == 0 else r, (k,))
    if np.any(r <= 0):
        raise ValueError(f"sizes must be > 0; found {r.tolist()}")
    if k > 1:
        dist = np.linalg.norm(c[:, None] - c[None], axis=-1) + np.diag(np.full(k, np.inf))
        if float(np.min(dist)) < 1e-8 * max(1.0, float(np.max(r))):
            raise ValueError(f"centers must be distinct; found minimum distance {float(np.min(dist)):.3e}")
    if orientations is None:
        g = np.broadcast_to(np.eye(rank, dtype=np.complex128), (k, rank, rank))
    else:
        g = np.asarray(orientations)
        if g.shape != (k, rank, rank):
            raise ValueError(f"orientations must have shape (k, N, N) = {(k, rank, rank)}; found {g.shape}")
        g = np.stack([check_unitary(f"orientations[{m}]", g[m], rank) for m in range(k)])
    z1, z2 = (np.asarray(v) for v in complex_coordinates(c))
    b1, b2 = np.diag(z1).astype(np.complex128), np.diag(z2).astype(np.complex128)
    i = r[:, None] * g[:, :, 0].conj()  # row i: rho e_0^T g_i^dag
    j = (r[:, None] * g[:, :, 1]).T  # column i: rho g_i e_1
    vec = pack_unitary(b1, b2, i, j)
    scale = 1.0 + float(np.max(r) ** 2 + np.max(np.sum(c**2, axis=1)))
    weights = unitary_weights(k, rank, 1.0, 0.0, 0.1)
    out, res, it = _solve(vec, k, rank, weights, tol=tol * scale) if k > 1 else (vec, 0.0, 0)
    if not (res <= tol * scale):
        raise ValueError(
            f"could not solve the moment maps for k = {k}: residual {res:.3e} after {it} steps "
            f"(tolerance {tol * scale:.1e}); the centres may be too close for the sizes"
        )
    b1, b2, i_mat, j_mat = unpack_unitary(out, k, rank)
    return UnitaryADHMData(b1, b2, i_mat, j_mat, gauge=gauge)


def random_unitary_adhm(
    k: int, rank: int = 3, *, seed=0, spread: float = 1.5, size: float = 1.0, tol: float = 1e-12
) -> UnitaryADHMData:
    """Random valid charge-k SU(N) data (generic: B1, B2 not near-diagonal), reproducible for ``seed``.

    Gaussian B1, B2 (entries of scale ``spread``), I, J (scale ``size``), then every entry moved by
    minimum-norm Gauss-Newton onto both moment maps (to ``tol`` scaled by 1 + |data|^2).  Retries new
    draws (up to 20) if a draw does not converge.  seed: int or numpy Generator.
    """
    k = positive_int("k", k)
    rank = positive_int("rank", rank)
    if rank < 2:
        raise ValueError(f"rank must be >= 2; found {rank}")
    adhm_affordable(k, rank)
    spread = positive_float("spread", spread)
    size = positive_float("size", size)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    last = None
    for _ in range(20):
        cn = lambda *s, sc: sc * (rng.normal(size=s) + 1j * rng.normal(size=s)) / np.sqrt(2.0)  # noqa: E731
        b1, b2 = cn(k, k, sc=spread), cn(k, k, sc=spread)
        i, j = cn(k, rank, sc=size), cn(rank, k, sc=size)
        vec = pack_unitary(b1, b2, i, j)
        scale = 1.0 + float(np.sum(vec**2))
        out, res, it = _solve(vec, k, rank, np.ones(vec.size), tol=tol * scale)
        if res <= tol * scale:
            data = UnitaryADHMData(*unpack_unitary(out, k, rank))
            if float(np.min(np.linalg.svd(np.asarray(data.I), compute_uv=False))) > 1e-3 * size or k > rank:
                return data
        last = f"residual {res:.3e} after {it} steps"
    raise ValueError(f"random_unitary_adhm found no valid data in 20 draws: {last}")
