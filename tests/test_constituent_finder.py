"""Specification of the constituent finder: positions and action fractions of a caloron's constituent
monopoles from density samples and from the links of a thermal lattice."""

import warnings

import numpy as np
import pytest
from _references import bpst_box_action
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.engine import fields
from instantonkit.fit.constituent_finder import ConstituentFit, find_constituents, find_lattice_constituents
from instantonkit.integrals.drivers import ENGINE_CHUNK  # the chunk of ball_fractions: one compiled kernel
from instantonkit.lattice import observables as obs
from instantonkit.lattice import starts as lat
from instantonkit.verification.constituents import ball_fractions

BETA, RHO = 1.0, 1.6  # constituents pi rho^2 / beta = 8.04 beta apart: well separated
CENTER = np.array([0.1, -0.2, 0.3, 0.4])
A_S, N_T = BETA / 3, 4  # grid spacing beta / 3 in space, 4 time slices over one period


def _grid(field, half_x3, half_xy=3.5):
    """(L1, L2, L3, L4, 4) grid about the centre: a_s = beta / 3, one period in N_T slices."""
    c = CENTER
    xy = np.arange(-half_xy, half_xy + 1e-9, A_S)
    z = np.arange(-half_x3, half_x3 + 1e-9, A_S)
    t = c[3] + (np.arange(N_T) + 0.5) * BETA / N_T
    return np.stack(np.meshgrid(c[0] + xy, c[1] + xy, c[2] + z, t, indexing="ij"), axis=-1)


def _sampled(omega, rho=RHO):
    field = ik.caloron(rho, BETA, CENTER, holonomy=omega)
    half = 0.5 * np.pi * rho**2 / BETA + 4.0
    pts = _grid(field, half)
    return field, pts, fields.evaluate(field, pts, "action_density", chunk_size=ENGINE_CHUNK)


@pytest.fixture(scope="module")
def equal():
    """omega = 1/4: two constituents of fraction 1/2."""
    field, pts, s = _sampled(0.25)
    return field, pts, s, find_constituents(pts, s, 2, period=BETA)


@pytest.fixture(scope="module")
def unequal():
    """omega = 0.15: fractions 0.3 and 0.7."""
    field, pts, s = _sampled(0.15)
    return field, pts, s, find_constituents(pts, s, 2, period=BETA)


def _nearest_distance(found, field):
    want = field.constituents()[0][:, :3]
    return np.array([np.min(np.linalg.norm(want - p, axis=1)) for p in found.positions])


@pytest.mark.parametrize("case", ["equal", "unequal"])
def test_positions_match_the_constituents_of_the_caloron(case, request):
    # the constituents sit at c - (1 - 2 omega) d n and c + 2 omega d n, d = pi rho^2 / beta (Kraan, van Baal,
    # Nucl. Phys. B 533 (1998) 627, from memory; the field's constituents hook); the density maxima lie
    # within 0.02 beta of them at 8 beta apart (measured: 0.002 for omega = 1/4, 0.001 and 0.010 for 0.15)
    field, _, _, found = request.getfixturevalue(case)
    assert found.k == 2 and not found.ambiguous
    dist = _nearest_distance(found, field)
    assert np.all(dist < 0.02 * BETA)
    assert (
        len({int(np.argmin(np.linalg.norm(field.constituents()[0][:, :3] - p, axis=1))) for p in found.positions}) == 2
    )


@pytest.mark.parametrize("case", ["equal", "unequal"])
def test_fractions_are_near_two_omega_and_one_minus_two_omega(case, request):
    # far apart the action per period splits into 2 omega and 1 - 2 omega of 8 pi^2 (Kraan, van Baal,
    # Nucl. Phys. B 533 (1998) 627, from memory); the box of the samples cuts the dipole tails (total
    # about 0.975), so within 0.02 (measured 0.013)
    field, _, _, found = request.getfixturevalue(case)
    nu = field.constituents()[1]
    order = [int(np.argmin(np.linalg.norm(field.constituents()[0][:, :3] - p, axis=1))) for p in found.positions]
    np.testing.assert_allclose(found.fractions, nu[order], atol=0.02)
    assert found.fractions[0] >= found.fractions[1]  # largest first


