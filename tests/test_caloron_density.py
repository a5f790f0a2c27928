"""Closed-form caloron densities s = -1/2 box box log psi (SU(2) and SU(N)), charge per period, constituents."""

import jax
import mpmath as mp
import numpy as np
import pytest

import instantonkit as ik
from instantonkit.ansatz import caloron_psi as cp
from instantonkit.ansatz.calorons import CaloronField, HolonomyCaloronField
from instantonkit.ansatz.calorons_sun import SUNCaloronField
from instantonkit.engine import fields
from instantonkit.integrals.drivers import ENGINE_CHUNK
from instantonkit.lattice.references import field_from_record
from instantonkit.verification.constituents import ball_fractions

BETA, RHO = 1.3, 0.9
CENTER = np.array([0.1, -0.2, 0.3, 0.4])
AXIS = np.array([1.0, 0.5, -0.2])
RULE = {"n_radial": 24, "n_polar": 16, "n_time": 8}  # ball rule: converged to ~1e-8 here (checked against 80, 32, 16)


def _kvb(omega):
    return HolonomyCaloronField(RHO, BETA, omega, CENTER, AXIS)


def _sq(field, pts):
    """s and q on a few points, padded to one engine chunk: the kernels that total_charge and
    ball_fractions compile anyway (one compilation per quantity and field structure)."""
    pts = np.asarray(pts, dtype=np.float64)
    padded = np.concatenate([pts, np.repeat(pts[:1], ENGINE_CHUNK - len(pts), axis=0)])
    s = fields.evaluate(field, padded, "action_density", chunk_size=ENGINE_CHUNK)[: len(pts)]
    q = fields.evaluate(field, padded, "charge_density", chunk_size=ENGINE_CHUNK)[: len(pts)]
    return s, q


def _s(field, pts):
    pts = np.asarray(pts, dtype=np.float64)
    padded = np.concatenate([pts, np.repeat(pts[:1], ENGINE_CHUNK - len(pts), axis=0)])
    return fields.evaluate(field, padded, "action_density", chunk_size=ENGINE_CHUNK)[: len(pts)]


def _points(n, seed=0, spread=1.0):
    return CENTER + spread * np.random.default_rng(seed).normal(size=(n, 4))


def _mp_psi(pos, frac, beta):
    """Kraan-van Baal's psi = 1/2 tr(A_N ... A_1) - cos(2 pi t/beta) in mpmath (the formula as published:
    Kraan, van Baal, Phys. Lett. B 435 (1998) 389 and Nucl. Phys. B 533 (1998) 627, from memory)."""
    n = len(frac)
    ys = [[mp.mpf(float(v)) for v in p] for p in pos]

    def psi(*x):
        prod = mp.eye(2)
        for m in range(n):
            y, y1 = ys[m], ys[(m + 1) % n]
            r = mp.sqrt(sum((x[i] - y[i]) ** 2 for i in range(3)))
            r1 = mp.sqrt(sum((x[i] - y1[i]) ** 2 for i in range(3)))
            dist = mp.sqrt(sum((y1[i] - y[i]) ** 2 for i in range(3)))
            k = 2 * mp.pi * mp.mpf(float(frac[m])) / beta
            ch, sh = mp.cosh(k * r), mp.sinh(k * r)
            prod = (mp.matrix([[r, dist], [0, r1]]) / r) * mp.matrix([[ch, sh], [sh, ch]]) * prod
        return mp.log((prod[0, 0] + prod[1, 1]) / 2 - mp.cos(2 * mp.pi * x[3] / beta))

    return psi


def _mp_action_density(x, pos, frac, beta):
    """-1/2 box box log psi by mpmath's high-precision numerical derivatives."""
    f = _mp_psi(pos, frac, beta)
    xs = [mp.mpf(float(v)) for v in x]
    total = 0
    for a in range(4):
        for b in range(a, 4):
            order = [0] * 4
            order[a] += 2
            order[b] += 2
            total += (1 if a == b else 2) * mp.diff(f, xs, tuple(order))
    return float(-total / 2)


