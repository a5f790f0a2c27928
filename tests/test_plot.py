"""Specification of instantonkit.plot: headless figures with the right shapes, labels, colour bars and values.

The pixel values are checked against the published BPST density s = 48 rho^4 / (r^2 + rho^2)^4
(Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) and q = s / 8 pi^2 for a
self-dual field (common practice).
"""

import itertools
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

matplotlib = pytest.importorskip("matplotlib")
matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

import instantonkit as ik  # noqa: E402
from instantonkit import plot  # noqa: E402
from instantonkit.verification.checks import IntegralResult  # noqa: E402

RHO = 1.3
CENTRE = np.array([0.2, -0.1, 0.3, 0.4])


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def bpst_density(r2, rho=RHO):
    # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4 / (r^2 + rho^2)^4.
    return 48.0 * rho**4 / (r2 + rho**2) ** 4


def pixel_centres(lo, hi, n):
    h = (hi - lo) / n
    return lo + h * (np.arange(n) + 0.5)


@pytest.fixture(scope="module")
def field():
    return ik.bpst(CENTRE, RHO)


def image_of(fig):
    """The first image of the figure, as an array."""
    return np.asarray(fig.axes[0].get_images()[0].get_array(), dtype=float)


# -- density_slice ---------------------------------------------------------------------------------


def test_density_slice_returns_a_figure_with_image_of_the_requested_resolution(field):
    fig = plot.density_slice(field, resolution=24)
    assert isinstance(fig, matplotlib.figure.Figure)
    assert image_of(fig).shape == (24, 24)


def test_density_slice_labels_axes_in_units_of_the_scale(field):
    fig = plot.density_slice(field, ("x1", "x3"), resolution=8)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "x1 / ρ" and ax.get_ylabel() == "x3 / ρ"


def test_density_slice_has_a_colour_bar_with_the_dimensionless_density(field):
    fig = plot.density_slice(field, resolution=8)
    assert len(fig.axes) == 2  # the map and its colour bar
    assert "s · ρ⁴" in fig.axes[1].get_ylabel()


def test_density_slice_has_equal_aspect(field):
    ax = plot.density_slice(field, resolution=8).axes[0]
    assert ax.get_aspect() == 1.0


def test_density_slice_extent_is_shown_in_units_of_the_hint_scale(field):
    fig = plot.density_slice(field, extent=2.0, resolution=8)
    lo1, hi1, lo2, hi2 = fig.axes[0].get_images()[0].get_extent()
    # field.hint() gives (centre, rho) for BPST; the square is +-2 about the centre, shown / rho
    assert np.allclose(
        [lo1, hi1, lo2, hi2],
        [(CENTRE[0] - 2) / RHO, (CENTRE[0] + 2) / RHO, (CENTRE[1] - 2) / RHO, (CENTRE[1] + 2) / RHO],
    )


def test_density_slice_pixels_are_the_published_bpst_density_times_rho4(field):
    n, h = 16, 2.5
    img = image_of(plot.density_slice(field, ("x2", "x4"), extent=h, resolution=n))
    u = pixel_centres(CENTRE[1] - h, CENTRE[1] + h, n) - CENTRE[1]  # columns: x2
    v = pixel_centres(CENTRE[3] - h, CENTRE[3] + h, n) - CENTRE[3]  # rows: x4
    expected = bpst_density(u[None, :] ** 2 + v[:, None] ** 2) * RHO**4
    assert np.allclose(img, expected, rtol=1e-12)


def test_density_slice_at_fixes_the_off_plane_coordinates(field):
    n, h, at = 10, 2.0, (1.0, -0.5)  # (x3, x4) for the (x1, x2) plane
    img = image_of(plot.density_slice(field, ("x1", "x2"), at, extent=h, resolution=n))
    u = pixel_centres(CENTRE[0] - h, CENTRE[0] + h, n) - CENTRE[0]
    v = pixel_centres(CENTRE[1] - h, CENTRE[1] + h, n) - CENTRE[1]
    off = (at[0] - CENTRE[2]) ** 2 + (at[1] - CENTRE[3]) ** 2
    assert np.allclose(img, bpst_density(u[None] ** 2 + v[:, None] ** 2 + off) * RHO**4, rtol=1e-12)


def test_density_slice_full_point_centres_the_square_on_it(field):
    point = np.array([1.0, 0.5, 0.3, 0.4])
    fig = plot.density_slice(field, ("x1", "x2"), point, extent=1.0, resolution=6)
    lo1, hi1, lo2, hi2 = fig.axes[0].get_images()[0].get_extent()
    assert np.allclose([(lo1 + hi1) / 2, (lo2 + hi2) / 2], point[:2] / RHO)


