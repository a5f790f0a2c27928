"""Complex ADHM data for SU(N) (U(N)) multi-instantons, its validation, constructors and fields.

Data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; Christ, Weinberg, Stanton,
Phys. Rev. D 18 (1978) 2013; the complex form below is common practice, from memory): complex
matrices ``B1, B2`` (k x k), ``I`` (k x N), ``J`` (N x k) with the two moment maps

    mu_R = [B1, B1^dag] + [B2, B2^dag] + I I^dag - J^dag J = 0,      mu_C = [B1, B2] + I J = 0,

modulo U(k): ``B_a -> g B_a g^dag, I -> g I, J -> J g^dag``.  With the complex coordinates
``z1 = x4 - i x3``, ``z2 = x2 + i x1`` of x (docs/conventions.md, "Complex ADHM data": the matrix of
the quaternion p(x) is ``[[conj z1, z2], [-conj z2, z1]]``),

    Delta(x)^dag = [[B2 - z2, B1 - z1, I], [-(B1^dag - conj z1), B2^dag - conj z2, J^dag]]

is 2k x (2k + N) and, by the moment maps, ``Delta^dag Delta = 1_2 (x) f^-1`` with
``f^-1 = (B1 - z1)(B1 - z1)^dag + (B2 - z2)(B2 - z2)^dag + I I^dag``.  With ``U`` the (2k + N) x N
orthonormal null space of ``Delta^dag`` and ``b = [1_2k ; 0]``,

    A_mu = U^dag d_mu U  (its trace, a flat U(1) part, removed),
    F_mu nu = U^dag b ((s_mu s_nu^dag - s_nu s_mu^dag) (x) f) b^dag U,     d_mu Delta = b (s_mu (x) 1_k),

self-dual with Q = +k in the conventions of :mod:`instantonkit.conventions`.  Quaternionic SU(2) data
map onto N = 2 data (:func:`from_quaternionic`) with the same Delta up to constant unitaries, hence the
same field up to gauge.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import jax.scipy.linalg as jsl
import numpy as np

from . import quaternion as qt
from ._pytree import PytreeFields
from ._validate import is_tracer, nonnegative_int, positive_float, positive_int, real_array
from .adhm import ADHMData, CONSTRAINT_TOL
from .conventions import CHARGE_DENSITY_FACTOR

__all__ = [
    "UnitaryADHMData",
    "complex_coordinates",
    "from_quaternionic",
    "embed_unitary",
    "unitary_multi_instanton",
    "random_unitary_adhm",
    "unitary_moment_maps",
]

_GAUGES = ("singular", "regular")


# -- the complex coordinates (docs/conventions.md) ----------------------------------------------------


def complex_coordinates(x):
    """(z1, z2) = (x4 - i x3, x2 + i x1) of points x (..., 4) -> two (...) complex arrays.

    With these, the matrix of the quaternion p(x) (conventions.point_to_quaternion, QUATERNION_BASIS)
    is [[conj z1, z2], [-conj z2, z1]]; see docs/conventions.md.  jax-traceable.
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    return x[..., 3] - 1j * x[..., 2], x[..., 1] + 1j * x[..., 0]


def _point_of(z1, z2) -> np.ndarray:
    """Inverse of :func:`complex_coordinates`: (...) complex z1, z2 -> (..., 4) points."""
    z1, z2 = np.asarray(z1), np.asarray(z2)
    return np.stack([z2.imag, z2.real, -z1.imag, z1.real], axis=-1)


# s_mu = the 2 x 2 matrix with d_mu Delta = b (s_mu (x) 1_k): s(x) = [[-conj z2, z1], [-conj z1, -z2]].
def _make_s() -> np.ndarray:
    s = np.zeros((4, 2, 2), dtype=np.complex128)
    for mu in range(4):
        e = np.zeros(4)
        e[mu] = 1.0
        z1, z2 = (np.asarray(v) for v in complex_coordinates(e))
        s[mu] = [[-np.conj(z2), z1], [-np.conj(z1), -z2]]
    return s


