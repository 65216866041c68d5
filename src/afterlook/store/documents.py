"""The check every afterlook JSON document passes: format name, version, then its JSON Schema.

Both documents afterlook writes (the model file and the casebook) carry
``{"format": NAME, "version": N}``. :func:`check_document` refuses, in one
line and in this order, anything that is not such a document, a newer major
version, and a document that does not match the format's JSON Schema
(shipped in ``afterlook/store/schemas/``, which is also the documentation
of each format).
"""

from __future__ import annotations

import re

import json
from functools import lru_cache
from pathlib import Path

from ..core.errors import AfterlookError
from ..core.printable import printable

__all__ = ["check_document", "load_json", "first_bad_number", "plainly_valid", "schema", "SCHEMAS"]

#: The folder of the JSON Schema files (package data, shipped in the wheel).
SCHEMAS = Path(__file__).resolve().with_name("schemas")


@lru_cache(maxsize=None)
def schema(format_name: str) -> dict:
    """The JSON Schema of a format (``afterlook-model`` or ``afterlook-casebook``)."""
    return json.loads((SCHEMAS / f"{format_name}.schema.json").read_text("utf-8"))


def load_json(raw: bytes, what: str) -> object:
    """Parse the bytes of a JSON document strictly; any damage is one :class:`AfterlookError` line.

    Refused: text that is not UTF-8 or not JSON, ``NaN``/``Infinity``
    (not JSON), numbers that overflow a float (``1e999``) or integers too long
    to convert, and nesting too deep to read. ``what`` names the file
    ("model file m.json").
    """
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise AfterlookError(f"{what} is not UTF-8 text") from None
    try:
        doc = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        raise AfterlookError(f"{what} is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    except RecursionError:
        raise AfterlookError(f"{what} is nested too deeply to be an afterlook document") from None
    except ValueError as exc:  # NaN/Infinity, or an integer longer than Python converts
        raise AfterlookError(f"{what} is not valid JSON ({_short(exc, 100)})") from None
    except MemoryError:
        raise AfterlookError(f"{what} is too large to read") from None
    bad = first_bad_number(doc)
    if bad is not None:
        raise AfterlookError(f"{what} has a number out of range at {bad}")
    return doc


def first_bad_number(doc, limit_depth: int = 64) -> str | None:
    """Where ``doc`` holds a non-finite float or an integer beyond float range (None when nowhere).

    Walks the document without recursion; a document deeper than
    ``limit_depth`` is reported at its first too-deep place, since no afterlook
    document nests that far.
    """
    stack = [(doc, "top level", 0)]
    while stack:
        value, where, depth = stack.pop()
        if isinstance(value, bool) or value is None or isinstance(value, str):
            continue
        if type(value) is list and value and all(type(x) is float and x - x == 0.0 for x in value):
            continue  # finite floats only (a covariance row, a quantile grid): nothing to report, no paths built
        if isinstance(value, float):
            if value != value or value in (float("inf"), float("-inf")):
                return where
        elif isinstance(value, int):
            if abs(value) > 1.7e308:
                return where
        elif isinstance(value, (list, dict)):
            if depth >= limit_depth:
                return f"{where} (nested more than {limit_depth} deep)"
            items = value.items() if isinstance(value, dict) else enumerate(value)
            for k, v in items:
                stack.append((v, f"{where}/{k}" if where != "top level" else str(k), depth + 1))
    return None


def _no_constant(name: str):
    # NaN / Infinity are not JSON; a file carrying them was not written by afterlook.
    raise ValueError(f"{name} is not a JSON value")


def check_document(doc, *, format_name: str, version: int, kind: str, path, expected: str) -> int:
    """Check ``doc`` is a ``format_name`` document this afterlook reads; returns its version.

    Parameters
    ----------
    kind, path : how messages name the document ("model file", "m.json")
    expected : how a message names the kind of file ("an afterlook model file")
    """
    what = f"{kind} {path}"
    if not isinstance(doc, dict) or doc.get("format") != format_name:
        raise AfterlookError(f"{path} is not {expected} (expected \"format\": \"{format_name}\")")
    found = doc.get("version")
    if not isinstance(found, int) or isinstance(found, bool):
        raise AfterlookError(f"{what} has no integer \"version\"")
    if found > version:
        raise AfterlookError(f"{what} has version {found}; this afterlook reads version {version} (upgrade afterlook)")
    if found < 1:
        raise AfterlookError(f"{what} has unknown version {found}")
    _validate(doc, format_name, what)
    return found


@lru_cache(maxsize=None)
def _validator(format_name: str):
    """The format's jsonschema Draft 2020-12 validator, made once per process."""
    import jsonschema  # here: only a document that fails the plain check below needs it

    return jsonschema.Draft202012Validator(schema(format_name))


# The keywords our two schemas use, each checked below exactly as Draft 2020-12
# defines it; the annotations change nothing. A schema with any other keyword
# makes the plain check give up, and jsonschema decides.
_ANNOTATIONS = frozenset({"$schema", "$id", "$defs", "title", "description", "$comment", "default", "examples"})
_TYPES = {"object": lambda v: type(v) is dict, "array": lambda v: type(v) is list,
          "string": lambda v: type(v) is str, "boolean": lambda v: type(v) is bool,
          "null": lambda v: v is None, "integer": lambda v: type(v) is int,
          "number": lambda v: type(v) is int or type(v) is float}


class _Unsure(Exception):
    """The plain check met something it does not decide; jsonschema will."""


def plainly_valid(doc, root: dict) -> bool:
    """Whether ``doc`` (parsed JSON) matches the schema ``root``, by a plain walk over both.

    A fast pre-check for :func:`check_document`: reading a model file through
    jsonschema took ~0.15 s (its import, then every one of tens of thousands
    of numbers through the full machinery), a quarter of a whole ``afterlook
    misses``. It only ever says True for a document jsonschema accepts: it
    knows the keywords our schemas use (type, const, enum, minimum,
    exclusiveMinimum, anyOf, minLength, minItems, pattern, required, properties, additionalProperties, items,
    local ``$ref``), answers False, never True, where it is unsure (a float
    for "integer", anything but text or null in "enum" or "const", any other
    keyword), and False sends the document to jsonschema, which gives the
    verdict and the message. A test checks the agreement on mutated documents.
    """
    try:
        return _matches(doc, root, root)
    except (_Unsure, RecursionError):
        return False


def _matches(value, schema_here: dict, root: dict) -> bool:
    for key, rule in schema_here.items():
        if key in _ANNOTATIONS:
            continue
        if key == "type":
            kinds = [rule] if isinstance(rule, str) else rule
            if not any(_TYPES[k](value) for k in kinds):
                if type(value) is float and "integer" in kinds:
                    raise _Unsure  # 1.0 is an integer to jsonschema
                return False
        elif key in ("const", "enum"):
            allowed = [rule] if key == "const" else rule
            if not _plain(value) or not all(_plain(a) for a in allowed):
                raise _Unsure  # jsonschema's equality across types (1 == 1.0, True != 1) is not repeated here
            if value not in allowed:
                return False
        elif key == "minimum":
            if (type(value) is int or type(value) is float) and not value >= rule:
                return False
        elif key == "exclusiveMinimum":
            if (type(value) is int or type(value) is float) and not value > rule:
                return False
        elif key == "anyOf":
            if not isinstance(rule, list) or not any(_matches(value, sub, root) for sub in rule):
                return False
        elif key == "minLength":
            if type(value) is str and len(value) < rule:
                return False
        elif key == "minItems":
            if type(value) is list and len(value) < rule:
                return False
        elif key == "pattern":  # jsonschema applies re.search too (our patterns are anchored ASCII)
            if type(value) is str and re.search(rule, value) is None:
                return False
        elif key == "required":
            if type(value) is dict and any(name not in value for name in rule):
                return False
        elif key == "properties":
            if type(value) is dict and not all(_matches(value[k], sub, root) for k, sub in rule.items() if k in value):
                return False
        elif key == "additionalProperties":
            if type(value) is dict:
                known = schema_here.get("properties", {})
                if "patternProperties" in schema_here:
                    raise _Unsure
                extra = [v for k, v in value.items() if k not in known]
                if rule is False and extra:
                    return False
                if isinstance(rule, dict) and not all(_matches(v, rule, root) for v in extra):
                    return False
        elif key == "items":
            if type(value) is list:
                if "prefixItems" in schema_here or not isinstance(rule, dict):
                    raise _Unsure
                if rule == _NUMBER_ITEMS:  # the long lists of a model file, in one plain pass
                    if not all(type(x) is float or type(x) is int for x in value):
                        return False
                elif not all(_matches(x, rule, root) for x in value):
                    return False
        elif key == "$ref":
            prefix = "#/$defs/"
            if not isinstance(rule, str) or not rule.startswith(prefix) or "/" in rule[len(prefix):]:
                raise _Unsure
            target = root.get("$defs", {}).get(rule[len(prefix):])
            if target is None:
                raise _Unsure
            if not _matches(value, target, root):
                return False
        else:
            raise _Unsure
    return True


_NUMBER_ITEMS = {"type": "number"}


def _plain(value) -> bool:
    """A string or null: values that are equal in JSON exactly when they are equal in Python."""
    return value is None or type(value) is str


def _validate(doc: dict, format_name: str, what: str) -> None:
    if plainly_valid(doc, schema(format_name)):
        return
    import jsonschema

    validator = _validator(format_name)
    try:
        error = jsonschema.exceptions.best_match(validator.iter_errors(doc))
    except RecursionError:
        raise AfterlookError(f"{what} is nested too deeply to be an afterlook document") from None
    if error is None:
        return
    where = "/".join(str(p) for p in error.absolute_path) or "top level"
    raise AfterlookError(f"{what} does not match the {format_name} format at {printable(where)}: "
                         f"{printable(_short(error.message))}")


def _short(text: str, width: int = 120) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= width else text[: width - 3] + "..."
