"""`afterlook review` through the real console script: bad input and no terminal are one line and exit 2."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import afterlook

SCRIPT = Path(sys.executable).parent / "afterlook"


def run(*args):
    env = dict(os.environ)
    env.pop("AFTERLOOK_DEBUG", None)
    proc = subprocess.run([str(SCRIPT), *map(str, args)], capture_output=True, text=True, timeout=120,
                          stdin=subprocess.DEVNULL, env=env)
    return proc.returncode, proc.stdout, proc.stderr


def test_review_json_prints_what_the_workbench_opens_on(demo, tmp_path):
    code, out, err = run("review", demo.model, demo.cases, "--train", demo.train, "--casebook", tmp_path / "b.json",
                         "--json")
    assert code == 0, err
    doc = json.loads(out)
    ref = afterlook.misses(afterlook.load_model(demo.model), afterlook.load_table(demo.cases, require_labels=True)).to_dict()
    assert doc["threshold"] == ref["threshold"]
    assert (doc["n_cases"], doc["n_anomalies"], doc["n_misses"]) == (ref["n_cases"], ref["n_anomalies"],
                                                                     ref["n_misses"])
    assert doc["f1"] == ref["metrics"]["f1"] and doc["n_false_alarms"] == ref["metrics"]["fp"]
    assert doc["casebook"] == str(tmp_path / "b.json")


@pytest.mark.parametrize("make_args, message", [
    (lambda d, t: [d.model, t / "missing.csv"], "no such file"),
    (lambda d, t: [d.model, d.train], "no label column"),
    (lambda d, t: [t / "missing.json", d.cases], "missing.json"),
    (lambda d, t: [d.model, d.cases, "--casebook", t], "is a folder"),
])
def test_bad_input_is_one_line_and_exit_2(demo, tmp_path, make_args, message):
    code, out, err = run("review", *make_args(demo, tmp_path))
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("afterlook: error:") and message in lines[0]
    assert "Traceback" not in err


def test_without_a_terminal_it_says_what_to_use_instead(demo, tmp_path):
    code, out, err = run("review", demo.model, demo.cases, "--casebook", tmp_path / "b.json")
    assert code == 2 and out == ""
    assert "needs a terminal" in err and "--json" in err