_S = _make_s()
#: S_mu nu = s_mu s_nu^dag - s_nu s_mu^dag, (4, 4, 2, 2): F_mu nu = U^dag b (S_mu nu (x) f) b^dag U.
_SMN = np.einsum("mab,ncb->mnac", _S, _S.conj()) - np.einsum("nab,mcb->mnac", _S, _S.conj())
#: T_abcd = sum_mu nu S_mu nu,ab S_mu nu,cd, for the action density from 2k x 2k work.
_T = np.einsum("mnab,mncd->abcd", _SMN, _SMN)


# -- validation ---------------------------------------------------------------------------------------


def _as_complex(name: str, value, ndim: int):
    if is_tracer(value):
        return value
    arr = np.asarray(value)
    if arr.dtype == object or arr.dtype == np.bool_ or not np.issubdtype(arr.dtype, np.number):
        raise TypeError(f"{name} must be a complex numeric array; found dtype {arr.dtype}")
    arr = arr.astype(np.complex128)
    if arr.ndim != ndim:
        raise ValueError(f"{name} must be a {ndim}-d array; found shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite; found {int(np.sum(~np.isfinite(arr)))} non-finite entries")
    return arr


def unitary_moment_maps(b1, b2, i, j):
    """(mu_R, mu_C) = ([B1,B1^dag] + [B2,B2^dag] + I I^dag - J^dag J, [B1,B2] + I J); two (k, k) complex.

    Works for numpy and jax arrays.
    """
    xp = np if all(isinstance(a, np.ndarray) for a in (b1, b2, i, j)) else jnp
    h = lambda a: xp.conj(xp.swapaxes(a, -1, -2))  # noqa: E731
    mr = b1 @ h(b1) - h(b1) @ b1 + b2 @ h(b2) - h(b2) @ b2 + i @ h(i) - h(j) @ j
    mc = b1 @ b2 - b2 @ b1 + i @ j
    return mr, mc


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class UnitaryADHMData(PytreeFields):
    """Validated complex ADHM data ``(B1, B2, I, J)`` of a charge-k SU(N) instanton.

    B1, B2: (k, k) complex128; I: (k, N) complex128; J: (N, k) complex128 (N >= 2).
    tol: accepted size of the moment-map violations (absolute, scaled by 1 + |data|^2).
    gauge: 'singular' (V0 = [0 ; 1_N]) or 'regular' (V0 = [I ; J^dag ; 0], needs N <= 2k) for the
        projection gauge U = P V0 L^-dag of :meth:`frame`.

    Construction validates shapes, finiteness and both moment maps (module docstring) and raises a
    ``ValueError`` naming the failed condition and the size of the violation; under jax tracing the
    value checks are skipped.  Instances are immutable pytrees (B1, B2, I, J are leaves).  It is a
    field in the sense of :mod:`instantonkit.fields` (potential, closed-form field strength and
    densities, hooks layout, hint, describe, constraint_residual, log_det, charge).
    """

    B1: jax.Array
    B2: jax.Array
    I: jax.Array  # noqa: E741
    J: jax.Array
    tol: float = CONSTRAINT_TOL
    gauge: str = "singular"

    _leaves = ("B1", "B2", "I", "J")
    _static = ("tol", "gauge")

    def __post_init__(self):
        b1 = _as_complex("B1", self.B1, 2)
        b2 = _as_complex("B2", self.B2, 2)
        i = _as_complex("I", self.I, 2)
        j = _as_complex("J", self.J, 2)
        if self.gauge not in _GAUGES:
            raise ValueError(f"gauge must be one of {_GAUGES}; found {self.gauge!r}")
        positive_float("tol", self.tol)
        k, n = i.shape
        if k < 1 or n < 2:
            raise ValueError(f"I must have shape (k, N) with k >= 1 and N >= 2; found {i.shape}")
        for name, arr, want in (("B1", b1, (k, k)), ("B2", b2, (k, k)), ("J", j, (n, k))):
            if tuple(arr.shape) != want:
                raise ValueError(f"{name} must have shape {want} for I of shape {(k, n)}; found {tuple(arr.shape)}")
        if self.gauge == "regular" and n > 2 * k:
            raise ValueError(f"gauge 'regular' needs N <= 2k; found N = {n}, k = {k} (use gauge='singular')")
        if not is_tracer(b1, b2, i, j):
            scale = 1.0 + float(sum(np.sum(np.abs(a) ** 2) for a in (b1, b2, i, j)))
            mr, mc = unitary_moment_maps(b1, b2, i, j)
            for label, m in (("real moment map [B1,B1^dag] + [B2,B2^dag] + I I^dag - J^dag J", mr),
                             ("complex moment map [B1,B2] + I J", mc)):
                res = float(np.max(np.abs(m)))
                if res > self.tol * scale:
                    raise ValueError(f"ADHM {label} must vanish; max |entry| = {res:.3e} "
                                     f"(tolerance {self.tol * scale:.1e})")
            for name, arr in (("B1", b1), ("B2", b2), ("I", i), ("J", j)):
                object.__setattr__(self, name, arr)

    # -- simple properties --------------------------------------------------------------------
    @property
    def k(self) -> int:
        """Number of instantons, k (the size of B1)."""
        return int(self.I.shape[0])

    @property
    def charge(self) -> int:
        """Instanton number, +k (the construction is self-dual)."""
        return self.k

    @property
    def chirality(self) -> int:
        """+1: these data give instantons (self-dual)."""
        return 1

    @property
    def rank(self) -> int:
        """N of SU(N)."""
        return int(self.I.shape[1])

    @property
    def matrix_size(self) -> int:
        """N of the N x N gauge matrices."""
        return self.rank

    @property
    def group(self) -> str:
        """'SU(N)'."""
        return f"SU({self.rank})"

    def centers(self) -> np.ndarray:
        """Points a_i read off the diagonals of B1, B2 (B_a,ii = z_a(a_i)); (k, 4) float64."""
        d = np.arange(self.k)
        return _point_of(np.asarray(self.B1)[d, d], np.asarray(self.B2)[d, d])

    def sizes(self) -> np.ndarray:
        """rho_i = sqrt((|I_i|^2 + |J^i|^2) / 2) (row i of I, column i of J); (k,) float64."""
        i, j = np.asarray(self.I), np.asarray(self.J)
        return np.sqrt(0.5 * (np.sum(np.abs(i) ** 2, axis=1) + np.sum(np.abs(j) ** 2, axis=0)))

    def layout(self) -> tuple[np.ndarray, np.ndarray]:
        """Field hook: the centres (k, 4) and sizes (k,) read off the data."""
        return self.centers(), self.sizes()

    def hint(self):
        """Field hook: centre and length scale for integration, (centre (4,), scale)."""
        c, rho = self.layout()
        spread = float(np.max(np.linalg.norm(c - c.mean(0), axis=1))) if self.k > 1 else 0.0
        return c.mean(axis=0), float(max(np.max(rho), spread, 1e-300))

    def describe(self) -> str:
        """Field hook: one line for reports."""
        return f"complex ADHM {self.group} data, k = {self.k} (instanton, {self.gauge} gauge)"

    def constraint_residual(self) -> float:
        """Field hook: the larger of max |mu_R| and max |mu_C| (module docstring)."""
        mr, mc = unitary_moment_maps(*(np.asarray(a) for a in (self.B1, self.B2, self.I, self.J)))
        return float(max(np.max(np.abs(mr)), np.max(np.abs(mc))))

    # -- transformations (each returns new data) ---------------------------------------------
    def _replace(self, **kw) -> "UnitaryADHMData":
        return dataclasses.replace(self, **kw)

    def with_gauge(self, gauge: str) -> "UnitaryADHMData":
        """Same data, potential in the other projection gauge ('singular' or 'regular')."""
        return self._replace(gauge=gauge)

    def rotate_gauge(self, g) -> "UnitaryADHMData":
        """U(k) redundancy: B_a -> g B_a g^dag, I -> g I, J -> J g^dag (the same field); g: (k, k) unitary."""
        g = _unitary("g", g, self.k)
        gh = g.conj().T
        return self._replace(B1=g @ self.B1 @ gh, B2=g @ self.B2 @ gh, I=g @ self.I, J=self.J @ gh)

    def rotate_su(self, h) -> "UnitaryADHMData":
        """Global colour rotation I -> I h^dag, J -> h J; h: (N, N) unitary (SU(N), or U(N)).

        Delta -> diag(1_2k, h) Delta, so the field changes by a gauge transformation that tends to
        the constant h at infinity; the densities are unchanged.
        """
        h = _unitary("h", h, self.rank)
        return self._replace(I=self.I @ h.conj().T, J=h @ self.J)

    def translate(self, shift) -> "UnitaryADHMData":
        """Data of the field translated by ``shift`` (4,): A'(x) = A(x - shift); B_a -> B_a + z_a(shift) 1."""
        s = real_array("shift", shift, (4,))
        z1, z2 = (complex(v) for v in complex_coordinates(s))
        eye = np.eye(self.k)
        return self._replace(B1=np.asarray(self.B1) + z1 * eye, B2=np.asarray(self.B2) + z2 * eye)

    def dilate(self, factor: float) -> "UnitaryADHMData":
        """Data of the field dilated about the origin: A'(x) = A(x / c) / c; all of B1, B2, I, J -> c (.)."""
        c = positive_float("factor", factor)
        return self._replace(**{n: c * np.asarray(getattr(self, n)) for n in ("B1", "B2", "I", "J")})

    # -- Delta and friends -------------------------------------------------------------------
    def delta(self, x):
        """Delta(x), the (2k + N) x 2k complex matrix (module docstring), at points x (..., 4); jax-traceable.

        Returns (..., 2k + N, 2k) complex128.
        """
        if not is_tracer(x):
            arr = np.asarray(x)
            if arr.ndim < 1 or arr.shape[-1] != 4:
                raise ValueError(f"points must have shape (..., 4); found {arr.shape}")
            real_array("points", arr.reshape(-1, 4), (None, 4), shape_text="(..., 4)")
        z1, z2 = complex_coordinates(x)
        lead = z1.shape
        eye = jnp.eye(self.k)
        c1 = jnp.asarray(self.B1) - z1[..., None, None] * eye  # B1 - z1
        c2 = jnp.asarray(self.B2) - z2[..., None, None] * eye  # B2 - z2
        h = lambda a: jnp.conj(jnp.swapaxes(a, -1, -2))  # noqa: E731
        top = jnp.concatenate([h(c2), -c1], axis=-1)
        mid = jnp.concatenate([h(c1), c2], axis=-1)
        bot = jnp.broadcast_to(jnp.concatenate([h(jnp.asarray(self.I)), jnp.asarray(self.J)], axis=-1),
                               lead + (self.rank, 2 * self.k))
        return jnp.concatenate([top, mid, bot], axis=-2)

    def gram(self, x):
        """f^-1 = (B1 - z1)(B1 - z1)^dag + (B2 - z2)(B2 - z2)^dag + I I^dag, (k, k), at one point (4,); jax-traceable."""
        z1, z2 = complex_coordinates(x)
        eye = jnp.eye(self.k)
        c1 = jnp.asarray(self.B1) - z1 * eye
        c2 = jnp.asarray(self.B2) - z2 * eye
        i = jnp.asarray(self.I)
        return c1 @ jnp.conj(c1.T) + c2 @ jnp.conj(c2.T) + i @ jnp.conj(i.T)

    def log_det(self, x):
        """Field hook: log det f^-1 at one point (4,) -> () (so s = -1/2 box box log_det, Osborn)."""
        return jnp.linalg.slogdet(self.gram(x))[1]

    def _f(self, x):
        finv = self.gram(x)
        if self.k == 1:
            return 1.0 / finv
        return jnp.linalg.inv(finv)

    def frame(self, x):
        """U(x), (2k + N, N): orthonormal null space of Delta^dag in the projection gauge (one point).

        U = P V0 L^-dag with P = 1 - Delta (1_2 (x) f) Delta^dag and V0^dag P V0 = L L^dag (Cholesky);
        V0 = [0 ; 1_N] ('singular') or [I ; J^dag ; 0] ('regular').  No SVD; smooth where L exists.
        """
        k, n = self.k, self.rank
        delta = self.delta(x)
        f = self._f(x)
        if self.gauge == "singular":
            v0 = jnp.concatenate([jnp.zeros((2 * k, n), dtype=jnp.complex128), jnp.eye(n, dtype=jnp.complex128)])
        else:
            v0 = jnp.concatenate([jnp.asarray(self.I), jnp.conj(jnp.asarray(self.J).T),
                                  jnp.zeros((n, n), dtype=jnp.complex128)])
        dv = jnp.conj(delta.T) @ v0  # (2k, N)
        fdv = jnp.concatenate([f @ dv[:k], f @ dv[k:]])
        pv = v0 - delta @ fdv
        gram = jnp.conj(v0.T) @ pv
        gram = 0.5 * (gram + jnp.conj(gram.T))
        lo = jnp.linalg.cholesky(gram)
        # U = pv L^-dag  <=>  U^dag = L^-1 pv^dag
        return jnp.conj(jsl.solve_triangular(lo, jnp.conj(pv.T), lower=True).T)

    # -- the field protocol ------------------------------------------------------------------
    def potential(self, x):
        """A_mu = U^dag d_mu U minus its trace part (tr A / N), at one point (4,) -> (4, N, N) complex."""
        x = jnp.asarray(x, dtype=jnp.float64)
        jac, u = jax.jacfwd(lambda y: (self.frame(y),) * 2, has_aux=True)(x)  # (2k + N, N, mu)
        a = jnp.einsum("ia,ibm->mab", jnp.conj(u), jac)
        tr = jnp.trace(a, axis1=-2, axis2=-1) / self.rank
        return a - tr[:, None, None] * jnp.eye(self.rank)

    def field_strength(self, x):
        """Closed-form F_mu nu = U^dag b (S_mu nu (x) f) b^dag U (trace part removed) -> (4, 4, N, N).

        S_mu nu = s_mu s_nu^dag - s_nu s_mu^dag (module docstring); no derivatives are taken.
        """
        x = jnp.asarray(x, dtype=jnp.float64)
        k = self.k
        u = self.frame(x)
        f = self._f(x)
        u1, u2 = u[:k], u[k : 2 * k]
        blocks = [[jnp.conj(ua.T) @ f @ ub for ub in (u1, u2)] for ua in (u1, u2)]
        kab = jnp.stack([jnp.stack(r) for r in blocks])  # (2, 2, N, N)
        fmn = jnp.einsum("mnab,abij->mnij", _SMN, kab)
        tr = jnp.trace(fmn, axis1=-2, axis2=-1) / self.rank
        return fmn - tr[..., None, None] * jnp.eye(self.rank)

    def action_density(self, x):
        """Action density from 2k x 2k work only, at one point (4,) -> ().

        With D = b^dag Delta, M = b^dag P b = 1 - D (1_2 (x) f) D^dag and G = (1_2 (x) f) M,
        s = -1/2 sum_mu nu tr((S_mu nu (x) 1) G (S_mu nu (x) 1) G) = -1/2 sum T_abcd tr(G_bc G_da),
        T_abcd = sum_mu nu (S_mu nu)_ab (S_mu nu)_cd; uses tr F = 0 (the U(1) part is flat).
        """
        x = jnp.asarray(x, dtype=jnp.float64)
        k = self.k
        d = self.delta(x)[: 2 * k]
        f = self._f(x)
        fd = jnp.concatenate([f @ jnp.conj(d[:, :k].T), f @ jnp.conj(d[:, k:].T)])  # (1 (x) f) D^dag
        m = jnp.eye(2 * k) - d @ fd
        fm = jnp.concatenate([f @ m[:k], f @ m[k:]])
        g = fm.reshape(2, k, 2, k).transpose(0, 2, 1, 3)  # G_ab blocks (2, 2, k, k)
        gg = jnp.einsum("bcij,daji->bcda", g, g)  # tr(G_bc G_da)
        return -0.5 * jnp.real(jnp.einsum("abcd,bcda->", _T, gg))

    def charge_density(self, x):
        """q = s / 8 pi^2, exact for the self-dual field, at one point (4,) -> ()."""
        return self.action_density(x) * (-CHARGE_DENSITY_FACTOR) * 4.0


