"""Tangent vectors of ADHM data and the bosonic zero modes they give, in closed form (floor 3, above the data).

A tangent vector of ADHM data is a variation ``delta Delta`` of the x-independent part of the ADHM
matrix, written as one real vector in the *tangent layout* (`pack`): quaternionic data
``[d Lambda (n, k, 4), d B (k, k, 4)]`` flattened; complex data ``[d B1, d B2, d I, d J]`` in the
layout of `instantonkit.adhm.base.pack_unitary`.

Zero mode (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469; Dorey, Hollowood,
Khoze, Mattis, Phys. Rep. 371 (2002) 231, section 2; from memory, derived here).  With ``U`` the frame
(``U^dag Delta = 0``, ``U^dag U = 1``) and ``f = (Delta^dag Delta)^-1``, varying ``U`` inside
``A_mu = U^dag d_mu U`` and dropping the part ``U^dag delta U`` (a gauge transformation) gives

    delta A_mu = U^dag (delta Delta) f (d_mu Delta)^dag U - U^dag (d_mu Delta) f (delta Delta)^dag U.

Quaternionic data: ``d_mu Delta = -b e_mu`` (``e-bar_mu`` for chirality -1; ``b = [0 ; 1_k]``,
``e_mu`` = conventions.E_MU), so ``delta A_mu = X_mu^dag - X_mu`` with
``X_mu = U^dag delta Delta f conj(e_mu) b^dag U``.  Complex data: ``d_mu Delta = b (s_mu (x) 1_k)``
(`instantonkit.adhm.unitary`), ``f -> 1_2 (x) f``, so ``delta A_mu = X_mu - X_mu^dag`` with
``X_mu = U^dag delta Delta (1_2 (x) f) (s_mu^dag (x) 1_k) b^dag U``, its trace removed (SU(N)).
Signs are those of `instantonkit.core.conventions` (anti-Hermitian A, D = d + A).

This mode solves the linearised self-duality equation for every variation that keeps the ADHM
constraint to first order, and it is in background gauge, ``D_mu delta A_mu = 0``, exactly when the
variation is *horizontal*: orthogonal to the orbit of O(k) (quaternionic, ``Lambda -> Lambda O``,
``B -> O^T B O``) or U(k) (complex) in the flat metric of `flat_weights` (DHKM 2002: the condition that
``delta Delta^dag Delta`` be symmetric; from memory).  `horizontal` projects onto that space;
tests/test_moduli_geometry.py checks both equations by autodiff to 1e-10.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core._batching import run_batched
from ..core._config import lean_compiler_options
from ..core.conventions import E_MU
from .base import anti_hermitian_basis, pack_unitary, unitary_moment_maps, unpack_unitary
from .kernels import real_gram, spd_solve
from .quaternionic import ADHMData, constraint_matrix
from .unitary import S_MU, UnitaryADHMData

__all__ = [
    "pack",
    "flat_weights",
    "orbit_directions",
    "global_gauge_directions",
    "constraint_rates",
    "horizontal",
    "bosonic_zero_modes",
]

#: Points per compiled batch of `bosonic_zero_modes`.
_CHUNK = 2048


def _check_data(data) -> ADHMData | UnitaryADHMData:
    if not isinstance(data, ADHMData | UnitaryADHMData):
        raise TypeError(f"data must be ADHMData or UnitaryADHMData; found {type(data).__name__}")
    return data


def pack(data):
    """The data as one real vector in the tangent layout (module docstring); (P,) (numpy or jax, as the data)."""
    if isinstance(data, UnitaryADHMData):
        return pack_unitary(data.B1, data.B2, data.I, data.J)
    xp = jnp if _validate.is_tracer(data.lam, data.B) else np
    return xp.concatenate([xp.ravel(xp.asarray(data.lam)), xp.ravel(xp.asarray(data.B))])


def _split_quat(data: ADHMData, v):
    """(..., P) tangent vectors of quaternionic data -> d Lambda (..., n, k, 4), d B (..., k, k, 4)."""
    n, k = data.rank, data.k
    lead = v.shape[:-1]
    return v[..., : 4 * n * k].reshape(lead + (n, k, 4)), v[..., 4 * n * k :].reshape(lead + (k, k, 4))


def flat_weights(data) -> np.ndarray:
    """Weights w of the flat metric ``|v|^2 = sum_p w_p v_p^2`` on the tangent layout; (P,) float64.

    Quaternionic: 2 on Lambda, 1 on B; complex: 1 everywhere.  With these, ``8 pi^2 |v|^2`` is the L^2
    norm of the zero mode of a horizontal, constraint-preserving v (DHKM 2002, the metric
    ``8 pi^2 tr(dDelta^dag (1 + P_inf) dDelta)``, from memory; the factors are fixed here by the k = 1
    norms: translation 8 pi^2, size 16 pi^2, checked against the integral of the zero modes).
    The complex layout maps quaternionic Lambda onto (I, J) with ``|dI|^2 + |dJ|^2 = 2 |dLambda|^2``
    (`instantonkit.adhm.unitary_moduli.from_quaternionic`), so the two weightings agree.
    """
    data = _check_data(data)
    if isinstance(data, UnitaryADHMData):
        return np.ones(4 * data.k * data.k + 4 * data.k * data.rank)
    n, k = data.rank, data.k
    return np.concatenate([np.full(4 * n * k, 2.0), np.ones(4 * k * k)])


def orbit_directions(data):
    """Tangent vectors of the O(k) (quaternionic) or U(k) (complex) orbit through the data; (r, P).

    Quaternionic: ``omega = E_ij - E_ji`` (i < j), ``d Lambda = Lambda omega``, ``d B = B omega - omega B``;
    r = k(k - 1)/2.  Complex: X runs over a basis of anti-Hermitian k x k matrices,
    ``d B_a = [X, B_a]``, ``d I = X I``, ``d J = -J X``; r = k^2.  jax-traceable.
    """
    k = data.k
    if isinstance(data, UnitaryADHMData):
        gens = anti_hermitian_basis(k)
        b1, b2, ii, jj = (jnp.asarray(a) for a in (data.B1, data.B2, data.I, data.J))
        rows = [pack_unitary(x @ b1 - b1 @ x, x @ b2 - b2 @ x, x @ ii, -jj @ x) for x in map(jnp.asarray, gens)]
        return jnp.stack(rows)
    lam, b = jnp.asarray(data.lam), jnp.asarray(data.B)
    rows = []
    for i in range(k):
        for j in range(i + 1, k):
            om = np.zeros((k, k))
            om[i, j], om[j, i] = 1.0, -1.0
            dlam = jnp.einsum("nja,jl->nla", lam, om)
            db = jnp.einsum("ija,jl->ila", b, om) - jnp.einsum("ij,jla->ila", om, b)
            rows.append(jnp.concatenate([dlam.ravel(), db.ravel()]))
    if not rows:
        return jnp.zeros((0, 4 * data.rank * k + 4 * k * k))
    return jnp.stack(rows)


def global_gauge_directions(data):
    """Tangent vectors of global gauge rotations of the data (the orbit of the gauge group at infinity); (g, P).

    Quaternionic Sp(n): ``d Lambda = X Lambda`` for X in a basis of sp(n) (quaternionic anti-Hermitian
    n x n; g = n(2n + 1), 3 for SU(2)); the field changes by the constant gauge rotation exp(X)
    (`ADHMData.rotate_sp`).  Complex SU(N): ``d I = -I X``, ``d J = X J`` for X in a basis of su(N)
    (g = N^2 - 1; the U(1) part is a U(k) rotation, `UnitaryADHMData.rotate_su`).  jax-traceable.
    """
    data = _check_data(data)
    if isinstance(data, UnitaryADHMData):
        nn, k = data.rank, data.k
        rows = []
        for i in range(nn):
            for j in range(nn):
                x = np.zeros((nn, nn), dtype=np.complex128)
                if i == j:
                    if i == nn - 1:
                        continue
                    x[i, i], x[i + 1, i + 1] = 1j, -1j
                elif i < j:
                    x[i, j], x[j, i] = 1.0, -1.0
                else:
                    x[i, j], x[j, i] = 1j, 1j
                xj = jnp.asarray(x)
                zero = jnp.zeros((k, k), dtype=jnp.complex128)
                rows.append(pack_unitary(zero, zero, -jnp.asarray(data.I) @ xj, xj @ jnp.asarray(data.J)))
        return jnp.stack(rows)
    n, k = data.rank, data.k
    lam = jnp.asarray(data.lam)
    rows = []
    for i in range(n):
        for j in range(i, n):
            for a in range(1 if i == j else 0, 4):
                x = np.zeros((n, n, 4))
                x[i, j, a] = 1.0
                if i != j:
                    x[j, i] = np.asarray(qt.qconj(x[i, j])) * -1.0
                dlam = qt.qmat_mul(jnp.asarray(x), lam)
                rows.append(jnp.concatenate([dlam.ravel(), jnp.zeros(4 * k * k)]))
    return jnp.stack(rows)


def _constraint_vector(data, v):
    """The ADHM constraint (the imaginary parts, the asymmetry of B; or both moment maps) as a real vector."""
    if isinstance(data, UnitaryADHMData):
        mr, mc = unitary_moment_maps(*unpack_unitary(v, data.k, data.rank))
        return jnp.concatenate([mr.real.ravel(), mr.imag.ravel(), mc.real.ravel(), mc.imag.ravel()])
    lam, b = _split_quat(data, v)
    c = constraint_matrix(lam, b)[..., 1:]
    return jnp.concatenate([c.ravel(), (b - jnp.swapaxes(b, 0, 1)).ravel()])


def constraint_rates(data, tangents) -> np.ndarray:
    """Rate of change of the ADHM constraint along each tangent vector, relative; (m,) float64.

    max |d/dt constraint(data + t v)| / ((1 + |data|) |v|), from the constraint's jacobian (jax.jacfwd):
    zero (to rounding) for a variation that keeps the constraint to first order.  tangents: (m, P).
    """
    data = _check_data(data)
    t = _tangents(data, tangents)
    z = jnp.asarray(pack(data))
    jac = np.asarray(constraint_jacobian(data))  # (R, P)
    scale = 1.0 + float(jnp.linalg.norm(z))
    norms = np.linalg.norm(t, axis=1)
    return np.max(np.abs(t @ jac.T), axis=1) / (scale * np.where(norms > 0, norms, 1.0))


def constraint_jacobian(data):
    """d constraint / d data at the data, (R, P) (one compilation per data structure; package-internal seam)."""
    return _constraint_jac_kernel()(data, jnp.asarray(pack(data)))


@functools.cache
def _constraint_jac_kernel():
    jac = lambda data, z: jax.jacfwd(lambda v: _constraint_vector(data, v))(z)  # noqa: E731
    return jax.jit(jac, compiler_options=lean_compiler_options())


def _tangents(data, tangents) -> np.ndarray:
    p = pack(data).shape[0]
    t = _validate.real_array("tangents", tangents)
    if t.ndim == 1:
        t = t[None]
    if t.ndim != 2 or t.shape[1] != p:
        raise ValueError(f"tangents must have shape (m, P) with P = {p} (the tangent layout); found {t.shape}")
    return t


def horizontal(data, tangents, *, check: bool = True):
    """Project tangent vectors onto the horizontal space: flat-orthogonal to the O(k) / U(k) orbit; (m, P).

    v -> v - O^T (O W O^T)^-1 O W v with O = `orbit_directions`, W = `flat_weights`.  jax-traceable
    (then pass ``check=False``).  Raises ValueError when the orbit is degenerate (the group does not
    act freely: zero sizes or data fixed by a rotation), where the moduli space is singular.
    """
    t = jnp.asarray(tangents, dtype=jnp.float64)
    if _validate.is_tracer(t, *jax.tree_util.tree_leaves(data)):
        return _project(data, t)[0]
    out, gram = _project_jit(data, t)
    if check and gram.shape[0]:
        ev = np.linalg.eigvalsh(np.asarray(gram))
        scale = 1.0 + float(np.sum(np.asarray(pack(data)) ** 2))
        if ev[0] <= 1e-10 * scale:
            group = "U(k)" if isinstance(data, UnitaryADHMData) else "O(k)"
            raise ValueError(
                f"degenerate ADHM data: the {group} action is not free here (smallest orbit norm^2 "
                f"{ev[0]:.3e} for data of size^2 {scale:.3e}); zero sizes or coincident, aligned instantons "
                "make the moduli space singular"
            )
    return out


def _project(data, t):
    """(the horizontal parts of t (m, P), the flat Gram matrix of the orbit directions (r, r))."""
    o = orbit_directions(data)
    if o.shape[0] == 0:
        return t, jnp.zeros((0, 0))
    w = jnp.asarray(flat_weights(data))
    gram = (o * w) @ o.T
    return t - (jnp.linalg.solve(gram, o @ (w * t).T)).T @ o, gram


_project_jit = jax.jit(_project)


# -- the zero modes at one point --------------------------------------------------------------------


def _quat_modes(data: ADHMData, t, x):
    """delta A_mu of quaternionic data for tangents t (m, P) at one point (4,) -> (m, 4, n, n, 4) quaternionic."""
    n = data.rank
    dlam, db = _split_quat(data, t)
    dd = jnp.concatenate([dlam, db], axis=1)  # (m, n + k, k, 4)
    u = data.frame(x)  # (n + k, n, 4)
    gram = real_gram(jnp.asarray(data.lam), data.b_minus_p(x))  # f^-1, real (k, k)
    ud = qt.qmat_mul(qt.qmat_dagger(u)[None], dd)  # U^dag dDelta, (m, n, k, 4)
    fub = spd_solve(gram, u[n:])  # f b^dag U, (k, n, 4)
    eps = jnp.asarray(E_MU if data.chirality == 1 else np.asarray(qt.qconj(E_MU)))
    epsbar = qt.qconj(eps)  # (4, 4): conj(e_mu)
    right = qt.qmul(epsbar[:, None, None, :], fub[None])  # conj(e_mu) f b^dag U, (4, k, n, 4)
    xm = qt.qmat_mul(ud[:, None], right[None])  # (m, 4, n, n, 4)
    return qt.qmat_dagger(xm) - xm  # quaternionic (m, 4, n, n, 4)


def _delta0(b1, b2, i, j):
    """The x-independent part of complex Delta (`UnitaryADHMData.delta`) of (B1, B2, I, J); (2k + N, 2k)."""
    h = lambda a: jnp.conj(jnp.swapaxes(a, -1, -2))  # noqa: E731
    top = jnp.concatenate([h(b2), -b1], axis=-1)
    mid = jnp.concatenate([h(b1), b2], axis=-1)
    bot = jnp.concatenate([h(i), j], axis=-1)
    return jnp.concatenate([top, mid, bot], axis=-2)


def _unitary_modes(data: UnitaryADHMData, t, x):
    """delta A_mu of complex data for tangents t (m, P) at one point (4,) -> (m, 4, N, N), traceless."""
    k, nn = data.k, data.rank
    dd = jax.vmap(lambda v: _delta0(*unpack_unitary(v, k, nn)))(t)  # (m, 2k + N, 2k)
    u = data.frame(x)  # (2k + N, N)
    h = data.gram(x)  # f^-1, Hermitian (k, k)
    real = jnp.block([[h.real, -h.imag], [h.imag, h.real]])  # the real form of f^-1 acting on (Re, Im)
    ut = u[: 2 * k].reshape(2, k, nn)
    y = jnp.einsum("mba,bkn->makn", jnp.conj(jnp.asarray(S_MU)), ut)  # (s_mu^dag (x) 1) b^dag U, (4, 2, k, N)
    yk = jnp.moveaxis(y, 2, 0).reshape(k, -1)  # k index first
    z = spd_solve(real, jnp.concatenate([yk.real, yk.imag]))
    zk = (z[:k] + 1j * z[k:]).reshape(k, 4, 2, nn)
    fy = jnp.moveaxis(zk, 0, 2).reshape(4, 2 * k, nn)  # (1_2 (x) f) (s_mu^dag (x) 1) b^dag U
    xm = jnp.einsum("in,mij,ajl->manl", jnp.conj(u), dd, fy)  # (m, 4, N, N)
    da = xm - jnp.conj(jnp.swapaxes(xm, -1, -2))
    tr = jnp.trace(da, axis1=-2, axis2=-1) / nn
    return da - tr[..., None, None] * jnp.eye(nn)


def modes_at(data, tangents, x):
    """delta A_mu at one point (4,) for tangents (m, P) -> (m, 4, N, N) complex (package-internal seam, jax)."""
    x = jnp.asarray(x, dtype=jnp.float64)
    t = jnp.asarray(tangents, dtype=jnp.float64)
    if isinstance(data, UnitaryADHMData):
        return _unitary_modes(data, t, x)
    return qt.qmat_to_complex(_quat_modes(data, t, x))


def mode_vectors(data, tangents, x):
    """Real vectors Y (m, L) of the zero modes at one point with Y Y^T = -2 sum_mu tr(delta_i A_mu delta_j A_mu).

    Anti-Hermitian delta A gives -tr(P Q) = sum_ab Re(P_ab conj(Q_ab)); a quaternionic matrix's complex
    trace is twice its real trace, and Re(p q-bar) is the dot product of the four components, so
    Y = 2 delta A (quaternion components) or sqrt(2) (Re, Im) delta A (complex).  Package-internal seam (jax).
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    t = jnp.asarray(tangents, dtype=jnp.float64)
    m = t.shape[0]
    if isinstance(data, UnitaryADHMData):
        da = _unitary_modes(data, t, x).reshape(m, -1)
        return np.sqrt(2.0) * jnp.concatenate([da.real, da.imag], axis=1)
    return 2.0 * _quat_modes(data, t, x).reshape(m, -1)


