"""Specification of the evaluation engine (instantonkit.engine.fields) for user callables and point sets.

Two parts:

* a user-written JAX potential ``A_mu = f(r) g^-1 d_mu g`` with a non-BPST profile, whose field
  strength and densities are checked against an independent symbolic computation with sympy;
* engine behaviour: leading shapes, numpy/jax input, float64 output, chunking, singular points and
  clear errors for bad input.
"""

from __future__ import annotations

import re

import jax.numpy as jnp
import mpmath
import numpy as np
import pytest
import sympy as sp

import instantonkit as ik
from instantonkit.core.conventions import E_MU, QUATERNION_BASIS, point_to_quaternion
from instantonkit.engine import fields

RHO = 0.7  # profile scale of the user potential (sympy uses the exact rational 7/10)

# -- reference formulas (conventions module) --------------------------------------------------------

# eps_{mu nu rho sigma} with eps_1234 = +1, built by sympy (independent of conventions.LEVI_CIVITA).
EPS = np.array(
    [[[[float(sp.LeviCivita(a, b, c, d)) for d in range(4)] for c in range(4)] for b in range(4)] for a in range(4)]
)


def s_from_f(f):
    """s = -1/2 sum_{mu nu} tr F_mu nu F_mu nu (the action density of the conventions); f: (..., 4, 4, N, N)."""
    return -0.5 * np.real(np.einsum("...mnij,...mnji->...", f, f))


def q_from_f(f):
    """q = -1/(32 pi^2) eps_{mu nu rho sigma} tr F_mu nu F_rho sigma (the charge density of the conventions)."""
    return -np.real(np.einsum("mnrs,...mnij,...rsji->...", EPS, f, f)) / (32.0 * np.pi**2)


# -- the user potential: a non-BPST profile times the pure gauge g^-1 dg, g = p(x)/|x| -----------------

_E_MAT = jnp.einsum("ma,aij->mij", E_MU, QUATERNION_BASIS)  # d p(x) / d x_mu as 2x2 matrices


def user_potential(x):
    """A_mu = f(r) g^-1 d_mu g with f = r^4/(r^2+rho^2)^2 and g = p(x)/|x|, written out by hand.

    With P = matrix of p(x) (P^dag P = r^2): g^-1 d_mu g = (P^dag E_mu - x_mu)/r^2, so
    A_mu = r^2/(r^2+rho^2)^2 (P^dag E_mu - x_mu); smooth everywhere.  x: (4,) -> (4, 2, 2).
    """
    r2 = jnp.sum(x**2)
    pmat = jnp.einsum("a,aij->ij", point_to_quaternion(x), QUATERNION_BASIS)
    pure = jnp.einsum("ji,mjk->mik", jnp.conj(pmat), _E_MAT) - x[:, None, None] * jnp.eye(2)
    return r2 / (r2 + RHO**2) ** 2 * pure


SYMBOLIC_POINTS = np.array([[0.3, -0.4, 0.5, 0.2], [1.1, 0.2, -0.7, 0.9], [-0.25, 0.6, 0.15, -1.3]])


@pytest.fixture(scope="module")
def symbolic_f():
    """F_mu nu of the user potential from sympy: A and d_mu A_nu symbolic, evaluated at 30 digits.

    sympy builds g = (x4 1 + i x.sigma)/r, A_mu = f(r) g^-1 d_mu g by symbolic differentiation of g
    (no hand simplification), differentiates A again symbolically, and F_mu nu = d_mu A_nu - d_nu A_mu +
    [A_mu, A_nu] is assembled from the exact values.  Returns (3, 4, 4, 2, 2) complex.
    """
    xs = sp.symbols("x1:5", real=True)
    rho = sp.Rational(7, 10)
    sig = [sp.Matrix([[0, 1], [1, 0]]), sp.Matrix([[0, -sp.I], [sp.I, 0]]), sp.Matrix([[1, 0], [0, -1]])]
    pmat = xs[3] * sp.eye(2) + sp.I * (xs[0] * sig[0] + xs[1] * sig[1] + xs[2] * sig[2])
    r2 = sum(v**2 for v in xs)
    r = sp.sqrt(r2)
    g = pmat / r
    g_inv = pmat.H / r  # g is unitary: g^-1 = g^dag
    prof = r2**2 / (r2 + rho**2) ** 2
    a = [prof * g_inv * g.diff(xs[m]) for m in range(4)]
    da = [[a[n].diff(xs[m]) for n in range(4)] for m in range(4)]  # da[m][n] = d_m A_n
    out = []
    with mpmath.workdps(30):
        for p in SYMBOLIC_POINTS:
            vals = {xs[i]: sp.Float(repr(float(p[i])), 30) for i in range(4)}
            an = np.array([np.array(a[m].xreplace(vals).evalf(30).tolist(), dtype=complex) for m in range(4)])
            dan = np.array(
                [
                    [np.array(da[m][n].xreplace(vals).evalf(30).tolist(), dtype=complex) for n in range(4)]
                    for m in range(4)
                ]
            )
            comm = np.einsum("mij,njk->mnik", an, an)
            out.append(dan - dan.transpose(1, 0, 2, 3) + comm - comm.transpose(1, 0, 2, 3))
    return np.array(out)