def _unitary(name: str, g, n: int) -> np.ndarray:
    g = np.asarray(g)
    if g.dtype == object or not np.issubdtype(g.dtype, np.number):
        raise TypeError(f"{name} must be a complex ({n}, {n}) unitary matrix; found dtype {g.dtype}")
    g = g.astype(np.complex128)
    if g.shape != (n, n):
        raise ValueError(f"{name} must have shape {(n, n)}; found {g.shape}")
    dev = float(np.max(np.abs(g.conj().T @ g - np.eye(n)))) if np.all(np.isfinite(g)) else np.inf
    if dev > 1e-10:
        raise ValueError(f"{name} must be unitary; max |g^dag g - 1| = {dev:.3e}")
    return g


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
        raise ValueError(f"data must be SU(2) instanton data (rank 1, chirality +1); found rank {data.rank}, "
                         f"chirality {data.chirality}")
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


def _pack_residual(b1, b2, i, j) -> np.ndarray:
    """The 3k^2 real moment-map equations: Re mu_R (i <= j), Im mu_R (i < j), Re and Im of mu_C."""
    mr, mc = unitary_moment_maps(b1, b2, i, j)
    k = b1.shape[0]
    up = np.triu_indices(k)
    sup = np.triu_indices(k, 1)
    return np.concatenate([mr[up].real, mr[sup].imag, mc.real.ravel(), mc.imag.ravel()])


