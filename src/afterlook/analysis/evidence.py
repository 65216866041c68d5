"""Evidence: the misses of a model on labelled cases, and why one case scored as it did."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .frames import Tabular
from ..core.errors import AfterlookError
from ..core.explain import FeatureEvidence, evidence, transform_direction
from ..core.recipe import apply_transform
from ..core.quality import RankingQuality, UnseenValue, ranking_quality, unseen_values
from ..store.columns import numeric_columns_of
from ..core.thresholds import Confusion
from ..core.blas import with_limited_blas
from .unit_evidence import unit_context
from .session import Session, case_context, case_contexts, prepare, table_name

__all__ = ["Miss", "MissesResult", "misses", "ExplainResult", "explain", "explain_case"]


@dataclass
class Miss:
    """A labelled anomaly left unflagged: its log-density, margin above the threshold and context."""
    case: str
    log_density: float
    margin: float
    context: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"case": self.case, "log_density": self.log_density, "margin": self.margin, "context": self.context}


@dataclass
class MissesResult(Tabular):
    """Misses (labelled anomalies left unflagged), worst margin first."""

    threshold: float
    n_cases: int
    n_anomalies: int
    misses: list[Miss]
    metrics: Confusion
    unscored: list[str]
    model_kind: str = ""
    warnings: list[str] = field(default_factory=list)
    quality: RankingQuality | None = None
    never_seen: list[UnseenValue] = field(default_factory=list)
    outside_domain_anomalies: list[str] = field(default_factory=list)
    outside_domain_normals: list[str] = field(default_factory=list)

    @property
    def n_flagged_anomalies(self) -> int:
        """Labelled anomalies that were scored and flagged."""
        return self.n_anomalies - len(self.misses) - len(self.unscored)

    def coverage(self) -> str:
        """What the misses list covers, in one sentence: never an all-clear for anomalies that were not scored."""
        if self.n_anomalies == 0:
            return "no labelled anomalies among the cases: there is nothing to miss or catch"
        missed, unscored, flagged = len(self.misses), len(self.unscored), self.n_flagged_anomalies
        if unscored == 0:
            if missed == 0:
                return f"no misses: all {flagged} labelled anomalies are flagged"
            return f"{flagged} of {self.n_anomalies} labelled anomalies flagged, {missed} missed"
        return (f"of {self.n_anomalies} labelled anomalies: {flagged} flagged, {missed} missed, {unscored} not scored "
                "(missing or undefined features): nothing can be concluded about the ones not scored")

    def to_dict(self) -> dict:
        return {
            "threshold": self.threshold,
            "n_cases": self.n_cases,
            "n_anomalies": self.n_anomalies,
            "n_flagged_anomalies": self.n_flagged_anomalies,
            "n_unscored_anomalies": len(self.unscored),
            "coverage": self.coverage(),
            "n_misses": len(self.misses),
            "misses": [m.to_dict() for m in self.misses],
            "metrics": self.metrics.to_dict(),
            "unscored_anomalies": list(self.unscored),
            "outside_domain": {"anomalies": list(self.outside_domain_anomalies),
                               "normal_cases": list(self.outside_domain_normals)},
            "model_quality": self.quality.to_dict() if self.quality is not None else None,
            "never_seen_in_normal": [u.to_dict() for u in self.never_seen],
        }


@with_limited_blas
def misses(model, cases=None) -> MissesResult:
    """Labelled anomalies the model left unflagged, largest margin first.

    ``margin = log_density - threshold`` (> 0 for a miss): how far above the
    threshold the case sat. Anomalies whose features are NaN (e.g. a derived
    feature divided by zero) cannot be scored; they are listed separately
    in ``unscored_anomalies`` rather than silently counted either way.
    """
    session = prepare(model, cases)
    model = session.model
    sc = session.scored
    table = sc.table
    if table.labels is None:
        raise AfterlookError(f"{table_name(table)} has no label column; misses need labelled cases (--label-col)")
    y = table.labels
    finite = ~np.isnan(sc.log_density)  # scored; -inf (outside a feature's domain, or overflow) is flagged
    is_miss = y & ~sc.flagged & finite
    idx = np.flatnonzero(is_miss)
    margin = sc.margin  # one subtraction over every case, not one per miss
    idx = idx[np.argsort(-margin[idx], kind="mergesort")]
    rows = [Miss(str(table.ids[i]), float(sc.log_density[i]), float(margin[i]), context)
            for i, context in zip(idx, case_contexts(table, idx))]
    unscored = [str(table.ids[i]) for i in np.flatnonzero(y & ~finite)]
    warnings = list(table.warnings)
    if (~finite).any():
        warnings.append(f"{int((~finite).sum())} case(s) have a missing or infinite reading and were not scored")
    domain = sc.domain_ids()
    if domain:
        how = ("flagged as outside the feature's domain" if model.undefined == "flag"
               else "left unscored (the model's undefined-value policy is skip)")
        warnings.append(f"{len(domain)} case(s) have a feature that is undefined on finite readings (e.g. a zero "
                        f"divisor or the log of a non-positive value): {how}")
    overflowed = int(overflow_mask(sc).sum())
    if overflowed:
        warnings.append(f"{overflowed} case(s) have readings so extreme that the log-density overflows: "
                        "scored as minus infinity and flagged")
    quality = ranking_quality(sc.log_density, y, model.threshold)
    warnings += quality.warnings()
    never_seen = never_seen_values(model, table)  # a finding: in the result, not a warning
    return MissesResult(model.threshold, int(len(y)), int(y.sum()), rows, sc.confusion(), unscored,
                        model.describe_kind(), warnings, quality, never_seen,
                        sc.domain_ids(labelled=True), sc.domain_ids(labelled=False))


def overflow_mask(sc) -> np.ndarray:
    """Cases at -inf because a finite reading overflowed (not because a feature is outside its domain)."""
    mask = np.isneginf(sc.log_density)
    if getattr(sc, "outside_domain", None) is not None:
        mask &= ~sc.outside_domain
    return mask


def never_seen_values(model, table) -> list[UnseenValue]:
    """Columns constant over the model's normal training rows (left out of it) that differ on some cases."""
    constants = (model.training or {}).get("constant_columns") or {}
    present = [c for c in constants if c in table.numeric_columns]
    if not present or table.labels is None:
        return []
    cases = numeric_columns_of(table.frame, present)
    return unseen_values({c: np.array([float(constants[c])]) for c in present}, cases, table.labels)


