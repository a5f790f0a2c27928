"""Twisted boundary conditions: the twist tensor, twisted observables, twisted flow and cooling, and
't Hooft's constant-flux field of charge 1/2 (instantonkit.lattice.twist, instantonkit.lattice.twisted_flow,
instantonkit.ansatz.twisted)."""

import jax
import jax.numpy as jnp
import numpy as np
import pytest
from _references import haar_links, noisy_links
from hypothesis import given
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.ansatz.twisted import constant_flux, constant_flux_twist, flux_generator
from instantonkit.lattice import observables as obs
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice import transport
from instantonkit.lattice import twist as tw
from instantonkit.lattice import twisted_flow as tf

TWIST = {(1, 2): 1, (3, 4): 1}
ZERO = np.zeros((4, 4), dtype=int)


def box_integral(field, quantity, box):
    """Gauss-Legendre integral (numpy.polynomial.legendre.leggauss, 2 nodes per side: exact for the
    constant densities here) of the engine's autodiff density over [0, L1) x ... x [0, L4)."""
    t, w = np.polynomial.legendre.leggauss(2)
    box = np.asarray(box, float)
    nodes = [0.5 * b * (t + 1.0) for b in box]
    weights = [0.5 * b * w for b in box]
    pts = np.stack(np.meshgrid(*nodes, indexing="ij"), axis=-1).reshape(-1, 4)
    wts = np.einsum("i,j,k,l->ijkl", *weights).reshape(-1)
    dens = quantity(field, pts, method="autodiff")
    return float(np.sum(wts * dens))


# -- the continuum field ------------------------------------------------------------------------------------


def test_constant_flux_charge_is_one_half():
    # 't Hooft, Commun. Math. Phys. 81 (1981) 267 (from memory): the SU(2) constant-curvature field with
    # twist n_12 = n_34 = 1 has Q = 1/2, whatever the sides; here Q = integral of the autodiff density
    box = (1.0, 2.0, 1.5, 0.7)
    assert box_integral(constant_flux(box), ik.charge_density, box) == pytest.approx(0.5, rel=1e-12)


def test_constant_flux_action_is_four_pi_squared_on_the_self_dual_torus():
    # self-dual when L1 L2 = L3 L4 (van Baal, Commun. Math. Phys. 85 (1982) 529; 't Hooft 1981; from
    # memory): F_12 = -i 2 pi T / (L1 L2) and F_34 = -i 2 pi T / (L3 L4) are equal exactly then, and
    # S = 8 pi^2 Q = 4 pi^2
    box = (1.0, 2.0, 1.6, 1.25)
    assert box_integral(constant_flux(box), ik.action_density, box) == pytest.approx(4.0 * np.pi**2, rel=1e-12)


@given(st.floats(0.3, 3.0), st.floats(0.3, 3.0), st.floats(0.3, 3.0), st.floats(0.3, 3.0))
def test_constant_flux_action_off_the_self_dual_torus_is_two_pi_squared_times_r_plus_one_over_r(a, b, c, d):
    # derivation: s = -1/2 sum tr F F = (f12^2 + f34^2) tr T^2, tr T^2 = 1/2, f12 = 2 pi / (L1 L2),
    # f34 = 2 pi / (L3 L4); times V = L1 L2 L3 L4: S = 2 pi^2 (r + 1/r), r = L1 L2 / (L3 L4), so S >= 4 pi^2
    # = 8 pi^2 Q (Bogomolny's bound, common practice) with equality at r = 1
    box = (a, b, c, d)
    r = a * b / (c * d)
    s = box_integral(constant_flux(box), ik.action_density, box)
    assert s == pytest.approx(2.0 * np.pi**2 * (r + 1.0 / r), rel=1e-11)
    assert constant_flux(box).total_action() == pytest.approx(s, rel=1e-12)


def test_constant_flux_is_self_dual_exactly_when_l1_l2_equals_l3_l4():
    x = np.array([[0.1, 0.2, 0.3, 0.4]])
    assert ik.self_duality_residual(constant_flux((1.0, 2.0, 4.0, 0.5)), x)[0] < 1e-14
    assert ik.self_duality_residual(constant_flux((1.0, 2.0, 4.0, 0.6)), x)[0] > 0.05


