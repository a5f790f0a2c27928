"""Specification of instantonkit.engine.transforms: gauge transformations and space-time symmetries of fields."""

import dataclasses

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.core import quaternion as qt
from instantonkit.core.conventions import LEVI_CIVITA, point_to_quaternion, quaternion_to_point
from instantonkit.engine import fields as fl
from instantonkit.engine import transforms as tr

PI = np.pi
RNG = np.random.default_rng(987)
TH_C = np.array([[0.6, -0.2, 0.1, 0.3], [-0.5, 0.4, -0.3, -0.6]])
TH_R = np.array([0.7, 0.9])
FIELD = ik.thooft(TH_C, TH_R)
SEEDS = st.integers(0, 2**31 - 1)
FEW = settings(max_examples=10, deadline=None)
ADHM2 = ik.random_adhm(2, seed=3)


def _points(rng, n=16, avoid=TH_C, dist=0.15):
    """n random points at distance >= dist from the given poles."""
    out = []
    while len(out) < n:
        x = rng.normal(size=4) * 1.3
        if np.min(np.linalg.norm(np.asarray(avoid) - x, axis=1)) >= dist:
            out.append(x)
    return np.array(out)


def _unit(rng):
    q = rng.normal(size=4)
    return q / np.linalg.norm(q)


def _rel(a, b):
    return float(np.max(np.abs(np.asarray(a) / np.asarray(b) - 1.0)))


@jax.tree_util.register_pytree_node_class
@dataclasses.dataclass(frozen=True)
class WaveGauge:
    """Smooth SU(2) gauge function g(x) = exp(theta_a(x) u_a), theta_a = amp_a sin(k_a . x + phase_a).

    A pytree callable, so every parameter draw reuses one compiled kernel.
    """

    amp: np.ndarray  # (3,)
    wave: np.ndarray  # (3, 4)
    phase: np.ndarray  # (3,)

    def __call__(self, x):
        theta = self.amp * jnp.sin(self.wave @ x + self.phase)
        return qt.to_matrix(qt.qexp(jnp.concatenate([jnp.zeros(1), theta])))

    def tree_flatten(self):
        return (self.amp, self.wave, self.phase), None

    @classmethod
    def tree_unflatten(cls, aux, children):
        return cls(*children)


def _wave(rng):
    return WaveGauge(rng.uniform(-2, 2, 3), rng.normal(size=(3, 4)), rng.uniform(0, 2 * PI, 3))


# -- gauge transformations --------------------------------------------------------------------------


@FEW
@given(seed=SEEDS)
def test_densities_are_invariant_under_random_smooth_gauge_transformations(seed):
    # s and q are gauge invariant (F -> g F g^-1, conventions module; common practice); computed here with
    # the conventions-module formulas from the autodiff F of the transformed potential, so the potential
    # map itself is exercised.
    rng = np.random.default_rng(seed)
    pts = _points(rng)
    f = fl.field_strength(ik.gauge_transform(FIELD, _wave(rng)), pts, method="autodiff")
    s = -0.5 * np.real(np.einsum("...mnij,...mnji->...", f, f))
    q = -np.real(np.einsum("mnrs,...mnij,...rsji->...", LEVI_CIVITA, f, f)) / (32 * PI**2)
    assert _rel(s, fl.action_density(FIELD, pts)) <= 1e-10
    assert _rel(q, fl.charge_density(FIELD, pts)) <= 1e-10


@FEW
@given(seed=SEEDS)
def test_gauge_transformed_field_strength_is_conjugated(seed):
    # F' = g F g^-1 (conventions module): the autodiff F of A' = g A g^-1 + g d g^-1 equals the closed form.
    rng = np.random.default_rng(seed)
    pts = _points(rng)
    g = ik.gauge_transform(FIELD, _wave(rng))
    closed = fl.field_strength(g, pts)
    assert np.max(np.abs(fl.field_strength(g, pts, method="autodiff") - closed)) <= 1e-10 * np.max(np.abs(closed))


def test_singular_gauge_transformation_maps_regular_to_singular_bpst():
    # A_sing = h A_reg h^-1 + h d h^-1 with h = p-bar(y)/|y| ('t Hooft, Phys. Rev. D 14 (1976) 3432; the
    # derivation for our conventions is in the ansatz module docstring).
    a, rho = np.array([0.1, 0.2, -0.3, 0.4]), 0.8

    def h(x):
        y = point_to_quaternion(x - a)
        return qt.to_matrix(qt.qconj(y) / jnp.sqrt(jnp.sum(y * y)))

    pts = _points(RNG, avoid=[a])
    moved = fl.potential(ik.gauge_transform(ik.bpst_field(a, rho), h), pts)
    assert np.max(np.abs(moved - fl.potential(ik.bpst_field(a, rho, gauge="singular"), pts))) <= 1e-13


