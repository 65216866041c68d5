"""The JSON Schema files shipped in afterlook/store/schemas/ document both file formats.

Outside reference: the ``jsonschema`` package's Draft 2020-12 validator
(``check_schema`` for the schema files themselves, ``validate`` for the
documents), run here directly on files afterlook wrote; and the ``json``
module for reading and breaking them.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import jsonschema
import pytest

from afterlook.core.errors import AfterlookError
from afterlook.store.documents import SCHEMAS

REPO = Path(__file__).resolve().parents[2]
DEMO_BOOK = REPO / "casebooks" / "pump-stations.casebook.json"
DEMO_MODEL = REPO / "casebooks" / "pump-stations.model-with-feature.json"


def schema_of(name: str) -> dict:
    return json.loads((SCHEMAS / f"{name}.schema.json").read_text("utf-8"))


@pytest.mark.parametrize("name", ["afterlook-model", "afterlook-casebook"])
def test_the_schema_files_are_valid_draft_2020_12_schemas(name):
    jsonschema.Draft202012Validator.check_schema(schema_of(name))


@pytest.mark.parametrize("path,name", [(DEMO_BOOK, "afterlook-casebook"), (DEMO_MODEL, "afterlook-model")])
def test_the_checked_in_demo_documents_validate(path, name):
    jsonschema.validate(json.loads(path.read_text("utf-8")), schema_of(name),
                        cls=jsonschema.Draft202012Validator)


@pytest.mark.parametrize("options", [{"kind": "full"}, {"kind": "independent"}, {"kind": "full", "robust": True},
                                     {"kind": "full", "shrinkage": "ledoit-wolf"}, {"kind": "full", "shaping": True}])
def test_fitted_models_validate(tmp_path, options):
    import afterlook
    from afterlook.demo import generate

    sc = generate(seed=3, n_train=400, n_cases=150)
    path = tmp_path / "model.json"
    afterlook.fit(sc.train, cases=sc.cases, threshold="f1", derive={"r": "flow_m3h / motor_current_a"},
                  transform={"hours_since_service": "boxcox"}, **options).save(path)
    doc = json.loads(path.read_text("utf-8"))
    assert ("shaping" in doc["training"]) == bool(options.get("shaping"))  # the record is there to be checked
    jsonschema.validate(doc, schema_of("afterlook-model"), cls=jsonschema.Draft202012Validator)


def _broken_copy(src: Path, folder: Path, breaker) -> Path:
    doc = json.loads(src.read_text("utf-8"))
    breaker(doc)
    out = folder / src.name
    out.write_text(json.dumps(doc), encoding="utf-8")
    return out


def _model_without_threshold_value(doc):
    del doc["threshold"]["value"]


def _model_with_text_mean(doc):
    doc["model"]["mean"][0] = "high"


def _book_with_numeric_case(doc):
    doc["entries"][0]["case"] = 17


def _book_with_unknown_label(doc):
    doc["entries"][0]["label"] = "perhaps"


def _model_with_numeric_shaping(doc):
    doc["training"]["shaping"] = {doc["recipe"]["base"][0]: {"key": "0" * 64, "expression": 7}}


@pytest.mark.parametrize("breaker", [_model_without_threshold_value, _model_with_text_mean,
                                     _model_with_numeric_shaping])
def test_a_broken_model_file_is_refused_by_the_api_and_the_cli(tmp_path, breaker, run_cli):
    import afterlook

    broken = _broken_copy(DEMO_MODEL, tmp_path, breaker)
    with pytest.raises(jsonschema.ValidationError):  # the reference agrees it is broken
        jsonschema.validate(json.loads(broken.read_text()), schema_of("afterlook-model"),
                            cls=jsonschema.Draft202012Validator)
    with pytest.raises(AfterlookError) as err:
        afterlook.load_model(broken)
    assert "afterlook-model format" in err.value.message and "\n" not in err.value.message
    code, out, stderr = run_cli("misses", str(broken), str(tmp_path / "cases.csv"))
    assert code == 2 and out == ""
    assert stderr.startswith("afterlook: error:") and "afterlook-model format" in stderr
    assert stderr.count("\n") == 1 and "Traceback" not in stderr


@pytest.mark.parametrize("breaker", [_book_with_numeric_case, _book_with_unknown_label])
def test_a_broken_casebook_is_refused_by_the_api_and_the_cli(tmp_path, breaker, run_cli):
    from afterlook.store.casebook_file import Casebook

    broken = _broken_copy(DEMO_BOOK, tmp_path, breaker)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(json.loads(broken.read_text()), schema_of("afterlook-casebook"),
                            cls=jsonschema.Draft202012Validator)
    before = broken.read_bytes()
    with pytest.raises(AfterlookError) as err:
        Casebook.open(broken, create=False)
    assert "afterlook-casebook format" in err.value.message and "\n" not in err.value.message
    code, out, stderr = run_cli("casebook", "list", str(broken))
    assert code == 2 and out == ""
    assert "afterlook-casebook format" in stderr and stderr.count("\n") == 1
    assert broken.read_bytes() == before  # refused, never rewritten


def test_schemas_ship_with_the_package():
    # pyproject's package-data names the folder; the files sit beside store/.
    assert (SCHEMAS / "afterlook-model.schema.json").is_file()
    assert (SCHEMAS / "afterlook-casebook.schema.json").is_file()
    assert shutil.os.path.basename(SCHEMAS) == "schemas"


# -- the plain pre-check that spares jsonschema on every read -------------------------------------------

from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from afterlook.store.documents import plainly_valid  # noqa: E402

_SMALL_JSON = st.recursive(
    st.none() | st.booleans() | st.integers(-3, 3) | st.sampled_from([0.5, 1.0, -2.0, 1e300])
    | st.sampled_from(["", "x", "full", "independent", "afterlook-model", "afterlook-casebook", "anomaly", "f1"]),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.sampled_from(["a", "kind", "value"]), inner,
                                                                max_size=3),
    max_leaves=6)


def _paths(doc, here=()):
    yield here
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, here + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc[:3]):  # the first items of long number lists are enough
            yield from _paths(v, here + (i,))


def _mutated(doc, path, how, value):
    import copy

    doc = copy.deepcopy(doc)
    if not path:
        return value if how == "replace" else doc
    parent = doc
    for k in path[:-1]:
        parent = parent[k]
    key = path[-1]
    if how == "replace":
        parent[key] = value
    elif how == "delete":
        del parent[key]
    elif isinstance(parent[key], dict):
        parent[key]["extra_key"] = value
    elif isinstance(parent[key], list):
        parent[key].append(value)
    return doc


@pytest.mark.parametrize("path,name", [(DEMO_BOOK, "afterlook-casebook"), (DEMO_MODEL, "afterlook-model")])
def test_the_plain_check_accepts_what_afterlook_writes(path, name):
    # Guards the test below against a check that never says yes (it would then always defer).
    assert plainly_valid(json.loads(path.read_text("utf-8")), schema_of(name))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data(), which=st.sampled_from(["model", "casebook"]))
def test_the_plain_check_never_accepts_what_jsonschema_refuses(data, which):
    # Reference: jsonschema's Draft 2020-12 validator on the same mutated document. The plain check may
    # defer (say False) on a valid document, but a True must mean jsonschema finds no error.
    path, name = (DEMO_MODEL, "afterlook-model") if which == "model" else (DEMO_BOOK, "afterlook-casebook")
    doc = json.loads(path.read_text("utf-8"))
    where = data.draw(st.sampled_from(list(_paths(doc))))
    how = data.draw(st.sampled_from(["replace", "delete", "add"]))
    if how == "delete" and not where:
        how = "replace"
    broken = _mutated(doc, where, how, data.draw(_SMALL_JSON))
    reference = jsonschema.Draft202012Validator(schema_of(name)).is_valid(broken)
    if plainly_valid(broken, schema_of(name)):
        assert reference, (where, how)
