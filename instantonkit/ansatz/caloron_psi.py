"""Kraan-van Baal's scalar psi of a charge-1 SU(N) caloron and s = -1/2 box box log psi in closed form.

For a caloron of period beta with constituents at y_m (m = 1..N) of fractions nu_m (sum 1),
k_m = 2 pi nu_m / beta, z_m = |x_vec - y_m|^2 and D_m = |y_{m+1} - y_m| (cyclic, y_{N+1} = y_1),

    psi = 1/2 tr(A_N ... A_1) - cos(2 pi t / beta),
    A_m = (1/r_m) [[r_m, D_m], [0, r_{m+1}]] [[cosh k_m r_m, sinh k_m r_m], [sinh k_m r_m, cosh k_m r_m]]

(Kraan, van Baal, Phys. Lett. B 435 (1998) 389 and Nucl. Phys. B 533 (1998) 627, from memory).
Conjugating A_m by diag(1, r_m) and diag(1, 1/r_{m+1}) telescopes in the trace and leaves
B_m = [[c_m + D_m S_m, z_m S_m + D_m c_m], [S_m, c_m]] with c_m = cosh(k_m r_m), S_m = sinh(k_m r_m) / r_m,
both entire functions of z_m, so psi = 1/2 tr(B_N ... B_1) - cos(2 pi t/beta) is a function of
(z_1, ..., z_N, t) and multilinear in the B_m.  Its partial derivatives in the z_m are traces of
products of derivatives of the B_m.

Since |grad z_a . grad z_b| = 4 (x - y_a).(x - y_b) = 4 g_ab with g_ab = (z_a + z_b - |y_a - y_b|^2) / 2 and
box z_a = 6, the 4-d Laplacian of any function G(z, t) is again a function of (z, t):

    box G = 4 g_ab G_ab + 6 sum_a G_a + G_tt,

and box box G follows from the partial derivatives of G up to fourth order (formula in `_bilaplacian`).
With G = log psi these are the cumulants of the partials of psi.  Every c-, S- and psi-quantity is
scaled by sigma = prod_m exp(-k_m r_m) where k_m r_m >= `_SWITCH` (no overflow); the scale cancels in
every ratio.  Everything here is batch-major: arrays of shape (m,) combined elementwise.

`flux_charge` gives the charge inside a sphere (times one period) as the flux of grad box log psi
(Gauss's theorem), the route that shows where the charge sits: far out, box log psi tends to
sum_m 4 pi nu_m / (beta r_m), whose flux gives Q = sum_m nu_m = 1.
"""

from __future__ import annotations

import itertools
import math

import jax.numpy as jnp
import numpy as np

#: k r below which the radial functions are Taylor series in (k r)^2; above, the recurrence in z.
_SWITCH = 2.0
#: Derivatives in z_m needed for box box (fourth order).
_ORDER = 4
_TERMS = 15
#: S^(n)(z) = k^(2n+1) sum_j _SERIES[n, j] (k^2 z)^j with _SERIES[n, j] = (j+n)! / (j! (2j+2n+1)!).
_SERIES = np.array(
    [
        [math.factorial(j + n) / (math.factorial(j) * math.factorial(2 * j + 2 * n + 1)) for j in range(_TERMS)]
        for n in range(_ORDER + 1)
    ]
)
_COSH = np.array([1.0 / math.factorial(2 * j) for j in range(_TERMS)])


def _horner(coef, x):
    out = jnp.zeros_like(x) + coef[-1]
    for c in coef[-2::-1]:
        out = out * x + c
    return out


def _binom(n: int, j: int) -> float:
    return float(math.comb(n, j))


