"""Specification of instantonkit.integrals.quadrature, evidence and checks: integrals with honest errors, verify().

Every physics value is checked against a published formula, a worked value, or scipy/sympy, with the
source named beside the check.
"""

from __future__ import annotations

import dataclasses
import math

import jax
import jax.numpy as jnp
import numpy as np
import pytest
import scipy.integrate
import sympy as sp
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz import classic as ansatz
from instantonkit.core import quaternion as qt
from instantonkit.core._pytree import PytreeFields
from instantonkit.core.conventions import point_to_quaternion
from instantonkit.engine import fields, transforms
from instantonkit.integrals import drivers as integrals
from instantonkit.integrals import flux
from instantonkit.integrals import quadrature as qd
from instantonkit.verification import checks

PI = math.pi
EIGHT_PI2 = 8.0 * PI**2


def _within(result, exact, bound=1e-8):
    """|value - exact| <= bound and the reported error covers the true error."""
    true = abs(result.value - exact)
    assert true <= bound, (result, exact)
    assert result.error >= true, (result.error, true)


# -- quadrature rules -----------------------------------------------------------------------------


def test_sphere3_weights_sum_to_the_area_2pi2():
    # |S^3| = 2 pi^2 (common practice)
    _, w = qd.sphere3_nodes(5)
    assert abs(w.sum() - 2 * PI**2) <= 1e-13


def test_sphere3_rule_integrates_fourth_moments_exactly():
    # uniform measure on S^{d-1}: E[n_1^4] = 3 / (d (d + 2)), E[n_1^2 n_4^2] = 1 / (d (d + 2)), d = 4
    # (moments of the uniform sphere distribution, common practice)
    d, w = qd.sphere3_nodes(3)  # degree 5 >= 4
    area = 2 * PI**2
    assert abs(np.sum(w * d[:, 0] ** 4) - area * 3 / 24) <= 1e-13
    assert abs(np.sum(w * d[:, 0] ** 2 * d[:, 3] ** 2) - area / 24) <= 1e-13


def test_sphere2_rule_area_and_second_moment():
    # |S^2| = 4 pi and int z^2 dOmega = 4 pi / 3 (common practice)
    d, w = qd.sphere2_nodes(4)
    assert abs(w.sum() - 4 * PI) <= 1e-13
    assert abs(np.sum(w * d[:, 2] ** 2) - 4 * PI / 3) <= 1e-13


def test_radial_rule_reproduces_the_bpst_radial_integral():
    # 2 pi^2 int_0^inf r^3 48 rho^4 / (r^2 + rho^2)^4 dr = 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin,
    # Phys. Lett. B 59 (1975) 85); geometric convergence in the number of nodes
    rho = 1.7
    r, w = qd.radial_nodes(28, rho, 4)
    val = 2 * PI**2 * np.sum(w * 48 * rho**4 / (r**2 + rho**2) ** 4)
    assert abs(val - EIGHT_PI2) <= 1e-10


def test_radial_rule_against_scipy_quad_for_a_gamma_integral():
    # int_0^inf r^2 e^-r dr = Gamma(3) = 2 (scipy.integrate.quad as the reference)
    r, w = qd.radial_nodes(60, 1.0, 3)
    ref, _ = scipy.integrate.quad(lambda t: t**2 * math.exp(-t), 0, np.inf)
    assert abs(np.sum(w * np.exp(-r)) - ref) <= 1e-9


@settings(max_examples=15, deadline=None)
@given(st.integers(1, 4), st.integers(0, 10_000))
def test_partition_of_unity_rows_sum_to_one(k, seed):
    # a partition of unity by construction (sum_i phi_i / sum_j phi_j = 1), derived here
    rng = np.random.default_rng(seed)
    w = qd.partition_weights(rng.normal(size=(50, 4)) * 5, rng.normal(size=(k, 4)) * 3, rng.uniform(0.3, 2, k))
    assert np.max(np.abs(w.sum(axis=1) - 1.0)) <= 1e-14
    assert np.all(w >= 0)


def test_periodic_rule_integrates_a_periodic_gaussian_shell():
    # int_{R^3 x [0, beta)} e^{-|x|^2} (2 + cos(2 pi t / beta)) = pi^{3/2} * 2 beta (Gaussian integral,
    # common practice; the cosine integrates to zero over a period)
    beta = 1.3
    rule = qd.rule_r3_circle((0, 0, 0, 0.2), 1.0, beta, 60, 3, 8)
    x = rule.points
    f = np.exp(-np.sum(x[:, :3] ** 2, axis=1)) * (2 + np.cos(2 * PI * x[:, 3] / beta))
    assert abs(rule.integrate(f) - PI**1.5 * 2 * beta) <= 1e-9


def test_rule_validates_its_arrays():
    with pytest.raises(ValueError, match=r"shape \(M, 4\)"):
        qd.Rule(np.zeros((3, 3)), np.zeros(3), "bad")
    with pytest.raises(ValueError, match=r"scales must be (finite and )?> 0"):
        qd.rule_r4(np.zeros(4), -1.0, 4, 2)