@pytest.mark.parametrize("n", [2, 3])
def test_transition_functions_glue_the_faces_of_the_box(n):
    # A(x + L_mu e_mu) = Omega A Omega^-1 + Omega d Omega^-1 (the gauge transformation of the conventions
    # module), d Omega^-1 by jax.jacfwd
    f = constant_flux((1.0, 1.3, 0.8, 1.1), n)
    box = np.asarray(f.box)
    x = jnp.array([0.21, 0.37, 0.52, 0.66])
    for mu in range(4):
        om = f.transition(mu, x)
        d_inv = jax.jacfwd(lambda y, mu=mu: jnp.conj(f.transition(mu, y).T), holomorphic=False)(x)
        d_inv = jnp.moveaxis(d_inv, -1, 0)  # (4, N, N): d_nu Omega^-1
        expected = om @ f.potential(x) @ jnp.conj(om.T) + om @ d_inv
        np.testing.assert_allclose(f.potential(x + box[mu] * np.eye(4)[mu]), expected, atol=1e-13)


@pytest.mark.parametrize("n", [2, 3, 4])
def test_cocycle_of_the_transition_functions_is_the_twist_n12_one_n34_n_minus_one(n):
    # Omega_mu(x + L_nu) Omega_nu(x) = exp(-2 pi i n_mu nu / N) Omega_nu(x + L_mu) Omega_mu(x), the cocycle of
    # 't Hooft (Nucl. Phys. B 153 (1979) 141, from memory; the sign matched to our lattice convention,
    # module docstring of instantonkit.ansatz.twisted), with n_12 = 1, n_34 = N - 1 (SU(2): n_12 = n_34 = 1)
    # and the other n = 0
    f = constant_flux((1.0, 1.3, 0.8, 1.1), n)
    box = np.asarray(f.box)
    x = jnp.array([0.21, 0.37, 0.52, 0.66])
    twist = constant_flux_twist(n)
    assert twist[0, 1] == 1 and twist[2, 3] == n - 1 and np.count_nonzero(twist) == 4
    for mu in range(4):
        for nu in range(4):
            if mu == nu:
                continue
            left = f.transition(mu, x + box[nu] * np.eye(4)[nu]) @ f.transition(nu, x)
            right = f.transition(nu, x + box[mu] * np.eye(4)[mu]) @ f.transition(mu, x)
            z = np.exp(-2j * np.pi * twist[mu, nu] / n)
            np.testing.assert_allclose(left, z * right, atol=1e-13)


@pytest.mark.parametrize("n", [3, 4])
def test_su_n_constant_flux_charge_is_one_over_n(n):
    # 't Hooft 1981 (from memory): charge 1/N in SU(N) from U(1) x SU(N-1); derivation (module docstring of
    # instantonkit.ansatz.twisted): Q = Phi12 Phi34 tr H^2 / (4 pi^2) = (2 pi / (N-1)) (2 pi) ((N-1)/N) / (4 pi^2)
    box = (1.0, 0.9, 1.2, 1.1)
    assert box_integral(constant_flux(box, n), ik.charge_density, box) == pytest.approx(1.0 / n, rel=1e-12)


def test_su3_constant_flux_is_self_dual_with_action_eight_pi_squared_over_three_when_l3_l4_is_twice_l1_l2():
    # self-duality F_12 = F_34: Phi12 / (L1 L2) = Phi34 / (L3 L4), i.e. L3 L4 = (N - 1) L1 L2 ('t Hooft 1981,
    # from memory: the sides' ratio fixed by the block sizes); then S = 8 pi^2 Q = 8 pi^2 / 3
    box = (1.0, 1.0, 2.0, 1.0)
    x = np.array([[0.1, 0.2, 0.3, 0.4]])
    assert ik.self_duality_residual(constant_flux(box, 3), x)[0] < 1e-14
    assert box_integral(constant_flux(box, 3), ik.action_density, box) == pytest.approx(8 * np.pi**2 / 3, rel=1e-12)


