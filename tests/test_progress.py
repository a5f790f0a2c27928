"""Progress of long lattice work: a line on a terminal, silent otherwise or when asked, or a callable."""

import pytest

import instantonkit as ik
from instantonkit.core import _progress


def test_a_callable_is_called_after_every_time_slice():
    seen = []
    ik.lattice_links(
        ik.bpst_field(size=1.0), (2, 2, 2, 3), 0.5, boundary="open", progress=lambda d, t: seen.append((d, t))
    )
    assert seen == [(1, 3), (2, 3), (3, 3)]


def test_true_writes_a_line_to_stderr_ending_with_a_newline(capsys):
    ik.lattice_links(ik.bpst_field(size=1.0), (2, 2, 2, 2), 0.5, boundary="open", progress=True)
    err = capsys.readouterr().err
    assert "lattice start, time slices: 2/2 (100 %)" in err and err.endswith("\n")


def test_false_and_a_non_terminal_default_are_silent(capsys, monkeypatch):
    monkeypatch.delenv("INSTANTONKIT_PROGRESS", raising=False)
    ik.lattice_links(ik.bpst_field(size=1.0), (2, 2, 2, 2), 0.5, boundary="open", progress=False)
    ik.lattice_links(ik.bpst_field(size=1.0), (2, 2, 2, 2), 0.5, boundary="open")  # pytest's stderr is no terminal
    assert capsys.readouterr().err == ""


def test_the_environment_turns_the_default_on_or_off(monkeypatch):
    monkeypatch.setenv("INSTANTONKIT_PROGRESS", "1")
    assert _progress.sink(None, "x") is not None
    monkeypatch.setenv("INSTANTONKIT_PROGRESS", "0")
    assert _progress.sink(None, "x") is None


def test_a_progress_of_another_type_is_refused():
    with pytest.raises(TypeError, match="progress must be None, a bool or a callable.*found str"):
        _progress.sink("yes", "x")


@pytest.mark.filterwarnings("ignore::instantonkit.lattice.starts.BoundaryActionWarning")  # a 2^4 torus: any links do
def test_a_flow_and_a_cooling_run_report_each_step():
    links = ik.lattice_links(ik.bpst_field(size=1.0), (2, 2, 2, 2), 0.5)
    flow, sweeps = [], []
    ik.wilson_flow(links, 0.03, 0.01, progress=lambda d, t: flow.append((d, t)))
    ik.cool(links, 2, progress=lambda d, t: sweeps.append((d, t)))
    assert flow == [(1, 3), (2, 3), (3, 3)] and sweeps == [(1, 2), (2, 2)]
