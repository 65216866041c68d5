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
                                     {"kind": "full", "shrinkage": "ledoit-wolf"}])
def test_fitted_models_validate(tmp_path, options):
    import afterlook
    from afterlook.demo import generate

    sc = generate(seed=3, n_train=400, n_cases=150)
    path = tmp_path / "model.json"
    afterlook.fit(sc.train, cases=sc.cases, threshold="f1", derive={"r": "flow_m3h / motor_current_a"},
                  transform={"hours_since_service": "boxcox"}, **options).save(path)
    jsonschema.validate(json.loads(path.read_text("utf-8")), schema_of("afterlook-model"),
                        cls=jsonschema.Draft202012Validator)


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


@pytest.mark.parametrize("breaker", [_model_without_threshold_value, _model_with_text_mean])
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
