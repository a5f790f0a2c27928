"""Specification of finite-temperature lattices: anisotropic spacings in starts, files and observables,
the anisotropic Wilson action and clover charge, and caloron starts of non-trivial holonomy on N_t x N_s^3."""

import json
import warnings

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.linalg import expm

import instantonkit as ik
from instantonkit.ansatz import periodic
from instantonkit.engine import fields
from instantonkit.lattice import observables as obs
from instantonkit.lattice import polyakov as pl
from instantonkit.lattice import references, thermal
from instantonkit.lattice import starts as lat

EIGHT_PI2 = 8.0 * np.pi**2
ANISO = (0.5, 0.5, 0.5, 0.25)  # xi = a_s / a_t = 2
BPST = ik.bpst_field(size=1.0, gauge="singular")
BPST_SHAPE = (10, 10, 10, 20)  # a box of 5 rho, open boundaries


def _quiet_start(field, shape, spacing, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lat.BoundaryActionWarning)
        return lat.lattice_start(field, shape, spacing, **kw)


@pytest.fixture(scope="module")
def aniso_bpst():
    """A BPST start (closed-form links) on an anisotropic 10^3 x 20 lattice, a_s = 2 a_t, open boundaries."""
    return _quiet_start(BPST, BPST_SHAPE, ANISO, boundary="open")


@pytest.fixture(scope="module")
def random_links():
    """SU(2) links at random (a gauge-invariance and algebra playground, not a field)."""
    return obs.random_gauge((3, 3, 4, 8), 2, seed=3).reshape(3, 3, 4, 2, 4, 2, 2)


# -- spacings: one number or four -------------------------------------------------------------------


def test_an_anisotropic_start_puts_the_sites_at_a_mu_n_mu(aniso_bpst):
    rep = aniso_bpst.report
    pts = periodic.site_points(BPST_SHAPE, ANISO, rep.origin)
    np.testing.assert_array_equal(pts[1, 2, 3, 5] - pts[0, 0, 0, 0], [0.5, 1.0, 1.5, 1.25])
    assert rep.spacing == ANISO and rep.spacings == ANISO


def test_four_equal_spacings_give_the_isotropic_start_bit_for_bit():
    iso = lat.lattice_links(BPST, (2, 3, 2, 2), 0.5, boundary="open")
    four = lat.lattice_start(BPST, (2, 3, 2, 2), [0.5] * 4, boundary="open")
    assert np.array_equal(four.links, iso) and four.report.spacing == 0.5


def test_each_anisotropic_link_is_that_of_an_isotropic_start_at_its_own_spacing():
    # U_mu(n) is the transporter over a_mu in direction mu, whatever the other spacings
    sp = (0.4, 0.5, 0.6, 0.3)
    start = lat.lattice_start(BPST, (2, 2, 2, 2), sp, boundary="open")
    for mu, a in enumerate(sp):
        iso = lat.lattice_links(BPST, (1, 1, 1, 1), a, origin=start.report.origin, boundary="open")
        assert np.array_equal(start.links[0, 0, 0, 0, mu], iso[0, 0, 0, 0, mu])


def test_blocks_of_an_anisotropic_start_reassemble_its_links_bit_for_bit():
    # the chunked layer computes boxes with StartSpec.block (DEVELOPERS.md, chunked evaluation)
    spec = lat.StartSpec.make(BPST, (4, 2, 2, 3), ANISO, boundary="open")
    whole = lat.lattice_links(BPST, (4, 2, 2, 3), ANISO, boundary="open")
    top, bottom = spec.block((0, 0, 0, 0), (2, 2, 2, 3))[0], spec.block((2, 0, 0, 0), (4, 2, 2, 3))[0]
    assert np.array_equal(np.concatenate([top, bottom], axis=0), whole)


