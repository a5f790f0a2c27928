"""Bad-input matrix: every public entry point against NaN, inf, wrong shape, wrong dtype, empty and absurd sizes.

Each row of the table is one (entry point, argument, kind of bad input); the test id reads
``entry-argument-kind`` (e.g. ``verify-expected_charge-nan``). The property is the same for every row:
the call raises ``ValueError`` or ``TypeError`` whose message names the argument, quickly (before any
compilation or allocation for absurd sizes), and never returns a number. Common practice: argument
checks at the front door, one wording (``instantonkit.core._validate``).
"""

from __future__ import annotations

import os
import re
import signal
from collections.abc import Callable

import numpy as np
import pytest

import instantonkit as ik
from instantonkit.core import _validate as _v
from instantonkit.lattice import files as io
from instantonkit.lattice import references, smoothing
from instantonkit.lattice import starts as lattice

NAN, INF = float("nan"), float("inf")
HUGE = 10**15  # an absurd budget or count
# a refusal is immediate; the alarm turns a hang in Python code into a failure
SECONDS = int(os.environ.get("IK_MATRIX_SECONDS", "20"))

# ---------------------------------------------------------------------------------------------- inputs


def _links(shape=(2, 2, 2, 2)) -> np.ndarray:
    """Unit SU(2) links (*shape, 4, 2, 2) complex128."""
    return np.broadcast_to(np.eye(2, dtype=np.complex128), (*shape, 4, 2, 2)).copy()


def _with(value, arr):
    out = np.array(arr, dtype=np.result_type(arr, np.float64))
    out.flat[0] = value
    return out


GOOD_LINKS = _links()
LINKS = {
    "nan": _with(NAN, GOOD_LINKS),
    "inf": _with(INF, GOOD_LINKS),
    "shape": np.zeros((2, 2, 2, 4, 2, 2), np.complex128),
    "dtype_str": np.full(GOOD_LINKS.shape, "a"),
    "dtype_object": GOOD_LINKS.astype(object),
    "dtype_bool": np.ones(GOOD_LINKS.shape, bool),
    "empty": np.zeros((0, 2, 2, 2, 4, 2, 2), np.complex128),
    # 10^16 sites without allocating them (a zero-stride view): must be refused, not computed
    "absurd": np.broadcast_to(np.eye(2, dtype=np.complex128), (10**4,) * 4 + (4, 2, 2)),
}
SHAPE = {
    "nan": (2, 2, 2, NAN),
    "inf": (2, 2, 2, INF),
    "shape": (2, 2, 2),
    "dtype_str": "2222",
    "dtype_bool": (True, True, True, True),
    "dtype_complex": (2, 2, 2, 2 + 1j),
    "empty": (),
    "zero": (0, 2, 2, 2),
    "negative": (2, 2, 2, -2),
    "absurd": (10**4,) * 4,
}
POSITIVE = {  # a length, a size, a period, a tolerance
    "nan": NAN,
    "inf": INF,
    "dtype_complex": 1 + 1j,
    "dtype_str": "1",
    "dtype_bool": True,
    "zero": 0.0,
    "negative": -1.0,
}
REAL = {"nan": NAN, "inf": INF, "dtype_complex": 1 + 1j, "dtype_str": "1", "dtype_bool": True}
COUNT = {  # a number of points, sweeps, centres, a rank
    "nan": NAN,
    "dtype_float": 1.5,
    "dtype_str": "2",
    "dtype_bool": True,
    "zero": 0,
    "negative": -1,
    "absurd": HUGE,
}
POINT = {
    "nan": (0.0, 0.0, 0.0, NAN),
    "inf": (0.0, 0.0, 0.0, INF),
    "shape": (0.0, 0.0, 0.0),
    "dtype_complex": (0.0, 0.0, 0.0, 1j),
    "dtype_str": ("0", "0", "0", "0"),
    "dtype_bool": (True, False, False, False),
    "empty": (),
}
POINTS = {
    "nan": np.array([[0.0, 0.0, 0.0, NAN]]),
    "inf": np.array([[0.0, 0.0, 0.0, INF]]),
    "shape": np.zeros((2, 3)),
    "dtype_complex": np.zeros((2, 4), complex),
    "dtype_str": np.full((2, 4), "0"),
    "dtype_object": np.zeros((2, 4)).astype(object),
    "dtype_bool": np.zeros((2, 4), bool),
    "empty": np.zeros((0, 4)),
    "absurd": np.broadcast_to(np.ones(4), (10**12, 4)),  # 10^12 points, no memory
}
FIELD = {"dtype_str": "bpst", "dtype_none": None, "dtype_float": 1.0}


