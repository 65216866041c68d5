"""The status line: model, threshold and how it was chosen, counts and metrics."""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive
from textual.widgets import Static

from ...analysis import shown
from .. import format as fmt

SEP = " │ "


class StatusLine(Static):
    """Two lines; segments that do not fit the width are left out, the least important first."""

    COMPONENT_CLASSES = {"status--brand", "status--strong", "status--dim", "status--miss", "status--alarm"}

    summary = reactive(None, layout=True)

    def render(self) -> Text:
        s = self.summary
        if s is None:
            return Text("loading…")
        width = max(self.size.width, 20)
        head = [
            ("afterlook", "status--brand"),
            (f"{s.model_file} ({s.model_kind}, {s.n_features} features)", "status--strong"),
            (f"threshold {shown.threshold(s.threshold)}", "status--strong"),
            (s.policy, ""),
            (f"chosen on {s.chosen_on}", "status--dim"),
        ]
        # colour follows meaning: a count is drawn as a warning only when it is not zero
        misses = (f"{s.n_misses} misses", "status--miss" if s.n_misses else "status--dim")
        alarms = (f"{s.n_false_alarms} false alarms", "status--alarm" if s.n_false_alarms else "status--dim")
        counts_long = [
            (f"{s.n_cases} cases", ""),
            (f"{s.n_anomalies} anomalies", ""),
            misses,
            alarms,
            (f"precision {shown.share(s.precision)}  recall {shown.share(s.recall)}  F1 {shown.share(s.f1)}",
             "status--strong"),
        ]
        # narrow screens: the same facts in fewer letters, never fewer facts (P = precision, R = recall)
        counts_short = [
            (f"{s.n_anomalies} of {s.n_cases} anomalous", ""),
            misses,
            alarms,
            (f"P {shown.share(s.precision)} R {shown.share(s.recall)} F1 {shown.share(s.f1)}", "status--strong"),
        ]
        tail = []
        if s.n_unscored:
            tail.append((f"{s.n_unscored} anomalies not scored (NaN)", "status--alarm"))
        auc = []
        if s.roc_auc is not None:
            auc = [(f"AUC {shown.share(s.roc_auc)}  AP {shown.share(s.average_precision)}",
                    "status--alarm" if s.warnings else "status--dim")]
        counts = counts_long + tail + auc
        if _length(counts) > width:
            # the ranking quality only takes the room of precision/recall/F1 when the model itself is suspect
            counts = counts_short + tail + (auc if s.warnings else [])
        text = _line(head, width, self._style)
        text.append("\n")
        text.append_text(_line(counts, width, self._style))
        return text

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True) if name else None


def _length(parts) -> int:
    return sum(len(p) for p, _ in parts) + len(SEP) * (len(parts) - 1)


def _line(parts, width: int, style) -> Text:
    kept = []
    for part in parts:
        if _length(kept + [part]) <= width:
            kept.append(part)
    text = Text(no_wrap=True, overflow="ellipsis")
    for k, (part, kind) in enumerate(kept):
        if k:
            text.append(SEP, style=style("status--dim"))
        text.append(fmt.plain(part), style=style(kind))
    return text
