"""Incident-review reports: one self-contained HTML file and Markdown, with every piece of user text escaped.

Outside references: ``html.parser.HTMLParser`` parses the HTML;
``markdown_it`` (a CommonMark parser, installed with rich) renders the Markdown.
"""

from __future__ import annotations

from html.parser import HTMLParser

import pytest

import afterlook
from afterlook.analysis.review import review_entry
from afterlook.cli.main import CAUTION
from afterlook.analysis.report import histogram_svg, render_html, render_markdown
from afterlook.store.casebook_file import Casebook

HOSTILE = '<script>alert("x")</script> & "quoted" | pipe [link](https://example.invalid/x) *bold* `tick`'


class Page(HTMLParser):
    """Collects start tags, attributes and text, and the tags seen inside each entry section."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.sections: list[list[str]] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag == "section":
            self.sections.append([])
        elif self.sections:
            self.sections[-1].append(tag)
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        if tag == "style":
            self._in_style = False

    def handle_data(self, data):
        self.text.append(("STYLE:" if self._in_style else "") + data)


def parse(text: str) -> Page:
    page = Page()
    page.feed(text)
    page.close()
    return page


@pytest.fixture(scope="module")
def book(demo):
    model = afterlook.load_model(demo.model)
    cases = afterlook.load_table(demo.cases)
    misses = afterlook.misses(model, cases).misses
    derive = {demo.name: demo.expression}
    b = Casebook("pump.casebook.json")
    b.upsert(review_entry(model, cases, demo.worst, "explained", derive=derive, train=demo.train,
                          reviewer="tester", model_path="model.json", note="worn impeller"))
    # a second explained case: another miss the same feature catches
    b.upsert(review_entry(model, cases, misses[1].case, "explained", derive=derive, train=demo.train,
                          reviewer="tester", model_path="model.json"))
    b.upsert(review_entry(model, cases, misses[2].case, "accepted-risk", train=demo.train, note=HOSTILE,
                          reviewer='<b onmouseover="x">eve</b>', model_path="model.json"))
    return b


def test_html_is_one_self_contained_file_with_a_histogram_per_entry(book):
    text = render_html(book)
    page = parse(text)
    tags = [t for t, _ in page.tags]
    explained = [k for k in sorted(book.entries) if book.entries[k]["status"] == "explained"]
    assert len(page.sections) == len(book.entries) == 3
    # one inline <svg> histogram in every entry's section, explained ones included; an entry whose
    # derived feature reads two columns adds its pair picture
    pairs = [bool((book.entries[k].get("deciding_feature") or {}).get("pair")) for k in sorted(book.entries)]
    assert [sec.count("svg") for sec in page.sections] == [1 + p for p in pairs]
    assert tags.count("svg") >= len(explained)
    # nothing to fetch: no external resources at all, and no URL anywhere in this report
    assert not {"script", "link", "img", "iframe", "object", "embed"} & set(tags)
    for tag, attrs in page.tags:
        assert "src" not in attrs and "href" not in attrs, (tag, attrs)
        assert not any(k.startswith("on") for k in attrs), (tag, attrs)
    assert "url(" not in text and "@import" not in text
    assert tags.count("style") == 1


def test_html_escapes_user_text(book):
    page = parse(render_html(book))
    tags = [t for t, _ in page.tags]
    assert "script" not in tags and "b" not in tags
    text = "".join(page.text)
    assert HOSTILE in text  # shown as written, after the parser decodes the escapes
    assert '<b onmouseover="x">eve</b>' in text
    # the only URL in this report is the one typed into the note, as text
    for tag, attrs in page.tags:
        assert not any("://" in (v or "") for v in attrs.values()), (tag, attrs)


def test_html_without_hostile_text_holds_no_url_at_all(book):
    clean = Casebook("clean.json")
    for k, e in book.entries.items():
        if e["status"] == "explained":
            clean.upsert(e)
    text = render_html(clean)
    assert "http://" not in text and "https://" not in text


def test_histogram_marks_the_case_beyond_the_normal_bars():
    hist = {"edges": [0.0, 1.0, 2.0, 3.0], "counts": [5, 10, 2]}
    page = parse(histogram_svg(hist, 7.5, label="ratio"))
    rects = [a for t, a in page.tags if t == "rect"]
    lines = [a for t, a in page.tags if t == "line" and a.get("class") == "case"]
    assert len(rects) == 3 and len(lines) == 1
    heights = [float(r["height"]) for r in rects]
    assert heights.index(max(heights)) == 1  # the tallest bar is the bin with 10
    case_x = float(lines[0]["x1"])
    assert all(case_x > float(r["x"]) + float(r["width"]) for r in rects)
    inside = parse(histogram_svg(hist, 1.5, label="ratio"))
    xs = [float(a["x"]) for t, a in inside.tags if t == "rect"]
    case_x = float(next(a for t, a in inside.tags if t == "line" and a.get("class") == "case")["x1"])
    assert xs[1] < case_x < xs[2]


def test_markdown_lists_every_entry_and_escapes_user_text(book):
    from markdown_it import MarkdownIt

    text = render_markdown(book)
    for case in book.entries:
        assert f"## `{case}`" in text
    rendered = MarkdownIt("commonmark").enable("table").render(text)
    page = parse(rendered)
    tags = [t for t, _ in page.tags]
    assert "script" not in tags and "a" not in tags and "b" not in tags
    assert HOSTILE in "".join(page.text)
    assert tags.count("table") >= 1 + 3 * len(book.entries)  # summary + score, metrics, evidence per entry
    assert "<svg" not in text


def test_footer_carries_the_caution(book):
    assert CAUTION in render_markdown(book)
    assert CAUTION in "".join(parse(render_html(book)).text)
    assert "Defer to local codes and licensed practice." in CAUTION


def test_reports_are_pure_functions_of_the_book(book):
    assert render_html(book) == render_html(book)
    assert render_markdown(book) == render_markdown(book)
