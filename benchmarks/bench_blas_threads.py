"""One BLAS thread against the default, for afterlook's tall-skinny products, idle and loaded.

    .venv/bin/python benchmarks/bench_blas_threads.py [--quick] [--rows 200000] [--cols 40] [--runs 3] [--out FILE]

Each measurement runs in a *fresh process* (every CLI command is one, and the
slow calls were worst there): it builds the matrix, then times the first
``X.T @ X`` and the median and worst of the next 20, under
``OPENBLAS_NUM_THREADS``/``OMP_NUM_THREADS`` = 1 and = the core count. The
"loaded" rows keep every core busy with a spinning process meanwhile (a
shared machine or CI runner). Three settings: one thread from the start,
the library default (one thread per core), and "afterlook": a process that
started with the default and runs the products inside afterlook's own limit
(``afterlook.core.blas``, what a notebook gets). The target: afterlook's
setting at most 2.5x the single-thread time under the same load (no cliff);
its loaded time against the idle single thread is printed too.

Then the same comparison for whole operations as a user calls them, each in
a fresh process (``_workloads.py``): ``afterlook.fit`` on a 200,000 x 40
DataFrame and ``afterlook.suggest(model, cases, train=train,
case_ids=[one miss])`` with 3,000 labelled cases (all passes: screen, exact
statistics, re-fits, held-out K-fold gains, stability). "default" runs with
``AFTERLOOK_BLAS_THREADS=auto`` (the library's one thread per core), "one"
with afterlook's default. The time is the first call of the process, the
median over ``--runs`` processes, and the worst: four figures per operation
(idle and loaded, each with both settings), then the ratios.
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import os
import subprocess
import sys
import time
from pathlib import Path

# Timed cold: never served by shaping choices an earlier run (or the user) left in the cache folder.
os.environ["AFTERLOOK_CACHE_DIR"] = "off"

CHILD = r"""
import contextlib, json, sys, time
import numpy as np
rows, cols, mode = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
if mode == "afterlook":  # the library started with its default threads; afterlook's own limit inside
    from afterlook.core.blas import limited_blas
    block = limited_blas
else:
    block = contextlib.nullcontext
X = np.random.default_rng(0).normal(size=(rows, cols))
with block():
    t = time.perf_counter(); X.T @ X; first = time.perf_counter() - t
    times = []
    for _ in range(20):
        t = time.perf_counter(); X.T @ X; times.append(time.perf_counter() - t)