@pytest.mark.parametrize(
    "box, n, error, match",
    [
        ((1.0, 1.0, 1.0), 2, ValueError, r"box"),
        ((1.0, -1.0, 1.0, 1.0), 2, ValueError, r"box must be > 0"),
        ((1.0, np.nan, 1.0, 1.0), 2, ValueError, r"box"),
        ((1.0, 1.0, 1.0, 1.0), 1, ValueError, r"at least 2; found 1"),
        ((1.0, 1.0, 1.0, 1.0), 2.5, (TypeError, ValueError), r"n"),
        ((1.0, 1.0, 1.0, 1.0), True, (TypeError, ValueError), r"n"),
    ],
)
def test_constant_flux_refuses_a_bad_box_or_n(box, n, error, match):
    with pytest.raises(error, match=match):
        constant_flux(box, n)


# -- the twist tensor and its factors ----------------------------------------------------------------------


def test_twist_tensor_from_a_mapping_is_antisymmetric():
    t = tw.twist_tensor({(1, 2): 1, (3, 4): -1}, 2)
    assert t[0, 1] == 1 and t[1, 0] == -1 and t[2, 3] == -1 and t[3, 2] == 1
    assert np.count_nonzero(t) == 4


def test_twist_factors_sit_on_the_corner_plaquettes_of_the_twisted_planes():
    # common practice: the Z_N factor exp(2 pi i n_mu nu / N) on the plaquettes at n_mu = L_mu - 1,
    # n_nu = L_nu - 1 of each twisted plane, 1 elsewhere
    shape = (3, 4, 5, 2)
    z = tw.twist_factors({(1, 2): 1, (3, 4): 2}, shape, 3)
    assert np.count_nonzero(z != 1.0) == 5 * 2 + 3 * 4
    np.testing.assert_allclose(z[2, 3, :, :, 0], np.exp(2j * np.pi / 3))
    np.testing.assert_allclose(z[:, :, 4, 1, 5], np.exp(4j * np.pi / 3))


@given(st.integers(2, 6), st.lists(st.integers(-5, 5), min_size=6, max_size=6))
def test_every_antisymmetric_in_range_twist_is_accepted_and_others_name_their_entry(n, entries):
    # the rule: n_mu nu integers, antisymmetric, |n_mu nu| <= N - 1 (a twist counts mod N, 't Hooft 1979)
    twist = {(mu + 1, nu + 1): k for (mu, nu), k in zip(obs.PLANES, entries)}
    bad = [(plane, k) for plane, k in twist.items() if abs(k) >= n]
    if not bad:
        t = tw.twist_tensor(twist, n)
        assert all(t[mu - 1, nu - 1] == k and t[nu - 1, mu - 1] == -k for (mu, nu), k in twist.items())
    else:
        (mu, nu), k = bad[0]
        with pytest.raises(ValueError, match=rf"n_{mu}{nu} .*out of range for SU\({n}\).*found {k}"):
            tw.twist_tensor(twist, n)


@pytest.mark.parametrize(
    "twist, match",
    [
        ([[0, 1, 0, 0], [0, 0, 0, 0], [0, 0, 0, 0], [0, 0, 0, 0]], r"antisymmetric: n_12 = 1 but n_21 = 0"),
        ({(1, 2): 2}, r"n_12 .* out of range for SU\(2\).*found 2"),
        ({(3, 4): -3}, r"n_34 .* out of range.*found -3"),
        (np.zeros((3, 3)), r"shape \(4, 4\); found \(3, 3\)"),
        ({(1, 2): 0.5}, r"n_12 .* must be an integer; found 0.5"),
        ({(2, 4): 1.5}, r"n_24 .* must be an integer; found 1.5"),
        (np.diag([0, 1, 0, 0]), r"n_22 .* must be 0; found 1"),
        ({(2, 1): 1}, r"one-based planes .* found \(2, 1\)"),
        ({(0, 1): 1}, r"one-based planes .* found \(0, 1\)"),
    ],
)
def test_bad_twists_are_refused_naming_the_entry_and_the_value(twist, match):
    with pytest.raises(ValueError, match=match):
        tw.twist_tensor(twist, 2)


@pytest.mark.parametrize("twist", [{(1, 2): True}, {(1, 2): "1"}, "12", None, {(1, 2): None}])
def test_twists_that_are_not_numbers_are_type_errors(twist):
    with pytest.raises(TypeError, match="twist"):
        tw.twist_tensor(twist, 2)