def test_fractions_agree_with_the_action_in_balls_about_the_constituents(unequal):
    # the independent integral of verification.constituents.ball_fractions (product rule about each
    # constituent): the Voronoi parts hold the balls and a little more
    field, _, _, found = unequal
    balls, _ = ball_fractions(field, n_radial=24, n_polar=16, n_time=8)
    order = [int(np.argmin(np.linalg.norm(field.constituents()[0][:, :3] - p, axis=1))) for p in found.positions]
    assert np.all(found.fractions >= balls[order] - 1e-3)
    np.testing.assert_allclose(found.fractions, balls[order], atol=0.01)


def test_charge_density_samples_give_the_constituents_of_the_action_density(equal):
    # calorons are self-dual: s = 8 pi^2 q (conventions module)
    field, pts, s, found = equal
    via_q = find_constituents(pts, s / (8 * np.pi**2), 2, period=BETA, quantity="charge")
    np.testing.assert_allclose(via_q.positions, found.positions, atol=1e-12)
    np.testing.assert_allclose(via_q.fractions, found.fractions, rtol=1e-12)


def test_scattered_points_without_weights_give_positions_and_no_fractions(equal):
    field, pts, s, found = equal
    flat, dens = pts.reshape(-1, 4), s.reshape(-1)
    res = find_constituents(flat, dens, 2, period=BETA)
    np.testing.assert_allclose(
        res.positions[np.argsort(res.positions[:, 2])], found.positions[np.argsort(found.positions[:, 2])], atol=1e-12
    )
    assert np.all(np.isnan(res.fractions)) and any("pass weights=" in n for n in res.notes)


def test_explicit_weights_give_the_grid_fractions(equal):
    field, pts, s, found = equal
    w = np.full(s.shape, A_S**3 * BETA / N_T)
    res = find_constituents(pts.reshape(-1, 4), s.reshape(-1), 2, period=BETA, weights=w.reshape(-1))
    np.testing.assert_allclose(np.sort(res.fractions), np.sort(found.fractions), rtol=1e-12)


def test_overlapping_constituents_give_an_ambiguous_verdict():
    # rho << beta: the caloron is one BPST-like lump (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122;
    # Kraan, van Baal 1998, from memory): one peak, not two, said so
    field = ik.caloron(0.4, BETA, CENTER, holonomy=0.25)
    pts = _grid(field, 2.0, 2.0)
    res = find_constituents(pts, fields.evaluate(field, pts, "action_density", chunk_size=ENGINE_CHUNK), 2, period=BETA)
    assert res.k == 1 and res.ambiguous and "fewer than n = 2" in res.reasons[0]
    assert res.fractions[0] == pytest.approx(1.0, abs=0.03)  # the whole action per period (a = 0.83 rho: 1.7 % off)
    assert "AMBIGUOUS" in res.summary()


@settings(max_examples=3)
@given(st.tuples(*[st.floats(-1.0, 1.0)] * 3))
def test_positions_move_with_the_caloron_and_its_samples(shift):
    # translation invariance: the caloron moved by v, sampled on the grid moved by v, has its constituents at
    # the old positions plus v
    v = np.array(shift + (0.0,))
    base = ik.caloron(1.2, BETA, np.zeros(4), holonomy=0.25)
    xy, z, t = np.arange(-2.5, 2.6, A_S), np.arange(-4.8, 4.9, A_S), (np.arange(N_T) + 0.5) / N_T
    pts = np.stack(np.meshgrid(xy, xy, z, t, indexing="ij"), axis=-1)

    def found(field, p):
        s = fields.evaluate(field, p, "action_density", chunk_size=ENGINE_CHUNK)
        return find_constituents(p, s, 2, period=BETA).positions

    moved = found(ik.caloron(1.2, BETA, v, holonomy=0.25), pts + v)
    np.testing.assert_allclose(moved, found(base, pts) + v[:3], atol=1e-9)