def test_the_chunked_path_gives_the_local_bits_of_an_anisotropic_start():
    # DEVELOPERS.md, chunked evaluation: the lazy chunked start against the local one
    cluster = pytest.importorskip("instantonkit.cluster")
    lazy = cluster.lattice_links(BPST, (4, 2, 2, 6), ANISO, chunks=(2, 2, 2, 4), boundary="open")
    local = lat.lattice_links(BPST, (4, 2, 2, 6), ANISO, boundary="open")
    assert np.array_equal(lazy.compute(scheduler="sync"), local)


@pytest.mark.parametrize(
    "spacing, err, text",
    [
        ((0.5, 0.5, 0.5), ValueError, r"one number or four .* found 3 values"),
        ((0.5, 0.5, -0.5, 0.5), ValueError, r"spacing\[2\] must be > 0; found -0\.5"),
        ((0.5, True, 0.5, 0.5), TypeError, r"spacing\[1\] must be a real number; found True"),
        ("0.5", TypeError, r"spacing must be a real number; found '0\.5'"),
    ],
)
def test_bad_spacings_are_refused_naming_the_entry(spacing, err, text):
    with pytest.raises(err, match=text):
        lat.lattice_start(BPST, (2, 2, 2, 2), spacing)


def test_a_time_extent_that_misses_the_period_names_both_numbers():
    # N_t a_t = beta is required for a periodic x4 (here 4 x 0.3 = 1.2 against beta = 1)
    cal = ik.caloron(0.5, 1.0, holonomy=0.25)
    with pytest.raises(ValueError, match=r"period 1\.0.*L4 \* a = 4 \* 0\.3 = 1\.2"):
        lat.lattice_start(cal, (4, 4, 4, 4), (0.25, 0.25, 0.25, 0.3))


def test_thermal_spacings_close_on_the_period():
    sp = thermal.thermal_spacings(1.3, 6, anisotropy=2.0)
    assert sp[0] == sp[1] == sp[2] == 2.0 * sp[3]
    assert abs(6 * sp[3] - 1.3) <= 1e-15 and thermal.anisotropy(sp) == pytest.approx(2.0, rel=1e-15)


@pytest.mark.parametrize(
    "kw, text",
    [
        (dict(period=0.0, n_t=4), r"period must be > 0; found 0\.0"),
        (dict(period=1.0, n_t=0), r"n_t"),
        (dict(period=1.0, n_t=4, spatial=0.5, anisotropy=2.0), r"not both"),
    ],
)
def test_thermal_spacings_refuse_bad_input(kw, text):
    with pytest.raises(ValueError, match=text):
        thermal.thermal_spacings(**kw)


def test_an_anisotropy_needs_equal_spatial_spacings():
    with pytest.raises(ValueError, match=r"equal spatial spacings .* found \[0\.5, 0\.6, 0\.5, 0\.25\]"):
        thermal.anisotropy((0.5, 0.6, 0.5, 0.25))


def test_a_file_records_the_four_spacings(tmp_path, aniso_bpst):
    path = tmp_path / "aniso.npz"
    ik.save_lattice(path, aniso_bpst)
    links, info = ik.load_lattice(path)
    assert info["metadata"]["spacings"] == list(ANISO) and info["metadata"]["spacing"] == list(ANISO)
    again = references.regenerate(path)
    assert np.array_equal(again.links, aniso_bpst.links)


def test_boundary_mismatch_of_an_anisotropic_periodic_start_is_that_of_its_report():
    start = _quiet_start(BPST, (4, 4, 4, 4), (0.5, 0.5, 0.5, 0.7))
    bm = lat.boundary_mismatch(BPST, start.links, (0.5, 0.5, 0.5, 0.7), origin=start.report.origin)
    assert bm["link_mismatch"] == start.report.boundary_link_mismatch > 0
    assert bm["action_error"] == start.report.boundary_action_error


# -- the anisotropic Wilson action ------------------------------------------------------------------


