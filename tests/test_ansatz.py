"""Specification of instantonkit.ansatz.classic: the classic ansaetze as fields, their closed forms and anti()."""

import dataclasses
import functools

import jax
import jax.numpy as jnp
import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz import classic as an
from instantonkit.engine import fields as fl

PI = np.pi
RNG = np.random.default_rng(20240611)


def _bpst_density(points, center, rho):
    """48 rho^4 / (|x - a|^2 + rho^2)^4 in plain numpy."""
    y2 = np.sum((np.asarray(points) - np.asarray(center)) ** 2, axis=-1)
    return 48.0 * rho**4 / (y2 + rho**2) ** 4


def _bilaplacian(fn):
    """x -> box box fn(x) by nested jax Hessians (4th derivatives), vmapped and jitted."""
    lap = lambda x: jnp.trace(jax.hessian(fn)(x))  # noqa: E731
    return jax.jit(jax.vmap(lambda x: jnp.trace(jax.hessian(lap)(x))))


def _away(points, poles, dist):
    """Keep the points at distance >= dist from every pole."""
    d = np.linalg.norm(points[:, None] - np.asarray(poles)[None], axis=-1)
    return points[np.min(d, axis=1) >= dist]


def _rel(a, b):
    return float(np.max(np.abs(np.asarray(a) / np.asarray(b) - 1.0)))


CENTER = np.array([0.3, -0.2, 0.5, 0.1])
RHO = 0.8
PTS = RNG.normal(size=(16, 4)) * 1.2 + CENTER


# -- BPST in closed form ----------------------------------------------------------------------------


@pytest.mark.parametrize("gauge", ["regular", "singular"])
@pytest.mark.parametrize("method", ["auto", "closed", "autodiff"])
def test_bpst_field_action_density_is_the_bpst_profile(gauge, method):
    # s = 48 rho^4 / (|x - a|^2 + rho^2)^4: Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85.
    f = ik.bpst_field(CENTER, RHO, gauge=gauge)
    s = fl.action_density(f, PTS, method=method)
    assert _rel(s, _bpst_density(PTS, CENTER, RHO)) <= 1e-12


@pytest.mark.parametrize("gauge", ["regular", "singular"])
@pytest.mark.parametrize("method", ["auto", "closed", "autodiff"])
def test_bpst_field_charge_density_is_action_over_8pi2(gauge, method):
    # q = s / 8 pi^2 for the (self-dual) BPST instanton: Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975)
    # 85.
    f = ik.bpst_field(CENTER, RHO, gauge=gauge)
    q = fl.charge_density(f, PTS, method=method)
    assert _rel(q, _bpst_density(PTS, CENTER, RHO) / (8 * PI**2)) <= 1e-12


@pytest.mark.parametrize("gauge", ["regular", "singular"])
def test_bpst_field_closed_field_strength_equals_autodiff(gauge):
    # F_mu nu = d_mu A_nu - d_nu A_mu + [A_mu, A_nu] (conventions module) against the closed form.
    f = ik.bpst_field(CENTER, RHO, gauge=gauge, orientation=[0.5, 0.5, -0.5, 0.5])
    closed = fl.field_strength(f, PTS)
    auto = fl.field_strength(f, PTS, method="autodiff")
    assert np.max(np.abs(closed - auto)) <= 1e-12 * np.max(np.abs(closed))


@pytest.mark.parametrize("gauge", ["regular", "singular"])
def test_bpst_field_potential_agrees_with_adhm(gauge):
    # The same gauge conventions are derived independently from ADHM (Atiyah, Hitchin, Drinfeld, Manin,
    # Phys. Lett. A 65 (1978) 185) in instantonkit.adhm.quaternionic; both must give the same potential.
    orient = np.array([0.2, -0.4, 0.8, 0.4])
    orient /= np.linalg.norm(orient)
    mine = fl.potential(ik.bpst_field(CENTER, RHO, gauge=gauge, orientation=orient), PTS)
    adhm = fl.potential(ik.bpst(CENTER, RHO, orient).with_gauge(gauge), PTS)
    assert np.max(np.abs(mine - adhm)) <= 1e-12


