"""Normalisable zero modes of the fundamental Dirac operator in an ADHM background, in closed form.

Construction (Corrigan, Goddard, Osborn, Templeton, Nucl. Phys. B 159 (1979) 469; Osborn, Ann. Phys.
135 (1981) 373; from memory; every sign below was fixed numerically in our conventions, see
tests/test_zero_modes.py).  With ``Delta``, ``U``, ``b = [0 ; 1_k]`` and ``f = (Delta^dag Delta)^-1`` of
`instantonkit.adhm.quaternionic`, the ``n x k`` quaternionic matrix

    psi(x) = (1/pi) U^dag b f

holds the k zero modes: column i is mode i, and each of its n quaternions is a 2x2 complex block
(row = colour, column = spinor).  Since ``D_mu (U^dag X) = U^dag d_mu(P X)`` with
``P = U U^dag = 1 - Delta f Delta^dag`` and ``d_mu Delta = -b e_mu``, one finds

    D_mu psi = U^dag b [d_mu f + e_mu f (B - p)^dag f] / pi,
    sum_mu D_mu psi e_mu = 0                       (instanton, chirality +1),
    sum_mu D_mu psi e-bar_mu = 0                   (anti-instanton, chirality -1, Delta with p-bar),

using ``sum_mu e_mu q e_mu = -2 q-bar`` and ``sum_mu e-bar_mu q e_mu = 4 Re q``.  The quaternion acts
on the spinor index from the right.

Array layout of `zero_modes`: ``(..., k, 2n, 2)`` complex128 = (mode i, colour c, spinor alpha),
``psi[..., i, c, alpha]`` the entry ``(c, 2 i + alpha)`` of the complex image (quaternion.qmat_to_complex)
of the quaternionic ``psi``; colour is the gauge index on which ``A_mu`` (``data.potential``, same gauge
as ``data.gauge``) acts from the left.

Dirac equation and chirality.  With `SIGMA` ``sigma_mu = (i sigma_1, i sigma_2, i sigma_3, 1)``
(the image of ``e_mu``) and `SIGMA_BAR` ``sigma-bar_mu = (-i sigma_vec, 1)`` (the image of
``e-bar_mu``), an instanton's modes satisfy

    sum_mu (D_mu psi_i) sigma_mu = 0      (spinor index acted on from the right),

equivalently ``sigma-bar_mu D_mu chi_i = 0`` for the spinor-first array ``chi_i = sigma_2 psi_i^T``
(because ``sigma_mu^T = sigma_2 sigma-bar_mu sigma_2``).  In the Hermitian chiral basis
``gamma_mu = [[0, sigma_mu], [sigma-bar_mu, 0]]`` (``{gamma_mu, gamma_nu} = 2 delta_mu nu``) the Dirac
spinor ``(chi_i, 0)`` solves ``gamma_mu D_mu Psi = 0`` and has ``gamma_5 = gamma_1 gamma_2 gamma_3
gamma_4 = -1``: all k modes of an instanton have gamma_5 = -1, all modes of an anti-instanton +1 (there
the roles of sigma and sigma-bar swap).  The number of modes, k = |Q|, is the Atiyah-Singer index.

Densities need k x k work only: ``psi^dag psi = f M f / pi^2`` with ``M = b^dag P b =
1 - (B - p) f (B - p)^dag``, so the total density (colour and spinor summed, modes summed) is
``(2 / pi^2) Re tr(f M f)``, which also equals ``-(1 / 4 pi^2) box tr f`` (Corrigan, Goddard,
Osborn, Templeton, Nucl. Phys. B 159 (1979) 469, and the 1978 work of Corrigan, Fairlie, Templeton,
Goddard; from memory; checked by test_density_is_minus_box_trace_f_over_four_pi_squared).
For BPST it is ``2 rho^2 / (pi^2 (|x - a|^2 + rho^2)^3)``.
The identity holds entrywise, ``(2 / pi^2) Re (f M f)_ij = -(1 / 4 pi^2) box f_ij`` (checked numerically
with jax Hessians); since ``f = |x|^-2 1 + O(|x|^-3)`` at infinity, Gauss's theorem then gives the
orthonormality ``int psi_i^dag psi_j = delta_ij`` that `zero_mode_overlap` confirms by quadrature.

Complex ADHM data for SU(N) (`instantonkit.adhm.unitary.UnitaryADHMData`; the same
construction, common practice in the instanton literature, from memory; signs fixed numerically in
tests/test_unitary_zero_modes.py).  With Delta, U, ``b = [1_2k ; 0]``, ``F = 1_2 (x) f`` and
``d_mu Delta = b (s_mu (x) 1_k)`` of `instantonkit.adhm.unitary` (coordinates z1, z2 of
docs/conventions.md), the N x 2k matrix ``U^dag b F`` (columns (alpha, i), alpha the block of Delta's
columns) obeys ``sum_mu D_mu (U^dag b F) (s_mu (x) 1_k) = 0`` by the same steps as above; since
``s_mu = sigma_2 SIGMA[mu] sigma_2 s_4``,

    psi(x) = (1/pi) U^dag b F (sigma_2 (x) 1_k),        psi_i[c, beta] = psi[c, (beta, i)],

solves ``sum_mu (D_mu psi_i) SIGMA[mu] = 0`` exactly as the quaternionic instanton modes do (gamma_5 =
-1), same layout ``(..., k, N, 2)``.  The covariant derivative is that of the frame's own connection
``U^dag d_mu U = data.potential + a_mu 1_N``: the potential of ``UnitaryADHMData`` drops the trace part
``a_mu = tr(U^dag d_mu U) / N`` (`u1_part`), which is flat (tr F = 0; tests check d a = 0), so
``a = d lambda`` on R^4 minus the frame's singular points (simply connected, common practice), lambda = i theta.
The frame ``U' = U exp(-lambda)`` has ``U'^dag d U' = U^dag d U - d lambda = data.potential``, and its modes
are ``exp(lambda) psi`` (``conj(exp(-i theta)) = exp(i theta)``): `zero_modes` returns these, the
modes of ``data.potential``, unless asked for the frame's (``connection="frame"``).  theta is the line
integral of Im a along the ray from the layout centre (`u1_phase`, adaptive with a checked error estimate), normalised to 0 at infinity in
the singular gauge, where a = O(|x|^-4) (measured), and at the centre in the regular gauge, where
a = O(|x|^-1) (measured) and theta has a direction-dependent limit at infinity.  For k = 1 in the singular
gauge a = 0 exactly (derived here: with W = [U, Delta (Delta^dag Delta)^-1/2] unitary, N a = d log det W -
i Im tr(F Delta^dag d Delta); in the singular gauge det W has the phase of det(b^dag Delta), and for k = 1
both det(b^dag Delta) = |B1 - z1|^2 + |B2 - z2|^2 and tr(F Delta^dag d Delta) are real), so the phase
matters from k = 2 on.  Since ``|exp(lambda)| = 1`` every density below is the same.
Densities need 2k x 2k work only: ``psi^dag psi`` summed over spinors is
``G = (1/pi^2) sum_alpha (F M F)_(alpha i, alpha j)`` with ``M = b^dag P b = 1 - D F D^dag``,
``D = b^dag Delta``; G is Hermitian (complex), and the same identity ``G_ij = -(1/4 pi^2) box f_ij``
holds entrywise (checked with jax Hessians), hence ``int G = delta_ij`` again (Osborn-type identity;
``f = |x|^-2 1 + O(|x|^-3)``).  For N = 2 data from `instantonkit.adhm.unitary_moduli.from_quaternionic`
f is the real quaternionic f, so G and the density equal the quaternionic ones.
"""