def radial_derivatives(z, k, order: int = _ORDER):
    """z-derivatives of sigma c, sigma S and sigma for c = cosh(k sqrt z), S = sinh(k sqrt z)/sqrt z.

    sigma(z) = 1 where k sqrt z < `_SWITCH` (Taylor series: S^(n) = k^(2n+1) sum_j (j+n)!/(j! (2j+2n+1)!)
    (k^2 z)^j, c' = (k/2) S), else sigma = exp(-k sqrt z) and, with h = exp(-2 k sqrt z), u = z^(-1/2):
    sigma c = (1 + h)/2, sigma S = u (1 - h)/2, h' = -k u h, sigma' = -(k/2) u sigma (Leibniz rule for
    higher orders; every term of a sum has the same sign, so nothing cancels far from the constituent).
    sigma is a function of z here, so the derivatives are those of the scaled functions themselves.
    z: (m,) >= 0; k >= 0 (k = 0 gives c = 1, S = 0).
    Returns (c: list of order+1 (m,), S: same, sigma: same): the n-th derivatives.
    """
    a2 = k * k * z
    small = a2 < _SWITCH**2
    zs = jnp.where(small, a2, 0.0)
    s_small = [k ** (2 * n + 1) * _horner(_SERIES[n], zs) for n in range(order + 1)]
    c_small = [_horner(_COSH, zs)] + [0.5 * k * s_small[n - 1] for n in range(1, order + 1)]
    zl = jnp.where(small, _SWITCH**2 / jnp.maximum(k * k, 1e-300), z)
    root = jnp.sqrt(zl)
    u = [1.0 / root]
    for j in range(1, order + 1):
        u.append(u[-1] * (0.5 - j) / zl)
    h = [jnp.exp(-2.0 * k * root)]
    sig = [jnp.exp(-k * root)]
    for n in range(1, order + 1):
        h.append(-k * sum(_binom(n - 1, j) * u[j] * h[n - 1 - j] for j in range(n)))
        sig.append(-0.5 * k * sum(_binom(n - 1, j) * u[j] * sig[n - 1 - j] for j in range(n)))
    c_large = [0.5 * (1.0 + h[0])] + [0.5 * h[n] for n in range(1, order + 1)]
    s_large = [0.5 * (u[n] - sum(_binom(n, j) * u[j] * h[n - j] for j in range(n + 1))) for n in range(order + 1)]
    one = [jnp.ones_like(z)] + [jnp.zeros_like(z)] * order

    def pick(a, b):
        return [jnp.where(small, x, y) for x, y in zip(a, b)]

    return pick(c_small, c_large), pick(s_small, s_large), pick(one, sig)


def _b_matrices(z, k, dist, order: int):
    """[B^(n)] for n = 0..order as 2 x 2 nested lists of (m,) arrays (scaled), and [sigma^(n)].

    B = [[c + D S, z S + D c], [S, c]]; (z S)^(n) = z S^(n) + n S^(n-1).
    """
    cv, sv, sig = radial_derivatives(z, k, order)
    out = []
    for n in range(order + 1):
        zs = z * sv[n] + (n * sv[n - 1] if n else 0.0)
        out.append([[cv[n] + dist * sv[n], zs + dist * cv[n]], [sv[n], cv[n]]])
    return out, sig


def _matmul(a, b):
    return [[a[i][0] * b[0][j] + a[i][1] * b[1][j] for j in range(2)] for i in range(2)]


def multi_indices(n: int, order: int):
    """Multi-indices alpha in N^n with |alpha| <= order (tuples of counts), in a fixed order."""
    return [a for a in itertools.product(range(order + 1), repeat=n) if sum(a) <= order]


def psi_partials(zs, ks, dists, order: int = _ORDER):
    """{alpha: d^alpha P}, {alpha: d^alpha sigma} for P = 1/2 tr(B_N ... B_1) (scaled psi without cos).

    zs, ks, dists: sequences of N (m,) arrays / numbers (z_m, k_m, D_m).  alpha counts derivatives in z_m;
    sigma = prod_m sigma_m(z_m), so psi (scaled) = P - cos(2 pi t / beta) sigma.
    """
    mats, sigs = [], []
    for z, k, dist in zip(zs, ks, dists):
        b, s = _b_matrices(z, k, dist, order)
        mats.append(b)
        sigs.append(s)
    part, sig = {}, {}
    for alpha in multi_indices(len(zs), order):
        prod = mats[0][alpha[0]]
        sg = sigs[0][alpha[0]]
        for m in range(1, len(zs)):
            prod = _matmul(mats[m][alpha[m]], prod)
            sg = sg * sigs[m][alpha[m]]
        part[alpha] = 0.5 * (prod[0][0] + prod[1][1])
        sig[alpha] = sg
    return part, sig


def _set_partitions(items):
    """All partitions of a list into non-empty blocks (lists of lists)."""
    if len(items) == 1:
        yield [items]
        return
    first, rest = items[0], items[1:]
    for part in _set_partitions(rest):
        for i in range(len(part)):
            yield part[:i] + [[first] + part[i]] + part[i + 1 :]
        yield [[first]] + part


#: (-1)^(b-1) (b-1)!: the weight of a partition into b blocks in the cumulant (log-derivative) formula.
_CUMULANT_WEIGHT = {1: 1.0, 2: -1.0, 3: 2.0, 4: -6.0}


