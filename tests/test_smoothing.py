"""Gradient flow, cooling, the 1x1 + 2x2 improved action and the improved charge (instantonkit.lattice.smoothing)."""

import numpy as np
import pytest
import scipy.linalg as sla
from _references import bpst_box_action, force_finite_difference, noisy_links

import instantonkit as ik
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice import starts as lat
from instantonkit.lattice.forces import loop_force

EIGHT_PI2 = 8.0 * np.pi**2


# -- continuum references -------------------------------------------------------------------------------


def loop_box_action(rho, origin, n, m):
    """Continuum action over the region the open-lattice m x m loops stand for (spacing 1): a loop at
    corner x in plane (mu, nu) is the cell of its centre x + m/2 (mu + nu) in the midpoint rule, so the
    centres' cells span [x_lo + (m-1)/2, x_hi - (m-1)/2] in mu, nu and [x_lo - 1/2, x_hi + 1/2] in the
    other two directions; the density is shared equally by the six planes."""
    xlo, xhi = np.asarray(origin, float), np.asarray(origin, float) + (n - 1)
    total = 0.0
    for mu, nu in lat.PLANES:
        lo, hi = xlo - 0.5, xhi + 0.5
        lo[[mu, nu]], hi[[mu, nu]] = xlo[[mu, nu]] + (m - 1) / 2, xhi[[mu, nu]] - (m - 1) / 2
        total += bpst_box_action(rho, lo, hi) / 6.0
    return total


@pytest.fixture(scope="module")
def open_starts():
    """Open-boundary regular-gauge BPST starts at rho/a = 2, 3 in boxes of half-width about 2.5 rho."""
    out = {}
    for ratio in (2, 3):
        n = 2 * int(np.ceil(2.5 * ratio))
        data = ik.bpst(size=float(ratio)).with_gauge("regular")
        out[ratio] = (
            lat.lattice_links(data, (n,) * 4, 1.0, boundary="open"),
            lat.default_origin(data, (n,) * 4, 1.0),
            n,
        )
    return out


@pytest.fixture(scope="module")
def periodic_12():
    """A periodic 12^4 singular-gauge start at rho/a = 2.  It carries the periodic boundary jump
    (S_W / 8 pi^2 = 1.031 against 0.95 for the instanton alone), which the first cooling sweeps remove."""
    return lat.lattice_links(ik.bpst(size=2.0), (12,) * 4, 1.0)


# -- the loops, the force and the exponential -----------------------------------------------------------


def test_one_by_one_quantities_equal_the_observables(periodic_12):
    # S_1 is the Wilson action and the 1x1 clover charge the clover charge of the observables module
    u = periodic_12
    assert sm.loop_action(u, 1) == pytest.approx(lat.wilson_action(u), rel=1e-12)
    assert sm.loop_clover_charge(u, 1) == pytest.approx(lat.clover_charge(u), rel=1e-11)
    assert sm.improved_action(u, 1.0) == pytest.approx(lat.wilson_action(u), rel=1e-12)


def test_open_one_by_one_quantities_equal_the_observables(open_starts):
    u = open_starts[2][0]
    assert sm.loop_action(u, 1, boundary="open") == pytest.approx(lat.wilson_action(u, boundary="open"), rel=1e-12)
    assert sm.loop_clover_charge(u, 1, boundary="open") == pytest.approx(
        lat.clover_charge(u, boundary="open"), rel=1e-11
    )


@pytest.mark.parametrize("eps", [1.0, -1.0, 0.0])
def test_force_is_minus_the_lie_derivative_of_the_action(eps):
    # Z = -g0^2 dS (Luescher, JHEP 08 (2010) 071, section 2, from memory), i.e. d/ds S(exp(s X) U) = 2 tr(X Z), checked
    # against a central finite difference with scipy's expm on one link of a rough SU(2) lattice
    u = noisy_links(lat.lattice_links(ik.bpst(size=1.5), (4,) * 4, 1.0), 0.3, 1)
    c1, c2 = sm.improved_coefficients(eps)
    # the force each flow runs: the fused plaquette force of the Wilson flow, the plane force of S(eps) otherwise
    z = sm._force(u, 1.0) if eps == 1.0 else loop_force(u, *sm._eps_terms(c1, c2, True))
    fd, want = force_finite_difference(u, z, lambda v: sm.improved_action(v, eps))
    assert fd == pytest.approx(want, rel=1e-6, abs=1e-9)