times.sort()
print(json.dumps({"first": first, "median": times[len(times) // 2], "worst": times[-1]}))
"""

# threads at the start of the process (the environment), and who limits them afterwards
MODES = {"one": "1", "default": None, "afterlook": None}


def _spin(stop_at: float) -> None:
    while time.time() < stop_at:
        pass


def measure(mode: str, rows: int, cols: int, cores: int) -> dict:
    drop = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "AFTERLOOK_BLAS_THREADS")
    env = {k: v for k, v in os.environ.items() if k not in drop}
    threads = MODES[mode] or (str(cores) if mode == "default" else None)
    if threads is not None:
        env.update(OPENBLAS_NUM_THREADS=threads, OMP_NUM_THREADS=threads, MKL_NUM_THREADS=threads)
    out = subprocess.run([sys.executable, "-c", CHILD, str(rows), str(cols), mode], env=env, capture_output=True,
                         text=True, check=True, timeout=600)
    return json.loads(out.stdout)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--cols", type=int, default=40)
    ap.add_argument("--runs", type=int, default=3, help="fresh processes per setting")
    ap.add_argument("--quick", action="store_true", help="50,000 rows, one process per setting")
    ap.add_argument("--out", help="also write what is printed, as Markdown, to this file (results_blas_threads.md)")
    args = ap.parse_args(argv)
    if args.quick:
        args.rows, args.runs = 50_000, 1
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import _workloads

    with _workloads.printed_to(args.out, "BLAS threads benchmark", argv if argv is not None else sys.argv[1:]):
        _run(args)
    return 0


def _run(args) -> None:
    cores = os.cpu_count() or 2
    print(f"X.T @ X, {args.rows:,} x {args.cols}, {cores} cores, {args.runs} fresh process(es) per setting")
    print("threads: one = OPENBLAS_NUM_THREADS=1 from the start; default = one per core; afterlook = the")
    print("library's default at the start, afterlook's limit (core/blas.py, threadpoolctl) around the products")
    print(f"{'load':7} {'threads':>9} {'first s':>9} {'median s':>9} {'worst s':>9}")
    results = {}
    for load in ("idle", "loaded"):
        spinners = []
        if load == "loaded":
            stop = time.time() + 3600
            spinners = [multiprocessing.Process(target=_spin, args=(stop,), daemon=True) for _ in range(cores)]
            for p in spinners:
                p.start()
        try:
            for mode in MODES:
                runs = [measure(mode, args.rows, args.cols, cores) for _ in range(args.runs)]
                agg = {k: max(r[k] for r in runs) if k != "median" else sorted(r[k] for r in runs)[len(runs) // 2]
                       for k in ("first", "median", "worst")}
                results[(load, mode)] = agg
                print(f"{load:7} {mode:>9} {agg['first']:>9.4f} {agg['median']:>9.4f} {agg['worst']:>9.4f}",
                      flush=True)
        finally:
            for p in spinners:
                p.terminate()
    for load in ("idle", "loaded"):
        one, many = results[(load, "one")], results[(load, "default")]
        print(f"{load}: default ({cores} threads) / one thread: median {many['median'] / one['median']:.1f}x, "
              f"worst {many['worst'] / one['worst']:.1f}x, first call {many['first'] / one['first']:.1f}x")
    for load in ("idle", "loaded"):
        ours, one = results[(load, "afterlook")], results[(load, "one")]
        print(f"{load}: afterlook's setting / one thread (the cliff; target at most 2.5x): median "
              f"{ours['median'] / one['median']:.1f}x, worst {ours['worst'] / one['worst']:.1f}x, "
              f"first call {ours['first'] / one['first']:.1f}x")
    base, ours = results[("idle", "one")], results[("loaded", "afterlook")]
    print(f"afterlook's setting loaded / one thread idle (the busy machine's share of a core): median "
          f"{ours['median'] / base['median']:.1f}x, worst {ours['worst'] / base['worst']:.1f}x, "
          f"first call {ours['first'] / base['first']:.1f}x")
    whole_operations(args)


def whole_operations(args) -> None:
    import tempfile

    import _workloads

    with tempfile.TemporaryDirectory(prefix="afterlook-bench-") as tmp:
        folder = Path(tmp)
        _workloads.prepare(folder, args.rows, args.cols, score_rows=1000)
        print(f"\nwhole operations, {args.rows:,} x {args.cols}, first call of a fresh process, "
              f"{args.runs} process(es) per setting")
        print(f"{'operation':9} {'load':7} {'threads':>8} {'median s':>9} {'worst s':>9}")
        ratios = []
        one = {}
        for step in ("fit", "suggest"):
            for load in ("idle", "loaded"):
                times = {}
                with _workloads.load(load):
                    for threads in ("default", "one"):
                        runs = [_workloads.run_step(step, folder, threads)["afterlook"] for _ in range(args.runs)]
                        times[threads] = (_workloads.median(runs), max(runs))
                        print(f"{step:9} {load:7} {threads:>8} {times[threads][0]:>9.3f} {times[threads][1]:>9.3f}",
                              flush=True)
                ratios.append(f"{step} {load}: default / one thread: median {times['default'][0] / times['one'][0]:.1f}x, "
                              f"worst {times['default'][1] / times['one'][1]:.1f}x")
                one[(step, load)] = times["one"]
            ratios.append(f"{step}: one thread loaded / idle: median "
                          f"{one[(step, 'loaded')][0] / one[(step, 'idle')][0]:.1f}x, "
                          f"worst {one[(step, 'loaded')][1] / one[(step, 'idle')][1]:.1f}x")
        print("\n".join(ratios))


if __name__ == "__main__":
    sys.exit(main())
