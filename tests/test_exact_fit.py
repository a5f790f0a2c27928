"""Specification of the exact-moduli fit's one model interface: both ADHM realisations offer it, their
parameter counts are the gauge-invariant moduli counts, bad input is refused, and the module paths of the two former fit modules still import.

The fits themselves (recovering moduli from densities) and the unrolled constraint solve against the
builders' are specified in tests/test_finder.py.
External references: the ADHM construction (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978)
185); the dimension 4kN of the framed charge-k SU(N) moduli space and 4kN - (N^2 - 1) modulo global
gauge rotations for N <= 2k (Bernard, Christ, Guth, Weinberg, Phys. Rev. D 16 (1977) 2967; from memory).
"""

from __future__ import annotations

import importlib

import jax
import numpy as np
import pytest
from scipy.stats import unitary_group

import instantonkit as ik
from instantonkit.adhm.base import solve_quaternionic_constraint
from instantonkit.fit import exact_fit
from instantonkit.fit.exact_fit import ExactModel, QuaternionicModel, UnitaryModel, fit_model


def _start(model, n):
    """Parameters at generic reference orientations: 1 and Haar-random U(N) (scipy.stats.unitary_group)."""
    k = model.k
    g = np.stack([np.eye(n)] + [unitary_group.rvs(n, random_state=j) for j in range(1, k)])
    return model.pack(np.arange(4 * k, dtype=float).reshape(k, 4) * 3.0, np.ones(k), g)


def test_both_realisations_offer_the_one_model_interface():
    assert isinstance(QuaternionicModel(2), ExactModel) and isinstance(UnitaryModel(2, 3), ExactModel)


@pytest.mark.parametrize("k", [1, 2, 3])
def test_su2_parameters_are_the_8k_moduli_less_the_global_rotation(k):
    # 8k moduli of charge-k SU(2) ADHM data (Atiyah et al. 1978), 3 of them a global Sp(1) gauge rotation
    assert QuaternionicModel(k).n_params() == 8 * k - 3


@pytest.mark.parametrize(("k", "n"), [(2, 3), (3, 3), (2, 4)])
def test_sun_parameters_are_the_gauge_invariant_moduli_count(k, n):
    # 4kN - (N^2 - 1) for N <= 2k (Bernard, Christ, Guth, Weinberg 1977; from memory)
    model = UnitaryModel(k, n)
    theta, ctx = _start(model, n)
    assert model.n_params(ctx) == theta.size == 4 * k * n - (n * n - 1)


def test_error_vector_is_cut_back_into_the_moduli_it_was_flattened_from():
    # the propagated errors are one vector in _flat_moduli's order; each key must get its own entries back
    model = QuaternionicModel(2)
    o = np.array([[1.0, 0.0, 0.0, 0.0], [0.5, 0.5, 0.5, 0.5]])
    theta, uref = model.pack(np.array([[0.0, 0, 0, 0], [3.0, 1.0, 0, 0]]), np.array([0.7, 0.9]), o)
    moduli = jax.jit(model.moduli)(np.asarray(theta), uref)  # a jitted dict comes back with sorted keys
    flat = np.asarray(exact_fit._flat_moduli(model, np.asarray(theta), uref))
    back = exact_fit._split_like(flat, moduli)
    assert list(back) == ["centers", "sizes", "orientations"]
    for key, value in moduli.items():
        np.testing.assert_array_equal(back[key], np.asarray(value), err_msg=key)


def test_quaternionic_solve_without_equations_returns_the_diagonal():
    # k = 1: Im(Lambda^dag Lambda + B^dag B) has no off-diagonal entry, so there is nothing to solve
    diag = np.array([[1.0, 2.0, 3.0, 4.0]])
    b, res, steps = solve_quaternionic_constraint(np.ones((1, 1, 4)) / 2.0, diag, steps=5, tol=1e-12)
    np.testing.assert_array_equal(np.asarray(b), diag[None])
    assert float(res) == 0.0 and steps == 0


def test_former_module_paths_import_the_one_fit_module():
    for name in ("instantonkit.fit.moduli_fit", "instantonkit.fit.unitary_fit", "instantonkit.moduli_fit"):
        assert importlib.import_module(name) is exact_fit
    assert ik.fit.unitary_fit.fit_unitary is exact_fit.fit_unitary


# -- bad input ----------------------------------------------------------------------------------------

PTS = np.zeros((10, 4))
S = np.linspace(0.1, 1.0, 10)


@pytest.mark.parametrize(
    ("args", "error", "match"),
    [
        (("model", PTS, S, np.ones(10), np.zeros((2, 4)), np.ones(2)), TypeError, "model must offer"),
        ((QuaternionicModel(2), PTS[:, :3], S, np.ones(10), np.zeros((2, 4)), np.ones(2)), ValueError, "pts"),
        (
            (QuaternionicModel(2), PTS, S[:9], np.ones(10), np.zeros((2, 4)), np.ones(2)),
            ValueError,
            r"s must .*\(10,\)",
        ),
        ((QuaternionicModel(2), PTS, S, -np.ones(10), np.zeros((2, 4)), np.ones(2)), ValueError, "w must be >= 0"),
        ((QuaternionicModel(2), PTS, 0 * S, np.ones(10), np.zeros((2, 4)), np.ones(2)), ValueError, "zero everywhere"),
        ((QuaternionicModel(2), PTS, S, np.ones(10), np.zeros((3, 4)), np.ones(2)), ValueError, r"centres0 .*\(2, 4\)"),
        ((QuaternionicModel(2), PTS, S, np.ones(10), np.zeros((2, 4)), np.array([1.0, -1.0])), ValueError, "sizes0"),
    ],
)
def test_fit_model_refuses_bad_input_naming_it(args, error, match):
    with pytest.raises(error, match=match):
        fit_model(*args)


@pytest.mark.parametrize(
    ("make", "error", "match"),
    [
        (lambda: QuaternionicModel(0), ValueError, "k must be a positive integer"),
        (lambda: QuaternionicModel(2.0), TypeError, "k must be a positive integer"),
        (lambda: UnitaryModel(2, 1), ValueError, "rank must be >= 2; found 1"),
    ],
)
def test_models_refuse_bad_sizes_naming_them(make, error, match):
    with pytest.raises(error, match=match):
        make()