# -- BPST and the closed-form BPST field ----------------------------------------------------------


@pytest.fixture(scope="module")
def bpst_data():
    return ik.bpst((0.3, -0.2, 0.5, 0.1), 1.3, (0.6, 0.0, 0.8, 0.0))


def test_bpst_charge_is_one(bpst_data):
    # Q = 1 for the BPST instanton (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85)
    _within(checks.total_charge(bpst_data), 1.0)


def test_bpst_action_is_8pi2(bpst_data):
    # S = 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85)
    res = checks.total_action(bpst_data)
    assert res.converged
    _within(res, EIGHT_PI2, 1e-8 * EIGHT_PI2)


def test_closed_form_bpst_in_regular_gauge_has_unit_charge_by_autodiff():
    # Q = 1 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85), with q from eps tr F F of the jax.jacfwd
    # field strength of the potential
    f = ansatz.bpst_field((0.0, 0.4, 0.0, -0.3), 0.8, gauge="regular")
    _within(checks.total_charge(f, method="autodiff"), 1.0)


def test_anti_instanton_charge_is_minus_one(bpst_data):
    # the parity image has Q = -1 (conventions module: anti-instanton, Q = -1 per unit)
    _within(checks.total_charge(bpst_data.conjugate()), -1.0)


# -- multi-instantons -------------------------------------------------------------------------------


#: Tolerances that give |Q - k| <= 1e-8 and |S / 8 pi^2 - k| <= 1e-8 (the accuracy targets of verify).
TIGHT = dict(rtol=0.0, atol=8e-9)
TIGHT_S = dict(rtol=0.0, atol=8e-9 * EIGHT_PI2)


def test_bpst_charge_from_eps_tr_ff_of_the_closed_form_f(bpst_data):
    # Q = 1 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85), q from eps tr F F rather than the
    # closed-form q
    _within(checks.total_charge(bpst_data, method="closed"), 1.0)


def test_random_adhm_k2_action_and_charge():
    # S = 8 pi^2 k, Q = k (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185)
    data = ik.random_adhm(2, seed=2, spread=3.0)
    _within(checks.total_action(data, **TIGHT_S), 2 * EIGHT_PI2, 1e-8 * EIGHT_PI2)
    _within(checks.total_charge(data, **TIGHT), 2.0)


@pytest.mark.slow
def test_random_adhm_k3_action_and_charge():
    # S = 8 pi^2 k, Q = k (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185)
    data = ik.random_adhm(3, seed=3, spread=3.0)
    _within(checks.total_action(data, **TIGHT_S), 3 * EIGHT_PI2, 1e-8 * EIGHT_PI2)
    _within(checks.total_charge(data, **TIGHT), 3.0)


def test_sp2_data_action_and_charge():
    # Sp(n) ADHM data have Q = k and S = 8 pi^2 k (Corrigan, Goddard, Osborn, Templeton,
    # Nucl. Phys. B 159 (1979) 469, from memory)
    data = ik.random_adhm(2, rank=2, seed=1, spread=3.0)
    _within(checks.total_action(data, **TIGHT_S), 2 * EIGHT_PI2, 1e-8 * EIGHT_PI2)
    _within(checks.total_charge(data, **TIGHT), 2.0)


@pytest.mark.parametrize("k", [2, pytest.param(3, marks=[pytest.mark.slow, pytest.mark.long])])
def test_thooft_charge_is_the_number_of_poles(k):
    # 't Hooft ansatz phi = 1 + sum rho_i^2/|x - a_i|^2 has Q = k ('t Hooft 1976, unpublished; Jackiw, Nohl,
    # Rebbi, Phys. Rev. D 15 (1977) 1642; from memory; checked here by verify's integrals)
    centers = np.array([[0.0, 0, 0, 0], [4.5, 0.5, 0, 0.5], [-0.5, 4.0, 1.0, -2.0]])[:k]
    field = ansatz.thooft(centers, [1.0, 0.8, 1.1][:k])
    budget = dict(max_points=12_000_000)  # the closed-form density is noisy next to the poles
    _within(checks.total_charge(field, **TIGHT, **budget), float(k))
    _within(checks.total_action(field, **TIGHT_S, **budget), k * EIGHT_PI2, 1e-8 * EIGHT_PI2)


def test_jnr_k2_charge():
    # JNR with three poles has Q = 2 (Jackiw, Nohl, Rebbi 1977)
    field = ansatz.jnr([[0.0, 0, 0, 0], [3.0, 0, 0, 0], [0.0, 3.0, 0, 0]], [1.0, 1.2, 0.9])
    _within(checks.total_charge(field, **TIGHT), 2.0)