def _unpack(vec: np.ndarray, k: int, n: int):
    c = vec[0::2] + 1j * vec[1::2]
    sizes = [k * k, k * k, k * n, n * k]
    parts = np.split(c, np.cumsum(sizes)[:-1])
    return parts[0].reshape(k, k), parts[1].reshape(k, k), parts[2].reshape(k, n), parts[3].reshape(n, k)


def _pack(b1, b2, i, j) -> np.ndarray:
    c = np.concatenate([np.ravel(a) for a in (b1, b2, i, j)])
    out = np.empty(2 * c.size)
    out[0::2], out[1::2] = c.real, c.imag
    return out


def _jacobian(vec: np.ndarray, k: int, n: int) -> np.ndarray:
    """Exact Jacobian of the (quadratic) moment maps at vec: central differences are exact for quadratics."""
    cols = []
    for a in range(vec.size):
        e = np.zeros(vec.size)
        e[a] = 1.0
        cols.append(0.5 * (_pack_residual(*_unpack(vec + e, k, n)) - _pack_residual(*_unpack(vec - e, k, n))))
    return np.stack(cols, axis=1)


def constraint_jacobian(data: UnitaryADHMData) -> np.ndarray:
    """(3k^2, 4k^2 + 4kN) real Jacobian of the moment maps at the data (package-internal seam).

    Rows: Re mu_R (upper triangle with the diagonal, row-major), Im mu_R (strict upper triangle),
    Re mu_C, Im mu_C (row-major).  Columns: the entries of B1, B2, I, J (each row-major, in that
    order), each entry as its real then imaginary part.
    """
    return _jacobian(_pack(data.B1, data.B2, data.I, data.J), data.k, data.rank)


