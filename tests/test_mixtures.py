"""Specification of instantonkit.ansatz.mixtures: instantons and anti-instantons in the sum ansatz, on R^4 and the torus."""

import json
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz import mixtures as mx
from instantonkit.ansatz.mixture_totals import mixture_totals
from instantonkit.engine.fields import evaluate
from instantonkit.engine.transforms import PARITY

RNG = np.random.default_rng(20261205)
EIGHT_PI2 = 8.0 * np.pi**2


def _points(n, lo, hi):
    return RNG.uniform(lo, hi, (n, 4))


# -- the field is the sum of the known single objects ----------------------------------------------------


def test_one_instanton_is_the_singular_gauge_bpst_potential():
    # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85 (singular gauge: classic.BPSTField)
    om = mx.haar_orientations(1, RNG)[0]
    f = mx.mixture([[0.1, 0.2, -0.3, 0.4]], 1.3, [1], [om])
    b = ik.bpst_field((0.1, 0.2, -0.3, 0.4), 1.3, "singular", om)
    pts = _points(16, -2, 2)
    np.testing.assert_allclose(evaluate(f, pts, "potential"), evaluate(b, pts, "potential"), atol=1e-14)


def test_one_anti_instanton_is_the_parity_image_of_a_bpst_instanton():
    # anti-instanton = parity image x -> Px of the instanton centred at P a (P eta-bar_a P = eta_a, from memory)
    om = mx.haar_orientations(1, RNG)[0]
    a = np.array([0.1, 0.2, -0.3, 0.4])
    f = mx.mixture([a], 0.8, [-1], [om])
    b = ik.anti(ik.bpst_field(a * PARITY, 0.8, "singular", om))
    pts = _points(16, -2, 2)
    np.testing.assert_allclose(evaluate(f, pts, "potential"), evaluate(b, pts, "potential"), atol=1e-14)


def test_closed_form_field_strength_equals_autodiff_of_the_potential_on_r4():
    f = mx.random_mixture(2, 2, (4, 4, 4, 4), seed=1, sizes=(0.8, 1.2), torus=False, overlap="ignore")
    pts = _points(24, 0, 4)
    closed = evaluate(f, pts, "field_strength")
    auto = evaluate(f, pts, "field_strength", method="autodiff")
    assert np.max(np.abs(closed - auto)) < 1e-12 * np.max(np.abs(auto))


def test_closed_form_field_strength_equals_autodiff_in_the_torus_cutoff_layer():
    f = mx.random_mixture(1, 2, (6, 6, 6, 6), seed=2, sizes=0.6, overlap="ignore")
    pts = f.centres[0] + mx.haar_orientations(24, RNG) * RNG.uniform(1.6, 2.9, (24, 1))  # inside r1 = 1.5 .. r2 = 3
    closed = evaluate(f, pts, "field_strength")
    auto = evaluate(f, pts, "field_strength", method="autodiff")
    assert np.max(np.abs(closed - auto)) < 1e-12 * np.max(np.abs(auto))


def test_torus_mixture_is_periodic_in_every_direction():
    f = mx.random_mixture(2, 1, (5, 6, 5, 7), seed=3, sizes=0.5, lo=(-1, 0, 0, 2), overlap="ignore")
    pts = _points(12, -3, 9)
    base = evaluate(f, pts, "potential")
    for i in range(4):
        shifted = pts + np.eye(4)[i] * np.asarray(f.box)[i] * (-1) ** i * (i + 1)  # whole periods, both signs
        np.testing.assert_allclose(evaluate(f, shifted, "potential"), base, atol=1e-12)


@pytest.mark.parametrize("torus", [False, True])
def test_generator_batch_hook_is_the_potential_contracted_with_the_direction(torus):
    # the hook's contract (engine.fields.FieldHooks): generator_batch(x, d) = A_mu(x) d_mu
    f = mx.random_mixture(3, 2, (6, 6, 6, 6), seed=1, sizes=(0.6, 0.9), torus=torus, overlap="ignore")
    pts, dirs = _points(32, 0, 6), RNG.normal(size=(32, 4))
    expected = np.einsum("bm,bmij->bij", dirs, evaluate(f, pts, "potential"))
    np.testing.assert_allclose(np.asarray(f.generator_batch(pts, dirs)), expected, atol=1e-14)


# -- integrated action and charge of the field itself --------------------------------------------------------


