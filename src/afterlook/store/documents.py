"""The check every afterlook JSON document passes: format name, version, then its JSON Schema.

Both documents afterlook writes (the model file and the casebook) carry
``{"format": NAME, "version": N}``. :func:`check_document` refuses, in one
line and in this order, anything that is not such a document, a newer major
version, and a document that does not match the format's JSON Schema
(shipped in ``afterlook/store/schemas/``, which is also the documentation
of each format).
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

from ..core.errors import AfterlookError
from ..core.printable import printable

__all__ = ["check_document", "load_json", "first_bad_number", "schema", "SCHEMAS"]

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


def _validate(doc: dict, format_name: str, what: str) -> None:
    import jsonschema  # here: only reading a document needs it

    validator = jsonschema.Draft202012Validator(schema(format_name))
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