@pytest.mark.parametrize("n", [2, 3])
def test_exponential_matches_scipy_and_is_special_unitary(n):
    rng = np.random.default_rng(n)
    z = rng.normal(size=(50, n, n)) + 1j * rng.normal(size=(50, n, n))
    x = 0.5 * (z - np.conj(np.swapaxes(z, -1, -2)))
    x = 2.0 * (x - np.trace(x, axis1=-2, axis2=-1)[:, None, None] * np.eye(n) / n)
    got = np.asarray(sm._expm_su(x))
    want = np.stack([sla.expm(a) for a in x])
    assert np.max(np.abs(got - want)) < 1e-13
    assert lat.unitarity_deviation(got) < 1e-14


# -- the improved action -----------------------------------------------------------------------------------


def test_improved_action_a2_coefficient_is_minus_eps_over_5(open_starts):
    # S(eps) = 8 pi^2 [1 - (eps/5)(a/rho)^2 + O(a^4)] (Garcia Perez, Gonzalez-Arroyo, Snippe, van Baal,
    # Nucl. Phys. B 413 (1994) 535, from memory).  Each loop action is divided by the continuum action of
    # the region its loops stand for (S_2 -> 16 S_cont), d = 1 - S(eps)/S_cont, and the a^4 term is taken
    # from the Wilson expansion 1 - x/5 - x^2/70, x = (a/rho)^2 (same paper, from memory) with
    # S_2(a) = 16 S_1(2a) (a 2x2 loop is a plaquette of spacing 2a): d = (eps/5) x - (12 - 15 eps)/210 x^2.
    # The a^2 coefficient (d + (12 - 15 eps)/210 x^2)/x is then -(-eps/5) to 0.01 at rho/a = 3; at rho/a = 2
    # the 2x2 loops span one rho and the O(a^6) term leaves 0.04.
    for ratio, tol in ((3, 0.01), (2, 0.04)):
        u, origin, n = open_starts[ratio]
        x = 1.0 / ratio**2
        d1 = 1.0 - sm.loop_action(u, 1, boundary="open") / loop_box_action(float(ratio), origin, n, 1)
        d2 = 1.0 - sm.loop_action(u, 2, boundary="open") / (16.0 * loop_box_action(float(ratio), origin, n, 2))
        if ratio == 3:  # the 2x2 loops at spacing a are the Wilson action at spacing 2a, to 1 %
            assert d2 == pytest.approx(0.2 * (4 * x) + (4 * x) ** 2 / 70, rel=0.01)
        for eps in (1.0, 0.0, -1.0):
            c1, c2 = sm.improved_coefficients(eps)
            d = c1 * d1 + 16.0 * c2 * d2  # c1 + 16 c2 = 1
            a2 = (d + (12 - 15 * eps) / 210 * x**2) / x
            assert a2 == pytest.approx(eps / 5.0, abs=tol), (ratio, eps, a2)


# -- Wilson flow -------------------------------------------------------------------------------------------


def test_runge_kutta_integrator_is_third_order():
    # Luescher's RK3 scheme (JHEP 08 (2010) 071, appendix C, from memory) has a global error O(h^3): halving the step
    # divides the distance to a fine-step reference by about 8 (measured 10.8, 9.6, 8.8 for 4 -> 8 -> 16 -> 32
    # steps; a second-order scheme would give 4)
    u = noisy_links(lat.lattice_links(ik.bpst(size=1.5), (4,) * 4, 1.0), 0.4, 3)
    ref, _ = sm.wilson_flow(u, 0.4, 0.4 / 128)
    errs = [np.max(np.abs(sm.wilson_flow(u, 0.4, 0.4 / k)[0] - ref)) for k in (8, 16)]
    assert 7.0 < errs[0] / errs[1] < 10.5


