"""The second pass's robust statistics of a candidate, on the whole normal sample or a seeded subset.

Used by :func:`afterlook.core.candidates.second_pass` and
:func:`afterlook.analysis.discovery.suggest`: every chosen candidate is first ranked on
a subset of the sample, and the ones that can be listed are measured on the whole
sample (see the DEVELOPERS notes on the candidate search).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from . import expressions
from .chance import chance_verdict
from .search_inputs import seeded_subset
from .tails import Deviations
from .units import PAST, TIMES, UNITS

if TYPE_CHECKING:
    from .candidates import Candidate, Settings

#: Kinds whose ``r`` is the correlation of two raw columns, as the moment screen computed it on the rows it
#: read (:mod:`afterlook.core.candidate_pairs`); measured whole, it is taken again on the whole sample.
RAW_PAIR_KINDS = ("ratio", "log_ratio", "standardized_difference", "product", "square_ratio", "shaped_difference")

__all__ = ["QUICK_ROWS", "EXACT_FIRST", "RobustMeasure", "is_whole", "measured_whole"]


#: A normal sample larger than twice this is first measured on a seeded subset of this many of its rows
#: (:func:`second_pass`): every chosen candidate is ranked on the subset, and the ones that can be
#: listed are measured again on the whole sample. A sample of at most twice this is measured whole.
QUICK_ROWS = 8192
#: Candidates measured on the whole sample straight after the subset ranking, at least (more on demand): twice
#: what suggest re-fits by default, because ties in the ranking keys are broken by counts the subset only
#: estimates (with 12 the breast-cancer test of the two steps listed a different fifth candidate).
EXACT_FIRST = 24


class RobustMeasure:
    """The second pass's robust statistics of one candidate, on the whole normal sample or on a seeded
    subset of its rows (see :func:`second_pass`).

    ``rows_used`` of a measured candidate tells which: the whole sample's size once :meth:`exactly`
    has measured it.
    """

    def __init__(self, sample, targets, target_ids, other_anomalies, other_is_miss, n_tried, settings):
        self.sample, self.targets, self.target_ids = sample, targets, list(target_ids)
        self.n_tried, self.settings = n_tried, settings
        self.others = other_anomalies is not None and other_is_miss is not None and len(other_is_miss) > 0
        self.other_anomalies, self.other_is_miss = other_anomalies, other_is_miss
        self.n = len(next(iter(sample.values())))
        # frozen statistics of the calls fitted so far (zscore(x) recurs in many candidates), per sample measured on
        # (the whole one or the subset, both kept alive by this measure)
        self._frozen: dict[int, dict] = {}
        # the targets and the other anomalies evaluated together, one call per candidate, when every
        # function is row by row (no unit labels, times or earlier readings in either mapping)
        self._both = None
        if self.others and not any(k in m for m in (targets, other_anomalies) for k in (UNITS, TIMES, PAST)) \
                and set(targets) == set(other_anomalies):
            self._both = {k: np.concatenate([np.asarray(targets[k], dtype=np.float64),
                                             np.asarray(other_anomalies[k], dtype=np.float64)]) for k in targets}
            self._n_targets = len(np.asarray(next(iter(targets.values()))))
        # a sample that carries each row's unit and its units' past (the fleet search's) is measured whole:
        # a subset of its rows would lose the previous readings lag() reads
        if any(k in sample for k in (UNITS, TIMES, PAST)):
            self.quick_sample = None
        else:
            quick = seeded_subset(sample, QUICK_ROWS, settings.random_state)
            self.quick_sample = None if quick is sample else quick

    def quickly(self, c: Candidate) -> bool:
        """Measure ``c`` on the subset (on the whole sample when it is small); False: it cannot be measured."""
        return self._measure(c, self.sample if self.quick_sample is None else self.quick_sample)

    def exactly(self, c: Candidate) -> bool:
        """Measure ``c`` on the whole sample unless it already is; False: it cannot be measured."""
        return c.rows_used == self.n or self._measure(c, self.sample)

    def _measure(self, c: Candidate, sample) -> bool:
        settings = self.settings
        if c.measured_by is None and c.parsed is not None and c.parsed.is_fitted:
            expr = c.parsed  # frozen before the search measured it (unit baselines: on the rows try freezes them on)
        else:
            # zscore(...) in a candidate is frozen on the normal rows it is measured on (never on the targets)
            expr = c.parsed = expressions.parse(c.expression).fit(sample, memo=self._frozen.setdefault(id(sample), {}))
        v = expr.evaluate(sample)
        v = v[np.isfinite(v)]
        if v.size < 30 or v.std() == 0:
            return False
        if self._both is not None:
            both = expr.evaluate(self._both)
            tv, ov = both[:self._n_targets], both[self._n_targets:]
        else:
            tv = expr.evaluate(self.targets)
            ov = expr.evaluate(self.other_anomalies) if self.others else None
        if not np.all(np.isfinite(tv)):
            return False
        spread = Deviations(v)
        if self.others:
            spread.prepare(1.0 - settings.alarm_rate)  # the alarm quantile of the deviations
        zs = spread.robust_z(tv)
        tails = spread.tails(tv)
        probs = [t[0] for t in tails]  # Python floats
        guard = chance_verdict(np.array(probs), self.n_tried)
        best = int(np.argmin(probs))
        ids = self.target_ids
        c.case_z_by_case = dict(zip(ids, np.asarray(zs, dtype=np.float64).tolist()))
        c.tail_by_case = dict(zip(ids, probs))
        c.case_z = float(np.median(zs)) if len(zs) > 1 else float(zs[0])
        c.tail, c.tail_method = float(tails[best][0]), tails[best][1]
        c.adjusted_tail = guard.adjusted_tail
        c.targets_exposed = guard.targets_exposed
        c.chance_method, c.count_tail = guard.method, guard.count_tail
        c.beyond_chance = guard.beyond_chance(settings.chance_level)
        if self.others:
            med = spread.median
            cut = spread.quantile(1.0 - settings.alarm_rate)
            sep = np.isfinite(ov) & (np.abs(ov - med) > cut)
            c.other_anomalies = int(len(ov))
            c.other_anomalies_separated = int(sep.sum())
            c.other_misses = int(self.other_is_miss.sum())
            c.other_misses_separated = int((sep & self.other_is_miss).sum())
        c.measured_by = self
        if sample is self.sample:
            c.rows_used = self.n
            if c.kind in RAW_PAIR_KINDS:
                c.r = self._correlation(c.inputs)
        else:
            c.rows_used = -len(next(iter(sample.values())))
        return True

    def _correlation(self, inputs) -> float:
        """Pearson correlation of the candidate's two input columns over the whole sample (the screen's
        ``r`` came from the rows it read; 0 where a column is constant, as the screen has it)."""
        a, b = (self.sample.get(x) for x in inputs)
        if a is None or b is None:
            return 0.0
        x, y = a - a.mean(), b - b.mean()
        with np.errstate(invalid="ignore", divide="ignore"):
            r = float(x @ y / math.sqrt(float(x @ x) * float(y @ y)))
        return r if math.isfinite(r) else 0.0

    def exact_prefix(self, ranked: list[Candidate], count: int) -> list[Candidate]:
        """:func:`measured_whole` (kept as a method for callers holding one measure)."""
        return measured_whole(ranked, count, self.settings)


def is_whole(c: Candidate) -> bool:
    """Whether ``c``'s robust statistics are its sample's whole numbers (not a subset's)."""
    m = c.measured_by
    return m is None or c.rows_used == m.n


def measured_whole(ranked: list[Candidate], count: int, settings: Settings) -> list[Candidate]:
    """``ranked`` with its first ``count`` candidates measured on their whole sample (each by the
    :class:`RobustMeasure` that measured it first, so candidates of different samples can share one
    list), re-ranked, repeated until the first ``count`` all are; one that cannot be measured whole
    is dropped."""
    while True:
        head = [c for c in ranked[:count] if not is_whole(c)]
        if not head:
            return ranked
        dropped = {id(c) for c in head if not c.measured_by.exactly(c)}
        ranked = [c for c in ranked if id(c) not in dropped]
        ranked.sort(key=lambda c: c.rank_key(settings.min_correlation))