@pytest.mark.parametrize("gauge", ["regular", "singular"])
def test_bpst_field_densities_agree_with_adhm(gauge):
    # ADHM k = 1 density (its k x k closed form), BPST profile (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59
    # (1975) 85); autodiff route for ours.
    mine = fl.action_density(ik.bpst_field(CENTER, RHO, gauge=gauge), PTS, method="autodiff")
    adhm = fl.action_density(ik.bpst(CENTER, RHO).with_gauge(gauge), PTS)
    assert _rel(mine, adhm) <= 1e-12


def test_bpst_field_regular_gauge_potential_is_smooth_at_the_centre():
    # Regular gauge A = eta y / (y^2 + rho^2) vanishes at y = 0 ('t Hooft, Phys. Rev. D 14 (1976) 3432).
    a = fl.potential(ik.bpst_field(CENTER, RHO), CENTER[None])
    assert np.max(np.abs(a)) == 0.0


def test_bpst_field_orientation_is_a_global_gauge_rotation():
    # A -> Omega A Omega^dag for constant Omega leaves densities invariant (common practice).
    f = ik.bpst_field(CENTER, RHO, orientation=np.array([0.0, 0.6, 0.0, 0.8]))
    assert _rel(fl.action_density(f, PTS, method="autodiff"), _bpst_density(PTS, CENTER, RHO)) <= 1e-12


def test_bpst_field_size_is_differentiable_through_the_pytree():
    # d s / d rho of 48 rho^4 / (y^2 + rho^2)^4 = 192 rho^3 (y^2 - rho^2) / (y^2 + rho^2)^5 (calculus).
    x = PTS[0]
    grad = jax.grad(lambda r: an.BPSTField(CENTER, r, np.array([1.0, 0, 0, 0])).action_density(x))(RHO)
    y2 = np.sum((x - CENTER) ** 2)
    assert abs(float(grad) / (192 * RHO**3 * (y2 - RHO**2) / (y2 + RHO**2) ** 5) - 1) <= 1e-12


# -- 't Hooft ansatz --------------------------------------------------------------------------------

TH_C = RNG.normal(size=(3, 4))
TH_R = np.array([0.6, 1.1, 0.8])
TH_PTS = _away(RNG.normal(size=(24, 4)) * 1.5, TH_C, 0.2)[:16]


def test_thooft_k1_potential_is_singular_gauge_bpst():
    # phi = 1 + rho^2/y^2 gives the singular-gauge BPST potential ('t Hooft, Phys. Rev. D 14 (1976) 3432).
    mine = fl.potential(ik.thooft(CENTER[None], [RHO]), PTS)
    ref = fl.potential(ik.bpst_field(CENTER, RHO, gauge="singular"), PTS)
    assert np.max(np.abs(mine - ref)) <= 1e-13


def test_thooft_k1_density_equals_adhm_bpst():
    # BPST profile (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) via the ADHM k = 1 data of
    # instantonkit.adhm.quaternionic.
    mine = fl.action_density(ik.thooft(CENTER[None], [RHO]), PTS)
    assert _rel(mine, fl.action_density(ik.bpst(CENTER, RHO), PTS)) <= 1e-12


@functools.cache
def _thooft_bilaplacian_reference():
    def log_phi(x):
        return jnp.log(1.0 + jnp.sum(TH_R**2 / jnp.sum((x - TH_C) ** 2, axis=-1)))

    return -0.5 * np.asarray(_bilaplacian(log_phi)(TH_PTS))


@pytest.mark.parametrize("method", ["auto", "autodiff"])
def test_thooft_action_density_is_minus_half_bilaplacian_of_log_phi(method):
    # s = -1/2 box box log phi away from the poles (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642;
    # from memory); independent route: 4th derivatives of our own log phi by nested jax Hessians.
    ref = _thooft_bilaplacian_reference()
    assert _rel(fl.action_density(ik.thooft(TH_C, TH_R), TH_PTS, method=method), ref) <= 1e-8


def test_thooft_is_self_dual():
    # F = *F for the 't Hooft ansatz ('t Hooft 1976, unpublished; Wilczek 1977; from memory); residual by autodiff F.
    res = fl.self_duality_residual(ik.thooft(TH_C, TH_R), TH_PTS, method="autodiff")
    assert np.max(res) <= 1e-12


