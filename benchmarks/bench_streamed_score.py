"""`afterlook score` streamed (--engine chunked, dask) against the in-memory score: time and peak memory.

Each run is a fresh `afterlook score` process (the console script next to
this interpreter); wall time from the parent, peak resident memory of that
process from its own ``VmHWM`` (for dask: this process only, not its workers;
not ``os.wait4``'s ru_maxrss, which carries this benchmark's own size into
every child).
Input: the invented demo fleet's cases repeated with 1% noise to ``--rows``
rows (13 columns, ~200 bytes a row as CSV), scored with the demo model.
Idle, then loaded (one spinning process per core). Prints a Markdown table
with each engine's time and memory as a ratio of the in-memory score, and
whether its output file is byte for byte the in-memory score's.

Usage::

    python benchmarks/bench_streamed_score.py            # 1,000,000 rows (~200 MB CSV), a few minutes
    python benchmarks/bench_streamed_score.py --quick    # 100,000 rows
"""

from __future__ import annotations

import argparse
import filecmp
import multiprocessing
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

HERE = Path(__file__).resolve().parent
SCRIPT = Path(sys.executable).parent / "afterlook"


def _spin(stop) -> None:  # pragma: no cover - load generator
    while not stop.is_set():
        pass


def _make_inputs(folder: Path, rows: int) -> tuple[Path, Path]:
    subprocess.run([str(SCRIPT), "demo", "--dir", str(folder / "demo"), "--no-tui"], check=True,
                   stdout=subprocess.DEVNULL)
    import pandas as pd

    base = pd.read_csv(folder / "demo" / "cases.csv")
    numeric = [c for c in base.columns if base[c].dtype.kind in "fi"]
    rng = np.random.default_rng(0)
    path = folder / "big.csv"
    writer = None
    for start in range(0, rows, 100_000):
        m = min(100_000, rows - start)
        part = base.iloc[rng.integers(0, len(base), m)].reset_index(drop=True)
        part["id"] = [f"row{start + i}" for i in range(m)]
        # each row its own time: a unit's readings must have one order (the demo model knows its time column)
        part["hour"] = (pd.Timestamp("2030-01-01") + pd.to_timedelta(np.arange(start, start + m), unit="min")
                        ).strftime("%Y-%m-%dT%H:%M")
        for c in numeric:
            part[c] = part[c].to_numpy(float) * (1 + 0.01 * rng.standard_normal(m))
        table = pa.Table.from_pandas(part, preserve_index=False)
        writer = writer or pacsv.CSVWriter(str(path), table.schema)
        writer.write_table(table)
    writer.close()
    return folder / "demo" / "model.json", path


#: Runs the console script's own entry point, then writes this process's peak resident size (VmHWM, kB)
#: to the file named first. Not os.wait4's ru_maxrss: Linux keeps the larger of the old address space's
#: high-water mark across exec, and a child started by vfork has the parent's, so every child reported
#: at least this benchmark's own size (seen: a child using 8 MB reported 526 MB beside a 500 MB parent).
_WRAP = """import sys
from afterlook.cli.main import entry
report = sys.argv.pop(1)
sys.argv[0] = "afterlook"
try:
    entry()
finally:
    with open("/proc/self/status") as fh:
        hwm = [line.split()[1] for line in fh if line.startswith("VmHWM:")]
    with open(report, "w") as out:
        out.write(hwm[0] if hwm else "")
"""


def _run(args: list[str]) -> tuple[float, float]:
    """(seconds, peak resident MB) of one fresh process running ``afterlook ARGS``."""
    with tempfile.NamedTemporaryFile(suffix=".hwm", delete=False) as fh:
        report = fh.name
    try:
        start = time.perf_counter()
        proc = subprocess.run([sys.executable, "-c", _WRAP, report, *args], stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE)
        seconds = time.perf_counter() - start
        if proc.returncode != 0:
            raise SystemExit(f"afterlook {' '.join(args)} failed: {proc.stderr.decode()[:300]}")
        kib = Path(report).read_text().strip()
    finally:
        os.unlink(report)
    return seconds, (int(kib) / 1024 if kib else float("nan"))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--quick", action="store_true", help="100,000 rows, one round")
    parser.add_argument("--repeat", type=int, default=2, help="rounds per engine (median reported)")
    parser.add_argument("--no-dask", action="store_true")
    args = parser.parse_args(argv)
    rows = 100_000 if args.quick else args.rows
    repeat = 1 if args.quick else args.repeat
    engines = [("memory", []), ("chunked (262,144 rows)", ["--engine", "chunked"]),
               ("chunked (65,536 rows)", ["--engine", "chunked", "--chunk-rows", "65536"])]
    if not args.no_dask:
        engines.append(("dask (local cluster, 2 workers)", ["--engine", "dask"]))
    lines = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        model, data = _make_inputs(folder, rows)
        size = data.stat().st_size / 2**20
        load_now = ", ".join(f"{x:.1f}" for x in os.getloadavg())
        lines.append(f"{rows:,} rows, {size:.0f} MiB CSV -> CSV; median of {repeat} fresh processes; "
                     f"load average at the start: {load_now}")
        lines.append("")
        lines.append("| engine | load | seconds | peak MB | time vs memory | memory vs memory | output |")
        lines.append("| --- | --- | --- | --- | --- | --- | --- |")
        for load in ("idle", "loaded"):
            stop = multiprocessing.Event()
            spinners = []
            if load == "loaded":
                spinners = [multiprocessing.Process(target=_spin, args=(stop,), daemon=True)
                            for _ in range(os.cpu_count() or 1)]
                for p in spinners:
                    p.start()
            try:
                reference = None
                for name, extra in engines:
                    runs = [_run(["score", str(model), str(data), "--out", str(folder / "out.csv"), "--force",
                                  *extra]) for _ in range(repeat)]
                    seconds = statistics.median(r[0] for r in runs)
                    peak = max(r[1] for r in runs)
                    reference = reference or (seconds, peak)
                    out = folder / "out.csv"
                    if not extra:  # the in-memory score's file: what every engine must write, byte for byte
                        out.replace(folder / "memory.csv")
                        same = "reference"
                    else:
                        same = "same bytes" if filecmp.cmp(out, folder / "memory.csv", shallow=False) else "DIFFERS"
                    lines.append(f"| {name} | {load} | {seconds:.2f} | {peak:.0f} | {seconds / reference[0]:.2f}x "
                                 f"| {peak / reference[1]:.2f}x | {same} |")
                    print(lines[-1], flush=True)
            finally:
                stop.set()
                for p in spinners:
                    p.join()
    text = "\n".join(lines) + "\n"
    print(text)
    if not args.quick and rows == 1_000_000:
        (HERE / "results_streamed_score.md").write_text("# bench_streamed_score.py\n\n" + text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
