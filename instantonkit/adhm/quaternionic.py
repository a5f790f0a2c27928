"""ADHM data for SU(2) = Sp(1) and Sp(n) multi-instantons, its validation and its constructors.

Data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; notation of
Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, from memory; the fields are
checked against BPST and autodiff in tests/test_adhm_fields.py):

    Delta(x) = [ Lambda ; B - p(x) 1_k ]        ((n + k) x k quaternionic)

with ``Lambda`` an ``n x k`` and ``B`` a symmetric ``k x k`` quaternionic matrix and ``p(x)`` the
quaternion of the point (conventions.point_to_quaternion).  The ADHM constraint is that
``Delta^dag Delta`` be real, which (given ``B = B^T``) is ``Im(Lambda^dag Lambda + B^dag B) = 0``.
Then ``f = (Delta^dag Delta)^-1`` is a real ``k x k`` matrix and, with ``U`` the ``(n + k) x n``
orthonormal null space of ``Delta^dag`` and ``b = [0 ; 1_k]``,

    A_mu = U^dag d_mu U,      F_mu nu = U^dag b (e_mu e-bar_nu - e_nu e-bar_mu) f b^dag U,

which is self-dual (``e_mu e-bar_nu - e_nu e-bar_mu = -2 eta_{a mu nu} u_a``, quaternion.thooft_eta)
with ``Q = +k`` in the conventions of `instantonkit.core.conventions`.  The anti-instanton partner
(``chirality = -1``) uses ``p-bar(x)`` in place of ``p(x)``.
"""

from __future__ import annotations

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core._pytree import PytreeFields
from ..core.conventions import CHARGE_DENSITY_FACTOR, E_MU, point_to_quaternion, quaternion_to_point
from . import _kxk
from .kernels import charge_one_link as charge_one_link  # re-exported (transport, ansatz)
from .kernels import qmul_unrolled, quat_cholesky_inverse, real_gram, real_mul, real_mul_left, sigma_munu, spd_solve

#: ADHM moduli as arrays (numpy, or jax tracers under jit/grad).
Array = jax.Array | np.ndarray

__all__ = [
    "ADHMData",
    "CONSTRAINT_TOL",
]

#: Default tolerance on the ADHM constraint residual accepted at construction.
CONSTRAINT_TOL = 1e-10

#: Accepted deviation of orthogonal, Sp(n), SU(2) and unit-quaternion inputs (float64 rounding is ~1e-16).
UNIT_TOL = 1e-10


#: Floor of the length scale given by hint() (callers divide by it; real data never get near it).
_MIN_SCALE = 1e-300

_GAUGES = ("singular", "regular")

#: Products of quaternionic matrices in the potential: one einsum each (qt.qmat_mul).  Written out as
#: sums of broadcast products they ran 1.2-2x faster per point at k <= 2 but gave a traced graph ten
#: times larger (measured, autodiff F: 2081 vs 301 operations in the potential at k = 4, first calls
#: 2.9 vs 0.6 s, verify of k = 4 data 8.1 vs 5.5 s); links of SU(2) data use generator_batch instead.
_qmm = qt.qmat_mul


def _moduli(name: str, value, shape_text: str) -> Array:
    """lam (n, k, 4) or B (k, k, 4) as a finite float64 array; a tracer passes unchecked."""
    if _validate.is_tracer(value):
        return value
    return _validate.real_array(name, value, (None, None, 4), shape_text=shape_text)