def _pick(family: dict, *kinds: str) -> dict:
    return {k: family[k] for k in kinds}


def _without(family: dict, *kinds: str) -> dict:
    return {k: v for k, v in family.items() if k not in kinds}


# the good inputs every row starts from (cheap: no compilation happens while building them)
BPST_FIELD = ik.bpst_field()
BPST_DATA = ik.bpst()
UNIT_DATA = ik.unitary_multi_instanton([[0.0, 0.0, 0.0, 0.0]], [1.0], rank=3)
GRID = np.stack(np.meshgrid(*[np.linspace(-1.0, 1.0, 3)] * 4, indexing="ij"), axis=-1).reshape(-1, 4)
DENSITY = np.exp(-np.sum(GRID**2, axis=-1))
#: Bad density samples for the finders (the same kinds for every finder that takes samples).
BAD_DENSITIES = {
    "nan": _with(NAN, DENSITY),
    "inf": _with(INF, DENSITY),
    "shape": DENSITY[:-1],
    "dtype_complex": DENSITY.astype(complex),
    "dtype_str": DENSITY.astype(str),
    "dtype_bool": DENSITY > 0.5,
    "empty": np.zeros(0),
}

# ----------------------------------------------------------------------------------------------- table
# entry -> (call(tmp, **overrides), {argument: {kind: bad value}})

Row = tuple[Callable, dict]


def _call(entry_point, /, **defaults) -> Callable:
    return lambda tmp, **kw: entry_point(**{**defaults, **kw})


def _lattice_args() -> dict:
    return {"field": FIELD, "shape": SHAPE, "spacing": POSITIVE, "origin": POINT}


def _start(fn) -> Callable:
    """A 2^4 start of the BPST field; a window is given together with boundary="window", where it is used."""

    def call(tmp, **kw):
        if "window" in kw:
            kw.setdefault("boundary", "window")
        return fn(**{"field": BPST_FIELD, "shape": (2, 2, 2, 2), "spacing": 0.5, **kw})

    return call


def _start_args() -> dict:
    return {
        **_lattice_args(),
        "rtol": POSITIVE,
        "window": POSITIVE,
        "boundary": {"dtype_int": 3, "dtype_none": None},
    }


def _links_only(fn, **extra) -> Row:
    return _call(fn, links=GOOD_LINKS, **extra), {"links": LINKS}


def _multi(fn) -> Callable:
    """One centre of size 1 by default; as many unit sizes as centres when only the centres are bad."""

    def call(tmp, **kw):
        if "centers" in kw and "sizes" not in kw:
            n = np.shape(kw["centers"])[0] if np.ndim(kw["centers"]) == 2 else 1
            kw["sizes"] = np.broadcast_to(1.0, (n,))
        return fn(**{"centers": [[0.0, 0.0, 0.0, 0.0]], "sizes": [1.0], **kw})

    return call


def _field_points(fn) -> Row:
    return _call(fn, field=BPST_FIELD, points=GRID[:2]), {"field": FIELD, "points": POINTS}


def _integral(fn) -> Row:
    return _call(fn, field=BPST_FIELD, max_points=20_000), {
        "field": FIELD,
        "rtol": _without(POSITIVE, "zero"),
        "atol": _without(POSITIVE, "zero"),
        "center": POINT,
        "scale": POSITIVE,
        "period": POSITIVE,
        "max_points": COUNT,
    }


def _save(tmp, **kw):
    args = {"path": tmp / "start.npz", "links": GOOD_LINKS, **kw}
    return io.save_lattice(args.pop("path"), args.pop("links"), **args)


def _load(tmp, path="good", **kw):
    if isinstance(path, str) and path in ("good", "nan", "inf"):
        good = tmp / "good.npz"
        io.save_lattice(good, GOOD_LINKS)
        if path != "good":
            with np.load(good) as z:
                arrays = {name: z[name] for name in z.files}
            arrays["links"] = LINKS[path]
            bad = tmp / f"{path}.npz"
            np.savez(bad, **arrays)
            good = bad
        path = good
    return io.load_lattice(path, **kw)


