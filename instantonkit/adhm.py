"""ADHM data for SU(2) = Sp(1) and Sp(n) multi-instantons, its validation and its constructors.

Data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; notation of
Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, from memory):

    Delta(x) = [ Lambda ; B - p(x) 1_k ]        ((n + k) x k quaternionic)

with ``Lambda`` an ``n x k`` and ``B`` a symmetric ``k x k`` quaternionic matrix and ``p(x)`` the
quaternion of the point (conventions.point_to_quaternion).  The ADHM constraint is that
``Delta^dag Delta`` be real, which (given ``B = B^T``) is ``Im(Lambda^dag Lambda + B^dag B) = 0``.
Then ``f = (Delta^dag Delta)^-1`` is a real ``k x k`` matrix and, with ``U`` the ``(n + k) x n``
orthonormal null space of ``Delta^dag`` and ``b = [0 ; 1_k]``,

    A_mu = U^dag d_mu U,      F_mu nu = U^dag b (e_mu e-bar_nu - e_nu e-bar_mu) f b^dag U,

which is self-dual (``e_mu e-bar_nu - e_nu e-bar_mu = -2 eta_{a mu nu} u_a``, quaternion.thooft_eta)
with ``Q = +k`` in the conventions of :mod:`instantonkit.conventions`.  The anti-instanton partner
(``chirality = -1``) uses ``p-bar(x)`` in place of ``p(x)``.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from . import quaternion as qt
from ._pytree import PytreeFields
from .conventions import CHARGE_DENSITY_FACTOR, E_MU, point_to_quaternion

__all__ = [
    "ADHMData",
    "bpst",
    "multi_instanton",
    "random_adhm",
    "embed_sp",
    "block_sum",
    "CONSTRAINT_TOL",
]

#: Default tolerance on the ADHM constraint residual accepted at construction.
CONSTRAINT_TOL = 1e-10

_GAUGES = ("singular", "regular")


def _is_tracer(x) -> bool:
    return isinstance(x, jax.core.Tracer)


def _as_float_array(name: str, value, ndim: int) -> np.ndarray | jax.Array:
    if _is_tracer(value):
        return value
    arr = np.asarray(value)
    if not np.issubdtype(arr.dtype, np.number) or np.iscomplexobj(arr):
        raise TypeError(f"{name} must be a real array; found dtype {arr.dtype}")
    arr = arr.astype(np.float64)
    if arr.ndim != ndim or arr.shape[-1] != 4:
        expect = "(n, k, 4)" if name == "lam" else "(k, k, 4)"
        raise ValueError(f"{name} must have shape {expect}; found {arr.shape}")
    if not np.all(np.isfinite(arr)):
        bad = int(np.sum(~np.isfinite(arr)))
        raise ValueError(f"{name} must be finite; found {bad} non-finite entries")
    return arr


def _constraint_matrix(lam, b):
    """``Lambda^dag Lambda + B^dag B`` as a (k, k, 4) quaternionic matrix."""
    return qt.qmat_mul(qt.qmat_dagger(lam), lam) + qt.qmat_mul(qt.qmat_dagger(b), b)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class ADHMData(PytreeFields):
    """Validated ADHM data ``(Lambda, B)`` of a charge-k Sp(n) (anti-)instanton.

    lam: (n, k, 4) float64 -- Lambda, an n x k quaternionic matrix (n = 1 is SU(2)).
    B:   (k, k, 4) float64 -- symmetric quaternionic matrix; its diagonal holds p(a_i).
    chirality: +1 for the instanton (self-dual, Q = +k), -1 for its anti-self-dual partner, whose
        Delta uses p-bar(x) (then the diagonal of B holds p-bar(a_i)).
    tol: accepted size of the constraint and symmetry violations (absolute, scaled by 1 + |data|^2).

    Construction validates shapes, finiteness, symmetry of B and the ADHM constraint and raises a
    ``ValueError`` naming the failed condition and the size of the violation.  Instances are
    immutable pytrees (``lam`` and ``B`` are leaves), so ``jax.grad`` flows through the moduli;
    under tracing the value checks are skipped.  ADHMData is a field in the sense of
    :mod:`instantonkit.fields` (methods ``potential``, ``field_strength``, ``action_density``).
    """

    lam: jax.Array
    B: jax.Array
    chirality: int = 1
    tol: float = CONSTRAINT_TOL
    gauge: str = "singular"

    def __post_init__(self):
        lam = _as_float_array("lam", self.lam, 3)
        b = _as_float_array("B", self.B, 3)
        if isinstance(self.chirality, bool) or not isinstance(self.chirality, (int, np.integer)) or self.chirality not in (1, -1):
            raise ValueError(f"chirality must be +1 or -1; found {self.chirality!r}")
        if self.gauge not in _GAUGES:
            raise ValueError(f"gauge must be one of {_GAUGES}; found {self.gauge!r}")
        if not (_is_tracer(lam) or _is_tracer(b)):
            n, k = lam.shape[0], lam.shape[1]
            if n < 1 or k < 1:
                raise ValueError(f"lam must have n >= 1 rows and k >= 1 columns; found {lam.shape}")
            if b.shape != (k, k, 4):
                raise ValueError(f"B must have shape (k, k, 4) = {(k, k, 4)} for lam {lam.shape}; found {b.shape}")
            scale = 1.0 + float(np.sum(lam**2) + np.sum(b**2))
            asym = float(np.max(np.abs(b - np.swapaxes(b, 0, 1))))
            if asym > self.tol * scale:
                raise ValueError(f"B must be symmetric (B_ij = B_ji); max |B_ij - B_ji| = {asym:.3e}")
            res = float(np.max(np.abs(np.asarray(_constraint_matrix(lam, b))[..., 1:])))
            if res > self.tol * scale:
                raise ValueError(
                    "ADHM constraint violated: Lambda^dag Lambda + B^dag B must be real; "
                    f"max |imaginary part| = {res:.3e} (tolerance {self.tol * scale:.1e})"
                )
            object.__setattr__(self, "lam", lam)
            object.__setattr__(self, "B", b)

    _leaves = ("lam", "B")
    _static = ("chirality", "tol", "gauge")

    # -- simple properties --------------------------------------------------------------------
    @property
    def charge(self) -> int:
        """Instanton number k times the chirality: +k for instantons, -k for anti-instantons."""
        return self.chirality * self.lam.shape[1]

    @property
    def k(self) -> int:
        """Number of instantons, k (the size of B)."""
        return self.lam.shape[1]

    @property
    def rank(self) -> int:
        """n of Sp(n); 1 means SU(2)."""
        return self.lam.shape[0]

    @property
    def group(self) -> str:
        """'SU(2)' for n = 1, otherwise 'Sp(n)'."""
        return "SU(2)" if self.rank == 1 else f"Sp({self.rank})"

    @property
    def matrix_size(self) -> int:
        """N of the complex N x N gauge matrices, 2n."""
        return 2 * self.rank

    def centers(self) -> np.ndarray:
        """Points a_i read off the diagonal of B; (k, 4) float64."""
        diag = np.asarray(self.B)[np.arange(self.k), np.arange(self.k)]
        if self.chirality == -1:
            diag = np.asarray(qt.qconj(diag))
        from .conventions import quaternion_to_point

        return np.asarray(quaternion_to_point(diag))

    def sizes(self) -> np.ndarray:
        """Column norms of Lambda, rho_i = |Lambda_i|; (k,) float64."""
        return np.sqrt(np.sum(np.asarray(self.lam) ** 2, axis=(0, 2)))

    def layout(self) -> tuple[np.ndarray, np.ndarray]:
        """Field hook: the centres (k, 4) and sizes (k,) read off the data, where the action sits."""
        return self.centers(), self.sizes()

    def describe(self) -> str:
        """Field hook: one line for reports."""
        kind = "instanton" if self.chirality == 1 else "anti-instanton"
        return f"ADHM {self.group} data, k = {self.k} ({kind}, {self.gauge} gauge)"

    def constraint_residual(self) -> float:
        """Max |Im(Lambda^dag Lambda + B^dag B)| and max |B - B^T| (the larger of the two)."""
        res = np.max(np.abs(np.asarray(_constraint_matrix(self.lam, self.B))[..., 1:]))
        asym = np.max(np.abs(np.asarray(self.B) - np.swapaxes(np.asarray(self.B), 0, 1)))
        return float(max(res, asym))

    # -- transformations (each returns new data) ---------------------------------------------
    def _replace(self, **kw) -> "ADHMData":
        return dataclasses.replace(self, **kw)

    def with_gauge(self, gauge: str) -> "ADHMData":
        """Same data, potential evaluated in the other gauge ('singular' or 'regular')."""
        return self._replace(gauge=gauge)

    def rotate_gauge(self, orth) -> "ADHMData":
        """O(k) redundancy: ``Lambda -> Lambda O``, ``B -> O^T B O`` (same field); orth: (k, k) real orthogonal."""
        o = np.asarray(orth, dtype=np.float64)
        if o.shape != (self.k, self.k):
            raise ValueError(f"orth must have shape {(self.k, self.k)}; found {o.shape}")
        dev = float(np.max(np.abs(o.T @ o - np.eye(self.k))))
        if dev > 1e-10:
            raise ValueError(f"orth must be orthogonal; max |O^T O - 1| = {dev:.3e}")
        lam = np.einsum("nja,jk->nka", self.lam, o)
        b = np.einsum("ji,jla,lk->ika", o, self.B, o)
        return self._replace(lam=lam, B=b)

    def rotate_sp(self, q) -> "ADHMData":
        """Global Sp(n) rotation ``Lambda -> Q Lambda``; q: (n, n, 4) quaternionic unitary, or (4,) unit quaternion for n = 1.

        The field changes by the constant gauge transformation Q (densities are unchanged).
        """
        q = np.asarray(q, dtype=np.float64)
        if q.shape == (4,) and self.rank == 1:
            q = q[None, None]
        if q.shape != (self.rank, self.rank, 4):
            raise ValueError(f"q must have shape {(self.rank, self.rank, 4)}; found {q.shape}")
        dev = float(np.max(np.abs(np.asarray(qt.qmat_mul(qt.qmat_dagger(q), q)) - np.asarray(qt.qmat_identity(self.rank)))))
        if dev > 1e-10:
            raise ValueError(f"q must be in Sp({self.rank}); max |Q^dag Q - 1| = {dev:.3e}")
        return self._replace(lam=np.asarray(qt.qmat_mul(q, self.lam)))

    def translate(self, shift) -> "ADHMData":
        """Data of the field translated by ``shift`` (4,): A'(x) = A(x - shift); B -> B + p(shift) 1."""
        s = np.asarray(shift, dtype=np.float64)
        if s.shape != (4,) or not np.all(np.isfinite(s)):
            raise ValueError(f"shift must be a finite point of shape (4,); found {s.shape}")
        ps = np.asarray(point_to_quaternion(s))
        if self.chirality == -1:
            ps = np.asarray(qt.qconj(ps))
        b = np.array(self.B)
        b[np.arange(self.k), np.arange(self.k)] += ps
        return self._replace(B=b)

    def dilate(self, factor: float) -> "ADHMData":
        """Data of the field dilated about the origin: A'(x) = A(x / c) / c; Lambda, B -> c Lambda, c B."""
        c = float(factor)
        if not np.isfinite(c) or c <= 0:
            raise ValueError(f"dilation factor must be finite and > 0; found {factor!r}")
        return self._replace(lam=c * np.asarray(self.lam), B=c * np.asarray(self.B))

    def conjugate(self) -> "ADHMData":
        """The anti-self-dual partner (charge -k): the parity image x -> (-x1, -x2, -x3, x4).

        Same Lambda and B, chirality flipped, so Delta'(x) = Delta(Px) uses p-bar(x) = p(Px) and
        A'_mu(x) = P_mu nu A_nu(Px): s'(x) = s(Px), q'(x) = -q(Px), centres P a_i.
        Compose with :meth:`translate` to move the anti-instantons elsewhere.
        """
        return self._replace(chirality=-self.chirality)

    # -- Delta and friends at points ---------------------------------------------------------
    def _pq(self, x):
        p = point_to_quaternion(jnp.asarray(x))
        return qt.qconj(p) if self.chirality == -1 else p

    def b_minus_p(self, x):
        """B - p(x) 1_k at one point x (4,) -> (k, k, 4) quaternionic (package-internal seam, jax-traceable)."""
        p = self._pq(x)
        eye = jnp.eye(self.k)[:, :, None]
        return jnp.asarray(self.B) - eye * p

    def delta(self, points):
        """Delta(x) = [Lambda ; B - p(x) 1_k] at points (..., 4) -> (..., n + k, k, 4) float64."""
        from .fields import as_points

        pts, lead = as_points(points)
        out = jax.vmap(self._delta_at)(pts)
        return np.asarray(out).reshape(lead + out.shape[1:])

    def _delta_at(self, x):
        return jnp.concatenate([jnp.asarray(self.lam), self.b_minus_p(x)], axis=0)

    def gram_inverse(self, x):
        """f = (Delta^dag Delta)^-1, real (k, k), and B - p(x) (k, k, 4) at one point (package-internal seam)."""
        bp = self.b_minus_p(x)
        gram = _real_gram(jnp.asarray(self.lam), bp)
        if self.k == 1:  # a 1 x 1 real matrix: skip the batched LU
            return 1.0 / gram, bp
        return jnp.linalg.inv(gram), bp

    def log_det(self, x):
        """log det(Delta^dag Delta) at one point (4,) -> () (for Osborn's formula)."""
        bp = self.b_minus_p(x)
        gram = _real_gram(jnp.asarray(self.lam), bp)
        return jnp.linalg.slogdet(gram)[1]

    def frame(self, x):
        """U(x), (n + k, n, 4): orthonormal null space of Delta^dag in the projection gauge (package-internal seam).

        U = P V0 L^-dag with P = 1 - Delta f Delta^dag, V0^dag P V0 = L L^dag (quaternionic Cholesky).
        gauge 'singular': V0 = [1_n ; 0] (for k = 1 the singular gauge, singular at the centre);
        gauge 'regular':  V0 = [0 ; Lambda^dag] (for k = 1 the regular gauge, smooth everywhere).
        """
        n, k = self.rank, self.k
        f, bp = self.gram_inverse(x)
        delta = jnp.concatenate([jnp.asarray(self.lam), bp], axis=0)
        if self.gauge == "singular":
            v0 = jnp.concatenate([qt.qmat_identity(n), jnp.zeros((k, n, 4))], axis=0)
        else:
            v0 = jnp.concatenate([jnp.zeros((n, n, 4)), qt.qmat_dagger(jnp.asarray(self.lam))], axis=0)
        dv = qt.qmat_mul(qt.qmat_dagger(delta), v0)  # (k, n, 4)
        pv = v0 - qt.qmat_mul(delta, _real_mul(f, dv))
        gram = qt.qmat_mul(qt.qmat_dagger(v0), pv)
        linv = _quat_cholesky_inverse(gram)
        return qt.qmat_mul(pv, qt.qmat_dagger(linv))

    # -- the field protocol ------------------------------------------------------------------
    def potential(self, x):
        """A_mu(x) = U^dag d_mu U at one point (4,) -> (4, 2n, 2n) complex (gauge: ``self.gauge``)."""
        x = jnp.asarray(x, dtype=jnp.float64)
        # d_mu U by forward-mode AD (exact), U itself as the auxiliary output of the same pass
        jac, u = jax.jacfwd(lambda y: (self.frame(y),) * 2, has_aux=True)(x)  # (n + k, n, 4, mu)
        a = jnp.stack([qt.qmat_mul(qt.qmat_dagger(u), jac[..., mu]) for mu in range(4)])
        return qt.qmat_to_complex(a)

    def field_strength(self, x):
        """Closed-form ADHM F_mu nu = U^dag b sigma_mu nu f b^dag U at one point -> (4, 4, 2n, 2n) complex.

        sigma_mu nu = e_mu e-bar_nu - e_nu e-bar_mu (instanton) or e-bar_mu e_nu - e-bar_nu e_mu
        (anti-instanton).  No derivatives are taken.
        """
        x = jnp.asarray(x, dtype=jnp.float64)
        u = self.frame(x)
        f, _ = self.gram_inverse(x)
        ub = u[self.rank :]  # b^dag U, (k, n, 4)
        sig = _sigma_munu(self.chirality)  # (4, 4, 4)
        # (sigma f)_{ij} = sigma * f_ij: a (4, 4, k, k, 4) quaternionic matrix
        sf = sig[:, :, None, None, :] * f[None, None, :, :, None]
        fq = qt.qmat_mul(qt.qmat_dagger(ub)[None, None], qt.qmat_mul(sf, ub[None, None]))
        return qt.qmat_to_complex(fq)

    def action_density(self, x):
        """Action density from k x k work only, at one point (4,) -> ().

        With f = (Delta^dag Delta)^-1, M = b^dag P b = 1 - (B - p) f (B - p)^dag and G = f M,
        s = -1/2 sum tr F F = 16 Re tr(G G) + 32 Re tr(G* G), G* the entrywise conjugate.
        (Uses sum_{mu nu} sigma_mu nu X sigma_mu nu = 16 sum_a u_a X u_a and
        sum_a u_a q u_a = -q - 2 q-bar; for k = 1 it gives 48 rho^4 f^4, the BPST density.)
        """
        f, bp = self.gram_inverse(jnp.asarray(x, dtype=jnp.float64))
        m = qt.qmat_identity(self.k) - qt.qmat_mul(bp, qt.qmat_mul(_real_mul_left(f), qt.qmat_dagger(bp)))
        g = _real_mul(f, m)
        gg = qt.qmat_real_trace(qt.qmat_mul(g, g))
        cg = qt.qmat_real_trace(qt.qmat_mul(qt.qconj(g), g))
        return 16.0 * gg + 32.0 * cg

    def charge_density(self, x):
        """q = chirality * s / 8 pi^2, exact for (anti-)self-dual ADHM fields; at one point -> ()."""
        return self.chirality * self.action_density(x) * (-CHARGE_DENSITY_FACTOR) * 4.0

    def hint(self):
        """Centre and length scale for integration: (centre (4,), scale)."""
        c = self.centers()
        rho = self.sizes()
        spread = float(np.max(np.linalg.norm(c - c.mean(0), axis=1))) if self.k > 1 else 0.0
        return c.mean(axis=0), float(max(np.max(rho), spread, 1e-300))

    @property
    def closed_link(self):
        """The closed-form link hook ``closed_link(x, d) -> (2, 2)`` of charge-1 SU(2) data (k = n = 1).

        Absent (AttributeError, so ``fields.hook(data, "closed_link")`` is None) for k > 1 or Sp(n > 1),
        whose transporters need Magnus steps.  Formula: :func:`charge_one_link`.
        """
        if self.k != 1 or self.rank != 1:
            raise AttributeError("closed_link exists only for charge-1 SU(2) ADHM data (k = 1, n = 1)")

        def closed_link(x, d):
            return charge_one_link(jnp.asarray(self.lam)[0, 0], jnp.asarray(self.B)[0, 0], self.chirality, self.gauge, x, d)

        return closed_link

    @property
    def gauge_twin(self):
        """Field hook of singular-gauge data: () -> (the data in regular gauge, g), g(x) = U_reg(x)^dag U_sing(x), (2n, 2n).

        Wherever both frames are defined U_sing = U_reg g, so A = g^dag A_reg g + g^dag dg and the links
        obey U(x, d) = g(x)^dag U_reg(x, d) g(x + d); g is not finite where the singular gauge is.
        Absent (AttributeError) for regular-gauge data.
        """
        if self.gauge != "singular":
            raise AttributeError("gauge_twin is offered by singular-gauge ADHM data only")

        def gauge_twin():
            twin = self.with_gauge("regular")

            def transition(x):
                x = jnp.asarray(x, dtype=jnp.float64)
                return qt.qmat_to_complex(qt.qmat_mul(qt.qmat_dagger(twin.frame(x)), self.frame(x)))

            return twin, transition

        return gauge_twin

    def record(self) -> dict:
        """Field hook: a JSON-ready description that rebuilds the data exactly (floats in full precision)."""
        lam = np.asarray(self.lam, dtype=np.float64)
        sizes = self.sizes()
        return {
            "kind": "adhm",
            "lam": lam.tolist(),
            "B": np.asarray(self.B, dtype=np.float64).tolist(),
            "chirality": int(self.chirality),
            "gauge": self.gauge,
            "tol": float(self.tol),
            "group": self.group,
            "charge": int(self.charge),
            "centres": self.centers().tolist(),
            "sizes": sizes.tolist(),
            "orientations": (lam / np.where(sizes > 0, sizes, 1.0)[None, :, None]).tolist(),
        }