def test_thooft_charge_density_is_positive_action_over_8pi2():
    # Self-dual => q = s / 8 pi^2 > 0 with q = -1/(32 pi^2) eps tr F F, eps_1234 = +1 (conventions module).
    f = ik.thooft(TH_C, TH_R)
    q = fl.charge_density(f, TH_PTS, method="autodiff")
    s = fl.action_density(f, TH_PTS, method="autodiff")
    assert np.all(q > 0) and _rel(q * 8 * PI**2, s) <= 1e-12


def test_thooft_closed_field_strength_equals_autodiff():
    # Closed F from phi, grad phi, Hess phi (module docstring) against jax.jacfwd of A (conventions module).
    f = ik.thooft(TH_C, TH_R)
    closed = fl.field_strength(f, TH_PTS)
    assert np.max(np.abs(closed - fl.field_strength(f, TH_PTS, method="autodiff"))) <= 1e-12 * np.max(np.abs(closed))


def test_thooft_reports_charge_k_and_hint():
    f = ik.thooft(TH_C, TH_R)
    centre, scale = f.hint()
    assert f.charge == 3 and np.allclose(centre, TH_C.mean(0)) and scale >= TH_R.max()


# -- JNR ansatz -------------------------------------------------------------------------------------

JNR_P = RNG.normal(size=(4, 4))
JNR_W = np.array([0.7, 1.2, 0.5, 0.9])
JNR_PTS = _away(RNG.normal(size=(24, 4)) * 1.5, JNR_P, 0.2)[:16]


@functools.cache
def _jnr_bilaplacian_reference():
    def log_phi(x):
        return jnp.log(jnp.sum(JNR_W**2 / jnp.sum((x - JNR_P) ** 2, axis=-1)))

    return -0.5 * np.asarray(_bilaplacian(log_phi)(JNR_PTS))


@pytest.mark.parametrize("method", ["auto", "autodiff"])
def test_jnr_action_density_is_minus_half_bilaplacian_of_log_phi(method):
    # s = -1/2 box box log phi, phi = sum lambda_i^2/|x - y_i|^2 (Jackiw, Nohl, Rebbi, Phys. Rev. D 15
    # (1977) 1642; from memory); independent route: nested jax Hessians of our own log phi.
    ref = _jnr_bilaplacian_reference()
    assert _rel(fl.action_density(ik.jnr(JNR_P, JNR_W), JNR_PTS, method=method), ref) <= 1e-8


def test_jnr_is_self_dual_with_positive_charge_density():
    # JNR fields are self-dual (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642, from memory): residual 0 and q = s / 8
    # pi^2 > 0.
    f = ik.jnr(JNR_P, JNR_W)
    res = fl.self_duality_residual(f, JNR_PTS, method="autodiff")
    q = fl.charge_density(f, JNR_PTS)
    assert np.max(res) <= 1e-12 and np.all(q > 0) and f.charge == 3


def test_jnr_two_poles_is_a_bpst_instanton():
    # k = 1 JNR (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642): lambda1^2/|x-y1|^2 + lambda2^2/|x-y2|^2 = L (|x-a|^2
    # + rho^2)/(|x-y1|^2 |x-y2|^2), L = lambda1^2 + lambda2^2, a = (lambda1^2 y2 + lambda2^2 y1)/L, rho^2 = lambda1^2
    # lambda2^2 |y1-y2|^2/L^2 (completing the square); box box log|x-y|^2 = 0 in four dimensions, so s is the BPST
    # profile (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) of (a, rho).
    y = np.array([[0.4, -0.3, 0.2, 1.0], [-0.5, 0.6, 0.1, -0.7]])
    lam = np.array([0.9, 1.4])
    big = np.sum(lam**2)
    a = (lam[0] ** 2 * y[1] + lam[1] ** 2 * y[0]) / big
    rho = lam[0] * lam[1] * np.linalg.norm(y[0] - y[1]) / big
    pts = _away(RNG.normal(size=(24, 4)), y, 0.2)[:16]
    assert _rel(fl.action_density(ik.jnr(y, lam), pts), _bpst_density(pts, a, rho)) <= 1e-11


