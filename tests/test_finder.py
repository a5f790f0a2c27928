"""Specification of the instanton finder: moduli recovered from exact ADHM densities (lattice and
scattered samples, with and without 1% noise), ambiguity reports, the summary and bad input.

Tolerances: for k = 1 the BPST superposition model is exact (centres and sizes to 1e-8); for k >= 2 the
exact ADHM density differs from the superposition by interaction terms of relative order
(rho / distance)^2, which limits noiseless recovery to about 1e-2 rho in the centres and 3e-2 in the
sizes at the separations used here (measured on the 13^4 lattice: centres <= 1.8e-3 rho, sizes <= 1.5e-2; with 1% noise centres <= 6e-3 rho).
"""

from __future__ import annotations

import numpy as np
import pytest

import instantonkit as ik
from instantonkit.finder import InstantonFit, count_peaks, find_instantons

GRID = np.linspace(-4.0, 4.0, 13)
LATTICE = np.stack(np.meshgrid(GRID, GRID, GRID, GRID, indexing="ij"), axis=-1).reshape(-1, 4)
CENTERS = np.array([[-2.0, -2.0, -2.0, -2.0], [2.0, 2.0, -2.0, 2.0], [-2.0, 2.0, 2.0, 0.0], [2.0, -2.0, 2.0, -1.5]])
SIZES = np.array([0.7, 0.8, 0.6, 0.75])


def known(k, seed=0):
    o = np.random.default_rng(seed).normal(size=(k, 4))
    o /= np.linalg.norm(o, axis=1, keepdims=True)
    return ik.multi_instanton(CENTERS[:k], SIZES[:k], o)


def errors(fit, k):
    """Max centre error / rho and max relative size error, matching fitted to true instantons."""
    order = [int(np.argmin(np.linalg.norm(CENTERS[:k] - c, axis=1))) for c in fit.centers]
    assert sorted(order) == list(range(k))
    ec = np.max(np.linalg.norm(fit.centers - CENTERS[order], axis=1) / SIZES[order])
    es = np.max(np.abs(fit.sizes / SIZES[order] - 1.0))
    return float(ec), float(es)


def test_single_bpst_is_recovered_exactly_on_a_lattice():
    # BPST density 48 rho^4 / (|x - a|^2 + rho^2)^4 (Belavin et al., Phys. Lett. B 59 (1975) 85) is the model itself
    a, rho = np.array([0.3, -0.4, 0.2, 0.1]), 0.9
    s = ik.action_density(ik.bpst(a, rho), LATTICE)
    fit = find_instantons(LATTICE, s, 1)
    assert np.max(np.abs(fit.centers[0] - a)) < 1e-8 * rho and abs(fit.sizes[0] - rho) < 1e-8 * rho
    assert not fit.ambiguous and fit.data.k == 1


@pytest.mark.parametrize("k", [2, 3, 4])
def test_separated_instantons_are_recovered_on_a_lattice(k):
    s = ik.action_density(known(k, seed=k), LATTICE)
    fit = find_instantons(LATTICE, s, k)
    ec, es = errors(fit, k)
    assert ec < 1e-2 and es < 3e-2, (ec, es)
    assert not fit.ambiguous, fit.reasons
    noisy = s * (1.0 + 0.01 * np.random.default_rng(k).normal(size=s.shape))  # 1% multiplicative noise
    ec, es = errors(find_instantons(LATTICE, noisy, k), k)
    assert ec < 5e-2 and es < 5e-2, (ec, es)


def test_scattered_points_with_noise():
    rng = np.random.default_rng(11)
    pts = rng.uniform(-4.0, 4.0, size=(30000, 4))
    s = ik.action_density(known(2, seed=5), pts) * (1.0 + 0.01 * rng.normal(size=30000))
    ec, es = errors(find_instantons(pts, s, 2), 2)
    assert ec < 5e-2 and es < 5e-2, (ec, es)


