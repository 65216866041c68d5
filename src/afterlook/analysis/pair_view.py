"""The pair view: a pair candidate's two readings against each other, the case among normal rows.

A pair candidate (a ratio, a difference, a product, their shaped forms) is a
statement about two readings that normally move together. This module lays
out what the workbench and the HTML report draw for it: the normal rows as a
density on a grid of the two readings, the other labelled anomalies, the case,
and the candidate's normal band (the cells where the candidate's value lies
between its 1% and 99% quantiles over the normal rows; for ``y / x`` that is
the wedge between two lines through the origin). The counting is
:func:`afterlook.core.histograms.pair_counts`, on the same window rule as the
one-feature histogram.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..core import expressions
from ..core.errors import AfterlookError
from ..core.histograms import PAIR_BAND, PairCounts, pair_counts

__all__ = ["PairView", "pair_view", "pair_of"]


@dataclass(frozen=True)
class PairView:
    name: str  # the candidate's name
    expression: str
    x_name: str  # across (the second input: a ratio's denominator)
    y_name: str  # up (the first input: a ratio's numerator)
    case: str
    case_xy: tuple[float, float]
    counts: PairCounts
    normal_source: str
    by_unit: bool = False  # the candidate reads each row's unit (a baseline, its past): no band on this plane

    @property
    def band_words(self) -> str:
        if self.counts.band is None:
            if self.by_unit:
                return "no normal band (the candidate reads each unit's own baseline, not these two readings alone)"
            return "no normal band (the candidate reads more than these two columns)"
        lo, hi = PAIR_BAND
        return f"normal band: the candidate between its {lo:.0%} and {hi:.0%} quantiles over normal rows"


def pair_of(candidate) -> tuple[str, str] | None:
    """(up, across) readings of a pair candidate, or None when it is not built on two readings."""
    inputs = tuple(getattr(candidate, "inputs", ()) or ())
    if len(inputs) != 2 or inputs[0] == inputs[1]:
        return None
    return inputs[0], inputs[1]


def pair_view(session, name: str, expression: str, inputs: tuple[str, str], case_id: str, *,
              nx: int = 40, ny: int = 12) -> PairView:
    """Counts for the pair view of one candidate and one case (a session of the workbench or the API)."""
    y_name, x_name = inputs
    normal, cases = session.scope("normal", [y_name, x_name]), session.scope("cases", [y_name, x_name])
    for col in (y_name, x_name):
        if col not in normal or col not in cases:
            raise AfterlookError(f"the pair view needs the reading '{col}', which the tables do not have")
    i = session.row(case_id)
    others = session.labels.copy() if session.labels is not None else np.zeros(len(cases[x_name]), bool)
    others[i] = False
    # zscore(...) and unit baselines frozen on the normal rows, as a fit does
    expr = expressions.parse(expression, known_columns=session.known_columns).fit(normal)
    feature = None
    # a unit-relative candidate depends on each row's unit (its baseline, its past), not on the two readings
    # alone: no band can be drawn on their plane
    by_unit = expr.history > 0 or any(k.split("(", 1)[0] in ("unit_median", "unit_scale") for k in expr.calls)
    if set(expr.columns) <= {x_name, y_name} and not by_unit:
        def feature(x, y):
            return expr.evaluate({x_name: x, y_name: y})
    case_xy = (float(cases[x_name][i]), float(cases[y_name][i]))
    counts = pair_counts(normal[x_name], normal[y_name], case_xy, cases[x_name][others], cases[y_name][others],
                         nx=nx, ny=ny, feature=feature)
    return PairView(name, expression, x_name, y_name, str(session.ids[i]), case_xy, counts,
                    session.training.source, by_unit)
