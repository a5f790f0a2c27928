"""Specification of verify and the integrals on wrong input: every integral ends, verdicts follow the rule.

The wrong fields are 't Hooft's two-instanton potential written by hand with a mistake.  The correct one
is A_mu = -1/2 eta-bar_{a mu nu} d_nu log(phi) u_a, phi = 1 + sum_i rho_i^2 / |x - a_i|^2 ('t Hooft
1976, unpublished; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642; from memory, equation number not
checked; signs of this library's conventions module, where tests/test_ansatz.py checks self-duality), charge +2.  With
another factor or sign the poles a_i stop being pure gauge: F ~ 1/r^2 there, s ~ r^-4 (from memory; checked here by the
fitted power law itself), and the action diverges logarithmically.
"""

from __future__ import annotations

import re
import time

import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.integrals import cubature, singular
from instantonkit.integrals import drivers as integrals

ETA = jnp.asarray(ik.quaternion.thooft_eta())
ETA_BAR = jnp.asarray(ik.quaternion.thooft_eta_bar())
UNITS = jnp.asarray(ik.conventions.QUATERNION_BASIS[1:])  # -i sigma_a, (3, 2, 2)
POLES = np.array([[0.0, 0.0, 0.0, 0.0], [3.0, 0.0, 0.0, 0.0]])


def thooft_by_hand(factor=-0.5, symbol=ETA_BAR, sizes=(1.0, 1.0), units=UNITS, one=1.0):
    """A_mu = factor symbol_{a mu nu} d_nu log(phi) u_a, phi = one + sum rho_i^2 / |x - a_i|^2; (4,) -> (4, 2, 2)."""
    rho2, centres = jnp.asarray(sizes) ** 2, jnp.asarray(POLES[: len(sizes)])

    def potential(x):
        d = x[None, :] - centres
        d2 = jnp.sum(d * d, axis=1)
        phi = one + jnp.sum(rho2 / d2)
        grad = jnp.sum(-2.0 * rho2[:, None] * d / d2[:, None] ** 2, axis=0)
        return factor * jnp.einsum("amn,n,aij->mij", symbol, grad / phi, units)

    return potential


def _named_poles(text: str) -> list[np.ndarray]:
    return [np.array([float(v) for v in m.split(",")]) for m in re.findall(r"not integrable at x = \(([^)]*)\)", text)]


# -- the integrals end, whatever the integrand ------------------------------------------------------------


def test_a_non_integrable_point_off_every_centre_is_named_with_its_power_law():
    # |x - x0|^-4 is not integrable about x0 in four dimensions (r^3 dr / r^4, common practice)
    x0 = np.array([1.5, 0.0, 0.0, 0.0])

    def density(x):
        return np.linalg.norm(x - x0, axis=1) ** -4.0 * np.exp(-np.sum(x * x, axis=1))

    layout = cubature.Layout(np.zeros((1, 4)), np.ones(1), None, "test")
    with pytest.raises(singular.SingularDensityError, match="not integrable at") as info:
        cubature.integrate_adaptive(density, "test", layout, rtol=1e-10, atol=1e-10, max_points=4_000_000, sink=None)
    found = info.value.singularity
    assert np.linalg.norm(found.point - x0) < 1e-3 and abs(found.power - 4.0) < 0.05


def test_a_round_that_would_add_no_points_stops_with_a_reason(monkeypatch):
    # worst shells at the finest angular level (lowered to 2 here) and the singular-point search off: the
    # plan has nothing to evaluate, and the integral must stop (refining radially, then saying why)
    monkeypatch.setattr(cubature, "MAX_ANGULAR_LEVEL", 2)
    monkeypatch.setattr(cubature, "_singularities", lambda *args: "", raising=False)
    x0 = np.array([1.5, 0.0, 0.0, 0.0])

    def density(x):
        return np.linalg.norm(x - x0, axis=1) ** -4.0 * np.exp(-np.sum(x * x, axis=1))

    layout = cubature.Layout(np.zeros((1, 4)), np.ones(1), None, "test")
    res, _ = cubature.integrate_adaptive(density, "t", layout, rtol=1e-12, atol=1e-12, max_points=10**7, sink=None)
    assert not res.converged and res.message and res.evaluations <= 10**7


def test_total_action_of_a_wrong_thooft_potential_names_the_pole():
    field = thooft_by_hand(factor=-1.0, sizes=(1.0,))
    with pytest.raises(integrals.DivergentIntegralError, match=r"not integrable at x = .*r\^-4"):
        ik.total_action(field, max_points=400_000)