def _solve(vec: np.ndarray, k: int, n: int, weights: np.ndarray, *, tol: float, max_iter: int = 60):
    """Weighted minimum-norm Gauss-Newton for the moment maps from ``vec``; weights 0 freeze a variable.

    Step: minimise |W^-1 step| subject to J step = -r (numpy lstsq on J W).  Returns (vec, residual, its).
    """
    free = weights > 0
    converged = None
    res = np.inf
    for it in range(max_iter):
        r = _pack_residual(*_unpack(vec, k, n))
        res = float(np.max(np.abs(r)))
        if converged is not None:
            return (vec, res, it) if res < converged[1] else (converged[0], converged[1], it)
        if res <= tol:
            converged = (vec.copy(), res)
        jac = _jacobian(vec, k, n)[:, free] * weights[free]
        step, *_ = np.linalg.lstsq(jac, -r, rcond=None)
        vec = vec.copy()
        vec[free] += weights[free] * step
        if not np.all(np.isfinite(vec)):
            break
    if converged is not None:
        return converged[0], converged[1], max_iter
    return vec, res, max_iter


def _variable_mask(k: int, n: int, off_b: float, diag_b: float, ij: float) -> np.ndarray:
    w = [np.full((k, k), off_b), np.full((k, k), off_b)]
    for m in w:
        m[np.arange(k), np.arange(k)] = diag_b
    w += [np.full((k, n), ij), np.full((n, k), ij)]
    c = np.concatenate([m.ravel() for m in w])
    return np.repeat(c, 2)