# -- Harrington-Shepard caloron ---------------------------------------------------------------------

CAL = dict(size=0.9, period=1.3, center=(0.1, 0.0, -0.2, 0.2))


def _cal_phi_series(x, size, period, center):
    """1 + sum_n rho^2 / (r^2 + (t - n beta)^2) by mpmath.nsum (periodic 't Hooft sum)."""
    y = np.asarray(x) - np.asarray(center)
    r2, t = mpmath.mpf(float(np.sum(y[:3] ** 2))), mpmath.mpf(float(y[3]))
    beta, rho2 = mpmath.mpf(period), mpmath.mpf(size) ** 2
    return float(1 + mpmath.nsum(lambda n: rho2 / (r2 + (t - n * beta) ** 2), [-mpmath.inf, mpmath.inf]))


def test_caloron_phi_equals_the_periodic_sum_of_thooft_poles():
    # Harrington, Shepard, Phys. Rev. D 17 (1978) 2122 (from memory): phi is the 't Hooft phi with
    # equal poles at c + n beta e_4; the series is summed by mpmath.  Points include r = 0 (the series
    # branch), r = 1e-8, the branch threshold 2 pi r = beta, and large r.
    f = ik.caloron(**CAL)
    c = np.asarray(CAL["center"])
    r_star = CAL["period"] / (2 * PI)
    offsets = [
        (0, 0, 0, 0.5),
        (1e-8, 0, 0, 0.5),
        (r_star, 0, 0, 0.1),
        (0, r_star * (1 + 1e-9), 0, -0.3),
        (0.3, 0.1, 0.0, -0.4),
        (2.3, 0.1, -1.0, 3.4),
        (0.0, 0.0, 0.0, 2.0),
    ]
    for off in offsets:
        x = c + np.array(off)
        assert abs(float(f.phi(x)) / _cal_phi_series(x, **CAL) - 1) <= 1e-13


def test_caloron_is_periodic_in_x4():
    # Periodic by construction (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122): s(x + n beta e_4) = s(x).
    f = ik.caloron(**CAL)
    shifted = PTS + np.array([0, 0, 0, 3 * CAL["period"]])
    assert _rel(fl.action_density(f, shifted), fl.action_density(f, PTS)) <= 1e-12
    assert np.max(np.abs(fl.potential(f, shifted) - fl.potential(f, PTS))) <= 1e-12


def test_caloron_is_self_dual():
    # The caloron is self-dual (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122, from memory); autodiff F residual.
    f = ik.caloron(**CAL)
    assert np.max(fl.self_duality_residual(f, PTS, method="autodiff")) <= 1e-12
    assert np.all(fl.charge_density(f, PTS) > 0)


def test_caloron_action_density_is_minus_half_bilaplacian_of_log_phi():
    # s = -1/2 box box log phi (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642 / Harrington, Shepard, Phys. Rev. D 17
    # (1978) 2122, from memory).  Independent route: mpmath (30 digits) differentiates the textbook sinh/cosh formula in
    # (r, t); for f(r, t) in four dimensions box = d_r^2 + (2/r) d_r + d_t^2, hence box box f = f_rrrr + 2 f_rrtt +
    # f_tttt + (4/r)(f_rrr + f_rtt) (calculus).  Points include r across the branch threshold 2 pi r = beta and r -> 0.
    rho, beta = mpmath.mpf(CAL["size"]), mpmath.mpf(CAL["period"])
    kappa = 2 * mpmath.pi / beta

    def log_phi(r, t):
        return mpmath.log(
            1
            + mpmath.pi
            * rho**2
            / (beta * r)
            * mpmath.sinh(kappa * r)
            / (mpmath.cosh(kappa * r) - mpmath.cos(kappa * t))
        )

    def ref(r, t):
        with mpmath.workdps(30):
            r, t = mpmath.mpf(r), mpmath.mpf(t)
            d = lambda m, n: mpmath.diff(log_phi, (r, t), (m, n))  # noqa: E731
            return float(-0.5 * (d(4, 0) + 2 * d(2, 2) + d(0, 4) + 4 / r * (d(3, 0) + d(1, 2))))

    rng = np.random.default_rng(7)
    rt = np.column_stack([np.r_[1e-3, 0.05, 0.2068, 0.2070, rng.uniform(0.02, 2.5, 12)], rng.uniform(-0.65, 0.65, 16)])
    direction = rng.normal(size=(16, 3))
    direction /= np.linalg.norm(direction, axis=1, keepdims=True)
    pts = np.asarray(CAL["center"]) + np.column_stack([rt[:, :1] * direction, rt[:, 1]])
    expected = np.array([ref(r, t) for r, t in rt])
    assert _rel(fl.action_density(ik.caloron(**CAL), pts), expected) <= 1e-10