def _log_derivatives(v, nvar: int):
    """{sorted index tuple I: d^I log psi} for |I| = 1..4 from v(I) = d^I psi / psi (Faa di Bruno for log).

    d^I log psi = sum over set partitions pi of I of (-1)^(|pi|-1) (|pi|-1)! prod_{B in pi} v(B).
    """
    out = {}
    for n in range(1, _ORDER + 1):
        for idx in itertools.combinations_with_replacement(range(nvar), n):
            total = 0.0
            for part in _set_partitions(list(idx)):
                term = _CUMULANT_WEIGHT[len(part)]
                for block in part:
                    term = term * v(tuple(sorted(block)))
                total = total + term
            out[idx] = total
    return out


def _bilaplacian(G, g, n: int):
    """box box G from d^I G (I over z_1..z_n and t = index n) and the metric g_ab (n x n nested list).

    With g~ = g on z-indices, g~_tt = 1/4, e_a = 1 on z-indices and 0 on t (box G = 4 g~_ab G_ab + 6 e_a G_a):
      box box G = 16 g~_ab g~_cd G_abcd + sum_abc g~_ab e_c (16 e_a + 16 e_b + 48) G_abc + 60 sum_{ab in z} G_ab.
    """
    t = n
    gt = [[g[a][b] for b in range(n)] + [0.0] for a in range(n)] + [[0.0] * n + [0.25]]
    pairs = [(a, b) for a in range(n + 1) for b in range(n + 1) if (a == t) == (b == t)]

    def G_(*idx):
        return G[tuple(sorted(idx))]

    four = sum(gt[a][b] * gt[c][d] * G_(a, b, c, d) for a, b in pairs for c, d in pairs)
    three = sum(gt[a][b] * (80.0 if a != t else 48.0) * G_(a, b, c) for a, b in pairs for c in range(n))
    two = sum(G_(a, b) for a in range(n) for b in range(n))
    return 16.0 * four + three + 60.0 * two


def _geometry(points, positions, fractions, period):
    pts = jnp.asarray(points)
    y = jnp.asarray(positions)
    nu = jnp.asarray(fractions)
    n = y.shape[0]
    ks = [2.0 * np.pi * nu[m] / period for m in range(n)]
    zs = [jnp.sum((pts[:, :3] - y[m]) ** 2, axis=-1) for m in range(n)]
    sq = [[jnp.sum((y[a] - y[b]) ** 2) for b in range(n)] for a in range(n)]
    dists = [jnp.sqrt(sq[(m + 1) % n][m]) for m in range(n)]
    return pts, n, ks, zs, sq, dists


def log_psi_derivatives(points, positions, fractions, period):
    """{sorted index tuple I: d^I log psi} in the variables (z_1, ..., z_N, t) (t = index N), |I| = 1..4.

    points: (m, 4); positions: (N, 3); fractions: (N,); period: beta.  Returns (dict of (m,), z list, sq)
    where sq[a][b] = |y_a - y_b|^2.
    """
    pts, n, ks, zs, sq, dists = _geometry(points, positions, fractions, period)
    part, sig = psi_partials(zs, ks, dists)
    kt = 2.0 * np.pi / period
    ang = kt * pts[:, 3]
    cos_t = [jnp.cos(ang), -kt * jnp.sin(ang), -(kt**2) * jnp.cos(ang), kt**3 * jnp.sin(ang), kt**4 * jnp.cos(ang)]
    zero = (0,) * n
    psi = part[zero] - cos_t[0] * sig[zero]
    inv = 1.0 / psi

    def v(idx):
        alpha = [0] * n
        for i in idx:
            if i < n:
                alpha[i] += 1
        j = len(idx) - sum(alpha)
        num = -cos_t[j] * sig[tuple(alpha)]
        if j == 0:
            num = num + part[tuple(alpha)]
        return num * inv

    return _log_derivatives(v, n + 1), zs, sq


def caloron_action_density(points, positions, fractions, period):
    """s = -1/2 box box log psi of a charge-1 SU(N) caloron at a batch of points; (m, 4) -> (m,).

    positions: (N, 3) constituent positions y_m; fractions: (N,) nu_m >= 0 summing to 1; period: beta.
    Self-dual, so the charge density is s / (8 pi^2) (conventions module).  Time is measured from 0.
    """
    derivs, zs, sq = log_psi_derivatives(points, positions, fractions, period)
    n = len(zs)
    g = [[zs[a] if a == b else 0.5 * (zs[a] + zs[b] - sq[a][b]) for b in range(n)] for a in range(n)]
    return -0.5 * _bilaplacian(derivs, g, n)