def test_wilson_weights_are_one_over_xi_in_space_and_xi_in_time():
    # S = beta [(1/xi) sum_spatial + xi sum_temporal] (common practice; e.g. Karsch, Nucl. Phys. B 205 (1982) 285, from memory)
    w = thermal.plane_weights((0.6, 0.6, 0.6, 0.2))
    spatial = [p for p, (mu, nu) in enumerate(obs.PLANES) if nu != 3]
    np.testing.assert_allclose(w[spatial], 1.0 / 3.0, rtol=1e-15)
    np.testing.assert_allclose(np.delete(w, spatial), 3.0, rtol=1e-15)


def test_equal_spacings_give_the_isotropic_wilson_action_exactly(random_links):
    assert obs.wilson_action(random_links, spacing=(0.3,) * 4) == obs.wilson_action(random_links)


def test_the_anisotropic_wilson_action_is_gauge_invariant(random_links):
    g = obs.random_gauge(random_links.shape[:4], 2, seed=11)
    moved = obs.gauge_transform_links(random_links, g)
    s0 = obs.wilson_action(random_links, spacing=ANISO)
    assert obs.wilson_action(moved, spacing=ANISO) == pytest.approx(s0, rel=1e-12)


def test_anisotropic_wilson_action_of_a_bpst_start_matches_the_continuum_with_its_artefact(aniso_bpst):
    # S_W -> S_box (1 - artefact): BPST action 8 pi^2 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett.
    # B 59 (1975) 85) and the Wilson artefact of García Pérez, González-Arroyo, Snippe, van Baal, Nucl.
    # Phys. B 413 (1994) 535 (from memory) at the mean a_mu^2; without the xi weights S_W is off by > 10 %.
    ref = references.continuum_reference(BPST, BPST_SHAPE, ANISO, boundary="open", nodes=6)
    s_w = obs.wilson_action(aniso_bpst.links, spacing=ANISO, boundary="open")
    assert s_w / ref["expected_wilson"] == pytest.approx(1.0, abs=0.01)
    assert abs(obs.wilson_action(aniso_bpst.links, boundary="open") / ref["expected_wilson"] - 1.0) > 0.1


# -- the clover charge with per-direction spacings --------------------------------------------------


def test_equal_spacings_give_the_isotropic_clover_field_exactly(random_links):
    a = obs.clover_field_strength(random_links, spacing=0.3)
    assert np.array_equal(obs.clover_field_strength(random_links, spacing=(0.3,) * 4), a)


@given(st.tuples(*[st.floats(0.1, 2.0)] * 4))
def test_clover_field_strength_is_the_clover_over_a_mu_a_nu(random_links, spacing):
    unit = obs.clover_field_strength(random_links)
    got = obs.clover_field_strength(random_links, spacing=spacing)
    a = np.asarray(spacing)
    np.testing.assert_allclose(got * (a[:, None] * a[None, :])[..., None, None], unit, atol=1e-14)


def test_clover_charge_density_is_divided_by_the_cell_volume(random_links):
    unit = obs.clover_charge_density(random_links)
    np.testing.assert_allclose(
        obs.clover_charge_density(random_links, spacing=ANISO) * np.prod(ANISO), unit, atol=1e-14
    )


def test_the_anisotropic_clover_charge_density_is_gauge_invariant(random_links):
    g = obs.random_gauge(random_links.shape[:4], 2, seed=12)
    moved = obs.gauge_transform_links(random_links, g)
    np.testing.assert_allclose(
        obs.clover_charge_density(moved, spacing=ANISO),
        obs.clover_charge_density(random_links, spacing=ANISO),
        atol=1e-12,
    )


# -- the constant limit of a caloron of non-trivial holonomy, and the window about it ---------------


def test_the_asymptotic_potential_of_a_caloron_has_its_holonomy():
    # 1/2 tr exp(beta B_4) = cos 2 pi omega, B_i = 0 (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory)
    b = thermal.asymptotic_potential(ik.caloron(0.5, 1.3, holonomy=0.2))
    assert 0.5 * np.trace(expm(1.3 * b[3])).real == pytest.approx(np.cos(0.4 * np.pi), abs=1e-15)
    assert not np.any(b[:3])