def test_a_corner_off_the_lattice_is_refused_naming_the_direction():
    u = tw.constant_flux_links((2, 2, 2, 2))
    with pytest.raises(ValueError, match=r"c_3 = 2 for L_3 = 2"):
        tw.twisted_wilson_action(u, TWIST, corner=(0, 0, 2, 0))


def test_twisted_observables_refuse_links_of_the_wrong_shape():
    with pytest.raises(ValueError, match=r"shape \(L1, L2, L3, L4, 4, N, N\)"):
        tw.twisted_wilson_action(np.zeros((2, 2, 2, 4, 2, 2), complex), TWIST)


def test_constant_flux_links_refuse_an_extent_below_two():
    with pytest.raises(ValueError, match=r"extent >= 2.*\(1, 4, 4, 4\)"):
        tw.constant_flux_links((1, 4, 4, 4))


# -- twisted observables ------------------------------------------------------------------------------------


def test_zero_twist_observables_are_the_untwisted_ones():
    u = haar_links((2, 2, 4, 2), 2, seed=3)
    assert tw.twisted_wilson_action(u, ZERO) == pytest.approx(ik.wilson_action(u), rel=1e-13)
    assert tw.twisted_average_plaquette(u, ZERO) == pytest.approx(ik.average_plaquette(u), rel=1e-13)
    np.testing.assert_allclose(
        tw.twisted_clover_charge_density(u, ZERO), obs.clover_charge_density(u), atol=1e-14, rtol=1e-12
    )


def test_a_nonzero_twist_changes_the_action_of_rough_links():
    u = haar_links((2, 2, 2, 2), 2, seed=5)
    assert abs(tw.twisted_wilson_action(u, TWIST) - ik.wilson_action(u)) > 1e-3


@given(st.integers(0, 2**31 - 1))
def test_twisted_observables_are_invariant_under_lattice_gauge_transformations(seed):
    # z is central: g(n) z U_p g(n)^-1 = z g(n) U_p g(n)^-1 (common practice)
    u = haar_links((2, 2, 2, 2), 3, seed=seed)
    g = obs.random_gauge((2, 2, 2, 2), 3, seed=seed + 7)
    v = obs.gauge_transform_links(u, g)
    twist = {(1, 3): 1, (2, 4): 2, (3, 4): 1}
    assert tw.twisted_wilson_action(v, twist) == pytest.approx(tw.twisted_wilson_action(u, twist), rel=1e-12)
    np.testing.assert_allclose(
        tw.twisted_clover_charge_density(v, twist), tw.twisted_clover_charge_density(u, twist), atol=1e-13
    )


def test_a_singular_gauge_transformation_moves_the_twist_and_leaves_every_twisted_plaquette():
    # multiplying U_1(n) on the sheet n_1 = c_1, n_2 = c_2 by z_12 gives the plaquette of plane 12 at c the factor
    # z_12 and the one at c - e_2 the factor conj(z_12) (planes 13, 14 get z conj(z) = 1): the twist of
    # plane 12 moves from c to c - e_2 ('t Hooft 1979, from memory: only the twist tensor is physical)
    shape = (2, 4, 2, 2)
    u = haar_links(shape, 3, seed=11)
    twist = {(1, 2): 1, (3, 4): 2}
    c = (1, 3, 1, 1)
    v = u.copy()
    v[1, 3, :, :, 0] *= np.exp(2j * np.pi / 3)
    moved = (1, 2, 1, 1)
    assert tw.twisted_wilson_action(v, twist, corner=moved) == pytest.approx(
        tw.twisted_wilson_action(u, twist, corner=c), rel=1e-13
    )
    np.testing.assert_allclose(
        tw.twisted_plaquettes(v, twist, corner=moved), tw.twisted_plaquettes(u, twist, corner=c), atol=1e-13
    )
    np.testing.assert_allclose(
        tw.twisted_clover_charge_density(v, twist, corner=moved),
        tw.twisted_clover_charge_density(u, twist, corner=c),
        atol=1e-13,
    )