def _real_gram(lam, bp):
    """Re(Delta^dag Delta)_ij = sum_{l,a} Delta_li^a Delta_lj^a, the real k x k matrix, without the imaginary parts."""
    return jnp.einsum("lia,lja->ij", lam, lam) + jnp.einsum("lia,lja->ij", bp, bp)


def _real_mul(f, q):
    """Product of a real (k, k) matrix with a quaternionic (k, m, 4) matrix."""
    return jnp.einsum("ij,jma->ima", f, q)


def _real_mul_left(f):
    """A real (k, k) matrix as a quaternionic one, (k, k, 4)."""
    return jnp.concatenate([f[..., None], jnp.zeros(f.shape + (3,))], axis=-1)


def _make_sigma(chirality: int) -> np.ndarray:
    e = E_MU
    eb = np.asarray(qt.qconj(e))
    if chirality == 1:
        s = np.asarray(qt.qmul(e[:, None], eb[None, :]))
    else:
        s = np.asarray(qt.qmul(eb[:, None], e[None, :]))
    return s - np.swapaxes(s, 0, 1)


_SIGMA = {1: _make_sigma(1), -1: _make_sigma(-1)}


def _sigma_munu(chirality: int) -> np.ndarray:
    """sigma_mu nu as quaternions, (4, 4, 4): e_mu e-bar_nu - e_nu e-bar_mu (or e-bar_mu e_nu - e-bar_nu e_mu)."""
    return _SIGMA[chirality]


