"""Calorons of non-trivial holonomy (Kraan-van Baal SU(2)) and Polyakov loops."""

import jax
import numpy as np
import pytest

import instantonkit as ik
from instantonkit.ansatz.calorons import CaloronField, HolonomyCaloronField
from instantonkit.core._config import lean_compiler_options
from instantonkit.engine.fields import action_from_f, field_strength_from_potential, residual_from_f
from instantonkit.lattice import polyakov as pl
from instantonkit.lattice.references import field_from_record

BETA, RHO = 1.3, 0.9
CENTER = np.array([0.1, -0.2, 0.3, 0.4])
AXIS = np.array([1.0, 0.5, -0.2])


def _kvb(omega, axis=AXIS):
    return HolonomyCaloronField(RHO, BETA, omega, CENTER, axis)


#: F of a field by autodiff of its potential; the field is an argument, so one compilation serves every omega.
#: XLA's lean options (as the engine's derivative kernels): the first call several times shorter.
_F = jax.jit(
    lambda field, x: field_strength_from_potential(field.potential)(x), compiler_options=lean_compiler_options()
)


#: The closed-form density at a batch, compiled once for every omega.
_S = jax.jit(lambda field, pts: field.density_batch(pts, "action_density"))


def _autodiff_s(field, pts):
    return np.array([float(action_from_f(_F(field, p))) for p in pts])


def _points(n, seed=0, spread=1.0):
    return CENTER + spread * np.random.default_rng(seed).normal(size=(n, 4))


def test_zero_holonomy_default_is_the_harrington_shepard_field():
    # Harrington, Shepard, Phys. Rev. D 17 (1978) 2122 (from memory): omega = 0 is trivial holonomy.
    field = ik.caloron(RHO, BETA, CENTER)
    assert type(field) is CaloronField
    assert field.record() == CaloronField(RHO, BETA, CENTER).record()


def test_nonzero_holonomy_gives_the_kraan_van_baal_field():
    field = ik.caloron(RHO, BETA, CENTER, holonomy=0.25, axis=AXIS)
    assert isinstance(field, HolonomyCaloronField)
    assert float(field.holonomy) == 0.25 and float(field.period) == BETA


def test_zero_holonomy_density_equals_harrington_shepard():
    # Kraan, van Baal, Nucl. Phys. B 533 (1998) 627 (from memory): omega -> 0 gives the Harrington-Shepard
    # caloron (Phys. Rev. D 17 (1978) 2122, from memory) with its centre at the heavy constituent.
    pts = _points(4, seed=1)
    hs = CaloronField(RHO, BETA, CENTER)
    got = _autodiff_s(_kvb(0.0), pts)
    want = np.array([float(hs.action_density(p)) for p in pts])
    np.testing.assert_allclose(got, want, rtol=1e-10)


@pytest.mark.parametrize("omega", [0.1, 0.25, 0.4])
def test_autodiff_field_strength_is_self_dual(omega):
    # Kraan, van Baal, Phys. Lett. B 428 (1998) 268 (from memory): the caloron is self-dual.
    field = _kvb(omega)
    res = [float(residual_from_f(_F(field, p))) for p in _points(5, seed=2)]
    assert max(res) < 1e-10


@pytest.mark.parametrize("omega", [0.1, 0.25, 0.4])
def test_closed_form_density_equals_autodiff_density_of_the_potential(omega):
    # s = -1/2 box box log psi in closed form (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory)
    # against F = dA - dA + [A, A] of the potential by autodiff.
    field = _kvb(omega)
    pts = _points(4, seed=2)
    got = np.asarray(_S(field, pts))
    np.testing.assert_allclose(got, _autodiff_s(field, pts), rtol=1e-10)


def test_potential_is_periodic_in_x4():
    field = _kvb(0.25)
    pot = jax.jit(field.potential)
    for p in _points(4, seed=4):
        np.testing.assert_allclose(np.asarray(pot(p + np.array([0, 0, 0, BETA]))), np.asarray(pot(p)), atol=1e-13)


def test_potential_tends_to_the_constant_holonomy_far_away():
    # A_4 -> 2 pi omega u_3 / beta at spatial infinity, u_3 = -i sigma_3 (conventions module).
    omega = 0.25
    field = HolonomyCaloronField(RHO, BETA, omega, np.zeros(4), np.array([0.0, 0.0, 1.0]))
    # The abelian tail of the constituents decays like 1/r^2: 1e-4 at r ~ 50.
    a = np.asarray(field.potential(np.array([40.0, 24.0, 20.0, 0.3])))
    want = 2 * np.pi * omega / BETA * np.diag([-1j, 1j])
    np.testing.assert_allclose(a[3], want, atol=1e-3)
    np.testing.assert_allclose(a[:3], 0.0, atol=1e-3)