ROWS: dict[str, Row] = {
    # lattice starts and references
    "lattice_links": (_start(ik.lattice_links), _start_args()),
    "lattice_start": (_start(ik.lattice_start), _start_args()),
    "continuum_reference": (
        _call(references.continuum_reference, field=BPST_FIELD, shape=(2, 2, 2, 2), spacing=0.5),
        {**_lattice_args(), "nodes": COUNT},
    ),
    "ensemble": (
        _call(ik.ensemble, n=1, k=1, shape=(2, 2, 2, 2), spacing=0.5),
        {"n": COUNT, "k": COUNT, "shape": SHAPE, "spacing": POSITIVE},
    ),
    # files
    "save_lattice": (
        _save,
        {
            "links": LINKS,
            "path": {"dtype_float": 3.5, "dtype_none": None, "empty": ""},
            "format": {"dtype_str": "xyz", "dtype_float": 1.0},
            "metadata": {"dtype_str": "meta", "dtype_float": 1.0},
        },
    ),
    "load_lattice": (
        _load,
        {"path": {"dtype_float": 3.5, "dtype_none": None, "empty": "", "nan": "nan", "inf": "inf"}},
    ),
    # lattice observables
    "average_plaquette": _links_only(ik.average_plaquette),
    "wilson_action": (_call(ik.wilson_action, links=GOOD_LINKS), {"links": LINKS, "beta": POSITIVE}),
    "clover_charge": _links_only(ik.clover_charge),
    "improved_action": (_call(ik.improved_action, links=GOOD_LINKS), {"links": LINKS, "eps": REAL}),
    "improved_charge": _links_only(ik.improved_charge),
    "instanton_size": _links_only(smoothing.instanton_size),
    "clover_charge_density": _links_only(lattice.clover_charge_density),
    # smoothing
    "wilson_flow": (
        _call(ik.wilson_flow, links=GOOD_LINKS, t=0.02),
        {"links": LINKS, "t": {**_without(POSITIVE, "zero"), "absurd": 1e15}, "step": POSITIVE},
    ),
    "gradient_flow": (
        _call(ik.gradient_flow, links=GOOD_LINKS, t=0.02),
        {"links": LINKS, "t": {**_without(POSITIVE, "zero"), "absurd": 1e15}, "step": POSITIVE, "eps": REAL},
    ),
    "cool": (_call(ik.cool, links=GOOD_LINKS, sweeps=1), {"links": LINKS, "sweeps": COUNT, "hits": COUNT}),
    # the finder
    "colour_rank": (
        _call(ik.colour_rank, links=GOOD_LINKS),
        {"links": LINKS, "spacing": POSITIVE, "threshold": POSITIVE},
    ),
    "find_lattice_instantons": (
        _call(ik.find_lattice_instantons, links=GOOD_LINKS, k=1),
        {"links": LINKS, "k": COUNT, "spacing": POSITIVE},
    ),
    "find_lattice_constituents": (
        _call(ik.find_lattice_constituents, links=GOOD_LINKS, n=1, spacing=1.0),
        {"links": LINKS, "n": COUNT, "spacing": POSITIVE, "period": POSITIVE},
    ),
    "find_constituents": (
        _call(ik.find_constituents, points=GRID, density=DENSITY, n=1, period=1.0),
        {
            "points": _without(POINTS, "absurd"),
            "density": BAD_DENSITIES,
            "n": COUNT,
            "period": POSITIVE,
            "weights": {"nan": _with(NAN, DENSITY), "negative": -DENSITY, "shape": DENSITY[:-1]},
        },
    ),
    "find_instantons": (
        _call(ik.find_instantons, points=GRID, density=DENSITY, k=1),
        {
            "points": _without(POINTS, "absurd"),
            "density": BAD_DENSITIES,
            "k": COUNT,
        },
    ),
    # ADHM data and its constructors
    "ADHMData": (
        _call(ik.ADHMData, lam=BPST_DATA.lam, B=BPST_DATA.B),
        {
            "lam": {
                "nan": _with(NAN, BPST_DATA.lam),
                "inf": _with(INF, BPST_DATA.lam),
                "shape": np.zeros((1, 3)),
                "dtype_complex": np.asarray(BPST_DATA.lam).astype(complex),
                "dtype_str": np.asarray(BPST_DATA.lam).astype(str),
                "empty": np.zeros((0, 0, 4)),
            },
            "B": {
                "nan": _with(NAN, BPST_DATA.B),
                "inf": _with(INF, BPST_DATA.B),
                "shape": np.zeros((2, 3)),
                "dtype_str": np.asarray(BPST_DATA.B).astype(str),
            },
            "chirality": {"nan": NAN, "dtype_str": "1", "zero": 0, "absurd": 2},
            "tol": POSITIVE,
        },
    ),
    "bpst": (
        _call(ik.bpst),
        {"center": POINT, "size": POSITIVE, "orientation": {**POINT, "zero": (0.0, 0.0, 0.0, 0.0)}},
    ),
    "multi_instanton": (
        _multi(ik.multi_instanton),
        {
            "centers": {**POINTS, "absurd": np.broadcast_to(np.ones(4), (10**6, 4))},
            "sizes": {"nan": [NAN], "inf": [INF], "shape": [1.0, 1.0], "dtype_str": ["1"], "zero": [0.0]},
            "rank": COUNT,
        },
    ),
    "random_adhm": (
        _call(ik.random_adhm, k=1),
        {"k": {**COUNT, "absurd": 10**6}, "rank": COUNT, "spread": POSITIVE, "size_range": {"nan": (NAN, 1.0)}},
    ),
    "embed_sp": (_call(ik.embed_sp, data=BPST_DATA, rank=2), {"data": FIELD, "rank": COUNT}),
    "block_sum": (_call(ik.block_sum, first=BPST_DATA, second=BPST_DATA), {"first": FIELD, "second": FIELD}),
    "unitary_multi_instanton": (
        _multi(ik.unitary_multi_instanton),
        {
            "centers": {**POINTS, "absurd": np.broadcast_to(np.ones(4), (10**6, 4))},
            "sizes": {"nan": [NAN], "inf": [INF], "dtype_str": ["1"], "zero": [0.0]},
            "rank": COUNT,
        },
    ),
    "random_unitary_adhm": (_call(ik.random_unitary_adhm, k=1), {"k": {**COUNT, "absurd": 10**6}, "rank": COUNT}),
    "UnitaryADHMData": (
        _call(ik.UnitaryADHMData, B1=UNIT_DATA.B1, B2=UNIT_DATA.B2, I=UNIT_DATA.I, J=UNIT_DATA.J),
        {
            "B1": {
                "nan": _with(NAN, UNIT_DATA.B1),
                "inf": _with(INF, UNIT_DATA.B1),
                "shape": np.zeros((2, 3), complex),
                "dtype_str": np.asarray(UNIT_DATA.B1).astype(str),
            },
            "I": {
                "nan": _with(NAN, UNIT_DATA.I),
                "shape": np.zeros((1, 7), complex),
                "dtype_str": np.asarray(UNIT_DATA.I).astype(str),
            },
            "tol": POSITIVE,
        },
    ),
    # classic ansaetze
    "thooft": (
        _multi(ik.thooft),
        {
            "centers": POINTS,
            "sizes": {"nan": [NAN], "inf": [INF], "shape": [1.0, 1.0], "dtype_str": ["1"], "zero": [0.0]},
        },
    ),
    "jnr": (
        _call(ik.jnr, poles=[[0.0, 0.0, 0.0, 0.0], [2.0, 0.0, 0.0, 0.0]], weights=[1.0, 1.0]),
        {
            "poles": POINTS,
            "weights": {"nan": [NAN, 1.0], "inf": [INF, 1.0], "shape": [1.0], "dtype_str": ["1", "1"]},
        },
    ),
    "caloron": (_call(ik.caloron, size=1.0, period=2.0), {"size": POSITIVE, "period": POSITIVE, "center": POINT}),
    "bpst_field": (_call(ik.bpst_field), {"center": POINT, "size": POSITIVE, "orientation": POINT}),
    # transformations
    "translate": (_call(ik.translate, field=BPST_FIELD, shift=(1.0, 0.0, 0.0, 0.0)), {"field": FIELD, "shift": POINT}),
    "rotate": (
        _call(ik.rotate, field=BPST_FIELD, left=(1.0, 0.0, 0.0, 0.0)),
        {"field": FIELD, "left": {**POINT, "zero": (0.0, 0.0, 0.0, 0.0)}, "right": POINT},
    ),
    "dilate": (_call(ik.dilate, field=BPST_FIELD, factor=2.0), {"field": FIELD, "factor": POSITIVE}),
    "gauge_transform": (_call(ik.gauge_transform, field=BPST_FIELD, g=lambda x: x), {"field": FIELD, "g": FIELD}),
    # densities at points
    "potential": _field_points(ik.potential),
    "field_strength": _field_points(ik.field_strength),
    "action_density": _field_points(ik.action_density),
    "charge_density": _field_points(ik.charge_density),
    "self_duality_residual": _field_points(ik.self_duality_residual),
    # integrals and the verdict
    "total_charge": _integral(ik.total_charge),
    "total_action": _integral(ik.total_action),
    "verify": (
        _call(ik.verify, field=BPST_FIELD, max_points=20_000),
        {
            "field": FIELD,
            "expected_charge": {**REAL, "dtype_float": 1.5, "absurd": 10**6},
            "rtol": _pick(POSITIVE, "nan", "inf", "dtype_complex", "dtype_str", "dtype_bool", "negative"),
            "atol": _without(POSITIVE, "zero"),
            "center": POINT,
            "scale": POSITIVE,
            "period": POSITIVE,
            "max_points": COUNT,
            "charge_tol": POSITIVE,
            "duality_tol": POSITIVE,
            "sample_points": COUNT,
        },
    ),
    # zero modes
    "zero_modes": (
        _call(ik.zero_modes, data=BPST_DATA, points=GRID[:2]),
        {"data": FIELD, "points": POINTS, "chunk_size": _without(COUNT, "absurd")},
    ),
    "zero_mode_density": (
        _call(ik.zero_mode_density, data=BPST_DATA, points=GRID[:2]),
        {"data": FIELD, "points": POINTS},
    ),
    "zero_mode_overlap": (
        _call(ik.zero_mode_overlap, data=BPST_DATA),
        {"data": FIELD, "n_radial": COUNT, "n_angular": COUNT},
    ),
    "as_field": (_call(ik.as_field, obj=BPST_FIELD), {"obj": FIELD}),
    "anti": (_call(ik.anti, field=BPST_FIELD), {"field": FIELD}),
    "parity": (_call(ik.parity, field=BPST_FIELD), {"field": FIELD}),
    "ParametrisedField": (_call(ik.ParametrisedField, fn=lambda p, x: x), {"fn": FIELD}),
    "from_quaternionic": (_call(ik.from_quaternionic, data=BPST_DATA), {"data": FIELD}),
    "embed_unitary": (
        _call(ik.embed_unitary, data=UNIT_DATA, rank=4),
        {"data": FIELD, "rank": COUNT, "offset": _without(COUNT, "zero")},
    ),
    "set_lean_compile": (_call(ik.set_lean_compile, on=False), {"on": {"dtype_str": "yes", "dtype_float": 1.0}}),
    "enable_compile_cache": (_call(ik.enable_compile_cache), {"directory": {"dtype_float": 3.5}}),
    # the smoothing module's measurements
    "loop_action": (_call(smoothing.loop_action, links=GOOD_LINKS), {"links": LINKS, "size": COUNT}),
    "loop_clover_charge": (_call(smoothing.loop_clover_charge, links=GOOD_LINKS), {"links": LINKS, "size": COUNT}),
    "improved_charge_density": _links_only(smoothing.improved_charge_density),
    "improved_coefficients": (_call(smoothing.improved_coefficients, eps=0.0), {"eps": REAL}),
    "clover_field_strength": (
        _call(lattice.clover_field_strength, links=GOOD_LINKS),
        {"links": LINKS, "spacing": POSITIVE},
    ),
}