def _quat_cholesky_inverse(gram):
    """L^-1 for gram = L L^dag, quaternionic Hermitian positive (n, n, 4) -> lower-triangular (n, n, 4).

    Quaternionic Cholesky (real positive diagonal), then forward substitution; plain loops over the
    small static n, so it is differentiable where gram is positive definite.
    """
    n = gram.shape[0]
    if n == 1:
        return jnp.zeros((1, 1, 4)).at[0, 0, 0].set(1.0 / jnp.sqrt(gram[0, 0, 0]))
    lo = [[jnp.zeros(4) for _ in range(n)] for _ in range(n)]
    for j in range(n):
        d = gram[j, j, 0] - sum((qt.qnorm2(lo[j][m]) for m in range(j)), 0.0)
        ljj = jnp.sqrt(d)
        lo[j][j] = jnp.zeros(4).at[0].set(ljj)
        for i in range(j + 1, n):
            acc = gram[i, j] - sum((qt.qmul(lo[i][m], qt.qconj(lo[j][m])) for m in range(j)), jnp.zeros(4))
            lo[i][j] = acc / ljj
    inv = [[jnp.zeros(4) for _ in range(n)] for _ in range(n)]
    for i in range(n):
        inv[i][i] = jnp.zeros(4).at[0].set(1.0 / lo[i][i][0])
        for j in range(i):
            acc = sum((qt.qmul(lo[i][m], inv[m][j]) for m in range(j, i)), jnp.zeros(4))
            inv[i][j] = -acc / lo[i][i][0]
    return jnp.stack([jnp.stack(row) for row in inv])


