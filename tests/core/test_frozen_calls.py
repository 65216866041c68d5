"""Functions whose statistics are frozen at fit: parsing, the recipe, the model file, the search's text.

Numbers against scipy.stats are in tests/reference/test_frozen_reference.py;
here the bookkeeping: what is refused, what is stored, what stays as it was.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from afterlook.core import expressions
from afterlook.core.errors import AfterlookError
from afterlook.core.recipe import Recipe, parse_transform
from afterlook.core.shaped_text import shaped_text, standardized_text
from afterlook.store.documents import check_document

RNG = np.random.default_rng(11)
COLS = {"a": RNG.lognormal(1.0, 0.4, 300), "b": RNG.normal(10.0, 2.0, 300)}


def test_a_call_is_keyed_by_its_canonical_argument_text():
    one = expressions.parse("zscore( a+b )")
    two = expressions.parse("zscore(a + b)")
    assert one.calls == two.calls == ("zscore(a + b)",)
    nested = expressions.parse("zscore(zscore(a) * b)")
    assert nested.calls == ("zscore(a)", "zscore(zscore(a) * b)")  # inner first: fitted first


def test_nested_calls_are_fitted_inner_first():
    expr = expressions.parse("zscore(zscore(a) * b)").fit(COLS)
    inner = (COLS["a"] - COLS["a"].mean()) / COLS["a"].std()
    y = inner * COLS["b"]
    np.testing.assert_allclose(expr.evaluate(COLS), (y - y.mean()) / y.std(), rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("text, message", [
    ("zscore(a, b)", "takes one argument"),
    ("zscore()", "takes one argument"),
    ("boxcox(a)", "takes (x, p)"),
    ("boxcox(a, b)", "must be a number"),
    ("yeojohnson(a, 1 + 1)", "must be a number"),
    ("zscore", "without calling it"),
])
def test_bad_calls_are_one_line_errors(text, message):
    with pytest.raises(AfterlookError, match=message.replace("(", r"\(").replace(")", r"\)")) as info:
        expressions.parse(text)
    assert "\n" not in info.value.message


def test_a_constant_argument_is_refused_at_fit_with_the_call_named():
    with pytest.raises(AfterlookError, match=r"zscore\(a \* 0\).*sd 0"):
        expressions.parse("zscore(a * 0)").fit(COLS)
    with pytest.raises(AfterlookError, match="at least 2"):
        expressions.parse("zscore(log(a - 1000))").fit(COLS)  # no finite value at all


def test_a_transform_may_not_call_zscore():
    with pytest.raises(AfterlookError, match="use a derived feature"):
        parse_transform("a", "zscore(a)")
    assert parse_transform("a", "boxcox(a, 0.5)").kind == "expression"  # stateless: a transform may


def test_the_recipe_freezes_on_fit_and_keeps_it_through_the_file_format():
    recipe = Recipe(["a", "b"], [("r", "a / b"), ("z", "zscore(r) - zscore(b)")])
    assert recipe.needs_fit() and recipe.stateful_calls == ["zscore(r)", "zscore(b)"]
    with pytest.raises(AfterlookError, match="no statistics frozen"):
        recipe.apply(COLS)
    fitted = recipe.fit(COLS)
    doc = fitted.to_dict()
    assert [e["argument"] for e in doc["frozen"]] == ["b", "r"]
    again = Recipe.from_dict(json.loads(json.dumps(doc)))
    np.testing.assert_array_equal(again.apply(COLS).values, fitted.apply(COLS).values)
    # a recipe derived from it keeps what was frozen (suggest and try add features to it)
    more = again.with_derived([("p", "a * b")])
    assert more.frozen == again.frozen and np.isfinite(more.apply(COLS).column("z")).all()


def test_a_recipe_without_such_calls_is_written_as_before():
    recipe = Recipe(["a", "b"], [("r", "a / b")]).fit(COLS)
    assert "frozen" not in recipe.to_dict() and not recipe.needs_fit()


def test_a_recipe_file_missing_a_frozen_entry_is_refused():
    doc = Recipe(["a"], [("z", "zscore(a)")]).fit(COLS).to_dict()
    doc["frozen"] = []
    with pytest.raises(AfterlookError, match=r"zscore\(a\) has no frozen statistics"):
        Recipe.from_dict(doc)


def _model_doc(tmp_path):
    from afterlook.analysis.fitting import fit

    frame = pd.DataFrame(COLS)
    model = fit(frame, kind="full", threshold="rate:0.05", derive={"z": "zscore(a) * zscore(b)"})
    path = tmp_path / "m.json"
    model.save(path)
    return json.loads(path.read_text())


def test_the_model_schema_takes_version_2_and_checks_the_frozen_numbers(tmp_path):
    doc = _model_doc(tmp_path)
    assert doc["version"] == 2
    kw = dict(format_name="afterlook-model", version=2, kind="model file", path="m.json", expected="a model")
    assert check_document(doc, **kw) == 2
    doc["recipe"]["frozen"][0]["sd"] = 0.0
    with pytest.raises(AfterlookError, match="recipe/frozen/0/sd"):
        check_document(doc, **kw)


def test_a_fit_with_zscore_of_a_constant_column_is_exit_2(tmp_path, run_cli):
    frame = pd.DataFrame({"a": COLS["a"], "b": COLS["b"], "c": np.full(300, 4.0)})
    frame.to_csv(tmp_path / "t.csv", index=False)
    code, out, err = run_cli("fit", str(tmp_path / "t.csv"), "--out", str(tmp_path / "m.json"), "--columns", "a", "b",
                             "--derive", "zc=zscore(c)")
    assert code == 2 and "sd 0" in err and len(err.strip().splitlines()) == 1


# --------------------------------------------------------------------------
# the search's text for standardised and shaped columns
# --------------------------------------------------------------------------


@pytest.mark.parametrize("shaping, text", [
    (None, "a"),
    ("-(a ** -0.05)", "boxcox(a, -0.05)"),
    ("a ** 0.5", "boxcox(a, 0.5)"),
    ("log(a)", "log(a)"),
    ("log(a + 0.5)", "log(a + 0.5)"),
    ("-(a ** 0.5)", "-(a ** 0.5)"),  # decreasing: not a Box-Cox form, left as written
])
def test_shaped_text(shaping, text):
    assert shaped_text("a", shaping) == text


def test_standardized_shaped_text_is_the_same_number_as_the_shaping_standardised():
    for shaping in ("-(a ** -0.05)", "a ** 0.5", "-(a ** -1)"):
        readable = expressions.parse(standardized_text("a", shaping)).fit(COLS).evaluate(COLS)
        v = expressions.parse(shaping).evaluate(COLS)
        np.testing.assert_allclose(readable, (v - v.mean()) / v.std(), rtol=1e-9, atol=1e-12)


def test_names_needing_backticks_stay_quoted():
    assert standardized_text("flow rate", "-(`flow rate` ** -0.5)") == "zscore(boxcox(`flow rate`, -0.5))"
    assert standardized_text("zscore") == "zscore(`zscore`)"  # a column named like a function
