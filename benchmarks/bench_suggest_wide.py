"""Wide tables: the whole suggest call at 40, 80 and 160 columns on the same rows, idle and loaded.

    .venv/bin/python benchmarks/bench_suggest_wide.py [--quick] [--rows 50000] [--runs 3] [--out FILE]

Each width runs in a fresh process (``_workloads.py suggest``: the fleet of
bench_suggest.py, a full model fitted first in the same process, then the
first ``afterlook.suggest(model, cases, train=train, case_ids=["miss"])``
call of the process, all passes), so time and peak memory are those of one
whole call as a user meets it. Printed: the candidates tried, the median
seconds over ``--runs`` processes, the peak resident memory of the process,
and the ratio to the 40-column time (target: 160 columns within 8x of 40,
under 1 GB). The screen keeps only the best candidates of every group; no
matrix of all candidates x rows is built, which is what keeps the memory
flat while the candidates grow with the square of the columns.

A full run writes ``results_suggest_wide.md`` next to this file (or ``--out``).
"""

from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import _workloads  # noqa: E402
from _workloads import median  # noqa: E402

WIDTHS = (40, 80, 160)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10,000 rows, 40 and 80 columns, one process each, idle only")
    ap.add_argument("--rows", type=int, default=50_000)
    ap.add_argument("--runs", type=int, default=3, help="fresh processes per width")
    ap.add_argument("--out", help="where to write the Markdown results (a full run: results_suggest_wide.md)")
    args = ap.parse_args(argv)
    widths, loads = WIDTHS, ("idle", "loaded")
    if args.quick:
        args.rows, args.runs, widths, loads = min(args.rows, 10_000), 1, WIDTHS[:2], ("idle",)
    out_path = args.out or (None if args.quick else str(HERE / "results_suggest_wide.md"))
    lines = []

    def say(text: str = "") -> None:
        print(text, flush=True)
        lines.append(text)

    with tempfile.TemporaryDirectory(prefix="afterlook-wide-") as tmp:
        folders = {}
        for d in widths:
            folders[d] = Path(tmp) / f"d{d}"
            _workloads.prepare(folders[d], args.rows, d, 1000)
        say(f"# wide-table suggest benchmark, {datetime.date.today().isoformat()}")
        say()
        say(f"{os.cpu_count()} cores, Python {platform.python_version()}; {args.rows:,} training rows, 3,000 "
            f"labelled cases, 1 miss; {args.runs} fresh process(es) per width, medians; 1-minute load average "
            f"before the run {os.getloadavg()[0]:.1f}")
        say()
        say("| columns | load | candidates tried | whole suggest s (first call) | CPU s | second call s | peak MB | "
            "ratio to 40 columns (wall / CPU) | target |")
        say("| ---: | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- |")
        for load in loads:
            with _workloads.load(load):
                base = base_cpu = None
                for d in widths:
                    runs = [_workloads.run_step("suggest", folders[d]) for _ in range(args.runs)]
                    t = median([r["afterlook"] for r in runs])
                    t2 = median([r["afterlook_again"] for r in runs])
                    c = median([r["afterlook_cpu"] for r in runs])
                    peak = max(r["peak_mb"] for r in runs)
                    base, base_cpu = (t, c) if base is None else (base, base_cpu)
                    target = "" if d == widths[0] else (
                        f"<= 8x, < 1024 MB: {'met' if t / base <= 8 and peak < 1024 else 'NOT met'} (wall)"
                        if d == 160 else "info")
                    say(f"| {d} | {load} | {runs[0]['tried']:,} | {t:.2f} | {c:.2f} | {t2:.2f} | {peak:.0f} | "
                        f"{t / base:.1f}x / {c / base_cpu:.1f}x | {target} |")
        say()
        say(f"1-minute load average after the run: {os.getloadavg()[0]:.1f}. Other processes on the machine "
            "were not controlled: 'idle' means no spinners of ours.")
    if out_path:
        Path(out_path).write_text("\n".join(lines) + "\n", encoding="utf-8")
        print(f"wrote {out_path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
