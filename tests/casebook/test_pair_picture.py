"""A reviewed case whose derived feature reads two columns keeps its pair picture; the HTML report draws it.

References: numpy.histogram2d on the same edges recounts the stored normal
grid; html.parser (standard library) parses the SVG; the casebook file is
read back through the json module.
"""

from __future__ import annotations

import json
from html.parser import HTMLParser

import numpy as np
import pytest

import afterlook
from afterlook.analysis.pair_svg import pair_svg
from afterlook.analysis.review import add_to_casebook
from afterlook.analysis.report import render_html


class Shapes(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


@pytest.fixture(scope="module")
def entry(demo, tmp_path_factory):
    book = tmp_path_factory.mktemp("pair") / "book.json"
    add_to_casebook(book, demo.model, demo.cases, demo.worst, "explained",
                    derive={"ratio": "motor_current_a / hydraulic_power"}, train=demo.train)
    return json.loads(book.read_text())["entries"][0]  # json module: what is on disk


def test_the_entry_keeps_the_two_readings_grid(entry, demo):
    p = entry["deciding_feature"]["pair"]
    assert (p["up"], p["across"]) == ("motor_current_a", "hydraulic_power")
    normal = np.array([[int(v) for v in row.split()] for row in p["normal"]])
    train = afterlook.load_table(demo.train).frame
    power = train["flow_m3h"] * (train["discharge_bar"] - train["suction_bar"])  # the demo's derived feature
    ref, _, _ = np.histogram2d(train["motor_current_a"], power, bins=[p["y_edges"], p["x_edges"]])
    assert np.array_equal(normal, ref.astype(int))  # every training row is normal in the demo
    assert len(p["in_band"]) == normal.shape[0] and set("".join(p["in_band"])) <= {"0", "1"}
    lo, hi = np.quantile(train["motor_current_a"] / power, [0.01, 0.99])  # numpy.quantile
    assert p["band"] == pytest.approx([lo, hi], rel=1e-12)


def test_the_html_report_draws_it(entry):
    page = render_html([entry])
    start = page.index('<svg class="pair"')
    svg = page[start: page.index("</svg>", start)]
    shapes = Shapes()
    shapes.feed(svg)
    p = entry["deciding_feature"]["pair"]
    normal = np.array([[int(v) for v in row.split()] for row in p["normal"]])
    others = np.array([[int(v) for v in row.split()] for row in p["others"]])
    kinds = [a.get("class") for _, a in shapes.tags]
    assert kinds.count("dens") == int((normal > 0).sum())
    assert kinds.count("other") == int((others > 0).sum())
    assert kinds.count("case") == 1
    assert "motor_current_a against hydraulic_power" in page


def test_a_damaged_grid_draws_nothing_rather_than_failing():
    assert pair_svg({"normal": ["1 2", "x y"], "x_edges": [0, 1, 2], "y_edges": [0, 1, 2]}) == ""
    assert pair_svg({"normal": []}) == ""
    assert pair_svg({"normal": ["1 2", "3 4"]}) == ""  # no edges
    assert pair_svg({"normal": ["1 2", "3 4"], "x_edges": [0, 1], "y_edges": [0, 1, 2]}) == ""  # wrong length
    svg = pair_svg({"up": "<b>", "across": "a&b", "normal": ["1 0", "0 2"], "others": ["0 1", "0 0"],
                    "in_band": ["11", "10"], "x_edges": [0, 1, 2], "y_edges": [0, 1, 2], "case": [0.5, 1.5]})
    assert "<b>" not in svg and "&lt;b&gt;" in svg