def test_caloron_is_smooth_across_the_axis_and_the_series_threshold():
    # Continuity of s (a smooth gauge-invariant density, Harrington, Shepard, Phys. Rev. D 17 (1978) 2122) where the
    # evaluation switches branch: at r = 0 versus r = 1e-7, and just inside versus just outside 2 pi r = beta.
    f = ik.caloron(**CAL)
    c = np.asarray(CAL["center"])
    r_star = CAL["period"] / (2 * PI)
    pairs = [
        ((0, 0, 0, 0.4), (1e-7, 0, 0, 0.4)),
        ((r_star * (1 - 1e-12), 0, 0, 0.4), (r_star * (1 + 1e-12), 0, 0, 0.4)),
    ]
    pts = np.tile(c + np.array(pairs).reshape(4, 4), (4, 1))  # 16 points: reuses the compiled kernel
    s = fl.action_density(f, pts).reshape(4, 2, 2)
    assert np.max(np.abs(s[..., 0] / s[..., 1] - 1)) <= 1e-10


def test_caloron_large_period_approaches_bpst():
    # beta -> infinity: phi -> 1 + rho^2/|x - c|^2 up to sum_{n != 0} rho^2/(n beta)^2 = rho^2 pi^2/(3 beta^2)
    # (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122; Euler's zeta(2)), so s matches the BPST profile (Belavin,
    # Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) to O((rho/beta)^2).
    f = ik.caloron(CAL["size"], 1e3, CAL["center"])
    pts = _away(PTS, [CAL["center"]], 0.1)
    s = fl.action_density(f, pts)
    assert _rel(s, _bpst_density(pts, CAL["center"], CAL["size"])) <= 1e-4


def test_caloron_exposes_period_charge_and_hint():
    f = ik.caloron(**CAL)
    centre, scale = f.hint()
    assert float(f.period) == CAL["period"] and f.charge == 1
    assert np.allclose(centre, CAL["center"]) and scale >= CAL["size"]


# -- singular points --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "field, point",
    [
        (ik.thooft(TH_C, TH_R), TH_C[1]),
        (ik.jnr(JNR_P, JNR_W), JNR_P[2]),
        (ik.caloron(**CAL), np.asarray(CAL["center"]) + np.array([0, 0, 0, 2 * CAL["period"]])),
        (ik.bpst_field(CENTER, RHO, gauge="singular"), CENTER),
    ],
)
@pytest.mark.parametrize("quantity", ["potential", "action_density"])
def test_evaluation_at_a_pole_raises(field, point, quantity):
    # Documented behaviour (ansatz module docstring): NaN at a pole, so the engine raises.
    if quantity == "action_density" and isinstance(field, an.BPSTField):
        quantity = "field_strength"  # the closed-form BPST density is finite at the centre (next test)
    with pytest.raises(ValueError, match="singular"):
        fl.evaluate(field, point[None], quantity)


@pytest.mark.parametrize("gauge", ["regular", "singular"])
def test_bpst_closed_density_at_the_centre_is_48_over_rho4(gauge):
    # s(a) = 48 / rho^4 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85): the documented value of the
    # gauge-invariant closed form.
    s = fl.action_density(ik.bpst_field(CENTER, RHO, gauge=gauge), CENTER[None])
    assert abs(s[0] * RHO**4 / 48.0 - 1) <= 1e-14