from __future__ import annotations

import functools

import jax
import jax.numpy as jnp
import numpy as np

from ..core import _validate
from ..core import quaternion as qt
from ..core._batching import run_batched
from ..core.conventions import E_MU, PI, QUATERNION_BASIS
from ..engine.fields import as_points
from ..integrals.quadrature import rule_r4
from .quaternionic import ADHMData
from .unitary import UnitaryADHMData
from .zero_mode_phase import PHASE_ATOL, PHASE_NODES, adaptive_phase, phase_anchor, ray_angle, u1_part
from .zero_mode_phase import PHASE_PANELS as PHASE_PANELS  # re-exported: the phase's seams stay reachable here
from .zero_mode_phase import u1_angle as u1_angle

__all__ = [
    "SIGMA",
    "SIGMA_BAR",
    "zero_modes",
    "zero_mode_density",
    "zero_mode_gram",
    "zero_mode_overlap",
    "dirac_residual",
    "u1_phase",
]

#: sigma_mu = image of e_mu = (i sigma_1, i sigma_2, i sigma_3, 1); (4, 2, 2) complex128.
SIGMA = np.einsum("ma,aij->mij", E_MU, QUATERNION_BASIS)
#: sigma-bar_mu = image of e-bar_mu = (-i sigma_1, -i sigma_2, -i sigma_3, 1) = sigma_mu^dag; (4, 2, 2).
SIGMA_BAR = np.conj(np.swapaxes(SIGMA, -1, -2))