# -- verify on wrong 't Hooft potentials -------------------------------------------------------------------


@pytest.mark.parametrize("factor", [-1.0, 0.5], ids=["factor-1-not-half", "flipped-sign"])
def test_wrong_thooft_potential_fails_at_its_poles_within_a_small_budget(factor):
    v = ik.verify(thooft_by_hand(factor=factor), expected_charge=2, max_points=200_000)
    assert v.verdict == ik.checks.FAILED
    assert any(np.linalg.norm(p - POLES, axis=1).min() < 1e-3 for p in _named_poles(" ".join(v.reasons)))
    assert not any("center=" in a or "raise the budget" in a for a in v.advice)


@pytest.mark.parametrize("factor", [-1.0, 0.5], ids=["factor-1-not-half", "flipped-sign"])
def test_wrong_thooft_potential_reaches_a_verdict_at_the_default_budget(factor):
    start = time.perf_counter()
    v = ik.verify(thooft_by_hand(factor=factor), expected_charge=2)
    assert v.verdict == ik.checks.FAILED and _named_poles(" ".join(v.reasons))
    assert all(r.evaluations <= v.budget for r in (v.charge, v.action) if r is not None)
    assert time.perf_counter() - start < 600.0


def test_no_row_names_an_integer_the_error_bar_cannot_name():
    # a row |Q -+ n| is shown only for the expected charge or a nearest integer within the error bar
    v = ik.verify(thooft_by_hand(factor=-1.0), expected_charge=2, max_points=200_000)
    for row in v.rows:
        m = re.fullmatch(r"\|Q ([+-]) (\d+)\|", row.label)
        if m:
            n = int(m.group(2)) * (1 if m.group(1) == "-" else -1)
            assert n == 2 or (row.error is not None and row.error < 0.5), row


# -- verdicts follow the documented rule -------------------------------------------------------------------


@pytest.mark.parametrize("bad", [1.5, 1.9, True, float("nan"), float("inf"), "2"])
def test_a_non_integer_expected_charge_is_refused(bad):
    with pytest.raises(ValueError, match="expected_charge must be an integer"):
        ik.verify(ik.bpst(), expected_charge=bad)


def test_an_integral_float_expected_charge_is_the_integer():
    assert ik.report.expected_integer(2.0) == 2 and ik.report.expected_integer(np.int64(-3)) == -3


def test_eta_for_eta_bar_fails_at_300k_points_as_an_orientation_mistake():
    # the self-dual symbol in place of the anti-self-dual one gives the anti-instanton, Q = -2
    # ('t Hooft, Phys. Rev. D 14 (1976) 3432: eta and eta-bar exchange self-dual and anti-self-dual)
    v = ik.verify(thooft_by_hand(symbol=ETA), expected_charge=2, max_points=300_000)
    assert v.verdict == ik.checks.FAILED
    assert any("orientation mistake" in r and "eta-bar" in r for r in v.reasons)


def test_orientation_mistake_is_named_for_q_near_minus_n():
    assert "orientation mistake" in ik.report.orientation_mistake(-2.0000034, 9e-5, 2, 1e-6)
    assert ik.report.orientation_mistake(2.0, 1e-8, 2, 1e-6) == ""


# -- any wrong ansatz gets a verdict within its budget -------------------------------------------------------


@settings(max_examples=3)  # on top of the ci profile: each example compiles its own kernels
@given(
    factor=st.sampled_from([-1.0, 0.5, -0.25, 1.0, -0.75]),
    symbol=st.sampled_from(["eta", "eta-bar"]),
    sizes=st.sampled_from([(1.0, 1.0), (1.0,), (0.7, 1.3)]),
    flip_units=st.booleans(),
    drop_one=st.booleans(),
)
def test_any_wrong_thooft_ansatz_gets_a_verdict_within_its_budget(factor, symbol, sizes, flip_units, drop_one):
    sym = ETA if symbol == "eta" else ETA_BAR
    field = thooft_by_hand(factor, sym, sizes, -UNITS if flip_units else UNITS, one=0.0 if drop_one else 1.0)
    v = ik.verify(field, expected_charge=2, max_points=100_000, routes=False)
    assert v.verdict in (ik.checks.FAILED, ik.checks.INCONCLUSIVE, ik.checks.PASSED)
    assert all(r.evaluations <= 100_000 for r in (v.charge, v.action) if r is not None)
