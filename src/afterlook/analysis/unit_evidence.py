"""A case against its own unit's normal, for ``explain`` when the model knows each row's unit.

A reading can sit well inside the fleet's range and far outside its own unit's
(a station high up the hill always sees a lower suction pressure). For every
base column of the model this module sets the case's reading against

* its unit's own baseline over the normal training rows: the median and the
  scale (MAD x 1.4826), exactly the statistics ``unit_median(x)`` and
  ``unit_scale(x)`` freeze (:func:`afterlook.core.units.fit_baseline`, a unit
  with fewer than 30 rows falls back to the fleet's, and says so), and
* the fleet's: the same two statistics over every normal training row,

as two robust z values. The baselines do not depend on the case: they are
computed once per session. Without training rows to read (an imported model
and no ``--train``) there is no unit context.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..core.errors import AfterlookError
from ..core.units import UNITS, fit_baseline
from .session import Session

__all__ = ["UnitReading", "UnitContext", "unit_context", "OWN_FAR", "FLEET_ORDINARY"]

#: |z| against the unit's own normal from which a reading is called far from it, and |z| against the fleet's
#: under which it is called ordinary for the fleet (rules of thumb, common practice for robust z values).
OWN_FAR = 4.0
FLEET_ORDINARY = 3.0


@dataclass(frozen=True)
class UnitReading:
    """One column of the case against its unit's and the fleet's normal."""

    feature: str
    reading: float
    unit_median: float
    unit_scale: float
    unit_z: float
    fleet_median: float
    fleet_scale: float
    fleet_z: float
    fallback: bool  # the unit had too few training rows: its baseline is the fleet's

    @property
    def only_against_its_unit(self) -> bool:
        """Ordinary for the fleet, far from its own unit's normal."""
        return abs(self.unit_z) >= OWN_FAR and abs(self.fleet_z) < FLEET_ORDINARY and not self.fallback

    def to_dict(self) -> dict:
        def num(x):
            return float(x) if math.isfinite(x) else None

        return {"feature": self.feature, "reading": num(self.reading), "unit_median": num(self.unit_median),
                "unit_scale": num(self.unit_scale), "unit_z": num(self.unit_z),
                "fleet_median": num(self.fleet_median), "fleet_scale": num(self.fleet_scale),
                "fleet_z": num(self.fleet_z), "fallback": self.fallback,
                "only_against_its_unit": self.only_against_its_unit}


@dataclass(frozen=True)
class UnitContext:
    """The case's unit, how many normal training rows it has, and every column against both normals."""

    unit: str
    unit_rows: int
    source: str
    readings: list[UnitReading] = field(default_factory=list)

    def by_distance(self) -> list[UnitReading]:
        """Farthest from the unit's own normal first."""
        return sorted(self.readings, key=lambda r: -abs(r.unit_z) if math.isfinite(r.unit_z) else 0.0)

    def to_dict(self) -> dict:
        # the training source is said in words on screen only: how it was found (given, recorded) is not a number
        return {"unit": self.unit, "unit_rows": self.unit_rows, "features": [r.to_dict() for r in self.by_distance()]}


def unit_context(session: Session, i: int) -> UnitContext | None:
    """Case row ``i`` against its unit's own normal and the fleet's; None without a unit column or training rows."""
    model = session.model
    if not model.unit_col:
        return None
    baselines = _baselines(session)
    if baselines is None:
        return None
    cases = session.columns("cases")
    unit = str(cases[UNITS][i])
    rows, source, per_column = baselines
    readings = []
    for name, (median, scale) in per_column.items():
        x = float(cases[name][i])
        own = median["units"].get(unit), scale["units"].get(unit)
        fallback = own[0] is None or own[1] is None
        um, us = (median["fleet"], scale["fleet"]) if fallback else own
        with np.errstate(all="ignore"):
            readings.append(UnitReading(name, x, um, us, (x - um) / us, median["fleet"], scale["fleet"],
                                        (x - median["fleet"]) / scale["fleet"], fallback))
    return UnitContext(unit, int(rows.get(unit, 0)), source, readings)


def _baselines(session: Session):
    """(normal rows per unit, training source, {column: (unit_median params, unit_scale params)}), once per session."""
    cached = getattr(session, "_unit_baselines", None)
    if cached is not None:
        return cached or None
    try:
        normal = session.columns("normal")
        source = session.training.source
    except AfterlookError:
        session._unit_baselines = ()
        return None
    units = normal[UNITS]
    labels, counts = np.unique(np.asarray(units, dtype=object).astype(str), return_counts=True)
    per_column = {}
    for name in session.model.recipe.base:
        try:
            per_column[name] = tuple(fit_baseline(fn, name, f"{fn}({name})", normal[name], units)
                                     for fn in ("unit_median", "unit_scale"))
        except AfterlookError:  # a column without a fleet scale (constant): nothing to compare against
            continue
    session._unit_baselines = (dict(zip(labels.tolist(), counts.tolist())), source, per_column)
    return session._unit_baselines