def test_density_slice_charge_is_action_over_8pi2_for_a_self_dual_field(field):
    s = image_of(plot.density_slice(field, resolution=12, quantity="action"))
    q = image_of(plot.density_slice(field, resolution=12, quantity="charge"))
    # self-dual: q = s / 8 pi^2 pointwise (common practice)
    assert np.allclose(q, s / (8 * np.pi**2), rtol=1e-10)


def test_density_slice_charge_colours_are_symmetric_about_zero(field):
    fig = plot.density_slice(field, resolution=12, quantity="charge")
    lo, hi = fig.axes[0].get_images()[0].get_clim()
    assert lo == -hi and hi > 0


def test_density_slice_residual_is_two_for_an_anti_instanton(field):
    # anti-self-dual F = -*F gives |F - *F| / |F| = 2 (from the definition of the residual)
    img = image_of(plot.density_slice(field.conjugate(), resolution=8, quantity="residual"))
    assert np.allclose(img, 2.0, atol=1e-8)


def test_density_slice_uses_the_given_scale_and_unit_label(field):
    fig = plot.density_slice(field, extent=3.0, resolution=6, scale=2.0, unit_label="L")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "x1 / L"
    s_rho4 = image_of(plot.density_slice(field, extent=3.0, resolution=6))
    # s L^4 = (s rho^4) (L / rho)^4
    assert np.allclose(image_of(fig), s_rho4 * (2.0 / RHO) ** 4, rtol=1e-12)


def test_density_slice_draws_into_a_given_axes(field):
    fig, ax = plt.subplots()
    out = plot.density_slice(field, resolution=6, ax=ax)
    assert out is fig and len(ax.get_images()) == 1


def test_density_slice_leaves_singular_points_blank():
    # 't Hooft k = 1 is the singular-gauge BPST (Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642, from
    # memory); the pixel centred on the pole is NaN, the others carry the BPST density.
    th = ik.thooft([[0.0, 0.0, 0.0, 0.0]], [1.0])
    img = image_of(plot.density_slice(th, at=(0.0, 0.0), extent=1.5, resolution=3))
    assert np.isnan(img[1, 1])
    u = pixel_centres(-1.5, 1.5, 3)
    expected = bpst_density(u[None] ** 2 + u[:, None] ** 2, rho=1.0)
    mask = ~np.isnan(img)
    assert mask.sum() == 8 and np.allclose(img[mask], expected[mask], rtol=1e-10)


@settings(max_examples=10, deadline=None)
@given(st.sampled_from(list(itertools.permutations(plot.AXES, 2))))
def test_density_slice_through_the_centre_is_the_same_in_every_plane(field, plane):
    # the BPST action density depends on |x - a| only (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975)
    # 85), so every plane through a looks alike
    ref = image_of(plot.density_slice(field, ("x1", "x2"), resolution=10))
    img = image_of(plot.density_slice(field, plane, resolution=10))
    plt.close("all")
    assert np.allclose(img, ref, rtol=1e-10)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(plane=("x1", "x1")), "two different axes"),
        (dict(plane=("x1", "y")), "plane axis must be one of"),
        (dict(plane="x1"), "pair of axis names"),
        (dict(quantity="energy"), "quantity must be one of"),
        (dict(resolution=1), "resolution must be an integer >= 2"),
        (dict(at=(1.0, 2.0, 3.0)), "at must be a full point"),
        (dict(extent=-1.0), "extent"),
        (dict(extent=(1.0, 0.0, 0.0, 1.0)), "lo < hi"),
        (dict(scale=0.0), "scale must be finite and > 0"),
    ],
)
def test_density_slice_rejects_bad_arguments(field, kwargs, match):
    with pytest.raises(ValueError, match=match):
        plot.density_slice(field, **kwargs)


# -- slice_panels ----------------------------------------------------------------------------------


def test_slice_panels_has_one_panel_per_value_and_one_colour_bar(field):
    fig = plot.slice_panels(field, values=[-1.0, 0.0, 1.0, 2.0, 3.0], resolution=10, ncols=3)
    panels = [a for a in fig.axes if a.get_visible() and a.get_images()]
    assert len(panels) == 5
    bars = [a for a in fig.axes if a.get_visible() and not a.get_images() and "s · ρ⁴" in a.get_ylabel()]
    assert len(bars) == 1


def test_slice_panels_share_one_colour_scale(field):
    fig = plot.slice_panels(field, values=[0.4, 1.4], resolution=10)
    clims = {a.get_images()[0].get_clim() for a in fig.axes if a.get_images()}
    assert len(clims) == 1


