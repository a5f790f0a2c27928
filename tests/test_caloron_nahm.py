"""The SU(N) caloron's potential by the Nahm transform: densities, self-duality, gauge, loops, starts, bad input."""

import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz import caloron_nahm as cn
from instantonkit.ansatz.caloron_psi import caloron_action_density
from instantonkit.ansatz.calorons_sun import SUNCaloronField
from instantonkit.engine import fields
from instantonkit.lattice import polyakov as pl
from instantonkit.lattice.references import field_from_record

BETA = 1.0
#: An unequal SU(3) holonomy (fractions 0.4, 0.1, 0.5) with constituents off a common line.
MU_UNEQUAL = np.array([-0.3, 0.1, 0.2])
POS_UNEQUAL = np.array([[0.0, 0.0, -0.8], [0.5, 0.3, 0.1], [-0.2, 0.1, 0.9]])
#: The equal-fraction SU(3) holonomy (nu = 1/3 each), constituents on a line through a shifted centre.
MU_EQUAL = np.array([-1.0 / 3.0, 0.0, 1.0 / 3.0])
POS_EQUAL = np.array([[0.2, -0.1, -0.6], [0.2, -0.1, 0.1], [0.3, 0.2, 0.8]])


def _points(positions, seed=0):
    """Random points near and between the constituents, far out (R = 6, 12 beta), and on two constituents."""
    rng = np.random.default_rng(seed)
    near = rng.normal(size=(6, 4)) * np.array([1.0, 1.0, 1.0, 0.4])
    d = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    far = np.array([[*(6.0 * d), 0.3], [*(-12.0 * d), 0.8]])
    on = np.array([[*positions[0], 0.1], [*positions[1], 0.7]])
    return np.concatenate([near, far, on])


def _sun(mu, pos, time=0.0):
    return SUNCaloronField(BETA, mu, pos, time)


# -- the density and self-duality of the potential ------------------------------------------------------


@pytest.mark.long  # two autodiff kernels (the Nahm and the algebraic potential): about 12 s
def test_su2_nahm_density_equals_the_kraan_van_baal_fields_autodiff_density():
    # N = 2: the Nahm transform's field is the Kraan-van Baal SU(2) caloron (Kraan, van Baal, Nucl. Phys. B
    # 533 (1998) 627, from memory), whose algebraic potential (calorons.HolonomyCaloronField) is an
    # independent construction: the autodiff action densities of the two potentials agree.
    kvb = ik.caloron(0.7, BETA, np.array([0.1, -0.2, 0.3, 0.05]), holonomy=0.2, axis=(1.0, 0.5, -0.3))
    pos, _ = kvb.constituents()
    nahm = SUNCaloronField(BETA, [-0.2, 0.2], pos[:, :3], 0.05)
    pts = _points(pos[:, :3], seed=1)[:-2]  # the algebraic gauge is singular on its constituents
    want = fields.evaluate(kvb, pts, "action_density", method="autodiff")
    got = fields.evaluate(nahm, pts, "action_density", method="autodiff")
    np.testing.assert_allclose(got, want, rtol=1e-10)


_SU3_CASES = {"equal": (MU_EQUAL, POS_EQUAL), "unequal": (MU_UNEQUAL, POS_UNEQUAL)}


@pytest.fixture(scope="module")
def su3_autodiff():
    """{case: (points, autodiff s, self-duality residual)}: one autodiff kernel for both quantities."""
    out = {}
    for name, (mu, pos) in _SU3_CASES.items():
        pts = _points(pos)
        specs = [("action_density", "autodiff"), ("self_duality_residual", "autodiff")]
        out[name] = (pts, *fields.evaluate_many(_sun(mu, pos), pts, specs))
    return out


@pytest.mark.parametrize("case", sorted(_SU3_CASES))
def test_su3_autodiff_density_equals_the_psi_closed_form(su3_autodiff, case):
    # s = -1/2 box box log psi, psi = 1/2 tr(A_3 A_2 A_1) - cos(2 pi t / beta) (Kraan, van Baal, Phys. Lett. B
    # 435 (1998) 389, from memory): the product order A_N ... A_1 of caloron_psi is the one the Nahm
    # transform's field has.
    mu, pos = _SU3_CASES[case]
    pts, got, _ = su3_autodiff[case]
    nu = _sun(mu, pos).constituents()[1]
    want = np.asarray(caloron_action_density(jnp.asarray(pts), pos, nu, BETA))
    np.testing.assert_allclose(got, want, rtol=1e-10)


@pytest.mark.parametrize("case", sorted(_SU3_CASES))
def test_su3_autodiff_field_strength_is_self_dual_to_1e_10(su3_autodiff, case):
    # F = *F for a caloron (Kraan, van Baal 1998, from memory), the ADHM construction's property
    assert np.max(su3_autodiff[case][2]) < 1e-10


# -- gauge: periodic, traceless, anti-Hermitian, and the holonomy far away ------------------------------