# -- closed forms ------------------------------------------------------------------------------------


def test_radial_derivatives_match_mpmath_on_both_branches():
    # d^n/dz^n of sigma cosh(k sqrt z), sigma sinh(k sqrt z)/sqrt z and sigma (sigma = 1 or exp(-k sqrt z));
    # reference: mpmath's numerical derivatives at 30 digits.
    mp.mp.dps = 30
    k = 1.7
    for z, scaled in ((0.3, False), (1.2, False), (2.0, True), (9.0, True)):
        cv, sv, sg = cp.radial_derivatives(np.array([z]), k)

        def sig(w, scaled=scaled):
            return mp.exp(-k * mp.sqrt(w)) if scaled else mp.mpf(1)

        for n in range(5):
            c_ref = mp.diff(lambda w: sig(w) * mp.cosh(k * mp.sqrt(w)), z, n)
            s_ref = mp.diff(lambda w: sig(w) * mp.sinh(k * mp.sqrt(w)) / mp.sqrt(w), z, n)
            assert float(cv[n][0]) == pytest.approx(float(c_ref), rel=1e-12, abs=1e-14)
            assert float(sv[n][0]) == pytest.approx(float(s_ref), rel=1e-12, abs=1e-14)
            assert float(sg[n][0]) == pytest.approx(float(mp.diff(sig, z, n)), rel=1e-12, abs=1e-14)


def test_closed_form_density_equals_mpmath_bilaplacian_of_log_psi():
    # s = -1/2 box box log psi (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory), psi as
    # published, derivatives by mpmath: near a constituent core and far out in the abelian tail.
    mp.mp.dps = 30
    field = _kvb(0.25)
    pos, frac = field.constituents()
    pts = np.array([pos[0] + [0.01, 0.0, 0.0, 0.02], CENTER + [5.0, 3.0, 1.0, 0.2], CENTER + [30.0, -20.0, 10.0, 0.5]])
    got = _s(field, pts)
    want = [_mp_action_density(p - [0, 0, 0, CENTER[3]], pos[:, :3], frac, BETA) for p in pts]
    np.testing.assert_allclose(got, want, rtol=1e-10)


def test_closed_form_density_is_periodic_in_x4():
    field = _kvb(0.25)
    pts = _points(8, seed=3)
    np.testing.assert_allclose(_s(field, pts + [0, 0, 0, BETA]), _s(field, pts), rtol=1e-13)


def test_zero_holonomy_closed_form_equals_harrington_shepard():
    # omega -> 0: the Harrington-Shepard caloron (Phys. Rev. D 17 (1978) 2122, from memory), centred at
    # the heavy constituent (Kraan, van Baal 1998, from memory).
    field = _kvb(0.0)
    hs = CaloronField(RHO, BETA, field.constituents()[0][1])
    pts = _points(6, seed=4)
    want = fields.evaluate(hs, pts, "action_density")
    np.testing.assert_allclose(_s(field, pts), want, rtol=1e-10)


def test_small_caloron_approaches_the_bpst_density():
    # rho << beta: near its core the caloron is a BPST instanton, s = 48 rho^4 / (x^2 + rho^2)^4 (Belavin,
    # Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85; Kraan, van Baal 1998; from memory), up to
    # corrections of order (rho / beta)^2.
    rho, beta = 0.02, 1.0
    field = HolonomyCaloronField(rho, beta, 0.25, np.zeros(4), AXIS)
    y = rho * np.random.default_rng(7).normal(size=(6, 4))
    want = 48 * rho**4 / (np.sum(y**2, axis=1) + rho**2) ** 4
    np.testing.assert_allclose(_s(field, y), want, rtol=1e-2)


