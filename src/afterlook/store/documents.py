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

__all__ = ["check_document", "schema", "SCHEMAS"]

#: The folder of the JSON Schema files (package data, shipped in the wheel).
SCHEMAS = Path(__file__).resolve().with_name("schemas")


@lru_cache(maxsize=None)
def schema(format_name: str) -> dict:
    """The JSON Schema of a format (``afterlook-model`` or ``afterlook-casebook``)."""
    return json.loads((SCHEMAS / f"{format_name}.schema.json").read_text("utf-8"))


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
    error = jsonschema.exceptions.best_match(validator.iter_errors(doc))
    if error is None:
        return
    where = "/".join(str(p) for p in error.absolute_path) or "top level"
    raise AfterlookError(f"{what} does not match the {format_name} format at {where}: {_short(error.message)}")


def _short(text: str, width: int = 120) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= width else text[: width - 3] + "..."
