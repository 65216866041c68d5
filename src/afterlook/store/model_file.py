"""The model file: JSON with a format name and a schema version.

``{"format": "afterlook-model", "version": 1, ...}``. A file that is not
JSON, names another format, carries a newer major version or does not
match ``schemas/afterlook-model.schema.json`` (the documented format) is
refused with one clear line (:func:`afterlook.store.documents.check_document`);
nothing is guessed.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from ..core.errors import AfterlookError
from .atomic import write_bytes_atomic
from .documents import check_document

FORMAT = "afterlook-model"
VERSION = 1


def read_model_document(path: str | os.PathLike) -> dict:
    """Read and validate a model file; returns the parsed document."""
    p = Path(path)
    if not p.exists():
        raise AfterlookError(f"model file not found: {p}")
    if p.is_dir():
        raise AfterlookError(f"model path is a directory, not a file: {p}")
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise AfterlookError(f"cannot read model file {p}: {exc.strerror or exc}") from None
    try:
        doc = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise AfterlookError(f"model file {p} is not JSON (is it a table or another file?)") from None
    check_document(doc, format_name=FORMAT, version=VERSION, kind="model file", path=p,
                   expected="an afterlook model file")
    return doc


def write_json_atomic(doc: dict, path: str | os.PathLike, *, sort_keys: bool = False) -> None:
    """Write JSON atomically (see :mod:`afterlook.store.atomic`)."""
    try:
        text = json.dumps(doc, indent=2, sort_keys=sort_keys, allow_nan=False) + "\n"
    except ValueError:
        raise AfterlookError(f"cannot write {path}: a value is NaN or infinite") from None
    write_bytes_atomic(path, text.encode("utf-8"))


def write_model_document(doc: dict, path: str | os.PathLike) -> None:
    """Write a model document atomically (insertion order, as :meth:`Model.to_dict` builds it)."""
    write_json_atomic(doc, path)