def test_gauge_transform_of_a_plain_callable_field():
    # A constant gauge rotation of a user potential leaves s unchanged (common practice).
    bpst = ik.bpst_field()

    def pot(x):
        return bpst.potential(x)

    omega = qt.to_matrix(jnp.asarray(_unit(RNG)))
    g = ik.gauge_transform(pot, lambda x: omega)
    pts = _points(RNG)
    assert _rel(fl.action_density(g, pts, method="autodiff"), fl.action_density(ik.bpst_field(), pts)) <= 1e-12


# -- translations -----------------------------------------------------------------------------------


@FEW
@given(seed=SEEDS)
def test_translated_thooft_is_thooft_with_moved_centres(seed):
    # phi(x - s) has poles a_i + s ('t Hooft ansatz; Jackiw, Nohl, Rebbi, Phys. Rev. D 15 (1977) 1642), so A' is the
    # ansatz of the moved centres.
    rng = np.random.default_rng(seed)
    shift = rng.normal(size=4)
    pts = _points(rng, avoid=TH_C + shift)
    mine = fl.potential(ik.translate(FIELD, shift), pts)
    assert np.max(np.abs(mine - fl.potential(ik.thooft(TH_C + shift, TH_R), pts))) <= 1e-12


@FEW
@given(seed=SEEDS)
def test_translation_covariance_of_densities(seed):
    # s_T(x + shift) = s(x) (translation invariance of the Yang-Mills action; common practice).
    rng = np.random.default_rng(seed)
    shift = rng.normal(size=4)
    pts = _points(rng)
    moved = fl.action_density(ik.translate(FIELD, shift), pts + shift, method="autodiff")
    assert _rel(moved, fl.action_density(FIELD, pts)) <= 1e-10


# -- rotations --------------------------------------------------------------------------------------


@FEW
@given(seed=SEEDS)
def test_rotation_matrix_is_in_so4_and_realises_the_quaternion_map(seed):
    # p(R x) = l p(x) r-bar with |l| = |r| = 1 is an SO(4) rotation (Cayley; common practice).
    rng = np.random.default_rng(seed)
    left, right = _unit(rng), _unit(rng)
    r = np.asarray(tr.rotation_matrix(left, right))
    x = rng.normal(size=4)
    image = quaternion_to_point(np.asarray(qt.qmul(qt.qmul(left, point_to_quaternion(x)), qt.qconj(right))))
    assert np.allclose(r.T @ r, np.eye(4), atol=1e-14) and abs(np.linalg.det(r) - 1) <= 1e-13
    assert np.allclose(r @ x, image, atol=1e-14)


@FEW
@given(seed=SEEDS)
def test_rotated_thooft_has_the_density_of_rotated_centres(seed):
    # R eta-bar_a R^T = O_ab eta-bar_b (a global gauge rotation; 't Hooft, Phys. Rev. D 14 (1976) 3432, appendix, from
    # memory; checked here through the densities) and phi(R^T x) has poles R a_i, so densities equal those of the ansatz
    # with centres R a_i.
    rng = np.random.default_rng(seed)
    left, right = _unit(rng), _unit(rng)
    r = np.asarray(tr.rotation_matrix(left, right))
    moved_c = TH_C @ r.T
    pts = _points(rng, avoid=moved_c)
    mine = fl.action_density(ik.rotate(FIELD, left, right), pts, method="autodiff")
    assert _rel(mine, fl.action_density(ik.thooft(moved_c, TH_R), pts)) <= 1e-10


@FEW
@given(seed=SEEDS)
def test_rotation_covariance_of_adhm_densities(seed):
    # s_R(R x) = s(x) for a charge-2 ADHM field (rotation invariance of the action; common practice).
    rng = np.random.default_rng(seed)
    data = ADHM2
    left, right = _unit(rng), _unit(rng)
    r = np.asarray(tr.rotation_matrix(left, right))
    pts = _points(rng, avoid=data.centers())
    mine = fl.action_density(ik.rotate(data, left, right), pts @ r.T, method="closed")
    assert _rel(mine, fl.action_density(data, pts)) <= 1e-10


def test_rotation_keeps_self_duality():
    # SO(4) rotations preserve eps, so a self-dual field stays self-dual (common practice).
    g = ik.rotate(FIELD, _unit(RNG), _unit(RNG))
    assert (
        np.max(fl.self_duality_residual(g, _points(RNG, avoid=TH_C @ np.asarray(g.matrix).T), method="autodiff"))
        <= 1e-11
    )


# -- dilations --------------------------------------------------------------------------------------


@FEW
@given(lam=st.floats(0.2, 5.0))
def test_scaling_of_the_action_density(lam):
    # s_lambda(lambda x) = lambda^-4 s(x): scale invariance of the 4D Yang-Mills action (common practice).
    pts = _points(np.random.default_rng(1))
    scaled = fl.action_density(ik.dilate(FIELD, lam), lam * pts, method="autodiff")
    assert _rel(scaled, fl.action_density(FIELD, pts) / lam**4) <= 1e-10