def test_user_potential_field_strength_matches_sympy(symbolic_f):
    # Reference: symbolic differentiation with sympy (fixture symbolic_f); F formula of the conventions.
    f = ik.field_strength(user_potential, SYMBOLIC_POINTS)
    assert np.max(np.abs(f - symbolic_f)) <= 1e-10 * np.max(np.abs(symbolic_f))


def test_user_potential_action_density_matches_sympy(symbolic_f):
    # Reference: s from the sympy field strength, s = -1/2 sum tr F F (conventions module).
    s = ik.action_density(user_potential, SYMBOLIC_POINTS)
    ref = s_from_f(symbolic_f)
    np.testing.assert_allclose(s, ref, rtol=1e-10, atol=0)


def test_user_potential_charge_density_matches_sympy(symbolic_f):
    # Reference: q from the sympy field strength with sympy's Levi-Civita symbol, eps_1234 = +1.
    q = ik.charge_density(user_potential, SYMBOLIC_POINTS)
    ref = q_from_f(symbolic_f)
    np.testing.assert_allclose(q, ref, rtol=1e-10, atol=0)


def test_user_potential_is_not_self_dual(symbolic_f):
    # A profile other than BPST's r^2/(r^2+rho^2) is not (anti-)self-dual (Belavin, Polyakov, Schwartz,
    # Tyupkin, Phys. Lett. B 59 (1975) 85): s != 8 pi^2 |q|, checked on the sympy reference values.
    s, q = s_from_f(symbolic_f), q_from_f(symbolic_f)
    assert np.all(np.abs(s - 8 * np.pi**2 * np.abs(q)) > 1e-3 * s)


# -- engine behaviour ----------------------------------------------------------------------------------

CENTER = np.array([1.0, 2.0, 3.0, 4.0])
SIZE = 0.5


@pytest.fixture(scope="module")
def bpst_data():
    return ik.bpst(CENTER, SIZE)


def bpst_density(x):
    # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4/(|x-a|^2+rho^2)^4.
    return 48 * SIZE**4 / (np.sum((np.asarray(x) - CENTER) ** 2, axis=-1) + SIZE**2) ** 4


@pytest.fixture(scope="module")
def grid():
    return CENTER + np.random.default_rng(7).normal(size=(3, 5, 4))


def test_single_point_gives_scalar(bpst_data):
    s = ik.action_density(bpst_data, CENTER + 0.1)
    assert s.shape == ()
    np.testing.assert_allclose(s, bpst_density(CENTER + 0.1), rtol=1e-12)


def test_leading_shape_kept_for_densities(bpst_data, grid):
    assert ik.action_density(bpst_data, grid).shape == (3, 5)
    assert ik.charge_density(bpst_data, grid).shape == (3, 5)


def test_leading_shape_kept_for_matrices(bpst_data, grid):
    assert ik.potential(bpst_data, grid).shape == (3, 5, 4, 2, 2)
    assert ik.field_strength(bpst_data, grid).shape == (3, 5, 4, 4, 2, 2)


def test_empty_point_set(bpst_data):
    assert ik.action_density(bpst_data, np.zeros((0, 4))).shape == (0,)
    assert ik.field_strength(bpst_data, np.zeros((0, 4))).shape == (0, 4, 4, 2, 2)


def test_output_dtypes_are_double_precision(bpst_data, grid):
    assert ik.action_density(bpst_data, grid).dtype == np.float64
    assert ik.charge_density(bpst_data, grid).dtype == np.float64
    assert ik.potential(bpst_data, grid).dtype == np.complex128
    assert ik.field_strength(bpst_data, grid).dtype == np.complex128


def test_float32_points_are_computed_in_float64(bpst_data, grid):
    x32 = grid.astype(np.float32)
    s = ik.action_density(bpst_data, x32)
    assert s.dtype == np.float64
    np.testing.assert_allclose(s, bpst_density(x32.astype(np.float64)), rtol=1e-12)


