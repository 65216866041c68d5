"""Fixtures for the CLI tests: small tables on disk and a runner for the real console script.

The runner starts the installed ``afterlook`` script (the one next to the
interpreter running the tests) in a subprocess, so argument parsing, exit
codes, stdout/stderr separation and the absence of tracebacks are checked
exactly as a user or a shell script would see them.

Realistic input comes from :func:`afterlook.demo.generate` (the invented
pump-station fleet), shrunk to a few hundred rows to keep each subprocess
fast; tiny hand-made frames cover the edge cases.
"""

from __future__ import annotations

import os
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

#: Small demo sizes: n_cases must leave room for the demo's 15 failures per kind.
DEMO_SEED = 11
DEMO_TRAIN_ROWS = 400
DEMO_CASE_ROWS = 240


def _run_module(*args, cwd=None) -> tuple[int, str, str]:
    """``python -m afterlook ...`` with the test interpreter."""
    env = dict(os.environ)
    env.pop("AFTERLOOK_DEBUG", None)
    proc = subprocess.run([sys.executable, "-m", "afterlook", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=120, stdin=subprocess.DEVNULL)
    return proc.returncode, proc.stdout, proc.stderr


@pytest.fixture(scope="session")
def run_module():
    return _run_module


# --------------------------------------------------------------------------
# realistic input: the invented demo fleet, small
# --------------------------------------------------------------------------


@dataclass
class DemoFiles:
    dir: Path
    train: Path
    cases: Path
    model_full: Path
    model_independent: Path
    train_frame: pd.DataFrame
    cases_frame: pd.DataFrame
    kinds: dict


@pytest.fixture(scope="session")
def demo_files(tmp_path_factory) -> DemoFiles:
    """A small invented pump-station scenario on disk with two fitted models.

    Read-only for the tests: copy a file before changing it.
    """
    import afterlook
    from afterlook.demo import generate
    from afterlook.store.tables import write_table

    folder = tmp_path_factory.mktemp("demo_small")
    sc = generate(seed=DEMO_SEED, n_train=DEMO_TRAIN_ROWS, n_cases=DEMO_CASE_ROWS)
    train, cases = folder / "train.csv", folder / "cases.csv"
    write_table(sc.train, train)
    write_table(sc.cases, cases)
    files = DemoFiles(folder, train, cases, folder / "model_full.json", folder / "model_independent.json",
                      sc.train, sc.cases, sc.kinds)
    for kind, path in (("full", files.model_full), ("independent", files.model_independent)):
        model = afterlook.fit(afterlook.load_table(train), cases=afterlook.load_table(cases, require_labels=True),
                        kind=kind, threshold="f1")
        model.save(path)
    return files


# --------------------------------------------------------------------------
# tiny hand-made tables for edge cases
# --------------------------------------------------------------------------


def tiny_frame(n: int = 40, seed: int = 0) -> pd.DataFrame:
    """Three correlated numeric columns a, b, c with ids r0.. and normal labels."""
    rng = np.random.default_rng(seed)
    a = rng.normal(10.0, 2.0, n)
    b = 0.5 * a + rng.normal(0.0, 0.5, n)
    c = rng.normal(-3.0, 1.0, n)
    return pd.DataFrame({"id": [f"r{i}" for i in range(n)], "a": a.round(4), "b": b.round(4),
                         "c": c.round(4), "label": ["normal"] * n})


@pytest.fixture(scope="session")
def make_tiny_frame():
    """``make_tiny_frame(n=40, seed=0)``: see :func:`tiny_frame`."""
    return tiny_frame


@pytest.fixture
def tiny_train(tmp_path) -> Path:
    """A small all-normal training table (CSV) with columns id, a, b, c, label."""
    path = tmp_path / "tiny_train.csv"
    tiny_frame(60, seed=1).to_csv(path, index=False)
    return path


@pytest.fixture
def tiny_cases(tmp_path) -> Path:
    """Labelled cases for the tiny model: mostly normal, a few anomalies, one far out."""
    df = tiny_frame(30, seed=2)
    df["id"] = [f"c{i}" for i in range(len(df))]
    df.loc[[3, 7, 11], "label"] = "anomaly"
    df.loc[3, ["a", "b"]] = [30.0, -10.0]  # far out: flagged
    path = tmp_path / "tiny_cases.csv"
    df.to_csv(path, index=False)
    return path


@pytest.fixture
def tiny_model(tmp_path, tiny_train, tiny_cases) -> Path:
    """A full-covariance model fitted (in-process, through the API) on the tiny tables."""
    import afterlook

    model = afterlook.fit(afterlook.load_table(tiny_train), cases=afterlook.load_table(tiny_cases, require_labels=True),
                    kind="full", threshold="f1")
    path = tmp_path / "tiny_model.json"
    model.save(path)
    return path