def test_charge_density_of_anti_instantons_gives_negative_sign_and_charge():
    # q = -s / 8 pi^2 for anti-self-dual fields (conventions module)
    data = ik.multi_instanton(CENTERS[:2] * np.array([-1.0, -1.0, -1.0, 1.0]), SIZES[:2]).conjugate()
    np.testing.assert_allclose(data.centers(), CENTERS[:2], atol=1e-12)
    fit = find_instantons(LATTICE, ik.charge_density(data, LATTICE), 2, quantity="charge")
    assert fit.sign == -1 and fit.data.charge == -2
    ec, _ = errors(fit, 2)
    assert ec < 1e-2
    np.testing.assert_allclose(np.sort(fit.data.centers(), axis=0), np.sort(fit.centers, axis=0), atol=1e-10)


def test_uncertainties_are_consistent_with_the_noise():
    rng = np.random.default_rng(3)
    a, rho = np.array([0.3, -0.4, 0.2, 0.1]), 0.9
    s = ik.action_density(ik.bpst(a, rho), LATTICE) * (1.0 + 0.01 * rng.normal(size=LATTICE.shape[0]))
    # residuals are homoscedastic for weights 1 / sigma_i^2; for 1% multiplicative noise sigma_i ~ s_i
    fit = find_instantons(LATTICE, s, 1, weights=1.0 / s**2)
    err = np.abs(fit.centers[0] - a)
    sig = fit.uncertainties["centers"][0]
    assert np.all(sig > 0) and np.all(err < 5.0 * sig)  # a 5-sigma bound (common practice)
    assert abs(fit.sizes[0] - rho) < 5.0 * fit.uncertainties["sizes"][0]


def test_overlapping_instantons_are_flagged_ambiguous():
    data = ik.multi_instanton([[0.0, 0.0, 0.0, 0.0], [0.9, 0.0, 0.0, 0.0]], [1.0, 1.0])
    fit = find_instantons(LATTICE, ik.action_density(data, LATTICE), 2)
    assert fit.ambiguous
    assert any("overlap" in r or "peak" in r for r in fit.reasons)


def test_k_larger_than_the_number_of_peaks_is_flagged():
    s = ik.action_density(known(2), LATTICE)
    assert count_peaks(LATTICE, s)[0].shape == (2, 4)
    fit = find_instantons(LATTICE, s, 3)
    assert fit.ambiguous and any("exceeds the 2 distinct peak" in r for r in fit.reasons)


def test_summary_is_a_table_with_one_row_per_instanton():
    fit = find_instantons(LATTICE, ik.action_density(known(2), LATTICE), 2)
    text = str(fit)
    assert isinstance(fit, InstantonFit) and text == fit.summary()
    rows = [line for line in text.splitlines()[2:] if line.strip()[:1].isdigit()]
    assert len(rows) == 2 and "orientations: not determined" in text


def test_init_is_used():
    s = ik.action_density(ik.bpst([0.0, 0.0, 0.0, 0.0], 1.0), LATTICE)
    fit = find_instantons(LATTICE, s, 1, init=(np.array([[0.2, 0.1, 0.0, 0.0]]), np.array([1.2])))
    assert np.max(np.abs(fit.centers)) < 1e-8


def test_bad_input_raises():
    s = np.ones(LATTICE.shape[0])
    with pytest.raises(ValueError, match="one value per point"):
        find_instantons(LATTICE, s[:-1], 1)
    with pytest.raises(ValueError, match="k must be"):
        find_instantons(LATTICE, s, 0)
    with pytest.raises(ValueError, match="quantity"):
        find_instantons(LATTICE, s, 1, quantity="energy")
    with pytest.raises(ValueError, match="weights"):
        find_instantons(LATTICE, s, 1, weights=np.ones(3))
    with pytest.raises(ValueError, match="points must have shape"):
        find_instantons(LATTICE[:, :3], s, 1)
    with pytest.raises(TypeError, match="density"):
        find_instantons(LATTICE, s.astype(complex), 1)
    with pytest.raises(ValueError, match="init"):
        find_instantons(LATTICE, s, 1, init=(np.zeros((2, 4)), np.ones(2)))
    with pytest.raises(ValueError, match="zero everywhere"):
        find_instantons(LATTICE, np.zeros(LATTICE.shape[0]), 1)
