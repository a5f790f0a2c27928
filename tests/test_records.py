"""Specification of field records: every field that can be rebuilt from a file is, and the rest say why.

Round trips compare the rebuilt field with the original (parameters bit for bit: JSON keeps float64
exactly by Python's repr round trip, common practice; densities to 1e-12 at sample points).
"""

from __future__ import annotations

import json

import jax.numpy as jnp
import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

import instantonkit as ik
from instantonkit.engine.fields import evaluate
from instantonkit.lattice import files as lio
from instantonkit.lattice import references
from instantonkit.lattice import starts as lat
from instantonkit.testing import points, unit_quaternions

_POINTS = np.array([[0.3, -0.2, 0.5, 0.1], [1.1, 0.4, -0.7, 0.9], [-0.6, 0.8, 0.2, -1.3]])


def _unit_links(n=2):
    return np.broadcast_to(np.eye(n, dtype=complex), (2, 2, 2, 2, 4, n, n)).copy()


def _same_densities(a, b, points=_POINTS):
    for quantity in ("action_density", "charge_density"):
        sa, sb = evaluate(a, points, quantity), evaluate(b, points, quantity)
        assert np.allclose(sa, sb, rtol=1e-12, atol=1e-12), quantity


def _same_potentials(a, b, points=_POINTS[:1]):
    for x in points:
        assert np.allclose(np.asarray(a.potential(x)), np.asarray(b.potential(x)), rtol=1e-12, atol=1e-14)


def test_caloron_start_file_rebuilds_the_caloron(tmp_path):
    cal = ik.caloron(0.8, 2.0, center=(0.1, 0.0, -0.1, 0.2))
    st = lat.lattice_start(cal, (4, 4, 4, 4), 0.5, boundary="open", rtol=1e-3)
    lio.save_lattice(tmp_path / "cal.npz", st)
    back = references.field_from_file(tmp_path / "cal.npz")
    assert isinstance(back, type(cal)) and back.record() == cal.record()
    _same_densities(back, cal)


@pytest.mark.parametrize("fmt", ["npz", "ildg"])
def test_thooft_field_round_trips_through_a_file(tmp_path, fmt):
    f = ik.thooft([[0.0, 0.0, 0.0, 0.0], [1.3, -0.4, 0.2, 0.7]], [0.9, 1.2])
    n = 3 if fmt == "ildg" else 2
    lio.save_lattice(tmp_path / f"t.{fmt}", _unit_links(n), description=f.record())
    back = references.field_from_file(tmp_path / f"t.{fmt}")
    assert np.array_equal(back.centers, f.centers) and np.array_equal(back.sizes, f.sizes)
    _same_densities(back, f)


def test_jnr_field_round_trips_through_a_file(tmp_path):
    f = ik.jnr([[0.0, 0.0, 0.0, 0.0], [1.0, 0.5, 0.0, 0.0], [-0.4, 1.1, 0.3, 0.2]], [1.0, 0.7, 1.3])
    lio.save_lattice(tmp_path / "j.npz", _unit_links(), description=f.record())
    back = references.field_from_file(tmp_path / "j.npz")
    assert np.array_equal(back.poles, f.poles) and np.array_equal(back.weights, f.weights)
    _same_densities(back, f)


def _transformed():
    b = ik.bpst_field(center=(0.2, 0.1, -0.3, 0.4), size=0.8, orientation=(0.6, 0.0, 0.8, 0.0))
    t = ik.thooft([[0.0, 0.0, 0.0, 0.0], [1.3, -0.4, 0.2, 0.7]], [0.9, 1.2])
    left = np.array([1.0, 2.0, -1.0, 0.5]) / np.linalg.norm([1.0, 2.0, -1.0, 0.5])
    return {
        "translated": ik.translate(b, [0.5, -0.25, 1.0, 0.125]),
        "rotated": ik.rotate(t, left, [0.0, 1.0, 0.0, 0.0]),
        "dilated": ik.dilate(t, 1.7),
        "parity": ik.anti(t),
        "gauge (constant)": ik.gauge_transform(t, ik.transforms.ConstantGauge([[0.6, 0.8j], [0.8j, 0.6]])),
        "rotated translated caloron": ik.rotate(ik.translate(ik.caloron(0.7, 2.0), [0.1, 0.2, 0.3, 0.0]), left),
    }


@pytest.mark.parametrize("name", list(_transformed()))
def test_transformed_field_round_trips_through_its_record(tmp_path, name):
    f = _transformed()[name]
    lio.save_lattice(tmp_path / "x.npz", _unit_links(), description=f.record())
    back = references.field_from_file(tmp_path / "x.npz")
    assert type(back) is type(f) and back.record() == f.record()
    _same_potentials(back, f)
    _same_densities(back, f)


