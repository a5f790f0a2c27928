"""Specification of the link checks: no observable, smoothing run, finder or file load turns damaged or
non-unitary links into a number, and flows that cannot be stable stop.

External facts: lattice links are SU(N) matrices (Wilson, Phys. Rev. D 10 (1974) 2445); the nearest unitary
matrix is the polar factor of the SVD (Higham, SIAM J. Sci. Stat. Comput. 7 (1986) 1160, from memory); every
explicit three-stage third-order Runge-Kutta scheme has the stability function 1 + z + z^2/2 + z^3/6 with
real stability interval [-2.5127, 0] (Hairer and Wanner, Solving ODEs II, Springer 1996, section IV.2, from
memory; the root is checked against numpy below); the free lattice Laplacian's largest eigenvalue in four
dimensions is 4 d = 16 (common practice).
"""

from __future__ import annotations

import struct

import jax
import jax.numpy as jnp
import numpy as np
import pytest

import instantonkit as ik
from instantonkit.core import _links
from instantonkit.fit.lattice_fit import colour_rank, find_lattice_instantons
from instantonkit.lattice import observables as ob
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice.files import read_lime_records
from instantonkit.lattice.forces import plane_force


def _random_links(n=2, shape=(4, 4, 4, 4), seed=0):
    """Haar-random SU(n) links, one per site and direction; (L1, L2, L3, L4, 4, n, n)."""
    g = ob.random_gauge(shape[:3] + (4 * shape[3],), n, seed=seed)
    return np.ascontiguousarray(g.reshape(shape + (4, n, n)))


#: Every public entry point that computes from links (observables, smoothing, the finder's front door).
ENTRY_POINTS = {
    "plaquette_traces": lambda u: ob.plaquette_traces(u),
    "plaquettes": lambda u: ob.plaquettes(u),
    "average_plaquette": lambda u: ob.average_plaquette(u),
    "wilson_action": lambda u: ob.wilson_action(u),
    "wilson_action_open": lambda u: ob.wilson_action(u, boundary="open"),
    "clover_field_strength": lambda u: ob.clover_field_strength(u),
    "clover_charge_density": lambda u: ob.clover_charge_density(u),
    "clover_charge": lambda u: ob.clover_charge(u),
    "clover_charge_open": lambda u: ob.clover_charge(u, boundary="open"),
    "loop_action": lambda u: sm.loop_action(u, 2),
    "improved_action": lambda u: sm.improved_action(u),
    "loop_clover_charge": lambda u: sm.loop_clover_charge(u, 2),
    "improved_charge_density": lambda u: sm.improved_charge_density(u),
    "improved_charge": lambda u: sm.improved_charge(u),
    "improved_charge_open": lambda u: sm.improved_charge(u, boundary="open"),
    "instanton_size": lambda u: sm.instanton_size(u),
    "wilson_flow": lambda u: sm.wilson_flow(u, 0.02),
    "gradient_flow": lambda u: sm.gradient_flow(u, 0.02, eps=0.0),
    "cool": lambda u: sm.cool(u, 1),
    "colour_rank": lambda u: colour_rank(u),
    "find_lattice_instantons": lambda u: find_lattice_instantons(u, 1),
}


@pytest.mark.parametrize("name", sorted(ENTRY_POINTS))
def test_one_nan_link_is_refused_with_its_count_and_site(name):
    u = _random_links()
    u[1, 2, 3, 0, 2, 0, 1] = np.nan
    with pytest.raises(
        ValueError, match=r"found 1 NaN or inf entry in 1 of 1024 links .* site \(1, 2, 3, 0\) direction mu=2"
    ):
        ENTRY_POINTS[name](u)


@pytest.mark.parametrize("name", sorted(ENTRY_POINTS))
def test_links_scaled_by_one_and_a_half_are_refused_naming_the_deviation(name):
    with pytest.raises(
        ValueError, match=r"must be SU\(2\) matrices within 1e-08; found max \|U\^dag U - 1\| = 1\.250e\+00"
    ):
        ENTRY_POINTS[name](1.5 * _random_links())


@pytest.mark.parametrize("name", ["wilson_action_open", "clover_charge_open", "improved_charge_open"])
def test_open_boundary_mask_does_not_hide_a_nan_outside_the_measured_plaquettes(name):
    u = _random_links()
    u[3, 3, 3, 3, 0, 0, 0] = np.nan  # the last site: every plaquette through it is masked out
    with pytest.raises(ValueError, match=r"site \(3, 3, 3, 3\) direction mu=0"):
        ENTRY_POINTS[name](u)