@pytest.fixture(scope="module")
def flow_rho3():
    """A periodic 14^4 rho/a = 3 start, made rough by random noise, Wilson-flowed to t = 1 in steps of 0.1."""
    u = lat.lattice_links(ik.bpst(size=3.0), (14,) * 4, 1.0)
    rough = noisy_links(u, 0.15, 7)
    return u, sm.wilson_flow(rough, 1.0, 0.1, every=2)


def test_wilson_flow_lowers_the_action_and_keeps_links_special_unitary(flow_rho3):
    # the gradient flow decreases the action monotonically (Luescher 2010, common practice), from the
    # noise's hundreds of instanton actions to near the smooth start's (1.21 x 8 pi^2 with its boundary jump)
    _, (v, rec) = flow_rho3
    assert np.all(np.diff(rec.wilson_action) < 0)
    assert rec.wilson_action[0] > 100 * EIGHT_PI2 and rec.wilson_action[-1] < 1.5 * EIGHT_PI2
    assert lat.unitarity_deviation(v) < 1e-13


def test_wilson_flow_recovers_the_charge_of_the_start(flow_rho3):
    # the topological charge survives the flow (Luescher 2010): the noise drives the clover charge far from
    # the start's value, the flow brings it back to it (the smooth start's Q_clover ~ 0.91 at rho/a = 3,
    # whose a^2 error the flow does not remove) and the improved charge to the integer 1 within 2 %
    u, (_, rec) = flow_rho3
    q0 = lat.clover_charge(u)
    assert abs(rec.clover_charge[0] - q0) > 0.1
    assert abs(rec.clover_charge[-1] - q0) < 0.01
    assert abs(rec.improved_charge[-1] - 1.0) < 0.02 < abs(rec.clover_charge[-1] - 1.0)


def test_su3_flow_of_an_embedded_start_equals_the_su2_flow():
    # an SU(2) field embedded in SU(3) and gauge-rotated by random SU(3) matrices flows like the SU(2) field
    # (gauge covariance of the flow; Luescher 2010): the Wilson action records agree to rounding
    u2 = noisy_links(lat.lattice_links(ik.bpst(size=1.5), (4,) * 4, 1.0), 0.3, 5)
    u3 = np.zeros(u2.shape[:5] + (3, 3), complex)
    u3[..., :2, :2] = u2
    u3[..., 2, 2] = 1.0
    u3 = lat.gauge_transform(u3, lat.random_gauge((4,) * 4, 3, seed=1))
    _, r2 = sm.wilson_flow(u2, 0.3, 0.05)
    v3, r3 = sm.wilson_flow(u3, 0.3, 0.05)
    np.testing.assert_allclose(r3.wilson_action, r2.wilson_action, rtol=1e-11)
    assert lat.unitarity_deviation(v3) < 1e-13


# -- cooling -----------------------------------------------------------------------------------------------


def test_su3_cooling_lowers_the_wilson_action_every_sweep_and_keeps_links_in_su3():
    # each Cabibbo-Marinari subgroup step maximises Re tr(U Sigma) in its SU(2) subgroup, so no update
    # raises the action (Cabibbo and Marinari, Phys. Lett. B 119 (1982) 387, from memory; common practice)
    u = lat.lattice_links(ik.bpst(size=1.5), (4,) * 4, 1.0, group="su3")
    u = noisy_links(lat.gauge_transform(u, lat.random_gauge((4,) * 4, 3, seed=2)), 0.3, 4)
    v, rec = sm.cool(u, 4, hits=2)
    assert np.all(np.diff(rec.wilson_action) < 0)
    assert lat.unitarity_deviation(v) < 1e-13


