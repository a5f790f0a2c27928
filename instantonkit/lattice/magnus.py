"""The Magnus kernels of `instantonkit.lattice.transport`: sixth-order steps, their nodes and batches.

One step of ``dW/dt = W G(t)`` over ``[t, t + h]`` from G at the three Gauss-Legendre nodes (Blanes, Casas,
Ros, BIT 40 (2000) 434 and Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151, from memory), its
exponential, the ordered product of the steps, and the compiled kernels that evaluate the generator
G = A_mu d_mu at flat batches of nodes (of a size fixed per field structure, so a link's bits do not
depend on the other links of a call: `instantonkit.core._batching`).
"""

from __future__ import annotations

import functools
import math

import jax
import jax.numpy as jnp
import numpy as np
from jax.extend import core as jex_core

from ..core import quaternion as qt
from ..core._pytree import structure_key
from ..engine.fields import hook


def mm_aos(a, b):
    """Batched small matrix product written as a broadcast sum (fuses well on CPU); (..., N, N)."""
    return jnp.sum(a[..., :, :, None] * b[..., None, :, :], axis=-2)


# -- Magnus steps -------------------------------------------------------------------------------------

GL3 = (0.5 - math.sqrt(15.0) / 10.0, 0.5, 0.5 + math.sqrt(15.0) / 10.0)


def _rcomm(a, b):
    """Reversed commutator b a - a b: Magnus terms for W' = W G from those for Y' = G Y (transpose)."""
    return mm_aos(b, a) - mm_aos(a, b)


def magnus6(g1, g2, g3, h):
    """Sixth-order Magnus exponent of one step for W' = W G from G at the three Gauss-Legendre nodes.

    alpha1 = h G2, alpha2 = sqrt(15) h (G3 - G1) / 3, alpha3 = 10 h (G3 - 2 G2 + G1) / 3 and
    Omega = alpha1 + alpha3 / 12 + [-20 alpha1 - alpha3 + [alpha1, alpha2], alpha2 - [alpha1, 2 alpha3 + [alpha1, alpha2]] / 60] / 240
    (the three-node Gauss-Legendre scheme of Blanes, Casas, Oteo, Ros, Phys. Rep. 470 (2009) 151,
    from memory; the sign of the 1/60 term was fixed by the sixth-order convergence test against
    scipy's DOP853 in tests/test_lattice.py), with every commutator reversed because here the matrix
    multiplies from the right (W' = W G is the transpose of Y' = G^T Y).
    """
    a1 = h * g2
    a2 = (math.sqrt(15.0) / 3.0) * h * (g3 - g1)
    a3 = (10.0 / 3.0) * h * (g3 - 2.0 * g2 + g1)
    c12 = _rcomm(a1, a2)
    inner = a2 - _rcomm(a1, 2.0 * a3 + c12) / 60.0
    return a1 + a3 / 12.0 + _rcomm(-20.0 * a1 - a3 + c12, inner) / 240.0


def expm_antihermitian(omega):
    """exp of an anti-Hermitian (N, N) matrix: quaternion exponential for N = 2, eigh otherwise."""
    n = omega.shape[-1]
    if n == 2:
        tr = jnp.trace(omega) / 2.0
        q = qt.from_matrix(omega - tr * jnp.eye(2))
        return jnp.exp(tr) * qt.to_matrix(qt.qexp(q))
    herm = 1j * omega
    herm = 0.5 * (herm + jnp.conj(herm.T))
    w, v = jnp.linalg.eigh(herm)
    return (v * jnp.exp(-1j * w)[None, :]) @ jnp.conj(v.T)


