"""Foundation benchmark: scoring, fitting and loading at fleet scale.

Each operation is timed against the obvious alternative in the same run:

1. score   ``GaussianModel("full").log_density(X)`` vs
           ``scipy.stats.multivariate_normal(mean, cov).logpdf(X)``
2. fit     ``GaussianModel("full").fit(X)`` and ``SufficientStats.of(X)`` vs
           ``numpy.cov(X, rowvar=False)``
3. load    ``afterlook.store.tables.load_table(path)`` vs ``pandas.read_csv(path)``
           (default C engine), and, for information, ``iter_numeric_chunks``
           summing ``SufficientStats`` vs ``pandas.read_csv(chunksize=...)`` doing
           the same.

Timing: one child process per operation builds the input once, warms every
implementation up with one untimed call, then lets the implementations take
turns for ``--repeat`` rounds (default 3), so a burst of background load hits
both sides alike; the best time is compared, the median is printed too.

Memory: one more child per (operation, implementation), so that its peak is
its own. It builds the input, makes one warm-up call, resets the kernel's
peak-RSS mark (``/proc/self/clear_refs``), makes one call and reads the
peak (``VmHWM``, the per-process figure behind ``ru_maxrss``). "Extra" is that peak minus the resident size just before the
call: what the call needed on top of its input.

Usage::

    python benchmarks/bench_foundation.py            # 1,000,000 x 32
    python benchmarks/bench_foundation.py --quick    # 100,000 x 32, for a smoke run
    python benchmarks/bench_foundation.py --rows 250000 --repeat 5

The Markdown table printed at the end is also written to
``benchmarks/results_foundation.md`` for a full-size run (``--out`` to choose
another file; smaller runs write nothing unless ``--out`` is given).
"""

from __future__ import annotations

import argparse
import ctypes
import datetime as _dt
import gc
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
FULL_ROWS = 1_000_000
QUICK_ROWS = 100_000
N_COLS = 32
SEED = 20240611
DECIMALS = 4  # sensor-like precision in the CSV (keeps the file ~300 MB at full size)
CHUNK_ROWS = 262_144


# --------------------------------------------------------------------------
# data
# --------------------------------------------------------------------------


def column_names(d: int = N_COLS) -> list[str]:
    return [f"x{j:02d}" for j in range(d)]


def make_matrix(n: int, d: int = N_COLS, seed: int = SEED) -> np.ndarray:
    """Seeded correlated Gaussian rows with telemetry-like scales and offsets.

    Filled block by block into one preallocated array so that building the
    input does not leave a high-water mark far above the input itself.
    """
    rng = np.random.default_rng(seed)
    mixing = rng.standard_normal((d, d)) / np.sqrt(d) + np.eye(d)
    scale = 10.0 ** rng.uniform(-1.0, 2.0, size=d)
    offset = rng.uniform(-50.0, 500.0, size=d)
    out = np.empty((n, d))
    block = 65_536
    for start in range(0, n, block):
        stop = min(n, start + block)
        z = rng.standard_normal((stop - start, d))
        out[start:stop] = (z @ mixing.T) * scale + offset
    return out


def write_csv(path: Path, n: int) -> None:
    """The benchmark CSV: an integer ``id`` column then ``x00 .. x31``."""
    import pyarrow as pa
    import pyarrow.csv as pacsv

    X = np.round(make_matrix(n), DECIMALS)
    arrays = [pa.array(np.arange(1, n + 1, dtype=np.int64))]
    arrays += [pa.array(X[:, j]) for j in range(X.shape[1])]
    table = pa.Table.from_arrays(arrays, names=["id", *column_names()])
    pacsv.write_csv(table, str(path))


# --------------------------------------------------------------------------
# memory and timing helpers (used in the child processes)
# --------------------------------------------------------------------------


def _status_kib(key: str) -> int | None:
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


def reset_peak() -> bool:
    """Reset this process's peak-RSS mark (Linux >= 4.0); False where unsupported."""
    try:
        with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def current_rss_mib() -> float:
    kib = _status_kib("VmRSS")
    if kib is None:  # not Linux: the best we have is the peak so far
        kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        if sys.platform == "darwin":
            kib //= 1024
    return kib / 1024.0