@FEW
@given(lam=st.floats(0.2, 5.0))
def test_dilated_thooft_is_thooft_with_scaled_moduli(lam):
    # phi(x / lambda) = 1 + sum (lambda rho_i)^2 / |x - lambda a_i|^2 ('t Hooft ansatz).
    pts = _points(np.random.default_rng(2), avoid=lam * TH_C)
    mine = fl.potential(ik.dilate(FIELD, lam), pts)
    assert np.max(np.abs(mine - fl.potential(ik.thooft(lam * TH_C, lam * TH_R), pts))) <= 1e-12


def test_dilated_bpst_is_bpst_of_scaled_size():
    # BPST profile 48 rho^4 / (x^2 + rho^2)^4 (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85) with
    # rho -> c rho.
    pts = _points(RNG)
    s = fl.action_density(ik.dilate(ik.bpst_field(size=0.5), 3.0), pts, method="autodiff")
    y2 = np.sum(pts**2, axis=-1)
    assert _rel(s, 48 * 1.5**4 / (y2 + 1.5**2) ** 4) <= 1e-12


# -- parity -----------------------------------------------------------------------------------------


def test_parity_image_is_anti_self_dual_with_flipped_charge():
    # det P = -1: q(x) -> -q(Px), s(x) -> s(Px), self-dual -> anti-self-dual (common practice).
    p = tr.PARITY
    pts = _points(RNG)
    g = ik.parity(FIELD)
    assert _rel(fl.charge_density(g, pts * p, method="autodiff"), -fl.charge_density(FIELD, pts)) <= 1e-11
    assert np.max(np.abs(fl.self_duality_residual(g, pts * p, method="autodiff") - 2)) <= 1e-11


# -- wrappers: metadata, pytrees, composition -------------------------------------------------------


def test_wrappers_forward_hint_charge_and_period():
    cal = ik.caloron(0.8, 2.0, (0.1, 0.2, 0.3, 0.4))
    assert float(ik.dilate(cal, 3.0).period) == 6.0
    assert float(ik.translate(cal, (1, 0, 0, 0)).period) == 2.0
    assert not hasattr(ik.rotate(cal, _unit(RNG)), "period")
    assert not hasattr(ik.translate(lambda x: jnp.zeros((4, 2, 2), complex), np.ones(4)), "hint")
    centre, scale = ik.dilate(ik.translate(cal, (1, 0, 0, 0)), 2.0).hint()
    assert np.allclose(centre, [2.2, 0.4, 0.6, 0.8]) and scale == 2.0 * cal.hint()[1]
    assert ik.parity(FIELD).charge == -2 and ik.translate(FIELD, np.zeros(4)).charge == 2


def test_wrappers_are_pytrees_with_the_parameters_as_leaves():
    g = ik.dilate(ik.translate(FIELD, np.ones(4)), 2.0)
    leaves = jax.tree_util.tree_leaves(g)
    assert len(leaves) == 4  # centers, sizes, shift, factor
    again = jax.tree_util.tree_unflatten(jax.tree_util.tree_structure(g), leaves)
    x = jnp.asarray([0.3, 0.1, -0.2, 0.5])
    run = jax.jit(lambda field, y: field.potential(y))
    assert np.allclose(run(again, x), run(g, x), atol=0)


def test_gradient_through_a_dilation_factor():
    # d/dc [s(x / c) / c^4] for BPST at the origin: s = 48 rho^4 c^4 / (|x|^2 + c^2 rho^2)^4 (Belavin, Polyakov,
    # Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85).
    x = jnp.asarray([0.3, 0.1, -0.2, 0.5])
    bpst = ik.bpst_field()
    grad = jax.jit(jax.grad(lambda c: tr.Dilated(bpst, c).action_density(x)))(1.5)
    y2 = float(jnp.sum(x**2))
    ref = 48 * (4 * 1.5**3 * (y2 + 1.5**2) - 8 * 1.5**5) / (y2 + 1.5**2) ** 5
    assert abs(float(grad) / ref - 1) <= 1e-12