# the words a message uses for an argument whose parameter name is not the user's word for it
WORDS = {
    ("as_field", "obj"): "field",
    ("find_instantons", "points"): "point",
    ("find_constituents", "points"): "point",
}
# an empty list of points gives an empty array of values (numpy's convention), not a number
EMPTY_IS_EMPTY = {
    "potential",
    "field_strength",
    "action_density",
    "charge_density",
    "self_duality_residual",
    "zero_modes",
    "zero_mode_density",
}

# ------------------------------------------------------------------------------- what fails today
# (entry, argument, kind) -> what happens now (empty: every case is refused). The mark is strict: a
# case that gets fixed shows up as XPASS and its line is removed.
KNOWN: dict[tuple[str, str, str], str] = {}
# cases that run away today (a hang, or minutes inside compiled code that the alarm cannot stop):
# not run, listed with what happens
RUNAWAY: dict[tuple[str, str, str], str] = {}


def _cases():
    for entry, (call, args) in ROWS.items():
        for arg, family in args.items():
            for kind, value in family.items():
                key = (entry, arg, kind)
                marks = []
                if key in RUNAWAY:
                    marks.append(pytest.mark.xfail(strict=True, run=False, reason=RUNAWAY[key]))
                elif key in KNOWN:
                    marks.append(pytest.mark.xfail(strict=True, reason=KNOWN[key]))
                word = WORDS.get((entry, arg), arg)
                empty_ok = kind == "empty" and entry in EMPTY_IS_EMPTY
                yield pytest.param(call, arg, value, word, empty_ok, id=f"{entry}-{arg}-{kind}", marks=marks)


