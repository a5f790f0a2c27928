"""The shape of the house: no import circles, nothing upward between folders or inside one, no private imports.

The floors are written once, in DEVELOPERS.md (the block under "### Floors"); this test parses them and
every import statement of the package (function-level ones included) with ``ast``.  Rules (common
practice for layered libraries, our own choice of floors):

* a folder (subpackage) imports only folders on a strictly lower floor; the top-level modules count as
  folders of their own;
* inside a folder a module imports only modules on a lower step of the folder's chain (``a < b``);
  folders without a chain (``cluster/``) import among themselves freely; ``__init__`` files collect names;
* the package's import graph has no cycle;
* ``from .x import _name`` only when ``x`` is a ``_``-module that exists to be shared, or inside one folder.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PKG = ROOT / "instantonkit"


def _floors() -> tuple[dict[str, int], dict[str, dict[str, int]]]:
    """(floor of each folder or top-level module, {folder: {module: step}})."""
    text = (ROOT / "DEVELOPERS.md").read_text()
    block = text.split("### Floors", 1)[1].split("```", 2)[1]
    units: dict[str, int] = {}
    steps: dict[str, dict[str, int]] = {}
    for line in block.splitlines():
        m = re.match(r"\s*floor (\d+):\s*(.+)$", line)
        if not m:
            continue
        floor = int(m.group(1))
        for entry in m.group(2).split(";"):
            entry = entry.strip()
            name, _, chain = entry.partition("=")
            name = name.strip().rstrip("/")
            units[name] = floor
            if chain.strip():
                steps[name] = {
                    mod.strip(): k
                    for k, group in enumerate(chain.split("<"))
                    for mod in group.split(",")
                    if mod.strip()
                }
    return units, steps


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
            if node.module is not None and target != package:  # "from . import x" names submodules only
                out.append((target, names, node.lineno))
            for name in names:  # a name may be a submodule ("from ..adhm import moduli")
                out.append((f"{target}.{name}", (), node.lineno))
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


def _unit(mod: str) -> str:
    """The folder of a module ('instantonkit.lattice.starts' -> 'lattice'), or the top-level module itself."""
    parts = mod.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _short(mod: str) -> str:
    parts = mod.split(".")
    return parts[2] if len(parts) > 2 else ""


def _resolve(target: str, modules: dict[str, Path]) -> str | None:
    """The module a dotted target refers to ('instantonkit.engine.fields.hook' -> 'instantonkit.engine.fields')."""
    while target and target not in modules:
        target = target.rpartition(".")[0]
    return target or None


def _is_init(path: Path) -> bool:
    return path.name == "__init__.py"


def test_every_folder_and_module_has_a_floor():
    units, steps = _floors()
    missing = []
    for mod, path in _modules().items():
        unit = _unit(mod)
        if unit == "__init__":
            continue
        if unit not in units:
            missing.append(unit)
        elif unit in steps and not _is_init(path) and _short(mod) not in steps[unit]:
            missing.append(f"{unit}/{_short(mod)}")
    assert not missing, f"folders or modules without a floor in DEVELOPERS.md: {sorted(set(missing))}"


def test_folders_import_only_folders_below():
    units, _ = _floors()
    modules = _modules()
    bad = []
    for mod, path in modules.items():
        unit = _unit(mod)
        if unit == "__init__":
            continue
        for target, _names, line in _imports(path):
            tmod = _resolve(target, modules)
            if tmod is None or tmod == "instantonkit":
                continue
            tunit = _unit(tmod)
            if tunit == unit:
                continue
            if units[tunit] >= units[unit]:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {tmod} (floor {units[tunit]} >= {units[unit]})")
    assert not bad, "imports between folders that are not downward:\n" + "\n".join(sorted(set(bad)))


def test_modules_inside_a_folder_import_only_lower_steps():
    _, steps = _floors()
    modules = _modules()
    bad = []
    for mod, path in modules.items():
        unit = _unit(mod)
        if unit not in steps or _is_init(path):
            continue
        for target, _names, line in _imports(path):
            tmod = _resolve(target, modules)
            if tmod is None or _unit(tmod) != unit or _is_init(modules[tmod]):
                continue
            a, b = steps[unit][_short(mod)], steps[unit].get(_short(tmod), 10**6)
            if b >= a:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {tmod} (step {b} >= {a} in {unit}/)")
    assert not bad, "imports inside a folder that are not downward:\n" + "\n".join(sorted(set(bad)))


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
            private = [n for n in names if n.startswith("_") and f"{tmod}.{n}" not in modules]
            shared = tmod.rsplit(".", 1)[-1].startswith("_")
            same = _unit(tmod) == _unit(mod) and mod != "instantonkit"
            if private and not shared and not same:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {private} from {tmod}")
    assert not bad, "private names imported across modules:\n" + "\n".join(bad)


def _lines(path: Path) -> int:
    return len(path.read_text().splitlines())


@pytest.mark.parametrize("limit", [600])
def test_no_module_is_too_long_to_hold_in_ones_head(limit):
    # physical lines, blank ones and docstrings included: what a reader scrolls through
    long = {str(p.relative_to(ROOT)): n for p in PKG.rglob("*.py") if (n := _lines(p)) > limit}
    assert not long, f"modules over {limit} lines: {long}"
