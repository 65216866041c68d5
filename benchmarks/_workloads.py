"""Whole operations as a user meets them, each timed in a fresh process (used by bench_end_to_end.py
and bench_blas_threads.py; not a benchmark on its own).

    python benchmarks/_workloads.py prepare DIR [--rows N] [--columns D] [--score-rows N]
    python benchmarks/_workloads.py STEP DIR   # STEP: fit, fit_shaping, suggest, suggest_file, score, pandas_loop

A step prints one JSON line: ``afterlook`` (the first call in this process,
seconds), ``afterlook_again`` (a second call), for suggest and the pandas loop
also the CPU seconds of the process during the call (``*_cpu``), ``reference`` and
``reference_again`` (the obvious alternative on the same values, same
process, same BLAS thread count), ``agreement`` (largest relative
difference, where the two compute the same numbers), ``blas_threads`` (what
the reference ran with) and ``peak_mb`` (the process's peak resident size).

BLAS threads: with ``AFTERLOOK_BLAS_THREADS=auto`` in the environment
afterlook leaves the library default (one thread per core) and so does the
reference; otherwise afterlook runs its work on one thread and the
reference is timed under ``threadpool_limits(1)`` too, so a ratio compares
like with like.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import resource
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))


def prepare(folder: Path, rows: int, columns: int, score_rows: int) -> None:
    """Write the suggest/fit tables (the fleet of bench_suggest.py) and the scoring table."""
    from bench_suggest import make_fleet

    folder.mkdir(parents=True, exist_ok=True)
    train, miss = make_fleet(rows, columns)
    rng = np.random.default_rng(5)
    normals = train.sample(2700, random_state=3).reset_index(drop=True)
    anomalies = train.sample(299, random_state=4).reset_index(drop=True)
    for k in range(len(anomalies)):  # a reading off by a factor: some flagged, some missed
        j = int(rng.integers(0, columns))
        anomalies.iloc[k, j] *= float(rng.choice([0.6, 1.5]))
    cases = pd.concat([miss.assign(id="miss", label="anomaly"),
                       anomalies.assign(id=[f"a{k}" for k in range(len(anomalies))], label="anomaly"),
                       normals.assign(id=[f"n{k}" for k in range(len(normals))], label="normal")],
                      ignore_index=True)
    train.to_parquet(folder / "train.parquet")
    cases.to_parquet(folder / "cases.parquet")
    # Scoring: correlated Gaussian columns with telemetry-like scales (as bench_foundation.py).
    srng = np.random.default_rng(11)
    d = 32
    mix = srng.normal(size=(d, d)) / np.sqrt(d) + np.eye(d)
    X = srng.normal(size=(score_rows, d)) @ mix * srng.uniform(0.1, 100, d) + srng.uniform(-50, 500, d)
    pd.DataFrame(X, columns=[f"x{j:02d}" for j in range(d)]).to_parquet(folder / "score.parquet")


def _reference_threads():
    """The reference's BLAS setting: afterlook's own (one thread) unless afterlook was told 'auto'."""
    if os.environ.get("AFTERLOOK_BLAS_THREADS", "").strip().lower() == "auto":
        return contextlib.nullcontext(), "default"
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas"), "1"


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return time.perf_counter() - t, out


def _timed_cpu(fn):
    """(wall seconds, CPU seconds of this process, result): CPU time is what a busy shared machine
    changes least (a call waiting for a core does not count)."""
    t, c = time.perf_counter(), time.process_time()
    out = fn()
    return time.perf_counter() - t, time.process_time() - c, out


def _peak_mb() -> float:
    """This process's own peak resident size: VmHWM of /proc/self/status where there is one. getrusage's
    ru_maxrss is not used there: Linux carries the parent's high-water mark into a child across fork and
    exec, so a benchmark parent that held a large table made every step look that large."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def step_fit(folder: Path, shaping: bool = False) -> dict:
    """``afterlook.fit(train, kind="full")``, or with ``shaping=True`` (what ``afterlook fit`` does: the
    search's shaping choices recorded in the model), twice, against numpy.cov of the same array."""
    import afterlook

    fit = afterlook.fit  # the import is not part of the call
    train = pd.read_parquet(folder / "train.parquet")
    t1, model = _timed(lambda: fit(train, kind="full", shaping=shaping))
    # The quantile grid (percentiles, and what save() writes) is made inside the fit; its first read is timed
    # too, so that a grid ever left for later would show up in the row.
    t_grid, _ = _timed(lambda: model.quantiles)
    if shaping:
        from afterlook.analysis import shaping_choices

        shaping_choices._SHAPING_CACHE.clear()  # the second fit makes its choices again, as a new process would
    t2, _ = _timed(lambda: fit(train, kind="full", shaping=shaping))
    limit, threads = _reference_threads()
    with limit:
        X = train.to_numpy(dtype=float)
        r1, _ = _timed(lambda: np.cov(X, rowvar=False))
        r2, cov = _timed(lambda: np.cov(X, rowvar=False, bias=True))
    ours = model.density.covariance_
    diff = float(np.max(np.abs(ours - cov)) / np.max(np.abs(cov)))
    return {"afterlook": t1, "afterlook_again": t2, "grid_read": t_grid, "reference": r1,
            "reference_again": r2, "agreement": diff, "blas_threads": threads, "peak_mb": _peak_mb()}