# -- anti -------------------------------------------------------------------------------------------

P = np.array([-1.0, -1.0, -1.0, 1.0])
_ANTI_CASES = {
    "bpst_regular": lambda: ik.bpst_field(CENTER, RHO),
    "bpst_singular": lambda: ik.bpst_field(CENTER, RHO, gauge="singular"),
    "thooft": lambda: ik.thooft(TH_C, TH_R),
    "jnr": lambda: ik.jnr(JNR_P, JNR_W),
    "caloron": lambda: ik.caloron(**CAL),
}


@functools.cache
def _anti_data(name):
    """(points, s and q of the field, autodiff F of anti(field) at the mirrored points)."""
    f = _ANTI_CASES[name]()
    pts = _away(PTS, [CENTER], 0.1)
    g = ik.anti(f)
    return (
        f,
        g,
        pts,
        fl.action_density(f, pts),
        fl.charge_density(f, pts),
        fl.field_strength(g, pts * P, method="autodiff"),
    )


def _s_q_res(f):
    """s, q and |F - *F|/|F| from F (..., 4, 4, 2, 2) with the formulas of the conventions module."""
    eps = ik.conventions.LEVI_CIVITA
    s = -0.5 * np.real(np.einsum("...mnij,...mnji->...", f, f))
    q = -np.real(np.einsum("mnrs,...mnij,...rsji->...", eps, f, f)) / (32 * PI**2)
    d = f - 0.5 * np.einsum("mnrs,...rsij->...mnij", eps, f)
    res = np.sqrt(np.sum(np.abs(d) ** 2, axis=(-4, -3, -2, -1)) / np.sum(np.abs(f) ** 2, axis=(-4, -3, -2, -1)))
    return s, q, res


@pytest.mark.parametrize("name", sorted(_ANTI_CASES))
def test_anti_keeps_s_at_mirrored_points(name):
    # Parity x -> Px (P = diag(-1,-1,-1,1)) maps s(x) -> s(Px) (common practice); s from the autodiff F
    # of the mirrored potential.
    _, _, _, s, _, fa = _anti_data(name)
    assert _rel(_s_q_res(fa)[0], s) <= 1e-11


@pytest.mark.parametrize("name", sorted(_ANTI_CASES))
def test_anti_flips_q_at_mirrored_points(name):
    # det P = -1 flips eps, so q(x) -> -q(Px) (common practice).
    _, _, _, _, q, fa = _anti_data(name)
    assert _rel(_s_q_res(fa)[1], -q) <= 1e-11


@pytest.mark.parametrize("name", sorted(_ANTI_CASES))
def test_anti_is_anti_self_dual_with_negative_charge(name):
    # Anti-self-dual: |F - *F| / |F| = 2 (engine docstring: F = -*F gives |2F|/|F|) and charge -k.
    f, g, _, _, _, fa = _anti_data(name)
    assert np.max(np.abs(_s_q_res(fa)[2] - 2.0)) <= 1e-11 and g.charge == -f.charge


def test_anti_of_adhm_data_is_its_conjugate():
    data = ik.bpst(CENTER, RHO)
    assert ik.anti(data).chirality == -1 and ik.anti(ik.anti(data)).chirality == 1


def test_anti_is_an_involution_and_keeps_period():
    f = ik.caloron(**CAL)
    assert ik.anti(ik.anti(f)) is f and float(ik.anti(f).period) == CAL["period"]
    assert np.allclose(ik.anti(f).hint()[0], P * np.asarray(CAL["center"]))


def test_anti_of_scalar_ansatz_is_the_eta_form_with_mirrored_poles():
    # P eta-bar_a P = eta_a ('t Hooft symbols, quaternion module), so the parity image of the 't Hooft ansatz
    # is A'_mu = -1/2 eta_{a mu nu} d_nu log(phi o P) u_a, written out here directly.
    def pot(x):
        w = jax.grad(lambda y: jnp.log(1.0 + jnp.sum(TH_R**2 / jnp.sum((y - TH_C * P) ** 2, axis=-1))))(x)
        v = jnp.einsum("amn,n->am", ik.quaternion.thooft_eta(), w)
        return -0.5 * jnp.einsum("am,aij->mij", v, ik.conventions.QUATERNION_BASIS[1:])

    mine = fl.potential(ik.anti(ik.thooft(TH_C, TH_R)), TH_PTS * P)
    assert np.max(np.abs(mine - fl.potential(pot, TH_PTS * P))) <= 1e-12


