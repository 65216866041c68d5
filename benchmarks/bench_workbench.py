"""Workbench benchmark: time to the first screen, and the re-score after applying a candidate.

1. first screen  From the start of a fresh Python process (imports included)
                 to the workbench's first paint with the worst miss selected
                 and its evidence drawn, on the demo data (``write_demo``,
                 seed 7), at 120 x 40, through ``create_app`` + ``run_test``:
                 the same factory ``afterlook review`` uses. The wall time of
                 the whole child process (interpreter start to exit) is
                 printed beside it.
2. re-score      On 100,000 cases (``afterlook.demo.generate(seed=7,
                 n_cases=100_000)``, the demo's recipe and independent model):
                 what the workbench's worker runs when a candidate is applied,
                 ``analysis.workbench.try_candidate`` + ``trial_view`` (re-fit with
                 the feature, threshold re-picked by the same policy, every
                 case re-scored, flips listed), against
                 * ``afterlook.analysis.trial.try_features`` (the public API, which
                   also re-scores the unchanged model and looks the training
                   file up again), and
                 * the plain alternative: pandas for the feature, numpy for
                   the fit, ``scipy.stats.norm.logpdf`` for the scores, a
                   sort for the best-F1 threshold, a comparison for the flips.
                 And end to end in the app: Enter on a typed expression until
                 the before/after comparison is on the screen (Pilot).
3. q in a search On the suggest workload of bench_end_to_end.py (200,000 x 40
                 training rows, 3,000 labelled cases; 20,000 rows with
                 ``--quick``), a fresh process per run: the ``c`` action starts the
                 candidate search (called directly: ``pilot.press`` would wait for the
                 app to be idle, which the search's progress messages postpone to its
                 end), ``q`` is pressed a set time into it, and the
                 time from ``q`` to the app's exit is measured (an exiting app
                 waits for its worker thread, which stops at the search's next
                 progress report). Against: the whole search, what ``q`` would
                 wait for without cooperative cancellation. Beside it, the
                 same search called directly in the same kind of process, the
                 interface idle: the ratio is what drawing the interface costs
                 the search (its thread shares Python's interpreter lock with the
                 interface's). Each child is set up as the console script sets
                 up ``afterlook review`` (``cli.main.prepare_process``).

Numbers are printed (best and median of ``--repeat`` runs); nothing is
asserted. Usage::

    python benchmarks/bench_workbench.py            # 100,000 cases, 5 repeats
    python benchmarks/bench_workbench.py --quick    # 20,000 cases, 3 repeats
    python benchmarks/bench_workbench.py --only q   # only the third part
    python benchmarks/bench_workbench.py --repeat 3 --out benchmarks/results_workbench_q.md
"""

from __future__ import annotations

import argparse
import asyncio
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# Timed cold: never served by shaping choices an earlier run (or the user) left in the cache folder.
os.environ["AFTERLOOK_CACHE_DIR"] = "off"

import numpy as np

SEED = 7
FULL_CASES = 100_000
QUICK_CASES = 20_000
CANDIDATE = ("amps_per_power", "motor_current_a / hydraulic_power")  # the demo's worn-impeller ratio

FIRST_SCREEN_CHILD = r"""
import time
t0 = time.perf_counter()
import asyncio, sys
from textual.screen import Screen
from afterlook.tui import create_app

painted = []
_refresh = Screen._compositor_refresh

def timed_refresh(self):
    # the first frame written after the worst miss's evidence was handed to its panel
    _refresh(self)
    app = self.app
    if not painted and getattr(app, "evidence", None) is not None and app.selected_case:
        painted.append(time.perf_counter())

Screen._compositor_refresh = timed_refresh

async def main():
    app = create_app(sys.argv[1], sys.argv[2], train_path=sys.argv[3], casebook=sys.argv[4],
                     auto_candidates=False)
    async with app.run_test(size=(120, 40)) as pilot:
        for _ in range(20_000):  # bounded: a broken app must not hang the benchmark
            if painted:
                break
            await pilot.pause(0.005)
        else:
            raise SystemExit("the workbench never showed the worst miss")
        assert app.selected_case == app.session.missed.misses[0].case
        print(f"{painted[0] - t0:.6f}")

asyncio.run(main())
"""


def _stats(times: list[float]) -> str:
    return f"best {min(times) * 1000:8.1f} ms   median {statistics.median(times) * 1000:8.1f} ms"


def bench_first_screen(folder: Path, repeat: int) -> None:
    from afterlook.demo.writer import write_demo

    train, cases, model = write_demo(folder / "demo", seed=SEED)
    inner, outer = [], []
    for _ in range(repeat):
        start = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", FIRST_SCREEN_CHILD, str(model), str(cases), str(train),
                              str(folder / "casebook.json")], capture_output=True, text=True, check=True)
        outer.append(time.perf_counter() - start)
        inner.append(float(out.stdout.strip().splitlines()[-1]))
    print("1. first screen on the demo data (2,400 cases), 120 x 40")
    print(f"   launch -> first paint, worst miss selected : {_stats(inner)}")
    print(f"   whole child process (interpreter to exit)  : {_stats(outer)}")