# -- constructors ---------------------------------------------------------------------------------


def _check_centers_sizes(centers, sizes):
    c = np.asarray(centers, dtype=np.float64)
    if c.ndim == 1 and c.shape == (4,):
        c = c[None]
    if c.ndim != 2 or c.shape[1] != 4 or c.shape[0] < 1:
        raise ValueError(f"centers must have shape (k, 4); found {np.shape(centers)}")
    if not np.all(np.isfinite(c)):
        raise ValueError(f"centers must be finite; found {int(np.sum(~np.isfinite(c)))} non-finite entries")
    k = c.shape[0]
    r = np.asarray(sizes, dtype=np.float64)
    if r.ndim == 0:
        r = np.full(k, float(r))
    if r.shape != (k,):
        raise ValueError(f"sizes must have shape (k,) = ({k},); found {r.shape}")
    if not np.all(np.isfinite(r)) or np.any(r <= 0):
        raise ValueError(f"sizes must be finite and > 0; found min {np.min(r)!r}")
    if k > 1:
        d = np.linalg.norm(c[:, None] - c[None], axis=-1) + np.diag(np.full(k, np.inf))
        i, j = np.unravel_index(np.argmin(d), d.shape)
        if d[i, j] < 1e-8 * max(1.0, float(np.max(r))):
            raise ValueError(f"centers {i} and {j} coincide (distance {d[i, j]:.3e}); give distinct centers")
    return c, r