#: Points per compiled call (memory per call is about _CHUNK times the per-point k x k and frame work).
_CHUNK = 8192

#: Points per compiled call for complex (SU(N)) data: jax's batched small linear algebra on the CPU
#: (the frame's Cholesky and inverse, and their derivatives) stalled for >= 768 matrices per call.
_UNITARY_CHUNK = 256

#: Right factor of the complex modes, sigma_2 (Pauli matrix written out): sum_mu D_mu (U^dag b F) s_mu = 0
#: becomes sum_mu D_mu psi SIGMA[mu] = 0, since s_mu = sigma_2 SIGMA[mu] sigma_2 s_4 (checked in the tests).
_SIGMA_2 = np.array([[0.0, -1j], [1j, 0.0]])


#: Connections whose modes `zero_modes` returns for complex data (module docstring).
CONNECTIONS = ("traceless", "frame")


def _check_data(data) -> ADHMData | UnitaryADHMData:
    if not isinstance(data, ADHMData | UnitaryADHMData):
        raise TypeError(f"data must be ADHMData or UnitaryADHMData; found {type(data).__name__}")
    return data


# -- complex (SU(N)) data: per-point closed forms -------------------------------------------------------


def _unitary_f(data: UnitaryADHMData, x):
    """f = (f^-1)^-1 of the gram hook, (k, k) complex, at one point."""
    finv = data.gram(x)
    return 1.0 / finv if data.k == 1 else jnp.linalg.inv(finv)


def _unitary_psi_at(data: UnitaryADHMData, x):
    """Complex modes psi = (1/pi) U^dag b (1_2 (x) f) (sigma_2 (x) 1_k) at one point: (k, N, 2) complex."""
    x = jnp.asarray(x, dtype=jnp.float64)
    k = data.k
    u = data.frame(x)  # (2k + N, N)
    f = _unitary_f(data, x)
    ub = jnp.conj(u[: 2 * k].T).reshape(data.rank, 2, k)  # (U^dag b)_{c, (alpha, i)}
    psi = jnp.einsum("caj,ji->cai", ub, f) / PI  # times (1_2 (x) f)
    psi = jnp.einsum("cai,ab->cbi", psi, _SIGMA_2)  # times (sigma_2 (x) 1_k)
    return jnp.transpose(psi, (2, 0, 1))