def test_pair_action_tends_to_two_instanton_actions_as_the_dipole_law_rho4_over_r4():
    # S_IA = 2 S_0 + O(rho_I^2 rho_A^2 / R^4) in the sum ansatz (dipole interaction: Callan, Dashen, Gross,
    # Phys. Rev. D 17 (1978) 2717; Diakonov, Petrov, Nucl. Phys. B 245 (1984) 259; both from memory)
    excess = []
    for r in (8.0, 16.0):
        tot = mixture_totals(mx.instanton_pair(r, 1.0, axis=(1, 0, 0, 0)), rtol=1e-8, atol=1e-8)
        excess.append(tot.action_fraction - 2.0)
        assert abs(tot.charge.value) <= tot.charge.error + 1e-12
    assert abs(excess[1]) < 1e-4  # S / 8 pi^2 -> 2
    assert 16.0 * 0.9 < excess[0] / excess[1] < 16.0 * 1.1  # (16 / 8)^4


def test_pair_of_unequal_rotated_objects_has_integrated_charge_zero_to_its_error_bar():
    # int q = sum of the windings of the singular points = n+ - n- (Chern-Simons flux; derived in the module docstring)
    f = mx.mixture([[0, 0, 0, 0], [2.6, 0.7, -0.4, 0.3]], [1.0, 0.7], [1, -1], mx.haar_orientations(2, RNG))
    q = ik.total_charge(f, rtol=1e-6, atol=1e-6)
    assert q.converged and abs(q.value) <= 3 * q.error + 1e-6


def test_random_torus_ensemble_has_integrated_charge_n_plus_minus_n_minus_to_its_error_bar():
    f = mx.random_mixture(2, 1, (6, 6, 6, 6), seed=0, sizes=(1.0, 1.2))
    tot = mixture_totals(f, grid=(10, 20))
    assert tot.count == 1  # the construction's count (an input)
    assert tot.charge.error < 0.05
    assert abs(tot.charge.value - 1.0) <= tot.charge.error


@settings(max_examples=3)
@given(st.integers(0, 2), st.integers(0, 2), st.integers(0, 2**20))
def test_integrated_charge_of_a_random_ensemble_is_additive(n_plus, n_minus, seed):
    # Q = n+ - n- for any placement (winding count of the singular points; module docstring)
    if n_plus + n_minus == 0:
        n_plus = 1
    f = mx.random_mixture(n_plus, n_minus, (8, 8, 8, 8), seed=seed, sizes=(0.6, 1.0), torus=False, overlap="ignore")
    q = ik.total_charge(f, rtol=1e-5, atol=1e-5)
    assert abs(q.value - (n_plus - n_minus)) <= 3 * q.error + 1e-4


@pytest.mark.slow
def test_lattice_charges_of_a_torus_ensemble_start_approach_the_integrated_charge():
    # lattice charges approach the continuum charge as a -> 0 (O(a^2) artefacts: common practice)
    f = mx.random_mixture(2, 1, (6, 6, 6, 6), seed=0, sizes=(1.0, 1.2))
    dev = []
    for n in (8, 12):
        a, origin = f.lattice_geometry((n,) * 4)
        links = ik.lattice_start(f, (n,) * 4, a, origin=origin).links
        dev.append([abs(ik.improved_charge(links) - f.charge), abs(ik.clover_charge(links) - f.charge)])
    assert dev[1][0] < dev[0][0] and dev[1][1] < dev[0][1]
    assert dev[1][0] < 0.1  # measured 0.058 at rho / a = 2 .. 2.4


# -- the ratio ansatz ------------------------------------------------------------------------------------


def test_ratio_ansatz_of_anti_instantons_is_anti_self_dual_with_centres_where_asked():
    # 't Hooft ansatz (exact for one sign; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642, from memory)
    c = np.array([[1.0, 0.0, 0.5, 0.0], [-1.0, 0.3, 0.0, 0.2]])
    f = mx.ratio_ansatz(c, [0.7, 0.9], sign=-1)
    assert f.charge == -2
    pts = np.concatenate([c + 0.1, _points(6, -2, 2)])
    s = evaluate(f, pts, "action_density")
    np.testing.assert_allclose(evaluate(f, pts, "charge_density"), -s / EIGHT_PI2, rtol=1e-10)
    np.testing.assert_allclose(s, evaluate(ik.thooft(c * PARITY, [0.7, 0.9]), pts * PARITY, "action_density"))


def test_ratio_ansatz_refuses_mixed_signs():
    with pytest.raises(ValueError, match="one sign"):
        mx.ratio_ansatz([[0, 0, 0, 0]], 1.0, sign=0)


# -- every tool takes them ------------------------------------------------------------------------------------


@pytest.mark.parametrize("torus", [False, True])
def test_record_rebuilds_the_mixture_exactly(torus):
    f = mx.random_mixture(2, 2, (7, 7, 7, 7), seed=4, sizes=(0.5, 0.9), torus=torus, overlap="ignore")
    rec = json.loads(json.dumps(f.record()))
    g = ik.references.field_from_record(rec)
    for name in ("centres", "sizes", "orientations", "lo", "box"):
        assert np.array_equal(getattr(f, name), getattr(g, name)), name
    assert (g.signs, g.torus, g.taper) == (f.signs, f.torus, f.taper)


