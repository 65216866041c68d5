"""Instant start: what a bare ``import afterlook`` and ``afterlook --help``/``--version`` load.

Each check runs in a fresh interpreter (``sys.executable``), since other tests
in this process have imported everything already. The reference is Python's
own record of loaded modules, ``sys.modules``.
"""

from __future__ import annotations

import json
import subprocess
import sys

HEAVY = ("numpy", "pandas", "scipy", "scipy.stats", "scipy.linalg", "sklearn", "textual", "rich", "pyarrow",
         "jsonschema")


def loaded_after(code: str) -> dict:
    probe = f"""
import json, sys
{code}
print(json.dumps({{m: m in sys.modules for m in {list(HEAVY)!r}}}))
"""
    proc = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


def test_import_afterlook_loads_no_ui_no_scikit_learn_no_scipy_stats():
    loaded = loaded_after("import afterlook; afterlook.__version__")
    assert not any(loaded[m] for m in ("textual", "sklearn", "scipy.stats")), loaded
    # the package root is the version and lazy names only: nothing numeric at all
    assert not any(loaded.values()), loaded


def test_help_and_version_import_no_numerics():
    for argv in (["--help"], ["--version"], ["fit", "--help"], ["suggest", "--help"]):
        code = f"""
import contextlib, io
from afterlook.cli.main import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main({argv!r})
    except SystemExit:
        pass
"""
        loaded = loaded_after(code)
        assert not any(loaded.values()), (argv, loaded)


def test_the_public_operations_load_what_they_need_when_called():
    # Guards the checks above against a probe that sees nothing: using the API loads numpy and pandas.
    loaded = loaded_after("import afterlook; afterlook.load_model")
    assert loaded["numpy"] and loaded["pandas"]


def test_misses_loads_neither_scikit_learn_nor_scipy_stats_nor_the_workbench(demo_written):
    # scikit-learn's import alone was about half a second of the command.
    code = f"""
import contextlib, io
from afterlook.cli.main import main
with contextlib.redirect_stdout(io.StringIO()):
    assert main(["misses", {str(demo_written.model)!r}, {str(demo_written.cases)!r}]) == 0
"""
    loaded = loaded_after(code)
    assert loaded["numpy"] and loaded["pandas"]  # it did run
    assert not any(loaded[m] for m in ("sklearn", "scipy.stats", "textual")), loaded
    # scipy.linalg (~0.13 s) is not needed to score: the density uses numpy's LAPACK; and a model
    # file that passes the plain structural check never imports jsonschema (~0.05 s).
    assert not loaded["scipy"] and not loaded["jsonschema"], loaded


def test_a_damaged_model_file_still_goes_through_jsonschema(demo_written, tmp_path):
    # The fast path must not weaken the check: a file the plain check doubts is judged by jsonschema,
    # whose message names the place.
    doc = json.loads(demo_written.model.read_text("utf-8"))
    doc["model"]["mean"][0] = "12.5"
    bad = tmp_path / "model.json"
    bad.write_text(json.dumps(doc), encoding="utf-8")
    code = f"""
import contextlib, io
from afterlook.cli.main import main
err = io.StringIO()
with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
    assert main(["misses", {str(bad)!r}, {str(demo_written.cases)!r}]) == 2
assert "does not match the afterlook-model format at model/mean/0" in err.getvalue(), err.getvalue()
"""
    loaded = loaded_after(code)
    assert loaded["jsonschema"], loaded