#: Potential evaluations per compiled call when the potential calls LAPACK.  jax 0.10.2 on CPU left
#: batched chains of small LAPACK calls (SU(3) frames: Cholesky then inverse, with their derivatives)
#: idle and unfinished from ~10^4 matrices per call (3 nodes x 4096 links, measured), while 3 x 256
#: finish; so such a potential is called on at most 768 nodes at a time.
NODE_BATCH = 768
#: ... and when it calls none (the library's ADHM potentials, closed-form ansaetze): larger calls cost
#: less per node (measured, charge-2 SU(2) data: 1.67 / 1.43 / 1.25 us per node at 768 / 4096 / 16384).
NODE_BATCH_PLAIN = 4096
#: Magnus steps per compiled call of the step kernel: its exponentials use eigh for N > 2 (kept below
#: the bound above); for N = 2 they are quaternion exponentials and larger calls cost less
#: (measured: 1.95 / 0.85 us per step at 256 / 2048).
STEP_BATCH = 256
STEP_BATCH_PLAIN = 2048
#: Primitives that are LAPACK calls on CPU (a potential using any of them gets the small node batch).
_LAPACK_PRIMITIVES = ("cholesky", "lu", "eigh", "eig", "svd", "qr", "triangular_solve", "schur", "householder_product")
#: Node-steps (links x steps) per pass of `_magnus_at`, bounding its temporary memory.
PASS_STEPS = 1 << 18


def _generator(field, x, d):
    """G = A_mu(x) d_mu at one node; (4,), (4,) -> (N, N)."""
    a = field.potential(x)
    return a[0] * d[0] + a[1] * d[1] + a[2] * d[2] + a[3] * d[3]


def _calls_lapack(jaxpr) -> bool:
    """Whether a jaxpr, or any jaxpr nested in it, contains a LAPACK primitive (_LAPACK_PRIMITIVES)."""
    if any(eqn.primitive.name in _LAPACK_PRIMITIVES for eqn in jaxpr.eqns):
        return True
    return any(_calls_lapack(sub) for sub in jex_core.subjaxprs(jaxpr))


_BATCH_MEMO: dict = {}


def node_batch(field) -> int:
    """Nodes per potential call for ``field``: NODE_BATCH_PLAIN unless its potential calls LAPACK.

    Depends only on the field's structure (its traced potential), so a link's bits do not depend on
    the other links of a call (`instantonkit.core._batching`); memoised per pytree structure.
    """
    key = structure_key(field)
    hit = _BATCH_MEMO.get(key) if key is not None else None
    if hit is None:
        jaxpr = jax.make_jaxpr(lambda f, x: f.potential(x))(field, jnp.zeros(4))
        hit = NODE_BATCH if _calls_lapack(jaxpr.jaxpr) else NODE_BATCH_PLAIN
        if key is not None:
            _BATCH_MEMO[key] = hit
    return hit


def generators(field, pts, dirs):
    """G = A_mu d_mu at a batch of nodes (m, 4), (m, 4) -> (m, N, N): the ``generator_batch`` hook, else vmapped."""
    batch = hook(field, "generator_batch")
    return batch(pts, dirs) if batch is not None else jax.vmap(_generator, in_axes=(None, 0, 0))(field, pts, dirs)


@functools.cache
def generator_kernel():
    return jax.jit(generators)


def _step_exp(g, h):
    """exp(Omega) of one sixth-order Magnus step from G at its three nodes; g: (3, N, N)."""
    return expm_antihermitian(magnus6(g[0], g[1], g[2], h))


@functools.cache
def step_kernel():
    return jax.jit(jax.vmap(_step_exp, in_axes=(0, None)))


def pairwise_product(e, mul=np.matmul, cat=np.concatenate):
    """E_1 E_2 ... E_m of factors on axis 1 (e.g. (M, m, N, N)): pairwise products (log2 m rounds, no long
    chain for XLA to fuse), earlier factors left; ``mul``/``cat`` the product and concatenation to use."""
    while e.shape[1] > 1:
        pairs = e.shape[1] // 2
        prod = mul(e[:, 0 : 2 * pairs : 2], e[:, 1 : 2 * pairs : 2])
        e = cat([prod, e[:, 2 * pairs :]], axis=1) if e.shape[1] % 2 else prod
    return e[:, 0]