def unitary_multi_instanton(centers, sizes, orientations=None, *, rank: int = 3, tol: float = 1e-12,
                            gauge: str = "singular") -> UnitaryADHMData:
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
    r = np.asarray(sizes, dtype=float)
    r = np.full(k, float(r)) if r.ndim == 0 else r
    r = real_array("sizes", r, (k,))
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
        g = np.stack([_unitary(f"orientations[{m}]", g[m], rank) for m in range(k)])
    z1, z2 = (np.asarray(v) for v in complex_coordinates(c))
    b1, b2 = np.diag(z1).astype(np.complex128), np.diag(z2).astype(np.complex128)
    i = r[:, None] * g[:, :, 0].conj()  # row i: rho e_0^T g_i^dag
    j = (r[:, None] * g[:, :, 1]).T  # column i: rho g_i e_1
    vec = _pack(b1, b2, i, j)
    scale = 1.0 + float(np.max(r) ** 2 + np.max(np.sum(c**2, axis=1)))
    weights = _variable_mask(k, rank, 1.0, 0.0, 0.1)
    out, res, it = _solve(vec, k, rank, weights, tol=tol * scale) if k > 1 else (vec, 0.0, 0)
    if not (res <= tol * scale):
        raise ValueError(f"could not solve the moment maps for k = {k}: residual {res:.3e} after {it} steps "
                         f"(tolerance {tol * scale:.1e}); the centres may be too close for the sizes")
    return UnitaryADHMData(*_unpack(out, k, rank), gauge=gauge)