def _alarm(signum, frame):
    raise TimeoutError(f"no refusal within {SECONDS} s")


@pytest.mark.parametrize(("call", "arg", "value", "word", "empty_ok"), list(_cases()))
def test_bad_input_is_refused_naming_the_argument(call, arg, value, word, empty_ok, tmp_path):
    """A bad value of one argument raises ValueError/TypeError naming that argument, at once."""
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(SECONDS)
    try:
        if empty_ok:
            try:
                out = call(tmp_path, **{arg: value})
            except (ValueError, TypeError) as err:
                assert re.search(re.escape(word), str(err))
            else:
                assert np.size(out) == 0
            return
        with pytest.raises((ValueError, TypeError), match=re.escape(word)):
            call(tmp_path, **{arg: value})
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


# ------------------------------------------------------------------------ the shared checks behind the table


def test_a_request_beyond_the_machines_memory_is_refused_with_the_estimate_and_the_memory():
    """``affordable`` names the argument, the estimate in bytes and the machine's memory (os.sysconf)."""
    total = _v.machine_memory()
    assert total > 0
    with pytest.raises(
        ValueError, match=rf"links is too large: .* needs at least .* {re.escape(f'{total:.3e}')} bytes of memory"
    ):
        _v.affordable("links", 2.0 * total, "the test")


