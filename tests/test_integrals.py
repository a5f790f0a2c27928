"""Specification of the integrals' error estimates: the reported error bounds the true one, budgets hold.

Q = k for charge-k ADHM data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185); the
action per period of the Harrington-Shepard caloron is 8 pi^2 (Harrington, Shepard, Phys. Rev. D 17
(1978) 2122).  Seeds are fixed; budgets are small so the file runs in about a minute on two cores.
"""

from __future__ import annotations

import math

import pytest

import instantonkit as ik
from instantonkit import ansatz, integrals

EIGHT_PI2 = 8 * math.pi**2


@pytest.mark.parametrize("k, budget", [(1, 300_000), (2, 300_000), (3, 300_000), (4, 150_000)])
def test_reported_error_bounds_the_true_charge_error_at_1e_10(k, budget):
    # Q = k (ADHM 1978): whether converged or stopped by the budget, error >= |Q - k|
    res = integrals.total_charge(ik.random_adhm(k, seed=k), rtol=1e-10, atol=1e-10, max_points=budget)
    assert res.evaluations <= budget
    assert res.error >= abs(res.value - k), res
    if res.converged:
        assert abs(res.value - k) <= 1e-10 * k
    else:
        assert "budget" in res.message and f"{budget:,}" in res.message


@pytest.mark.slow
def test_reported_error_bounds_the_true_charge_error_for_k8_at_1e_8():
    # Q = 8 (ADHM 1978); a small budget: the k = 8 density is the slowest to evaluate
    budget = 150_000
    res = integrals.total_charge(ik.random_adhm(8, seed=8), rtol=1e-8, atol=1e-8, max_points=budget)
    assert res.evaluations <= budget
    assert res.error >= abs(res.value - 8), res
    assert res.converged or ("budget" in res.message and f"{budget:,}" in res.message)


def test_two_separated_lumps_converge_to_1e_8_within_half_a_million_points():
    # Q = 2 (ADHM 1978); the oriented shell rules of the quadrature: the plain ones needed 1.2M points here
    res = integrals.total_charge(ik.random_adhm(2, seed=2), rtol=1e-8, atol=1e-8, max_points=500_000)
    assert res.converged, res
    assert abs(res.value - 2) <= res.error <= 2e-8


def test_caloron_action_error_bounds_the_true_error():
    # S per period = 8 pi^2 (Harrington and Shepard 1978), on R^3 x S^1
    res = integrals.total_action(ansatz.caloron(0.7, 2.0, (0.1, 0.0, -0.2, 0.3)), rtol=1e-9, atol=1e-9)
    assert res.converged and "R^3 x S^1" in res.rule
    assert abs(res.value - EIGHT_PI2) <= res.error


def test_a_budget_below_the_first_round_is_refused_naming_max_points():
    with pytest.raises(ValueError, match="max_points must be at least"):
        integrals.total_charge(ik.random_adhm(3, seed=3), max_points=1000)