def test_anti_thooft_k2_gives_minus_two():
    # parity image of a charge-2 't Hooft field has Q = -2 (conventions module)
    field = transforms.anti(ansatz.thooft([[0.0, 0, 0, 0], [3.5, 0.5, 0, 0.5]], [1.0, 0.8]))
    _within(checks.total_charge(field, **TIGHT), -2.0)


def test_harrington_shepard_caloron_action_per_period_is_8pi2():
    # S per period = 8 pi^2 (Harrington and Shepard, Phys. Rev. D 17 (1978) 2122)
    field = ansatz.caloron(0.7, 2.0, (0.1, 0.0, -0.2, 0.3))
    res = checks.total_action(field, rtol=1e-9, atol=1e-9)
    assert "R^3 x S^1" in res.rule
    _within(res, EIGHT_PI2, 1e-8 * EIGHT_PI2)


# -- Osborn's density and the sphere flux ----------------------------------------------------------


def test_osborn_density_matches_mpmath_box_box_log_det_for_k2():
    # s = -1/2 box box log det(Delta^dag Delta) (Osborn, Nucl. Phys. B 159 (1979) 497, from memory);
    # the closed form of checks.osborn_density against mpmath's numerical fourth partial derivatives
    import mpmath

    data = ik.random_adhm(2, seed=4)
    g0, gmu = (np.asarray(a) for a in flux.gram_coefficients(data))
    mpmath.mp.dps = 30

    def logdet(*y):
        g = mpmath.matrix(g0.tolist())
        for m in range(4):
            g += mpmath.matrix(gmu[m].tolist()) * y[m]
        g += mpmath.eye(2) * sum(v**2 for v in y)
        return mpmath.log(mpmath.det(g))

    point = [mpmath.mpf("0.3"), mpmath.mpf("-0.4"), mpmath.mpf("0.2"), mpmath.mpf("0.5")]
    total = mpmath.mpf(0)
    for m in range(4):
        for n in range(4):
            order = [0, 0, 0, 0]
            order[m] += 2
            order[n] += 2
            total += mpmath.diff(logdet, point, tuple(order))
    ref = float(-total / 2)
    val = float(checks.osborn_density(data, jnp.asarray([float(v) for v in point])))
    assert abs(val - ref) <= 1e-9 * abs(ref)


def test_osborn_density_equals_the_closed_form_action_density():
    # Osborn's formula holds pointwise for ADHM fields (Osborn, Nucl. Phys. B 159 (1979) 497, from memory)
    data = ik.random_adhm(3, seed=2)
    pts = np.random.default_rng(1).normal(size=(20, 4)) * 2
    osb = np.array([float(checks.osborn_density(data, jnp.asarray(p))) for p in pts])
    assert np.max(np.abs(osb - ik.action_density(data, pts))) <= 1e-9 * np.max(np.abs(osb))


def test_regular_gauge_bpst_sphere_flux_is_plus_one():
    # winding of the regular-gauge BPST at infinity = Q = +1 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59
    # (1975) 85); Chern-Simons flux derived here
    val, err = checks.surface_winding(ik.bpst((0.2, 0, 0, 0), 1.0).with_gauge("regular"))
    assert abs(val - 1.0) <= 1e-8
    assert err >= abs(val - 1.0)


def test_singular_gauge_bpst_sphere_flux_vanishes():
    # in singular gauge A ~ |x|^-3, so the flux at infinity is 0 (the winding sits at the centre;
    # common practice)
    val, _ = checks.surface_winding(ik.bpst((0.0, 0, 0, 0), 1.0))
    assert abs(val) <= 1e-6


# -- a non-self-dual field with Q = 1 ---------------------------------------------------------------

RHO = 0.9


def _hedgehog(x):
    """A = f(r) h^-1 d h with h = p-bar(x)/|x| (= g d g^-1, g = p(x)/|x|), f = r^4/(r^2 + rho^2)^2."""
    r2 = jnp.sum(x * x)

    def ud(y):  # g^dag = p(y)^dag / |y|
        return jnp.conj(qt.to_matrix(point_to_quaternion(y)).T) / jnp.sqrt(jnp.sum(y * y))

    u = qt.to_matrix(point_to_quaternion(x)) / jnp.sqrt(r2)
    dud = jnp.moveaxis(jax.jacfwd(ud, holomorphic=False)(x.astype(jnp.float64)), -1, 0)
    f = r2**2 / (r2 + RHO**2) ** 2
    return f * jnp.einsum("ij,mjk->mik", u, dud)