def test_integer_points_accepted(bpst_data):
    x = np.array([[1, 2, 3, 5], [2, 2, 3, 4]])
    np.testing.assert_allclose(ik.action_density(bpst_data, x), bpst_density(x), rtol=1e-12)


def test_numpy_and_jax_points_agree(bpst_data, grid):
    np.testing.assert_array_equal(ik.action_density(bpst_data, grid), ik.action_density(bpst_data, jnp.asarray(grid)))


def test_results_match_bpst_formula_on_grid(bpst_data, grid):
    np.testing.assert_allclose(ik.action_density(bpst_data, grid), bpst_density(grid), rtol=1e-12)


def test_chunking_does_not_change_results(bpst_data):
    x = CENTER + np.random.default_rng(3).normal(size=(20, 4))
    np.testing.assert_array_equal(ik.action_density(bpst_data, x, chunk_size=7), ik.action_density(bpst_data, x))


def test_evaluate_many_equals_one_quantity_at_a_time():
    # One kernel for several quantities gives what separate evaluate calls give (to rounding: XLA may fuse
    # the shared work differently); random Sp(1) k = 2 data, closed forms and autodiff side by side.
    data = ik.random_adhm(2, seed=6)
    centre, scale = data.hint()
    pts = centre + scale * np.random.default_rng(4).normal(size=(2, 40, 4))
    wanted = ("field_strength", ("field_strength", "autodiff"), "action_density", "charge_density", "potential")
    many = fields.evaluate_many(data, pts, wanted, chunk_size=32)
    assert len(many) == len(wanted)
    for q, got in zip(wanted, many):
        name, method = (q, "auto") if isinstance(q, str) else q
        ref = fields.evaluate(data, pts, name, method=method, chunk_size=32)
        assert got.shape == ref.shape and got.dtype == ref.dtype
        np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-12 * np.max(np.abs(ref)))


@pytest.mark.parametrize(
    "bad, match",
    [("action_density", "non-empty sequence"), ((), "non-empty sequence"), ([("potential",)], "pair of strings")],
)
def test_evaluate_many_rejects_malformed_quantity_lists(bpst_data, bad, match):
    with pytest.raises(TypeError, match=match):
        fields.evaluate_many(bpst_data, np.zeros((2, 4)) + 0.5, bad)


def test_evaluate_many_rejects_an_unknown_quantity_or_method(bpst_data):
    with pytest.raises(ValueError, match="unknown quantity 'energy'"):
        fields.evaluate_many(bpst_data, np.zeros((2, 4)) + 0.5, ["potential", "energy"])
    with pytest.raises(ValueError, match="method must be one of"):
        fields.evaluate_many(bpst_data, np.zeros((2, 4)) + 0.5, [("potential", "numeric")])


def test_singular_gauge_centre_raises_naming_the_point(bpst_data, grid):
    x = grid.copy()
    x[1, 2] = CENTER
    with pytest.raises(ValueError, match=re.escape(str(CENTER.tolist()))):
        ik.potential(bpst_data, x)


def test_regular_gauge_is_finite_at_the_centre(bpst_data):
    # BPST regular gauge A_mu ~ x_nu / (x^2 + rho^2) vanishes at the centre (Belavin, Polyakov, Schwartz, Tyupkin, Phys.
    # Lett. B 59 (1975) 85, from memory).
    a = ik.potential(bpst_data.with_gauge("regular"), CENTER)
    np.testing.assert_allclose(a, 0.0, atol=1e-14)


def test_action_density_finite_at_singular_gauge_centre(bpst_data):
    # Gauge-invariant densities are smooth at the centre: s(a) = 48/rho^4 (Belavin, Polyakov, Schwartz, Tyupkin, Phys.
    # Lett. B 59 (1975) 85).
    np.testing.assert_allclose(ik.action_density(bpst_data, CENTER), 48 / SIZE**4, rtol=1e-12)


# -- bad input -----------------------------------------------------------------------------------------


def test_points_with_wrong_last_axis_rejected(bpst_data):
    with pytest.raises(ValueError, match=r"\(\.\.\., 4\).*\(5, 3\)"):
        ik.action_density(bpst_data, np.zeros((5, 3)))


def test_zero_dimensional_points_rejected(bpst_data):
    with pytest.raises(ValueError, match=r"\(\.\.\., 4\)"):
        ik.action_density(bpst_data, np.float64(1.0))


def test_nan_points_rejected(bpst_data):
    x = np.zeros((3, 4))
    x[1, 2] = np.nan
    with pytest.raises(ValueError, match="finite.*1 point"):
        ik.action_density(bpst_data, x)


