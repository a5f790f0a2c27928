"""Every ```python example of the documentation pages and the README runs as written.

Each fenced ``python`` block of README.md and of docs/**/*.md (the guide, the start page) is one test
case: it is executed in a fresh namespace, in a temporary working directory (so files an example writes
land there), with matplotlib on its file backend.  A block runs as a script
would, with ``__name__ == "__main__"``.

A block that must not run is marked on the line right before its opening fence with

    <!-- no-run: the reason -->

(an HTML comment, invisible on the site and on GitHub).  Use it sparingly: for a sketch with
placeholders (``...``), or an example that needs a cluster or more than a few seconds.  The reason is
required, and it is reported as the skip reason.  Blocks fenced with anything but ``python`` (shell
commands, printed output) are never run.

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


def _resolve(path: str):
    """The object a dotted ``::: path`` of an API page names (a module, or an attribute of one)."""
    import importlib

    parts = path.split(".")
    for i in range(len(parts), 0, -1):
        try:
            obj = importlib.import_module(".".join(parts[:i]))
        except ImportError:
            continue
        for name in parts[i:]:
            obj = getattr(obj, name)
        return obj
    raise ImportError(path)


def test_api_pages_name_every_public_name():
    import instantonkit

    text = ""
    for page in glob.glob(os.path.join(ROOT, "docs", "api", "*.md")):
        with open(page, encoding="utf-8") as fh:
            text += fh.read()
    objects = [_resolve(p) for p in re.findall(r"^::: (instantonkit[\w.]*)", text, flags=re.M)]
    # a public name is documented when its object has an entry (modules under their folder's path), or
    # when a documented module re-exports it (instantonkit.ensemble is instantonkit.cluster.ensemble)
    documented = {id(o) for o in objects}
    for o in objects:
        documented |= {id(getattr(o, n)) for n in getattr(o, "__all__", ()) if hasattr(o, n)}
    missing = sorted(n for n in instantonkit.__all__ if id(getattr(instantonkit, n)) not in documented)
    assert not missing, f"public names without an API entry in docs/api/*.md: {missing}"