def test_the_memory_bounded_twisted_charge_density_is_the_charge_of_the_twisted_clover():
    # twisted_clover_charge_density recomputes only blocks around the twisted corners; against the
    # density of the full twisted clover field strength, every plane twisted, the corner moved
    u = haar_links((3, 2, 4, 2), 3, seed=13)
    twist = {(1, 2): 1, (1, 3): 2, (1, 4): 1, (2, 3): 1, (2, 4): 2, (3, 4): 1}
    f = tw.twisted_clover_field_strength(u, twist, corner=(0, 1, 2, 0))
    q = (
        np.einsum("mnrs,...mnij,...rsji->...", ik.conventions.LEVI_CIVITA, f, f).real
        * ik.conventions.CHARGE_DENSITY_FACTOR
    )
    np.testing.assert_allclose(tw.twisted_clover_charge_density(u, twist, corner=(0, 1, 2, 0)), q, atol=1e-15)


@given(st.sampled_from(obs.PLANES), st.integers(0, 1), st.integers(0, 1))
def test_moving_a_single_plane_twist_leaves_the_twisted_action_in_every_plane(plane, cmu, cnu):
    # the same singular gauge transformation as above, for each plane (mu, nu) and corner: U_mu on the sheet
    # (c_mu, c_nu) times z_mu nu, twist moved from c to c - e_nu ('t Hooft 1979, from memory)
    mu, nu = plane
    u = haar_links((2, 2, 2, 2), 3, seed=17)
    twist = {(mu + 1, nu + 1): 2}
    c = [1, 1, 1, 1]
    c[mu], c[nu] = cmu, cnu
    v = u.copy()
    sl = [slice(None)] * 4
    sl[mu], sl[nu] = cmu, cnu
    v[tuple(sl) + (mu,)] *= np.exp(4j * np.pi / 3)
    moved = list(c)
    moved[nu] = (cnu - 1) % 2
    assert tw.twisted_wilson_action(v, twist, corner=tuple(moved)) == pytest.approx(
        tw.twisted_wilson_action(u, twist, corner=tuple(c)), rel=1e-13
    )


# -- the constant-flux field on the lattice -----------------------------------------------------------------


@pytest.mark.parametrize("n", [2, 3])
def test_constant_flux_links_are_the_transporters_of_the_continuum_field_glued_by_the_transition_functions(n):
    # U_mu(n) = W(x_n -> x_n + e_mu) Omega_mu(x_n + e_mu - L_mu e_mu) on the links that wrap round (n_mu =
    # L_mu - 1), W alone elsewhere; W by the library's Magnus transport of the box potential (spacing 1)
    shape = (3, 2, 2, 3)
    u = tw.constant_flux_links(shape, n)
    f = constant_flux(np.asarray(shape, float), n)
    sites = np.stack(np.meshgrid(*[np.arange(s, dtype=float) for s in shape], indexing="ij"), axis=-1)
    for mu in range(4):
        e = np.eye(4)[mu]
        w = transport.parallel_transporter(f, sites, np.broadcast_to(e, sites.shape), method="magnus")
        wrap = sites[..., mu] == shape[mu] - 1
        om = jax.vmap(lambda y, mu=mu: f.transition(mu, y))(jnp.asarray((sites + e - shape[mu] * e).reshape(-1, 4)))
        om = np.asarray(om).reshape(shape + (n, n))
        expected = np.where(wrap[..., None, None], w @ om, w)
        np.testing.assert_allclose(u[..., mu, :, :], expected, atol=1e-12)


@pytest.mark.parametrize("n", [2, 3])
def test_constant_flux_twisted_plaquettes_are_constant(n):
    # every plaquette of plane 12 is exp(-i phi12 H), phi12 = 2 pi / ((N-1) L1 L2), of plane 34 exp(-i phi34 H),
    # phi34 = 2 pi / (L3 L4), the rest 1, once the twist n_12 = 1, n_34 = N - 1 removes the centre factors
    # from the corners (module docstring)
    shape = (2, 3, 4, 2)
    p = tw.twisted_plaquettes(tw.constant_flux_links(shape, n), constant_flux_twist(n))
    t = np.diagonal(flux_generator(n))
    for plane, phi in ((0, 2 * np.pi / (6 * (n - 1))), (5, 2 * np.pi / 8)):
        np.testing.assert_allclose(
            p[..., plane, :, :], np.broadcast_to(np.diag(np.exp(-1j * phi * t)), p.shape[:4] + (n, n)), atol=1e-14
        )
    np.testing.assert_allclose(p[..., 1:5, :, :], np.broadcast_to(np.eye(n), p.shape[:4] + (4, n, n)), atol=1e-14)


