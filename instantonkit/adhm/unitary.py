"""Complex ADHM data for SU(N) (U(N)) multi-instantons, its validation and fields (constructors: `instantonkit.adhm.unitary_moduli`).

Data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; Christ, Weinberg, Stanton,
Phys. Rev. D 18 (1978) 2013; the complex form below is common practice, from memory;
tests/test_unitary_adhm.py checks it against the quaternionic SU(2) data and BPST): complex
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

self-dual with Q = +k in the conventions of `instantonkit.core.conventions`.  Quaternionic SU(2) data
map onto N = 2 data (`from_quaternionic`) with the same Delta up to constant unitaries, hence the
same field up to gauge.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core._pytree import PytreeFields
from ..core._validate import is_tracer, positive_float, real_array
from ..core.conventions import CHARGE_DENSITY_FACTOR
from .base import unitary_moment_maps
from .quaternionic import CONSTRAINT_TOL

#: Parameters as arrays (numpy, or jax tracers under jit/grad).
Array = jax.Array | np.ndarray

__all__ = [
    "UnitaryADHMData",
    "complex_coordinates",
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
    """Inverse of `complex_coordinates`: (...) complex z1, z2 -> (..., 4) points."""
    z1, z2 = np.asarray(z1), np.asarray(z2)
    return np.stack([z2.imag, z2.real, -z1.imag, z1.real], axis=-1)


# s_mu = the 2 x 2 matrix with d_mu Delta = b (s_mu (x) 1_k): s(x) = [[-conj z2, z1], [-conj z1, -z2]] (S_MU below).
def _make_s() -> np.ndarray:
    s = np.zeros((4, 2, 2), dtype=np.complex128)
    for mu in range(4):
        e = np.zeros(4)
        e[mu] = 1.0
        z1, z2 = (np.asarray(v) for v in complex_coordinates(e))
        s[mu] = [[-np.conj(z2), z1], [-np.conj(z1), -z2]]
    return s


#: s_mu, (4, 2, 2) complex128 (see _make_s); shared with the tangent vectors of the unitary moduli.
S_MU = _make_s()
#: S_mu nu = s_mu s_nu^dag - s_nu s_mu^dag, (4, 4, 2, 2): F_mu nu = U^dag b (S_mu nu (x) f) b^dag U.
_SMN = np.einsum("mab,ncb->mnac", S_MU, S_MU.conj()) - np.einsum("nab,mcb->mnac", S_MU, S_MU.conj())
#: T_abcd = sum_mu nu S_mu nu,ab S_mu nu,cd, for the action density from 2k x 2k work.
_T = np.einsum("mnab,mncd->abcd", _SMN, _SMN)


# -- k x k and N x N linear algebra, unrolled -------------------------------------------------------
#
# Written as Python loops over the (small, static) matrix size in plain jnp arithmetic, so that under
# vmap every entry is one elementwise array op over the points.  Not jnp.linalg / jax.scipy.linalg: on
# CPU (jax 0.10.2, measured) vmapped calls of the batched LAPACK kernels (triangular solve, LU inverse)
# and of their forward-mode derivatives did not finish for batches of >= 768 (triangular solve) to
# ~1e4 (inverse) matrices, which the engine's chunks of 8192 points and the Magnus kernel reach; the
# second derivatives that the autodiff field strength takes made it worse.  O(n^3) traced operations
# for n x n (n = k or N), nothing for the small sizes of ADHM data.


def _cholesky(a):
    """Lower L with a = L L^dag for Hermitian positive-definite a (n, n) (Cholesky-Banachiewicz, unrolled) -> (n, n)."""
    n = a.shape[-1]
    lo = [[None] * n for _ in range(n)]
    for j in range(n):
        d = jnp.real(a[j, j]) - sum(jnp.abs(lo[j][p]) ** 2 for p in range(j))
        ljj = jnp.sqrt(d)
        lo[j][j] = ljj + 0j
        for i in range(j + 1, n):
            lo[i][j] = (a[i, j] - sum(lo[i][p] * jnp.conj(lo[j][p]) for p in range(j))) / ljj
    zero = jnp.zeros_like(lo[0][0])
    return jnp.stack([jnp.stack([lo[i][j] if j <= i else zero for j in range(n)]) for i in range(n)])


def _inv_lower(lo):
    """L^-1 of a lower-triangular (n, n) with nonzero diagonal (forward substitution, unrolled) -> (n, n)."""
    n = lo.shape[-1]
    inv = [[None] * n for _ in range(n)]
    for c in range(n):
        inv[c][c] = 1.0 / lo[c, c]
        for i in range(c + 1, n):
            inv[i][c] = -sum(lo[i, p] * inv[p][c] for p in range(c, i)) / lo[i, i]
    zero = jnp.zeros_like(inv[0][0])
    return jnp.stack([jnp.stack([inv[i][j] if j <= i else zero for j in range(n)]) for i in range(n)])


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


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class UnitaryADHMData(PytreeFields):
    """Validated complex ADHM data ``(B1, B2, I, J)`` of a charge-k SU(N) instanton.

    B1, B2: (k, k) complex128; I: (k, N) complex128; J: (N, k) complex128 (N >= 2).
    tol: accepted size of the moment-map violations (absolute, scaled by 1 + |data|^2).
    gauge: 'singular' (V0 = [0 ; 1_N]) or 'regular' (V0 = [I ; J^dag ; 0], needs N <= 2k) for the
        projection gauge U = P V0 L^-dag of `frame`.

    Construction validates shapes, finiteness and both moment maps (module docstring) and raises a
    ``ValueError`` naming the failed condition and the size of the violation; under jax tracing the
    value checks are skipped.  Instances are immutable pytrees (B1, B2, I, J are leaves).  It is a
    field in the sense of `instantonkit.engine.fields` (potential, closed-form field strength and
    densities, hooks layout, hint, describe, constraint_residual, log_det, charge).
    """

    B1: Array
    B2: Array
    I: Array  # noqa: E741
    J: Array
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
            for label, m in (
                ("real moment map [B1,B1^dag] + [B2,B2^dag] + I I^dag - J^dag J", mr),
                ("complex moment map [B1,B2] + I J", mc),
            ):
                res = float(np.max(np.abs(m)))
                if res > self.tol * scale:
                    raise ValueError(
                        f"ADHM {label} must vanish; max |entry| = {res:.3e} (tolerance {self.tol * scale:.1e})"
                    )
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

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the data exactly (real and imaginary parts, full precision).

        Rebuilt by `instantonkit.lattice.references.field_from_record` (kind 'unitary_adhm').
        """
        rec: dict = {"kind": "unitary_adhm", "gauge": self.gauge, "tol": float(self.tol)}
        for name in ("B1", "B2", "I", "J"):
            arr = np.asarray(getattr(self, name), dtype=np.complex128)
            rec[name] = {"re": arr.real.tolist(), "im": arr.imag.tolist()}
        rec.update(
            group=self.group, charge=int(self.charge), centres=self.centers().tolist(), sizes=self.sizes().tolist()
        )
        return rec

    def constraint_residual(self) -> float:
        """Field hook: the larger of max |mu_R| and max |mu_C| (module docstring)."""
        mr, mc = unitary_moment_maps(*(np.asarray(a) for a in (self.B1, self.B2, self.I, self.J)))
        return float(max(np.max(np.abs(mr)), np.max(np.abs(mc))))

    # -- transformations (each returns new data) ---------------------------------------------
    def _replace(self, **kw) -> UnitaryADHMData:
        return dataclasses.replace(self, **kw)

    def with_gauge(self, gauge: str) -> UnitaryADHMData:
        """Same data, potential in the other projection gauge ('singular' or 'regular')."""
        return self._replace(gauge=gauge)

    def rotate_gauge(self, g) -> UnitaryADHMData:
        """U(k) redundancy: B_a -> g B_a g^dag, I -> g I, J -> J g^dag (the same field); g: (k, k) unitary."""
        g = check_unitary("g", g, self.k)
        gh = g.conj().T
        return self._replace(B1=g @ self.B1 @ gh, B2=g @ self.B2 @ gh, I=g @ self.I, J=self.J @ gh)

    def rotate_su(self, h) -> UnitaryADHMData:
        """Global colour rotation I -> I h^dag, J -> h J; h: (N, N) unitary (SU(N), or U(N)).

        Delta -> diag(1_2k, h) Delta, so the field changes by a gauge transformation that tends to
        the constant h at infinity; the densities are unchanged.
        """
        h = check_unitary("h", h, self.rank)
        return self._replace(I=self.I @ h.conj().T, J=h @ self.J)

    def translate(self, shift) -> UnitaryADHMData:
        """Data of the field translated by ``shift`` (4,): A'(x) = A(x - shift); B_a -> B_a + z_a(shift) 1."""
        s = real_array("shift", shift, (4,))
        z1, z2 = (complex(v) for v in complex_coordinates(s))
        eye = np.eye(self.k)
        return self._replace(B1=np.asarray(self.B1) + z1 * eye, B2=np.asarray(self.B2) + z2 * eye)

    def dilate(self, factor: float) -> UnitaryADHMData:
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
        bot = jnp.broadcast_to(
            jnp.concatenate([h(jnp.asarray(self.I)), jnp.asarray(self.J)], axis=-1), lead + (self.rank, 2 * self.k)
        )
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
        lo = _cholesky(self.gram(x))
        return 2.0 * sum(jnp.log(jnp.real(lo[i, i])) for i in range(self.k))

    def _f(self, x):
        """f = (f^-1)^-1 = C^-dag C^-1 from the Cholesky factor C of f^-1 (unrolled, see `_cholesky`)."""
        finv = self.gram(x)
        if self.k == 1:
            return 1.0 / finv
        ci = _inv_lower(_cholesky(finv))
        return jnp.conj(ci.T) @ ci

    def _frame_parts(self, x):
        """(U, (1_2 (x) f) Delta^dag V0, L^-1) at one point: the frame and what the potential reuses."""
        k, n = self.k, self.rank
        delta = self.delta(x)
        f = self._f(x)
        if self.gauge == "singular":
            v0 = jnp.concatenate([jnp.zeros((2 * k, n), dtype=jnp.complex128), jnp.eye(n, dtype=jnp.complex128)])
        else:
            v0 = jnp.concatenate(
                [jnp.asarray(self.I), jnp.conj(jnp.asarray(self.J).T), jnp.zeros((n, n), dtype=jnp.complex128)]
            )
        dv = jnp.conj(delta.T) @ v0  # (2k, N)
        fdv = jnp.concatenate([f @ dv[:k], f @ dv[k:]])
        pv = v0 - delta @ fdv
        gram = jnp.conj(v0.T) @ pv
        gram = 0.5 * (gram + jnp.conj(gram.T))
        # U = pv L^-dag, L and L^-1 by unrolled elimination (see _cholesky for why not jnp.linalg)
        linv = _inv_lower(_cholesky(gram))
        return pv @ jnp.conj(linv.T), fdv, linv

    def frame(self, x):
        """U(x), (2k + N, N): orthonormal null space of Delta^dag in the projection gauge (one point).

        U = P V0 L^-dag with P = 1 - Delta (1_2 (x) f) Delta^dag and V0^dag P V0 = L L^dag (Cholesky);
        V0 = [0 ; 1_N] ('singular') or [I ; J^dag ; 0] ('regular').  No SVD; smooth where L exists.
        """
        return self._frame_parts(x)[0]

    # -- the field protocol ------------------------------------------------------------------
    def potential(self, x):
        """A_mu = U^dag d_mu U minus its trace part (tr A / N), in closed form, at one point (4,) -> (4, N, N).

        For U = P V0 L^-dag (`frame`; P Delta = 0, P^2 = P, d_mu Delta = b (s_mu (x) 1_k)), derived
        here: U^dag d_mu U = -W_mu - (d_mu L^dag) L^-dag with W_mu = (b^dag U)^dag (s_mu (x) f) Delta^dag V0
        L^-dag.  d_mu L = L Phi_mu with Phi_mu lower triangular with real diagonal, so the second term is
        -Phi_mu^dag, and anti-Hermiticity fixes Phi_mu + Phi_mu^dag = -(W_mu + W_mu^dag): Phi_mu is the
        strict lower triangle plus half the diagonal of that.  No derivatives are taken (so the autodiff
        field strength is one forward-mode pass); tests compare with U^dag d_mu U by jax.jacfwd.
        """
        return self._from_w(self._w(x))

    def generator_batch(self, points, dirs):
        """Field hook: A_mu(x) d_mu at points (m, 4) with directions (m, 4) -> (m, N, N) (link generators).

        The formula of `potential` with s_mu contracted with d first (it is linear in W_mu), so the
        last products are done once instead of four times; vmapped over the points.
        """
        return jax.vmap(lambda x, d: self._from_w(self._w(x, d))[0])(
            jnp.asarray(points, dtype=jnp.float64), jnp.asarray(dirs, dtype=jnp.float64)
        )

    def _from_w(self, w):
        """A from W (`potential`): (m, N, N) -> (m, N, N) for m directions."""
        n = self.rank
        h = -(w + jnp.conj(jnp.swapaxes(w, -1, -2)))
        phi = jnp.tril(h, -1) + 0.5 * jnp.real(jnp.diagonal(h, axis1=-2, axis2=-1))[..., None] * jnp.eye(n)
        a = -w - jnp.conj(jnp.swapaxes(phi, -1, -2))
        tr = jnp.trace(a, axis1=-2, axis2=-1) / n
        return a - tr[:, None, None] * jnp.eye(n)

    def _w(self, x, d=None):
        """W_mu = (b^dag U)^dag (s_mu (x) f) Delta^dag V0 L^-dag of `potential`, at one point (4,) -> (4, N, N);
        with a direction d (4,): sum_mu d_mu W_mu, (1, N, N)."""
        x = jnp.asarray(x, dtype=jnp.float64)
        k, n = self.k, self.rank
        u, fdv, linv = self._frame_parts(x)
        fdv = fdv.reshape(2, k, n)
        s = jnp.asarray(S_MU) if d is None else jnp.einsum("m,mab->ab", d, jnp.asarray(S_MU))[None]
        sf = jnp.einsum("mab,bjn->majn", s, fdv).reshape(s.shape[0], 2 * k, n)  # (s_mu (x) f) Delta^dag V0
        return jnp.einsum("ia,min,bn->mab", jnp.conj(u[: 2 * k]), sf, jnp.conj(linv))

    def u1_connection(self, x):
        """The flat U(1) part a_mu = tr(U^dag d_mu U) / N that `potential` removes, at one point (4,) -> (4,) complex.

        Closed form: with W_mu of `potential`, tr(U^dag d_mu U) = -tr W_mu - tr Phi_mu^dag and
        tr Phi_mu = -Re tr W_mu (real diagonal), so a_mu = -i Im tr(W_mu) / N, purely imaginary.  It is
        flat (tr F = 0) and decays like |x|^-4 in the singular gauge, like |x|^-1 in the regular gauge
        (measured; tests/test_unitary_zero_modes.py).  Package-internal seam for `instantonkit.adhm.zero_modes`.
        """
        w = self._w(x)
        return -1j * jnp.imag(jnp.trace(w, axis1=-2, axis2=-1)) / self.rank

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


def check_unitary(name: str, g, n: int) -> np.ndarray:
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