@dataclass
class ExplainResult(Tabular):
    """Per-feature evidence for one case."""

    case: str
    log_density: float
    threshold: float
    features: list[FeatureEvidence]
    flagged: bool
    label: bool | None
    context: dict
    model_kind: str
    outside_domain: bool = False  # -inf because a feature is undefined on finite readings (not an overflow)
    percentiles: bool = True  # False for an imported model: no training rows, no quantile grid
    unit_context: object | None = None  # analysis.unit_evidence.UnitContext: the case against its unit's own normal

    @property
    def overflow(self) -> bool:
        """-inf because a finite reading is so extreme that its log-density overflows."""
        return bool(np.isneginf(self.log_density)) and not self.outside_domain

    @property
    def margin(self) -> float:
        return self.log_density - self.threshold

    @property
    def full_model(self) -> bool:
        """Whether the evidence has conditional z (a full-covariance model)."""
        return any(f.conditional_z is not None for f in self.features)

    def features_by_cost(self) -> list[FeatureEvidence]:
        """The features, largest cost (most negative contribution, -inf on overflow) first; NaN counts as 0, ties keep recipe order."""
        return sorted(self.features, key=lambda f: 0.0 if math.isnan(f.contribution) else f.contribution)

    def to_dict(self) -> dict:
        ld = self.log_density if np.isfinite(self.log_density) else None
        return {
            "case": self.case,
            "log_density": ld,
            "threshold": self.threshold,
            "margin": None if ld is None else self.margin,
            "overflow": self.overflow,
            "flagged": bool(self.flagged),
            "label": None if self.label is None else ("anomaly" if self.label else "normal"),
            "model_kind": self.model_kind,
            "context": self.context,
            "features": [f.to_dict() for f in self.features],
            "unit_context": None if self.unit_context is None else self.unit_context.to_dict(),
        }


@with_limited_blas
def explain(model, cases, case_id=None) -> ExplainResult:
    """Why one case scored as it did: per-feature z, percentile, contribution, conditional z.

    Called as ``explain(model, cases, case_id)`` or ``explain(session, case_id)``.
    """
    if isinstance(model, Session) and case_id is None:
        return explain_case(model, cases)
    return explain_case(prepare(model, cases), case_id)


def oriented_to_readings(model, ev: list[FeatureEvidence], raw: dict, i: int) -> list[FeatureEvidence]:
    """Each feature's evidence with its reading (before the transform) and the transform's direction there."""
    from dataclasses import replace

    out = []
    for f in ev:
        reading = float(raw[f.name][i]) if f.name in raw else None
        t = model.recipe.transforms.get(f.name)
        direction = 1
        if t is not None and reading is not None:
            direction = transform_direction(lambda v, t=t, n=f.name: apply_transform(t, n, v), reading)
        out.append(replace(f, reading=reading, direction=direction))
    return out


@with_limited_blas
def explain_case(session: Session, case_id) -> ExplainResult:
    """:func:`explain` on a prepared session (the cases are not scored again)."""
    model = session.model
    sc = session.scored
    i = session.row(case_id)
    ev = evidence(model.density, sc.features[i], model.quantiles)
    ev = oriented_to_readings(model, ev, session.raw_features("cases"), i)
    label = None if sc.labels is None else bool(sc.labels[i])
    domain = sc.outside_domain is not None and bool(sc.outside_domain[i])
    return ExplainResult(str(sc.table.ids[i]), float(sc.log_density[i]), model.threshold, ev,
                         bool(sc.flagged[i]), label, case_context(sc.table, i), model.describe_kind(), domain,
                         model.quantiles is not None, unit_context(session, i))