def _plain_alternative(train_df, cases_df, labels, derive_expr_cols, transform_cols):
    """pandas feature + numpy fit + scipy.stats.norm scores + sorted best-F1 threshold + flips."""
    from scipy import stats

    def features(df):
        out = df[list(derive_expr_cols["base"])].astype(float).copy()
        out["hydraulic_power"] = df["flow_m3h"] * (df["discharge_bar"] - df["suction_bar"])
        out["hours_since_service"] = np.log(df["hours_since_service"] + 1)
        out["amps_per_power"] = df["motor_current_a"] / out["hydraulic_power"]
        return out.to_numpy()

    X = features(train_df)
    mu, sd = X.mean(axis=0), X.std(axis=0)
    ld = stats.norm.logpdf(features(cases_df), mu, sd).sum(axis=1)
    order = np.argsort(ld)
    tp = np.cumsum(labels[order])
    k = np.arange(1, len(ld) + 1)
    f1 = 2 * tp / (k + labels.sum())
    best = int(np.argmax(f1))
    threshold = ld[order][best + 1] if best + 1 < len(ld) else np.inf
    flagged = ld < threshold
    return flagged


def bench_rescore(folder: Path, n_cases: int, repeat: int) -> None:
    import afterlook
    from afterlook.analysis import workbench as wd
    from afterlook.demo.writer import DEMO_DERIVE, DEMO_KIND, DEMO_TRANSFORM
    from afterlook.demo import generate
    from afterlook.analysis.trial import try_features
    from afterlook.store.tables import write_table

    scenario = generate(seed=SEED, n_cases=n_cases)
    train_path, cases_path, model_path = folder / "train.csv", folder / "cases.csv", folder / "model.json"
    write_table(scenario.train, train_path)
    write_table(scenario.cases, cases_path)
    train = afterlook.load_table(train_path)
    cases = afterlook.load_table(cases_path, require_labels=True)
    model = afterlook.fit(train, cases=cases, kind=DEMO_KIND, threshold="f1", derive=DEMO_DERIVE, transform=DEMO_TRANSFORM)
    model.save(model_path)
    session = wd.open_session(model_path, cases_path, train_path=train_path, casebook=folder / "casebook.json")
    worst = session.missed.misses[0].case
    derive = {CANDIDATE[0]: CANDIDATE[1]}

    def workbench():
        result = wd.try_candidate(session, derive, focus=[worst])
        return wd.trial_view(result, worst)

    def public_api():
        return try_features(model, cases, derive, train=train, focus=[worst])

    base = [c for c in model.recipe.base]
    train_df = train.frame.loc[~train.labels] if train.labels is not None else train.frame
    labels = cases.labels.astype(bool)

    def plain():
        return _plain_alternative(train_df, cases.frame, labels, {"base": base}, None)

    runs = {"workbench (try_candidate + trial_view)": workbench, "API try_features": public_api,
            "plain pandas + scipy.stats.norm": plain}
    for fn in runs.values():  # warm-up, untimed
        fn()
    times = {name: [] for name in runs}
    for _ in range(repeat):
        for name, fn in runs.items():  # take turns so background load hits all alike
            start = time.perf_counter()
            fn()
            times[name].append(time.perf_counter() - start)
    view = workbench()
    print(f"2. re-score after applying {CANDIDATE[0]} = {CANDIDATE[1]} on {n_cases:,} cases "
          f"({len(train.frame):,} training rows)")
    for name, t in times.items():
        print(f"   {name:<40}: {_stats(t)}")
    ratio = statistics.median(times['plain pandas + scipy.stats.norm']) / statistics.median(
        times['workbench (try_candidate + trial_view)'])
    print(f"   plain / workbench (medians)              : {ratio:.2f}x")
    print(f"   {worst}: {view.case.words}; misses caught {view.misses_caught}, "
          f"false alarms added {view.false_alarms_added:+d}")

    end_to_end = asyncio.run(_in_app(model_path, cases_path, train_path, folder / "casebook.json", repeat))
    print(f"   in the app, enter -> comparison shown    : {_stats(end_to_end)}  (+ one frame to draw)")


async def _in_app(model_path, cases_path, train_path, book, repeat: int) -> list[float]:
    """Enter on a typed expression -> the comparison handed to the screen (drawn on the next frame).

    Timed from just before the Enter key is sent to the end of the try panel's
    ``show``; the Pilot's own waiting for idle is not counted.
    """
    from afterlook.tui import create_app

    app = create_app(model_path, cases_path, train_path=train_path, casebook=book, auto_candidates=False)
    out = []
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        panel = app.try_panel
        shown: list[float] = []
        original_show = panel.show

        def timed_show(view):
            original_show(view)
            shown.append(time.perf_counter())

        panel.show = timed_show
        for k in range(repeat + 1):
            await pilot.press("t")
            panel.query_one("#expression").value = f"{CANDIDATE[0]}_{k} = {CANDIDATE[1]}"
            before = len(shown)
            start = time.perf_counter()
            await pilot.press("enter")
            for _ in range(50_000):  # bounded: a broken app must not hang the benchmark
                if len(shown) > before:
                    break
                await pilot.pause(0.002)
            else:
                raise SystemExit("the try never finished in the app")
            if k:  # the first round is the warm-up
                out.append(shown[-1] - start)
    return out


