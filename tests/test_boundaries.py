"""Specification of boundaries per direction: the spec, a field's period, the per-direction figures and masks."""

import warnings

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz import periodic
from instantonkit.engine import fields
from instantonkit.lattice import boundaries, references
from instantonkit.lattice import files as io
from instantonkit.lattice import starts as lat

EIGHT_PI2 = 8.0 * np.pi**2
# a caloron of size 0.5 and period 2 (Harrington, Shepard, Phys. Rev. D 17 (1978) 2122) on a 4^4
# lattice whose time extent closes on the period: L4 a = 4 x 0.5 = 2
CAL = ik.caloron(0.5, 2.0)
CAL_SHAPE, CAL_A = (4, 4, 4, 4), 0.5
SPATIAL_WINDOW = ("window", "window", "window", "periodic")


def _start(field, shape, a, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lat.BoundaryActionWarning)
        return lat.lattice_start(field, shape, a, rtol=1e-8, **kw)


@pytest.fixture(scope="module")
def caloron_periodic():
    """The caloron's start with the default boundary (one compilation of its Magnus kernel, ~12 s)."""
    return _start(CAL, CAL_SHAPE, CAL_A)


@pytest.fixture(scope="module")
def caloron_window():
    """The caloron's start with the single string 'window' (the windowed kernel, ~12 s)."""
    return _start(CAL, CAL_SHAPE, CAL_A, boundary="window")


# -- the spec -----------------------------------------------------------------------------------------------


def test_a_single_string_means_the_same_choice_in_every_direction():
    assert boundaries.per_direction("boundary", "open", boundaries.START_BOUNDARIES) == ("open",) * 4


def test_a_list_of_four_is_read_in_x1_to_x4_order():
    spec = ["open", "window", "periodic", "open"]
    assert boundaries.per_direction("boundary", spec, boundaries.START_BOUNDARIES) == tuple(spec)


@pytest.mark.parametrize(
    "spec,error,match",
    [
        (("periodic", "periodic", "periodic"), ValueError, r"four in all; found 3"),
        (
            ("periodic", "periodic", "periodic", "twisted"),
            ValueError,
            r"boundary\[3\] \(x4\) must be one of .*'window'.*'twisted'",
        ),
        (("periodic", 1, "periodic", "open"), TypeError, r"boundary\[1\] \(x2\) must be one of"),
        ({"x4": "periodic"}, TypeError, r"sequence of four"),
        ("twisted", ValueError, r"boundary must be one of"),
    ],
)
def test_a_bad_spec_names_the_entry_and_the_choices(spec, error, match):
    with pytest.raises(error, match=match):
        lat.lattice_start(ik.bpst(), (2, 2, 2, 2), 0.5, boundary=spec)


def test_observables_refuse_a_window_entry_naming_their_choices():
    links = np.broadcast_to(np.eye(2, dtype=complex), (2, 2, 2, 2, 4, 2, 2)).copy()
    with pytest.raises(ValueError, match=r"boundary\[0\] \(x1\) must be one of \('periodic', 'open'\)"):
        lat.wilson_action(links, boundary=("window", "periodic", "periodic", "periodic"))


# -- a field with a period ----------------------------------------------------------------------------------


def test_caloron_default_start_is_periodic_in_every_direction_and_not_windowed(caloron_periodic):
    rep = caloron_periodic.report
    assert rep.boundaries == ("periodic",) * 4 and rep.window is None


def test_single_window_string_keeps_the_caloron_period_periodic(caloron_window):
    st_ = caloron_window
    assert st_.report.boundaries == SPATIAL_WINDOW
    assert st_.report.boundary == "window"  # as given