def test_infinite_points_rejected(bpst_data):
    with pytest.raises(ValueError, match="finite"):
        ik.action_density(bpst_data, np.array([0.0, np.inf, 0.0, 0.0]))


def test_complex_points_rejected(bpst_data):
    with pytest.raises(TypeError, match="real.*complex"):
        ik.action_density(bpst_data, np.zeros((2, 4), dtype=complex))


def test_callable_with_wrong_output_shape_rejected():
    def bad(x):
        return jnp.zeros((3, 2, 2), dtype=complex) * x[0]

    with pytest.raises(ValueError, match=r"\(4, N, N\).*\(3, 2, 2\)"):
        ik.action_density(bad, np.zeros((2, 4)))


def test_callable_with_non_square_matrices_rejected():
    def bad(x):
        return jnp.zeros((4, 2, 3), dtype=complex) * x[0]

    with pytest.raises(ValueError, match=r"\(4, N, N\).*\(4, 2, 3\)"):
        ik.field_strength(bad, np.zeros((2, 4)))


def test_non_anti_hermitian_callable_rejected():
    sigma3 = jnp.array([[1.0, 0.0], [0.0, -1.0]], dtype=complex)

    def hermitian(x):  # Hermitian, not anti-Hermitian
        return x[:, None, None] * sigma3

    with pytest.raises(ValueError, match="anti-Hermitian"):
        ik.action_density(hermitian, np.ones((2, 4)))


def test_non_field_object_rejected():
    with pytest.raises(TypeError, match="potential"):
        ik.action_density(3.0, np.zeros((1, 4)))


def test_unknown_method_rejected(bpst_data):
    with pytest.raises(ValueError, match="method.*'numerical'"):
        ik.action_density(bpst_data, np.zeros((1, 4)), method="numerical")


def test_bad_chunk_size_rejected(bpst_data):
    with pytest.raises(ValueError, match="chunk_size.*0"):
        ik.action_density(bpst_data, np.zeros((1, 4)), chunk_size=0)
    # booleans are not numbers (common practice of the house, _validate)
    with pytest.raises(TypeError, match="chunk_size must be a positive integer; found True"):
        ik.action_density(bpst_data, np.zeros((1, 4)), chunk_size=True)


def test_as_points_and_adhm_delta_share_one_points_check(bpst_data):
    # one wording for points everywhere: fields.as_points delegates to _validate.points
    with pytest.raises(ValueError, match=r"points must have shape \(\.\.\., 4\); found \(5, 3\)"):
        bpst_data.delta(np.zeros((5, 3)))
    pts, lead = fields.as_points(np.zeros((2, 3, 4)))
    assert pts.shape == (6, 4) and lead == (2, 3) and pts.dtype == np.float64


def test_unknown_quantity_rejected(bpst_data):
    with pytest.raises(ValueError, match="quantity.*'energy'"):
        fields.evaluate(bpst_data, np.zeros((1, 4)), "energy")


# -- parameter scans without recompiling ---------------------------------------------------------------


def _charge_one_potential(x, params):
    """BPST of size params['rho'] at params['centre'] as ADHM data built from traced leaves (regular gauge)."""
    lam = jnp.zeros((1, 1, 4)).at[0, 0, 0].set(params["rho"])
    b = point_to_quaternion(params["centre"])[None, None]
    return ik.ADHMData(lam, b, gauge="regular").potential(x)


def test_parameter_scan_compiles_once(bpst_data):
    pts = CENTER + np.random.default_rng(11).normal(size=(32, 4))
    kern = fields._kernel(("action_density", "auto"))
    before = kern._cache_size()
    for rho in (0.4, 0.5, 0.6, 0.8, 1.1):
        field = fields.ParametrisedField(_charge_one_potential, {"rho": rho, "centre": CENTER})
        s = ik.action_density(field, pts)
        # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4/(|x-a|^2+rho^2)^4.
        ref = 48 * rho**4 / (np.sum((pts - CENTER) ** 2, axis=-1) + rho**2) ** 4
        np.testing.assert_allclose(s, ref, rtol=1e-10)
    assert kern._cache_size() - before == 1


def test_parametrised_field_rejects_a_non_callable():
    with pytest.raises(TypeError, match="fn must be a callable"):
        fields.ParametrisedField(3.0, {"rho": 1.0})