def test_slice_panels_titles_name_the_position_in_units_of_the_scale(field):
    fig = plot.slice_panels(field, axis="x3", values=[0.0, RHO], resolution=6)
    titles = [a.get_title() for a in fig.axes if a.get_images()]
    assert titles == ["x3 = 0 ρ", "x3 = 1 ρ"]


def test_slice_panels_pixels_follow_the_bpst_density_along_the_axis(field):
    n, h, vals = 12, 2.0, [CENTRE[3] - 0.8, CENTRE[3] + 1.5]
    fig = plot.slice_panels(field, ("x1", "x2"), "x4", vals, extent=h, resolution=n)
    u = pixel_centres(CENTRE[0] - h, CENTRE[0] + h, n) - CENTRE[0]
    v = pixel_centres(CENTRE[1] - h, CENTRE[1] + h, n) - CENTRE[1]
    imgs = [np.asarray(a.get_images()[0].get_array()) for a in fig.axes if a.get_images()]
    for img, x4 in zip(imgs, vals):
        r2 = u[None] ** 2 + v[:, None] ** 2 + (x4 - CENTRE[3]) ** 2
        assert np.allclose(img, bpst_density(r2) * RHO**4, rtol=1e-12)


def test_slice_panels_draw_level_lines(field):
    fig = plot.slice_panels(field, values=[CENTRE[3]], resolution=16, contours=(0.5,))
    ax = [a for a in fig.axes if a.get_images()][0]
    assert len(ax.collections) >= 1  # the contour set


def test_slice_panels_reject_an_axis_inside_the_plane(field):
    with pytest.raises(ValueError, match="axis must differ from the plane axes"):
        plot.slice_panels(field, ("x1", "x4"), "x4")


def test_slice_panels_reject_contour_fractions_outside_zero_one(field):
    with pytest.raises(ValueError, match="contours must be fractions"):
        plot.slice_panels(field, contours=(1.5,))


# -- convergence -----------------------------------------------------------------------------------


def geometric_series(n_rounds=6):
    # partial sums of sum_k 2^-k -> 2 (a known limit), errors the next term
    n = 1000 * 2 ** np.arange(n_rounds)
    partial = np.cumsum(0.5 ** np.arange(n_rounds))
    return n, partial, 0.5 ** np.arange(1, n_rounds + 1)


def test_convergence_from_arrays_has_value_and_error_panels():
    n, v, e = geometric_series()
    fig = plot.convergence((n, v, e), reference=2.0)
    left, right = fig.axes
    assert left.get_xscale() == "log" and right.get_xscale() == "log" and right.get_yscale() == "log"
    assert left.get_xlabel() == "density evaluations" and right.get_ylabel() == "error"


def test_convergence_plots_the_true_deviation_from_the_reference():
    n, v, e = geometric_series()
    fig = plot.convergence((n, v, e), reference=2.0)
    lines = fig.axes[1].get_lines()
    assert len(lines) == 2  # estimated error and |value - reference|
    assert np.allclose(lines[1].get_ydata(), np.abs(v - 2.0))


def test_convergence_accepts_integral_results_and_progress_dicts():
    n, v, e = geometric_series(4)
    results = [IntegralResult("charge", float(b), float(c), int(a), "rule", True) for a, b, c in zip(n, v, e)]
    dicts = [
        dict(round=i, evaluations=int(a), value=float(b), error=float(c)) for i, (a, b, c) in enumerate(zip(n, v, e))
    ]
    for data in (results, dicts, dict(evaluations=n, value=v, error=e)):
        fig = plot.convergence(data)
        assert np.allclose(fig.axes[1].get_lines()[0].get_ydata(), e)
        plt.close(fig)


def test_convergence_sorts_by_work():
    n, v, e = geometric_series(4)
    fig = plot.convergence((n[::-1], v[::-1], e[::-1]))
    assert np.all(np.diff(fig.axes[1].get_lines()[0].get_xdata()) > 0)


def test_convergence_draws_one_curve_per_labelled_series():
    n, v, e = geometric_series(4)
    fig = plot.convergence({"first": (n, v, e), "second": (n, v + 1e-3, e)}, reference=2.0)
    assert len(fig.axes[1].get_lines()) == 4
    assert [t.get_text() for t in fig.axes[0].get_legend().get_texts()][:2] == ["reference 2", "first"]


def test_convergence_rejects_mismatched_lengths():
    with pytest.raises(ValueError, match="same non-zero length"):
        plot.convergence(([1, 2, 3], [1.0, 2.0], [0.1, 0.1, 0.1]))


def test_convergence_rejects_unknown_data():
    with pytest.raises(TypeError, match="convergence data must be"):
        plot.convergence(42)


# -- packaging -------------------------------------------------------------------------------------


def test_importing_instantonkit_does_not_import_matplotlib():
    code = "import sys, instantonkit; instantonkit.plot; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
