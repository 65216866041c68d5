"""Result objects in a notebook: ``to_frame()`` (a pandas DataFrame) and ``_repr_html_``.

Every frame is built from the result's own ``to_dict()``, the document the
CLI prints with ``--json``, so a number in a notebook is the number in the
terminal. Nested values (a candidate's held-out estimate, a case's
before/after) are flattened into ``outer.inner`` columns
(``pandas.json_normalize``). The HTML is pandas' table (data escaped, never
markup) under a one-line summary of the result's scalar fields.

==================  =========================================  ==============
result              one row per                                index
==================  =========================================  ==============
misses              miss, worst margin first                   ``case``
explain             feature                                    ``name``
suggest             candidate, best first                      ``name``
try                 before / after metrics (``"cases"``: case) ``which``
shape               column                                     ``name``
casebook check      entry                                      ``case``
==================  =========================================  ==============
"""

from __future__ import annotations

__all__ = ["Tabular", "frame_of", "html_of"]

#: result class name -> (key of the list of rows in to_dict(), index column)
_ROWS = {
    "MissesResult": ("misses", "case"),
    "ExplainResult": ("features", "name"),
    "SuggestResult": ("candidates", "name"),
    "ShapeReport": ("features", "name"),
    "CheckResult": ("details", "case"),
}


class Tabular:
    """Mixin of the result classes: a DataFrame and a notebook display built from ``to_dict()``."""

    def to_frame(self, part: str | None = None):
        """The result as a pandas DataFrame (``part="cases"`` on a try result: its listed cases)."""
        return frame_of(self, part)

    def _repr_html_(self) -> str:
        return html_of(self)


def frame_of(result, part: str | None = None):
    """A DataFrame of ``result``'s rows (see the module docstring)."""
    import pandas as pd

    doc = result.to_dict()
    name = type(result).__name__
    if name == "TryResult":
        if part == "cases":
            return _frame(pd, doc["cases"], "case")
        if part is not None:
            raise ValueError(f"part must be None or 'cases', got {part!r}")
        rows = [{"which": which, **doc[which]} for which in ("before", "after")]
        return _frame(pd, rows, "which")
    if part is not None:
        raise ValueError(f"{name}.to_frame() has no part {part!r}")
    key, index = _ROWS[name]
    return _frame(pd, doc.get(key) or [], index)


def _frame(pd, rows: list, index: str):
    frame = pd.json_normalize(rows) if rows else pd.DataFrame()
    if index in frame.columns:
        frame = frame.set_index(index)
    return frame


def html_of(result) -> str:
    """A one-line summary and the result's table, as HTML (every value escaped)."""
    import html  # here: a notebook's HTML view only; every command would import it (2 ms) for nothing

    doc = result.to_dict()
    summary = "; ".join(f"{k} {_scalar(v)}" for k, v in doc.items()
                        if not isinstance(v, (list, dict)) and v is not None)
    parts = [f"<p><b>{html.escape(_title(result))}</b>" + (f": {html.escape(summary)}" if summary else "") + "</p>"]
    if type(result).__name__ == "TryResult":
        parts.append(frame_of(result).to_html(escape=True, float_format=_float))
        cases = frame_of(result, "cases")
        if len(cases):
            parts.append(cases.to_html(escape=True, float_format=_float))
    else:
        parts.append(frame_of(result).to_html(escape=True, float_format=_float, max_rows=60))
    return "\n".join(parts)


_TITLES = {"MissesResult": "misses", "ExplainResult": "explain", "SuggestResult": "suggest", "TryResult": "try",
           "ShapeReport": "shape", "CheckResult": "casebook check"}


def _title(result) -> str:
    return "afterlook " + _TITLES.get(type(result).__name__, type(result).__name__)


def _scalar(value) -> str:
    return _float(value) if isinstance(value, float) else str(value)


def _float(value: float) -> str:
    return f"{value:.6g}"