def _unit_orientations(orientations, k: int, rank: int) -> np.ndarray:
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
        if max(dev, det) > 1e-10:
            raise ValueError(f"orientation matrices must be in SU(2); max deviation {max(dev, det):.3e}")
        q = np.asarray(qt.from_matrix(o))
        o = np.zeros((k, rank, 4))
        o[:, 0] = q
        return o
    o = o.astype(np.float64)
    if o.shape == (4,) and k == 1:
        o = o[None]
    if o.shape == (k, 4):
        full = np.zeros((k, rank, 4))
        full[:, 0] = o
        o = full
    if o.shape != (k, rank, 4):
        raise ValueError(f"orientations must have shape (k, 4) or (k, n, 4) = ({k}, {rank}, 4); found {o.shape}")
    if not np.all(np.isfinite(o)):
        raise ValueError("orientations must be finite")
    norms = np.sqrt(np.sum(o**2, axis=(1, 2)))
    dev = float(np.max(np.abs(norms - 1.0)))
    if dev > 1e-10:
        raise ValueError(f"orientations must be unit quaternions (vectors); max | |u| - 1 | = {dev:.3e}")
    return o


def bpst(center=(0.0, 0.0, 0.0, 0.0), size: float = 1.0, orientation=(1.0, 0.0, 0.0, 0.0)) -> ADHMData:
    """Charge-1 SU(2) ADHM data of the BPST instanton: Lambda = rho u, B = p(a).

    center: (4,) point a; size: rho > 0; orientation: unit quaternion (4,) or SU(2) matrix (2, 2).
    Then Delta^dag Delta = (|x - a|^2 + rho^2) 1 (Belavin, Polyakov, Schwartz, Tyupkin,
    Phys. Lett. B 59 (1975) 85).
    """
    if np.shape(center) != (4,):
        raise ValueError(f"center must have shape (4,); found {np.shape(center)}")
    if np.ndim(size) != 0:
        raise ValueError(f"size must be a number; found shape {np.shape(size)}")
    c, r = _check_centers_sizes(np.reshape(center, (1, 4)), [size])
    o = np.asarray(orientation)
    u = _unit_orientations(o[None] if o.shape == (4,) else o, 1, 1)
    lam = r[None, :, None] * np.swapaxes(u, 0, 1)
    b = np.asarray(point_to_quaternion(c))[:, None, :]
    return ADHMData(lam, b)