@pytest.mark.parametrize("boundary", ["periodic", "window"])
def test_caloron_start_is_periodic_in_time_one_slice_of_shift_rolls_the_links(request, boundary):
    # A(x + beta e4) = A(x) (Harrington, Shepard 1978): the start whose origin moves by one spacing in
    # time is the same links rolled by one slice, across t = +-beta/2 too; a window across the period
    # would make the slices next to the faces nearly trivial and break this by O(1)
    base = request.getfixturevalue(f"caloron_{boundary}")
    shifted = _start(CAL, CAL_SHAPE, CAL_A, boundary=boundary, origin=np.asarray(base.report.origin) + [0, 0, 0, CAL_A])
    assert np.max(np.abs(shifted.links - np.roll(base.links, -1, axis=3))) < 1e-7


@pytest.mark.parametrize("boundary", ["periodic", "window"])
def test_caloron_charge_reaches_the_slices_next_to_the_period_faces(request, boundary):
    # the clover charge of each time slice against a^4 sum_n q(x_n) of the continuum density on that
    # slice (the caloron's closed form, Harrington, Shepard 1978); the slices at t = +-beta/2 - -+ a/2
    # keep a sizeable share (a window in time would take them to ~1e-7 of it).  At rho/a = 1 the
    # lattice figures are coarse, hence the loose band.
    start = request.getfixturevalue(f"caloron_{boundary}")
    links = start.links
    sites = lat.site_points(CAL_SHAPE, CAL_A, start.report.origin)
    q_cont = CAL_A**4 * fields.evaluate(CAL, sites, "charge_density").sum(axis=(0, 1, 2))
    q_lat = CAL_A**4 * lat.clover_charge_density(links, spacing=CAL_A).sum(axis=(0, 1, 2))
    for t in (0, CAL_SHAPE[3] - 1):
        assert 0.3 < q_lat[t] / q_cont[t] < 2.0  # measured 0.71 (periodic), 0.56 (window)
    assert q_lat[0] == pytest.approx(q_lat[-1], rel=1e-6)  # even about t = 0, the caloron's centre


def test_an_explicit_window_across_the_period_is_refused():
    with pytest.raises(ValueError, match=r"boundary\[3\] \(x4\) is 'window'.*period 2\.0"):
        lat.lattice_start(CAL, CAL_SHAPE, CAL_A, boundary=("window",) * 4)


def test_a_torus_window_across_the_period_is_refused_and_one_in_space_keeps_the_period():
    org = lat.default_origin(CAL, CAL_SHAPE, CAL_A)
    with pytest.raises(ValueError, match=r"periodic in x4 with period 2\.0; a window across its period"):
        periodic.window_field(CAL, CAL_SHAPE, CAL_A, org)
    spatial = periodic.window_field(CAL, CAL_SHAPE, CAL_A, org, directions=(True, True, True, False))
    assert fields.hook(spatial, "period") == 2.0


@pytest.mark.parametrize("boundary", ["periodic", "window", ("open", "open", "open", "periodic")])
def test_a_period_that_misses_the_time_extent_names_both_numbers(boundary):
    with pytest.raises(ValueError, match=r"period 2\.0.*L4 \* a = 5 \* 0\.5 = 2\.5"):
        lat.lattice_start(CAL, (4, 4, 4, 5), 0.5, boundary=boundary)


def test_an_open_time_direction_needs_no_matching_period():
    rep = _start(CAL, (2, 2, 2, 3), 0.5, boundary="open").report
    assert rep.boundaries == ("open",) * 4 and rep.boundary_link_mismatch is None


# -- per-direction figures, the warning and files -----------------------------------------------------------


@pytest.fixture(scope="module")
def mixed_start():
    """A regular-gauge BPST (it does not decay: a large boundary action) wrapped in x4 only."""
    with pytest.warns(lat.BoundaryActionWarning, match=r"mostly across the x4 faces"):
        return lat.lattice_start(
            ik.bpst(size=1.0).with_gauge("regular"), (3, 3, 3, 4), 0.5, boundary=("open",) * 3 + ("periodic",)
        )