def peak_rss_mib() -> float:
    """Peak resident size of this process.

    Linux's ``ru_maxrss`` survives fork and exec (a child starts with its
    parent's peak) and ``clear_refs`` does not lower it, so the same peak is
    read per address space from ``VmHWM`` where it exists.
    """
    kib = _status_kib("VmHWM")
    if kib is not None:
        return kib / 1024.0
    kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    if sys.platform == "darwin":  # bytes there, KiB on Linux
        kib //= 1024
    return kib / 1024.0


def _cpu_seconds() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)  # all threads of this process
    return usage.ru_utime + usage.ru_stime


def timed_call(fn) -> tuple[float, float]:
    """Wall and CPU seconds of one call (the result is dropped)."""
    cpu = _cpu_seconds()
    start = time.perf_counter()
    fn()
    wall = time.perf_counter() - start
    return wall, _cpu_seconds() - cpu


def release_pools() -> None:
    """Hand freed memory back to the system so the resident size is honest."""
    gc.collect()
    if "pyarrow" in sys.modules:
        sys.modules["pyarrow"].default_memory_pool().release_unused()
    try:  # glibc keeps freed blocks below its (adaptive) mmap threshold resident
        ctypes.CDLL(None).malloc_trim(0)
    except (OSError, AttributeError):
        pass


# --------------------------------------------------------------------------
# workers: timing runs one child per operation (implementations interleaved);
# memory runs one child per (operation, implementation)
# --------------------------------------------------------------------------


def _sufficient_sum(chunks) -> "object":
    from afterlook.core.gaussian import SufficientStats

    total = SufficientStats.empty(N_COLS)
    for chunk in chunks:
        total = total.merge(SufficientStats.of(chunk))
    return total


def _max_rel_diff(a: np.ndarray, b: np.ndarray) -> float:
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    denom = np.maximum(np.abs(b), np.finfo(np.float64).tiny)
    return float(np.max(np.abs(a - b) / denom))


def make_calls(op: str, rows: int, path: str | None) -> tuple[dict, dict]:
    """The zero-argument calls to time for *op*, by implementation, and their shared inputs."""
    from afterlook.core.gaussian import GaussianModel, SufficientStats

    ctx: dict = {}
    if op == "score":
        from scipy.stats import multivariate_normal

        X = make_matrix(rows)
        model = GaussianModel("full").fit(X)
        mean, cov = model.mean_, model.covariance_
        ctx.update(X=X, mean=mean, cov=cov)
        calls = {
            "afterlook": lambda: model.log_density(X),
            "scipy": lambda: multivariate_normal(mean, cov).logpdf(X),
        }
    elif op == "fit":
        X = make_matrix(rows)
        ctx.update(X=X)
        calls = {
            "afterlook": lambda: GaussianModel("full").fit(X),
            "afterlook-stats": lambda: SufficientStats.of(X),
            "numpy": lambda: np.cov(X, rowvar=False),
        }
    elif op == "load":
        import pandas as pd

        from afterlook.store.tables import load_table

        calls = {"afterlook": lambda: load_table(path), "pandas": lambda: pd.read_csv(path)}
    elif op == "chunks":
        import pandas as pd

        from afterlook.store.table_stream import iter_numeric_chunks

        cols = column_names()
        calls = {
            "afterlook": lambda: _sufficient_sum(iter_numeric_chunks(path, cols, chunk_rows=CHUNK_ROWS)),
            "pandas": lambda: _sufficient_sum(
                c.to_numpy(dtype=np.float64) for c in pd.read_csv(path, usecols=cols, chunksize=CHUNK_ROWS)
            ),
        }
    else:
        raise SystemExit(f"unknown operation {op!r}")
    return calls, ctx