def _radial_densities():
    """s(r) and q(r) of the hedgehog as functions of r, derived here with sympy.

    sympy: A_mu = f(r) U d_mu U^dag, U = (x4 + i x.sigma)/r, F = dA - dA + [A, A] at x = (0, 0, 0, R);
    s = -1/2 sum tr F F (conventions module) and q = -(1/32 pi^2) eps tr F F = -(1/4 pi^2) tr(F12 F34 -
    F13 F24 + F14 F23) (conventions module, eps_1234 = +1); profile f = r^4 / (r^2 + rho^2)^2.
    """
    x = sp.symbols("x1:5", real=True)
    big = sp.symbols("R", positive=True)
    fn = sp.Function("f")
    r = sp.sqrt(sum(v**2 for v in x))
    i = sp.I
    s1, s2, s3 = sp.Matrix([[0, 1], [1, 0]]), sp.Matrix([[0, -i], [i, 0]]), sp.Matrix([[1, 0], [0, -1]])
    pmat = x[3] * sp.eye(2) + i * (x[0] * s1 + x[1] * s2 + x[2] * s3)
    u, ud = pmat / r, pmat.H / r
    a = [fn(r) * u * sp.diff(ud, x[m]) for m in range(4)]
    at = {x[0]: 0, x[1]: 0, x[2]: 0, x[3]: big}
    fmn = {}
    for m in range(4):
        for n in range(m + 1, 4):
            fmn[m, n] = (sp.diff(a[n], x[m]) - sp.diff(a[m], x[n]) + a[m] * a[n] - a[n] * a[m]).subs(at).doit()
    dens = sum((-(f * f).trace() for f in fmn.values()), sp.Integer(0))  # -1/2 sum over ordered pairs
    eps_ff = (fmn[0, 1] * fmn[2, 3] - fmn[0, 2] * fmn[1, 3] + fmn[0, 3] * fmn[1, 2]).trace()
    qdens = -eps_ff / (4 * sp.pi**2)
    rr = sp.symbols("r", positive=True)
    prof = rr**4 / (rr**2 + RHO**2) ** 2

    def radial(e):
        e = e.subs(sp.Derivative(fn(big), big), sp.diff(prof, rr).subs(rr, big)).subs(fn(big), prof.subs(rr, big))
        return sp.lambdify(big, sp.simplify(e), "math")

    return radial(dens), radial(qdens)


def _radial_action_prediction():
    """S from a 1-D integral of the radial density, derived here with sympy.

    sympy: A_mu = f(r) U d_mu U^dag, U = (x4 + i x.sigma)/r, F = dA - dA + [A, A],
    s = -1/2 sum tr F F at x = (0, 0, 0, R) gives s(r) = 6 f'^2 / r^2 + 24 f^2 (1 - f)^2 / r^4 (the
    derivation is run in this test); S = 2 pi^2 int_0^inf r^3 s(r) dr by scipy.integrate.quad.
    """
    x = sp.symbols("x1:5", real=True)
    big = sp.symbols("R", positive=True)
    fn = sp.Function("f")
    r = sp.sqrt(sum(v**2 for v in x))
    i = sp.I
    s1, s2, s3 = sp.Matrix([[0, 1], [1, 0]]), sp.Matrix([[0, -i], [i, 0]]), sp.Matrix([[1, 0], [0, -1]])
    pmat = x[3] * sp.eye(2) + i * (x[0] * s1 + x[1] * s2 + x[2] * s3)
    u, ud = pmat / r, pmat.H / r
    a = [fn(r) * u * sp.diff(ud, x[m]) for m in range(4)]
    dens = 0
    at = {x[0]: 0, x[1]: 0, x[2]: 0, x[3]: big}
    for m in range(4):
        for n in range(m + 1, 4):
            f_mn = sp.diff(a[n], x[m]) - sp.diff(a[m], x[n]) + a[m] * a[n] - a[n] * a[m]
            dens += -(f_mn * f_mn).trace()  # -1/2 sum over ordered pairs = - sum over m < n
    dens = sp.simplify(dens.subs(at).doit())
    rr = sp.symbols("r", positive=True)
    prof = rr**4 / (rr**2 + RHO**2) ** 2
    sub = dens.subs(sp.Derivative(fn(big), big), sp.diff(prof, rr).subs(rr, big)).subs(fn(big), prof.subs(rr, big))
    g = sp.lambdify(big, sub, "math")
    val, abserr = scipy.integrate.quad(
        lambda t: 2 * PI**2 * t**3 * g(t), 0, np.inf, epsabs=1e-13, epsrel=1e-13, limit=200
    )
    return val, abserr


@pytest.fixture(scope="module")
def hedgehog_report():
    return checks.verify(_hedgehog, rtol=1e-10, atol=1e-10, center=np.zeros(4), scale=RHO)


def test_non_self_dual_field_has_unit_charge(hedgehog_report):
    # the profile f rises from 0 to 1, so the winding at infinity and Q are +1 (derived here: the
    # pure gauge at infinity is that of the regular-gauge BPST, Q = +1 by Belavin, Polyakov, Schwartz, Tyupkin, Phys.
    # Lett. B 59 (1975) 85)
    assert hedgehog_report.nearest_integer == 1
    assert abs(hedgehog_report.distance) <= 1e-8


