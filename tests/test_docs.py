"""Every ```python example of the documentation pages and the README runs as written.

Each fenced ``python`` block of README.md and of docs/**/*.md (the guide, the start page, the README
draft) is one test case: it is executed in a fresh namespace, in a temporary working directory (so
files an example writes land there), with matplotlib on its file backend.  A block runs as a script
would, with ``__name__ == "__main__"``.

A block that must not run is marked on the line right before its opening fence with

    <!-- no-run: the reason -->

(an HTML comment, invisible on the site and on GitHub).  Use it sparingly: for a sketch with
placeholders (``...``), or an example that needs a cluster or more than a few seconds.  The reason is
required, and it is reported as the skip reason.  Blocks fenced with anything but ``python`` (shell
commands, printed output) are never run.

README.md is about to be rewritten as a short front door (its draft is docs/_readme_draft.md, whose
blocks all run); until then its blocks cannot carry markers, so ``README_UNTIL_REWRITE`` below gives
the same decisions for three of them, keyed by a line of their code.  Entries that match no block are
ignored, so the rewrite needs no change here; delete the table then.

The API pages (docs/api/*.md) must also name every public name of ``instantonkit.__all__``, so the
reference cannot silently lose one.
"""

from __future__ import annotations

import glob
import os
import re

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
PAGES = sorted([os.path.join(ROOT, "README.md")] + glob.glob(os.path.join(ROOT, "docs", "**", "*.md"), recursive=True))
NO_RUN = re.compile(r"^<!--\s*no-run:\s*(?P<reason>\S.*?)\s*-->\s*$")
FENCE = re.compile(r"^(?P<indent> *)```(?P<lang>[\w-]*)\s*$")


# (a line of the block's code, "skip" or "long", the reason) for the current README.md
README_UNTIL_REWRITE = [
    ("def ansatz(x, p):", "skip", "a sketch: its body is ``...`` and it uses undefined names"),
    ("from dask.distributed import Client", "skip", "starts a Dask cluster and computes a 100-member ensemble"),
    (
        'start = ik.lattice_start(data, (24,) * 4, 0.5, group="su3"',
        "long",
        "a 24^4 SU(3) window start and a 190 MB ILDG file (tens of seconds); runs with INSTANTONKIT_LONG=1",
    ),
]


def python_blocks(text: str) -> list[tuple[int, str, str | None]]:
    """(line number of the opening fence, code, no-run reason or None) of each ```python block."""
    lines = text.splitlines()
    blocks, i = [], 0
    while i < len(lines):
        m = FENCE.match(lines[i])
        if not m or not m["lang"]:
            i += 1
            continue
        start, lang, indent = i, m["lang"], m["indent"]
        i += 1
        body = []
        while i < len(lines) and lines[i].strip() != "```":
            body.append(lines[i][len(indent) :])
            i += 1
        i += 1  # the closing fence
        if lang != "python":
            continue
        marker = NO_RUN.match(lines[start - 1].strip()) if start > 0 else None
        blocks.append((start + 1, "\n".join(body) + "\n", marker["reason"] if marker else None))
    return blocks


def _cases():
    for page in PAGES:
        with open(page, encoding="utf-8") as fh:
            text = fh.read()
        rel = os.path.relpath(page, ROOT).replace(os.sep, "/")
        for line, code, reason in python_blocks(text):
            marks = [pytest.mark.skip(reason=f"no-run: {reason}")] if reason else []
            if rel == "README.md":
                for needle, kind, why in README_UNTIL_REWRITE:
                    if needle in code:
                        marks.append(pytest.mark.skip(reason=f"no-run: {why}") if kind == "skip" else pytest.mark.long)
            yield pytest.param(rel, line, code, id=f"{rel}:{line}", marks=marks)


@pytest.mark.parametrize(("page", "line", "code"), list(_cases()))
def test_example_runs(page, line, code, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("MPLBACKEND", "Agg")
    compiled = compile(code, f"{page}:{line}", "exec")
    exec(compiled, {"__name__": "__main__"})


def test_marker_and_fence_parsing():
    text = "a\n<!-- no-run: needs a cluster -->\n```python\nx = 1\n```\n```\nplain\n```\n    ```python\n    y = 2\n    ```\n"
    blocks = python_blocks(text)
    assert blocks == [(3, "x = 1\n", "needs a cluster"), (9, "y = 2\n", None)]


def test_api_pages_name_every_public_name():
    import instantonkit

    text = ""
    for page in glob.glob(os.path.join(ROOT, "docs", "api", "*.md")):
        with open(page, encoding="utf-8") as fh:
            text += fh.read()
    documented = set(re.findall(r"^::: instantonkit\.(\w+)", text, flags=re.M))
    # names re-exported from a documented submodule (instantonkit.ensemble is instantonkit.cluster.ensemble)
    for mod in documented & set(instantonkit.__all__):
        sub = getattr(instantonkit, mod)
        documented |= {n for n in getattr(sub, "__all__", ()) if getattr(instantonkit, n, None) is getattr(sub, n)}
    missing = sorted(set(instantonkit.__all__) - documented)
    assert not missing, f"public names without an API entry in docs/api/*.md: {missing}"
