"""Many misses at once, on a large case table: listing them, and searching candidates for all of them.

On ``afterlook.demo.generate(seed=7, n_cases=--cases)`` (100,000 cases by default; the model is the
one ``afterlook demo`` fits on its 6,000 training rows: the demo's recipe, independent, threshold by
best F1, station and hour as unit and time columns, so the search also tries each station's own
baselines and changes), in this process, after one untimed warm-up of each:

1. misses   ``afterlook.misses(model, cases)``: every case scored, the labelled anomalies
            left unflagged listed worst margin first, each with its context columns
            (station, hour, review note) as text. Against the plain alternative with
            the same model: ``Model.score(df)``, then pandas (the labelled rows not
            flagged, sorted by margin, their context columns as text). Both lists are
            checked to name the same cases in the same order.
2. suggest  ``afterlook.suggest(model, cases, train=train)`` for every miss at once (all
            passes: exact statistics, the fleet's unit and change candidates, re-fits,
            held-out gains, stability over folds).
            There is no plain alternative for this one: the time per miss is printed
            beside it, and the number of misses.
3. workbench  the case list of ``afterlook review`` on the same files (Textual's headless
            driver, 120 x 40): ``n`` pressed to show and hide the near catches (the list is
            built again each time), each press until it is drawn again. Against the same app with Textual's own
            ``DataTable`` in place of the case list's ``FixedWidthTable`` (which skips
            measuring the cells of new rows when every column has its width).

Numbers are printed (best and median of ``--repeat`` runs); nothing is asserted.

    python benchmarks/bench_many_misses.py [--cases 100000] [--repeat 3] [--quick] [--out FILE]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SEED = 7


def _stats(times: list[float]) -> str:
    return f"best {min(times):7.3f} s   median {statistics.median(times):7.3f} s"


def _timed(fn, repeat: int) -> tuple[list[float], object]:
    out = fn()  # warm-up, untimed
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - start)
    return times, out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=None, help="demo cases to generate (default 100,000)")
    parser.add_argument("--repeat", type=int, default=None, help="timed runs of each (default 3)")
    parser.add_argument("--quick", action="store_true", help="10,000 cases, one timed run (a smoke run)")
    parser.add_argument("--out", help="also write what is printed, as Markdown, to this file")
    args = parser.parse_args(argv)
    args.cases = args.cases or (10_000 if args.quick else 100_000)
    args.repeat = args.repeat or (1 if args.quick else 3)
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import _workloads

    import afterlook
    from afterlook.analysis.session import context_text
    from afterlook.demo import generate
    from afterlook.demo.writer import DEMO_DERIVE, DEMO_KIND, DEMO_TIME_COL, DEMO_TRANSFORM, DEMO_UNIT_COL
    from afterlook.store.tables import write_table

    with tempfile.TemporaryDirectory(prefix="afterlook-bench-many-") as tmp, \
            _workloads.printed_to(args.out, "many-misses benchmark", argv if argv is not None else sys.argv[1:]):
        folder = Path(tmp)
        scenario = generate(seed=SEED, n_cases=args.cases)
        write_table(scenario.train, folder / "train.csv")
        write_table(scenario.cases, folder / "cases.csv")
        train = afterlook.load_table(folder / "train.csv")
        cases = afterlook.load_table(folder / "cases.csv", require_labels=True)
        model = afterlook.fit(train, cases=cases, kind=DEMO_KIND, threshold="f1", derive=DEMO_DERIVE,
                              transform=DEMO_TRANSFORM, unit_col=DEMO_UNIT_COL, time_col=DEMO_TIME_COL,
                              shaping=True)  # the fit `afterlook demo` makes
        frame, labels = cases.frame, cases.labels.astype(bool)
        context = list(cases.context_columns)

        def plain():
            scored = model.score(frame)
            margin = scored["log_density"].to_numpy() - model.threshold
            rows = np.flatnonzero(labels & ~scored["flagged"].to_numpy() & np.isfinite(margin))
            rows = rows[np.argsort(-margin[rows], kind="mergesort")]
            listed = frame.iloc[rows]
            texts = {c: [context_text(v) for v in listed[c].tolist()] for c in context}
            return [str(i) for i in cases.ids[rows]], texts

        ours_t, ours = _timed(lambda: afterlook.misses(model, cases), args.repeat)
        plain_t, (plain_ids, _) = _timed(plain, args.repeat)
        same = [m.case for m in ours.misses] == plain_ids
        print(f"1. misses on {args.cases:,} cases ({len(ours.misses):,} misses, context columns: {', '.join(context)})")
        print(f"   afterlook.misses                          : {_stats(ours_t)}")
        print(f"   Model.score + pandas (filter, sort, text) : {_stats(plain_t)}")
        print(f"   afterlook / plain (medians)               : "
              f"{statistics.median(ours_t) / statistics.median(plain_t):.2f}x   same cases in the same order: {same}")
        print()

        n_miss = len(ours.misses)
        sug_t, res = _timed(lambda: afterlook.suggest(model, cases, train=train), args.repeat)
        print(f"2. suggest for all {n_miss:,} misses at once ({len(train.frame):,} training rows, {res.tried:,} "
              "candidates tried)")
        print(f"   afterlook.suggest                         : {_stats(sug_t)}")
        print(f"   per miss (median / misses)                : {statistics.median(sug_t) / n_miss * 1000:.2f} ms")
        print()

        model.save(folder / "model.json")
        from textual.widgets import DataTable

        from afterlook.tui.widgets.case_list import FixedWidthTable

        ours_rows, ours_t = _workbench_toggles(folder, FixedWidthTable, args.repeat)
        plain_rows, plain_t = _workbench_toggles(folder, DataTable, args.repeat)
        print(f"3. workbench case list, 'n' pressed (near catches shown / hidden: {max(ours_rows):,} / "
              f"{min(ours_rows):,} rows listed)")
        print(f"   FixedWidthTable (afterlook)               : {_stats(ours_t)}")
        print(f"   Textual's DataTable                       : {_stats(plain_t)}")
        print(f"   afterlook / plain (medians)               : "
              f"{statistics.median(ours_t) / statistics.median(plain_t):.2f}x   same rows: {ours_rows == plain_rows}")
    return 0


def _workbench_toggles(folder: Path, table_class, repeat: int) -> tuple[list[int], list[float]]:
    """Rows listed after each press and the seconds from pressing ``n`` to the redrawn list, with
    ``table_class`` as the case list's table; one untimed press first."""
    import asyncio

    from afterlook.tui import create_app
    from afterlook.tui.widgets import case_list

    saved = case_list.FixedWidthTable
    case_list.FixedWidthTable = table_class  # what CaseList.compose builds the list with
    rows: list[int] = []
    times: list[float] = []

    async def run() -> None:
        app = create_app(str(folder / "model.json"), str(folder / "cases.csv"), train_path=str(folder / "train.csv"),
                         casebook=str(folder / "book.json"), auto_candidates=False)
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            await pilot.press("n")
            await pilot.pause()
            for _ in range(2 * repeat):
                start = time.perf_counter()
                await pilot.press("n")
                await pilot.pause()
                times.append(time.perf_counter() - start)
                rows.append(app.query_one("#cases").row_count)

    try:
        asyncio.run(run())
    finally:
        case_list.FixedWidthTable = saved
    return rows, times


if __name__ == "__main__":
    raise SystemExit(main())
