"""Run every ``bench_*.py`` in this folder in turn, each in its own process.

Usage::

    python benchmarks/run_all.py            # full-size runs
    python benchmarks/run_all.py --quick    # smoke runs (each benchmark's --quick)

Exit status: 0 when every benchmark finished, 1 when any of them failed.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Run every benchmarks/bench_*.py in turn.")
    parser.add_argument("--quick", action="store_true", help="pass --quick to every benchmark (small inputs)")
    args = parser.parse_args(argv)

    scripts = sorted(HERE.glob("bench_*.py"))
    if not scripts:
        print(f"no bench_*.py files in {HERE}")
        return 0
    failed: list[str] = []
    for script in scripts:
        cmd = [sys.executable, str(script)] + (["--quick"] if args.quick else [])
        print(f"=== {script.name}{' --quick' if args.quick else ''}", flush=True)
        start = time.perf_counter()
        code = subprocess.call(cmd)
        print(f"=== {script.name}: exit {code} after {time.perf_counter() - start:.0f} s\n", flush=True)
        if code != 0:
            failed.append(script.name)
    if failed:
        print("failed: " + ", ".join(failed))
        return 1
    print(f"all {len(scripts)} benchmark(s) finished")
    return 0


if __name__ == "__main__":
    sys.exit(main())