@pytest.mark.parametrize("shape", [(2, 2, 2, 2), (4, 2, 3, 4), (4, 4, 4, 4)])
def test_constant_flux_twisted_wilson_action_is_four_v_two_minus_cosines(shape):
    # derivation: the link phases of constant_flux_links give every plaquette of plane 12 the SU(2) matrix
    # exp(-i phi12 T) = diag(e^{i phi12/2}, e^{-i phi12/2}) (T = -sigma_3 / 2, phi12 = 2 pi / (N1 N2)), so
    # Re tr U_p / 2 = cos(pi / (N1 N2)); plane 34 likewise, the other four planes 1.  The library's
    # wilson_action is beta sum_p (1 - Re tr U_p / N) with beta = 2N = 4 (Wilson, Phys. Rev. D 10 (1974)
    # 2445), the same normalisation as the formula stated: S = 4 V [2 - cos(pi/(N1 N2)) - cos(pi/(N3 N4))],
    # V = N1 N2 N3 N4 sites
    v = np.prod(shape)
    expected = 4 * v * (2 - np.cos(np.pi / (shape[0] * shape[1])) - np.cos(np.pi / (shape[2] * shape[3])))
    assert tw.twisted_wilson_action(tw.constant_flux_links(shape), TWIST) == pytest.approx(expected, rel=1e-13)


def test_su3_constant_flux_twisted_wilson_action():
    # derivation as for SU(2), H = diag(-2/3, 1/3, 1/3): Re tr exp(-i phi H) = cos(2 phi/3) + 2 cos(phi/3),
    # phi12 = 2 pi / (2 N1 N2), phi34 = 2 pi / (N3 N4); S = 6 V [2 - (Re tr exp(-i phi12 H) + Re tr exp(-i phi34 H)) / 3]
    shape = (2, 3, 4, 2)
    v = np.prod(shape)

    def retr(phi):
        return 2 * np.cos(phi / 3) + np.cos(2 * phi / 3)

    expected = 6 * v * (2 - (retr(2 * np.pi / 12) + retr(2 * np.pi / 8)) / 3)
    links = tw.constant_flux_links(shape, 3)
    assert tw.twisted_wilson_action(links, constant_flux_twist(3)) == pytest.approx(expected, rel=1e-13)


def test_su3_constant_flux_clover_charge_approaches_one_third():
    # the box L3 L4 = 2 L1 L2 (self-dual), k sites per unit length: |Q_lat - 1/3| falls as a^4 like SU(2)'s
    devs = [
        abs(tw.twisted_clover_charge(tw.constant_flux_links((k, k, 2 * k, k), 3), constant_flux_twist(3)) - 1 / 3)
        for k in (4, 6)
    ]
    assert devs[1] < 5e-4 < devs[0]
    assert devs[0] / devs[1] == pytest.approx((6 / 4) ** 4, rel=0.05)


def test_constant_flux_lattice_action_tends_to_four_pi_squared_as_a_to_the_fourth():
    # on k^4 sites: S_lat = 8 k^4 (1 - cos(pi / k^2)) = 4 pi^2 (1 - pi^2 / (12 k^4) + O(k^-8)) (Taylor series of
    # the cosine): the plaquette angle is a^2 f, so the Wilson action's error here starts at a^4
    for k in (4, 8):
        s = tw.twisted_wilson_action(tw.constant_flux_links((k, k, k, k)), TWIST)
        assert 1 - s / (4 * np.pi**2) == pytest.approx(np.pi**2 / (12 * k**4), rel=2e-3)