# -- bad input --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "build, error, match",
    [
        (lambda: ik.gauge_transform(FIELD, lambda x: 2.0 * jnp.eye(2, dtype=complex)), ValueError, "unitary"),
        (lambda: ik.gauge_transform(FIELD, lambda x: jnp.eye(3, dtype=complex)), ValueError, r"\(2, 2\)"),
        (lambda: ik.gauge_transform(FIELD, "not a function"), TypeError, "callable"),
        (lambda: ik.translate(FIELD, (1.0, 2.0)), ValueError, r"shift must have shape \(4,\)"),
        (lambda: ik.translate(FIELD, (1.0, 2.0, np.nan, 0.0)), ValueError, "finite"),
        (lambda: ik.rotate(FIELD, (1.0, 1.0, 0.0, 0.0)), ValueError, "unit quaternion"),
        (lambda: ik.rotate(FIELD, (1.0, 0.0, 0.0)), ValueError, r"left must have shape \(4,\)"),
        (lambda: ik.dilate(FIELD, 0.0), ValueError, "factor must be > 0"),
        (lambda: ik.dilate(FIELD, -2.0), ValueError, "factor must be > 0"),
        (lambda: ik.parity(42), TypeError, "field"),
    ],
)
def test_bad_input_raises_naming_the_problem(build, error, match):
    with pytest.raises(error, match=match):
        build()


def test_anti_asks_the_field_and_lives_in_transforms():
    # anti dispatches on the conjugate hook: ADHM data flip chirality, a parity image unwraps, the rest is wrapped
    data = ik.bpst()
    assert ik.anti is tr.anti
    assert tr.anti(data).chirality == -1
    wrapped = tr.anti(FIELD)
    assert isinstance(wrapped, tr.ParityImage) and tr.anti(wrapped) is wrapped.field
    with pytest.raises(TypeError, match="field"):
        tr.anti(42)


def test_a_wrapped_callable_is_checked_by_the_engine():
    # the engine finds the bare callable through the wrapped_callable hook of the wrappers
    bad = lambda x: jnp.ones((4, 2, 2), dtype=complex)  # noqa: E731  (Hermitian, not anti-Hermitian)
    with pytest.raises(ValueError, match="anti-Hermitian"):
        ik.potential(tr.translate(tr.dilate(bad, 2.0), (1.0, 0, 0, 0)), np.zeros((1, 4)))


def _wave_gauge():
    """A smooth SU(2) gauge function, exp(i theta sigma_3 / 2) with theta = 0.7 sin(x1), as a bare callable."""

    def g(x):
        t = 0.35 * jnp.sin(x[0])
        return jnp.diag(jnp.array([jnp.exp(1j * t), jnp.exp(-1j * t)]))

    return g


@pytest.mark.parametrize(
    "wrap",
    [
        lambda f: ik.rotate(f, np.array([0.5, 0.5, 0.5, 0.5]), np.array([0.6, 0.0, 0.8, 0.0])),
        lambda f: ik.parity(f),
        lambda f: ik.gauge_transform(f, _wave_gauge()),
        lambda f: ik.dilate(ik.translate(f, (0.3, 0.0, 0.0, -0.4)), 0.6),
    ],
    ids=["rotate", "parity", "gauge", "dilate-translate"],
)
def test_wrappers_forward_the_batch_densities_of_the_wrapped_field(wrap):
    # The batch hook of a wrapper must equal autodiff of the wrapper's own potential: s, q are
    # gauge-invariant scalars, q a pseudoscalar (odd under parity) and s scales as c^-4 under x -> c x
    # (common practice).  The batch path itself is the ADHM kernel of instantonkit.adhm._kxk.
    field = wrap(ADHM2)
    assert fl.hook(field, "density_batch") is not None
    pts = _points(np.random.default_rng(5), n=12, avoid=np.zeros((1, 4)), dist=0.0)
    for quantity in ("action_density", "charge_density"):
        batch = np.asarray(field.density_batch(jnp.asarray(pts), quantity))
        auto = getattr(fl, quantity)(field, pts, method="autodiff")
        assert np.max(np.abs(batch - auto)) <= 1e-10 * np.max(np.abs(auto))


def test_wrappers_of_a_field_without_batch_densities_have_no_batch_hook():
    assert fl.hook(ik.translate(FIELD, np.ones(4)), "density_batch") is None


def test_a_field_with_batch_densities_only_gets_the_per_point_hooks_from_them():
    # the calorons write their closed-form densities for batches only; the per-point hooks are a batch of one point,
    # so the engine's per-point path (wrappers, `method="auto"`) and its batch path give the same numbers
    field = ik.caloron(1.0, 2.0, np.zeros(4), holonomy=0.2, axis=np.array([0.0, 0.0, 1.0]))
    assert "action_density" not in type(field).__dict__
    pts = _points(np.random.default_rng(9), n=6, avoid=np.zeros((1, 4)), dist=0.0)
    for quantity in ("action_density", "charge_density"):
        one = fl.hook(field, quantity)
        batch = np.asarray(field.density_batch(jnp.asarray(pts), quantity))
        assert np.max(np.abs(np.asarray([one(jnp.asarray(p)) for p in pts]) - batch)) <= 1e-13 * np.max(np.abs(batch))
        assert np.max(np.abs(np.asarray(getattr(fl, quantity)(ik.translate(field, np.zeros(4)), pts)) - batch)) < 1e-12
