"""The example notebook runs: its code cells executed in order in one namespace (no Jupyter needed).

The notebook's own asserts compare ``to_frame()`` with ``to_dict()`` (the CLI's
``--json``) and the exported pipeline's flags with ``Model.score``.
"""

from __future__ import annotations

import json
from pathlib import Path

NOTEBOOK = Path(__file__).resolve().parents[2] / "examples" / "demo-walkthrough.ipynb"


def test_the_example_notebook_runs(tmp_path, monkeypatch, demo_written):
    import shutil

    cells = json.loads(NOTEBOOK.read_text("utf-8"))["cells"]
    code = [("".join(c["source"]), i) for i, c in enumerate(cells) if c["cell_type"] == "code"]
    assert len(code) >= 8
    folder = tmp_path / "afterlook-demo"
    shutil.copytree(demo_written.folder, folder)  # the demo the first cell would write (seed 7), made once per session
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    for source, index in code:
        exec(compile(source, f"{NOTEBOOK.name}[cell {index}]", "exec"), namespace)
    # what the notebook displays: every result object renders as HTML
    for name in ("missed", "evidence", "found", "tried", "shaped", "checked"):
        html = namespace[name]._repr_html_()
        assert html.startswith("<p><b>afterlook ") and "<table" in html
    assert namespace["imported"].imported
