"""The checked-in demo casebook (casebooks/) is what scripts/make_demo_casebook.py writes.

Compared as numbers, not bytes (``tests/numbers_compare.py``): JSON floats
within a relative tolerance of 1e-9, the report's numbers to the digits it
displays, every word and fingerprint exactly. Another machine's last bits
pass; a change of one number by 1e-6 relative fails (tested below).

Outside references: the ``json`` module reads the files; the failure kinds
come from the demo generator (``generate(seed=7).kinds``), not from afterlook's
analysis.
"""

from __future__ import annotations

import copy
import json
import math
import re
import subprocess
import sys
from pathlib import Path

import pytest
from numbers_compare import json_differences, json_text_differences, text_differences

import afterlook as api

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


def _differences(name: str, kept: str, fresh: str) -> list[str]:
    if name.endswith(".json"):
        return json_text_differences(kept, fresh)
    return text_differences(kept, fresh)


@pytest.mark.parametrize("name", FILES)
def test_checked_in_copy_has_not_drifted(regenerated, name):
    fresh = (regenerated / name).read_text(encoding="utf-8")
    kept = (CHECKED_IN / name).read_text(encoding="utf-8")
    problems = _differences(name, kept, fresh)
    assert not problems, (f"casebooks/{name} differs from what scripts/make_demo_casebook.py writes now:\n  "
                          + "\n  ".join(problems) + "\nif the change is intended, run: "
                          ".venv/bin/python scripts/make_demo_casebook.py --force")


def _floats(doc, path=()):
    """(path, value) of every float in a JSON document."""
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _floats(v, path + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _floats(v, path + (i,))
    elif isinstance(doc, float):
        yield path, doc


def _set(doc, path, value):
    for key in path[:-1]:
        doc = doc[key]
    doc[path[-1]] = value


@pytest.mark.parametrize("name", [n for n in FILES if n.endswith(".json")])
def test_a_change_of_one_in_a_million_is_caught_and_last_bits_are_not(name):
    kept_text = (CHECKED_IN / name).read_text(encoding="utf-8")
    kept = json.loads(kept_text)
    floats = [(p, v) for p, v in _floats(kept) if v != 0.0]
    assert len(floats) > 10
    # every float moved by one unit in the last place (what another machine may print): no difference
    noisy = copy.deepcopy(kept)
    for path, value in floats:
        _set(noisy, path, math.nextafter(value, math.inf))
    assert json_differences(kept, noisy) == []
    # one number (each of a spread of them in turn) moved by 1e-6 relative: caught, and named
    for path, value in floats[:: max(1, len(floats) // 25)]:
        changed = copy.deepcopy(kept)
        _set(changed, path, value * (1 + 1e-6))
        problems = json_differences(kept, changed)
        assert len(problems) == 1 and "".join(f"[{k}]" if isinstance(k, int) else f".{k}" for k in path) in problems[0]


def test_the_report_comparison_reads_numbers_as_displayed():
    kept = (CHECKED_IN / FILES[1]).read_text(encoding="utf-8")
    decimals = re.findall(r"(?<![\w.])-?\d+\.(\d+)(?![\w])", kept)
    assert decimals, "the report shows decimal numbers"
    # a value printed at a rounding boundary may show the neighbouring last digit
    first = re.search(r"(?<![\w.])(-?\d+\.\d+)(?![\w])", kept)
    token = first.group(1)
    places = len(token.split(".")[1])
    neighbour = f"{float(token) + 10.0 ** -places:.{places}f}"
    assert text_differences(kept, kept[:first.start(1)] + neighbour + kept[first.end(1):]) == []
    # two units away is a real change; so is a changed count or word
    far = f"{float(token) + 2 * 10.0 ** -places:.{places}f}"
    assert text_differences(kept, kept[:first.start(1)] + far + kept[first.end(1):])
    count = re.search(r"(?<![\w.])\d+(?![\w.])", kept)
    assert text_differences(kept, kept[:count.start()] + str(int(count.group()) + 1) + kept[count.end():])
    assert text_differences(kept, kept.replace("explained", "explaned", 1))


def test_the_recorded_fingerprint_is_the_checked_in_models(demo):
    """The fingerprint is computed from rounded parameters, so the model file read back names itself."""
    doc = json.loads((CHECKED_IN / FILES[0]).read_text(encoding="utf-8"))
    after = {e["model_after"]["fingerprint"] for e in doc["entries"] if e.get("model_after")}
    assert after == {api.load_model(CHECKED_IN / FILES[2]).fingerprint()}


def test_regenerating_twice_gives_the_same_numbers(regenerated, tmp_path):
    proc = subprocess.run([sys.executable, str(SCRIPT), "--out-dir", str(tmp_path)], capture_output=True, text=True,
                          timeout=600, stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, proc.stderr
    for name in FILES:
        again = (tmp_path / name).read_text(encoding="utf-8")
        assert not _differences(name, (regenerated / name).read_text(encoding="utf-8"), again), name


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