def test_an_all_nan_lattice_reads_no_action_and_no_charge():
    u = np.full((2, 2, 2, 2, 4, 2, 2), np.nan + 0j)
    with pytest.raises(ValueError, match="found 256 NaN or inf entries in 64 of 64 links"):
        ob.wilson_action(u)
    with pytest.raises(ValueError, match="found 256 NaN or inf entries in 64 of 64 links"):
        ob.clover_charge(u)


def test_the_message_names_the_array_shape_and_only_the_first_sites():
    u = _random_links()
    u[:, 0, 0, 0, 1] = np.inf
    with pytest.raises(
        ValueError, match=r"in 4 of 1024 links of a \(4, 4, 4, 4, 4, 2, 2\) array.*\(first 4 shown\)|in 4 of 1024"
    ):
        ob.average_plaquette(u)


def test_a_determinant_off_one_is_refused_though_the_links_are_unitary():
    u = _random_links() * np.exp(0.01j)  # U(2), not SU(2): det = e^{0.02 i}
    with pytest.raises(ValueError, match=r"max \|det U - 1\| = 2\.000e-02"):
        ob.wilson_action(u)


def test_projection_when_asked_restores_the_links_of_scaled_input():
    u = _random_links(3, (2, 2, 2, 2), seed=4)
    p = _links.check_links(1.5 * u, project=True)
    np.testing.assert_allclose(p, u, atol=1e-13)
    np.testing.assert_allclose(ik.project_links(1.5 * u), u, atol=1e-13)


def test_projected_links_pass_the_check():
    rng = np.random.default_rng(5)
    noisy = _random_links(3, (2, 2, 2, 2)) + 1e-3 * rng.normal(size=(2, 2, 2, 2, 4, 3, 3))
    e, _, d, _ = _links.unitarity_deviation(ik.project_links(noisy))
    assert e < 1e-13 and d < 1e-13


def test_rounding_level_deviations_are_accepted():
    u = _random_links() * (1 + 1e-12)
    assert np.isfinite(ob.wilson_action(u))


def _ildg_file(tmp_path):
    path = tmp_path / "links.ildg"
    ik.save_lattice(path, _random_links(3, (2, 2, 2, 2), seed=1), format="ildg")
    return path


@pytest.mark.parametrize("mmap", [False, True])
def test_an_ildg_payload_with_inf_bytes_is_refused_on_load(tmp_path, mmap):
    path = _ildg_file(tmp_path)
    rec = next(r for r in read_lime_records(path) if r["type"] == "ildg-binary-data")
    with open(path, "r+b") as fh:
        fh.seek(rec["offset"] + 16 * 40)  # the real part of one matrix entry (big-endian float64)
        fh.write(struct.pack(">d", np.inf))
    with pytest.raises(
        ValueError,
        match=r"links of the file at path '.*links\.ildg' must be finite; found 1 NaN or inf entry in 1 of 64",
    ):
        ik.load_lattice(path, mmap=mmap)


def test_an_npz_file_of_scaled_links_is_refused_unless_projection_is_asked(tmp_path):
    path = tmp_path / "links.npz"
    u = _random_links(2, (2, 2, 2, 2))
    ik.save_lattice(path, 1.5 * u)
    with pytest.raises(ValueError, match="must be SU.*pass project=True to load_lattice"):
        ik.load_lattice(path)
    np.testing.assert_allclose(ik.load_lattice(path, project=True)[0], u, atol=1e-13)


def test_the_description_of_a_damaged_file_is_still_readable(tmp_path):
    path = _ildg_file(tmp_path)
    rec = next(r for r in read_lime_records(path) if r["type"] == "ildg-binary-data")
    with open(path, "r+b") as fh:
        fh.seek(rec["offset"])
        fh.write(struct.pack(">d", np.nan))
    assert ik.io.read_description(path)["format"] == "ildg"


# -- flow stability -------------------------------------------------------------------------------------


def test_the_rk3_stability_bound_is_the_real_root_of_r_equal_minus_one():
    z = -sm.RK3_STABILITY
    assert abs(1 + z + z**2 / 2 + z**3 / 6 + 1) < 1e-12
    # Hairer, Wanner, Solving Ordinary Differential Equations II, Springer 1996, section IV.2 (from memory;
    # checked here by the root of R(z) = -1 above)
    assert abs(sm.RK3_STABILITY - 2.5127) < 1e-4