@pytest.mark.long  # the SU(3) caloron's density kernel compiles for several seconds (default-suite budget)
def test_su3_constituents_are_found_with_fractions_near_nu():
    # holonomy mu = (-0.3, 0.1, 0.2): three constituents of fractions nu_m = mu_{m+1} - mu_m, nu_3 = 1 + mu_1 - mu_3
    # = (0.4, 0.1, 0.5) (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from memory), about 20 beta apart; the
    # box (4 beta beyond them) cuts the tails (total 0.933), so within 0.03 (measured 0.021 to 0.023)
    field = ik.caloron(2.5, BETA, holonomy=(-0.3, 0.1, 0.2))
    pos, nu = field.constituents()
    lo, hi = pos[:, :3].min(axis=0) - 4.0, pos[:, :3].max(axis=0) + 4.0
    axes = [np.arange(a, b + 1e-9, A_S) for a, b in zip(lo, hi)]
    pts = np.stack(np.meshgrid(*axes, (np.arange(N_T) + 0.5) / N_T, indexing="ij"), axis=-1)
    found = find_constituents(pts, fields.evaluate(field, pts, "action_density"), 3, period=BETA)
    order = [int(np.argmin(np.linalg.norm(pos[:, :3] - p, axis=1))) for p in found.positions]
    assert sorted(order) == [0, 1, 2] and not found.ambiguous
    np.testing.assert_allclose(found.positions, pos[order, :3], atol=0.02)
    np.testing.assert_allclose(found.fractions, nu[order], atol=0.03)


def test_a_density_without_positive_values_is_refused():
    pts = _grid(None, 1.0, 1.0)
    with pytest.raises(ValueError, match="no positive value"):
        find_constituents(pts, np.zeros(pts.shape[:-1]), 2, period=BETA)


@pytest.mark.parametrize(
    "kw, err, text",
    [
        ({"n": 0}, ValueError, "n"),
        ({"period": -1.0}, ValueError, "period"),
        ({"quantity": "energy"}, ValueError, "quantity"),
        ({"min_fraction": 1.5}, ValueError, "min_fraction"),
        ({"merge_radius": -1.0}, ValueError, "merge_radius"),
        ({"weights": -np.ones(16)}, ValueError, "weights"),
        ({"weights": np.ones(3)}, ValueError, "weights"),
        ({"density": np.ones(3)}, ValueError, "density"),
        ({"points": np.ones((16, 3))}, ValueError, r"\(\.\.\., 4\)"),
    ],
)
def test_bad_arguments_are_refused_naming_them(kw, err, text):
    args = {"points": np.random.default_rng(0).normal(size=(16, 4)), "density": np.ones(16), "n": 2, "period": BETA}
    args.update(kw)
    with pytest.raises(err, match=text):
        find_constituents(args.pop("points"), args.pop("density"), args.pop("n"), **args)


# -- links of a thermal lattice ------------------------------------------------------------------------


@pytest.fixture(scope="module")
def bpst_links():
    """A BPST of size 1 (closed-form links) on a 12^3 x 8 lattice, a = 1/2, periodic (beta = 4 rho)."""
    sp = ik.thermal_spacings(4.0, 8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lat.BoundaryActionWarning)  # the instanton's tail across the faces
        start = lat.lattice_start(ik.bpst_field(size=1.0, gauge="singular"), (12, 12, 12, 8), sp)
    return start, sp


def test_links_of_one_instanton_give_one_constituent_with_the_action_in_the_box(bpst_links):
    # one lump at the centre (0) whose action per period is the BPST action in the lattice's box,
    # 48 rho^4 / (x^2 + rho^2)^4 integrated (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975)
    # 85; tests/_references.py), up to the clover action density's O(a^2) artefact: at a = rho / 2
    # measured 0.889 against 0.977, so within 0.1
    start, sp = bpst_links
    res = find_lattice_constituents(start.links, 1, spacing=sp, origin=start.report.origin, period=4.0)
    lo = start.report.origin - 0.5 * np.asarray(sp)
    want = bpst_box_action(1.0, lo, lo + np.asarray(sp) * (12, 12, 12, 8)) / (8 * np.pi**2)
    assert res.k == 1 and np.linalg.norm(res.positions[0]) < 1e-6
    assert res.fractions[0] == pytest.approx(want, abs=0.1)