def test_constant_flux_clover_charge_is_one_half_times_two_sincs():
    # derivation: each clover leaf of plane 12 is exp(-i phi T) = cos(phi/2) + i sigma_3 sin(phi/2), so the
    # clover F_12 = i sigma_3 sin(phi12/2) against the continuum a^2 F_12 = i sigma_3 phi12/2: Q_lat = (1/2)
    # sinc(1/(N1 N2)) sinc(1/(N3 N4)) (sinc x = sin(pi x)/(pi x), numpy's)
    shape = (2, 4, 3, 2)
    q = tw.twisted_clover_charge(tw.constant_flux_links(shape), TWIST)
    assert q == pytest.approx(0.5 * np.sinc(1 / 8) * np.sinc(1 / 6), rel=1e-13)


def test_constant_flux_clover_charge_approaches_one_half_as_the_spacing_shrinks():
    # the box fixed, k sites a side (a = L / k): |Q_lat - 1/2| ~ pi^2 / (6 k^4) per sinc, falling as a^4
    devs = [abs(tw.twisted_clover_charge(tw.constant_flux_links((k, k, k, k)), TWIST) - 0.5) for k in (2, 4, 6)]
    assert devs[0] > devs[1] > devs[2]
    assert devs[2] < 2e-3
    assert devs[1] / devs[2] == pytest.approx((6 / 4) ** 4, rel=0.05)


# -- twisted flow and cooling -------------------------------------------------------------------------------

#: One lattice for every flow and cooling test (the compiled kernels depend on the shape only); self-dual,
#: N1 N2 = N3 N4 = 8.
FLOW_SHAPE = (4, 2, 2, 4)


def test_twisted_flow_does_not_raise_the_twisted_action():
    u = noisy_links(tw.constant_flux_links(FLOW_SHAPE), 0.4, seed=1)
    _, rec = tf.twisted_flow(u, TWIST, 0.3, 0.05)
    assert np.all(np.diff(rec.wilson_action) <= 1e-10 * rec.wilson_action[:-1])
    assert rec.wilson_action[-1] < 0.5 * rec.wilson_action[0]


def test_a_twisted_flow_step_with_zero_twist_is_the_wilson_flow_step():
    # the kernel of smoothing.wilson_flow (eps = 1: c1 = 1, c2 = 0), called directly to spare the compilation
    # of its measurements
    u = jnp.asarray(noisy_links(tw.constant_flux_links(FLOW_SHAPE), 0.3, seed=2))
    z = tf._factor_fields(ZERO, FLOW_SHAPE, 2, (3, 1, 1, 3))
    np.testing.assert_allclose(tf._rk3_step(u, 0.05, z), sm._rk3_step(u, 0.05, 1.0), atol=1e-14)


def test_a_twisted_cooling_sweep_with_zero_twist_is_a_cooling_sweep():
    # the kernel of smoothing.cool (eps = 1, checkerboard colours), called directly as above
    u = jnp.asarray(noisy_links(tw.constant_flux_links(FLOW_SHAPE), 0.3, seed=3))
    z = tf._factor_fields(ZERO, FLOW_SHAPE, 2, (3, 1, 1, 3))
    colours = jnp.asarray(sm._colours(FLOW_SHAPE, False))
    expected = sm._cool_sweep(u, colours, 1.0, 0.0, False, 2, 3)
    np.testing.assert_allclose(tf._cool_sweep(u, colours, z, 3), expected, atol=1e-14)


def test_twisted_flow_commutes_with_moving_the_twist():
    # the singular gauge transformation (U_1 on the sheet (c_1, c_2) times z_12, twist moved to c - e_2) leaves
    # every twisted loop U_mu Sigma~_mu, hence the force, unchanged: flowing and moving commute
    z = np.exp(2j * np.pi * 1 / 2)
    c, moved = (3, 1, 1, 3), (3, 0, 1, 3)

    def move(links):
        out = np.array(links)
        out[3, 1, :, :, 0] *= z
        return out

    u = noisy_links(tw.constant_flux_links(FLOW_SHAPE), 0.3, seed=6)
    a, _ = tf.twisted_flow(u, TWIST, 0.1, 0.05, corner=c)
    b, _ = tf.twisted_flow(move(u), TWIST, 0.1, 0.05, corner=moved)
    np.testing.assert_allclose(b, move(a), atol=1e-13)


