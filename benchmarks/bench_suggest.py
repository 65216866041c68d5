"""Candidate search speed: afterlook's moment pass vs the plain pandas loop.

Scenario: one miss, 40 positive columns (780 pairs, about 6,000 candidates),
200,000 training rows (seeded, invented). Measured in the same run:

* the plain pandas loop: for each pair and operation, build the column,
  take its mean and std, z of the miss;
* afterlook's first pass (``generate_and_screen``: every candidate's mean
  and variance from a few d x d matrix products on a 50,000-row sample);
* the whole ``suggest`` call (first pass + exact robust second pass + exact
  re-fit of the top 10), for information;
* agreement: the top 10 of the sampled first pass against the same
  statistic evaluated on all 200,000 rows (target: at least 9 of 10);
* peak memory of the process (target under 1 GB).

Run: ``python benchmarks/bench_suggest.py [--rows N] [--columns D] [--quick]``.
"""

from __future__ import annotations

import argparse
import os
import resource
import time

# Timed cold: never served by shaping choices an earlier run (or the user) left in the cache folder.
os.environ["AFTERLOOK_CACHE_DIR"] = "off"

import numpy as np
import pandas as pd


def make_fleet(rows: int, d: int, seed: int = 1):
    rng = np.random.default_rng(seed)
    # Latent load drives groups of columns, so many pairs are correlated.
    load = rng.lognormal(0.0, 0.3, size=rows)
    cols = {}
    for j in range(d):
        group = j % 5
        base = load ** (0.5 + 0.2 * group) * (1 + 0.1 * j)
        cols[f"c{j:02d}"] = base * rng.lognormal(0.0, 0.05 + 0.01 * group, size=rows) + 0.5
    train = pd.DataFrame(cols)
    miss = train.iloc[[0]].copy()
    miss.iloc[0, 3] *= 1.6  # breaks the relations of column c03
    return train, miss


def pandas_loop(train: pd.DataFrame, miss: pd.Series) -> dict[str, float]:
    out = {}
    names = list(train.columns)
    for a_i in range(len(names)):
        for b_i in range(a_i + 1, len(names)):
            a, b = names[a_i], names[b_i]
            A, B = train[a], train[b]
            ma, mb = miss[a], miss[b]
            za = (A - A.mean()) / A.std(ddof=0)
            zb = (B - B.mean()) / B.std(ddof=0)
            r = float((za * zb).mean())
            sign = -1.0 if r >= 0 else 1.0
            cands = {
                f"{a}/{b}": (A / B, ma / mb),
                f"{b}/{a}": (B / A, mb / ma),
                f"log({a}/{b})": (np.log(A / B), np.log(ma / mb)),
                f"{a}*{b}": (A * B, ma * mb),
                f"{a}**2/{b}": (A**2 / B, ma**2 / mb),
                f"{b}**2/{a}": (B**2 / A, mb**2 / ma),
                f"z({a})-z({b})": (za + sign * zb,
                                   (ma - A.mean()) / A.std(ddof=0) + sign * (mb - B.mean()) / B.std(ddof=0)),
            }
            for key, (col, t) in cands.items():
                out[key] = abs((t - col.mean()) / col.std(ddof=0))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=200_000)
    ap.add_argument("--columns", type=int, default=40)
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    if args.quick:
        args.rows = min(args.rows, 20_000)
    from afterlook.core import candidates as cand
    from afterlook.core.numbers import sample_rows

    train, miss = make_fleet(args.rows, args.columns)
    names = list(train.columns)
    t_row = miss.to_numpy(dtype=float)

    t0 = time.perf_counter()
    ref = pandas_loop(train, miss.iloc[0])
    t_pandas = time.perf_counter() - t0

    settings = cand.Settings()
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        rows = sample_rows(len(train), settings.sample_size, settings.random_state)
        A = train.to_numpy(dtype=float)[rows]
        sample = {n: A[:, k] for k, n in enumerate(names)}
        found, tried, _ = cand.generate_and_screen(names, sample, t_row, None, settings, select=True)
        best = min(best, time.perf_counter() - t0)
    t_first = best

    # Agreement of the sampled first pass with the same statistic on all rows.
    full = {n: train[n].to_numpy(dtype=float) for n in names}
    full_found, _, _ = cand.generate_and_screen(names, full, t_row, None, settings)
    # Identity of a candidate = kind + ordered inputs (the standardized
    # difference's text embeds the sample's mean and sd, so text differs).
    top_sample = [(c.kind, c.inputs) for c in sorted(found, key=lambda c: -np.nan_to_num(c.first_pass_z))[:10]]
    top_full = [(c.kind, c.inputs) for c in sorted(full_found, key=lambda c: -np.nan_to_num(c.first_pass_z))[:10]]
    agree = len(set(top_sample) & set(top_full))

    # The whole suggest call, through the API, for information.
    import afterlook
    from afterlook.analysis.discovery import suggest

    cases = pd.concat([miss.assign(id="miss", label="anomaly"),
                       train.iloc[1:2001].assign(id=[f"n{k}" for k in range(2000)], label="normal")],
                      ignore_index=True)
    model = afterlook.fit(train, kind="independent", threshold="rate:0.01")
    t0 = time.perf_counter()
    res = suggest(model, cases, train=train, case_ids=["miss"], top=10, shaping=False)
    t_suggest = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    ratio = t_pandas / t_first
    lines = [
        f"rows {args.rows}, columns {args.columns}, candidates tried {tried} (pandas loop: {len(ref)})",
        "",
        "| operation | afterlook s | pandas loop s | ratio | target | met |",
        "| --- | ---: | ---: | ---: | --- | --- |",
        f"| suggest first pass, 1 miss | {t_first:.3f} | {t_pandas:.2f} | {ratio:.0f}x | >= 50x | {'yes' if ratio >= 50 else 'NO'} |",
        f"| whole suggest (3 passes, 10 re-fits) | {t_suggest:.2f} | {t_pandas:.2f} | {t_pandas / t_suggest:.1f}x | info | |",
        f"| top 10 sampled vs full data | {agree}/10 agree | | | >= 9/10 | {'yes' if agree >= 9 else 'NO'} |",
        f"| peak memory (whole run) | {peak_mb:.0f} MB | | | < 1024 MB | {'yes' if peak_mb < 1024 else 'NO'} |",
        "",
        f"top candidate: {res.candidates[0].expression if res.candidates else None} | {res.verdict()}",
    ]
    print("\n".join(lines))
    if not args.quick:
        import datetime
        import os
        import platform

        out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "results_suggest.md")
        with open(out, "w", encoding="utf-8") as fh:
            fh.write(f"# suggest benchmark, {datetime.date.today().isoformat()}\n\n")
            fh.write(f"{os.cpu_count()} cores, Python {platform.python_version()}, numpy {np.__version__}, "
                     f"pandas {pd.__version__}\n\n")
            fh.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