def test_the_links_path_is_the_point_path_on_the_clover_density(bpst_links):
    start, sp = bpst_links
    res = find_lattice_constituents(start.links, 1, spacing=sp, origin=start.report.origin, quantity="charge")
    q = obs.clover_charge_density(start.links, spacing=sp)
    pts = lat.site_points((12, 12, 12, 8), sp, start.report.origin)
    via_points = find_constituents(pts, q, 1, period=8 * sp[3], quantity="charge")
    np.testing.assert_allclose(res.positions, via_points.positions, atol=1e-12)
    np.testing.assert_allclose(res.fractions, via_points.fractions, rtol=1e-12)


RANDOM_LINKS = obs.random_gauge((3, 3, 3, 8), 2, seed=3).reshape(3, 3, 3, 2, 4, 2, 2)


@pytest.mark.parametrize(
    "links, kw, text",
    [
        (RANDOM_LINKS[0], {}, r"links"),
        (RANDOM_LINKS, {"spacing": (0.5, 0.5, 0.5)}, r"one number or four"),
        (RANDOM_LINKS, {"boundary": ("periodic", "periodic", "periodic", "open")}, r"x4 must be 'periodic'"),
        (RANDOM_LINKS, {"period": 1.5}, r"period 1\.5 does not match .* L4 \* a4 = 2 \* 0\.5"),
        (RANDOM_LINKS, {"quantity": "energy"}, r"quantity"),
        (RANDOM_LINKS, {"n": 0}, r"\bn\b"),
        (RANDOM_LINKS * 2, {}, r"links"),
    ],
)
def test_wrong_lattice_input_is_refused_naming_the_value(links, kw, text):
    args = {"n": 2, "spacing": 0.5}
    args.update(kw)
    with pytest.raises((ValueError, TypeError), match=text):
        find_lattice_constituents(links, args.pop("n"), **args)


def test_a_fit_reads_as_a_table():
    res = ConstituentFit(np.zeros((1, 3)), np.ones(1), np.ones(1), 1.0, 2, 1, 1.0, 0.1, "action", True, ("why",))
    text = str(res)
    assert "1 of 2 constituent(s)" in text and "why" in text


@pytest.mark.long  # the caloron's Magnus kernel compiles for about 20 s; the start takes about 20 s more
def test_links_of_a_thermal_caloron_start_give_the_constituents_of_its_sites():
    # 6 x 24^3, a = beta / 6, omega = 1/4, rho = 0.7 (constituents 1.54 beta apart), windowed about the holonomy:
    # the clover charge density finds the maxima that the continuum density on the same sites has (measured
    # 3e-4 apart), near the constituents (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory; measured
    # 0.044 off at this overlap of the cores), with fractions near 1/2 each (measured 0.480: the box of 4 beta
    # cuts the dipole tails)
    field = ik.caloron(0.7, BETA, np.zeros(4), holonomy=0.25, axis=(1.0, 0.0, 0.0))
    sp, shape = ik.thermal_spacings(BETA, 6), (24, 24, 24, 6)
    start = lat.lattice_start(field, shape, sp, boundary="window", rtol=1e-10)
    res = find_lattice_constituents(
        start.links, 2, spacing=sp, origin=start.report.origin, quantity="charge", period=BETA
    )
    pts = lat.site_points(shape, sp, start.report.origin)
    cont = find_constituents(pts, fields.evaluate(field, pts, "action_density"), 2, period=BETA)
    key = np.argsort(res.positions[:, 0])
    np.testing.assert_allclose(res.positions[key], cont.positions[np.argsort(cont.positions[:, 0])], atol=0.01)
    assert not res.ambiguous and np.all(_nearest_distance(res, field) < 0.06)
    np.testing.assert_allclose(res.fractions, 0.5, atol=0.05)