def test_lattice_file_of_a_mixture_start_rebuilds_the_field(tmp_path):
    f = mx.random_mixture(1, 1, (4, 4, 4, 4), seed=5, sizes=0.6, overlap="ignore")
    a, origin = f.lattice_geometry((4, 4, 4, 4))
    start = ik.lattice_start(f, (4, 4, 4, 4), a, origin=origin, group="su3")
    assert start.links.shape == (4, 4, 4, 4, 4, 3, 3)  # SU(3) embedding of the SU(2) links
    path = tmp_path / "mix.npz"
    ik.save_lattice(path, start)
    g = ik.references.field_from_file(path)
    assert np.array_equal(g.centres, f.centres) and g.signs == f.signs


def test_finder_with_k_plus_minus_locates_a_pair():
    f = mx.instanton_pair(5.0, 1.0, axis=(1, 0, 0, 0))
    g = np.linspace(-5.0, 5.0, 11)
    h = np.linspace(-2.0, 2.0, 5)
    pts = np.stack(np.meshgrid(g, h, h, h, indexing="ij"), axis=-1).reshape(-1, 4)
    fit = ik.find_instantons(pts, evaluate(f, pts, "charge_density"), (1, 1))
    assert np.allclose(fit.instantons.centers[0], [-2.5, 0, 0, 0], atol=0.1)
    assert np.allclose(fit.anti_instantons.centers[0], [2.5, 0, 0, 0], atol=0.1)


# -- random draws ------------------------------------------------------------------------------------------


def test_haar_orientations_have_the_moments_of_the_uniform_three_sphere():
    # uniform on S^3: E[q_i] = 0, E[q_i^2] = 1/4 (symmetry; common practice); 4 sigma bounds for n = 20000
    q = mx.haar_orientations(20000, np.random.default_rng(0))
    assert np.allclose(np.linalg.norm(q, axis=1), 1.0)
    assert np.all(np.abs(q.mean(0)) < 4 * 0.5 / np.sqrt(20000))
    assert np.all(np.abs((q**2).mean(0) - 0.25) < 4 * np.sqrt(1 / 24 - 1 / 16 + 1 / 16) / np.sqrt(20000))


def test_random_mixture_is_reproducible_from_its_seed_and_takes_a_size_callable():
    draw = lambda rng, n: rng.gamma(9.0, 0.1, n)  # noqa: E731
    a = mx.random_mixture(2, 3, (9, 9, 9, 9), seed=11, sizes=draw, overlap="ignore")
    b = mx.random_mixture(2, 3, (9, 9, 9, 9), seed=np.random.default_rng(11), sizes=draw, overlap="ignore")
    assert np.array_equal(a.centres, b.centres) and np.array_equal(a.sizes, b.sizes)
    assert a.signs == (1, 1, -1, -1, -1) and a.charge == -1


# -- bad input ---------------------------------------------------------------------------------------------


def test_overlapping_objects_warn_naming_the_pair_and_the_numbers():
    with pytest.warns(mx.OverlapWarning, match=r"object 0 \(instanton, rho = 1\) and object 1 \(anti-instanton"):
        mx.instanton_pair(1.5, 1.0)


def test_overlapping_objects_raise_when_asked():
    with pytest.raises(ValueError, match=r"are 1\.5 apart, rho_0 \+ rho_1 = 2"):
        mx.instanton_pair(1.5, 1.0, overlap="error")


def test_separated_objects_do_not_warn():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        mx.instanton_pair(2.5, 1.0)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"sizes": [1.0, 0.0]}, "sizes"),
        ({"sizes": [1.0, -2.0]}, "sizes"),
        ({"centres": [[0, 0, 0, 0], [np.nan, 0, 0, 0]]}, "centres"),
        ({"centres": [[0, 0, 0], [3, 0, 0]]}, "centres"),
        ({"signs": (1, 0)}, r"signs\[1\]"),
        ({"signs": (1,)}, "one \\+1 or -1 per object"),
        ({"orientations": [[1, 0, 0, 0], [1, 1, 0, 0]]}, r"orientations\[1\]"),
        ({"overlap": "maybe"}, "overlap"),
    ],
)
def test_bad_mixture_input_is_refused_naming_it(kwargs, match):
    args = {"centres": [[0, 0, 0, 0], [3, 0, 0, 0]], "sizes": 1.0, "signs": (1, -1)} | kwargs
    with pytest.raises(ValueError, match=match):
        mx.mixture(**args)


