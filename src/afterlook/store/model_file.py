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
from ..core.printable import printable
from .documents import check_document, load_json

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
    if not raw.lstrip().startswith(b"{"):
        raise AfterlookError(f"model file {p} is not JSON (is it a table or another file?)")
    doc = load_json(raw, f"model file {p}")
    check_document(doc, format_name=FORMAT, version=VERSION, kind="model file", path=p,
                   expected="an afterlook model file")
    check_model_numbers(doc, f"model file {p}")
    return doc


def check_model_numbers(doc: dict, what: str) -> None:
    """The model's numbers hold together: the first problem is one :class:`AfterlookError` line.

    The schema has checked the types; here: the features, mean, variance or
    covariance and quantile grid agree in size, every number is finite, a
    variance is positive, a covariance is symmetric and positive definite, the
    threshold is finite and each feature's quantile grid is ordered. A file
    that fails was damaged or edited by hand: scoring with it would blame
    the cases for the model's fault.
    """
    import numpy as np

    density = doc["model"]
    names = density["features"]
    d = len(names)
    if d == 0:
        raise AfterlookError(f"{what} has no features")
    if len(set(names)) != d:
        raise AfterlookError(f"{what} names a feature twice")
    base = doc["recipe"]["base"]
    derived = [x["name"] for x in doc["recipe"].get("derived", [])]
    if list(base) + list(derived) != list(names):
        raise AfterlookError(f"{what}: the recipe's features and the density's features differ")
    mean = np.asarray(density["mean"], dtype=np.float64)
    if mean.shape != (d,):
        raise AfterlookError(f"{what}: the mean has {mean.size} values for {d} features")
    if not np.all(np.isfinite(mean)):
        raise AfterlookError(f"{what}: the mean of feature {printable(names[int(np.argmin(np.isfinite(mean)))])} "
                             "is not finite")
    if density["kind"] == "independent":
        if "variance" not in density:
            raise AfterlookError(f"{what}: an independent model needs a variance")
        var = np.asarray(density["variance"], dtype=np.float64)
        if var.shape != (d,):
            raise AfterlookError(f"{what}: the variance has {var.size} values for {d} features")
        bad = ~(np.isfinite(var) & (var > 0))
        if bad.any():
            raise AfterlookError(f"{what}: the variance of feature {printable(names[int(np.argmax(bad))])} "
                                 "is not a positive finite number")
    else:
        if "covariance" not in density:
            raise AfterlookError(f"{what}: a full model needs a covariance")
        rows = density["covariance"]
        if len(rows) != d or any(len(r) != d for r in rows):
            raise AfterlookError(f"{what}: the covariance is not {d} x {d}")
        cov = np.asarray(rows, dtype=np.float64)
        if not np.all(np.isfinite(cov)):
            raise AfterlookError(f"{what}: the covariance holds a number that is not finite")
        scale = float(np.max(np.abs(cov))) or 1.0
        if np.max(np.abs(cov - cov.T)) > 1e-9 * scale:
            raise AfterlookError(f"{what}: the covariance is not symmetric")
        try:
            np.linalg.cholesky(cov)
        except np.linalg.LinAlgError:
            raise AfterlookError(f"{what}: the covariance is not positive definite") from None
    threshold = doc["threshold"]["value"]
    if not np.isfinite(float(threshold)):
        raise AfterlookError(f"{what}: the threshold is not a finite number")
    if "quantiles" not in doc["training"] and doc["training"].get("imported"):
        return  # an imported model (no training rows) carries no quantile grid
    grid = doc["training"]["quantiles"]
    values = grid.get("values") if isinstance(grid, dict) else None
    if not isinstance(values, list) or len(values) != d or any(not isinstance(v, list) for v in values):
        raise AfterlookError(f"{what}: the quantile grid does not have one list per feature")
    points = {len(v) for v in values}
    if len(points) != 1 or points.pop() < 2:
        raise AfterlookError(f"{what}: the quantile grid's lists differ in length or are too short")
    for name, v in zip(names, values):
        if any(isinstance(x, bool) or not isinstance(x, (int, float)) for x in v):
            raise AfterlookError(f"{what}: the quantile grid of feature {printable(name)} holds a value that is "
                                 "not a number")
        q = np.asarray(v, dtype=np.float64)
        if not np.all(np.isfinite(q)):
            raise AfterlookError(f"{what}: the quantile grid of feature {printable(name)} is not finite")
        if np.any(np.diff(q) < 0):
            raise AfterlookError(f"{what}: the quantile grid of feature {printable(name)} is not in order")


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
