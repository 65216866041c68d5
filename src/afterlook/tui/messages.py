"""Messages of the workbench: small classes that carry data up to the App.

Widgets post the first group when the user does something; workers post the
second group when slow work finishes. The App owns the state and answers
both by setting attributes on the widgets (attributes down, messages up).
"""

from __future__ import annotations

from textual.message import Message

# -- from widgets ------------------------------------------------------------


class CaseHighlighted(Message):
    """The cursor of the case list moved to a case."""

    def __init__(self, case_id: str) -> None:
        super().__init__()
        self.case_id = case_id


class FilterChanged(Message):
    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text


class FeatureHighlighted(Message):
    """The cursor of the evidence table moved to a feature."""

    def __init__(self, name: str) -> None:
        super().__init__()
        self.name = name


class CandidateHighlighted(Message):
    def __init__(self, index: int) -> None:
        super().__init__()
        self.index = index


class CandidateChosen(Message):
    """Enter (or a second click) on a candidate: apply it."""

    def __init__(self, index: int) -> None:
        super().__init__()
        self.index = index


class ExpressionEdited(Message):
    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text


class ExpressionSubmitted(Message):
    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text


class HistogramResized(Message):
    """The histogram has room for this many bins."""

    def __init__(self, bins: int) -> None:
        super().__init__()
        self.bins = bins


# -- from workers ------------------------------------------------------------


class CandidatesProgress(Message):
    def __init__(self, case_id: str, stage: str, fraction: float) -> None:
        super().__init__()
        self.case_id = case_id
        self.stage = stage
        self.fraction = fraction


class CandidatesReady(Message):
    def __init__(self, case_id: str, result) -> None:
        super().__init__()
        self.case_id = case_id
        self.result = result


class TrialReady(Message):
    def __init__(self, case_id: str, label: str, result, view) -> None:
        super().__init__()
        self.case_id = case_id
        self.label = label
        self.result = result
        self.view = view


class HistogramReady(Message):
    def __init__(self, view) -> None:
        super().__init__()
        self.view = view


class PairReady(Message):
    def __init__(self, view) -> None:
        super().__init__()
        self.view = view


class CasebookLoaded(Message):
    def __init__(self, case_ids: set[str]) -> None:
        super().__init__()
        self.case_ids = case_ids


class CasebookSaved(Message):
    def __init__(self, case_id: str, status: str, entry: dict) -> None:
        super().__init__()
        self.case_id = case_id
        self.status = status
        self.entry = entry


class WorkFailed(Message):
    """A worker stopped on bad input or a bug; shown as a notification."""

    def __init__(self, what: str, message: str, case_id: str | None = None) -> None:
        super().__init__()
        self.what = what
        self.message = message
        self.case_id = case_id


class HistogramStep(Message):
    """Previous (-1) or next (+1) feature or candidate in the histogram."""

    def __init__(self, step: int) -> None:
        super().__init__()
        self.step = step


class HistogramShapedToggled(Message):
    """The shaped switch of the histogram was pressed."""


class WorkbenchReady(Message):
    """The workbench screen is mounted: the App may fill it."""


class PanelMounted(Message):
    """A lazily mounted panel ("candidates", "histogram", "try") is ready for its state."""

    def __init__(self, panel: str) -> None:
        super().__init__()
        self.panel = panel
