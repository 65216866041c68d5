"""Whole operations as a user meets them, against the obvious alternative, idle and loaded.

    .venv/bin/python benchmarks/bench_end_to_end.py [--quick] [--runs 3] [--only suggest,command,fit,score,start] [--out FILE]

Every afterlook time is a whole API call or a whole command in a fresh
process (``_workloads.py``), with afterlook's default of one BLAS thread; the
reference runs in the same process on the same values with the same thread
count. Each setting runs idle and then "loaded" (one spinning process per
core meanwhile). Printed: medians over ``--runs`` fresh processes and the
ratio afterlook / reference (below 1: afterlook is faster).

* suggest: ``afterlook.suggest(model, cases, train=train, case_ids=["miss"])``
  on 200,000 x 40 with 3,000 labelled cases, all passes (screen, exact
  statistics, collinearity check, re-fits, held-out K-fold gains, stability),
  first call of the process (what ``fit`` imported is already imported;
  whatever ``suggest`` imports itself counts) and a second call; then the
  first call of new processes that find the shaping choices in the cache
  folder, or in the model file that ``afterlook fit`` wrote; reference: the
  plain pandas loop of ``bench_suggest.py`` (every pair candidate built as a
  column, its mean and sd, the miss's z; target: the first call at least
  50x faster);
* fit: ``afterlook.fit(train_df, kind="full")`` (threshold, summary and
  quantile grid included; the grid's first read is added to be sure nothing
  is left for later) against ``numpy.cov`` of the same array, first and
  second call of each in the process; and the same with ``shaping=True``
  (the search's shaping choices recorded, as ``afterlook fit`` does);
* score: ``Model.score(df)`` on 1,000,000 x 32 (DataFrame in, scored
  DataFrame out) against ``scipy.stats.multivariate_normal.logpdf(df)``;
* start: the ``afterlook misses`` command on the demo (the console script)
  against ``python -c "import numpy, pandas"``, and ``afterlook --version`` /
  ``--help``; each command once first (bytecode cache written), then taking turns.

A full run writes ``results_end_to_end.md`` next to this file (or ``--out``);
a run with ``--only`` writes nothing unless ``--out`` is given.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import _workloads  # noqa: E402
from _workloads import median  # noqa: E402


def _wall(cmd: list[str], env: dict | None = None) -> float:
    t = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, env=env, timeout=600)
    return time.perf_counter() - t


def start_times(demo: Path, runs: int) -> dict:
    """``afterlook misses`` and ``--version`` against the numpy + pandas import, taking turns."""
    bindir = Path(sys.executable).parent
    script = str(bindir / "afterlook")
    # As a user meets them: with Python's bytecode cache (an environment that turns it off would
    # compile afterlook's source on every start, which no installed copy does), after one warm-up run.
    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "AFTERLOOK_BLAS_THREADS", "PYTHONDONTWRITEBYTECODE")}
    cmds = {
        "misses": [script, "misses", str(demo / "model.json"), str(demo / "cases.csv")],
        "version": [script, "--version"],
        "help": [script, "--help"],
        "import numpy, pandas": [sys.executable, "-c", "import numpy, pandas"],
    }
    for cmd in cmds.values():
        _wall(cmd, env)
    out = {k: [] for k in cmds}
    for _ in range(runs):
        for k, cmd in cmds.items():
            out[k].append(_wall(cmd, env))
    return {k: median(v) for k, v in out.items()}


def command_rows(say, folder: Path, rows: int, load: str, runs: int) -> None:
    """The whole ``afterlook suggest`` command (the console script: start, imports, reading both Parquet
    tables, the search, the JSON), taking turns: cold (cache folder off, a model file without shaping
    choices), cold with glibc's own malloc settings (``MALLOC_TOP_PAD_`` at its default value turns
    afterlook's tuning off, cli/allocator.py), with the shaping choices an earlier command left in the
    cache folder, and with the model file ``afterlook fit`` wrote (its shaping choices; cache folder off)."""
    script = str(Path(sys.executable).parent / "afterlook")
    _fit_command(folder)

    def cmd(model: str) -> list[str]:
        return [script, "suggest", str(folder / model), str(folder / "cases.parquet"), "miss",
                "--train", str(folder / "train.parquet"), "--json"]

    base = {k: v for k, v in os.environ.items()
            if k not in ("OPENBLAS_NUM_THREADS", "AFTERLOOK_BLAS_THREADS", "PYTHONDONTWRITEBYTECODE", "GLIBC_TUNABLES")
            and not k.startswith("MALLOC_")}
    with tempfile.TemporaryDirectory() as cache:
        off = {**base, "AFTERLOOK_CACHE_DIR": "off"}
        runs_of = {"cold": (cmd("model_plain.json"), off),
                   "glibc": (cmd("model_plain.json"), {**off, "MALLOC_TOP_PAD_": str(128 * 1024)}),
                   "warm": (cmd("model_plain.json"), {**base, "AFTERLOOK_CACHE_DIR": cache}),
                   "file": (cmd("model_cli.json"), off)}
        for c, env in runs_of.values():
            _wall(c, env)  # bytecode written, the cache folder filled
        times = {k: [] for k in runs_of}
        for _ in range(runs):
            for k, (c, env) in runs_of.items():
                times[k].append(_wall(c, env))
    t = {k: median(v) for k, v in times.items()}
    say(f"| `afterlook suggest` command, {rows:,} x 40 Parquet, 1 miss, cache folder off, model file without "
        f"shaping choices | {load} | {t['cold']:.2f} | the same with glibc's default malloc settings | "
        f"{t['glibc']:.2f} | {t['cold'] / t['glibc']:.2f}x | |")
    say(f"| the same command, shaping choices read from the cache folder | {load} | {t['warm']:.2f} | "
        f"the cold command above | {t['cold']:.2f} | {t['warm'] / t['cold']:.2f}x | |")
    say(f"| the same command with the model file `afterlook fit` wrote (shaping choices in it), cache folder off "
        f"| {load} | {t['file']:.2f} | the cold command above | {t['cold']:.2f} | {t['file'] / t['cold']:.2f}x | |")


def _fit_command(folder: Path) -> None:
    """``afterlook fit`` on the training table, once: ``model_cli.json`` (with the shaping choices it records)
    and ``model_plain.json``, the same document without them (what the API's fit would save)."""
    if (folder / "model_cli.json").exists():
        return
    exe = Path(sys.executable).with_name("afterlook")
    subprocess.run([str(exe), "fit", str(folder / "train.parquet"), "--cases", str(folder / "cases.parquet"),
                    "--kind", "full", "--out", str(folder / "model_cli.json")],
                   check=True, capture_output=True, env={**os.environ, "AFTERLOOK_CACHE_DIR": "off"})
    doc = json.loads((folder / "model_cli.json").read_text("utf-8"))
    del doc["training"]["shaping"]
    (folder / "model_plain.json").write_text(json.dumps(doc, indent=2), encoding="utf-8")


def suggest_rows(say, folder: Path, rows: int, load: str, runs: int) -> None:
    """The suggest rows: first and second call (medians over fresh processes) against the pandas loop,
    in wall seconds and in CPU seconds of the process (what a busy shared machine changes least);
    then the first call of new processes that find an earlier process's shaping choices in the
    cache folder (a user's second ``afterlook suggest`` on the same training table)."""
    sug = [_workloads.run_step("suggest", folder) for _ in range(runs)]
    with tempfile.TemporaryDirectory() as cache:
        _workloads.run_step("suggest", folder, cache=cache)  # fills the folder (a cold call itself)
        warm = [_workloads.run_step("suggest", folder, cache=cache) for _ in range(runs)]
    _fit_command(folder)
    from_file = [_workloads.run_step("suggest_file", folder) for _ in range(runs)]
    loop = _workloads.run_step("pandas_loop", folder)
    ref, ref_cpu = loop["reference"], loop["reference_cpu"]
    for label, results, key in (
            ("first call (model fitted in the process, nothing remembered)", sug, "afterlook"),
            ("second call in the process (shaping remembered)", sug, "afterlook_again"),
            ("first call of a new process after an earlier one (shaping choices read from the cache folder)",
             warm, "afterlook"),
            ("first call of a new process with the model file `afterlook fit` wrote (shaping choices in the file, "
             "cache folder off)", from_file, "afterlook")):
        t, c = median([r[key] for r in results]), median([r[key + "_cpu"] for r in results])
        say(f"| whole suggest, {rows:,} x 40, 3,000 cases, 1 miss, {label} | {load} | {t:.2f} (CPU {c:.2f}) | "
            f"plain pandas loop ({loop['tried']} candidates) | {ref:.2f} (CPU {ref_cpu:.2f}) | {t / ref:.3f}x "
            f"(loop / afterlook {ref / t:.1f}; CPU {ref_cpu / c:.1f}; target >= 50) | "
            + (f"{sug[0]['tried']} tried; same result twice: {all(r['same_result_twice'] for r in sug)} |"
               if results is sug and key == "afterlook" else
               f"same top 3 as the cold calls: {all(r['top'] == sug[0]['top'] for r in results)} |"
               if results is warm or results is from_file else "|"))
    say(f"| peak memory of the suggest process | {load} | {max(r['peak_mb'] for r in sug + warm):.0f} MB | | | | |")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="50,000 x 40, 100,000 x 32 to score, one process each")
    ap.add_argument("--runs", type=int, default=3, help="fresh processes per measurement")
    ap.add_argument("--out", help="where to write the Markdown results (a full run: results_end_to_end.md)")
    ap.add_argument("--only", default="suggest,command,fit,score,start",
                    help="comma-separated parts to run: suggest, command, fit, score, start (default: all)")
    args = ap.parse_args(argv)
    parts = {p.strip() for p in args.only.split(",") if p.strip()}
    rows, score_rows = (50_000, 100_000) if args.quick else (200_000, 1_000_000)
    if args.quick:
        args.runs = 1
    full = parts >= {"suggest", "command", "fit", "score", "start"}
    out_path = args.out or (None if args.quick or not full else str(HERE / "results_end_to_end.md"))

    lines = []

    def say(text: str = "") -> None:
        print(text, flush=True)
        lines.append(text)

    with tempfile.TemporaryDirectory(prefix="afterlook-e2e-") as tmp:
        folder = Path(tmp)
        _workloads.prepare(folder, rows, 40, score_rows if "score" in parts else 1000)
        if "start" in parts:
            from afterlook.demo.writer import write_demo

            write_demo(folder / "demo", seed=7)
        load_before = os.getloadavg()[0]
        say(f"# end-to-end benchmark, {datetime.date.today().isoformat()}")
        say()
        say(f"{os.cpu_count()} cores, Python {platform.python_version()}; {args.runs} fresh process(es) per "
            f"figure, medians; 1-minute load average before the run {load_before:.1f}")
        say()
        say("| operation | load | afterlook s | reference | reference s | ratio | agreement |")
        say("| --- | --- | ---: | --- | ---: | ---: | ---: |")
        for load in ("idle", "loaded"):
            with _workloads.load(load):
                if "suggest" in parts:
                    suggest_rows(say, folder, rows, load, args.runs)
                if "command" in parts:
                    command_rows(say, folder, rows, load, args.runs)
                if "fit" in parts:
                    for step, what in (("fit", "threshold, summary and quantile grid"),
                                       ("fit_shaping", "the same and the shaping choices, `shaping=True`: "
                                                       "what `afterlook fit` records")):
                        fits = [_workloads.run_step(step, folder) for _ in range(args.runs)]
                        # the grid is made inside the fit; its first read is added to be sure
                        t_f = median([r["afterlook"] + r["grid_read"] for r in fits])
                        r_f = median([r["reference"] for r in fits])
                        say(f"| whole fit, {rows:,} x 40 DataFrame ({what}) | {load} | {t_f:.3f} | numpy.cov | "
                            f"{r_f:.3f} | {t_f / r_f:.1f}x | {max(r['agreement'] for r in fits):.1e} |")
                        # a first numpy.cov of a fresh process can pay for numpy's huge pages (see README.md here);
                        # the second calls of both show the steady state
                        t_2 = median([r["afterlook_again"] for r in fits])
                        r_2 = median([r["reference_again"] for r in fits])
                        say(f"| the same fit, second call in the process | {load} | {t_2:.3f} | numpy.cov, second call | "
                            f"{r_2:.3f} | {t_2 / r_2:.1f}x | |")
                if "score" in parts:
                    scores = [_workloads.run_step("score", folder) for _ in range(args.runs)]
                    t_c, r_c = median([r["afterlook"] for r in scores]), median([r["reference"] for r in scores])
                    t_c2 = median([r["afterlook_again"] for r in scores])
                    r_c2 = median([r["reference_again"] for r in scores])
                    say(f"| Model.score(df), {score_rows:,} x 32, first call | {load} | {t_c:.3f} | scipy "
                        f"multivariate_normal.logpdf | {r_c:.3f} | {t_c / r_c:.2f}x | "
                        f"{max(r['agreement'] for r in scores):.1e} |")
                    say(f"| Model.score(df), second call | {load} | {t_c2:.3f} | scipy logpdf, second call | "
                        f"{r_c2:.3f} | {t_c2 / r_c2:.2f}x | |")
                if "start" in parts:
                    st = start_times(folder / "demo", max(args.runs, 3) if not args.quick else 1)
                    say(f"| `afterlook misses` on the demo (command) | {load} | {st['misses']:.2f} | "
                        f"`python -c \"import numpy, pandas\"` | {st['import numpy, pandas']:.2f} | "
                        f"{st['misses'] / st['import numpy, pandas']:.2f}x | |")
                    say(f"| `afterlook --version` (command) | {load} | {st['version']:.2f} | | | | |")
                    say(f"| `afterlook --help` (command) | {load} | {st['help']:.2f} | | | | |")
        say()
        say(f"1-minute load average after the run: {os.getloadavg()[0]:.1f}. Other processes on the machine "
            "were not controlled: 'idle' means no spinners of ours.")
    if out_path:
        Path(out_path).write_text("\n".join(lines) + "\n", encoding="utf-8")
        print(f"wrote {out_path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
