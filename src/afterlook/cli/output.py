"""The CLI's two outputs besides Rich tables: the ``--json`` document and warnings.

``--json`` prints exactly one document on stdout (strict JSON: NaN and
infinities are refused, so every number was made ``None`` upstream);
warnings go to stderr, one line each, so they never mix with the document.
Warnings and errors often quote data (a column name, a case id): they are
made printable, so a control character in a file never reaches the terminal.
"""

from __future__ import annotations

import json
import sys
from typing import Iterable

from ..core.printable import printable

__all__ = ["emit_json", "warn", "error_line"]

PREFIX = "afterlook"


def emit_json(doc) -> None:
    """Write ``doc`` as the command's one JSON document on stdout."""
    sys.stdout.write(json.dumps(doc, indent=2, allow_nan=False) + "\n")


def warn(messages: Iterable[str]) -> None:
    """One ``afterlook: warning: ...`` line on stderr per message."""
    for m in messages:
        print(f"{PREFIX}: warning: {printable(m)}", file=sys.stderr)


def error_line(message: str, kind: str = "error") -> None:
    """The one stderr line of a failed command (``kind``: error, internal error, ...)."""
    print(f"{PREFIX}: {kind}: {printable(message)}", file=sys.stderr)


def saved_model_summary(model, out_path, cases, **extra) -> tuple[dict, object]:
    """The JSON summary ``fit`` and ``model import`` print for the model they saved, and its ranking
    quality on ``cases`` (None without labelled cases); the model's and the quality's warnings said once."""
    quality = None
    summary = {"model": out_path, "kind": model.kind, "features": model.features, "threshold": model.threshold,
               "policy": str(model.policy), "chosen_on": model.threshold_basis, **extra,
               "fingerprint": model.fingerprint()}
    if cases is not None and cases.labels is not None:
        from ..analysis.session import Session
        from ..core.quality import ranking_quality

        scored = Session(model, cases).scored
        quality = ranking_quality(scored.log_density, cases.labels, model.threshold)
        summary["metrics"] = scored.confusion().to_dict()
        summary["model_quality"] = quality.to_dict()
    warn(model.warnings + (quality.warnings() if quality is not None else []))
    return summary, quality


def metrics_lines(summary: dict, quality, cases_path) -> list[str]:
    """The metrics of :func:`saved_model_summary` on the cases, as text lines (one formatting rule)."""
    from ..analysis import shown

    if "metrics" not in summary:
        return []
    m = summary["metrics"]
    lines = [f"on {cases_path}: precision {shown.share(m['precision'])}, recall {shown.share(m['recall'])}, "
             f"F1 {shown.share(m['f1'])} (tp {m['tp']}, fp {m['fp']}, fn {m['fn']}, tn {m['tn']})"]
    if quality is not None and quality.roc_auc is not None:
        lines.append(f"ranking on {cases_path}: ROC AUC {shown.share(quality.roc_auc)}, average precision "
                     f"{shown.share(quality.average_precision)} (chance: 0.5 and "
                     f"{shown.share(quality.anomaly_share)})")
    return [printable(line) for line in lines]
