"""Columns and files afterlook cannot read as given are named with what to do (issue 11, item 8).

Decimal-comma text, numbers stored as Parquet text, a legacy single-byte
encoding and a very long field each get a message a user can act on, and
``--decimal``, ``--delimiter`` and ``--encoding`` read them.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest


@pytest.fixture
def values():
    rng = np.random.default_rng(0)
    return rng.normal(10, 1, 60), rng.normal(5, 1, 60)


def _one_error(code, err):
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and lines[0].startswith("afterlook: error: "), err
    return lines[0]


def test_decimal_comma_text_is_named_and_read_with_decimal(tmp_path, run_cli, values):
    a, b = values
    path = tmp_path / "comma.csv"
    path.write_text("id;a;b\n" + "".join(f"r{i};{x:.3f};{y:.2f}\n".replace(".", ",") for i, (x, y) in
                                        enumerate(zip(a, b))))
    line = _one_error(*run_cli("fit", path, "--out", tmp_path / "m.json")[::2])
    assert "--delimiter ';'" in line
    line = _one_error(*run_cli("fit", path, "--out", tmp_path / "m.json", "--delimiter", ";")[::2])
    assert "decimal comma" in line and "--decimal ','" in line
    code, out, err = run_cli("fit", path, "--out", tmp_path / "m.json", "--delimiter", ";", "--decimal", ",",
                             "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["features"] == ["a", "b"]
    model = json.loads((tmp_path / "m.json").read_text())
    # the mean the model stores is the mean of the numbers as written with a comma, rounded to 3 and 2 decimals
    expected = [float(np.mean(np.round(a, 3))), float(np.mean(np.round(b, 2)))]
    assert model["model"]["mean"] == pytest.approx(expected, rel=1e-12)


def test_decimal_comma_column_beside_numbers_gets_a_warning(tmp_path, run_cli, values):
    a, b = values
    path = tmp_path / "mixed.csv"
    path.write_text("id,a,b\n" + "".join(f'r{i},{x:.3f},"{y:.2f}"\n'.replace(f"{y:.2f}", f"{y:.2f}".replace(".", ","))
                                         for i, (x, y) in enumerate(zip(a, b))))
    code, out, err = run_cli("fit", path, "--out", tmp_path / "m.json")
    assert code == 0, err
    assert "'b'" in err and "decimal comma" in err and "--decimal" in err


def test_parquet_numbers_stored_as_text_are_named(tmp_path, run_cli, values):
    a, b = values
    path = tmp_path / "t.parquet"
    pd.DataFrame({"a": a, "b": b, "c": [f"{x:.2f}" for x in b]}).to_parquet(path)
    code, out, err = run_cli("fit", path, "--out", tmp_path / "m.json")
    assert code == 0, err
    assert "'c'" in err and "numbers stored as text" in err


def test_a_latin1_file_is_named_as_an_encoding_and_read_with_encoding(tmp_path, run_cli, values):
    a, _ = values
    path = tmp_path / "lat.csv"
    path.write_bytes(("id,temperatur,straße\n" + "".join(f"r{i},{x:.3f},Müllerstraße {i}\n" for i, x in enumerate(a)))
                     .encode("latin-1"))
    line = _one_error(*run_cli("fit", path, "--out", tmp_path / "m.json")[::2])
    assert "binary" not in line and "--encoding latin-1" in line
    code, out, err = run_cli("fit", path, "--out", tmp_path / "m.json", "--encoding", "latin-1", "--json")
    assert code == 0, err
    assert json.loads(out)["features"] == ["temperatur"]
    line = _one_error(*run_cli("fit", path, "--out", tmp_path / "m2.json", "--encoding", "no-such-codec")[::2])
    assert "unknown --encoding" in line


def test_a_five_megabyte_field_is_read(tmp_path, run_cli, values):
    a, b = values
    path = tmp_path / "big.csv"
    with open(path, "w") as fh:
        fh.write("id,a,b,note\n")
        for i, (x, y) in enumerate(zip(a, b)):
            fh.write(f"r{i},{float(x)!r},{float(y)!r},{'x' * (5_000_000 if i == 3 else 3)}\n")
    code, out, err = run_cli("fit", path, "--out", tmp_path / "m.json", "--json")
    assert code == 0, err
    assert json.loads(out)["rows_used"] == 60
