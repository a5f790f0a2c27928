"""The force of a loop action computed plane by plane (`instantonkit.lattice.forces.loop_force`).

Its reference is the staple sum of each direction written loop by loop (`instantonkit.lattice.staples.
weighted_staple`, checked itself against finite differences of the action in tests/test_operators.py and
tests/test_anisotropic_smoothing.py); the force is Z_mu = -P_ah(U_mu Sigma_mu) (Luescher, JHEP 08 (2010) 071,
section 2, from memory).
"""

from __future__ import annotations

import jax.numpy as jnp
import numpy as np
import pytest
from _references import noisy_links

from instantonkit.lattice import forces, staples, threads
from instantonkit.lattice import operators as ops
from instantonkit.lattice import smoothing as sm
from instantonkit.lattice import twist as tw
from instantonkit.lattice import twisted_flow as tf

#: The lattice of most checks (one compiled plane kernel serves its six planes).
CUBE = (4, 4, 4, 4)
#: A lattice with four different extents, so that a plane's layout and its way back are checked on every axis.
SHAPE = (4, 6, 4, 8)


def _rough(n: int, seed: int = 3, shape=CUBE):
    """Rough SU(n) links on ``shape`` (the identity times exp(X), X random and of order one)."""
    one = np.broadcast_to(np.eye(n, dtype=np.complex128), tuple(shape) + (4, n, n)).copy()
    return noisy_links(one, 1.0, seed)


def _reference(u, pairs, omega, phases=None):
    """Z_mu = -P_ah(U_mu Sigma_mu) with Sigma_mu of `staples.weighted_staple`, direction by direction."""
    v = jnp.asarray(u)
    om = jnp.asarray(omega)
    ph = None if phases is None else {k: jnp.asarray(x) for k, x in phases.items()}
    z = [
        -sm._traceless_antihermitian(sm._mm(v[..., mu, :, :], staples.weighted_staple(v, mu, pairs, om, ph)))
        for mu in range(4)
    ]
    return np.asarray(jnp.stack(z, axis=4))


@pytest.mark.parametrize("n", [2, 3])
@pytest.mark.parametrize("name", ["wilson", "symanzik", "5li"])
def test_plane_force_equals_the_staples_of_each_direction(name, n):
    u = _rough(n)
    pairs, omega, _ = sm._operator_terms(ops.get_operator(name))
    got = np.asarray(forces.loop_force(u, pairs, omega))
    assert np.max(np.abs(got - _reference(u, pairs, omega))) < 1e-13


def test_plane_force_keeps_every_axis_apart_on_four_different_extents():
    u = _rough(2, shape=SHAPE)
    pairs, omega, _ = sm._operator_terms(ops.get_operator("symanzik"))
    got = np.asarray(forces.loop_force(u, pairs, omega))
    assert np.max(np.abs(got - _reference(u, pairs, omega))) < 1e-13


def test_plane_force_keeps_a_weight_per_direction_and_plane():
    # random weights omega_i[mu, nu], different for (mu, nu) and (nu, mu): each staple of a plane takes its own
    # direction's weight (the anisotropic flows' weights are of this form)
    u = _rough(3, seed=5)
    pairs = ops.get_operator("5li").pairs
    omega = np.random.default_rng(7).uniform(-1.0, 1.0, size=(len(pairs), 4, 4))
    got = np.asarray(forces.loop_force(u, pairs, omega))
    assert np.max(np.abs(got - _reference(u, pairs, omega))) < 1e-13


def test_thread_count_and_blocks_change_no_bit_of_the_force(monkeypatch):
    # the parts of a plane run on WORKERS threads and are put back in their order; blocks cut the transverse sites
    # only, so neither changes a bit (common practice: a parallel map must not change the answer).  With one
    # site a block the 4^4 planes have 16 blocks, handed to the threads in parts
    u = _rough(2)
    pairs, omega, _ = sm._operator_terms(ops.get_operator("symanzik"))
    whole = np.asarray(forces.loop_force(u, pairs, omega))  # one block a plane
    monkeypatch.setattr(forces, "BLOCK_SITES", 1)
    monkeypatch.setattr(threads, "WORKERS", 1)
    one = np.asarray(forces.loop_force(u, pairs, omega))
    monkeypatch.setattr(threads, "WORKERS", 3)
    three = np.asarray(forces.loop_force(u, pairs, omega))
    assert np.array_equal(one, three)
    assert np.array_equal(whole, one)


@pytest.mark.parametrize("value", ["0", "-2", "two", "1.5", "65", "1_0"])
def test_a_thread_count_that_is_not_a_positive_integer_is_refused(value):
    with pytest.raises(ValueError, match=f"INSTANTONKIT_THREADS must be a positive integer up to 64.*found {value!r}"):
        threads._workers_from_env(value)


def test_the_thread_count_comes_from_the_environment_or_the_cores():
    assert threads._workers_from_env("3") == 3
    assert 1 <= threads._workers_from_env(None) == threads._workers_from_env(" ") <= 8