def test_charge_density_is_action_density_over_eight_pi_squared():
    field = _kvb(0.3)
    s, q = _sq(field, _points(3, seed=5))
    np.testing.assert_allclose(q, s / (8 * np.pi**2), rtol=1e-14)


def test_psi_of_two_constituents_equals_the_su2_closed_form_psi():
    # 1/2 tr(B_2 B_1) - cos against the SU(2) caloron's own psi (c1 c2 + (r1^2 + r2^2 + d^2)/(2 r1 r2) s1 s2
    # + d (s1 c2 / r1 + s2 c1 / r2) - cos, Kraan, van Baal 1998, from memory), a separate code path.
    field = _kvb(0.3)
    pos, nu = field.constituents()
    pts = _points(6, seed=6, spread=2.0)
    got = np.asarray(cp.log_psi(pts - [0, 0, 0, CENTER[3]], pos[:, :3], nu, BETA))
    k = 2 * np.pi * nu / BETA
    psi = jax.jit(field.psi)
    want = []
    for p in pts:
        r = np.linalg.norm(p[:3] - pos[:, :3], axis=1)
        scale = np.prod(np.where(k * r >= 1.0, np.exp(-k * r), 1.0))  # the scale of field.psi
        want.append(np.log(float(psi(p))) - np.log(scale))
    np.testing.assert_allclose(got, want, rtol=1e-13)


def test_sun_field_of_two_eigenphases_has_the_su2_constituents():
    field = _kvb(0.3)
    pos, nu = field.constituents()
    two = SUNCaloronField(BETA, [-0.3, 0.3], pos[:, :3], CENTER[3])
    got_pos, got_nu = two.constituents()
    np.testing.assert_allclose(got_pos, pos, atol=1e-15)
    np.testing.assert_allclose(got_nu, nu, rtol=1e-15)


def test_caloron_with_two_eigenphases_and_positions_is_the_su2_field():
    field = _kvb(0.3)
    pos, _ = field.constituents()
    again = ik.caloron(None, BETA, CENTER, holonomy=(-0.3, 0.3), positions=pos[:, :3])
    assert isinstance(again, HolonomyCaloronField)
    assert float(again.size) == pytest.approx(RHO, rel=1e-14)
    np.testing.assert_allclose(np.asarray(again.center), CENTER, atol=1e-14)


def test_su3_closed_form_equals_mpmath_bilaplacian_of_log_psi():
    # SU(3): psi = 1/2 tr(A_3 A_2 A_1) - cos(2 pi t/beta) (Kraan, van Baal, Phys. Lett. B 435 (1998) 389,
    # from memory); mpmath's derivatives as the reference.
    mp.mp.dps = 30
    pos = np.array([[0.0, 0.0, -0.8], [0.5, 0.3, 0.1], [-0.2, 0.1, 0.9]])
    field = SUNCaloronField(1.0, [-0.3, 0.1, 0.2], pos, 0.0)
    pts = np.array([[0.1, 0.2, -0.3, 0.25], [2.0, -1.0, 3.0, 0.4]])
    want = [_mp_action_density(p, pos, field.constituents()[1], 1.0) for p in pts]
    got = np.asarray(field.density_batch(jax.numpy.asarray(pts), "action_density"))  # eager: no compilation
    np.testing.assert_allclose(got, want, rtol=1e-10)


# -- charge per period and constituents --------------------------------------------------------------


@pytest.mark.parametrize("omega", [0.1, 0.25, 0.4])
def test_charge_per_period_is_one_to_1e_10(omega):
    # Q = 1 per period (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory).
    res = ik.total_charge(_kvb(omega), rtol=0.0, atol=2.5e-11)
    assert res.converged and abs(float(res.value) - 1.0) < 1e-10