@functools.cache
def _kernel():
    return jax.jit(jax.vmap(modes_at, in_axes=(None, None, 0)))


def bosonic_zero_modes(data, tangents, points, *, project: bool = True, chunk_size: int = _CHUNK) -> np.ndarray:
    """Bosonic zero modes delta A_mu of ADHM data for the given tangent vectors, at points, in closed form.

    Formula: module docstring (CGOT 1979; DHKM 2002, from memory).  With ``project=True`` the tangent
    vectors are first made horizontal (`horizontal`), so the modes are in background gauge; they must
    keep the ADHM constraint to first order (checked: `constraint_rates` <= 1e-8, else ValueError).

    Args:
      data: ADHMData or UnitaryADHMData (the gauge of its frame is the gauge of the modes).
      tangents: (m, P) or (P,) float64 in the tangent layout (`pack`).
      points: (..., 4) float64.
      project: make the tangents horizontal first (default); False keeps them as given.
      chunk_size: points per compiled batch (> 0).
    Returns:
      (..., m, 4, N, N) complex128: delta A_mu, anti-Hermitian (traceless for complex data).
    Raises:
      TypeError for data of another type; ValueError for tangents of the wrong shape, tangents that
      leave the constraint surface, degenerate data (`horizontal`), bad points, or modes that are not
      finite at a point (named).
    """
    data = _check_data(data)
    t = _tangents(data, tangents)
    chunk = _validate.positive_int("chunk_size", chunk_size)
    rates = constraint_rates(data, t)
    if np.max(rates) > 1e-8:
        bad = int(np.argmax(rates))
        raise ValueError(
            f"tangents must keep the ADHM constraint to first order; tangent {bad} changes it at relative "
            f"rate {rates[bad]:.3e} (expected <= 1e-8)"
        )
    if project:
        t = np.asarray(horizontal(data, t))
    pts, lead = _validate.points(points)
    out = np.asarray(run_batched(_kernel(), [pts], chunk, shrink_last=True, args_before=(data, jnp.asarray(t))))
    bad = ~np.isfinite(out.reshape(out.shape[0], -1)).all(axis=1)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise ValueError(
            f"zero modes are not finite at point {i} = {pts[i].tolist()} (a singular point of the frame's gauge, "
            f"or degenerate data); {int(bad.sum())} of {len(pts)} points affected"
        )
    return out.reshape(lead + out.shape[1:])
