"""The search's unit-relative and change candidates for a model that knows each row's unit.

:func:`afterlook.analysis.discovery.suggest` asks :meth:`FleetSearch.prepare`
for one (None without a unit column: the search is then exactly what it was)
and adds its candidates: their count to the candidates tried (so the chance
guard covers them), their exact statistics by the same
:func:`afterlook.core.candidates.second_pass`, merged into the one ranking; the
re-fit and the held-out verdict are the same for every candidate. The
candidates, their texts and their first pass are in
:mod:`afterlook.core.unit_candidates`.

What this module adds is the rows: the baselines are frozen on the rows
``try`` freezes them on, and every mapping handed to the exact pass carries
the rest of its table as the units' past, so ``lag`` sees each row's real
previous reading although the sample, the targets and the other anomalies
are subsets of their tables.
"""

from __future__ import annotations

import numpy as np

from ..core import candidates as cand
from ..core import unit_candidates as units
from ..core.collinear import LinearSpan
from ..core.numbers import sample_rows
from ..core.units import TIMES
from .session import Session

__all__ = ["FleetSearch"]

#: Rows of the sample the affine-dependence check looks at (as discovery.ADDABLE_ROWS).
ADDABLE_ROWS = 512


class FleetSearch:
    """Unit-relative and change candidates for one session (see the module docstring)."""

    def __init__(self, session: Session, names: list[str], frozen: dict, sample: dict, cases: dict):
        self.session, self.names, self.frozen = session, names, frozen
        self.sample, self.cases = sample, cases
        self.has_time = TIMES in cases
        self.tried = 0

    @classmethod
    def prepare(cls, session: Session, names: list[str], settings: cand.Settings) -> "FleetSearch | None":
        """The fleet candidates' inputs, or None when the model has no unit column."""
        model = session.model
        if not model.unit_col:
            return None
        normal = session.scope("normal")
        # the baselines: frozen on the normal rows whose recipe inputs are all finite, as fit() freezes them
        raw = session.columns("normal")
        ok = np.ones(len(normal[names[0]]), dtype=bool)
        for c in model.recipe.required_columns():
            ok &= np.isfinite(raw[c])
        fit_rows = normal if ok.all() else units.with_past(normal, np.flatnonzero(ok), names)
        fit_rows = {k: v for k, v in fit_rows.items() if k != units.PAST}
        frozen = units.baselines(names, fit_rows)
        # the sample: rows whose every feature is finite, picked as core.search_inputs.finite_sample picks them
        finite = np.ones(len(normal[names[0]]), dtype=bool)
        for n in names:
            finite &= np.isfinite(normal[n])
        rows = np.flatnonzero(finite)
        rows = rows[sample_rows(rows.size, settings.sample_size, settings.random_state)]
        sample = units.with_past(normal, rows, names)
        return cls(session, names, frozen, sample, session.scope("cases"))

    def rows_of_cases(self, rows) -> dict:
        """Case rows as a mapping for the exact pass (the other cases as the units' past)."""
        return units.with_past(self.cases, np.asarray(rows, dtype=np.int64), self.names)

    def screen(self, target_rows) -> list[cand.Candidate]:
        """Every candidate with its first-pass z for these targets; :attr:`tried` counts them."""
        found, self.tried = units.screen(self.names, self.sample, self.rows_of_cases(target_rows), self.frozen,
                                         self.has_time)
        return found

    def exact(self, found: list, tried: int, target_rows, target_ids, other_rows, other_is_miss,
              settings: cand.Settings, progress=None, exact_first: int = cand.EXACT_FIRST) -> list[cand.Candidate]:
        """:func:`afterlook.core.candidates.second_pass` of the candidates on this search's mappings (measured
        on the whole sample: it carries the units' past, see :class:`afterlook.core.measure.RobustMeasure`)."""
        others = self.rows_of_cases(other_rows) if other_rows is not None else None
        return cand.second_pass(found, tried, self.sample, self.rows_of_cases(target_rows), target_ids, others,
                                other_is_miss, settings, progress=progress, exact_first=exact_first)

    def addable(self, ranked: list) -> tuple[list, int]:
        """Drop the candidates a full-covariance model cannot take (affine in its features); count them.

        As ``discovery._addable``, on a seeded subset of the sample's rows; the candidate is evaluated
        on the whole sample (so ``lag`` reads the real previous reading) and then restricted.
        """
        model = self.session.model
        if model.density.kind != "full" or not ranked:
            return ranked, 0
        n = len(self.sample[self.names[0]])
        rows = sample_rows(n, max(ADDABLE_ROWS, 8 * len(model.recipe.features)), 0)
        base = {k: self.sample[k][rows] for k in self.names}
        span = LinearSpan(model.recipe.transform_features(base).values)
        keep = [c for c in ranked if not span.contains(c.parsed.evaluate(self.sample)[rows])]
        return keep, len(ranked) - len(keep)


def merged(ranked: list, more: list, settings: cand.Settings) -> list:
    """Two ranked candidate lists as one, by :meth:`Candidate.rank_key`."""
    out = ranked + more
    out.sort(key=lambda c: c.rank_key(settings.min_correlation))
    return out