def test_non_self_dual_field_is_reported_not_self_dual(hedgehog_report):
    # S > 8 pi^2 |Q| unless F = *F (Bogomolny, Sov. J. Nucl. Phys. 24 (1976) 449)
    assert not hedgehog_report.passed
    assert any("not self-dual" in r for r in hedgehog_report.reasons)
    assert hedgehog_report.residual_mean > 1e-3


def test_non_self_dual_hedgehog_is_failed_with_margin_and_residual_of_the_radial_formula(hedgehog_report):
    # s(r), q(r) derived here with sympy (_radial_densities); S/8pi^2 - |Q| = 2 pi^2 int r^3 (s/8pi^2 - q) dr
    # and the s-weighted mean of the residual |F - *F|/|F| = sqrt(2 (1 - 8 pi^2 q / s)) (from
    # |F|^2 = 2 s and sum tr F^dag *F = 16 pi^2 q, conventions module), both by scipy.integrate.quad
    s_r, q_r = _radial_densities()
    quad = dict(epsabs=1e-13, epsrel=1e-12, limit=400)
    margin, _ = scipy.integrate.quad(lambda t: 2 * PI**2 * t**3 * (s_r(t) / EIGHT_PI2 - q_r(t)), 0, np.inf, **quad)

    def res(t):
        return math.sqrt(max(2.0 * (1.0 - EIGHT_PI2 * q_r(t) / s_r(t)), 0.0))

    num, _ = scipy.integrate.quad(lambda t: t**3 * s_r(t) * res(t), 0, np.inf, **quad)
    den, _ = scipy.integrate.quad(lambda t: t**3 * s_r(t), 0, np.inf, **quad)
    rep = hedgehog_report
    assert rep.verdict == "FAILED" and not rep.passed
    assert rep.margin_how == checks.HOW_INTEGRAL
    assert abs(rep.bogomolny_margin - margin) <= 1e-8 and rep.bogomolny_margin - rep.bogomolny_margin_error > 1e-6
    assert abs(rep.residual_mean - num / den) <= 1e-6 * (num / den)
    assert any("not self-dual" in r and "S/8pi^2 - |Q|" in r for r in rep.reasons)


def test_non_self_dual_action_excess_matches_the_radial_integral(hedgehog_report):
    # S - 8 pi^2 from the 1-D radial integral (derived here with sympy, integrated by scipy.quad)
    s_pred, _ = _radial_action_prediction()
    assert s_pred > EIGHT_PI2
    s = hedgehog_report.action.value
    assert abs(s - s_pred) <= 1e-8 * s_pred
    assert abs(hedgehog_report.bogomolny_margin - (s_pred / EIGHT_PI2 - 1.0)) <= 1e-8


def _gaussian_hedgehog(x):
    """The hedgehog above with f = 1 - exp(-r^2/rho^2): its density vanishes faster than any power."""
    r2 = jnp.sum(x * x)
    return (1.0 - jnp.exp(-r2 / RHO**2)) / (r2**2 / (r2 + RHO**2) ** 2) * _hedgehog(x)


def test_a_density_that_vanishes_at_infinity_is_not_reported_divergent():
    # s(r) = 6 f'^2 / r^2 + 24 f^2 (1 - f)^2 / r^4 for A = f(r) U dU^dag (derived here with sympy in
    # _radial_action_prediction, valid for any profile f); S = 2 pi^2 int r^3 s(r) dr by scipy.quad.
    # Far out the density is rounding noise; the decay probe must not mistake it for a slow power law.
    def dens(t):
        f, fp = 1.0 - math.exp(-t * t / RHO**2), 2 * t / RHO**2 * math.exp(-t * t / RHO**2)
        return 6 * fp**2 / t**2 + 24 * f**2 * (1 - f) ** 2 / t**4

    s_pred, _ = scipy.integrate.quad(
        lambda t: 2 * PI**2 * t**3 * dens(t), 0, np.inf, epsabs=1e-13, epsrel=1e-13, limit=200
    )
    res = checks.total_action(_gaussian_hedgehog, rtol=1e-8, atol=1e-8, center=np.zeros(4), scale=RHO)
    assert res.converged
    assert abs(res.value - s_pred) <= 1e-7 * s_pred


# -- failures reported clearly ------------------------------------------------------------------------


def _slow_abelian(x):
    """An abelian potential with F ~ |x|^-2, so s ~ |x|^-4 (invented for this test)."""
    h = 1.0 / (1.0 + jnp.sum(x * x))
    t3 = jnp.array([[1j, 0], [0, -1j]]) / 2
    comp = jnp.array([-x[1] * h, x[0] * h, 0.0, 0.0])
    return comp[:, None, None] * t3[None]


def test_slowly_decaying_density_raises_a_divergence_error():
    # a density ~ |x|^-4 has a divergent integral over R^4 (common practice: int r^3 r^-4 dr diverges)
    with pytest.raises(checks.DivergentIntegralError, match=r"\|x\|\^-4\.\d+.*diverges"):
        checks.total_action(_slow_abelian)


