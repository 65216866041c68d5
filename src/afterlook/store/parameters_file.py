"""The plain parameter document of a Gaussian detector: JSON or NumPy ``.npz``, never a pickle.

JSON follows ``schemas/afterlook-parameters.schema.json``. An ``.npz`` holds
the same keys as arrays: ``mean`` (d,), ``covariance`` (d, d) or
``variances`` (d,), ``columns`` (d,) strings, and optionally ``threshold``
(a number), ``derive`` (strings ``NAME=EXPR``, in order), ``transforms``
(strings ``FEATURE=TEXT``) and ``undefined`` (``flag`` or ``skip``). It is read
with ``numpy.load(allow_pickle=False)``: an array of Python objects or a
pickled file is refused, because unpickling runs code from the file.
Every problem is one :class:`AfterlookError` line naming the file.
"""

from __future__ import annotations

import os
import zipfile
from pathlib import Path

from ..core.errors import AfterlookError
from ..core.printable import printable
from .documents import _validate, load_json

FORMAT = "afterlook-parameters"
VERSION = 1
NPZ_KEYS = ("mean", "covariance", "variances", "columns", "threshold", "derive", "transforms", "undefined")
_PICKLE_MARK = b"\x80"  # every pickle protocol >= 2 starts with PROTO (0x80)


def read_parameters(path: str | os.PathLike) -> dict:
    """The checked parameter document of ``path`` (JSON or ``.npz``)."""
    p = Path(path)
    what = f"parameter file {printable(str(p))}"
    if not p.exists():
        raise AfterlookError(f"{what} not found")
    if p.is_dir():
        raise AfterlookError(f"{what} is a directory, not a file")
    try:
        with open(p, "rb") as fh:
            head = fh.read(8)
    except OSError as exc:
        raise AfterlookError(f"cannot read {what}: {exc.strerror or exc}") from None
    if head.startswith(b"PK"):
        doc = _npz_document(p, what)
    elif head.startswith(_PICKLE_MARK):
        raise AfterlookError(f"{what} looks like a Python pickle; afterlook never loads pickles (they can run code): "
                             "save the arrays with numpy.savez or write the JSON document (see the README)")
    elif head.lstrip().startswith(b"{") or not head.strip():
        doc = load_json(p.read_bytes(), what)
    else:
        raise AfterlookError(f"{what} is neither JSON nor a NumPy .npz file")
    if not isinstance(doc, dict):
        raise AfterlookError(f"{what} is not a JSON object")
    _validate(doc, FORMAT, what)
    return doc


def _npz_document(p: Path, what: str) -> dict:
    import numpy as np

    try:
        with np.load(p, allow_pickle=False) as data:
            unknown = sorted(set(data.files) - set(NPZ_KEYS))
            if unknown:
                raise AfterlookError(f"{what} has an array '{printable(unknown[0])}' afterlook does not read "
                                     f"(arrays: {', '.join(NPZ_KEYS)})")
            arrays = {k: data[k] for k in data.files}
    except AfterlookError:
        raise
    except ValueError as exc:
        if "pickle" in str(exc):
            raise AfterlookError(f"{what} holds Python objects (pickled); afterlook never loads pickles: store "
                                 "numbers and strings only") from None
        raise AfterlookError(f"{what} is not a readable .npz file ({exc})") from None
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise AfterlookError(f"{what} is not a readable .npz file ({exc})") from None
    doc: dict = {}
    for key, array in arrays.items():
        if array.dtype.kind not in "fiuU" or (key in ("columns", "derive", "transforms", "undefined")) != (array.dtype.kind == "U"):
            raise AfterlookError(f"{what}: array '{key}' has the wrong type ({array.dtype}); "
                                 "numbers for mean/covariance/variances/threshold, strings for the rest")
        if key in ("threshold", "undefined"):
            if array.shape not in ((), (1,)):
                raise AfterlookError(f"{what}: '{key}' must be a single value")
            doc[key] = array.reshape(()).item()
        elif key in ("derive", "transforms"):
            pairs = []
            for text in array.reshape(-1).tolist():
                name, sep, expr = text.partition("=")
                if not sep or not name.strip() or not expr.strip():
                    raise AfterlookError(f"{what}: '{key}' entries are NAME=TEXT, got '{printable(text)}'")
                pairs.append((name.strip(), expr.strip()))
            doc[key] = ([{"name": n, "expression": e} for n, e in pairs] if key == "derive" else dict(pairs))
        else:
            doc[key] = array.tolist()
    bad = [k for k in ("mean", "covariance", "variances", "threshold") if k in doc and _has_nonfinite(doc[k])]
    if bad:
        raise AfterlookError(f"{what}: '{bad[0]}' holds a value that is not a finite number")
    return doc


def _has_nonfinite(value) -> bool:
    import math

    if isinstance(value, list):
        return any(_has_nonfinite(v) for v in value)
    return isinstance(value, float) and not math.isfinite(value)