# -- hypothesis: scalar ansatz invariants -----------------------------------------------------------


@settings(max_examples=10, deadline=None)
@given(seed=st.integers(0, 2**31 - 1))
def test_thooft_random_configurations_are_self_dual(seed):
    # 't Hooft ansatz is self-dual for any positive sizes and distinct centres ('t Hooft 1976, unpublished; from memory;
    # checked here by the autodiff residual).
    rng = np.random.default_rng(seed)
    c = rng.normal(size=(2, 4)) * 1.5
    f = ik.thooft(c, rng.uniform(0.3, 1.5, size=2))
    pts = _away(rng.normal(size=(16, 4)) * 2, c, 1e-3)
    pts = np.concatenate([pts, np.broadcast_to(pts[:1], (16 - len(pts), 4))]) if len(pts) < 16 else pts[:16]
    assert np.max(fl.self_duality_residual(f, pts, method="autodiff")) <= 1e-10


# -- bad input --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "build, match",
    [
        (lambda: ik.thooft(TH_C, [0.5, -1.0, 0.3]), "sizes must be > 0"),
        (lambda: ik.thooft(TH_C, [0.5, 1.0]), r"sizes must have shape \(3,\)"),
        (lambda: ik.thooft(np.zeros((2, 3)), [1.0, 1.0]), r"centers must have shape \(k, 4\)"),
        (lambda: ik.thooft([[0, 0, 0, 0], [0, 0, 0, 0.0]], [1.0, 1.0]), "coincide"),
        (lambda: ik.thooft([[np.nan, 0, 0, 0]], [1.0]), "finite"),
        (lambda: ik.jnr([[0, 0, 0, 1.0]], [1.0]), "at least 2"),
        (lambda: ik.jnr(JNR_P, [1.0, 1.0, 0.0, 1.0]), "weights must be > 0"),
        (lambda: ik.caloron(1.0, 0.0), "period must be > 0"),
        (lambda: ik.caloron(1.0, -2.0), "period must be > 0"),
        (lambda: ik.caloron(-1.0, 2.0), "size must be > 0"),
        (lambda: ik.caloron(1.0, 2.0, (0, 0, 0)), r"center must have shape \(4,\)"),
        (lambda: ik.bpst_field(CENTER, RHO, gauge="axial"), "gauge must be one of"),
        (lambda: ik.bpst_field(CENTER, 0.0), "size must be > 0"),
        (lambda: ik.bpst_field(CENTER, RHO, orientation=(1.0, 1.0, 0, 0)), "unit quaternion"),
        (lambda: ik.bpst_field(CENTER[:3], RHO), r"center must have shape \(4,\)"),
    ],
)
def test_bad_input_raises_value_error_naming_the_problem(build, match):
    with pytest.raises(ValueError, match=match):
        build()


def test_complex_parameters_raise_type_error():
    with pytest.raises(TypeError, match="real numeric array"):
        ik.thooft(TH_C.astype(complex), TH_R)


def test_fields_are_frozen_pytrees():
    f = ik.thooft(TH_C, TH_R)
    leaves, tree = jax.tree_util.tree_flatten(f)
    assert len(leaves) == 2 and jax.tree_util.tree_unflatten(tree, leaves).k == 3
    with pytest.raises(dataclasses.FrozenInstanceError):
        f.sizes = TH_R


def test_booleans_are_refused_as_numbers():
    # common practice of the house: True is not 1 for a size or a period (_validate refuses booleans)
    with pytest.raises(TypeError, match="size must be a real"):
        ik.caloron(True, 2.0)
    with pytest.raises(TypeError, match="bool"):
        ik.thooft(TH_C, np.ones(TH_C.shape[0], bool))
    with pytest.raises(TypeError, match="size must be a real"):
        ik.bpst_field(CENTER, True)