def _agreement(op: str, impl: str, result, ctx: dict, rows: int) -> dict:
    """How closely an afterlook result matches an independent computation."""
    if op == "score" and impl == "afterlook":
        from scipy.stats import multivariate_normal

        ref = multivariate_normal(ctx["mean"], ctx["cov"]).logpdf(ctx["X"])
        return {"max_rel_diff": _max_rel_diff(result, ref)}
    if op == "fit" and impl in ("afterlook", "afterlook-stats"):
        cov = result.covariance_ if impl == "afterlook" else result.covariance()
        return {"max_rel_diff": _max_rel_diff(cov, np.cov(ctx["X"], rowvar=False, bias=True))}
    if op == "load" and impl == "afterlook":
        expected = np.round(make_matrix(rows), DECIMALS)
        return {
            "rows": result.n_rows,
            "numeric_columns": len(result.numeric_columns),
            "max_rel_diff": _max_rel_diff(result.numeric(column_names()), expected),
        }
    if op == "chunks" and impl == "afterlook":
        expected = np.cov(np.round(make_matrix(rows), DECIMALS), rowvar=False, bias=True)
        return {"max_rel_diff": _max_rel_diff(result.covariance(), expected)}
    return {}


def time_worker(op: str, rows: int, repeat: int, path: str | None) -> dict:
    """Time every implementation of *op* in one process, interleaved.

    Each call is warmed up once (lazy imports, BLAS thread buffers, page
    cache), then the implementations take turns for ``repeat`` rounds, so a
    burst of background load hits both sides alike. Best and median are kept.
    """
    calls, ctx = make_calls(op, rows, path)
    for fn in calls.values():
        fn()
    gc.collect()
    times: dict[str, list[float]] = {impl: [] for impl in calls}
    cpu: dict[str, list[float]] = {impl: [] for impl in calls}
    for _ in range(repeat):
        for impl, fn in calls.items():
            wall, used = timed_call(fn)
            times[impl].append(wall)
            cpu[impl].append(used)
    out = {}
    for impl, fn in calls.items():
        best = int(np.argmin(times[impl]))
        out[impl] = {
            "seconds": times[impl][best],
            "median_seconds": float(np.median(times[impl])),
            "cpu_seconds": cpu[impl][best],
        }
        out[impl].update(_agreement(op, impl, fn(), ctx, rows))
    return out


def memory_worker(op: str, impl: str, rows: int, path: str | None) -> dict:
    """Peak resident memory of one warmed-up call of one implementation."""
    calls, _ = make_calls(op, rows, path)
    fn = calls[impl]
    calls.clear()
    fn()  # warm-up, as for timing
    release_pools()
    reset_ok = reset_peak()
    base = current_rss_mib()
    if not reset_ok:
        base = max(base, peak_rss_mib())
    result = fn()
    peak = peak_rss_mib()
    del result
    return {"peak_mib": peak, "base_mib": base, "extra_mib": max(0.0, peak - base), "peak_reset": reset_ok}


# --------------------------------------------------------------------------
# driver
# --------------------------------------------------------------------------

# (label, operation, afterlook impl, reference impl, reference label, target ratio or None)
STEPS = [
    ("score, full model", "score", "afterlook", "scipy", "scipy multivariate_normal.logpdf", 1.0),
    ("fit, GaussianModel(\"full\").fit", "fit", "afterlook", "numpy", "numpy.cov", 1.2),
    ("fit, SufficientStats.of", "fit", "afterlook-stats", "numpy", "numpy.cov", 1.2),
    ("load CSV, load_table", "load", "afterlook", "pandas", "pandas.read_csv", 1.0 / 3.0),
    ("chunked stats, iter_numeric_chunks", "chunks", "afterlook", "pandas", "pandas.read_csv(chunksize)", None),
]


def _child(args: list[str], rows: int, repeat: int, path: str | None) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", *args, "--rows", str(rows), "--repeat", str(repeat)]
    if path is not None:
        cmd += ["--data", path]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    if proc.returncode != 0:
        sys.stderr.write(proc.stderr)
        raise SystemExit(f"benchmark child failed: {' '.join(args)} (exit {proc.returncode})")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _versions() -> dict[str, str]:
    import numpy
    import pandas
    import pyarrow
    import scipy

    return {
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "scipy": scipy.__version__,
        "pandas": pandas.__version__,
        "pyarrow": pyarrow.__version__,
    }


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8", errors="replace") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def _mem_total_gib() -> str:
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemTotal:"):
                    return f"{int(line.split()[1]) / 1024 / 1024:.0f} GiB"
    except OSError:
        pass
    return "?"