def test_slowly_decaying_density_fails_verification_with_the_reason():
    rep = checks.verify(_slow_abelian)
    assert not rep.passed and rep.action is None
    assert any("action density falls like" in r and "diverges" in r for r in rep.reasons)


def _failing(x):
    raise RuntimeError("lookup table missing")


def test_failing_callable_raises_a_field_evaluation_error():
    with pytest.raises(checks.FieldEvaluationError, match="lookup table missing"):
        checks.total_charge(_failing)


def test_failing_callable_fails_verification_with_its_message():
    rep = checks.verify(_failing)
    assert not rep.passed
    assert any("lookup table missing" in r for r in rep.reasons)
    assert "FAILED" in str(rep)


# -- budget, tolerances, progress ------------------------------------------------------------------


def test_budget_exhaustion_is_reported(bpst_data):
    for route in ("osborn", "volume"):
        res = checks.total_action(bpst_data, rtol=1e-15, atol=1e-15, max_points=100_000, route=route)
        assert not res.converged
        assert "budget" in res.message and "100,000" in res.message


def test_bad_tolerances_are_rejected(bpst_data):
    with pytest.raises(ValueError, match="rtol must be finite and >= 0"):
        checks.total_action(bpst_data, rtol=-1.0)
    with pytest.raises(ValueError, match=r"period must be (finite and )?> 0"):
        checks.total_action(bpst_data, period=0.0)


def test_progress_callable_gets_one_dict_per_round(bpst_data):
    seen = []
    checks.total_charge(bpst_data, progress=seen.append)
    assert seen[-1]["done"] and all({"round", "evaluations", "value", "error"} <= set(d) for d in seen)


def test_silent_when_stderr_is_not_a_terminal(bpst_data, capsys):
    checks.total_charge(bpst_data)
    assert capsys.readouterr().err == ""


# -- verify: three verdicts, provenance, advice ------------------------------------------------------


@pytest.fixture(scope="module")
def report_k2():
    # default settings: the verdict must be reached without tuning
    return checks.verify(ik.random_adhm(2, seed=2, spread=3.0), expected_charge=2)


def test_verify_passes_for_adhm_k2_with_default_settings(report_k2):
    # Q = 2, S = 16 pi^2, self-dual (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185)
    assert report_k2.verdict == "PASSED" and report_k2.passed, report_k2.reasons
    assert report_k2.nearest_integer == 2 and report_k2.charge.converged and report_k2.action.converged
    assert abs(report_k2.distance) + report_k2.distance_error <= 1e-6
    assert abs(report_k2.action_units - 2.0) <= 1e-6
    assert report_k2.residual_mean <= 1e-10
    assert report_k2.advice == ()


def test_verify_labels_what_holds_by_construction(report_k2):
    # the closed-form q of ADHM data is s / 8 pi^2: the margin of the integrals is not a check;
    # the decisive margin comes from the autodiff curvature of the potential
    rows = {r.label: r for r in report_k2.rows}
    assert rows["Bogomolny margin S/8pi^2 - |Q| (integrals)"].status == "by construction"
    assert rows["Bogomolny margin S/8pi^2 - |Q|"].how == checks.HOW_CURVATURE
    assert rows["ADHM constraint residual"].status == "by construction"
    assert rows["charge declared by the construction"].status == "input"
    for name in ("field strength", "action density", "charge density"):
        row = rows[f"closed-form {name} vs curvature of A"]
        assert row.status == "agrees" and row.value <= 1e-8
    text = str(report_k2)
    assert "by construction" in text and "how obtained" in text and "S^3 parameter" not in text


def test_verify_takes_q_from_osborn_flux_and_checks_it_by_the_volume_integral(report_k2):
    # Q = 2 (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185): the precise figure from Osborn's flux
    # (Osborn, Nucl. Phys. B 159 (1979) 497, from memory), the check is the volume integral of the closed-form s on the
    # adaptive rule: other nodes, other formula inside the ball
    assert report_k2.charge.route == "osborn" and report_k2.check.route == "volume"
    rows = {r.label: r for r in report_k2.rows}
    assert rows["topological charge Q"].how == checks.HOW_FLUX
    (route,) = [r for r in report_k2.routes if r.name.startswith("volume integral")]
    assert route.agrees and route.how == checks.HOW_INTEGRAL and abs(route.value - 2.0) <= 1e-6
    assert route.value != report_k2.charge.value
    assert "check rule:" in str(report_k2)


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class _WrongDensities(PytreeFields):
    """ADHM data whose closed-form densities are 0.1% too large (a planted mistake for verify to find)."""

    data: object
    _leaves = ("data",)

    def potential(self, x):
        return self.data.potential(x)

    def action_density(self, x):
        return 1.001 * self.data.action_density(x)

    def charge_density(self, x):
        return 1.001 * self.data.charge_density(x)

    def gram(self, x):
        return self.data.gram(x)

    @property
    def charge(self):
        return self.data.charge

    def layout(self):
        return self.data.layout()


