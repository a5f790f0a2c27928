"""Specification of ``python -m instantonkit``: the demo, ``verify TARGET``, one-line errors, JSON."""

from __future__ import annotations

import json

import numpy as np
import pytest

import instantonkit as ik
from instantonkit import __main__ as cli


def test_demo_configuration_is_exact_charge_three_data():
    # multi_instanton solves the ADHM constraint to <= 1e-12; charge k = 3
    data = cli.demo_configuration()
    assert data.k == 3 and data.constraint_residual() <= 1e-12
    assert np.allclose(data.centers(), cli.DEMO_CENTERS)


@pytest.mark.slow
def test_main_prints_a_passing_report_with_the_required_rows(capsys):
    # Q = 3, S = 24 pi^2 for exact ADHM data (Atiyah, Hitchin, Drinfeld, Manin, Phys. Lett. A 65 (1978) 185)
    status = cli.main(["--no-routes"])
    out = capsys.readouterr().out
    assert status == 0, out
    for row in (
        "topological charge Q",
        "action S / 8 pi^2",
        "self-duality residual",
        "ADHM constraint residual",
        "how obtained",
        "verdict: PASSED",
    ):
        assert row in out


@pytest.fixture()
def bpst_file(tmp_path):
    path = tmp_path / "bpst.npz"
    cli.save_adhm(path, ik.bpst((0.2, 0.0, -0.1, 0.3), 0.9))
    return str(path)


def test_verify_a_saved_adhm_file_prints_json_with_the_verdict(bpst_file, capsys):
    # Q = 1 for the BPST instanton (Belavin, Polyakov, Schwartz, Tyupkin, Phys. Lett. B 59 (1975) 85)
    status = cli.main(["verify", bpst_file, "--charge", "1", "--no-routes", "--json"])
    d = json.loads(capsys.readouterr().out)
    assert d["verdict"] == "PASSED" and status == 0 and d["nearest_integer"] == 1
    assert isinstance(d["rows"], list) and isinstance(d["reasons"], list) and d["seconds"] > 0


def test_verify_a_module_attribute_from_a_python_file(tmp_path, capsys):
    src = tmp_path / "myfield.py"
    src.write_text(
        "import instantonkit as ik\n"
        "lump = ik.bpst((0.0, 0.0, 0.0, 0.0), 1.0)\n"
        "def make():\n"
        "    return lump.conjugate()\n"
    )
    status = cli.main(["verify", f"{src}:make", "--charge", "-1", "--no-routes"])
    out = capsys.readouterr().out
    assert status == 0 and "|Q + 1|" in out and "verdict: PASSED" in out


def test_verify_with_a_tiny_budget_exits_inconclusive(bpst_file, capsys):
    status = cli.main(["verify", bpst_file, "--charge-tol", "1e-12", "--budget", "20000", "--no-routes", "--json"])
    d = json.loads(capsys.readouterr().out)
    assert d["verdict"] == "INCONCLUSIVE" and status == 3 and d["advice"]


@pytest.mark.parametrize(
    "argv",
    [
        ["--rtol", "-1"],
        ["--bogus"],
        ["verify"],
        ["verify", "no_such_module_for_instantonkit:field"],
        ["verify", "nocolon"],
        ["verify", "missing.npz"],
        ["verify", "numpy:pi"],
        ["verify", "instantonkit:bpst", "--center", "1,2,x,4"],
        ["verify", "instantonkit:bpst", "--budget", "ten"],
        ["verify", "instantonkit:bpst", "--scale", "-1"],
    ],
)
def test_bad_arguments_exit_2_with_one_line(argv, capsys):
    status = cli.main(argv)
    captured = capsys.readouterr()
    assert status == 2 and captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("python -m instantonkit: error:") and "Traceback" not in captured.err
