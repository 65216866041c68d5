"""A folder is a layer: no module imports from a layer above its own.

Every module under src/afterlook is read with the standard library's
``ast`` (nothing is imported), each ``import`` / ``from ... import`` is
resolved to an absolute module name (relative ones against the module's own
package, also inside functions), and checked against the layer order:

    core  <  store  <  engines  <  analysis  <  demo  <  cli, tui

core may import nothing of afterlook but itself; store may use core;
analysis may use core, store and engines; cli and tui sit on top.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[2] / "src" / "afterlook"

#: For each layer, the afterlook layers it must not import.
FORBIDDEN = {
    "core": ("store", "engines", "analysis", "demo", "cli", "tui"),
    "store": ("engines", "analysis", "demo", "cli", "tui"),
    "engines": ("analysis", "demo", "cli", "tui"),
    "analysis": ("demo", "cli", "tui"),
    "demo": ("cli", "tui"),
}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def imported_modules(source: str, module: str, is_package: bool) -> list[tuple[int, str]]:
    """``(line, absolute module)`` for every import in ``source`` (relative ones resolved)."""
    package = module if is_package else module.rpartition(".")[0]
    out = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            out += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            # `from . import x` / `from ..store import tables` may name submodules
            out.append((node.lineno, target))
            out += [(node.lineno, f"{target}.{alias.name}") for alias in node.names]
    return out


def violations(source: str, module: str, is_package: bool = False) -> list[str]:
    parts = module.split(".")
    layer = parts[1] if len(parts) > 1 else ""
    banned = FORBIDDEN.get(layer, ())
    found = []
    for line, target in imported_modules(source, module, is_package):
        t = target.split(".")
        if len(t) > 1 and t[0] == "afterlook" and t[1] in banned:
            found.append(f"{module}:{line} imports {target}")
    return sorted(set(found))


def all_modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        yield path, module_name(path)


@pytest.mark.parametrize("path,module", list(all_modules()), ids=lambda v: v if isinstance(v, str) else "")
def test_no_module_imports_a_layer_above_its_own(path, module):
    source = path.read_text("utf-8")
    assert violations(source, module, path.name == "__init__.py") == []


def test_the_checker_catches_a_relative_import_upwards():
    # A core module reaching into store through a relative import, inside a function.
    source = "def f():\n    from ..store import tables\n    return tables\n"
    assert violations(source, "afterlook.core.recipe") == ["afterlook.core.recipe:2 imports afterlook.store",
                                                           "afterlook.core.recipe:2 imports afterlook.store.tables"]
    assert violations("from ...cli import main\n", "afterlook.analysis.sub.mod") == [
        "afterlook.analysis.sub.mod:1 imports afterlook.cli", "afterlook.analysis.sub.mod:1 imports afterlook.cli.main"]
    assert violations("from afterlook.tui import app\n", "afterlook.analysis.trial") != []
    assert violations("from ..core import gaussian\n", "afterlook.analysis.trial") == []


def test_the_package_root_holds_only_the_public_api_version_and_caution():
    roots = sorted(p.name for p in PACKAGE.glob("*.py"))
    assert roots == ["__init__.py", "__main__.py", "_version.py", "cautions.py"]


def test_no_module_is_over_about_500_lines():
    long = {module: n for path, module in all_modules()
            if (n := len(path.read_text("utf-8").splitlines())) > 520}
    assert long == {}


def test_no_two_modules_share_a_file_name():
    names = [p.name for p, _ in all_modules() if p.name != "__init__.py"]
    assert sorted({n for n in names if names.count(n) > 1}) == []