def constraint_matrix(lam, b):
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
    `instantonkit.engine.fields` (methods ``potential``, ``field_strength``, ``action_density``).
    """

    lam: Array
    B: Array
    chirality: int = 1
    tol: float = CONSTRAINT_TOL
    gauge: str = "singular"

    def __post_init__(self):
        if not _validate.is_tracer(self.tol):
            object.__setattr__(self, "tol", _validate.positive_float("tol", self.tol))
        lam = _moduli("lam", self.lam, "(n, k, 4)")
        b = _moduli("B", self.B, "(k, k, 4)")
        object.__setattr__(self, "chirality", _validate.sign("chirality", self.chirality))
        _validate.choice("gauge", self.gauge, _GAUGES)
        if not _validate.is_tracer(lam, b):
            n, k = lam.shape[0], lam.shape[1]
            if n < 1 or k < 1:
                raise ValueError(f"lam must have n >= 1 rows and k >= 1 columns; found {lam.shape}")
            if b.shape != (k, k, 4):
                raise ValueError(f"B must have shape (k, k, 4) = {(k, k, 4)} for lam {lam.shape}; found {b.shape}")
            scale = 1.0 + float(np.sum(lam**2) + np.sum(b**2))
            asym = float(np.max(np.abs(b - np.swapaxes(b, 0, 1))))
            if asym > self.tol * scale:
                raise ValueError(f"B must be symmetric (B_ij = B_ji); max |B_ij - B_ji| = {asym:.3e}")
            res = float(np.max(np.abs(np.asarray(constraint_matrix(lam, b))[..., 1:])))
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
        res = np.max(np.abs(np.asarray(constraint_matrix(self.lam, self.B))[..., 1:]))
        asym = np.max(np.abs(np.asarray(self.B) - np.swapaxes(np.asarray(self.B), 0, 1)))
        return float(max(res, asym))

    # -- transformations (each returns new data) ---------------------------------------------
    def _replace(self, **kw) -> ADHMData:
        return dataclasses.replace(self, **kw)

    def with_gauge(self, gauge: str) -> ADHMData:
        """Same data, potential evaluated in the other gauge ('singular' or 'regular')."""
        return self._replace(gauge=gauge)

    def rotate_gauge(self, orth) -> ADHMData:
        """O(k) redundancy: ``Lambda -> Lambda O``, ``B -> O^T B O`` (same field); orth: (k, k) real orthogonal."""
        o = _validate.real_array("orth", orth, (self.k, self.k))
        dev = float(np.max(np.abs(o.T @ o - np.eye(self.k))))
        if dev > UNIT_TOL:
            raise ValueError(f"orth must be orthogonal; max |O^T O - 1| = {dev:.3e}")
        lam = np.einsum("nja,jk->nka", self.lam, o)
        b = np.einsum("ji,jla,lk->ika", o, self.B, o)
        return self._replace(lam=lam, B=b)

    def rotate_sp(self, q) -> ADHMData:
        """Global Sp(n) rotation ``Lambda -> Q Lambda``; q: (n, n, 4) quaternionic unitary, or (4,) unit quaternion for n = 1.

        The field changes by the constant gauge transformation Q (densities are unchanged).
        """
        q = _validate.real_array("q", q)
        if q.shape == (4,) and self.rank == 1:
            q = q[None, None]
        if q.shape != (self.rank, self.rank, 4):
            raise ValueError(f"q must have shape {(self.rank, self.rank, 4)}; found {q.shape}")
        dev = float(
            np.max(np.abs(np.asarray(qt.qmat_mul(qt.qmat_dagger(q), q)) - np.asarray(qt.qmat_identity(self.rank))))
        )
        if dev > UNIT_TOL:
            raise ValueError(f"q must be in Sp({self.rank}); max |Q^dag Q - 1| = {dev:.3e}")
        return self._replace(lam=np.asarray(qt.qmat_mul(q, self.lam)))

    def translate(self, shift) -> ADHMData:
        """Data of the field translated by ``shift`` (4,): A'(x) = A(x - shift); B -> B + p(shift) 1."""
        s = _validate.point("shift", shift)
        ps = np.asarray(point_to_quaternion(s))
        if self.chirality == -1:
            ps = np.asarray(qt.qconj(ps))
        b = np.array(self.B)
        b[np.arange(self.k), np.arange(self.k)] += ps
        return self._replace(B=b)

    def dilate(self, factor: float) -> ADHMData:
        """Data of the field dilated about the origin: A'(x) = A(x / c) / c; Lambda, B -> c Lambda, c B."""
        c = _validate.positive_float("factor", factor)
        return self._replace(lam=c * np.asarray(self.lam), B=c * np.asarray(self.B))

    def conjugate(self) -> ADHMData:
        """The anti-self-dual partner (charge -k): the parity image x -> (-x1, -x2, -x3, x4).

        Same Lambda and B, chirality flipped, so Delta'(x) = Delta(Px) uses p-bar(x) = p(Px) and
        A'_mu(x) = P_mu nu A_nu(Px): s'(x) = s(Px), q'(x) = -q(Px), centres P a_i.
        Compose with `translate` to move the anti-instantons elsewhere.
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
        pts, lead = _validate.points(points)
        out = jax.vmap(self._delta_at)(pts)
        return np.asarray(out).reshape(lead + out.shape[1:])

    def _delta_at(self, x):
        return jnp.concatenate([jnp.asarray(self.lam), self.b_minus_p(x)], axis=0)

    def gram_inverse(self, x):
        """f = (Delta^dag Delta)^-1, real (k, k), and B - p(x) (k, k, 4) at one point (package-internal seam)."""
        bp = self.b_minus_p(x)
        gram = real_gram(jnp.asarray(self.lam), bp)
        if self.k == 1:  # a 1 x 1 real matrix: skip the batched LU
            return 1.0 / gram, bp
        return jnp.linalg.inv(gram), bp

    def gram(self, x):
        """Field hook: the Gram matrix Delta^dag Delta, real symmetric (k, k), at one point (4,); jax-traceable."""
        return real_gram(jnp.asarray(self.lam), self.b_minus_p(x))

    def log_det(self, x):
        """log det(Delta^dag Delta) at one point (4,) -> () (for Osborn's formula)."""
        return jnp.linalg.slogdet(self.gram(x))[1]

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
        pv = v0 - qt.qmat_mul(delta, real_mul(f, dv))
        gram = qt.qmat_mul(qt.qmat_dagger(v0), pv)
        linv = quat_cholesky_inverse(gram)
        return qt.qmat_mul(pv, qt.qmat_dagger(linv))

    # -- the field protocol ------------------------------------------------------------------
    def potential(self, x):
        """A_mu(x) = U^dag d_mu U at one point (4,) -> (4, 2n, 2n) complex (gauge: ``self.gauge``), derivative-free.

        With U = P V0 L^-dag (`frame`), U^dag Delta = 0 and d_mu Delta = -b e_mu (e-bar_mu for
        chirality -1; b = [0 ; 1_k]): U^dag d_mu U = M_mu + L^dag d_mu L^-dag with
        M_mu = (b^dag U)^dag e_mu f Delta^dag V0 L^-dag, and the second term is upper triangular with a
        real diagonal, so the anti-Hermitian A_mu is M_mu's strictly lower part, minus its adjoint, plus
        the imaginary part of M_mu's diagonal (for n = 1: A_mu = Im M_mu).  One k x k solve per point
        (f Delta^dag V0, Cholesky written out for k <= 8) and no differentiation of the null space; equal
        to the forward-mode derivative of `frame` to rounding (tests/test_lattice.py).
        """
        n, k = self.rank, self.k
        x = jnp.asarray(x, dtype=jnp.float64)
        lam = jnp.asarray(self.lam)
        bp = self.b_minus_p(x)
        delta = jnp.concatenate([lam, bp], axis=0)  # (n + k, k, 4)
        if self.gauge == "singular":  # V0 = [1_n ; 0]: Delta^dag V0 = Lambda^dag
            dv = qt.qmat_dagger(lam)
            v0 = jnp.concatenate([qt.qmat_identity(n), jnp.zeros((k, n, 4))], axis=0)
        else:  # V0 = [0 ; Lambda^dag]
            v0 = jnp.concatenate([jnp.zeros((n, n, 4)), qt.qmat_dagger(lam)], axis=0)
            dv = _qmm(qt.qmat_dagger(bp), v0[n:])
        fdv = spd_solve(real_gram(lam, bp), dv)  # f Delta^dag V0, (k, n, 4)
        pv = v0 - _qmm(delta, fdv)  # P V0
        linv_h = qt.qmat_dagger(quat_cholesky_inverse(_qmm(qt.qmat_dagger(v0), pv)))  # L^-dag
        ub = _qmm(pv[n:], linv_h)  # b^dag U, (k, n, 4)
        w = _qmm(fdv, linv_h)  # f Delta^dag V0 L^-dag
        eps = jnp.asarray(E_MU if self.chirality == 1 else np.asarray(qt.qconj(E_MU)))
        m = _qmm(qt.qmat_dagger(ub)[None], qmul_unrolled(eps[:, None, None, :], w[None]))  # (4, n, n, 4)
        lower = m * jnp.asarray(np.tril(np.ones((n, n)), -1))[None, :, :, None]
        diag = m * jnp.asarray(np.eye(n))[None, :, :, None] * jnp.asarray([0.0, 1.0, 1.0, 1.0])
        return qt.qmat_to_complex(lower - qt.qmat_dagger(lower) + diag)

    def generator_batch(self, points, dirs):
        """Field hook: A_mu(x) d_mu at points (m, 4) with directions (m, 4) -> (m, 2n, 2n) (link generators).

        SU(2) data: batch-major k x k kernels (`instantonkit.adhm._kxk.link_generator_batch`); Sp(n > 1):
        the vmapped `potential` contracted with d.  Equal to the contracted potential to rounding.
        """
        pts, dirs = jnp.asarray(points, dtype=jnp.float64), jnp.asarray(dirs, dtype=jnp.float64)
        if self.rank > 1:
            return jnp.einsum("mu...,mu->m...", jax.vmap(self.potential)(pts), dirs)
        v = _kxk.link_generator_batch(self.lam, self.B, self.chirality, self.gauge, pts, dirs)
        return qt.to_matrix(jnp.concatenate([jnp.zeros((1, v.shape[1])), v]).T)

    def field_strength(self, x):
        """Closed-form ADHM F_mu nu = U^dag b sigma_mu nu f b^dag U at one point -> (4, 4, 2n, 2n) complex.

        sigma_mu nu = e_mu e-bar_nu - e_nu e-bar_mu (instanton) or e-bar_mu e_nu - e-bar_nu e_mu
        (anti-instanton).  No derivatives are taken.
        """
        x = jnp.asarray(x, dtype=jnp.float64)
        u = self.frame(x)
        f, _ = self.gram_inverse(x)
        ub = u[self.rank :]  # b^dag U, (k, n, 4)
        sig = sigma_munu(self.chirality)  # (4, 4, 4)
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
        m = qt.qmat_identity(self.k) - qt.qmat_mul(bp, qt.qmat_mul(real_mul_left(f), qt.qmat_dagger(bp)))
        g = real_mul(f, m)
        gg = qt.qmat_real_trace(qt.qmat_mul(g, g))
        cg = qt.qmat_real_trace(qt.qmat_mul(qt.qconj(g), g))
        return 16.0 * gg + 32.0 * cg

    def charge_density(self, x):
        """q = chirality * s / 8 pi^2, exact for (anti-)self-dual ADHM fields; at one point -> ()."""
        return self.chirality * self.action_density(x) * (-CHARGE_DENSITY_FACTOR) * 4.0

    def density_batch(self, points, quantity: str):
        """Field hook: action or charge density at a batch of points (m, 4) -> (m,), batch-major k x k kernels.

        Same formulas as `action_density` / `charge_density` (equal to rounding), laid out
        with the points on the last axis so that XLA vectorises across them (instantonkit.adhm._kxk).
        """
        s = _kxk.action_density_batch(self.lam, self.B, self.chirality, points)
        if quantity == "action_density":
            return s
        if quantity == "charge_density":
            return self.chirality * s * (-CHARGE_DENSITY_FACTOR) * 4.0
        raise ValueError(f"quantity must be 'action_density' or 'charge_density'; found {quantity!r}")

    def hint(self):
        """Centre and length scale for integration: (centre (4,), scale)."""
        c = self.centers()
        rho = self.sizes()
        spread = float(np.max(np.linalg.norm(c - c.mean(0), axis=1))) if self.k > 1 else 0.0
        return c.mean(axis=0), float(max(np.max(rho), spread, _MIN_SCALE))

    @property
    def closed_link(self):
        """The closed-form link hook ``closed_link(x, d) -> (2, 2)`` of charge-1 SU(2) data (k = n = 1).

        Absent (AttributeError, so ``fields.hook(data, "closed_link")`` is None) for k > 1 or Sp(n > 1),
        whose transporters need Magnus steps.  Formula: `charge_one_link`.
        """
        if self.k != 1 or self.rank != 1:
            raise AttributeError("closed_link exists only for charge-1 SU(2) ADHM data (k = 1, n = 1)")

        def closed_link(x, d):
            return charge_one_link(
                jnp.asarray(self.lam)[0, 0], jnp.asarray(self.B)[0, 0], self.chirality, self.gauge, x, d
            )

        return closed_link

    @property
    def gauge_twin(self):
        """Field hook of singular-gauge data: () -> (the data in regular gauge, g), g(x) = U_reg(x)^dag U_sing(x), (2n, 2n).

        Wherever both frames are defined U_sing = U_reg g, so A = g^dag A_reg g + g^dag dg and the links
        obey U(x, d) = g(x)^dag U_reg(x, d) g(x + d); g is not finite where the singular gauge is.
        Absent (AttributeError) for regular-gauge data and for rank n > k, where the regular frame
        (V0 = [0 ; Lambda^dag], of rank <= k < n) is singular everywhere.
        """
        if self.gauge != "singular":
            raise AttributeError("gauge_twin is offered by singular-gauge ADHM data only")
        if self.rank > self.k:
            raise AttributeError("gauge_twin needs rank n <= k (the regular frame is singular for n > k)")

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


def projection_transition(lam, b, chirality: int, x):
    """g(x) = U_twin(x)^dag U(x) between the two projection gauges of ADHM data (lam, b) at one point; (2n, 2n).

    U in the singular gauge, U_twin in the regular one (`ADHMData.frame`).  jax-traceable; the
    function behind the ``gauge_twin`` hooks of ADHM data and of ``ansatz.BPSTField``.
    """
    data = ADHMData(lam, b, chirality=chirality, gauge="singular")
    return data.gauge_twin()[1](x)