def _unitary_gram_at(data: UnitaryADHMData, x):
    """G_ij = sum_{c, alpha} conj(psi_i) psi_j = (1/pi^2) sum_alpha (F M F)_{alpha i, alpha j}, (k, k) Hermitian.

    F = 1_2 (x) f, M = b^dag P b = 1 - D F D^dag with D = b^dag Delta (2k x 2k work only):
    F M F = F^2 - F D F D^dag F.
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    k = data.k
    d = data.delta(x)[: 2 * k]
    f = _unitary_f(data, x)
    big_f = jnp.kron(jnp.eye(2), f)
    fd = big_f @ d  # F D
    fmf = big_f @ big_f - fd @ big_f @ jnp.conj(fd.T)  # F M F = F^2 - F D F D^dag F
    return (fmf[:k, :k] + fmf[k:, k:]) / PI**2


def _unitary_density_at(data: UnitaryADHMData, x):
    """Total zero-mode density tr G at one point -> () real."""
    return jnp.real(jnp.trace(_unitary_gram_at(data, x)))


def _unitary_traceless_psi_at(data: UnitaryADHMData, x, anchor, n: int):
    """Modes of the traceless data.potential, exp(i theta) psi (theta of `ray_angle`): (k, N, 2)."""
    return jnp.exp(1j * ray_angle(data, x, anchor, n)) * _unitary_psi_at(data, x)


def _unitary_dirac_at(data: UnitaryADHMData, x, anchor, n: int, traceless: bool):
    """(residual, scale) of the complex modes of data.potential (traceless) or of U^dag d U = potential + a 1."""
    x = jnp.asarray(x, dtype=jnp.float64)
    if traceless:
        modes = lambda y: _unitary_traceless_psi_at(data, y, anchor, n)  # noqa: E731
        a = data.potential(x)
    else:
        modes = lambda y: _unitary_psi_at(data, y)  # noqa: E731
        a = data.potential(x) + u1_part(data, x)[:, None, None] * jnp.eye(data.rank)
    psi = modes(x)  # (k, N, 2)
    dpsi = jnp.moveaxis(jax.jacfwd(modes)(x), -1, 0)  # (mu, k, N, 2)
    cov = dpsi + jnp.einsum("mcd,kdb->mkcb", a, psi)
    res = jnp.einsum("mkca,mab->kcb", cov, SIGMA)
    return jnp.stack([_frobenius(res), sum(_frobenius(cov[m]) for m in range(4))])


# -- per-point closed forms (jax-traceable, one point (4,)) -----------------------------------------


def _psi_quat(data: ADHMData, x):
    """psi = (1/pi) U^dag b f at one point: (n, k, 4) quaternionic."""
    u = data.frame(x)
    f, _ = data.gram_inverse(x)
    ub = u[data.rank :]  # b^dag U, (k, n, 4)
    return jnp.einsum("nja,jk->nka", qt.qmat_dagger(ub), f) / PI


def _psi_at(data: ADHMData, x):
    """Zero modes at one point: (k, 2n, 2) complex (mode, colour, spinor)."""
    img = qt.qmat_to_complex(_psi_quat(data, jnp.asarray(x, dtype=jnp.float64)))  # (2n, 2k)
    n2 = img.shape[0]
    return jnp.transpose(img.reshape(n2, data.k, 2), (1, 0, 2))


def _gram_at(data: ADHMData, x):
    """sum_{c, alpha} conj(psi_i) psi_j = (2 / pi^2) Re (f M f)_ij at one point: (k, k) real.

    M = 1 - (B - p) f (B - p)^dag; only its real part enters since f is real.
    """
    bp = data.b_minus_p(jnp.asarray(x, dtype=jnp.float64))  # (k, k, 4)
    lam = jnp.asarray(data.lam)
    # Re(q-bar r) = q . r (4-vector dot product), so only real contractions are needed:
    # Delta^dag Delta = Re(Lambda^dag Lambda + (B - p)^dag (B - p)) (real by the ADHM constraint)
    gram = jnp.einsum("nia,nja->ij", lam, lam) + jnp.einsum("lia,lja->ij", bp, bp)
    f = 1.0 / gram if data.k == 1 else jnp.linalg.inv(gram)
    # Re((B - p) f (B - p)^dag)_ij = sum_lm f_lm (B - p)_il . (B - p)_jm
    re_m = jnp.eye(data.k) - jnp.einsum("ila,lm,jma->ij", bp, f, bp)
    return (2.0 / PI**2) * f @ re_m @ f


def _density_at(data: ADHMData, x):
    """Total zero-mode density (2 / pi^2) Re tr(f M f) at one point -> ()."""
    return jnp.trace(_gram_at(data, x))


def _dirac_at(data: ADHMData, x):
    """(residual, scale) at one point: |sum_mu D_mu psi S_mu| and sum_mu |D_mu psi| (Frobenius norms).

    S = SIGMA for instantons, SIGMA_BAR for anti-instantons; derivatives by jax.jacfwd.
    """
    x = jnp.asarray(x, dtype=jnp.float64)
    psi = _psi_at(data, x)  # (k, 2n, 2)
    dpsi = jnp.moveaxis(jax.jacfwd(lambda y: _psi_at(data, y))(x), -1, 0)  # (mu, k, 2n, 2)
    a = data.potential(x)  # (mu, 2n, 2n)
    cov = dpsi + jnp.einsum("mcd,kdb->mkcb", a, psi)
    s = SIGMA if data.chirality == 1 else SIGMA_BAR
    res = jnp.einsum("mkca,mab->kcb", cov, s)
    return _frobenius(res), sum(_frobenius(cov[m]) for m in range(4))


def _frobenius(z):
    """Frobenius norm of a complex array -> ()."""
    return jnp.sqrt(jnp.sum(jnp.abs(z) ** 2))


# -- vectorised evaluation --------------------------------------------------------------------------


def _dirac_stacked(data: ADHMData, x):
    """(residual, scale) of `_dirac_at` as one (2,) array, so the batching loop sees one output."""
    return jnp.stack(_dirac_at(data, x))


_POINT_FNS = {"modes": _psi_at, "gram": _gram_at, "density": _density_at, "dirac": _dirac_stacked}


def _unitary_fn(name: str, n: int):
    """Per-point function (data, x, anchor) of complex data for kernel ``name`` (n phase nodes)."""
    fns = {
        "modes_frame": lambda d, x, a: _unitary_psi_at(d, x),
        "gram": lambda d, x, a: _unitary_gram_at(d, x),
        "density": lambda d, x, a: _unitary_density_at(d, x),
        "dirac": lambda d, x, a: _unitary_dirac_at(d, x, a, n, True),
        "dirac_frame": lambda d, x, a: _unitary_dirac_at(d, x, a, n, False),
        "phase": lambda d, x, a: ray_angle(d, x, a, n),
    }
    return fns[name]


@functools.cache
def _kernel(name: str, unitary: bool = False, n: int = 64):
    if unitary:
        return jax.jit(jax.vmap(_unitary_fn(name, n), in_axes=(None, 0, None)))
    return jax.jit(jax.vmap(_POINT_FNS[name.removesuffix("_frame")], in_axes=(None, 0)))


def _connection_suffix(data, connection) -> str:
    """'' (traceless, the default) or '_frame' after validating the connection keyword."""
    _validate.choice("connection", connection, CONNECTIONS)
    return "_frame" if connection == "frame" else ""


def _map(name: str, data, points, chunk_size: int, nodes: int | None = None, atol: float = PHASE_ATOL):
    """Evaluate the per-point function ``name`` on points (..., 4) in compiled batches; numpy out."""
    chunk_size = _validate.positive_int("chunk_size", chunk_size)
    adaptive = name == "phase" and nodes is None
    n = PHASE_NODES[data.gauge] if nodes is None else _validate.positive_int("nodes", nodes)
    pts, lead = as_points(points)
    m = pts.shape[0]
    unitary = isinstance(data, UnitaryADHMData)
    after: tuple = ()
    if unitary:
        chunk_size = min(chunk_size, _UNITARY_CHUNK)
        after = (jnp.asarray(phase_anchor(data)),)
    elif name == "phase":
        raise TypeError(f"u1_phase needs UnitaryADHMData; found {type(data).__name__} (its potential is U^dag dU)")
    kern = _kernel(name, unitary, n if unitary else 64)  # n only matters for complex data
    probe = jax.eval_shape(kern, data, jax.ShapeDtypeStruct((1, 4), jnp.float64), *after)
    out = np.empty((m,) + probe.shape[1:], dtype=probe.dtype)
    if m:
        size = min(chunk_size, 1 << int(np.ceil(np.log2(m))))  # one batch size per call: few compiled shapes
        if adaptive:
            out[:] = adaptive_phase(data, pts, chunk_size, _validate.positive_float("atol", atol))
        else:
            run_batched(kern, [pts], size, out=out, args_before=(data,), args_after=after)
        bad = ~np.all(np.isfinite(out.reshape(m, -1)), axis=1)
        if np.any(bad):
            raise ValueError(
                f"zero-mode {name} is not finite at {int(bad.sum())} of {m} points (first: "
                f"{pts[np.argmax(bad)].tolist()}); the frame U is singular there (try the other gauge)"
            )
    out = out.reshape(lead + out.shape[1:])
    if name.startswith("dirac"):
        return out[..., 0], out[..., 1]
    return out


def zero_modes(
    data: ADHMData | UnitaryADHMData,
    points,
    *,
    chunk_size: int = _CHUNK,
    connection: str = "traceless",
    phase_nodes: int | None = None,
) -> np.ndarray:
    """The k normalisable zero modes psi = (1/pi) U^dag b f at points, in the gauge ``data.gauge``.

    For complex SU(N) data the default (``connection="traceless"``) are the modes of ``data.potential``,
    exp(i theta) (1/pi) U^dag b (1_2 (x) f) (sigma_2 (x) 1_k) with theta of `u1_phase`;
    ``connection="frame"`` gives the modes without the phase, those of the frame connection
    U^dag d U = data.potential + a 1_N (module docstring).  Densities and the Gram matrix are the same for
    both.  At most 256 points per compiled call.  For ADHMData both values give the same modes
    (U^dag d U is already the Sp(n) potential).

    Instanton modes obey sum_mu (D_mu psi_i) SIGMA[mu] = 0, anti-instanton modes the same with
    SIGMA_BAR (module docstring); they are orthonormal, int sum_{c, alpha} conj(psi_i) psi_j = delta_ij.

    Args:
      data: ADHMData of Sp(n), or UnitaryADHMData of SU(N), charge k.
      points: (..., 4) float64.
      chunk_size: points per compiled call, a positive integer.
      connection: "traceless" (modes of data.potential) or "frame" (modes of U^dag d U).
      phase_nodes: None (the adaptive, checked theta of `u1_phase`) or a fixed node count (unchecked).
    Returns:
      (..., k, 2n, 2) (or (..., k, N, 2)) complex128, axes (mode i, colour c, spinor alpha).
    Raises:
      TypeError when data is neither ADHMData nor UnitaryADHMData, for non-real points or a non-integer chunk_size;
      ValueError for bad points, chunk_size < 1, an unknown connection, points where the frame is singular,
      or where the phase does not converge (`u1_phase`).
    """
    data = _check_data(data)
    suffix = _connection_suffix(data, connection)
    if isinstance(data, UnitaryADHMData) and not suffix:  # exp(i theta) times the frame's modes
        theta = _map("phase", data, points, chunk_size, phase_nodes)
        return np.exp(1j * theta)[..., None, None, None] * _map("modes_frame", data, points, chunk_size)
    return _map("modes" + suffix, data, points, chunk_size, phase_nodes)


def u1_phase(
    data: UnitaryADHMData, points, *, chunk_size: int = _CHUNK, nodes: int | None = None, atol: float = PHASE_ATOL
) -> np.ndarray:
    """The angle theta(x) whose phase exp(i theta) turns frame-connection modes into modes of ``data.potential``.

    With a_mu = tr(U^dag d_mu U) / N = i d_mu theta (the flat U(1) part that ``data.potential`` drops;
    flat since tr F = 0 for these self-dual fields, common practice), lambda = i theta obeys d lambda = a,
    so U' = U exp(-lambda) has U'^dag d U' = data.potential and its modes are exp(lambda) psi
    (psi the modes of U, `zero_modes` with connection="frame").  theta is a line integral of
    Im a along the ray from the layout centre c (mean of the centres) through x:

      singular gauge (a ~ |x|^-4, measured): theta(x) = -int_|x-c|^inf Im a(c + t e) . e dt, theta -> 0 at infinity;
      regular gauge (a ~ |x|^-1, measured, so theta has a direction-dependent limit at infinity):
        theta(x) = int_0^|x-c| Im a(c + t e) . e dt, theta(c) = 0.

    For k = 1 in the singular gauge a = 0 (derived: the phase of det U equals that of det b^dag Delta,
    real for k = 1) and theta = 0.

    By default (nodes=None) the integral is adaptive: composite Gauss-Legendre panels in the ray's parameter
    s (PHASE_PANELS), each bisected while |Q(halves) - Q(panel)| exceeds atol times its width, until the
    estimates of a point sum to <= atol (returned: the halves' sums).  Guaranteed: the estimate is <= atol at
    every returned point, else ValueError.  Measured (512 random points each, SU(3) k = 2, 3 regular
    gauge): where the fixed 512-node rule was off by 2e-4 to 1.3e-3 on rays near the frame's singular points
    (N > 2), the adaptive value agrees with 16384 fixed nodes to <= 1.2e-11 (the references' own spread there
    is 9e-12); on typical points to ~1e-14.  Near those points the integrand loses digits (relative 1e-9
    measured), so a ray passing very close to one raises (1 of 2048 random points, SU(3) k = 2 regular) rather
    than returning a number not known to atol (tests/test_unitary_zero_modes.py checks such points).

    Args:
      data: UnitaryADHMData of SU(N).
      points: (..., 4) float64.
      chunk_size: points per compiled call, a positive integer (at most 256 are used).
      nodes: None (adaptive, checked) or a positive integer n: the fixed n-node Gauss-Legendre rule on the
        whole ray, unchecked (for references; the rule `u1_angle` and `dirac_residual` use).
      atol: absolute tolerance on theta of the adaptive rule, a positive float (ignored with nodes).
    Returns:
      (...,) float64.
    Raises:
      TypeError for data that are not UnitaryADHMData, non-real points or non-integer sizes;
      ValueError for bad points, sizes < 1, atol <= 0, or points where the adaptive rule's estimate stays
      above atol (naming how many, the first and the estimate).
    """
    return _map("phase", _check_data(data), points, chunk_size, nodes, atol)


def zero_mode_gram(data: ADHMData | UnitaryADHMData, points, *, chunk_size: int = _CHUNK) -> np.ndarray:
    """Pointwise overlap G_ij(x) = sum_{c, alpha} conj(psi_i) psi_j = (2/pi^2) Re(f M f)_ij (k x k work only).

    points: (..., 4) -> (..., k, k) float64 (real symmetric, gauge invariant); for SU(N) data
    (1/pi^2) sum_alpha (F M F)_(alpha i, alpha j), (..., k, k) complex128 Hermitian (2k x 2k work only).
    Raises as `zero_modes`.
    """
    return _map("gram", _check_data(data), points, chunk_size)


def zero_mode_density(data: ADHMData | UnitaryADHMData, points, *, chunk_size: int = _CHUNK) -> np.ndarray:
    """Total zero-mode density sum_i |psi_i|^2 (colour and spinor summed) = (2/pi^2) Re tr(f M f).

    M = 1 - (B - p) f (B - p)^dag (for SU(N) data (1/pi^2) tr(F M F), module docstring).  Integrates to k.

    Args:
      data: ADHMData of Sp(n), or UnitaryADHMData of SU(N), charge k.
      points: (..., 4) float64.
      chunk_size: points per compiled call, a positive integer.
    Returns:
      (...,) float64, gauge invariant.
    Raises:
      as `zero_modes`.
    """
    return _map("density", _check_data(data), points, chunk_size)


def dirac_residual(
    data: ADHMData | UnitaryADHMData,
    points,
    *,
    chunk_size: int = _CHUNK,
    connection: str = "traceless",
    phase_nodes: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise Dirac-equation check of `zero_modes` by automatic differentiation.

    Returns (residual, scale), each (...,) float64: residual = |sum_mu (D_mu psi) S_mu| with
    D_mu psi = d_mu psi + A_mu psi (jax.jacfwd; A = data.potential, same gauge as psi) and
    S = SIGMA (instanton) or SIGMA_BAR (anti-instanton), Frobenius norm over (mode, colour, spinor);
    scale = sum_mu |D_mu psi|, so residual / scale is the relative violation.  For SU(N) data S = SIGMA and
    the modes of ``zero_modes(data, points, connection=connection)`` are tested against the connection they
    belong to: A = data.potential ("traceless", the derivative includes that of the phase) or
    A = data.potential + u1_part ("frame", U^dag d U, module docstring).  The phase is differentiated, so it
    is the fixed rule of phase_nodes (None: PHASE_NODES of the gauge), unchecked: its quadrature error shows
    up in the residual rather than being hidden.
    """
    data = _check_data(data)
    return _map("dirac" + _connection_suffix(data, connection), data, points, chunk_size, phase_nodes)


def zero_mode_overlap(
    data: ADHMData | UnitaryADHMData, *, n_radial: int = 64, n_angular: int = 16, rule=None
) -> np.ndarray:
    """Overlap matrix O_ij = int d^4x sum_{c, alpha} conj(psi_i) psi_j by quadrature; (k, k) float64.

    Uses `zero_mode_gram` on a quadrature rule: ``rule`` (an object with ``points`` (M, 4) and
    ``weights`` (M,)) or by default quadrature.rule_r4 about the data's centres with radial scales
    equal to the sizes (the integrand falls like |x|^-6, which the radial map makes smooth).
    The exact answer is the identity (orthonormal modes).

    Args:
      data: ADHMData of Sp(n), or UnitaryADHMData of SU(N), charge k.
      n_radial, n_angular: positive integers, nodes of the default rule (ignored with ``rule``).
      rule: None or an object with ``points`` (M, 4) and ``weights`` (M,).
    Returns:
      (k, k) float64 (complex128 Hermitian for SU(N) data), the identity up to quadrature error.
    Raises:
      TypeError when data is neither ADHMData nor UnitaryADHMData; ValueError for a rule of the wrong shapes.
    """
    data = _check_data(data)
    if rule is None:
        n_radial = _validate.positive_int("n_radial", n_radial)
        n_angular = _validate.positive_int("n_angular", n_angular)
        # the rule holds k * n_radial * 2 n_angular^3 nodes of 5 float64 (point and weight)
        _validate.affordable("n_angular", 40.0 * 2.0 * float(n_angular) ** 3, f"an S^3 rule of n_angular={n_angular}")
        nodes = float(data.k) * n_radial * 2.0 * float(n_angular) ** 3
        _validate.affordable("n_radial", 40.0 * nodes, f"a rule of {nodes:.3e} nodes")
        rule = rule_r4(data.centers(), data.sizes(), n_radial, n_angular)
    pts = np.asarray(rule.points, dtype=np.float64)
    w = np.asarray(rule.weights, dtype=np.float64)
    if pts.ndim != 2 or pts.shape[1] != 4 or w.shape != (pts.shape[0],):
        raise ValueError(f"rule must have points (M, 4) and weights (M,); found {pts.shape} and {w.shape}")
    g = zero_mode_gram(data, pts)
    return np.einsum("p,pij->ij", w, g)