def test_open_directions_have_no_figures_and_wrapped_ones_do(mixed_start):
    rep = mixed_start.report
    assert rep.boundary_link_mismatch_by_direction[:3] == (None,) * 3
    assert rep.boundary_action_error_by_direction[:3] == (None,) * 3
    assert rep.boundary_link_mismatch_by_direction[3] > 0


def test_the_old_scalars_are_the_max_and_the_sum_of_the_directions():
    st_ = _start(ik.bpst(size=1.0), (4, 4, 4, 4), 0.5)
    rep = st_.report
    assert rep.boundary_link_mismatch == max(rep.boundary_link_mismatch_by_direction)
    assert rep.boundary_action_error == pytest.approx(sum(rep.boundary_action_error_by_direction), rel=1e-14)
    assert rep.boundary_action_fraction == pytest.approx(rep.boundary_action_error / EIGHT_PI2)


def test_per_direction_boundary_survives_save_and_regenerate(mixed_start, tmp_path):
    path = tmp_path / "mixed.npz"
    io.save_lattice(path, mixed_start)
    meta = io.read_description(path)["metadata"]
    assert meta["boundary"] == ["open", "open", "open", "periodic"]
    assert meta["boundaries"] == ["open", "open", "open", "periodic"]
    assert meta["boundary_action_error_by_direction"][:3] == [None] * 3
    assert meta["boundary_action_error_by_direction"][3] == mixed_start.report.boundary_action_error_by_direction[3]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", lat.BoundaryActionWarning)
        again = references.regenerate(path)
    assert again.report.boundaries == mixed_start.report.boundaries
    assert np.array_equal(again.links, mixed_start.links)


def test_continuum_reference_takes_the_box_of_each_direction():
    ref = references.continuum_reference(
        ik.bpst(), (4, 4, 4, 4), 0.5, boundary=("open",) + ("periodic",) * 3, origin=np.zeros(4), nodes=2
    )
    assert ref["lo"].tolist() == [0.0, -0.25, -0.25, -0.25]
    assert ref["hi"].tolist() == [1.5, 1.75, 1.75, 1.75]


# -- observables: masks per direction -----------------------------------------------------------------------

_LINKS = ik.lattice_links(ik.bpst(size=0.8), (3, 3, 3, 3), 0.5, boundary="open")
_SPECS = st.tuples(*[st.sampled_from(("periodic", "open"))] * 4)


@given(_SPECS)
def test_a_plaquette_is_masked_exactly_when_it_leaves_an_open_direction(spec):
    tr = lat.plaquette_traces(_LINKS, boundary=spec)
    n = np.stack(np.meshgrid(*[np.arange(3)] * 4, indexing="ij"), axis=-1)
    for p, (mu, nu) in enumerate(lat.PLANES):
        leaves = np.zeros(n.shape[:4], dtype=bool)
        for d in (mu, nu):
            if spec[d] == "open":
                leaves |= n[..., d] == 2
        assert np.array_equal(np.isnan(tr[..., p]), leaves)


@given(_SPECS)
def test_observables_with_a_per_direction_spec_are_gauge_invariant(spec):
    g = lat.random_gauge((3, 3, 3, 3), seed=1)
    u = lat.gauge_transform_links(_LINKS, g, boundary=spec)
    assert lat.wilson_action(u, boundary=spec) == pytest.approx(lat.wilson_action(_LINKS, boundary=spec), rel=1e-12)
    q0 = lat.clover_charge_density(_LINKS, boundary=spec)
    q1 = lat.clover_charge_density(u, boundary=spec)
    assert np.array_equal(np.isnan(q0), np.isnan(q1))
    assert np.allclose(q0, q1, atol=1e-12, equal_nan=True)


@pytest.mark.parametrize("single", ["periodic", "open"])
def test_four_equal_entries_equal_the_single_string(single):
    assert lat.wilson_action(_LINKS, boundary=(single,) * 4) == lat.wilson_action(_LINKS, boundary=single)
    assert lat.clover_charge(_LINKS, boundary=[single] * 4) == lat.clover_charge(_LINKS, boundary=single)