@pytest.mark.long  # the caloron's potential, about 15 s
def test_the_asymptotic_potential_of_a_caloron_is_its_far_field():
    # A -> B at spatial infinity in the periodic gauge, the tail falling as 1/r^2
    cal = ik.caloron(0.5, 1.0, np.array([0.3, 0.0, 0.0, 0.1]), holonomy=0.2)
    far = np.array([60.0, -48.0, 64.0, 0.3])
    np.testing.assert_allclose(np.asarray(cal.potential(far)), thermal.asymptotic_potential(cal), atol=1e-4)


@pytest.mark.parametrize("field", [ik.caloron(0.5, 1.0), BPST])
def test_fields_without_holonomy_have_no_asymptotic_potential(field):
    # the Harrington-Shepard caloron (Phys. Rev. D 17 (1978) 2122) decays; fields on R^4 have no period
    assert thermal.asymptotic_potential(field) is None


def _bg_window():
    b = np.zeros((4, 2, 2), complex)
    b[3] = 0.7 * np.diag([-1j, 1j])
    org = periodic.default_origin(BPST, (4, 4, 4, 4), 1.0)
    return periodic.window_field(BPST, (4, 4, 4, 4), 1.0, org, background=b), b


def test_a_window_about_a_constant_is_that_constant_on_the_faces():
    win, b = _bg_window()
    face = np.asarray(win.lo) + np.array([0.0, 1.3, 2.1, 0.4])
    np.testing.assert_array_equal(np.asarray(win.potential(face)), b)


def test_the_closed_form_field_of_a_window_about_a_constant_is_that_of_its_potential():
    # F_w with A - B in place of A (ansatz.periodic docstring) against autodiff of A_w
    win, _ = _bg_window()
    x = np.array([[0.9, -1.2, 1.4, 0.3], [1.7, 0.2, -0.4, -1.6]])
    closed = fields.evaluate(win, x, "field_strength", method="closed")
    auto = fields.evaluate(win, x, "field_strength", method="autodiff")
    np.testing.assert_allclose(closed, auto, atol=1e-12)


def test_a_window_about_a_constant_is_rebuilt_from_its_record():
    win, b = _bg_window()
    again = references.field_from_record(json.loads(json.dumps(win.record())))
    np.testing.assert_array_equal(np.asarray(again.background), b)
    x = np.array([0.9, -1.2, 1.4, 0.3])
    np.testing.assert_array_equal(np.asarray(again.potential(x)), np.asarray(win.potential(x)))


def test_a_background_that_does_not_commute_is_refused():
    b = np.zeros((4, 2, 2), complex)
    b[0], b[3] = np.array([[0, 1], [-1, 0]]), np.diag([-1j, 1j])
    with pytest.raises(ValueError, match="commuting"):
        periodic.TorusWindow(BPST, np.zeros(4), np.ones(4), 0.5 * np.ones(4), background=b)


# -- a caloron of holonomy 1/4 on N_t x N_s^3 (each start compiles the caloron's Magnus kernel, ~30 s) --

OMEGA = 0.25
CALORON = ik.caloron(0.5, 1.0, np.zeros(4), holonomy=OMEGA)  # rho = beta / 2, constituents 0.785 beta apart
THERMAL_SHAPE = (16, 16, 16, 4)
OPEN_SPACE = ("open", "open", "open", "periodic")


@pytest.fixture(scope="module")
def caloron_open_space():
    """4 x 16^3, a_t = beta / 4, a_s = 2 a_t (a box of 8 beta), spatial directions open."""
    return lat.lattice_start(CALORON, THERMAL_SHAPE, ANISO, boundary=OPEN_SPACE)


