"""Specification of the oriented anisotropic S^3 rule of instantonkit.integrals.quadrature (sphere3_oriented)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate

from instantonkit.integrals import quadrature as qd

E = np.array([0.3, -0.5, 0.2, 0.7]) / np.linalg.norm([0.3, -0.5, 0.2, 0.7])


def test_oriented_rule_with_equal_counts_and_no_axis_is_the_isotropic_rule():
    d0, w0 = qd.sphere3_nodes(5)
    d1, w1 = qd.sphere3_oriented(5, 5)
    assert np.allclose(d0, d1) and np.allclose(w0, w1)


@pytest.mark.parametrize("n_psi, n_perp", [(4, 2), (12, 3), (9, 9)])
def test_oriented_rule_has_unit_directions_and_the_area_2pi2(n_psi, n_perp):
    # area of the unit S^3 is 2 pi^2 (common practice)
    d, w = qd.sphere3_oriented(n_psi, n_perp, E)
    assert d.shape == (2 * n_psi * n_perp**2, 4) and w.shape == (d.shape[0],)
    assert np.allclose(np.linalg.norm(d, axis=1), 1.0, atol=1e-14)
    assert abs(w.sum() - 2 * math.pi**2) <= 1e-12


@pytest.mark.parametrize("m", [3, 8, 15])
def test_oriented_rule_integrates_high_powers_of_the_angle_from_its_axis(m):
    # int_{S^3} (n.e)^(2m) = 4 pi int_0^pi cos^(2m) psi sin^2 psi dpsi (hyperspherical measure, common
    # practice), by scipy.integrate.quad; exact for 2m <= 2 n_psi - 1 with few nodes across
    ref = (
        4
        * math.pi
        * scipy.integrate.quad(
            lambda p: math.cos(p) ** (2 * m) * math.sin(p) ** 2, 0, math.pi, epsabs=0.0, epsrel=1e-13
        )[0]
    )
    d, w = qd.sphere3_oriented(m + 1, 2, E)
    assert abs(np.sum(w * (d @ E) ** (2 * m)) - ref) <= 1e-13


def test_oriented_rule_integrates_fourth_moments_across_its_axis():
    # <n_i n_j n_k n_l> on S^3 = (d_ij d_kl + d_ik d_jl + d_il d_jk) / 24 (common practice: 1/(d (d + 2)), d = 4)
    d, w = qd.sphere3_oriented(6, 3, E)
    u = np.array([1.0, 2.0, -1.0, 0.5]) / np.linalg.norm([1.0, 2.0, -1.0, 0.5])
    perp = u - (u @ E) * E
    perp /= np.linalg.norm(perp)
    assert abs(np.sum(w * (d @ perp) ** 4) / (2 * math.pi**2) - 3 / 24) <= 1e-13
    assert abs(np.sum(w * (d @ perp) ** 2 * (d @ E) ** 2) / (2 * math.pi**2) - 1 / 24) <= 1e-13


def test_oriented_rule_names_a_bad_axis():
    with pytest.raises(ValueError, match="axis must be a finite nonzero"):
        qd.sphere3_oriented(4, 3, np.zeros(4))
    with pytest.raises((ValueError, TypeError), match="n_psi"):
        qd.sphere3_oriented(0, 3, E)


def test_radial_panels_reproduce_the_bpst_radial_integral():
    # int_0^inf 48 rho^4 r^3 / (r^2 + rho^2)^4 dr * 2 pi^2 = 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin 1975)
    rho = 0.9
    r, w = qd.radial_panel_nodes(48, 2.0, 4, [3.0, 7.0, 11.0])
    assert np.all(np.diff(r) > 0) and r.shape == w.shape
    s = 48 * rho**4 / (r**2 + rho**2) ** 4
    assert abs(2 * math.pi**2 * np.sum(w * s) - 8 * math.pi**2) <= 1e-10 * 8 * math.pi**2


def test_shell_axes_point_at_the_neighbour_and_keep_overlapping_triples_isotropic():
    far = np.array([[0.0, 0, 0, 0], [10.0, 0, 0, 0], [0.0, 0, 0, -20.0]])
    axis, aspect = qd.shell_axes(far, np.ones(3), 0, np.array([1.0, 10.0]))
    assert np.allclose(axis[1], [1, 0, 0, 0]) and aspect[1] == 4
    close = np.array([[0.0, 0, 0, 0], [2.0, 0, 0, 0], [0.0, 2.0, 0, 0]])
    assert np.all(qd.shell_axes(close, np.ones(3), 0, np.array([1.0, 2.0]))[1] == 1)