def test_cooling_checks_the_lattice_shape():
    u = lat.lattice_links(ik.bpst(), (6, 6, 6, 5), 1.0)
    with pytest.raises(ValueError, match="even"):
        sm.cool(u, 1)
    with pytest.raises(ValueError, match="divisible by 4"):
        sm.cool(lat.lattice_links(ik.bpst(), (6,) * 4, 1.0), 1, eps=0.0)
    with pytest.raises(TypeError, match="sweeps"):
        sm.cool(u, 1.5)


@pytest.fixture(scope="module")
def cooled_12(periodic_12):
    """10 Wilson and 5 eps = -1 cooling sweeps of the periodic 12^4 rho/a = 2 start, measured every sweep."""
    v, wil = sm.cool(periodic_12, 10)
    w, over = sm.cool(periodic_12, 5, eps=-1.0)
    return (v, wil), (w, over)


def test_cooling_lowers_its_action_every_sweep_and_keeps_links_in_su2(cooled_12):
    # an SU(2) link update minimises the local action exactly (common practice), for the Wilson action
    # and for S(eps = -1) with its 2x2 staples (8-colour sweep)
    for links, rec in cooled_12:
        assert np.all(np.diff(rec.action) < 0)
        assert lat.unitarity_deviation(links) < 1e-13
    (_, wil), (w, over) = cooled_12
    np.testing.assert_array_equal(wil.action, wil.wilson_action)
    assert over.action[-1] == pytest.approx(sm.improved_action(w, -1.0), rel=1e-12)


def test_instanton_shrinks_under_wilson_cooling_and_not_under_over_improved_cooling(periodic_12, cooled_12):
    # the sign of the a^2 term of S(eps) (Garcia Perez, Gonzalez-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994)
    # 535): for eps = 1 the action falls as rho falls, so cooling shrinks the instanton; for eps = -1 it rises, and the
    # instanton does not shrink. Size from moments of the clover action density (instanton_size); rho/a = 2 on 12^4
    # (measured: 2.34 at the start, 2.14 after 10 Wilson sweeps, 2.35 after 5 eps = -1 sweeps)
    (_, wil), (_, over) = cooled_12
    rho0 = sm.instanton_size(periodic_12)
    assert wil.size[0] == pytest.approx(rho0, rel=1e-12)
    assert wil.size[-1] < rho0 - 0.15
    assert over.size[-1] > rho0
    assert np.all(np.diff(wil.size) < 0)
    assert abs(over.clover_charge[-1] - wil.clover_charge[0]) < 0.05


# -- the improved charge -------------------------------------------------------------------------------------


@pytest.mark.parametrize("ratio", [2, 3])
def test_improved_charge_is_closer_to_the_continuum_than_clover(open_starts, ratio):
    # q_imp = (4/3) q_1x1 - (1/48) q_2x2 cancels the tree-level a^2 error of the clover charge (Garcia Perez,
    # Gonzalez-Arroyo, Snippe, van Baal, Nucl. Phys. B 413 (1994) 535, from memory).  Both summed over the sites where
    # the 2x2 clovers fit, divided by the continuum charge of those sites' cells (Belavin, Polyakov, Schwartz, Tyupkin,
    # Phys. Lett. B 59 (1975) 85): the clover is off by about 0.8 (a/rho)^2, the improved charge by several times less
    u, origin, n = open_starts[ratio]
    q_imp = sm.improved_charge_density(u, boundary="open")
    inside = ~np.isnan(q_imp)
    q_clov = lat.clover_charge_density(u, boundary="open")[inside].sum()
    q_box = bpst_box_action(float(ratio), origin + 1.5, origin + (n - 2.5)) / EIGHT_PI2
    err_clov = abs(q_clov / q_box - 1.0)
    err_imp = abs(q_imp[inside].sum() / q_box - 1.0)
    assert err_clov > 0.5 / ratio**2
    assert err_imp < err_clov / (2.5 if ratio == 2 else 4.0)  # the 2x2 clover spans 2 rho at rho/a = 2