def _offdiag_index(k: int):
    return [(i, j) for i in range(k) for j in range(i + 1, k)]


def _assemble_b(diag: np.ndarray, off: np.ndarray, k: int) -> np.ndarray:
    b = np.zeros((k, k, 4))
    b[np.arange(k), np.arange(k)] = diag
    for m, (i, j) in enumerate(_offdiag_index(k)):
        b[i, j] = b[j, i] = off[m]
    return b


def _constraint_vector(lam, b, pairs):
    c = np.asarray(_constraint_matrix(lam, b))
    return np.concatenate([c[i, j, 1:] for (i, j) in pairs]) if pairs else np.zeros(0)


def _solve_offdiagonal(lam: np.ndarray, diag: np.ndarray, *, tol: float, max_iter: int = 60):
    """Solve Im(Lambda^dag Lambda + B^dag B)_{i<j} = 0 for the off-diagonal quaternions of B.

    Gauss-Newton with minimum-norm steps (numpy lstsq) from B_off = 0; the residual is quadratic in
    B_off, so its Jacobian is the exact linear map E -> Im(B^dag E + E^dag B) on the basis of E.
    Returns (B, residual, iterations).
    """
    k = lam.shape[1]
    pairs = _offdiag_index(k)
    m = len(pairs)
    if m == 0:  # k = 1: no off-diagonal entries and no constraint equations
        return _assemble_b(diag, np.zeros((0, 4)), k), 0.0, 0
    off = np.zeros((m, 4))
    basis = []
    for p in range(m):
        for a in range(4):
            e = np.zeros((m, 4))
            e[p, a] = 1.0
            basis.append(_assemble_b(np.zeros((k, 4)), e, k))
    basis = np.stack(basis)  # (4m, k, k, 4)
    res = np.inf
    converged = None  # (B, residual) once within tol; one more step polishes it to rounding level
    for it in range(max_iter):
        b = _assemble_b(diag, off, k)
        r = _constraint_vector(lam, b, pairs)
        res = float(np.max(np.abs(r))) if r.size else 0.0
        if converged is not None:
            return (b, res, it) if res < converged[1] else (converged[0], converged[1], it)
        if res <= tol:
            converged = (b, res)
        bd = np.asarray(qt.qmat_dagger(b))
        prod = np.asarray(qt.qmat_mul(bd[None], basis))
        lin = prod + np.asarray(qt.qmat_dagger(prod))
        jac = np.stack([np.concatenate([lin[c, i, j, 1:] for (i, j) in pairs]) for c in range(4 * m)], axis=1)
        step, *_ = np.linalg.lstsq(jac, -r, rcond=None)
        off = off + step.reshape(m, 4)
        if not np.all(np.isfinite(off)):
            break
    if converged is not None:
        return converged[0], converged[1], max_iter
    return _assemble_b(diag, off, k), res, max_iter