def test_potential_is_periodic_in_x4_to_rounding():
    # the gauge g = diag exp(-2 pi i mu x4 / beta) undoes A(x + beta e_4) = P A(x) P^dag (module docstring)
    field = _sun(MU_UNEQUAL, POS_UNEQUAL, time=0.3)
    pts = _points(POS_UNEQUAL, seed=3)
    a = ik.potential(field, pts)
    b = ik.potential(field, pts + np.array([0.0, 0.0, 0.0, BETA]))
    assert np.max(np.abs(a - b)) < 1e-12 * max(1.0, np.max(np.abs(a)))


@settings(max_examples=8, deadline=None)
@given(
    st.lists(st.floats(-2.0, 2.0), min_size=9, max_size=9),
    st.floats(0.05, 0.45),
    st.floats(0.05, 0.45),
    st.lists(st.floats(-3.0, 3.0), min_size=4, max_size=4),
)
def test_potential_is_anti_hermitian_and_traceless(coords, nu1, nu2, x):
    # su(N): A^dag = -A and tr A = 0 (conventions module), for any holonomy and constituents
    pos = np.asarray(coords).reshape(3, 3)
    if np.min(np.linalg.norm(pos[:, None] - pos[None], axis=-1) + 9 * np.eye(3)) < 0.1:
        return
    mu = np.array([0.0, nu1, nu1 + nu2])
    mu = mu - mu.mean()
    a = ik.potential(_sun(mu, pos), np.asarray(x))  # the engine's kernel of the periodicity test
    assert np.max(np.abs(a + np.conj(np.swapaxes(a, -1, -2)))) < 1e-12 * max(1.0, np.max(np.abs(a)))
    assert np.max(np.abs(np.trace(a, axis1=-2, axis2=-1))) < 1e-12 * max(1.0, np.max(np.abs(a)))


@pytest.mark.long  # the Magnus kernel of the continuum loop: about 6 s
def test_polyakov_loop_far_away_has_eigenphases_two_pi_mu():
    # P -> diag exp(2 pi i mu_m) at spatial infinity (Kraan, van Baal, Phys. Lett. B 435 (1998) 389, from
    # memory); the abelian tail is O(beta / r): at r = 40 beta the phases are within 1e-3
    field = _sun(MU_UNEQUAL, POS_UNEQUAL)
    loops = pl.polyakov_loop(field, np.array([[40.0, 0.0, 0.0], [0.0, -30.0, 25.0]]))
    phases = np.sort(np.angle(np.linalg.eigvals(loops)), axis=-1) / (2.0 * np.pi)
    np.testing.assert_allclose(phases, np.broadcast_to(MU_UNEQUAL, phases.shape), atol=1e-3)


# -- wiring: records, lattice starts ---------------------------------------------------------------------


def test_a_rebuilt_record_has_the_same_potential():
    field = ik.caloron(0.9, 1.3, np.array([0.1, 0.0, 0.2, 0.4]), holonomy=(-0.3, 0.1, 0.2))
    again = field_from_record(field.record())
    pts = _points(np.asarray(field.positions), seed=4)[:3]
    np.testing.assert_array_equal(ik.potential(again, pts), ik.potential(field, pts))


def test_su3_start_on_2_x_4_cubed_runs_and_is_periodic_in_time():
    # N_t a_t = beta: the report's time-boundary mismatch compares the links from the sites one period
    # later with those at n4 = 0 (the potential is periodic in x4); every link is SU(3)
    field = ik.caloron(0.6, BETA, holonomy=tuple(MU_EQUAL))
    start = ik.lattice.lattice_start(
        field, (4, 4, 4, 2), 0.5, group="su3", boundary=("open", "open", "open", "periodic")
    )
    assert start.report.boundary_link_mismatch_by_direction[3] < 1e-13
    np.testing.assert_allclose(np.linalg.det(start.links), 1.0, atol=1e-12)


# -- bad input ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "kwargs, word",
    [
        (
            {"positions": np.array([[0.0, 0, 0], [0.0, 0, 0], [1.0, 0, 0]])},
            r"distinct.*y_1 = y_2 = \[0\.0, 0\.0, 0\.0\]",
        ),
        ({"positions": np.zeros((2, 3))}, r"\(3, 3\).*\(2, 3\)"),
        ({"holonomy": np.array([0.2, 0.1, -0.3])}, r"ascending.*\[0\.2, 0\.1, -0\.3\]"),
        ({"holonomy": np.array([-0.3, 0.1, 0.3])}, r"sum"),
        ({"period": 0.0}, r"period must be > 0; found 0\.0"),
        ({"points": np.zeros((2, 3))}, r"points must have shape \(\.\.\., 4\); found \(2, 3\)"),
    ],
)
def test_bad_input_is_refused_naming_the_value(kwargs, word):
    args = {"points": np.zeros((2, 4)), "positions": POS_UNEQUAL, "holonomy": MU_UNEQUAL, "period": BETA} | kwargs
    with pytest.raises(ValueError, match=word):
        cn.caloron_potential(**args)