Q_CHILD = r"""
import asyncio, sys, time
from afterlook.cli.main import prepare_process
prepare_process()  # before numpy loads, as the console script (afterlook review) does
from afterlook.tui import create_app

delay = float(sys.argv[5])

async def main():
    app = create_app(sys.argv[1], sys.argv[2], train_path=sys.argv[3], casebook=sys.argv[4], auto_candidates=False)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        app.select_case("miss")  # the case the search is for (what a highlight in the list does)
        await pilot.pause()
        start = time.perf_counter()
        if delay == -2:  # the same search called directly, the interface idle: what the app adds to it
            from afterlook.analysis import workbench as wd
            wd.find_candidates(app.session, "miss", top=app.candidates_top)
            print(f"{time.perf_counter() - start:.6f} direct")
            return
        # what the c key runs; pilot.press would wait until the app is idle, which the search's stream of
        # progress messages postpones to its end (then no q could land mid-search)
        app.action_candidates()
        if delay < 0:  # the whole search, for comparison
            for _ in range(200_000):  # bounded: a broken app must not hang the benchmark
                if "miss" in app.candidates:
                    break
                await asyncio.sleep(0.005)
            print(f"{time.perf_counter() - start:.6f} search")
            return
        while time.perf_counter() - start < delay:
            await asyncio.sleep(0.005)
        running = app.candidates_running == "miss"
        pressed = time.perf_counter()
        await pilot.press("q")
    print(f"{time.perf_counter() - pressed:.6f} {'running' if running else 'done'}")

asyncio.run(main())
"""


def bench_q_latency(folder: Path, quick: bool, repeat: int) -> None:
    import pandas as pd

    import afterlook

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import _workloads

    data = folder / "q"
    _workloads.prepare(data, 20_000 if quick else 200_000, 40, 1000)
    cases = pd.read_parquet(data / "cases.parquet")
    model = afterlook.fit(pd.read_parquet(data / "train.parquet"), cases=cases, kind="full")
    model.save(data / "model.json")
    cases.to_csv(data / "cases.csv", index=False)

    def child(delay: float) -> tuple[float, str]:
        out = subprocess.run([sys.executable, "-c", Q_CHILD, str(data / "model.json"), str(data / "cases.csv"),
                              str(data / "train.parquet"), str(folder / "q-book.json"), str(delay)],
                             capture_output=True, text=True, check=True, timeout=600)
        seconds, state = out.stdout.strip().splitlines()[-1].split()
        return float(seconds), state

    search = [child(-1.0)[0] for _ in range(max(1, repeat // 2))]
    direct = [child(-2.0)[0] for _ in range(max(1, repeat // 2))]
    delays = (0.05, 0.15, 0.25, 0.35, 0.5, 0.7, 0.9) if not quick else (0.05, 0.1, 0.2)
    latencies = []
    for delay in delays:
        seconds, state = child(delay)
        if state == "running":
            latencies.append(seconds)
    print(f"3. q during a candidate search ({'20,000' if quick else '200,000'} x 40 training rows, 3,000 cases)")
    print(f"   the whole search in the app (c -> list shown)  : {_stats(search)}")
    print(f"   the same search called directly (no interface) : {_stats(direct)}")
    print(f"   in the app / called directly                   : {statistics.median(search) / statistics.median(direct):.2f}x")
    if latencies:
        print(f"   q -> app exited, q pressed {len(latencies)} times mid-search : {_stats(latencies)}   "
              f"worst {max(latencies) * 1000:.1f} ms")
        print(f"   whole search / worst q latency           : {statistics.median(search) / max(latencies):.1f}x")
    else:
        print("   the search ended before every q: no mid-search latency to show")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help=f"{QUICK_CASES:,} cases and 3 repeats")
    parser.add_argument("--cases", type=int, default=None, help=f"cases for the re-score (default {FULL_CASES:,})")
    parser.add_argument("--repeat", type=int, default=None, help="timed rounds (default 5, 3 with --quick)")
    parser.add_argument("--only", default="first,rescore,q", help="comma-separated parts: first, rescore, q")
    parser.add_argument("--out", help="also write what is printed, as Markdown, to this file "
                                      "(results_workbench_q.md for the README's figures)")
    args = parser.parse_args(argv)
    parts = {p.strip() for p in args.only.split(",")}
    n_cases = args.cases or (QUICK_CASES if args.quick else FULL_CASES)
    repeat = args.repeat or (3 if args.quick else 5)
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import _workloads

    with tempfile.TemporaryDirectory(prefix="afterlook-bench-workbench-") as tmp, \
            _workloads.printed_to(args.out, "workbench benchmark", argv if argv is not None else sys.argv[1:]):
        folder = Path(tmp)
        if "first" in parts:
            bench_first_screen(folder, repeat)
            print()
        if "rescore" in parts:
            bench_rescore(folder, n_cases, repeat)
            print()
        if "q" in parts:
            bench_q_latency(folder, args.quick, repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