def multi_instanton(centers, sizes, orientations=None, *, rank: int = 1, tol: float = 1e-12) -> ADHMData:
    """Exact charge-k Sp(n) ADHM data with given centres, sizes and orientations.

    centers: (k, 4) points a_i (the diagonal of B is p(a_i)); sizes: (k,) rho_i > 0 (or one number);
    orientations: None (all 1), (k, 4) unit quaternions, (k, 2, 2) SU(2) matrices, or (k, n, 4)
    quaternionic unit vectors (the directions of the columns of Lambda); rank: n of Sp(n).
    The 2k(k-1) real off-diagonal entries of B are solved (minimum-norm Gauss-Newton) so that the
    3k(k-1)/2 real constraint equations hold to ``tol`` (scaled by 1 + max rho^2 + max |a|^2).
    Raises ValueError when no solution is found (for example centres too close for the sizes).
    """
    if not isinstance(rank, (int, np.integer)) or rank < 1:
        raise ValueError(f"rank must be an integer >= 1; found {rank!r}")
    c, r = _check_centers_sizes(centers, sizes)
    k = c.shape[0]
    u = _unit_orientations(orientations, k, int(rank))  # (k, n, 4)
    lam = np.swapaxes(u, 0, 1) * r[None, :, None]
    diag = np.asarray(point_to_quaternion(c))
    scale = 1.0 + float(np.max(r) ** 2 + np.max(np.sum(c**2, axis=1)))
    b, res, it = _solve_offdiagonal(lam, diag, tol=tol * scale)
    if not (res <= tol * scale):
        raise ValueError(
            f"could not solve the ADHM constraint for k = {k}: residual {res:.3e} after {it} steps "
            f"(tolerance {tol * scale:.1e}); the centres may be too close for the requested sizes"
        )
    return ADHMData(lam, b)


def random_adhm(k: int, rank: int = 1, *, seed=0, spread: float = 2.0, size_range=(0.5, 1.5)) -> ADHMData:
    """Random valid charge-k Sp(n) data: centres ~ N(0, spread^2), sizes ~ U(size_range), Haar orientations.

    Reproducible for a given ``seed`` (int or numpy Generator).  Retries new draws (up to 20)
    when the constraint solver fails for a draw.
    """
    if not isinstance(k, (int, np.integer)) or k < 1:
        raise ValueError(f"k must be an integer >= 1; found {k!r}")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    last = None
    for _ in range(20):
        centers = rng.normal(scale=spread, size=(k, 4))
        sizes = rng.uniform(*size_range, size=k)
        o = rng.normal(size=(k, rank, 4))
        o /= np.sqrt(np.sum(o**2, axis=(1, 2), keepdims=True))
        try:
            return multi_instanton(centers, sizes, o, rank=rank)
        except ValueError as err:  # pragma: no cover - rare
            last = err
    raise ValueError(f"random_adhm failed to find valid data in 20 draws: {last}")