def test_verify_volume_check_catches_a_wrong_closed_form_density():
    # Q = 1 (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185): the flux figure trusts Osborn inside the
    # ball, the volume integral of the planted density gives 1.001, so the check disagrees and the verdict fails
    rep = checks.verify(_WrongDensities(ik.bpst(size=0.9)))
    (route,) = [r for r in rep.routes if r.name.startswith("volume integral")]
    assert route.agrees is False and abs(route.value - 1.001) <= 1e-5
    assert rep.verdict == "FAILED" and any("volume integral of s" in r for r in rep.reasons)


def test_verify_with_closed_charge_method_keeps_the_osborn_density_route():
    # with charge_method='closed' Q is the volume integral of eps tr F F; Osborn's density (Osborn, Nucl. Phys. B 159
    # (1979) 497, from memory) is integrated on another rule as the route
    rep = checks.verify(ik.bpst(size=1.1), charge_method="closed")
    assert rep.charge.route == "volume" and rep.check is None
    (route,) = [r for r in rep.routes if r.name.startswith("Osborn")]
    assert route.agrees and route.how == checks.HOW_OTHER_RULE and abs(route.value - 1.0) <= 1e-6


def test_verify_report_converts_to_a_plain_dict(report_k2):
    d = report_k2.to_dict()
    assert d["passed"] is True and d["verdict"] == "PASSED" and d["nearest_integer"] == 2
    assert isinstance(d["routes"], list) and isinstance(d["rows"], list) and isinstance(d["advice"], list)


@pytest.mark.parametrize(
    "k",
    [
        1,
        pytest.param(3, marks=[pytest.mark.slow, pytest.mark.long]),
        pytest.param(4, marks=[pytest.mark.slow, pytest.mark.long]),
    ],
)
def test_verify_passes_exact_adhm_data_with_default_settings(k):
    # Q = k, S = 8 pi^2 k, self-dual (Atiyah, Hitchin, Drinfeld, Manin 1978); k = 2 is report_k2 above
    rep = checks.verify(ik.random_adhm(k, seed=k, spread=3.0))
    assert rep.verdict == "PASSED", rep.reasons
    assert rep.nearest_integer == k


def test_verify_with_a_tiny_budget_is_inconclusive_not_passed():
    rep = checks.verify(ik.random_adhm(2, seed=2, spread=3.0), max_points=20_000, routes=False)
    assert rep.verdict == "INCONCLUSIVE" and not rep.passed
    assert any("not converged" in r for r in rep.reasons)
    assert any("budget" in a for a in rep.advice)


@jax.tree_util.register_pytree_node_class
class _MislabelledBPST:
    """Potential of a BPST of size 1 (regular gauge); closed forms of a BPST of size 1.5 (a planted typo).

    The closed forms alone are self-dual with integer charge (Q = 1, S = 8 pi^2, Belavin, Polyakov, Schwartz, Tyupkin,
    Phys. Lett. B 59 (1975) 85), so only the comparison with the curvature of the potential can find the mistake.
    """

    def __init__(self):
        self.a = ansatz.bpst_field((0.0, 0.0, 0.0, 0.0), 1.0, gauge="regular")
        self.b = ansatz.bpst_field((0.0, 0.0, 0.0, 0.0), 1.5, gauge="regular")

    def potential(self, x):
        return self.a.potential(x)

    def field_strength(self, x):
        return self.b.field_strength(x)

    def action_density(self, x):
        return self.b.action_density(x)

    def charge_density(self, x):
        return self.b.charge_density(x)

    def hint(self):
        return np.zeros(4), 1.0

    def tree_flatten(self):
        return (), None

    @classmethod
    def tree_unflatten(cls, aux, children):
        return cls()


def test_closed_forms_that_are_not_the_curvature_of_the_potential_fail():
    rep = checks.verify(_MislabelledBPST(), routes=False)
    # the integrals of the closed forms alone look like a perfect instanton (Belavin, Polyakov, Schwartz, Tyupkin, Phys.
    # Lett. B 59 (1975) 85)
    assert abs(rep.distance) <= 1e-6 and abs(rep.action_units - 1.0) <= 1e-6
    assert rep.verdict == "FAILED"
    assert any("closed-form field_strength is not the curvature of the potential" in r for r in rep.reasons)
    assert rep.closed_form_deviation["field_strength"] > 0.1


def test_off_centre_narrow_lump_gets_advice_naming_its_position():
    lump = ansatz.bpst_field((5.0, 0.0, 0.0, 0.0), 0.3, gauge="regular")

    def bare(x):  # no hints: the layout defaults to centre 0, scale 1
        return lump.potential(x)

    rep = checks.verify(bare, max_points=30_000, routes=False)
    assert rep.verdict != "PASSED"
    (advice,) = [a for a in rep.advice if "peaks at" in a]
    assert "center=(5" in advice and "scale=0.3" in advice
    assert np.allclose(rep.peak[0], [5.0, 0, 0, 0], atol=0.05)