def log_psi(points, positions, fractions, period):
    """log psi (unscaled: log of the scaled psi minus log sigma) at a batch of points; (m, 4) -> (m,)."""
    pts, n, ks, zs, _, dists = _geometry(points, positions, fractions, period)
    part, sig = psi_partials(zs, ks, dists, order=0)
    zero = (0,) * n
    psi = part[zero] - jnp.cos(2.0 * np.pi * pts[:, 3] / period) * sig[zero]
    return jnp.log(psi) - jnp.log(sig[zero])


def box_log_psi_gradient(points, positions, fractions, period):
    """The spatial gradient of box log psi at a batch of points; (m, 4) -> (m, 3).

    With K = box log psi (of the scaled psi, plus box of sum_m k_m r_m where constituent m is scaled) = 4 g~_ab G_ab + 6 sum_a G_a (the operator of the module docstring),
    d_i K = sum_c K_c 2 (x - y_c)_i and K_c = 10 sum_b G_bc + 4 g_ab G_abc + G_ctt (c, a, b over z).
    """
    derivs, zs, sq = log_psi_derivatives(points, positions, fractions, period)
    n = len(zs)
    t = n
    g = [[zs[a] if a == b else 0.5 * (zs[a] + zs[b] - sq[a][b]) for b in range(n)] for a in range(n)]

    def G_(*idx):
        return derivs[tuple(sorted(idx))]

    pts = jnp.asarray(points)
    y = jnp.asarray(positions)
    out = jnp.zeros((pts.shape[0], 3))
    for c in range(n):
        kc = (
            10.0 * sum(G_(b, c) for b in range(n))
            + 4.0 * sum(g[a][b] * G_(a, b, c) for a in range(n) for b in range(n))
            + G_(c, t, t)
        )
        out = out + (2.0 * kc)[:, None] * (pts[:, :3] - y[c])
    # Where constituent m is scaled, log psi = log(scaled psi) + k_m r_m, and box(k r) = 2 k / r.
    for m in range(n):
        k = 2.0 * np.pi * jnp.asarray(fractions)[m] / period
        far = k * k * zs[m] >= _SWITCH**2
        r = jnp.sqrt(jnp.where(far, zs[m], 1.0))
        out = out + jnp.where(far, -2.0 * k / r**3, 0.0)[:, None] * (pts[:, :3] - y[m])
    return out


def flux_charge(positions, fractions, period, center, radius, n_sphere: int = 48, n_time: int = 16):
    """Q inside the ball |x_vec - center| < radius over one period, by Gauss's theorem; a float.

    int s d^4x = -1/2 oint_{S^2_R x S^1} n . grad box log psi dS dt (s = -1/2 box box log psi; the x4
    boundary cancels by periodicity), and Q = S / 8 pi^2 for the self-dual caloron.  Product rule:
    Gauss-Legendre in cos(theta) (``n_sphere`` nodes), the trapezoid rule in phi (2 n_sphere) and in t
    (``n_time``).  As radius -> infinity this tends to sum_m nu_m = 1: far away log psi ~ sum_m 2 pi nu_m
    r_m / beta, box of which is sum_m 4 pi nu_m / (beta r_m), whose flux is -16 pi^2 nu_m / beta each.
    """
    ct, wt = np.polynomial.legendre.leggauss(n_sphere)
    ph = 2.0 * np.pi * (np.arange(2 * n_sphere) + 0.5) / (2 * n_sphere)
    st = np.sqrt(1.0 - ct**2)
    dirs = np.stack(
        [st[:, None] * np.cos(ph), st[:, None] * np.sin(ph), np.broadcast_to(ct[:, None], st.shape + ph.shape)], -1
    )
    dirs = dirs.reshape(-1, 3)
    wd = np.repeat(wt, 2 * n_sphere) * (np.pi / n_sphere)
    ts = (np.arange(n_time) + 0.5) * period / n_time
    c = np.asarray(center, dtype=np.float64)[:3]
    pts = np.concatenate(
        [
            np.broadcast_to((c + radius * dirs)[:, None, :], (dirs.shape[0], n_time, 3)),
            np.broadcast_to(ts[None, :, None], (dirs.shape[0], n_time, 1)),
        ],
        axis=-1,
    ).reshape(-1, 4)
    grad = np.asarray(box_log_psi_gradient(pts, positions, fractions, period)).reshape(dirs.shape[0], n_time, 3)
    flux = np.einsum("d,dti,di->", wd, grad, dirs) * radius**2 * (period / n_time)
    return float(-0.5 * flux / (8.0 * np.pi**2))