def test_batched_density_matches_per_point_closed_form():
    # The density_batch hook (batch-major kernels) and the per-point closed form agree to rounding,
    # SU(2) (rank-one route) and Sp(2) (exact route), instanton and anti-instanton.
    for data in (ik.random_adhm(3, 1, seed=4), ik.random_adhm(3, 1, seed=4).conjugate(), ik.random_adhm(2, 2, seed=5)):
        centre, scale = data.hint()
        pts = centre + scale * np.random.default_rng(3).normal(size=(64, 4))
        per_point = np.array([float(data.action_density(x)) for x in pts[:8]])
        np.testing.assert_allclose(ik.action_density(data, pts)[:8], per_point, rtol=1e-11)
        q = ik.charge_density(data, pts)
        np.testing.assert_allclose(q, data.chirality * ik.action_density(data, pts) / (8 * np.pi**2), rtol=1e-14)


# -- first calls: what compiles once ------------------------------------------------------------------


def _closure_over(rho):
    def a(x):  # a new function object on every call, the same code
        return _charge_one_potential(x, {"rho": rho, "centre": jnp.asarray(CENTER)})

    return a


def test_two_closures_of_the_same_code_and_values_share_one_compile():
    pts = CENTER + np.random.default_rng(12).normal(size=(16, 4))
    kern = fields._kernel(("action_density", "auto"))
    first = ik.action_density(_closure_over(0.7), pts)
    before = kern._cache_size()
    again = ik.action_density(_closure_over(0.7), pts)  # another object, equal code and captured value
    assert kern._cache_size() == before
    np.testing.assert_array_equal(first, again)
    other = ik.action_density(_closure_over(0.9), pts)  # a new captured value: a new kernel, new values
    assert kern._cache_size() == before + 1
    # Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85: s = 48 rho^4/(|x-a|^2+rho^2)^4.
    ref = 48 * 0.9**4 / (np.sum((pts - CENTER) ** 2, axis=-1) + 0.9**2) ** 4
    np.testing.assert_allclose(other, ref, rtol=1e-10)


_REBOUND_SIZE = 0.7


def _reads_a_module_global(x):
    return _charge_one_potential(x, {"rho": _REBOUND_SIZE, "centre": jnp.asarray(CENTER)})


def test_a_rebound_module_global_read_by_the_potential_compiles_again():
    # jax bakes the globals a traced function reads into its kernel: the same function object after
    # ``_REBOUND_SIZE`` is rebound must give the new field, not the cached kernel's old one (a notebook
    # cell run again with a new value).  Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85:
    # s = 48 rho^4/(|x-a|^2+rho^2)^4.
    global _REBOUND_SIZE
    pts = CENTER + np.random.default_rng(13).normal(size=(8, 4))
    r2 = np.sum((pts - CENTER) ** 2, axis=-1)
    try:
        for rho in (0.7, 1.3, 0.7):
            _REBOUND_SIZE = rho
            got = ik.action_density(_reads_a_module_global, pts)
            np.testing.assert_allclose(got, 48 * rho**4 / (r2 + rho**2) ** 4, rtol=1e-10)
    finally:
        _REBOUND_SIZE = 0.7


def test_lean_and_fully_optimised_autodiff_agree_with_the_closed_form():
    from instantonkit.core import _config

    data = ik.random_adhm(2, 1, seed=21)
    centre, scale = data.hint()
    pts = centre + scale * np.random.default_rng(4).normal(size=(16, 4))
    closed = ik.field_strength(data, pts, method="closed")
    lean = ik.field_strength(data, pts, method="autodiff")
    try:
        _config.set_lean_compile(False)
        full = ik.field_strength(data, pts, method="autodiff")
    finally:
        _config.set_lean_compile(True)
    # closed form (Christ, Weinberg, Stanton, Phys. Rev. D 18 (1978) 2013, from memory) vs the curvature of A
    scale_f = np.max(np.abs(closed))
    assert np.max(np.abs(lean - closed)) <= 1e-12 * scale_f
    assert np.max(np.abs(full - closed)) <= 1e-12 * scale_f


def test_set_lean_compile_rejects_a_non_boolean():
    from instantonkit.core import _config

    with pytest.raises(TypeError, match="on must be a bool; found int"):
        _config.set_lean_compile(1)


def test_compile_cache_directory_is_configurable(tmp_path):
    import jax

    from instantonkit.core import _config

    old = _config.compile_cache_dir()
    try:
        path = ik.enable_compile_cache(tmp_path / "kernels")
        assert path == str(tmp_path / "kernels") and _config.compile_cache_dir() == path
        assert (tmp_path / "kernels").is_dir()
    finally:
        jax.config.update("jax_compilation_cache_dir", old)
    (tmp_path / "file").write_text("x")
    with pytest.raises(ValueError, match="directory must be a directory; found a file"):
        ik.enable_compile_cache(tmp_path / "file")