@pytest.mark.slow  # the SU(3) kernel and about 3 10^6 points: tens of seconds on shared cores
def test_su3_charge_per_period_is_one_to_1e_10():
    # Q = 1 per period for every holonomy (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from memory).
    res = ik.total_charge(ik.caloron(0.6, 1.0, holonomy=(-1 / 3, 0.0, 1 / 3)), rtol=0.0, atol=2.5e-11, max_points=10**7)
    assert res.converged and abs(float(res.value) - 1.0) < 1e-10


def test_ball_fractions_approach_two_omega_and_one_minus_two_omega_as_constituents_separate():
    # Far apart, the action about each constituent is 2 omega and 1 - 2 omega of 8 pi^2 (Kraan, van Baal,
    # Nucl. Phys. B 533 (1998) 627, from memory); what lies outside the balls falls like 1 / radius.
    omega = 0.2
    near, r_near = ball_fractions(ik.caloron(2.0, 1.0, holonomy=omega), **RULE)
    far, r_far = ball_fractions(ik.caloron(4.0, 1.0, holonomy=omega), **RULE)
    want = np.array([2 * omega, 1 - 2 * omega])
    assert np.all(want - near > want - far) and np.all(want - far > 0)
    np.testing.assert_allclose(far, want, atol=4e-3)
    np.testing.assert_allclose((want - near) * r_near, (want - far) * r_far, rtol=0.05)


@pytest.mark.slow  # the SU(3) kernel on 3 balls at two sizes
def test_su3_ball_fractions_approach_nu():
    # nu_m = mu_{m+1} - mu_m, nu_3 = 1 + mu_1 - mu_3 (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from memory).
    mu = (-0.3, 0.1, 0.2)
    want = np.array([0.4, 0.1, 0.5])
    near, _ = ball_fractions(ik.caloron(2.0, 1.0, holonomy=mu))
    far, _ = ball_fractions(ik.caloron(3.0, 1.0, holonomy=mu))
    assert np.all(want - near > want - far) and np.all(want - far > 0)
    np.testing.assert_allclose(far, want, atol=8e-3)


@pytest.mark.long  # verify compiles the autodiff curvature kernels (about a minute on shared cores)
def test_verify_passes_at_1e_10_and_shows_holonomy_and_fractions_as_inputs():
    v = ik.verify(_kvb(0.1), charge_tol=1e-10)
    assert v.passed and abs(v.charge.value - 1.0) < 1e-10
    inputs = {r.label: r.value for r in v.rows if r.status == "input"}
    assert any(label.startswith("holonomy mu = (-0.1, 0.1)") for label in inputs)
    fractions = sorted(v for label, v in inputs.items() if "action fraction" in label)
    np.testing.assert_allclose(fractions, [0.2, 0.8], rtol=1e-14)
    assert sum(1 for r in v.rows if r.how == "integral over balls") == 2


def test_constituent_rows_show_holonomy_fractions_and_balls():
    from instantonkit.verification.constituents import constituent_rows

    rows = constituent_rows(ik.caloron(2.0, 1.0, holonomy=0.2))
    assert rows[0].status == "input" and rows[0].value == pytest.approx(np.cos(2 * np.pi * 0.2), rel=1e-14)
    np.testing.assert_allclose([r.value for r in rows if "action fraction" in r.label], [0.4, 0.6], rtol=1e-14)
    balls = [r.value for r in rows if r.how == "integral over balls"]
    np.testing.assert_allclose(balls, [0.4, 0.6], atol=0.02)


def test_sun_record_rebuilds_the_field():
    field = ik.caloron(0.9, 1.3, CENTER, holonomy=(-0.3, 0.1, 0.2))
    again = field_from_record(field.record())
    assert again.record() == field.record()