@pytest.mark.parametrize(("eps", "expected"), [(1.0, 16.0), (0.0, 64.0 / 3.0)])
def test_the_largest_flow_frequency_matches_power_iteration_of_the_force(eps, expected):
    assert abs(sm.max_flow_frequency(eps) - expected) < 1e-9  # 16: the free Laplacian (common practice)
    rng = np.random.default_rng(0)
    c1, c2 = sm.improved_coefficients(eps)
    x = np.asarray(sm._traceless_antihermitian(rng.normal(size=(4,) * 4 + (4, 2, 2)) + 0j))
    if eps == 1.0:  # the force the Wilson flow runs: its fused step's
        force = jax.jit(lambda v: sm._force(v, 1.0))
    else:  # S(eps) with its 2x2 loops: the plane-by-plane force
        force = plane_force((4,) * 4, *sm._eps_terms(c1, c2, True))
    lam = 0.0
    for _ in range(40):  # linear map X -> -Z(exp(d X)) / d about the trivial field
        y = -np.asarray(force(sm._expm_su(1e-7 * x))) / 1e-7
        lam = float(np.linalg.norm(y) / np.linalg.norm(x))
        x = y / np.linalg.norm(y)
    assert abs(lam - expected) < 1e-3 * expected


def test_a_flow_with_step_ten_stops_before_it_starts():
    with pytest.raises(
        ValueError, match=r"stability bound 0\.1570 .* found an effective step 10 .* use step <= 0\.0393"
    ):
        sm.wilson_flow(_random_links(), 20.0, step=10)


def test_a_flow_whose_action_rises_stops_naming_the_step_and_the_actions(monkeypatch):
    monkeypatch.setattr(sm, "flow_step_bound", lambda eps=1.0: np.inf)  # let an unstable step through
    with pytest.raises(
        ValueError,
        match=r"flow is unstable: the action S\(eps\) rose from .* to .* \(step 1 of 2, step size 1\).*step=0\.25",
    ):
        sm.wilson_flow(_random_links(), 2.0, step=1.0)


def test_steps_below_the_bound_flow_random_links_downhill():
    _, rec = sm.wilson_flow(_random_links(), 2.0, step=1.0 / 7.0)  # below the bound 0.157
    assert np.all(np.diff(rec.action) < 0)


# -- the finder's error budget -----------------------------------------------------------------------------


@pytest.fixture(scope="module")
def bpst_start():
    a, shape = 1.0, (8,) * 4
    origin = -a * (np.array(shape) - 1) / 2
    with pytest.warns(ik.lattice.BoundaryActionWarning):
        u = ik.lattice_links(ik.bpst(np.array([0.3, -0.2, 0.1, 0.25]), 2.0), shape, a, origin=origin)
    return u, origin


def test_a_fit_to_flowed_links_carries_the_flow_in_its_systematic(bpst_start):
    u, origin = bpst_start
    v, rec = sm.wilson_flow(u, 0.2, 0.1)
    fit = find_lattice_instantons(v, 1, origin=origin, smoothing=rec)
    assert np.all(fit.systematic["sizes"] > 0)
    assert np.all(np.isnan(fit.systematic["centers"])) and "not estimated" in fit.error_budget
    assert "flow to t = 0.2" in fit.error_budget and "systematic = 0 (" not in fit.error_budget


def test_a_fit_to_cooled_links_names_the_sweeps(bpst_start):
    u, origin = bpst_start
    v, rec = sm.cool(u, 1)
    fit = find_lattice_instantons(v, 1, origin=origin, smoothing=rec)
    assert "1 cooling sweep(s)" in fit.error_budget and np.all(fit.systematic["sizes"] > 0)


def test_a_fit_to_rough_links_advises_smoothing_first(bpst_start):
    u, origin = bpst_start
    rng = np.random.default_rng(3)
    rough = ik.project_links(u + 0.3 * (rng.normal(size=u.shape) + 1j * rng.normal(size=u.shape)))
    fit = find_lattice_instantons(rough, 1, origin=origin, quantity="action")
    assert all(np.all(np.isnan(v)) for v in fit.systematic.values())
    assert fit.ambiguous and any("smooth them first" in r for r in fit.reasons), fit.reasons
    assert "systematic = 0 (" not in fit.error_budget


def test_a_smoothing_argument_that_is_not_a_record_is_refused(bpst_start):
    with pytest.raises(TypeError, match="smoothing must be the SmoothingRecord .* found dict"):
        find_lattice_instantons(bpst_start[0], 1, smoothing={"time": 1.0})


def test_a_cooling_run_whose_action_rises_stops_naming_the_sweeps(monkeypatch):
    rough = _random_links(seed=9)
    monkeypatch.setattr(sm, "_cool_sweep", lambda u, *args: jnp.asarray(rough))  # a sweep that roughens
    smooth = np.broadcast_to(np.eye(2, dtype=complex), (4, 4, 4, 4, 4, 2, 2))
    with pytest.raises(
        ValueError, match=r"cooling is unstable: the action S\(eps\) rose from 0 to .* between sweeps 0 and 1"
    ):
        sm.cool(smooth, 1)
