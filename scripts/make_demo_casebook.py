"""Write the demo casebook of the invented pump-station fleet into casebooks/.

    .venv/bin/python scripts/make_demo_casebook.py [--out-dir casebooks] [--force]

Seeded and deterministic: the same afterlook and the same libraries give the
same numbers, up to the last bits another machine may differ in
(``tests/casebook/test_demo_casebook.py`` regenerates the files and fails
when a number of the checked-in copies drifts beyond a relative 1e-9, or a
word, count or fingerprint changes). The steps:

1. write the demo (``afterlook demo``'s files, seed 7) into a temp folder;
2. the worst miss is recorded ``explained`` with the first candidate that
   beats chance in ``suggest`` (the model is re-fitted with it);
3. the first bearing-wear miss is recorded ``needs-signal``;
4. the first case whose failure report was disputed is recorded
   ``label-disputed``.

Reviewer and timestamps are fixed, and every path stored is relative
(``model.json``, ``train.csv``), so nothing of the machine that ran it ends
up in the files. Outputs (``--out-dir``):

* ``pump-stations.casebook.json``: the casebook;
* ``pump-stations.report.md``: its Markdown report;
* ``pump-stations.model-with-feature.json``: the demo model re-fitted with
  the derived feature (creation time fixed, training path relative), so
  ``afterlook casebook check`` can be run against it.

An existing casebook with other content is only replaced with ``--force``
(and then kept as ``.bak``): a casebook is never overwritten silently.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from datetime import datetime, timedelta, timezone
from pathlib import Path

import afterlook
from afterlook.analysis.review import review_entry
from afterlook.demo.writer import write_demo
from afterlook.core.errors import AfterlookError
from afterlook.demo import generate
from afterlook.analysis.discovery import suggest
from afterlook.analysis.trial import try_features
from afterlook.analysis.report import render_markdown
from afterlook.store.casebook_file import Casebook, backup_path, write_bytes_atomic

SEED = 7
BOOK_NAME = "pump-stations.casebook.json"
REPORT_NAME = "pump-stations.report.md"
MODEL_NAME = "pump-stations.model-with-feature.json"
REVIEWER = "demo-reviewer"
REVIEW_START = datetime(2026, 6, 2, 9, 0, 0, tzinfo=timezone.utc)  # invented review morning
MODEL_CREATED = "2026-06-02T09:00:00+00:00"

NOTES = {
    "explained": ("{name} = {expression} exposes it: the motor draws an ordinary current for too little "
                  "hydraulic power. Found by suggest (beyond chance); after the re-fit the case is flagged."),
    "needs-signal": ("Bearing too hot for its load and the pump-hall temperature together. Pair features "
                     "can't capture a three-way relation; needs a temperature-vs-load-and-ambient model."),
    "label-disputed": ("Inspection found no fault and every reading is ordinary; the failure report itself "
                       "is in doubt. Ask the site before counting it as a miss."),
}

REPO = Path(__file__).resolve().parents[1]


class FixedClock:
    """Successive review times, 20 minutes apart, from REVIEW_START."""

    def __init__(self, start: datetime = REVIEW_START, step: timedelta = timedelta(minutes=20)):
        self.next, self.step = start, step

    def __call__(self) -> datetime:
        now, self.next = self.next, self.next + self.step
        return now


def build(work: Path) -> tuple[str, str, bytes]:
    """Demo files in ``work``; returns (casebook text, report text, model file bytes)."""
    train_path, cases_path, model_path = write_demo(work, seed=SEED)
    model = afterlook.load_model(model_path)
    cases = afterlook.load_table(cases_path, require_labels=True)
    train = afterlook.load_table(train_path)
    kinds = generate(seed=SEED).kinds

    found = afterlook.misses(model, cases).misses
    if not found:
        raise AfterlookError("the demo model has no misses; nothing to record")
    worst = found[0].case
    result = suggest(model, cases, train=train, case_ids=[worst], top=5)
    best = next((c for c in result.candidates if c.beyond_chance), None)
    if best is None:
        raise AfterlookError(f"no candidate beats chance for {worst}; the demo casebook needs one")
    bearing = next((m.case for m in found if kinds.get(m.case) == "bearing_wear"), None)
    disputed = sorted(cid for cid, kind in kinds.items() if kind == "disputed")
    if bearing is None or not disputed:
        raise AfterlookError("the demo has no bearing-wear miss or no disputed case")

    clock = FixedClock()
    common = {"reviewer": REVIEWER, "train": train, "model_path": model_path.name, "clock": clock}
    book = Casebook(work / BOOK_NAME)
    book.upsert(review_entry(model, cases, worst, "explained", derive={best.name: best.expression},
                             note=NOTES["explained"].format(name=best.name, expression=best.expression), **common))
    book.upsert(review_entry(model, cases, bearing, "needs-signal", note=NOTES["needs-signal"], **common))
    book.upsert(review_entry(model, cases, disputed[0], "label-disputed", note=NOTES["label-disputed"], **common))

    tried = try_features(model, cases, {best.name: best.expression}, train=train, focus=[worst])
    refit = tried.model
    refit.created = MODEL_CREATED
    refit.training["path"] = train_path.name
    refit.save(work / MODEL_NAME)
    return book.dumps(), render_markdown(book), (work / MODEL_NAME).read_bytes()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--out-dir", type=Path, default=REPO / "casebooks", help="folder for the files")
    parser.add_argument("--force", action="store_true",
                        help="replace a casebook whose content differs (the old one is kept as .bak)")
    args = parser.parse_args(argv)
    try:
        out = args.out_dir
        if not out.is_dir():
            raise AfterlookError(f"output folder {out} does not exist")
        with tempfile.TemporaryDirectory(prefix="afterlook-demo-casebook-") as tmp:
            book_text, report_text, model_bytes = build(Path(tmp))
        target = out / BOOK_NAME
        data = book_text.encode("utf-8")
        if target.exists() and target.read_bytes() != data:
            if not args.force:
                raise AfterlookError(f"{target} exists with other content; rerun with --force to replace it "
                                     f"(the old one is kept as {backup_path(target).name})")
            write_bytes_atomic(backup_path(target), target.read_bytes())
        write_bytes_atomic(target, data)
        write_bytes_atomic(out / REPORT_NAME, report_text.encode("utf-8"))
        write_bytes_atomic(out / MODEL_NAME, model_bytes)
    except AfterlookError as exc:
        print(f"make_demo_casebook: error: {exc.message}", file=sys.stderr)
        return 2
    for name in (BOOK_NAME, REPORT_NAME, MODEL_NAME):
        print(f"wrote {out / name}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
