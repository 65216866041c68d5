"""Any damaged parameter document is refused with one AfterlookError line (exit 2 in the CLI), never a crash.

Property test (hypothesis): a valid document with one key replaced by an
arbitrary JSON value, or one key removed, either imports or raises
AfterlookError; the same for an .npz with one array replaced.
"""

from __future__ import annotations

import json

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from afterlook.analysis.interop import model_from_parameters_document
from afterlook.core.errors import AfterlookError
from afterlook.store.parameters_file import read_parameters

VALID = {"columns": ["a", "b", "r"], "mean": [1.0, 2.0, 0.5], "covariance": [[1, 0.2, 0], [0.2, 1, 0], [0, 0, 1]],
         "threshold": -5.0, "derive": [{"name": "r", "expression": "a / b"}], "transforms": {"a": "log(a + 1)"},
         "undefined": "flag"}

json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**30, 10**30) | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=3),
    max_leaves=12,
)


def _import(path):
    try:
        model = model_from_parameters_document(read_parameters(path), source="fuzz")
    except AfterlookError as exc:
        assert "\n" not in exc.message and exc.message
        return None
    return model


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(key=st.sampled_from(sorted(VALID) + ["format", "version", "variances", "other"]), value=json_values,
       remove=st.booleans())
def test_json_damage_is_one_line(tmp_path, key, value, remove):
    doc = dict(VALID)
    if remove:
        doc.pop(key, None)
    else:
        doc[key] = value
    path = tmp_path / "p.json"
    path.write_text(json.dumps(doc))
    _import(path)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(key=st.sampled_from(["mean", "covariance", "columns", "threshold", "derive", "transforms", "undefined"]),
       replacement=st.sampled_from([np.array([]), np.array(["x"]), np.array([np.nan]), np.array([[1.0]]),
                                    np.array(3.0), np.array([True, False]), np.array(["a=", "=b"]),
                                    np.array([1e308, -1e308, 0.0])]))
def test_npz_damage_is_one_line(tmp_path, key, replacement):
    arrays = {"mean": np.array([1.0, 2.0]), "covariance": np.eye(2), "columns": np.array(["a", "b"]),
              "threshold": np.array(-4.0)}
    arrays[key] = replacement
    path = tmp_path / "p.npz"
    np.savez(path, **arrays)
    _import(path)
