"""`afterlook score --engine chunked|dask` against the in-memory score of the same file.

Reference: the in-memory ``afterlook score`` (``Model.score_with_overflow`` on
the whole table), whose log-densities are themselves checked against
scipy.stats.multivariate_normal in tests/reference. The data are the invented
demo fleet (train / cases), made larger by repeating its rows.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

from afterlook.demo import generate

DERIVE = ["--derive", "head_per_amp=(discharge_bar - suction_bar) / motor_current_a",
          "--transform", "hours_since_service=log(hours_since_service + 1)"]


@pytest.fixture(scope="module")
def files(tmp_path_factory, run_cli_module):
    """A model with a derived feature and a transform, and a cases table with the awkward rows:
    a missing reading (unscored), a zero divisor (outside the domain: flagged), labels, text columns."""
    d = tmp_path_factory.mktemp("streamed_score")
    sc = generate(seed=5, n_train=1500, n_cases=600)
    sc.train.to_csv(d / "train.csv", index=False)
    cases = sc.cases.copy()
    cases.loc[10, "flow_m3h"] = np.nan
    cases.loc[400, "motor_current_a"] = 0.0
    cases.to_csv(d / "cases.csv", index=False)
    cases.to_parquet(d / "cases.parquet", index=False)
    code, _, err = run_cli_module("fit", d / "train.csv", "--out", d / "model.json", "--cases", d / "cases.csv",
                                  *DERIVE)
    assert code == 0, err
    return d


@pytest.fixture(scope="module")
def run_cli_module():
    from afterlook_cli_runner import run_cli_in_process

    return run_cli_in_process


def _scores(path: Path) -> pd.DataFrame:
    return pd.read_parquet(path) if path.suffix == ".parquet" else pd.read_csv(path, keep_default_na=False,
                                                                             na_values=[""])


def _same_scores(streamed: pd.DataFrame, memory: pd.DataFrame) -> None:
    assert list(streamed.columns) == list(memory.columns)
    assert len(streamed) == len(memory)
    np.testing.assert_allclose(streamed["log_density"].to_numpy(float), memory["log_density"].to_numpy(float),
                               rtol=1e-12, equal_nan=True)
    assert np.array_equal(streamed["flagged"].astype(str).str.lower().to_numpy(),
                          memory["flagged"].astype(str).str.lower().to_numpy())
    for col in memory.columns:
        if col in ("log_density", "flagged"):
            continue
        a, b = streamed[col], memory[col]
        if pd.api.types.is_numeric_dtype(b):
            np.testing.assert_allclose(a.to_numpy(float), b.to_numpy(float), rtol=1e-12, equal_nan=True)
        else:
            assert a.fillna("").astype(str).tolist() == b.fillna("").astype(str).tolist(), col


@pytest.mark.parametrize("source", ["cases.csv", "cases.parquet"])
@pytest.mark.parametrize("out", ["scored.csv", "scored.parquet"])
def test_chunked_score_equals_the_in_memory_score(files, run_cli, source, out):
    d = files
    memory_out = d / f"memory-{source}-{out}"
    streamed_out = d / f"chunked-{source}-{out}"
    code, _, err = run_cli("score", d / "model.json", d / source, "--out", memory_out)
    assert code == 0, err
    # 97 rows a chunk: the awkward rows and the file's end fall inside chunks, not on their edges
    code, stdout, err2 = run_cli("score", d / "model.json", d / source, "--out", streamed_out,
                                 "--engine", "chunked", "--chunk-rows", "97")
    assert code == 0, err2
    assert stdout.startswith(f"wrote {streamed_out}: 600 rows")
    memory, streamed = _scores(memory_out), _scores(streamed_out)
    _same_scores(streamed, memory)
    assert np.isnan(memory["log_density"][10]) and not bool(memory["flagged"][10])  # a missing reading
    assert memory["log_density"][400] == -np.inf and bool(memory["flagged"][400])  # outside the domain
    # The same warnings about the unscored row, said once for the whole file.
    assert [line for line in err2.splitlines() if "NaN or infinite" in line] == \
           [line for line in err.splitlines() if "NaN or infinite" in line]


def test_json_summary_of_a_chunked_score(files, run_cli, one_json):
    d = files
    code, out, _ = run_cli("score", d / "model.json", d / "cases.csv", "--json")
    memory = one_json(out)
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", d / "j.parquet",
                             "--engine", "chunked", "--chunk-rows", "50", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["engine"] == "chunked"
    for key in ("n_rows", "n_flagged", "n_unscored", "n_overflow", "threshold"):
        assert doc[key] == memory[key], key


@pytest.mark.slow
def test_dask_score_agrees_with_chunked(files, run_cli):
    d = files
    code, _, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", d / "c.csv", "--engine", "chunked")
    assert code == 0, err
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", d / "k.csv", "--engine", "dask")
    assert code == 0, err
    assert out.startswith(f"wrote {d / 'k.csv'}: 600 rows")
    _same_scores(_scores(d / "k.csv"), _scores(d / "c.csv"))


def _with_text_halfway(src: Path, dst: Path, row: int, column: str) -> None:
    frame = pd.read_csv(src, keep_default_na=False, na_values=[""], dtype={column: object})
    frame.loc[row, column] = "n/a-sensor"
    frame.to_csv(dst, index=False)


@pytest.mark.parametrize("engine", ["chunked", pytest.param("dask", marks=pytest.mark.slow)])
def test_text_in_a_feature_column_halfway_is_one_line_exit_2_and_no_file(files, run_cli, tmp_path, engine):
    if engine == "dask":
        pytest.importorskip("distributed")
    bad = tmp_path / "bad.csv"
    _with_text_halfway(files / "cases.csv", bad, 300, "motor_current_a")
    out = tmp_path / "scored.csv"
    code, stdout, err = run_cli("score", files / "model.json", bad, "--out", out, "--engine", engine,
                                "--chunk-rows", "64")
    assert code == 2
    assert stdout == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "motor_current_a" in lines[0] and "n/a-sensor" in lines[0]
    assert "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv"]  # no output, no temp file


def test_a_failed_streamed_score_keeps_the_previous_output(files, run_cli, tmp_path):
    bad = tmp_path / "bad.csv"
    _with_text_halfway(files / "cases.csv", bad, 500, "flow_m3h")
    out = tmp_path / "scored.csv"
    code, _, err = run_cli("score", files / "model.json", files / "cases.csv", "--out", out, "--engine", "chunked")
    assert code == 0, err
    before = out.read_bytes()
    code, _, err = run_cli("score", files / "model.json", bad, "--out", out, "--force", "--engine", "chunked",
                           "--chunk-rows", "100")
    assert code == 2 and "flow_m3h" in err
    assert out.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv", "scored.csv"]


@pytest.mark.parametrize("argv, words", [
    (["--engine", "chunked"], ["--out"]),
    (["--engine", "chunked", "--out", "{d}/x.csv", "--scheduler", "tcp://h:1"], ["--scheduler", "dask"]),
    (["--engine", "chunked", "--out", "{d}/x.csv", "--chunk-rows", "0"], ["--chunk-rows"]),
    (["--engine", "chunked", "--out", "{d}/x.csv", "--delimiter", ";"], ["--delimiter", "memory engine"]),
    (["--engine", "chunked", "--out", "{d}/cases.csv"], ["cases.csv", "input"]),  # the output clash guard
    (["--engine", "chunked", "--out", "{d}/model.json", "--force"], ["model.json", "input"]),
])
def test_streamed_score_refusals_are_one_line(files, run_cli, argv, words):
    argv = [a.replace("{d}", str(files)) for a in argv]
    code, out, err = run_cli("score", files / "model.json", files / "cases.csv", *argv)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1, err
    for w in words:
        assert w in err


def test_a_label_that_is_not_a_label_in_a_later_chunk_is_refused_as_in_memory(files, run_cli, tmp_path):
    frame = pd.read_csv(files / "cases.csv", keep_default_na=False, na_values=[""])
    frame.loc[450, "label"] = "maybe"
    bad = tmp_path / "labels.csv"
    frame.to_csv(bad, index=False)
    code, _, err_memory = run_cli("score", files / "model.json", bad)
    code_s, _, err = run_cli("score", files / "model.json", bad, "--out", tmp_path / "s.csv",
                             "--engine", "chunked", "--chunk-rows", "100")
    assert code == code_s == 2
    assert "maybe" in err and "label" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "s.csv").exists()


# --------------------------------------------------------------------------
# a file larger than the memory the scoring process may use
# --------------------------------------------------------------------------

# RLIMIT_DATA caps the process's heap and private mappings (Linux >= 4.7). 400 MiB lets Python, numpy,
# pandas, pyarrow and afterlook start (about 160 MB resident after imports, measured with /usr/bin/time on
# a tiny table) and score in chunks of 4096 rows (~270 MB peak), but cannot hold the ~460 MB table below: the in-memory
# engine is refused under the same limit, which shows the limit binds.
DATA_LIMIT = 400 << 20
NOTE = "pump-station log line " * 136  # ~3 kB of context text per row: a big file of few rows, fast to score


def _limited():
    resource.setrlimit(resource.RLIMIT_DATA, (DATA_LIMIT, DATA_LIMIT))


def _script(*args, limit: bool) -> subprocess.CompletedProcess:
    script = Path(sys.executable).parent / "afterlook"
    env = {k: v for k, v in os.environ.items() if k != "AFTERLOOK_DEBUG"}
    return subprocess.run([str(script), *map(str, args)], capture_output=True, text=True, timeout=600, env=env,
                          stdin=subprocess.DEVNULL, preexec_fn=_limited if limit else None)


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="RLIMIT_DATA counts mappings on Linux only")
def test_scores_a_file_larger_than_the_memory_limit_like_the_in_memory_score(files, tmp_path):
    cases = pd.read_csv(files / "cases.csv", keep_default_na=False, na_values=[""])
    rng = np.random.default_rng(1)
    big = tmp_path / "big.csv"
    writer = None
    n = 0
    with open(big, "wb") as sink:
        while sink.tell() <= DATA_LIMIT * 1.1:
            part = cases.iloc[rng.integers(0, len(cases), 10_000)].reset_index(drop=True)
            part["id"] = [f"r{n + i}" for i in range(len(part))]
            part["review_note"] = NOTE
            table = pa.Table.from_pandas(part, preserve_index=False)
            writer = writer or pacsv.CSVWriter(sink, table.schema)
            writer.write_table(table)
            n += len(part)
        writer.close()
    assert big.stat().st_size > DATA_LIMIT

    streamed = tmp_path / "streamed.parquet"
    proc = _script("score", files / "model.json", big, "--out", streamed, "--engine", "chunked",
                   "--chunk-rows", "4096", limit=True)
    assert proc.returncode == 0, proc.stderr
    refused = _script("score", files / "model.json", big, "--out", tmp_path / "refused.csv", limit=True)
    assert refused.returncode != 0  # the in-memory engine cannot hold this table under the limit
    assert not (tmp_path / "refused.csv").exists()

    memory = tmp_path / "memory.parquet"
    proc = _script("score", files / "model.json", big, "--out", memory, limit=False)
    assert proc.returncode == 0, proc.stderr
    got = pq.read_table(streamed, columns=["id", "log_density", "flagged"])
    want = pq.read_table(memory, columns=["id", "log_density", "flagged"])
    assert got.num_rows == want.num_rows == n
    assert got["id"].to_pylist() == want["id"].to_pylist()
    np.testing.assert_allclose(got["log_density"].to_numpy(), want["log_density"].to_numpy(), rtol=1e-12)
    flagged_got = np.flatnonzero(got["flagged"].to_numpy(zero_copy_only=False))
    flagged_want = np.flatnonzero(want["flagged"].to_numpy(zero_copy_only=False))
    assert flagged_got.size > 0 and np.array_equal(flagged_got, flagged_want)


def test_a_column_the_model_needs_is_missing(files, run_cli, tmp_path):
    frame = pd.read_csv(files / "cases.csv", keep_default_na=False, na_values=[""]).drop(columns=["flow_m3h"])
    data = tmp_path / "no_flow.parquet"
    frame.to_parquet(data, index=False)
    code, out, err = run_cli("score", files / "model.json", data, "--out", tmp_path / "s.csv", "--engine", "chunked")
    assert code == 2 and out == ""
    assert "flow_m3h" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "s.csv").exists()


def test_the_skip_policy_for_undefined_features_is_kept(files, run_cli, tmp_path):
    d = files
    code, _, err = run_cli("fit", d / "train.csv", "--out", tmp_path / "skip.json", "--cases", d / "cases.csv",
                           "--undefined", "skip", *DERIVE)
    assert code == 0, err
    code, _, err = run_cli("score", tmp_path / "skip.json", d / "cases.csv", "--out", tmp_path / "m.csv")
    assert code == 0, err
    code, _, err = run_cli("score", tmp_path / "skip.json", d / "cases.csv", "--out", tmp_path / "c.csv",
                           "--engine", "chunked", "--chunk-rows", "128")
    assert code == 0, err
    memory, streamed = _scores(tmp_path / "m.csv"), _scores(tmp_path / "c.csv")
    _same_scores(streamed, memory)
    assert np.isnan(memory["log_density"][400]) and not bool(memory["flagged"][400])  # zero divisor: unscored