@pytest.mark.long
def test_a_caloron_start_is_periodic_in_time_exactly(caloron_open_space):
    # the links from the sites at t + beta (n4 = N_t) are those at t (n4 = 0), to rounding
    spec = lat.StartSpec.make(CALORON, THERMAL_SHAPE, ANISO, boundary=OPEN_SPACE)
    beyond = spec.block((0, 0, 0, 4), (16, 16, 16, 5))[0]
    np.testing.assert_allclose(beyond, caloron_open_space.links[:, :, :, :1], rtol=0, atol=1e-13)
    assert caloron_open_space.report.boundary_link_mismatch_by_direction[3] < 1e-13


@pytest.mark.long
def test_the_lattice_polyakov_loop_far_from_the_cores_is_cos_2_pi_omega(caloron_open_space):
    # 1/2 tr P -> cos 2 pi omega far from the constituents (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627,
    # from memory); at more than 4 beta from both the abelian tail leaves < 0.02
    tr = 0.5 * np.trace(pl.lattice_polyakov_loop(caloron_open_space.links), axis1=-2, axis2=-1).real
    pts = periodic.site_points(THERMAL_SHAPE, ANISO, caloron_open_space.report.origin)[:, :, :, 0, :3]
    pos = CALORON.constituents()[0][:, :3]
    far = np.min(np.linalg.norm(pts[..., None, :] - pos, axis=-1), axis=-1) > 4.0
    assert far.sum() > 1000
    assert np.max(np.abs(tr[far] - np.cos(2 * np.pi * OMEGA))) < 0.02


@pytest.mark.long
def test_wilson_action_of_caloron_starts_approaches_8_pi2_as_a_t_shrinks():
    # S_W / 8 pi^2 -> 1 (Q = 1 per period: Kraan, van Baal 1998, from memory) at fixed beta / rho = 2 and
    # xi = 2, windowed about the holonomy in a box of 4 beta; measured 0.885, 0.969, 0.995 (about 90 s)
    figs = []
    for n_t in (4, 6, 8):
        sp = thermal.thermal_spacings(1.0, n_t, anisotropy=2.0)
        n_s = int(round(4.0 / sp[0]))
        start = lat.lattice_start(CALORON, (n_s, n_s, n_s, n_t), sp, boundary="window")
        figs.append(obs.wilson_action(start.links, spacing=sp) / EIGHT_PI2)
    assert figs[0] < figs[1] < figs[2] and abs(figs[2] - 1.0) < 0.01


@pytest.mark.long
def test_spatial_boundaries_of_a_caloron_start_give_a_verdict_on_the_holonomy_tails():
    # periodic: the abelian tails' mismatch is measured and warned about, naming the spatial faces;
    # window (about the holonomy): no mismatch, the faces keep 1/2 tr P = cos 2 pi omega, S_W near 8 pi^2;
    # open: nothing is wrapped in space (about 2 min: three kernels)
    iso = 0.25
    with pytest.warns(lat.BoundaryActionWarning, match=r"x1 0\.02.*mostly across the x1 faces"):
        per = lat.lattice_start(CALORON, THERMAL_SHAPE, iso)
    assert abs(per.report.boundary_action_error_by_direction[3]) < 1e-12
    assert 0.01 < per.report.boundary_action_fraction < 0.1
    with warnings.catch_warnings():
        warnings.simplefilter("error", lat.BoundaryActionWarning)
        win = lat.lattice_start(CALORON, THERMAL_SHAPE, iso, boundary="window")
        opened = lat.lattice_start(CALORON, THERMAL_SHAPE, iso, boundary=OPEN_SPACE)
    tr = 0.5 * np.trace(pl.lattice_polyakov_loop(win.links), axis1=-2, axis2=-1).real
    assert abs(tr[0, 0, 0] - np.cos(2 * np.pi * OMEGA)) < 1e-6
    assert obs.wilson_action(win.links) / EIGHT_PI2 == pytest.approx(1.0, abs=0.02)
    assert opened.report.boundary_action_error_by_direction[:3] == (None, None, None)
