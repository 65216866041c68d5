"""One number, one face: the model's threshold reads the same in every command, the workbench and reports.

The reference value is the model file's own threshold (read with the json
module), formatted by the one rule in afterlook.analysis.shown; every place a
user meets it must show exactly that text, never a second rounding of it.
"""

from __future__ import annotations

import json
import re

import pytest

from afterlook.analysis import shown

THRESHOLD = re.compile(r"threshold\s+(-?\d[\d,]*\.\d+|-?\d\.\d+e[+-]\d+)")


@pytest.fixture(scope="module")
def value(demo_written):
    return json.loads(demo_written.model.read_text())["threshold"]["value"]  # json module reads the file


@pytest.fixture(scope="module")
def face(value):
    return shown.threshold(value)


def other_faces(value: float, face: str) -> list[re.Pattern]:
    """Other roundings of the same number (what a second formatting rule would print), as whole tokens."""
    texts = {f"{value:.{k}f}" for k in (1, 3, 4, 6)} | {f"{value:.4g}", f"{value:.6g}"}
    return [re.compile(r"(?<![\d.])" + re.escape(t) + r"(?![\d])") for t in sorted(texts - {face})]


def _faces(text: str) -> set[str]:
    return set(THRESHOLD.findall(" ".join(text.split())))


def test_the_commands_show_the_threshold_one_way(demo_written, value, face, run_cli, tmp_path):
    d = demo_written
    worst = "PS-01/2026-05-21T17:00"
    outputs = {}
    for name, args in {
        "misses": ("misses", d.model, d.cases),
        "explain": ("explain", d.model, d.cases, worst),
        "try": ("try", d.model, d.cases, "--derive", "r=motor_current_a / hydraulic_power", "--train", d.train),
        "casebook add": ("casebook", "add", tmp_path / "b.json", "--model", d.model, "--cases", d.cases,
                         "--case", worst, "--status", "open"),
        "casebook show": ("casebook", "show", tmp_path / "b.json", worst),
        "casebook report": ("casebook", "report", tmp_path / "b.json"),
    }.items():
        code, out, err = run_cli(*args)
        assert code == 0, (name, err)
        outputs[name] = out
    others = other_faces(value, face)
    for name, out in outputs.items():
        text = " ".join(out.split())
        assert re.search(r"(?<![\d.])" + re.escape(face) + r"(?![\d])", text), f"{name} does not show {face}"
        seen = [p.pattern for p in others if p.search(text)]
        assert not seen, f"{name} shows the threshold another way too: {seen}"
        # where a threshold is named in running text, every one of them follows the same rule
        assert all(f == shown.threshold(float(f.replace(",", ""))) for f in _faces(out)), name


@pytest.mark.asyncio
async def test_the_workbench_status_line_shows_the_same_face(demo_written, face):
    from afterlook.tui import create_app
    from afterlook.tui.widgets.status_line import StatusLine

    d = demo_written
    app = create_app(d.model, d.cases, train_path=d.train, casebook=d.folder / "unused.json", auto_candidates=False)
    for size in ((80, 24), (120, 40)):
        async with app.run_test(size=size) as pilot:
            await pilot.pause()
            await app.workers.wait_for_complete()
            await pilot.pause()
            text = str(app.workbench.query_one(StatusLine).render())
        assert _faces(text) == {face}, (size, text)
        assert "F1 " in text and "0 false alarms" in text  # the metrics wrap in, never drop out
        app = create_app(d.model, d.cases, train_path=d.train, casebook=d.folder / "unused.json",
                         auto_candidates=False)
