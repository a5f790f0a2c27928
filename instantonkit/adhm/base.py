"""What every realisation of ADHM data offers, and the one constraint solve they share (floor 1).

ADHM data come in two realisations of one construction (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett.
A 65 (1978) 185): quaternionic data (Lambda, B) of SU(2)/Sp(n) in `instantonkit.adhm.quaternionic` and complex
data (B1, B2, I, J) of SU(N) in `instantonkit.adhm.unitary`.  Both data classes satisfy
`ADHMConstruction` (the structural interface: sizes, moduli read-outs, the constraint, the
Gram matrix f^-1 and the frame, the fields and the field hooks), so code that only needs "ADHM data"
(zero modes, the flux route, the finder's read-out of a fit) is written once against it.

Both constraint solves -- the quaternionic Im(Lambda^dag Lambda + B^dag B) = 0 of
`instantonkit.adhm.moduli` and the complex moment maps mu_R = mu_C = 0 of
`instantonkit.adhm.unitary_moduli` -- are the same weighted minimum-norm Gauss-Newton iteration
(`gauss_newton`): step = -W (J W)^T [(J W)(J W)^T]^-1 r, with J = dr/dz exact (jax.jacfwd; r is
quadratic in z) and W a diagonal of weights (0 freezes a variable).  It is written once, in jax, so
the numpy builders and the differentiable fits call the same code: with ``tol`` it stops one step
after the residual reaches ``tol`` (the builders), without it it runs a fixed number of steps that
jax.jvp / jax.jacfwd differentiate (the fits; why unrolled steps give the implicit-function
derivative: `instantonkit.adhm.moduli.solve_constraint_unrolled`).

Each realisation hands `gauss_newton` its residual here, once: `solve_quaternionic_constraint`
(the 3k(k-1)/2 real equations Im(Lambda^dag Lambda + B^dag B)_{i<j} = 0 for the off-diagonal of B)
and `solve_moment_maps` (the 3k^2 real moment-map equations in the packed (B1, B2, I, J)).  The
builders (`multi_instanton`, `unitary_multi_instanton`, `random_unitary_adhm`) call them with ``tol``
(jitted, one compilation per shape), the fits (`instantonkit.fit.exact_fit`) without it (traced).
The packing of (B1, B2, I, J) into one real vector lives here too, so builder and fit share one layout.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from functools import partial
from typing import Any, Protocol, runtime_checkable

import jax
import jax.numpy as jnp
import numpy as np

from ..core import quaternion as qt
from ..core._config import lean_compiler_options

__all__ = [
    "ADHMConstruction",
    "gauss_newton",
    "unitary_moment_maps",
    "moment_residual",
    "pack_unitary",
    "unpack_unitary",
    "unitary_weights",
    "anti_hermitian_basis",
    "solve_moment_maps",
    "quaternionic_constraint",
    "solve_quaternionic_constraint",
]


@runtime_checkable
class ADHMConstruction(Protocol):
    """The interface both ADHM realisations offer (``ADHMData``, ``UnitaryADHMData``); shapes per method.

    ``k`` is the charge's size of the k x k data, ``rank`` the n of Sp(n) or the N of SU(N),
    ``matrix_size`` the size of the gauge matrices (2n or N).  The hooks the engine asks for by name
    (``potential``, ``field_strength``, ``action_density``, ``charge_density``, ``gram``, ``log_det``,
    ``constraint_residual``, ``layout``, ``hint``, ``record``, ``describe``, ``generator_batch``) are
    those of `instantonkit.engine.fields.FieldHooks`; the rest is what constructions and fits use.
    """

    gauge: str

    @property
    def k(self) -> int: ...
    @property
    def charge(self) -> int: ...
    @property
    def rank(self) -> int: ...
    @property
    def chirality(self) -> int: ...
    @property
    def matrix_size(self) -> int: ...
    @property
    def group(self) -> str: ...

    def centers(self) -> np.ndarray: ...  # (k, 4)
    def sizes(self) -> np.ndarray: ...  # (k,)
    def layout(self) -> tuple[np.ndarray, np.ndarray]: ...  # centres (k, 4), scales (k,)
    def constraint_residual(self) -> float: ...
    def with_gauge(self, gauge: str) -> Any: ...
    def translate(self, shift: Any) -> Any: ...  # shift (4,)
    def dilate(self, factor: float) -> Any: ...
    def gram(self, x: Any) -> Any: ...  # (4,) -> (k, k), f^-1 = Delta^dag Delta
    def log_det(self, x: Any) -> Any: ...  # (4,) -> ()
    def frame(self, x: Any) -> Any: ...  # (4,) -> the orthonormal null frame V of Delta^dag
    def potential(self, x: Any) -> Any: ...  # (4,) -> (4, N, N)
    def field_strength(self, x: Any) -> Any: ...  # (4,) -> (4, 4, N, N)
    def action_density(self, x: Any) -> Any: ...  # (4,) -> ()
    def charge_density(self, x: Any) -> Any: ...  # (4,) -> ()
    def record(self) -> dict: ...
    def describe(self) -> str: ...


# -- the one Gauss-Newton iteration ---------------------------------------------------------------


def _step(resid: Callable, w, z):
    """One weighted minimum-norm Gauss-Newton step: z - W (J W)^T [(J W)(J W)^T]^-1 r(z)."""
    r = resid(z)
    jw = jax.jacfwd(resid)(z) * w[None, :]
    return z - w * (jw.T @ jnp.linalg.solve(jw @ jw.T, r))


def gauss_newton(resid: Callable, z0, weights=None, *, steps: int, tol: float | None = None):
    """Solve resid(z) = 0 from z0 by weighted minimum-norm Gauss-Newton steps (jax); returns (z, |r|_inf, steps).

    resid: (P,) -> (R,) jax-traceable with R <= P; z0 (P,) real; weights (P,) >= 0 (None: all 1; 0 freezes
    the entry exactly).  ``tol`` None: exactly ``steps`` steps in a ``fori_loop`` (differentiable by
    jax.jvp, jax.jacfwd and jax.grad; the fits).  With ``tol``: at most ``steps`` steps, stopping one step
    after max|r| <= tol and keeping the better of the last two iterates (the builders; jvp still works).
    A non-finite iterate stops the loop; the caller compares the returned residual with its tolerance.
    """
    z0 = jnp.asarray(z0)
    w = jnp.ones_like(z0) if weights is None else jnp.asarray(weights, dtype=z0.dtype)
    norm = lambda z: jnp.max(jnp.abs(resid(z)))  # noqa: E731
    if tol is None:
        z = jax.lax.fori_loop(0, int(steps), lambda _, z: _step(resid, w, z), z0)
        return z, norm(z), int(steps)

    def cond(state):
        it, _, res, done = state
        return (it < steps) & ~done & jnp.isfinite(res)

    def body(state):
        it, z, res, _ = state
        converged = res <= tol
        z_new = _step(resid, w, z)
        res_new = norm(z_new)
        better = ~converged | (res_new < res)
        z_keep = jnp.where(better, z_new, z)
        res_keep = jnp.where(better, res_new, res)
        return it + 1, z_keep, res_keep, converged

    it, z, res, _ = jax.lax.while_loop(cond, body, (0, z0, norm(z0), False))
    return z, res, it


# -- the complex moment maps --------------------------------------------------------------------------


def unitary_moment_maps(b1, b2, i, j):
    """(mu_R, mu_C) = ([B1,B1^dag] + [B2,B2^dag] + I I^dag - J^dag J, [B1,B2] + I J); two (k, k) complex.

    Works for numpy and jax arrays (Donaldson, Commun. Math. Phys. 93 (1984) 453, the complex form of
    the ADHM equations; from memory; test_delta_gram_blocks_are_the_moment_maps checks that these are
    the off-diagonal and difference blocks of Delta^dag Delta).
    """
    xp = np if all(isinstance(a, np.ndarray) for a in (b1, b2, i, j)) else jnp
    h = lambda a: xp.conj(xp.swapaxes(a, -1, -2))  # noqa: E731
    mr = b1 @ h(b1) - h(b1) @ b1 + b2 @ h(b2) - h(b2) @ b2 + i @ h(i) - h(j) @ j
    mc = b1 @ b2 - b2 @ b1 + i @ j
    return mr, mc


def moment_residual(b1, b2, i, j):
    """The 3k^2 real moment-map equations: Re mu_R (i <= j), Im mu_R (i < j), Re and Im of mu_C (jax)."""
    mr, mc = unitary_moment_maps(b1, b2, i, j)
    k = b1.shape[0]
    up, sup = np.triu_indices(k), np.triu_indices(k, 1)
    return jnp.concatenate([mr[up].real, mr[sup].imag, mc.real.ravel(), mc.imag.ravel()])


def pack_unitary(b1, b2, i, j):
    """(B1 (k, k), B2 (k, k), I (k, N), J (N, k)) -> (4k^2 + 4kN,) real: each entry row-major, Re then Im."""
    xp = np if all(isinstance(a, np.ndarray) for a in (b1, b2, i, j)) else jnp
    c = xp.concatenate([xp.ravel(a) for a in (b1, b2, i, j)])
    return xp.stack([c.real, c.imag], axis=1).ravel()


def unpack_unitary(z, k: int, n: int):
    """Inverse of `pack_unitary` (numpy in, numpy out; jax in, jax out)."""
    c = z[0::2] + 1j * z[1::2]
    s = np.cumsum([0, k * k, k * k, k * n, n * k])
    return (
        c[s[0] : s[1]].reshape(k, k),
        c[s[1] : s[2]].reshape(k, k),
        c[s[2] : s[3]].reshape(k, n),
        c[s[3] : s[4]].reshape(n, k),
    )


def anti_hermitian_basis(n: int, off_diagonal: float = 1.0) -> np.ndarray:
    """A basis of u(n), (n^2, n, n) complex128 anti-Hermitian, in the order (a, b) of its entries (common practice).

    a = b: i E_aa; a < b: c (E_ab - E_ba); a > b: i c (E_ab + E_ba), with c = ``off_diagonal`` (1 / sqrt 2 makes
    the basis orthonormal in the Frobenius inner product).
    """
    out = []
    for a in range(n):
        for b in range(n):
            m = np.zeros((n, n), dtype=np.complex128)
            if a == b:
                m[a, a] = 1j
            elif a < b:
                m[a, b], m[b, a] = off_diagonal, -off_diagonal
            else:
                m[a, b], m[b, a] = 1j * off_diagonal, 1j * off_diagonal
            out.append(m)
    return np.array(out)


def unitary_weights(k: int, n: int, off_b: float, diag_b: float, ij: float) -> np.ndarray:
    """(4k^2 + 4kN,) weights in the packed layout: off-diagonal of B1, B2; their diagonal; I and J."""
    w = [np.full((k, k), off_b), np.full((k, k), off_b)]
    for m in w:
        m[np.arange(k), np.arange(k)] = diag_b
    w += [np.full((k, n), ij), np.full((n, k), ij)]
    return np.repeat(np.concatenate([m.ravel() for m in w]), 2)


def _solve(z0, weights, tol, *, k: int, n: int, steps: int, fixed: bool):
    resid = lambda z: moment_residual(*unpack_unitary(z, k, n))  # noqa: E731
    return gauss_newton(resid, z0, weights, steps=steps, tol=None if fixed else tol)


@functools.cache
def _compiled(k: int, n: int, steps: int, fixed: bool):
    """The jitted solve of one shape, compiled with the lean XLA options (first call ~4x shorter)."""
    return jax.jit(partial(_solve, k=k, n=n, steps=steps, fixed=fixed), compiler_options=lean_compiler_options())


def solve_moment_maps(z0, weights, k: int, n: int, *, steps: int, tol: float | None = None):
    """Packed (B1, B2, I, J) (`pack_unitary`) on both moment maps by `gauss_newton`.

    z0, weights: (4k^2 + 4kN,); returns (z (jax), max residual, steps taken).  ``tol`` None: exactly
    ``steps`` steps, traced into the caller (the fit differentiates it); otherwise a jitted solve that
    stops one step after the residual reaches ``tol`` (one compilation per (k, N, steps)).
    """
    if tol is None:
        return _solve(jnp.asarray(z0), jnp.asarray(weights), 0.0, k=int(k), n=int(n), steps=int(steps), fixed=True)
    fn = _compiled(int(k), int(n), int(steps), False)
    return fn(jnp.asarray(z0), jnp.asarray(weights), jnp.asarray(float(tol)))


# -- the quaternionic constraint ----------------------------------------------------------------------


def _with_offdiagonal(diag, off):
    """B (k, k, 4) symmetric with diagonal ``diag`` (k, 4) and upper triangle ``off`` (k(k-1)/2, 4), row-major."""
    k = diag.shape[0]
    rows, cols = np.triu_indices(k, 1)
    b = jnp.zeros((k, k, 4), dtype=diag.dtype).at[np.arange(k), np.arange(k)].set(diag)
    return b.at[rows, cols].set(off).at[cols, rows].set(off)


def quaternionic_constraint(lam, b):
    """The 3k(k-1)/2 real equations Im(Lambda^dag Lambda + B^dag B)_{i<j} (row-major pairs; jax).

    lam (n, k, 4), b (k, k, 4) symmetric.  For such B the diagonal of the constraint matrix is real
    and the lower triangle the conjugate of the upper one, so these are all the equations
    (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185; the count 3k(k-1)/2 from memory).
    """
    k = b.shape[0]
    rows, cols = np.triu_indices(k, 1)
    c = qt.qmat_mul(qt.qmat_dagger(lam), lam) + qt.qmat_mul(qt.qmat_dagger(b), b)
    return c[rows, cols, 1:].reshape(-1)


def _solve_quaternionic(lam, diag, off0, tol, *, steps: int, fixed: bool):
    resid = lambda v: quaternionic_constraint(lam, _with_offdiagonal(diag, v.reshape(-1, 4)))  # noqa: E731
    v, res, it = gauss_newton(resid, off0.reshape(-1), steps=steps, tol=None if fixed else tol)
    return _with_offdiagonal(diag, v.reshape(-1, 4)), res, it


@functools.cache
def _compiled_quaternionic(steps: int):
    """The jitted solve with a tolerance (jax compiles once per shape of (Lambda, diag))."""
    return jax.jit(partial(_solve_quaternionic, steps=steps, fixed=False), compiler_options=lean_compiler_options())


def solve_quaternionic_constraint(lam, diag, *, steps: int, tol: float | None = None, start=None):
    """B with the given diagonal whose off-diagonal solves the quaternionic ADHM constraint, by `gauss_newton`.

    lam (n, k, 4) held fixed; diag (k, 4) the quaternions of B's diagonal; start: None (off-diagonal
    0) or (k(k-1)/2, 4) the upper triangle to start from (held constant: no derivative flows through
    it).  Returns (B (k, k, 4) symmetric (jax), max |residual|, steps taken).  ``tol`` None: exactly
    ``steps`` unit-weight steps traced into the caller (differentiable); otherwise the jitted solve
    that stops one step after the residual reaches ``tol``.  k = 1 has no equations: B = diag.
    """
    lam = jnp.asarray(lam)
    diag = jnp.asarray(diag)
    m = diag.shape[0] * (diag.shape[0] - 1) // 2
    off0 = jnp.zeros((m, 4), dtype=diag.dtype) if start is None else jax.lax.stop_gradient(jnp.asarray(start))
    if m == 0:
        return _with_offdiagonal(diag, off0), jnp.asarray(0.0), 0
    if tol is None:
        return _solve_quaternionic(lam, diag, off0, 0.0, steps=int(steps), fixed=True)
    return _compiled_quaternionic(int(steps))(lam, diag, off0, jnp.asarray(float(tol)))