def _load_average() -> str:
    try:
        return f"{os.getloadavg()[0]:.1f}"
    except OSError:
        return "?"


def _size_flags(quick: bool, rows: int | None) -> str:
    flags = " --quick" if quick else ""
    return flags + (f" --rows {rows}" if rows is not None else "")


def _fmt_ratio(ratio: float) -> str:
    return f"{ratio:.2f}x"


def _target_text(target: float | None) -> str:
    if target is None:
        return "info"
    if target < 1.0:
        return f"<= {target:.2f}x (>= {1 / target:.0f}x faster)"
    return f"<= {target:.2f}x"


def build_tables(rows: int, results: list[dict]) -> str:
    lines = [
        f"| operation ({rows:,} x {N_COLS}) | afterlook s | reference | reference s | ratio | target | met? |",
        "| --- | ---: | --- | ---: | ---: | --- | --- |",
    ]
    for r in results:
        met = "info" if r["target"] is None else ("yes" if r["ratio"] <= r["target"] else "**no**")
        lines.append(
            f"| {r['label']} | {r['ours']['seconds']:.3f} | {r['ref_label']} | {r['ref']['seconds']:.3f} | "
            f"{_fmt_ratio(r['ratio'])} | {_target_text(r['target'])} | {met} |"
        )
    lines += [
        "",
        "ratio = afterlook time / reference time (lower is better); times are the best of the repeats.",
        "",
        "| operation | afterlook peak MiB (extra) | reference peak MiB (extra) | afterlook / reference CPU s "
        "| agreement (max rel diff) |",
        "| --- | ---: | ---: | ---: | ---: |",
    ]
    for r in results:
        ours, ref = r["ours"], r["ref"]
        agree = ours.get("max_rel_diff")
        lines.append(
            f"| {r['label']} | {ours['peak_mib']:.0f} (+{ours['extra_mib']:.0f}) | "
            f"{ref['peak_mib']:.0f} (+{ref['extra_mib']:.0f}) | "
            f"{ours['cpu_seconds']:.2f} / {ref['cpu_seconds']:.2f} | "
            f"{'-' if agree is None else f'{agree:.1e}'} |"
        )
    lines += [
        "",
        "peak = peak resident size (VmHWM) of a child process making one warmed-up call; extra = peak minus "
        "the resident size just before the call (which holds the input array for score and fit). "
        "CPU s = user + system time of all threads during the best timed call (above the wall time when "
        "the call uses both cores).",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=None, help=f"rows (default {FULL_ROWS:,}; {QUICK_ROWS:,} with --quick)")
    parser.add_argument("--quick", action="store_true", help=f"smoke run on {QUICK_ROWS:,} rows")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs per measurement; the best is kept (default 3)")
    parser.add_argument("--out", default=None, help="Markdown results file (default: results_foundation.md for a full-size run)")
    parser.add_argument("--data-dir", default=None, help="folder for the benchmark CSV (default: a temporary folder, removed after)")
    parser.add_argument("--strict", action="store_true", help="exit 1 when a target is not met")
    parser.add_argument("--worker", nargs="+", help=argparse.SUPPRESS)
    parser.add_argument("--data", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)

    rows = args.rows if args.rows is not None else (QUICK_ROWS if args.quick else FULL_ROWS)
    if rows < 2 or args.repeat < 1:
        parser.error("--rows must be >= 2 and --repeat >= 1")

    if args.worker:
        kind, op, *impl = args.worker
        if kind == "time":
            report = time_worker(op, rows, args.repeat, args.data)
        else:
            report = memory_worker(op, impl[0], rows, args.data)
        print(json.dumps(report))
        return 0

    versions = _versions()
    machine = f"{os.cpu_count()} cores ({_cpu_model()}), {_mem_total_gib()} RAM, {platform.system()} {platform.machine()}"
    print(f"afterlook foundation benchmark: {rows:,} rows x {N_COLS} columns, best of {args.repeat}")
    print(f"machine: {machine}")
    print("versions: " + ", ".join(f"{k} {v}" for k, v in versions.items()))
    load_before = _load_average()
    print(f"load average before: {load_before}")

    own_tmp = args.data_dir is None
    folder = Path(tempfile.mkdtemp(prefix="afterlook-bench-")) if own_tmp else Path(args.data_dir)
    folder.mkdir(parents=True, exist_ok=True)
    csv_path = folder / f"fleet_{rows}x{N_COLS}.csv"
    results: list[dict] = []
    try:
        if not csv_path.exists():
            start = time.perf_counter()
            write_csv(csv_path, rows)
            print(f"wrote {csv_path} ({csv_path.stat().st_size / 2**20:.0f} MiB) in {time.perf_counter() - start:.1f} s")
        else:
            print(f"using existing {csv_path}")
        timing: dict[str, dict] = {}
        memory: dict[tuple[str, str], dict] = {}
        for label, op, ours_impl, ref_impl, ref_label, target in STEPS:
            path = str(csv_path) if op in ("load", "chunks") else None
            if op not in timing:
                timing[op] = _child(["time", op], rows, args.repeat, path)
            for impl in (ours_impl, ref_impl):
                if (op, impl) not in memory:
                    memory[(op, impl)] = _child(["memory", op, impl], rows, 1, path)
            ours = {**timing[op][ours_impl], **memory[(op, ours_impl)]}
            ref = {**timing[op][ref_impl], **memory[(op, ref_impl)]}
            ratio = ours["seconds"] / ref["seconds"]
            results.append(dict(label=label, ref_label=ref_label, ours=ours, ref=ref, ratio=ratio, target=target))
            agree = f", max rel diff {ours['max_rel_diff']:.1e}" if "max_rel_diff" in ours else ""
            print(
                f"  {label:38s} afterlook {ours['seconds']:7.3f} s (median {ours['median_seconds']:.3f})  "
                f"{ref_label} {ref['seconds']:7.3f} s (median {ref['median_seconds']:.3f})  ratio {ratio:5.2f}x{agree}"
            )
            print(
                f"  {'':38s} peak RSS afterlook {ours['peak_mib']:.0f} MiB (+{ours['extra_mib']:.0f}), "
                f"reference {ref['peak_mib']:.0f} MiB (+{ref['extra_mib']:.0f})"
            )
    finally:
        if own_tmp:
            shutil.rmtree(folder, ignore_errors=True)

    load_after = _load_average()
    print(f"load average after: {load_after}")
    table = build_tables(rows, results)
    print()
    print(table)

    out = args.out
    if out is None and rows == FULL_ROWS and not args.quick:
        out = str(HERE / "results_foundation.md")
    if out is not None:
        stamp = _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")
        header = [
            "# Foundation benchmark results",
            "",
            f"- date: {stamp}",
            f"- machine: {machine}",
            "- versions: " + ", ".join(f"{k} {v}" for k, v in versions.items()),
            f"- 1-minute load average (other work on the machine): {load_before} before, {load_after} after; "
            "timings are interleaved so both sides see the same load",
            f"- data: {rows:,} rows x {N_COLS} float columns (seed {SEED}); CSV with an integer `id` column, "
            f"values rounded to {DECIMALS} decimals",
            f"- command: `python benchmarks/bench_foundation.py{_size_flags(args.quick, args.rows)}"
            f"{' --repeat ' + str(args.repeat) if args.repeat != 3 else ''}`",
            "",
        ]
        Path(out).write_text("\n".join(header) + "\n" + table + "\n", encoding="utf-8")
        print(f"\nwrote {out}")

    missed = [r["label"] for r in results if r["target"] is not None and r["ratio"] > r["target"]]
    if missed:
        print("\ntargets not met: " + "; ".join(missed))
    return 1 if (missed and args.strict) else 0


if __name__ == "__main__":
    sys.exit(main())