def test_torus_refuses_objects_the_cutoff_would_cut():
    with pytest.raises(ValueError, match=r"rho = 1\.6 >= r1 = 1\.5"):
        mx.torus_mixture([[1, 1, 1, 1]], 1.6, [1], (6, 6, 6, 6))


def test_torus_refuses_a_tail_above_the_requested_accuracy():
    with pytest.raises(ValueError, match="exceeds accuracy"):
        mx.torus_mixture([[1, 1, 1, 1]], 1.0, [1], (6, 6, 6, 6), accuracy=1e-3)


def test_random_mixture_refuses_bad_counts_seeds_and_sizes():
    with pytest.raises(ValueError, match="n_plus \\+ n_minus must be >= 1"):
        mx.random_mixture(0, 0, (6, 6, 6, 6))
    with pytest.raises(ValueError, match="seed"):
        mx.random_mixture(1, 0, (6, 6, 6, 6), seed=-1)
    with pytest.raises(ValueError, match="low <= high"):
        mx.random_mixture(1, 0, (6, 6, 6, 6), sizes=(1.0, 0.5))
    with pytest.raises(ValueError, match="callable must return 2 values"):
        mx.random_mixture(1, 1, (6, 6, 6, 6), sizes=lambda rng, n: [1.0])


def test_lattice_geometry_refuses_unequal_spacings():
    f = mx.torus_mixture([[1, 1, 1, 1]], 0.5, [1], (6, 6, 6, 8))
    with pytest.raises(ValueError, match="equal spacings"):
        f.lattice_geometry((6, 6, 6, 6))


def test_mixture_totals_refuses_other_fields():
    with pytest.raises(TypeError, match="Mixture"):
        mixture_totals(ik.bpst_field())


def test_dask_ensemble_of_mixtures_is_seeded_per_member_and_its_members_rebuild(tmp_path):
    # member i drawn from SeedSequence(seed, spawn_key=(i,)) as for ADHM ensembles (cluster.member_seed)
    pytest.importorskip("dask")
    pytest.importorskip("zarr")
    store = tmp_path / "mix"
    ens = ik.cluster.ensemble(2, (1, 1), (2, 2, 2, 2), 1.0, seed=3, rtol=1e-6, store=store, client="sync")
    again = mx.random_mixture(
        1,
        1,
        (2.0,) * 4,
        lo=np.full(4, -1.0),
        sizes=(0.125, 0.25),
        seed=np.random.default_rng(ik.cluster.member_seed(3, 1)),
        overlap="ignore",
    )
    assert np.array_equal(ens.members[1].centres, again.centres) and ens.members[1].charge == 0
    links, member = ik.cluster.load_member(store, 1)
    assert np.array_equal(member.centres, again.centres) and member.signs == (1, -1)
    local = ik.lattice_start(member, (2, 2, 2, 2), 1.0, origin=np.full(4, -0.5), rtol=1e-6).links
    assert np.array_equal(links, local)


@pytest.mark.parametrize(
    ("k", "rank", "match"),
    [((0, 0), 1, "at least one object"), ((1, 1, 1), 1, "k_plus, k_minus"), ((1, 1), 2, "rank must be 1")],
)
def test_dask_ensemble_refuses_bad_mixed_counts(k, rank, match):
    with pytest.raises(ValueError, match=match):
        ik.cluster.ensemble(1, k, (4, 4, 4, 4), 1.0, rank=rank)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"separation": 0.0}, "separation"),
        ({"separation": float("nan")}, "separation"),
        ({"separation": True}, "separation"),
        ({"separation": 3.0, "axis": (0, 0, 0, 0)}, "axis"),
        ({"separation": 3.0, "size": -1.0}, "sizes"),
        ({"separation": 3.0, "center": (0, 0, 0)}, "center"),
    ],
)
def test_bad_pair_input_is_refused_naming_it(kwargs, match):
    with pytest.raises((ValueError, TypeError), match=match):
        mx.instanton_pair(**kwargs)


@pytest.mark.parametrize(
    ("grid", "match"), [((16,), "n_coarse, n_fine"), ((32, 16), "n_coarse < n_fine"), ((0, 8), "grid")]
)
def test_torus_totals_refuse_a_bad_grid(grid, match):
    f = mx.torus_mixture([[1, 1, 1, 1]], 0.5, [1], (6, 6, 6, 6))
    with pytest.raises(ValueError, match=match):
        mixture_totals(f, grid=grid)


def test_lattice_geometry_is_refused_on_r4():
    with pytest.raises(ValueError, match="torus mixture only"):
        mx.instanton_pair(3.0).lattice_geometry((4, 4, 4, 4))
