"""The checked-in demo casebook (casebooks/) is what scripts/make_demo_casebook.py writes, byte for byte.

Outside references: the ``json`` module reads the files; the failure kinds
come from the demo generator (``generate(seed=7).kinds``), not from afterlook's
analysis.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
SCRIPT = REPO / "scripts" / "make_demo_casebook.py"
CHECKED_IN = REPO / "casebooks"
FILES = ("pump-stations.casebook.json", "pump-stations.report.md", "pump-stations.model-with-feature.json")


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo_casebook")
    proc = subprocess.run([sys.executable, str(SCRIPT), "--out-dir", str(out)], capture_output=True, text=True,
                          timeout=600, stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, proc.stderr
    return out


@pytest.mark.parametrize("name", FILES)
def test_checked_in_copy_has_not_drifted(regenerated, name):
    fresh = (regenerated / name).read_bytes()
    kept = (CHECKED_IN / name).read_bytes()
    assert fresh == kept, (f"casebooks/{name} differs from what scripts/make_demo_casebook.py writes now; "
                           "if the change is intended, run: .venv/bin/python scripts/make_demo_casebook.py --force")


def test_regenerating_twice_gives_the_same_bytes(regenerated, tmp_path):
    proc = subprocess.run([sys.executable, str(SCRIPT), "--out-dir", str(tmp_path)], capture_output=True, text=True,
                          timeout=600, stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, proc.stderr
    for name in FILES:
        assert (tmp_path / name).read_bytes() == (regenerated / name).read_bytes(), name


def test_the_demo_book_records_the_three_reviews(demo):
    doc = json.loads((CHECKED_IN / FILES[0]).read_text(encoding="utf-8"))  # json module
    entries = {e["case"]: e for e in doc["entries"]}
    by_status = {e["status"]: e for e in entries.values()}
    assert sorted(by_status) == ["explained", "label-disputed", "needs-signal"] and len(entries) == 3
    explained = by_status["explained"]
    assert explained["case"] == demo.worst
    assert explained["derived_feature"] == {"name": demo.name, "expression": demo.expression}
    assert explained["after"]["flagged"] is True and explained["before"]["flagged"] is False
    assert demo.kinds[by_status["needs-signal"]["case"]] == "bearing_wear"
    assert "three-way relation" in by_status["needs-signal"]["note"]
    assert demo.kinds[by_status["label-disputed"]["case"]] == "disputed"
    assert {e["reviewer"] for e in entries.values()} == {"demo-reviewer"}


@pytest.mark.parametrize("name", FILES)
def test_no_machine_paths_inside_the_files(name):
    text = (CHECKED_IN / name).read_text(encoding="utf-8")
    for marker in ("/tmp", "/home/", "/Users/", "\\\\", str(REPO)):
        assert marker not in text, f"{name} holds {marker!r}"


def test_check_passes_with_the_model_with_feature_and_fails_with_the_demo_model(demo, run_cli, parse_json):
    book = CHECKED_IN / FILES[0]
    code, out, err = run_cli("casebook", "check", book, "--model", CHECKED_IN / FILES[2], "--cases", demo.cases,
                             "--json")
    assert code == 0, err
    assert parse_json(out)["ok"] is True
    code, out, err = run_cli("casebook", "check", book, "--model", demo.model, "--cases", demo.cases, "--json")
    assert code == 1, err
    assert parse_json(out)["regressed"] == [demo.worst]