def test_an_error_in_a_chunk_reaches_the_caller_and_stops_the_rest(monkeypatch):
    # the calls not yet started when a chunk fails are dropped, so a bad chunk costs at most the ones in flight
    monkeypatch.setattr(threads, "WORKERS", 2)
    started = []

    def fn(i):
        started.append(i)
        if i == 3:
            raise ValueError("chunk 3 is bad")
        return i

    with pytest.raises(ValueError, match="chunk 3 is bad"):
        threads.run_chunks(fn, range(1000))
    assert len(started) < 20


@pytest.mark.parametrize("shape", [CUBE, SHAPE])
def test_plane_force_with_centre_factors_equals_the_twisted_staples(shape):
    # a twist in planes 12 and 34 ('t Hooft, Nucl. Phys. B 153 (1979) 141): every loop that holds a corner plaquette
    # carries z; the plane kernel takes z, conj(z) per link of the loop, the reference per direction and plane
    # (squares and both orientations of the 1x2 rectangles)
    n = 3 if shape == CUBE else 2
    u = _rough(n, seed=11, shape=shape)
    tensor = tw.twist_tensor({(1, 2): 1, (3, 4): n - 1}, n)
    pairs, omega, _ = sm._operator_terms(ops.get_operator("symanzik"))
    ph = staples.phase_fields(tensor, shape, n, (1, 2, 3, 0), pairs)
    got = np.asarray(forces.loop_force(u, pairs, omega, ph))
    assert np.max(np.abs(got - _reference(u, pairs, omega, ph))) < 1e-13


def test_thread_count_changes_no_bit_of_the_twisted_force(monkeypatch):
    u = _rough(2, seed=17)
    tensor = tw.twist_tensor({(1, 2): 1}, 2)
    pairs, omega, _ = sm._operator_terms(ops.get_operator("symanzik"))
    ph = staples.phase_fields(tensor, CUBE, 2, (3, 3, 3, 3), pairs)
    monkeypatch.setattr(forces, "BLOCK_SITES", 1)
    monkeypatch.setattr(threads, "WORKERS", 1)
    one = np.asarray(forces.loop_force(u, pairs, omega, ph))
    monkeypatch.setattr(threads, "WORKERS", 2)
    assert np.array_equal(one, np.asarray(forces.loop_force(u, pairs, omega, ph)))


def test_the_fused_plaquette_forces_equal_the_plane_force():
    # the Wilson flows (plain and twisted) run one fused compiled step with their own staples; both must be the
    # plane force of the plaquettes (with the plaquettes' centre factors on a twisted torus)
    u = _rough(2, seed=13)
    ones = np.ones((1, 4, 4))
    plane = np.asarray(forces.loop_force(u, ((1, 1),), ones))
    assert np.max(np.abs(np.asarray(sm._force(jnp.asarray(u), 1.0)) - plane)) < 1e-13
    tensor = tw.twist_tensor({(1, 2): 1, (3, 4): 1}, 2)
    ph = staples.phase_fields(tensor, CUBE, 2, (3, 3, 3, 3), ((1, 1),))
    z = tf._factor_fields(tensor, CUBE, 2, (3, 3, 3, 3))
    twisted = np.asarray(forces.loop_force(u, ((1, 1),), ones, ph))
    assert np.max(np.abs(np.asarray(tf._force(jnp.asarray(u), z)) - twisted)) < 1e-13


def test_a_consumer_that_stops_early_drops_the_calls_not_started(monkeypatch):
    monkeypatch.setattr(threads, "WORKERS", 2)
    started = []

    def fn(i):
        started.append(i)
        return i

    gen = threads.map_chunks(fn, range(1000))
    assert [next(gen) for _ in range(3)] == [0, 1, 2]
    gen.close()
    assert len(started) < 20


def test_no_chunks_give_no_results_and_a_none_chunk_is_a_chunk(monkeypatch):
    monkeypatch.setattr(threads, "WORKERS", 2)
    assert threads.run_chunks(lambda c: c, []) == []
    assert threads.run_chunks(lambda c: c, [None, 1, 2]) == [None, 1, 2]


@pytest.mark.parametrize(("value", "err"), [(0, ValueError), (-1, ValueError), (65, ValueError), ("2", TypeError)])
def test_a_bad_thread_count_set_at_run_time_is_refused_before_any_call(monkeypatch, value, err):
    monkeypatch.setattr(threads, "WORKERS", value)
    calls = []
    with pytest.raises(err, match="instantonkit.lattice.threads.WORKERS"):
        threads.run_chunks(calls.append, range(4))
    assert calls == []


def test_plane_force_refuses_links_weights_and_phases_of_the_wrong_shape():
    pairs, omega, _ = sm._operator_terms(ops.get_operator("symanzik"))
    with pytest.raises(ValueError, match=r"omega must have shape \(2, 4, 4\).*found \(2,\)"):
        forces.plane_force(CUBE, pairs, np.ones(2))
    with pytest.raises(ValueError, match=r"phases\[\(2, 1\)\] must have shape"):
        forces.plane_force(CUBE, pairs, omega, {(1, 1): np.ones((4, 4) + CUBE), (1, 2): np.ones((4, 4) + CUBE)})
    force = forces.plane_force(CUBE, pairs, omega)
    with pytest.raises(ValueError, match=r"links must have shape .*found \(4, 4, 4, 4, 3, 2, 2\)"):
        force(_rough(2)[..., :3, :, :])