def random_unitary_adhm(k: int, rank: int = 3, *, seed=0, spread: float = 1.5, size: float = 1.0,
                        tol: float = 1e-12) -> UnitaryADHMData:
    """Random valid charge-k SU(N) data (generic: B1, B2 not near-diagonal), reproducible for ``seed``.

    Gaussian B1, B2 (entries of scale ``spread``), I, J (scale ``size``), then every entry moved by
    minimum-norm Gauss-Newton onto both moment maps (to ``tol`` scaled by 1 + |data|^2).  Retries new
    draws (up to 20) if a draw does not converge.  seed: int or numpy Generator.
    """
    k = positive_int("k", k)
    rank = positive_int("rank", rank)
    if rank < 2:
        raise ValueError(f"rank must be >= 2; found {rank}")
    spread = positive_float("spread", spread)
    size = positive_float("size", size)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    last = None
    for _ in range(20):
        cn = lambda *s, sc: sc * (rng.normal(size=s) + 1j * rng.normal(size=s)) / np.sqrt(2.0)  # noqa: E731
        b1, b2 = cn(k, k, sc=spread), cn(k, k, sc=spread)
        i, j = cn(k, rank, sc=size), cn(rank, k, sc=size)
        vec = _pack(b1, b2, i, j)
        scale = 1.0 + float(np.sum(vec**2))
        out, res, it = _solve(vec, k, rank, np.ones(vec.size), tol=tol * scale)
        if res <= tol * scale:
            data = UnitaryADHMData(*_unpack(out, k, rank))
            if float(np.min(np.linalg.svd(np.asarray(data.I), compute_uv=False))) > 1e-3 * size or k > rank:
                return data
        last = f"residual {res:.3e} after {it} steps"
    raise ValueError(f"random_unitary_adhm found no valid data in 20 draws: {last}")
