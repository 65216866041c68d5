"""Do suggest's verdicts hold up on cases the tool never saw? A check on public labelled tables.

    .venv/bin/python scripts/evaluate_verdicts.py [--seeds 3] [--top 8] [--json out.json]

Data: tables that registry packages ship, so anyone can rerun this offline:
scikit-learn's Wisconsin diagnostic breast cancer table (malignant = anomaly),
its wine table (cultivar 3 = anomaly) and its iris table (virginica =
anomaly); statsmodels' Star98 school table is too weakly labelled and is not
used. Each table is split with a fixed seed into training normals (50% of the
normal rows), validation cases (25% of normals + half the anomalies, capped
so anomalies are at most ~15% of the cases) and a holdout the tool never sees
(the rest). For every model kind the script fits on the training normals,
picks the threshold on the cases, runs ``suggest`` on all misses, re-fits
each listed candidate with ``try_features`` and scores the holdout with the
re-fitted model and its threshold. It prints, per candidate, what suggest
said (rank, beyond chance, verdict and held-out gain when the result carries
them) beside the holdout F1 change, and a summary:

* how often a candidate called beyond chance / recommended helped or hurt on the holdout;
* the correlation between the in-sample (or held-out) gain and the holdout change.

This is an evaluation, not a test: the assertions that must always hold live
in ``tests/reference/``.
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
import warnings

import numpy as np
import pandas as pd

import afterlook
from afterlook.core.thresholds import confusion, flag


def _safe(name: str) -> str:
    return re.sub(r"\W+", "_", name).strip("_").lower()


def datasets():
    from sklearn.datasets import load_breast_cancer, load_iris, load_wine

    out = {}
    for name, loader, is_anomaly in (("breast_cancer", load_breast_cancer, lambda t: t == 0),
                                     ("wine", load_wine, lambda t: t == 2),
                                     ("iris", load_iris, lambda t: t == 2)):
        data = loader()
        frame = pd.DataFrame(data.data, columns=[_safe(c) for c in data.feature_names])
        out[name] = (frame, is_anomaly(data.target))
    return out


def split(frame, anomaly, seed, max_share=0.15):
    rng = np.random.default_rng(seed)
    normal_idx = rng.permutation(np.flatnonzero(~anomaly))
    anomaly_idx = rng.permutation(np.flatnonzero(anomaly))
    n = normal_idx.size
    train = normal_idx[: n // 2]
    case_normals, hold_normals = normal_idx[n // 2: (3 * n) // 4], normal_idx[(3 * n) // 4:]
    cap = max(2, int(max_share / (1 - max_share) * case_normals.size))
    half = min(anomaly_idx.size // 2, cap)
    case_anoms, hold_anoms = anomaly_idx[:half], anomaly_idx[half: 2 * half]

    def table(idx, labelled=True):
        t = frame.iloc[idx].reset_index(drop=True).copy()
        t.insert(0, "id", [f"r{i}" for i in idx])
        if labelled:
            t["label"] = np.where(anomaly[idx], "anomaly", "normal")
        return t

    return (table(train, labelled=False), table(np.r_[case_normals, case_anoms]),
            table(np.r_[hold_normals, hold_anoms]))


def holdout_f1(model, holdout) -> float:
    y = (holdout["label"] == "anomaly").to_numpy()
    return confusion(flag(model.log_density(holdout), model.threshold), y).f1


def evaluate(name, frame, anomaly, seed, kind, top):
    train, cases, holdout = split(frame, anomaly, seed)
    model = afterlook.fit(train, cases=cases, kind=kind)
    found = afterlook.misses(model, cases).misses
    if not found:
        return []
    ids = [m.case for m in found]
    result = afterlook.suggest(model, cases, train=train, case_ids=ids, top=top)
    base = holdout_f1(model, holdout)
    recommended = getattr(result, "recommended", None)
    rows = []
    for rank, c in enumerate(result.candidates, start=1):
        row = {"set": name, "kind": kind, "seed": seed, "misses": len(ids), "rank": rank, "candidate": c.expression,
               "beyond_chance": bool(c.beyond_chance), "verdict": getattr(c, "verdict", None),
               "recommended": recommended is not None and c.name == recommended}
        held = getattr(c, "heldout", None)
        row["heldout_gain"] = getattr(held, "gain", None) if held is not None else None
        try:
            tried = afterlook.try_features(model, cases, {c.name: c.expression}, train=train)
        except afterlook.AfterlookError as exc:
            row.update(error=str(exc))
            rows.append(row)
            continue
        row["in_sample_gain"] = tried.after.f1 - tried.before.f1
        row["holdout_gain"] = holdout_f1(tried.model, holdout) - base
        rows.append(row)
    return rows


def summarise(rows) -> list[str]:
    ok = [r for r in rows if "holdout_gain" in r]
    lines = [f"{len(rows)} candidates listed, {len(rows) - len(ok)} failed to re-fit"]

    def describe(label, subset):
        if not subset:
            lines.append(f"{label}: none")
            return
        g = np.array([r["holdout_gain"] for r in subset])
        lines.append(f"{label}: {len(subset)}; holdout F1 up in {int((g > 1e-12).sum())}, down in "
                     f"{int((g < -1e-12).sum())}; mean change {g.mean():+.3f}, worst {g.min():+.3f}")

    describe("all re-fitted candidates", ok)
    describe("called beyond chance", [r for r in ok if r["beyond_chance"]])
    describe("called chance", [r for r in ok if not r["beyond_chance"]])
    describe("ranked first", [r for r in ok if r["rank"] == 1])
    describe("recommended", [r for r in ok if r["recommended"]])
    for v in sorted({r["verdict"] for r in ok if r["verdict"]}):
        describe(f"verdict {v}", [r for r in ok if r["verdict"] == v])
    for key in ("in_sample_gain", "heldout_gain"):
        pairs = [(r[key], r["holdout_gain"]) for r in ok if r.get(key) is not None]
        if len(pairs) > 2 and np.std([p[0] for p in pairs]) > 0 and np.std([p[1] for p in pairs]) > 0:
            r = float(np.corrcoef(np.array(pairs).T)[0, 1])
            lines.append(f"correlation of {key} with the holdout change: r = {r:.2f} over {len(pairs)}")
    return lines


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--top", type=int, default=8)
    ap.add_argument("--json", help="write every row here")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    rows = []
    for name, (frame, anomaly) in datasets().items():
        for kind in ("independent", "full"):
            for seed in range(args.seeds):
                got = evaluate(name, frame, anomaly, seed, kind, args.top)
                rows += got
                for r in got:
                    gain = r.get("holdout_gain")
                    print(f"{name:13} {kind:11} s{seed} #{r['rank']:<2} {'beyond' if r['beyond_chance'] else 'chance':6} "
                          f"{(r['verdict'] or '-'):13} in-sample {r.get('in_sample_gain', math.nan):+.3f} "
                          f"holdout {gain if gain is not None else math.nan:+.3f}  {r['candidate'][:60]}")
    print()
    for line in summarise(rows):
        print(line)
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(rows, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
