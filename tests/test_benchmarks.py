"""The benchmark entry point runs and prints one table; timings are printed, never checked."""

import os
import subprocess
import sys
import textwrap

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

from benchmarks import run as bench_run  # noqa: E402


def test_every_benchmark_module_is_discovered():
    assert {"bench_fields", "bench_lattice"} <= set(bench_run.discover())


# the default run smokes one cheap module end to end (fields, about 3 s); the long run smokes them all
@pytest.mark.parametrize(
    "only", [["--only", "fields"], pytest.param([], marks=pytest.mark.long)], ids=["fields", "all"]
)
def test_smoke_run_from_the_repository_root_prints_a_markdown_table_with_rows(only):
    out = subprocess.run(
        [sys.executable, "-m", "benchmarks", "--smoke", "--markdown", *only],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert out.returncode == 0, out.stderr[-3000:]
    lines = out.stdout.splitlines()
    assert lines[0].startswith("Machine: ") and "mode: smoke" in lines[0]
    head = lines.index("| figure | value | unit | ratio | reference |")
    rows = [ln for ln in lines[head + 2 :] if ln.startswith("| ")]
    for module in only[1:] or ["fields", "lattice"]:  # the modules asked for (all: at least these two)
        assert any(r.startswith(f"| {module}: ") for r in rows), module
    assert all(r.count(" | ") == 4 for r in rows)  # five cells per row
    assert not any("FAILED" in r for r in rows)


@pytest.fixture
def fake_package(tmp_path, monkeypatch):
    pkg = tmp_path / "fakebench"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "bench_ok.py").write_text(
        textwrap.dedent("""
        def run(quick=False):
            n = 10 if quick else 1000
            return [{"figure": "points", "value": float(n), "unit": "n", "ratio": 0.5, "reference": "a | b"},
                    {"figure": "bare", "value": 3.0}]
    """)
    )
    (pkg / "bench_broken.py").write_text("def run(quick=False):\n    raise RuntimeError('no luck')\n")
    (pkg / "bench_norun.py").write_text("X = 1\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    return "fakebench"


def test_collect_passes_quick_and_tags_rows_with_their_module(fake_package):
    rows = bench_run.collect(quick=True, package=fake_package, names=["bench_ok"])
    assert [r["benchmark"] for r in rows] == ["ok", "ok"]
    assert rows[0]["value"] == 10.0


def test_collect_fills_missing_columns(fake_package):
    bare = bench_run.collect(package=fake_package, names=["bench_ok"])[1]
    assert (bare["unit"], bare["ratio"], bare["reference"]) == ("", None, "")


def test_a_failing_module_becomes_a_failed_row_and_the_others_still_run(fake_package):
    rows = bench_run.collect(package=fake_package, names=["bench_broken", "bench_norun", "bench_ok"])
    figures = [r["figure"] for r in rows]
    assert figures[0] == "FAILED: RuntimeError: no luck"
    assert figures[1].startswith("FAILED: AttributeError") and "no run(quick)" in figures[1]
    assert figures[2:] == ["points", "bare"]


def test_only_selects_by_short_name_and_rejects_unknown_names(fake_package):
    names = ["bench_ok", "bench_broken"]
    assert len(bench_run.collect(package=fake_package, names=names, only=["ok"])) == 2
    with pytest.raises(ValueError, match="unknown benchmark 'nope'"):
        bench_run.collect(package=fake_package, names=names, only=["nope"])


def test_text_table_has_a_header_and_one_line_per_row(fake_package):
    rows = bench_run.collect(package=fake_package, names=["bench_ok"])
    lines = bench_run.format_table(rows).splitlines()
    assert lines[0].split() == ["figure", "value", "unit", "ratio", "reference"]
    assert len(lines) == 2 + len(rows) and "ok: points" in lines[2]


def test_markdown_table_escapes_pipes(fake_package):
    rows = bench_run.collect(package=fake_package, names=["bench_ok"])
    md = bench_run.format_markdown(rows).splitlines()
    assert md[1] == "| --- | ---: | --- | ---: | --- |"
    assert md[2] == "| ok: points | 1000 | n | 0.5 | a \\| b |"


def test_main_exits_nonzero_when_a_benchmark_failed(fake_package, monkeypatch, capsys):
    real = bench_run.collect
    monkeypatch.setattr(
        bench_run, "collect", lambda quick, **kw: real(quick, package=fake_package, names=["bench_broken"])
    )
    assert bench_run.main(["--quick"]) == 1
    assert "FAILED: RuntimeError: no luck" in capsys.readouterr().out


def test_collect_records_wall_and_cpu_seconds_per_module(fake_package):
    timings: dict = {}
    bench_run.collect(package=fake_package, names=["bench_ok", "bench_broken"], timings=timings)
    assert list(timings) == ["bench_ok", "bench_broken"]
    assert all(w >= 0.0 and c >= 0.0 for w, c in timings.values())


def test_quick_summary_gives_the_total_wall_time_and_says_quick_targets_about_a_minute():
    lines = bench_run.summary_lines({"bench_a": (20.0, 15.0), "bench_b": (40.5, 30.0)}, "quick")
    assert lines[0].startswith("total wall time 60.5 s (CPU 45.0 s;") and "per module: a 20.0 s, b 40.5 s" in lines[0]
    assert "about 1 minute" in lines[1] and "without --quick for the reference figures" in lines[1]


def test_full_and_smoke_summaries_have_no_quick_mode_line():
    for mode in ("full", "smoke"):
        lines = bench_run.summary_lines({"bench_a": (1.0, 1.0)}, mode)
        assert len(lines) == 1 and lines[0].startswith("total wall time 1.0 s")


def test_main_prints_the_total_wall_time_after_the_table(fake_package, monkeypatch, capsys):
    real = bench_run.collect
    monkeypatch.setattr(
        bench_run, "collect", lambda quick, **kw: real(quick, package=fake_package, names=["bench_ok"], **kw)
    )
    assert bench_run.main(["--quick"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2].startswith("total wall time ") and "per module: ok " in out[-2]
    assert out[-1].startswith("quick mode: ") and "about 1 minute" in out[-1]
