"""Write the invented pump-station scenario (train.csv, cases.csv, model.json) and analyse it.

The demo model is the *independent* Gaussian, the kind that misses failures
whose single features stay in range while their relations break. Used by
``afterlook demo`` (:mod:`afterlook.cli.demo_command`), the scripts, the
benchmarks and the tests.
"""

from __future__ import annotations

import os
from pathlib import Path

from ..core.errors import AfterlookError

DEMO_KIND = "independent"
# The demo model's recipe, as a practitioner would have set it up: hydraulic
# power as a derived feature, and the skewed service counter log-shaped.
DEMO_DERIVE = {"hydraulic_power": "flow_m3h * (discharge_bar - suction_bar)"}
DEMO_TRANSFORM = {"hours_since_service": "log(hours_since_service + 1)"}
# Each row's station and hour: the model records them, so the search can set a reading against its
# own station's baseline (unit_median, unit_scale) and its previous reading (lag).
DEMO_UNIT_COL = "station"
DEMO_TIME_COL = "hour"


# The demo leaves this mark in its folder: only a marked (or empty) folder is written into again,
# so `demo --dir` can never replace a user's own train.csv, cases.csv or model.json.
DEMO_MARK = ".afterlook-demo"
DEMO_FILES = ("train.csv", "cases.csv", "model.json")


def check_demo_folder(folder: Path) -> None:
    """Refuse a folder that is neither missing, empty nor made by the demo (one line, exit 2)."""
    from ..core.printable import printable

    shown = printable(str(folder))
    if os.path.lexists(folder) and not folder.is_dir():
        raise AfterlookError(f"--dir {shown} exists and is not a folder; choose a new or empty folder")
    if not folder.is_dir():
        return
    try:
        present = set(os.listdir(folder))
    except OSError as exc:
        raise AfterlookError(f"cannot read demo folder {shown}: {exc.strerror or exc}") from None
    if not present or DEMO_MARK in present:
        for name in DEMO_FILES:
            p = folder / name
            if os.path.lexists(p) and (p.is_symlink() or not p.is_file()):
                raise AfterlookError(f"--dir {shown}: {name} is not a plain file the demo wrote; "
                                     "choose a new or empty folder")
        return
    clash = sorted(present & set(DEMO_FILES))
    what = f"it already holds {', '.join(clash)}" if clash else "it is not empty"
    raise AfterlookError(f"--dir {shown} was not made by the demo and {what}; choose a new or empty folder "
                         f"(a folder an older afterlook demo made has no {DEMO_MARK} mark: delete it first)")


def write_demo(folder: Path, seed: int = 7):
    """Write train.csv, cases.csv and model.json into ``folder``; return the paths.

    ``folder`` must be missing, empty or one the demo wrote before (:func:`check_demo_folder`).
    """
    from ..analysis.fitting import fit
    from ..store.tables import load_table, write_table
    from .scenario import generate

    folder = Path(folder)
    check_demo_folder(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise AfterlookError(f"cannot create demo folder {folder}: {exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK):
        raise AfterlookError(f"cannot write into demo folder {folder}: permission denied")
    try:
        (folder / DEMO_MARK).write_text("written by afterlook demo; the demo may write here again\n")
    except OSError as exc:
        raise AfterlookError(f"cannot write into demo folder {folder}: {exc.strerror or exc}") from None
    scenario = generate(seed=seed)
    train_path, cases_path, model_path = folder / "train.csv", folder / "cases.csv", folder / "model.json"
    write_table(scenario.train, train_path)
    write_table(scenario.cases, cases_path)
    train = load_table(train_path)
    cases = load_table(cases_path, require_labels=True)
    model = fit(train, cases=cases, kind=DEMO_KIND, threshold="f1", derive=DEMO_DERIVE,
                    transform=DEMO_TRANSFORM, unit_col=DEMO_UNIT_COL, time_col=DEMO_TIME_COL, shaping=True)
    model.save(model_path)
    return train_path, cases_path, model_path


def analysis(model_path: Path, cases_path: Path, train_path: Path) -> dict:
    """The demo's analysis as data: misses, the worst explained, candidates for it, and the try."""
    from ..analysis.discovery import suggest
    from ..analysis.evidence import explain, misses
    from ..analysis.model import load_model
    from ..analysis.session import Session
    from ..analysis.trial import try_features
    from ..store.tables import load_table

    session = Session(load_model(model_path), load_table(cases_path, require_labels=True), load_table(train_path))
    model, cases = session.model, session.cases
    result = misses(session)
    doc = {"model": str(model_path), "cases": str(cases_path), "train": str(train_path),
           "misses": result.to_dict(), "worst": None, "suggest": None, "try": None}
    extras = {}
    if result.misses:
        worst = result.misses[0].case
        doc["worst"] = explain(session, worst).to_dict()
        found = suggest(session, None, case_ids=[worst], top=5)
        doc["suggest"] = found.to_dict()
        extras["suggest"] = found
        best = next((c for c in found.candidates if c.beyond_chance), None)
        if best is not None:
            tried = try_features(session, None, {best.name: best.expression}, focus=[worst])
            doc["try"] = tried.to_dict()
            extras["try"] = tried
    return doc, model, cases, result, extras