def test_windowed_translated_field_keeps_its_window_in_the_record():
    f = ik.translate(ik.bpst_field(size=0.5, gauge="singular"), [0.1, 0.0, 0.0, 0.2])
    shape, a = (4, 4, 4, 4), 0.5
    from instantonkit.ansatz import periodic

    w = periodic.window_field(f, shape, a, lat.default_origin(f, shape, a))
    back = references.field_from_record(w.record())
    _same_potentials(back, w)
    assert references.field_from_record(w.record(), window=False).record() == f.record()


def _rotate_phase(x):
    """A gauge function of our own: g(x) = exp(i x1 sigma_3) (unitary)."""
    return jnp.diag(jnp.exp(1j * jnp.array([x[0], -x[0]])))


def test_gauge_transform_by_a_callable_says_it_cannot_be_rebuilt_and_names_the_callable(tmp_path):
    f = ik.gauge_transform(ik.bpst_field(), _rotate_phase)
    rec = f.record()
    assert rec["kind"] == "unrecordable" and rec["field"] == ik.bpst_field().record()
    lio.save_lattice(tmp_path / "g.npz", _unit_links(), description=rec)
    with pytest.raises(ValueError, match="GaugeTransformed cannot be rebuilt.*_rotate_phase.*code, not data"):
        references.field_from_file(tmp_path / "g.npz")


def test_unrebuildable_field_inside_a_transformation_is_named_with_its_wrapper():
    f = ik.translate(ik.gauge_transform(ik.bpst_field(), _rotate_phase), [1.0, 0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match="inside a translated field.*GaugeTransformed.*_rotate_phase"):
        references.field_from_record(f.record())


def test_start_of_a_field_without_record_hook_says_so_not_to_save_a_start(tmp_path):
    bpst = ik.bpst_field(size=0.8)
    st = lat.lattice_start(lambda x: bpst.potential(x), (2, 2, 2, 2), 0.5, boundary="open", rtol=1e-3)
    assert st.report.field["kind"] == "unrecordable" and st.report.field["type"] == "CallableField"
    lio.save_lattice(tmp_path / "c.npz", st)
    with pytest.raises(ValueError, match="a CallableField cannot be rebuilt from its record: it offers no record"):
        references.field_from_file(tmp_path / "c.npz")


def test_bare_links_file_says_it_was_saved_without_a_start(tmp_path):
    lio.save_lattice(tmp_path / "b.npz", _unit_links())
    with pytest.raises(ValueError, match="saved without a lattice start"):
        references.field_from_file(tmp_path / "b.npz")


def test_record_with_a_missing_entry_names_it():
    rec = ik.caloron(0.8, 2.0).record()
    del rec["period"]
    with pytest.raises(ValueError, match=r"'caloron' lacks \['period'\]"):
        references.field_from_record(rec)


_STEPS = st.sampled_from(["translate", "rotate", "dilate", "parity"])


@given(
    base=st.sampled_from(["bpst", "thooft", "jnr", "caloron"]),
    steps=st.lists(st.tuples(_STEPS, points(2.0), unit_quaternions(), st.floats(0.2, 5.0)), max_size=3),
)
def test_any_chain_of_recordable_transformations_rebuilds_to_the_same_record(base, steps):
    f = {
        "bpst": ik.bpst_field(center=(0.1, 0.2, 0.3, 0.4), size=0.9),
        "thooft": ik.thooft([[0.0, 0.0, 0.0, 0.0], [1.0, 1.0, 0.0, 0.0]], [0.5, 0.7]),
        "jnr": ik.jnr([[0.0, 0.0, 0.0, 0.0], [1.0, 0.5, 0.0, 0.0]], [1.0, 0.7]),
        "caloron": ik.caloron(0.8, 2.0),
    }[base]
    for name, shift, quat, factor in steps:
        if name == "translate":
            f = ik.translate(f, shift)
        elif name == "rotate":
            f = ik.rotate(f, quat)
        elif name == "dilate":
            f = ik.dilate(f, factor)
        else:
            f = ik.parity(f)
    rebuilt = references.field_from_record(json.loads(json.dumps(f.record())))
    assert type(rebuilt) is type(f) and rebuilt.record() == f.record()


def test_constant_gauge_refuses_a_matrix_that_is_not_unitary():
    with pytest.raises(ValueError, match=r"unitary; max \|g g\^dag - 1\| = 7\.500e-01"):  # 1 - 0.5^2
        ik.transforms.ConstantGauge([[1.0, 0.0], [0.0, 0.5]])
