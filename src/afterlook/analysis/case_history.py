"""A case's earlier reviews, as rows for ``casebook show`` and the reports.

The file layer (:meth:`afterlook.store.casebook_file.Casebook.upsert`) keeps
each earlier entry whole in ``history``, newest last; this module only picks
what a reader compares between reviews: when, who, the decision, the derived
feature it rested on, the case's score before and after that feature, and
the note.
"""

from __future__ import annotations

from typing import Callable

from .wording import flag_word

__all__ = ["HISTORY_HEAD", "history_rows", "dropped_feature"]

HISTORY_HEAD = ["reviewed", "reviewer", "status", "derived feature", "before", "after", "note"]


def history_rows(entry: dict, num: Callable[[object], str]) -> list[list[str]]:
    """One row per earlier review of ``entry``, oldest first; ``num`` formats a log-density."""
    rows = []
    for old in entry.get("history") or []:
        feature = old.get("derived_feature") or {}
        rows.append([
            str(old.get("updated") or "n/a"),
            str(old.get("reviewer") or "n/a"),
            str(old.get("status") or "n/a"),
            f"{feature.get('name')} = {feature.get('expression')}" if feature else "none",
            _score(old.get("before"), num),
            _score(old.get("after"), num),
            str(old.get("note") or ""),
        ])
    return rows


def _score(part, num) -> str:
    if not part:
        return "n/a"
    return f"{num(part.get('log_density'))} ({flag_word(part.get('flagged'))})"


def dropped_feature(previous: dict | None, entry: dict) -> dict | None:
    """The derived feature of the ``previous`` review that the new ``entry`` no longer names, if any."""
    if not previous:
        return None
    old = previous.get("derived_feature")
    if not old:
        return None
    names = {(d.get("name"), d.get("expression")) for d in entry.get("derived_features") or []}
    return None if (old.get("name"), old.get("expression")) in names else old