def test_a_field_that_is_not_periodic_is_said_so_before_integrating():
    rep = checks.verify(ik.bpst(), period=2.0)
    assert rep.verdict == "FAILED" and rep.charge is None
    assert any("not periodic with period 2" in r for r in rep.reasons)


def test_verify_flags_a_wrong_expected_charge(bpst_data):
    rep = checks.verify(bpst_data, expected_charge=2, routes=False)
    assert rep.verdict == "FAILED" and any("expected 2" in r for r in rep.reasons)


def test_verify_anti_instanton_uses_anti_self_duality_and_clean_signs(bpst_data):
    # anti-instantons are anti-self-dual with Q = -1 (conventions module)
    rep = checks.verify(bpst_data.conjugate().translate((0.5, 0, 0, 0)))
    assert rep.passed, rep.reasons
    assert rep.nearest_integer == -1 and rep.duality == "anti-self-duality"
    text = str(rep)
    assert "|Q + 1|" in text and "- -" not in text and "Q - (" not in text and "^--" not in text


def test_verify_regular_gauge_bpst_includes_the_winding_route():
    # regular gauge: the flux at infinity equals Q = +1 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975)
    # 85; flux formula derived here)
    rep = checks.verify(ik.bpst((0, 0, 0, 0), 1.0).with_gauge("regular"), routes=True)
    (route,) = [r for r in rep.routes if r.name.startswith("Chern-Simons")]
    assert route.decisive and route.agrees and rep.passed


def test_verify_shows_the_thooft_pole_count_as_input():
    # 't Hooft: k = number of poles ('t Hooft 1976, unpublished; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642;
    # from memory; test_thooft_charge_is_the_number_of_poles checks it): an input, not a check
    rep = checks.verify(ansatz.thooft([[0.0, 0, 0, 0], [3.5, 0.5, 0, 0.5]], [1.0, 0.8]))
    (route,) = [r for r in rep.routes if "poles" in r.name]
    assert route.value == 2.0 and route.agrees is None and route.how == "input"
    assert rep.passed, rep.reasons
    assert "agrees" not in [r.status for r in rep.rows if r.label.startswith("pole count")]


# -- the public seams of the integrals (layout, requests, final rule) ------------------------------


def test_layout_of_asks_the_field_hooks():
    data = ik.random_adhm(2, seed=1)
    lay = integrals.layout_of(data)
    assert np.allclose(lay.centres, data.centers()) and np.allclose(lay.scales, data.sizes())
    assert lay.period is None and "layout" in lay.source
    shift = np.array([1.0, 2.0, 0.0, -0.5])
    assert np.allclose(integrals.layout_of(transforms.translate(data, shift)).centres, data.centers() + shift)
    assert np.allclose(integrals.layout_of(transforms.parity(data)).centres, data.centers() * transforms.PARITY)
    th = ansatz.thooft([[0.0, 0, 0, 0], [3.5, 0.5, 0, 0.5]], [1.0, 0.8])
    assert np.allclose(integrals.layout_of(th).scales, [1.0, 0.8])
    jnr = ansatz.jnr([[0.0, 0, 0, 0], [3.0, 0, 0, 0], [0.0, 3.0, 0, 0]], [1.0, 1.2, 0.9])
    assert integrals.layout_of(jnr).centres.shape == (1, 4) and "hint" in integrals.layout_of(jnr).source
    user = integrals.layout_of(data, center=np.zeros(4), scale=2.0)
    assert user.source == "user hints" and np.allclose(user.scales, [2.0])
    assert integrals.layout_of(ansatz.caloron(0.7, 2.0)).period == 2.0


def test_layout_of_names_the_bad_argument():
    data = ik.bpst()
    with pytest.raises(ValueError, match="center must have shape"):
        integrals.layout_of(data, center=np.zeros(3))
    with pytest.raises(ValueError, match="scale must be > 0"):
        integrals.layout_of(data, center=np.zeros(4), scale=-1.0)
    with pytest.raises(ValueError, match="quantity must be"):
        integrals.DensityRequest("potential")


def test_integrate_returns_the_final_rule_that_integrates_the_density():
    # S = 8 pi^2 for BPST (Belavin, Polyakov, Schwartz, Tyupkin 1975), on the returned (capped) rule
    data = ik.bpst((0.3, -0.2, 0.5, 0.1), 1.3)
    out = integrals.integrate(
        data, (integrals.DensityRequest("action_density"),), integrals.layout_of(data), rule_points=5000
    )
    (res,) = out.results
    rule = out.rule
    assert rule.points.shape == (rule.size, 4) and rule.weights.shape == (rule.size,) and rule.size <= 5000
    assert abs(rule.integrate(fields.action_density(data, rule.points)) - EIGHT_PI2) <= 1e-8 * EIGHT_PI2
    assert abs(res.value - EIGHT_PI2) <= 1e-8 * EIGHT_PI2