def test_constituents_sit_pi_rho2_over_beta_apart_with_fractions():
    # Kraan, van Baal 1998 (from memory): separation pi rho^2 / beta, action fractions 2 omega, 1 - 2 omega.
    pos, frac = _kvb(0.2).constituents()
    assert np.linalg.norm(pos[1] - pos[0]) == pytest.approx(np.pi * RHO**2 / BETA, rel=1e-14)
    np.testing.assert_allclose(frac, [0.4, 0.6], rtol=1e-14)
    np.testing.assert_allclose(frac @ pos, CENTER, atol=1e-14)


def test_record_rebuilds_the_field():
    field = _kvb(0.3)
    again = field_from_record(field.record())
    p = _points(1, seed=5)[0]
    np.testing.assert_array_equal(np.asarray(again.potential(p)), np.asarray(field.potential(p)))


@pytest.mark.parametrize(
    "kwargs, word",
    [
        ({"holonomy": 0.6}, "0.6"),
        ({"holonomy": -0.1}, "-0.1"),
        ({"holonomy": float("nan")}, "nan"),
        ({"period": 0.0}, "period"),
        ({"size": -1.0}, "size"),
        ({"holonomy": 0.2, "axis": (0.0, 0.0, 0.0)}, "axis"),
    ],
)
def test_bad_input_is_refused_naming_the_value(kwargs, word):
    args = {"size": RHO, "period": BETA, "center": CENTER, "holonomy": 0.25} | kwargs
    with pytest.raises(ValueError, match=word):
        ik.caloron(**args)


# -- Polyakov loops ---------------------------------------------------------------------------------


def test_continuum_polyakov_loop_far_away_is_cos_two_pi_omega():
    # 1/2 tr P -> cos(2 pi omega) at spatial infinity (Kraan, van Baal 1998, from memory).
    omega = 0.25
    field = HolonomyCaloronField(RHO, BETA, omega, np.zeros(4), np.array([0.0, 0.0, 1.0]))
    loop = pl.polyakov_loop(field, np.array([[40.0, 24.0, 20.0]]))
    assert 0.5 * np.trace(loop[0]).real == pytest.approx(np.cos(2 * np.pi * omega), abs=1e-3)


def test_continuum_polyakov_loop_of_harrington_shepard_is_trivial_far_away():
    loop = pl.polyakov_loop(ik.caloron(RHO, BETA), np.array([[9.0, 4.0, 0.0]]))
    assert 0.5 * np.trace(loop[0]).real == pytest.approx(1.0, abs=1e-3)


def test_lattice_loop_of_unit_links_is_one():
    links = np.zeros((2, 2, 3, 4, 4, 2, 2), complex)
    links[...] = np.eye(2)
    np.testing.assert_array_equal(pl.lattice_polyakov_loop(links), np.broadcast_to(np.eye(2), (2, 2, 3, 2, 2)))
    assert pl.polyakov_average(links) == 1.0
    np.testing.assert_array_equal(pl.polyakov_phases(links), 0.0)


def test_lattice_loop_is_the_ordered_product_of_time_links():
    rng = np.random.default_rng(6)
    q = rng.normal(size=(1, 1, 1, 3, 4, 4))
    q /= np.linalg.norm(q, axis=-1, keepdims=True)
    sig = np.array(
        [np.eye(2), -1j * np.array([[0, 1], [1, 0]]), -1j * np.array([[0, -1j], [1j, 0]]), -1j * np.diag([1, -1])]
    )
    links = np.einsum("...q,qij->...ij", q, sig)
    u = links[0, 0, 0, :, 3]
    np.testing.assert_allclose(pl.lattice_polyakov_loop(links)[0, 0, 0], u[0] @ u[1] @ u[2], atol=1e-15)


def test_lattice_loop_refuses_non_unitary_links():
    links = np.zeros((1, 1, 1, 2, 4, 2, 2), complex)
    links[...] = 2 * np.eye(2)
    with pytest.raises(ValueError):
        pl.lattice_polyakov_loop(links)


def test_continuum_loop_refuses_bad_points_and_missing_period():
    with pytest.raises(ValueError, match="3"):
        pl.polyakov_loop(_kvb(0.25), np.zeros((2, 4)))
    with pytest.raises(ValueError, match="period"):
        pl.polyakov_loop(ik.bpst_field(), np.zeros((1, 3)))


@pytest.mark.slow
def test_lattice_polyakov_loop_of_a_caloron_start_far_from_the_cores():
    # 1/2 tr P -> cos(2 pi omega) far from the constituents, up to the 1/r^2 abelian tail
    # (Kraan, van Baal, Nucl. Phys. B 533 (1998) 627, from memory).  A 4 x 6^3 start, about 30 s.
    omega = 0.25
    field = ik.caloron(0.4, 2.0, np.zeros(4), holonomy=omega)
    with pytest.warns(UserWarning):
        links = ik.lattice_links(field, (6, 6, 6, 4), 0.5, origin=np.array([-1.5, -1.5, -1.5, 0.0]))
    tr = 0.5 * np.trace(pl.lattice_polyakov_loop(links), axis1=-2, axis2=-1).real
    assert abs(tr[0, 0, 0] - np.cos(2 * np.pi * omega)) < 0.05