def step_suggest(folder: Path) -> dict:
    import afterlook

    train = pd.read_parquet(folder / "train.parquet")
    cases = pd.read_parquet(folder / "cases.parquet")
    model = afterlook.fit(train, cases=cases, kind="full")
    afterlook.suggest  # the import is not part of the call
    t1, c1, res = _timed_cpu(lambda: afterlook.suggest(model, cases, train=train, case_ids=["miss"]))
    t2, c2, again = _timed_cpu(lambda: afterlook.suggest(model, cases, train=train, case_ids=["miss"]))
    same = res.to_dict() == again.to_dict()
    return {"afterlook": t1, "afterlook_again": t2, "afterlook_cpu": c1, "afterlook_again_cpu": c2,
            "same_result_twice": same,
            "tried": res.tried, "recommended": res.recommended,
            "top": [c.expression for c in res.candidates[:3]], "peak_mb": _peak_mb()}


def step_suggest_file(folder: Path) -> dict:
    """The first suggest of a process with the model file ``afterlook fit`` wrote (``model_cli.json``,
    made by the caller): its shaping choices come from the file."""
    import afterlook

    train = pd.read_parquet(folder / "train.parquet")
    cases = pd.read_parquet(folder / "cases.parquet")
    model = afterlook.load_model(folder / "model_cli.json")
    afterlook.suggest  # the import is not part of the call
    t1, c1, res = _timed_cpu(lambda: afterlook.suggest(model, cases, train=train, case_ids=["miss"]))
    return {"afterlook": t1, "afterlook_cpu": c1, "top": [c.expression for c in res.candidates[:3]],
            "peak_mb": _peak_mb()}


def step_pandas_loop(folder: Path) -> dict:
    from bench_suggest import pandas_loop

    train = pd.read_parquet(folder / "train.parquet")
    cases = pd.read_parquet(folder / "cases.parquet")
    miss = cases.loc[cases["id"] == "miss", list(train.columns)].iloc[0]
    t, c, out = _timed_cpu(lambda: pandas_loop(train, miss))
    return {"reference": t, "reference_cpu": c, "tried": len(out), "peak_mb": _peak_mb()}


def step_score(folder: Path) -> dict:
    import afterlook
    from scipy import stats

    df = pd.read_parquet(folder / "score.parquet")
    model = afterlook.fit(df, kind="full")
    t1, scored = _timed(lambda: model.score(df))
    t2, _ = _timed(lambda: model.score(df))
    limit, threads = _reference_threads()
    mean, cov = model.density.mean_, model.density.covariance_
    with limit:
        dist = stats.multivariate_normal(mean, cov)
        r1, ref = _timed(lambda: dist.logpdf(df))
        r2, _ = _timed(lambda: dist.logpdf(df))
    ours = scored["log_density"].to_numpy()
    diff = float(np.max(np.abs(ours - ref) / np.maximum(np.abs(ref), 1e-300)))
    return {"afterlook": t1, "afterlook_again": t2, "reference": r1, "reference_again": r2,
            "agreement": diff, "blas_threads": threads, "peak_mb": _peak_mb()}


