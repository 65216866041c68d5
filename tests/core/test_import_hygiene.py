"""The core is pure numerics: importing it must not pull in the UI or pandas.

Each check runs in a fresh interpreter (``sys.executable``) so that modules
imported by other tests in this process cannot hide or fake a result.
"""

from __future__ import annotations

import ast
import json
import subprocess
import sys
from pathlib import Path

import pytest

import afterlook.core

CORE_DIR = Path(afterlook.core.__file__).resolve().parent
PACKAGE_DIR = CORE_DIR.parent
UI_MODULES = ("textual", "rich")
FORBIDDEN_IN_CORE = ("textual", "rich", "pandas", "pyarrow", "plotext")


def core_module_names() -> list[str]:
    names = ["afterlook.core"]
    for path in sorted(CORE_DIR.glob("*.py")):
        if path.name != "__init__.py":
            names.append(f"afterlook.core.{path.stem}")
    return names


def run_python(code: str) -> dict:
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_core_has_the_expected_modules():
    # Guards the tests below against silently checking nothing.
    names = core_module_names()
    for expected in ("errors", "expressions", "gaussian", "thresholds", "explain", "recipe"):
        assert f"afterlook.core.{expected}" in names


def test_importing_the_core_loads_no_ui_library():
    code = f"""
import importlib, json, sys
for name in {core_module_names()!r}:
    importlib.import_module(name)
print(json.dumps({{m: m in sys.modules for m in {list(UI_MODULES)!r}}}))
"""
    loaded = run_python(code)
    assert loaded == {m: False for m in UI_MODULES}


def test_core_modules_load_no_pandas_or_ui_on_their_own():
    # Load the core under a bare stand-in for the ``afterlook`` package, so
    # that whatever the package's own __init__ imports (the notebook API uses
    # pandas) does not count against the core.
    code = f"""
import importlib, json, sys, types
pkg = types.ModuleType("afterlook")
pkg.__path__ = [{str(PACKAGE_DIR)!r}]
sys.modules["afterlook"] = pkg
for name in {core_module_names()!r}:
    importlib.import_module(name)
print(json.dumps({{m: m in sys.modules for m in {list(FORBIDDEN_IN_CORE)!r}}}))
"""
    loaded = run_python(code)
    assert loaded == {m: False for m in FORBIDDEN_IN_CORE}


def _imported_roots(path: Path) -> set[str]:
    roots = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            roots.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            roots.add(node.module.split(".")[0])
    return roots


@pytest.mark.parametrize("path", sorted(CORE_DIR.glob("*.py")), ids=lambda p: p.name)
def test_core_source_never_imports_pandas_or_ui_even_lazily(path):
    # Static check: also covers imports inside functions, which the
    # subprocess check above only sees when the function runs.
    assert not _imported_roots(path) & set(FORBIDDEN_IN_CORE)


def test_the_named_power_transforms_load_no_scipy():
    """boxcox(x, p) and yeojohnson(x, p) are evaluated in numpy: a candidate search that writes them must not
    pay scipy.special's or scipy.stats' import (tests/reference/test_frozen_reference.py checks their numbers
    against scipy)."""
    code = ("import sys; from afterlook.core.frozen import apply_named; "
            "apply_named('boxcox', [0.5, 2.0], -0.05); apply_named('yeojohnson', [1.0, -2.0], 0.5); "
            "print([m for m in ('scipy.special', 'scipy.stats') if m in sys.modules])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