# -- bad input ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs, word",
    [
        ({"holonomy": (0.2, -0.1, -0.1)}, "ordered"),
        ({"holonomy": (-0.3, 0.1, 0.3)}, "sum"),
        ({"holonomy": (-0.6, 0.0, 0.6)}, "1.2"),
        ({"holonomy": (0.1,)}, "N >= 2"),
        ({"holonomy": (-0.3, 0.1, 0.2), "period": 0.0}, "period"),
        ({"holonomy": (-0.3, 0.1, 0.2), "period": -1.0}, "period"),
        ({"holonomy": (-0.3, 0.1, 0.2), "size": None, "positions": np.zeros((3, 3))}, "distinct"),
        ({"holonomy": (-0.3, 0.1, 0.2), "size": None, "positions": np.zeros((2, 3))}, r"\(3, 3\)"),
        ({"holonomy": (-0.3, 0.1, 0.2), "positions": np.eye(3)}, "both"),
        ({"holonomy": (-0.3, 0.1, 0.2), "size": None}, "neither"),
        ({"holonomy": (-0.25, 0.25), "size": None, "positions": np.ones((2, 3))}, "distinct"),
    ],
)
def test_bad_sun_input_is_refused_naming_the_value(kwargs, word):
    args = {"size": RHO, "period": BETA, "center": CENTER} | kwargs
    with pytest.raises(ValueError, match=word):
        ik.caloron(**args)


def test_ball_fractions_refuse_fields_without_constituents():
    with pytest.raises(ValueError, match="constituents"):
        ball_fractions(ik.bpst_field())


@pytest.mark.long  # the SU(3) kernels of verify (closed-form densities, the potential's autodiff F)
def test_verify_of_an_su3_caloron_checks_self_duality_of_its_potential():
    # the potential is the Nahm transform (ansatz.caloron_nahm); self-dual (Kraan, van Baal, Phys. Lett. B
    # 435 (1998) 389, from memory) and Q = 1 per period
    v = ik.verify(ik.caloron(0.6, 1.0, holonomy=(-1 / 3, 0.0, 1 / 3)))
    assert v.passed and abs(v.charge.value - 1.0) < 1e-6
    assert not any("no potential" in r for r in v.reasons)


@pytest.mark.parametrize("kwargs, word", [({"radius": -1.0}, "radii"), ({"n_radial": 0}, "n_radial")])
def test_ball_fractions_refuse_bad_rules(kwargs, word):
    with pytest.raises(ValueError, match=word):
        ball_fractions(ik.caloron(2.0, 1.0, holonomy=0.2), **kwargs)


# -- the charge as a flux --------------------------------------------------------------------------


def test_flux_through_a_sphere_equals_the_volume_integral_inside():
    # Gauss: int_{B x S^1} s = -1/2 oint n . grad box log psi (s = -1/2 box box log psi, Kraan, van Baal
    # 1998, from memory); the ball rule of ball_fractions as the volume side.
    field = _kvb(0.25)
    pos, nu = field.constituents()
    volume, _ = ball_fractions(field, radius=0.9)
    flux = cp.flux_charge(pos[:, :3], nu, BETA, pos[0], 0.9)
    assert flux == pytest.approx(volume[0], abs=1e-12)


@pytest.mark.parametrize("mu", [(-0.25, 0.25), (-0.3, 0.1, 0.2)], ids=["su2", "su3"])
def test_flux_charge_tends_to_one_with_a_dipole_tail(mu):
    # Far away log psi ~ sum_m 2 pi nu_m r_m / beta, so the flux at infinity is sum nu_m = 1; the
    # constituents' magnetic charges add to zero (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from
    # memory), so what lies outside radius R falls like R^-3 (about the nu-weighted centre) and two radii
    # extrapolate to Q.
    field = ik.caloron(0.9, BETA, holonomy=mu)
    pos, nu = field.constituents()
    centre = nu @ pos[:, :3]
    q1, q2 = (cp.flux_charge(pos[:, :3], nu, BETA, centre, r) for r in (100.0, 200.0))
    assert (1 - q2) * 200**3 == pytest.approx((1 - q1) * 100**3, rel=1e-3)
    assert abs(q2 + (q2 - q1) / 7.0 - 1.0) < 1e-10