def _spin(stop_at: float) -> None:
    while time.time() < stop_at:
        pass


@contextlib.contextmanager
def load(kind: str):
    """``"idle"``: nothing more; ``"loaded"``: one spinning process per core meanwhile (a busy shared machine)."""
    import multiprocessing

    spinners = []
    if kind == "loaded":
        stop = time.time() + 3600
        spinners = [multiprocessing.Process(target=_spin, args=(stop,), daemon=True)
                    for _ in range(os.cpu_count() or 2)]
        for p in spinners:
            p.start()
    try:
        yield
    finally:
        for p in spinners:
            p.terminate()
            p.join()


def run_step(step: str, folder: Path, threads: str = "one", cache: str = "off") -> dict:
    """Run one step in a fresh process; ``threads``: "one" (afterlook's default) or "default" (the library's).

    ``cache``: the child's AFTERLOOK_CACHE_DIR. "off" by default, so that a step is never served by
    what an earlier run (or the user's own use) left in the cache folder; a folder to time a process
    that finds the choices of an earlier one there."""
    import subprocess

    env = {k: v for k, v in os.environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "AFTERLOOK_BLAS_THREADS",
                        "PYTHONDONTWRITEBYTECODE")}
    if threads == "default":
        env["AFTERLOOK_BLAS_THREADS"] = "auto"
    env["AFTERLOOK_CACHE_DIR"] = cache
    out = subprocess.run([sys.executable, str(HERE / "_workloads.py"), step, str(folder)], env=env,
                         capture_output=True, text=True, timeout=3600)
    if out.returncode != 0:
        raise RuntimeError(f"{step} failed: {out.stderr.strip()[-2000:]}")
    return json.loads(out.stdout.strip().splitlines()[-1])


@contextlib.contextmanager
def printed_to(out: str | None, title: str, argv: list[str]):
    """Within the block, what is printed also goes to a Markdown results file ``out`` (written at the end,
    with the date, the command line, the machine and the 1-minute load average before and after)."""
    import datetime
    import io
    import platform

    load_before = os.getloadavg()[0]
    printed = io.StringIO()

    class Both:
        def write(self, text: str) -> int:
            sys.__stdout__.write(text)
            return printed.write(text)

        def flush(self) -> None:
            sys.__stdout__.flush()

    with contextlib.redirect_stdout(Both()):
        yield
    if out:
        line = " ".join([Path(sys.argv[0]).name, *argv])
        Path(out).write_text(
            f"# {title}, {datetime.date.today().isoformat()}\n\n`{line}`, {os.cpu_count()} cores, Python "
            f"{platform.python_version()}; 1-minute load average before the run {load_before:.1f}, after it "
            f"{os.getloadavg()[0]:.1f}. Output as printed:\n\n```\n{printed.getvalue().rstrip()}\n```\n",
            encoding="utf-8")
        print(f"wrote {out}")


def median(values):
    values = sorted(values)
    return values[len(values) // 2]


STEPS = {"fit": step_fit, "fit_shaping": lambda folder: step_fit(folder, shaping=True), "suggest": step_suggest,
         "suggest_file": step_suggest_file, "score": step_score, "pandas_loop": step_pandas_loop}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("step", choices=["prepare", *STEPS])
    ap.add_argument("folder", type=Path)
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--columns", type=int, default=40)
    ap.add_argument("--score-rows", type=int, default=1_000_000)
    args = ap.parse_args(argv)
    if args.step == "prepare":
        prepare(args.folder, args.rows, args.columns, args.score_rows)
        return 0
    print(json.dumps(STEPS[args.step](args.folder)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
