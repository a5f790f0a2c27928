"""Specification of ``python -m instantonkit``: the default report prints and passes."""

from __future__ import annotations

import json

import numpy as np

from instantonkit import __main__ as cli


def test_demo_configuration_is_exact_charge_three_data():
    # multi_instanton solves the ADHM constraint to <= 1e-12 (issue 2); charge k = 3
    data = cli.demo_configuration()
    assert data.k == 3 and data.constraint_residual() <= 1e-12
    assert np.allclose(data.centers(), cli.DEMO_CENTERS)


def test_main_prints_a_passing_report_with_the_required_rows(capsys):
    # Q = 3, S = 24 pi^2 for exact ADHM data (Atiyah, Hitchin, Drinfeld, Manin 1978)
    status = cli.main(["--no-routes"])
    out = capsys.readouterr().out
    assert status == 0
    for row in ("topological charge Q", "action / 8 pi^2", "self-duality residual", "ADHM constraint residual", "PASSED"):
        assert row in out


def test_main_json_output_is_a_plain_dict(capsys):
    # a loose tolerance keeps this fast: the verdict may then fail on the error bound, the dict stays plain
    status = cli.main(["--rtol", "1e-3", "--no-routes", "--json"])
    d = json.loads(capsys.readouterr().out)
    assert d["nearest_integer"] == 3 and isinstance(d["passed"], bool) and status == (0 if d["passed"] else 1)
    assert isinstance(d["charge"], dict) and isinstance(d["reasons"], list)
