"""The shape of the house: no import circles, no upward imports, no private imports across modules.

The floors are written once, in DEVELOPERS.md (the block under "### Floors"); this test parses them and
every import statement of the package (function-level ones included) with ``ast``.  Rules (common
practice for layered libraries, our own choice of floors):

* a module imports only modules on a strictly lower floor, except modules of the same subpackage
  (``instantonkit.cluster.*``) among themselves and package ``__init__`` files collecting names;
* the package's import graph has no cycle;
* ``from .x import _name`` only when ``x`` is a ``_``-module that exists to be shared, or inside one
  subpackage.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "instantonkit"


def _floors() -> dict[str, int]:
    text = (ROOT / "DEVELOPERS.md").read_text()
    block = text.split("### Floors", 1)[1].split("```", 2)[1]
    floors: dict[str, int] = {}
    for line in block.splitlines():
        m = re.match(r"\s*floor (\d+):\s*(.+)$", line)
        if m:
            for name in m.group(2).split(","):
                floors[name.strip().split(" ")[0]] = int(m.group(1))
    return floors


def _module_name(path: Path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path: Path) -> list[tuple[str, tuple[str, ...], int]]:
    """(imported module, imported names, line) for every import of the package in ``path``."""
    mod = _module_name(path)
    is_pkg = path.name == "__init__.py"
    package = mod if is_pkg else mod.rsplit(".", 1)[0]
    out = []
    for node in ast.walk(ast.parse(path.read_text(), str(path))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("instantonkit"):
                continue
            names = tuple(a.name for a in node.names)
            if node.module is None or target == package:  # "from . import x, y": submodules
                for name in names:
                    out.append((f"{target}.{name}", (), node.lineno))
            else:
                out.append((target, names, node.lineno))
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("instantonkit"):
                    out.append((a.name, (), node.lineno))
        elif isinstance(node, ast.Call) and getattr(node.func, "attr", None) == "import_module":
            if node.args and isinstance(node.args[0], ast.Constant) and isinstance(node.args[0].value, str):
                name = node.args[0].value
                if name.startswith("."):
                    name = package + name
                if name.startswith("instantonkit"):
                    out.append((name, (), node.lineno))
    return out


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in PKG.rglob("*.py")}


def _floor_key(mod: str) -> str:
    """The name used in the floor table: the first component below the package (subpackages as one)."""
    parts = mod.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _resolve(target: str, modules: dict[str, Path]) -> str | None:
    """The module a dotted target refers to ('instantonkit.fields.hook' -> 'instantonkit.fields')."""
    while target and target not in modules:
        target = target.rpartition(".")[0]
    return target or None


def test_every_module_has_a_floor():
    floors = _floors()
    missing = sorted({_floor_key(m) for m in _modules()} - set(floors) - {"__init__"})
    assert not missing, f"modules without a floor in DEVELOPERS.md: {missing}"


def test_no_upward_or_same_floor_imports():
    floors, modules = _floors(), _modules()
    bad = []
    for mod, path in modules.items():
        key = _floor_key(mod)
        if key == "__init__" or mod == f"instantonkit.{key}" and path.name == "__init__.py" and key not in floors:
            continue
        for target, _names, line in _imports(path):
            tmod = _resolve(target, modules)
            if tmod is None or tmod == "instantonkit":
                continue
            tkey = _floor_key(tmod)
            if tkey == key:  # within one subpackage
                continue
            if path.name == "__init__.py" and mod == "instantonkit":
                continue
            if floors[tkey] >= floors[key]:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {tmod} (floor {floors[tkey]} >= {floors[key]})")
    assert not bad, "imports that are not downward:\n" + "\n".join(bad)


def test_no_import_cycle():
    modules = _modules()
    graph = {m: set() for m in modules}
    for mod, path in modules.items():
        for target, _names, _line in _imports(path):
            tmod = _resolve(target, modules)
            if tmod and tmod != mod and not (mod == "instantonkit" or tmod == "instantonkit"):
                graph[mod].add(tmod)
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m):
        state[m] = 1
        stack.append(m)
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                raise AssertionError("import cycle: " + " -> ".join(stack[stack.index(n) :] + [n]))
            if n not in state:
                visit(n)
        stack.pop()
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m)


def test_private_names_are_imported_only_from_shared_private_modules():
    modules = _modules()
    bad = []
    for mod, path in modules.items():
        for target, names, line in _imports(path):
            tmod = _resolve(target, modules)
            if tmod is None:
                continue
            private = [n for n in names if n.startswith("_")]
            shared = tmod.rsplit(".", 1)[-1].startswith("_")
            same_pkg = _floor_key(tmod) == _floor_key(mod) and mod != "instantonkit"
            if private and not shared and not same_pkg:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {private} from {tmod}")
    assert not bad, "private names imported across modules:\n" + "\n".join(bad)


def _nonblank(path: Path) -> int:
    return sum(1 for line in path.read_text().splitlines() if line.strip())


@pytest.mark.parametrize("limit", [600])
def test_no_module_is_too_long_to_hold_in_ones_head(limit):
    # lines that are not blank (the formatter's wrapping at 120 columns adds lines, not content)
    long = {str(p.relative_to(ROOT)): n for p in PKG.rglob("*.py") if (n := _nonblank(p)) > limit}
    assert not long, f"modules over {limit} non-blank lines: {long}"