def embed_sp(data: ADHMData, rank: int, row: int = 0) -> ADHMData:
    """Embed Sp(n) data into Sp(rank), rank >= n, by padding Lambda with zero rows (rows row..row+n-1 hold it)."""
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
    :func:`multi_instanton` to re-solve the combined constraint).
    """
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


# -- the closed-form link of charge 1 (package seam: ADHMData.closed_link, ansatz.BPSTField.closed_link) --

#: Below this ratio sqrt(disc) / |w| the arctan quotient is replaced by its two-term series
#: (the relative error of the series, ~(s/w)^4 / 5, is then below 1e-24; the quotient would lose digits).
_SERIES_RATIO = 1e-6


def _line_integral(alpha, beta, gamma, wedge2, c):
    """Integral_0^1 dt / (alpha t^2 + beta t + gamma + c) for alpha t^2 + beta t + gamma = |y0 + t d|^2.

    alpha = |d|^2, beta = 2 y0.d, gamma = |y0|^2, wedge2 = |y0 ^ d|^2 = alpha gamma - (y0.d)^2 >= 0.
    With disc = 4 alpha (gamma + c) - beta^2 = 4 (wedge2 + alpha c) (no cancellation) the integral is
    2 atan2(sqrt(disc), 2 (gamma + c) + beta) / sqrt(disc) (the arctan antiderivative with the
    difference of two arctans folded into one atan2), and 2 / (2 (gamma + c) + beta) as disc -> 0.
    Infinite when the segment meets a zero of the denominator (a singular point of the field).
    """
    s = jnp.sqrt(4.0 * (wedge2 + alpha * c))
    w = 2.0 * (gamma + c) + beta
    small = s <= _SERIES_RATIO * jnp.abs(w)
    safe_s = jnp.where(small, 1.0, s)
    safe_w = jnp.where(w == 0, 1.0, w)
    series = 2.0 / safe_w * (1.0 - (s / safe_w) ** 2 / 3.0)  # atan2(s, w) / s for s << w > 0
    series = jnp.where(w > 0, series, jnp.inf)
    return jnp.where(small, series, 2.0 * jnp.arctan2(s, w) / safe_s)


def charge_one_link(lam, b, chirality: int, gauge: str, x, d):
    """Exact transporter of a charge-1 SU(2) instanton (BPST, either gauge) along x -> x + d; (2, 2) complex128.

    Package-internal seam (not in ``__all__``): the one formula behind the ``closed_link`` hooks of
    :class:`ADHMData` (k = n = 1) and ``ansatz.BPSTField``.  lam: Lambda (4,) quaternion, b: B (4,)
    quaternion, chirality: +1 / -1, gauge: 'regular' / 'singular', x, d: (4,) start and displacement.

    For k = 1, n = 1 the ADHM frame gives, with y = p(x) - B (p-bar(x) for chirality -1),
    rho = |Lambda| and l = Lambda / rho (derivation from the frame of this module):

        regular gauge:  A = l Im(y dy-bar) l-bar / (|y|^2 + rho^2),
        singular gauge: A = l Im(y-bar dy) l-bar rho^2 / (|y|^2 (|y|^2 + rho^2))

    (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85; 't Hooft, Phys. Rev. D 14
    (1976) 3432, in quaternion form).  On the straight line y = y0 + t dq the imaginary quaternion
    Im(y dy-bar/dt) = Im(y0 dq-bar) (resp. Im(y-bar dy/dt) = Im(y0-bar dq)) does not depend on t, so all
    A(z(t)) commute and U = exp(l M l-bar * integral of the scalar factor), an arctan closed form.
    """
    rho2 = jnp.sum(lam**2)
    lhat = lam / jnp.sqrt(rho2)
    px, pd = point_to_quaternion(jnp.asarray(x)), point_to_quaternion(jnp.asarray(d))
    if chirality == -1:
        px, pd = qt.qconj(px), qt.qconj(pd)
    y0 = px - b
    alpha, beta, gamma = jnp.sum(pd**2), 2.0 * jnp.sum(y0 * pd), jnp.sum(y0**2)
    wedge = y0[:, None] * pd[None, :] - y0[None, :] * pd[:, None]
    wedge2 = 0.5 * jnp.sum(wedge**2)
    if gauge == "regular":
        gen = qt.qmul(y0, qt.qconj(pd))
        scalar = _line_integral(alpha, beta, gamma, wedge2, rho2)
    else:
        gen = qt.qmul(qt.qconj(y0), pd)
        scalar = _line_integral(alpha, beta, gamma, wedge2, 0.0) - _line_integral(alpha, beta, gamma, wedge2, rho2)
    gen = gen.at[0].set(0.0)
    omega = qt.qmul(qt.qmul(lhat, gen), qt.qconj(lhat)) * scalar
    return qt.to_matrix(qt.qexp(omega))


def projection_transition(lam, b, chirality: int, x):
    """g(x) = U_twin(x)^dag U(x) between the two projection gauges of ADHM data (lam, b) at one point; (2n, 2n).

    U in the singular gauge, U_twin in the regular one (:meth:`ADHMData.frame`).  jax-traceable; the
    function behind the ``gauge_twin`` hooks of ADHM data and of ``ansatz.BPSTField``.
    """
    data = ADHMData(lam, b, chirality=chirality, gauge="singular")
    return data.gauge_twin()[1](x)