def test_constant_flux_links_are_a_fixed_point_of_the_twisted_flow():
    # abelian and constant twisted plaquettes: U Sigma~ = sum (P~ + P~^dag) is Hermitian, so the force vanishes
    u = tw.constant_flux_links(FLOW_SHAPE)
    v, _ = tf.twisted_flow(u, TWIST, 0.1, 0.05)
    np.testing.assert_allclose(v, u, atol=1e-13)


def test_twisted_cooling_of_a_rough_start_ends_near_the_constant_flux():
    # on a self-dual torus the continuum minimum is the constant flux (S >= 8 pi^2 Q = 4 pi^2, Bogomolny,
    # common practice); on the lattice the cooled action may lie a little below the constant-flux links'
    # action (measured: 39.325 against 39.352 on 4 x 4 x 2 x 8), so the check is monotone descent and an
    # end within 2 % of it, with the twisted clover charge near that of the constant flux
    u = noisy_links(tw.constant_flux_links(FLOW_SHAPE), 0.3, seed=4)
    _, rec = tf.twisted_cool(u, TWIST, 10)
    const = tw.constant_flux_links(FLOW_SHAPE)
    assert np.all(np.diff(rec.wilson_action) <= 0)
    assert rec.wilson_action[-1] == pytest.approx(tw.twisted_wilson_action(const, TWIST), rel=0.02)
    assert rec.clover_charge[-1] == pytest.approx(tw.twisted_clover_charge(const, TWIST), abs=0.02)


def test_twisted_flow_refuses_a_step_beyond_the_stability_bound():
    with pytest.raises(ValueError, match=r"stability bound 0\.15"):
        tf.twisted_flow(tw.constant_flux_links((2, 2, 2, 2)), TWIST, 1.0, 0.5)


def test_twisted_flow_names_a_bad_twist_entry():
    with pytest.raises(ValueError, match=r"n_34 .* out of range for SU\(2\).*found 2"):
        tf.twisted_flow(tw.constant_flux_links((2, 2, 2, 2)), {(3, 4): 2}, 0.1)


def test_twisted_cooling_refuses_odd_extents():
    with pytest.raises(ValueError, match=r"even lattice extents.*\(3, 2, 2, 2\)"):
        tf.twisted_cool(tw.constant_flux_links((3, 2, 2, 2)), TWIST, 1)


@pytest.mark.long
def test_cooling_on_an_asymmetric_torus_finds_a_localised_fractional_instanton():
    # L1 L2 = 16 != L3 L4 = 64: the constant flux is not self-dual (S = 2 pi^2 (4 + 1/4), module docstring of
    # instantonkit.ansatz.twisted) and cooling a perturbed start leaves it for a localised self-dual lump of
    # charge 1/2 with S -> 4 pi^2 (van Baal, Commun. Math. Phys. 85 (1982) 529, from memory, on the
    # instability of the constant flux off L1 L2 = L3 L4; the lump itself: common practice of cooling
    # studies on twisted tori, no paper checked here).  Measured on this coarse
    # lattice: S / 4 pi^2 = 0.961 and Q_clover = 0.424 after 400 sweeps (a^2 errors of a lump a few
    # spacings wide), peak q 17 times the mean
    shape = (4, 4, 8, 8)
    rng = np.random.default_rng(0)
    start = tw.constant_flux_links(shape)
    x = rng.normal(size=start.shape) + 1j * rng.normal(size=start.shape)
    x = 0.5 * (x - np.conj(np.swapaxes(x, -1, -2)))
    x = x - np.trace(x, axis1=-2, axis2=-1)[..., None, None] * np.eye(2) / 2
    u = np.asarray(sm._expm_su(jnp.asarray(0.1 * x))) @ start
    cooled, rec = tf.twisted_cool(u, TWIST, 400, every=50)
    assert rec.wilson_action[0] > 1.9 * 4 * np.pi**2
    assert rec.wilson_action[-1] == pytest.approx(4 * np.pi**2, rel=0.06)
    assert rec.clover_charge[-1] == pytest.approx(0.5, abs=0.1)
    q = tw.twisted_clover_charge_density(cooled, TWIST)
    assert q.max() > 10 * q.mean()