def test_an_absurd_lattice_shape_is_refused_before_any_allocation():
    """A 10^16-site lattice needs at least 256 bytes a site (four SU(2) links): refused by its estimate."""
    with pytest.raises(ValueError, match=r"shape is too large: a lattice of 1\.000e\+16 sites .* 2\.560e\+18 bytes"):
        _v.lattice_shape("shape", (10**4,) * 4)


def test_a_lattice_shape_given_as_text_is_refused():
    """ "2222" is not read as (2, 2, 2, 2)."""
    with pytest.raises(TypeError, match="shape must be a sequence of 4 integers"):
        _v.lattice_shape("shape", "2222")


def test_an_infinite_lattice_extent_is_a_type_error_naming_the_shape():
    """int(inf) overflows; the check turns that into the shape's one wording."""
    with pytest.raises(TypeError, match="shape must be a sequence of 4 integers"):
        _v.lattice_shape("shape", (2, 2, 2, INF))


def test_points_too_many_to_copy_are_refused_without_reading_them():
    """10^12 points (a zero-stride view) would need 3.2e13 bytes as float64: refused by the estimate."""
    with pytest.raises(ValueError, match=r"points is too large: a float64 copy of 1000000000000 points"):
        _v.points(np.broadcast_to(np.ones(4), (10**12, 4)))


def test_coincidence_checks_too_large_to_compare_pairwise_are_refused():
    """A pairwise distance check of 10^6 centres needs 3.2e13 bytes: refused, naming the centres."""
    with pytest.raises(ValueError, match=r"centers is too large: comparing 1000000 centres pairwise"):
        _v.distinct_points("centers", np.broadcast_to(np.ones(4), (10**6, 4)), 1e-8, noun="centres")


def test_a_budget_beyond_a_day_of_work_is_refused_naming_the_bound():
    """10^15 points would take ~30 years at 10^6 a second: refused, naming the bound 1e11 (common practice)."""
    with pytest.raises(ValueError, match=r"max_points must be at most 1e\+11 points .* found 1\.000e\+15"):
        _v.budget("max_points", HUGE)
    assert _v.budget("max_points", 4_000_000) == 4_000_000


def test_a_run_of_too_many_updates_is_refused_naming_the_argument():
    """A flow of 10^15 steps over 64 links is refused by its count of updates, before it starts."""
    with pytest.raises(ValueError, match=r"t is too large: .* 6\.400e\+16 elementary updates"):
        _v.bounded_work("t", 64.0 * HUGE, "the flow")


@pytest.mark.parametrize("bad", [3.5, None, b"x.npz"])
def test_a_file_path_that_is_not_text_is_a_type_error_naming_the_path(bad):
    """Paths are str or os.PathLike; bytes and numbers are refused by name."""
    with pytest.raises(TypeError, match="path must be a"):
        _v.file_path("path", bad)
