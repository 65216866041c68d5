"""Incident-review reports of a casebook: Markdown and one self-contained HTML file.

Both are pure functions of the book's entries (string in, string out), so the
same book gives the same bytes: no clock, no absolute paths, no randomness.

HTML: one file that fetches nothing. Styles are an inline ``<style>``, each
histogram an inline ``<svg>`` (HTML5 needs no SVG namespace attribute, so
the file holds no URL at all), and a Content-Security-Policy meta tag tells
the browser to load nothing even if a future edit slipped. Every piece of
user text (case ids, notes, reviewer names, expressions, context values) goes
through :func:`html.escape`.

Markdown: the same content as tables; user text is backslash-escaped
(CommonMark escapes ASCII punctuation), so a note cannot open raw HTML,
links or emphasis, and ``|`` cannot break a table.
"""

from __future__ import annotations

import html
import math
import os
import re
from collections import Counter
from typing import Iterable

from . import shown
from .case_history import HISTORY_HEAD, history_rows
from .pair_svg import pair_svg
from .wording import flag_word
from ..core.printable import printable
from ..store.casebook_file import STATUSES, Casebook

__all__ = ["render_markdown", "render_html", "render_entry_markdown", "histogram_svg", "caution_text", "FORMATS"]

FORMATS = ("md", "html")

_STATUS_WORDS = {
    "open": "open: not yet decided",
    "explained": "explained: a feature exposes it; the model must keep flagging it",
    "needs-signal": "needs signal: the data at hand cannot expose it",
    "label-disputed": "label disputed: the failure label itself is in doubt",
    "accepted-risk": "accepted risk: left undetected on purpose",
}


def caution_text() -> str:
    """The caution sentence of the CLI's help footer (one source for both)."""
    from ..cautions import CAUTION

    return CAUTION


# --------------------------------------------------------------------------
# numbers and shared pieces
# --------------------------------------------------------------------------


def _entries(book) -> list[dict]:
    if isinstance(book, Casebook):
        return [book.entries[k] for k in sorted(book.entries)]
    if isinstance(book, (str, os.PathLike)):
        b = Casebook.open(book, create=False)
        return [b.entries[k] for k in sorted(b.entries)]
    return sorted(book, key=lambda e: e.get("case", ""))


def _title(book, title: str | None) -> str:
    if title:
        return title
    if isinstance(book, Casebook):
        return f"Casebook report: {book.path.name}"
    if isinstance(book, (str, os.PathLike)):
        return f"Casebook report: {os.path.basename(os.fspath(book))}"
    return "Casebook report"


def _score_line(part: dict | None) -> tuple[str, str, str, str]:
    if not part:
        return ("n/a", "n/a", "n/a", "n/a")
    return (shown.log_density(part.get("log_density")), shown.threshold(part.get("threshold")),
            shown.margin(part.get("margin")),
            flag_word(part.get("flagged")))


def _metric_row(m: dict | None) -> list[str]:
    if not m:
        return ["n/a"] * 8
    return [shown.threshold(m.get("threshold")), str(m.get("tp", "n/a")), str(m.get("fp", "n/a")), str(m.get("fn", "n/a")),
            str(m.get("tn", "n/a")), shown.share(m.get("precision")), shown.share(m.get("recall")),
            shown.share(m.get("f1"))]


def _parts(entry: dict) -> list[str]:
    """The score rows to show: before, and after when the review re-fitted with a derived feature."""
    return ["before", "after"] if entry.get("after") else ["before"]


def _evidence_rows(entry: dict) -> list[tuple[str, list[str], bool]]:
    """(feature, [value, z, percentile, contribution, conditional z], is_new) rows."""
    rows = []
    for f in entry.get("evidence") or []:
        rows.append((str(f.get("name")), _evidence_cells(f), False))
    derived = {d.get("name") for d in entry.get("derived_features") or []}
    for f in entry.get("evidence_after") or []:
        if f.get("name") in derived:
            rows.append((str(f.get("name")), _evidence_cells(f), True))
    return rows


def _evidence_cells(f: dict) -> list[str]:
    """The reading (before any transform) and z, percentile, conditional z signed as the reading.

    Entries written before readings were recorded show the model-scale value.
    """
    flip = -1.0 if f.get("order_reversed") else 1.0
    cz = f.get("conditional_z")
    return [shown.reading(f.get("reading", f.get("value"))), shown.z(f.get("z_reading", f.get("z"))),
            shown.percentile(f.get("percentile_reading", f.get("percentile"))), shown.margin(f.get("contribution")),
            shown.z(flip * cz) if isinstance(cz, (int, float)) else "n/a"]


def _deciding(entry: dict) -> dict:
    return entry.get("deciding_feature") or {}


def _deciding_label(entry: dict) -> str:
    d = _deciding(entry)
    return str(d.get("name") or "n/a")


_EVIDENCE_HEAD = ["feature", "reading", "z", "percentile", "contribution", "conditional z"]
_METRIC_HEAD = ["model", "threshold", "tp", "fp", "fn", "tn", "precision", "recall", "F1"]
_SCORE_HEAD = ["model", "log-density", "threshold", "margin", "verdict"]


# --------------------------------------------------------------------------
# Markdown
# --------------------------------------------------------------------------

_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>#+|~&])")


def md_text(text) -> str:
    """User text for Markdown: one line, punctuation backslash-escaped (CommonMark)."""
    return _MD_SPECIAL.sub(r"\\\1", printable(" ".join(str(text).split())))


def md_code(text) -> str:
    """A code span that survives backticks and table pipes inside ``text``."""
    text = printable(" ".join(str(text).split()))
    runs = [len(r) for r in re.findall(r"`+", text)]
    fence = "`" * ((max(runs) + 1) if runs else 1)
    pad = " " if text.startswith("`") or text.endswith("`") or runs else ""
    return f"{fence}{pad}{text.replace('|', chr(92) + '|')}{pad}{fence}"


def _md_table(head: list[str], rows: Iterable[list[str]], numeric: Iterable[int] | None = None) -> list[str]:
    """A GFM table; columns in ``numeric`` (default: all but the first and a trailing verdict) align right."""
    right = set(range(1, len(head))) if numeric is None else set(numeric)
    out = ["| " + " | ".join(head) + " |",
           "| " + " | ".join(("---:" if k in right else "---") for k in range(len(head))) + " |"]
    for row in rows:
        out.append("| " + " | ".join(row) + " |")
    return out


def render_markdown(book, *, title: str | None = None) -> str:
    """The report as Markdown (GitHub-flavoured tables, no pictures)."""
    entries = _entries(book)
    lines = [f"# {md_text(_title(book, title))}", ""]
    lines += _md_summary(entries)
    for entry in entries:
        lines += [""] + _md_entry(entry)
    lines += ["", "---", "", md_text(caution_text()), ""]
    return "\n".join(lines)


def _md_summary(entries: list[dict]) -> list[str]:
    counts = Counter(e.get("status") for e in entries)
    out = [f"{len(entries)} reviewed case(s). " + ", ".join(f"{s}: {counts[s]}" for s in STATUSES if counts[s]), ""]
    if not entries:
        return out + ["The casebook is empty."]
    rows = []
    for e in entries:
        b, a = e.get("before") or {}, e.get("after") or {}
        after = f"{shown.log_density(a.get('log_density'))} vs {shown.threshold(a.get('threshold'))}" if a else "n/a"
        rows.append([md_code(e.get("case", "")), md_text(e.get("status", "")), md_code(_deciding_label(e)),
                     f"{shown.log_density(b.get('log_density'))} vs {shown.threshold(b.get('threshold'))}", after,
                     md_text(e.get("reviewer", "")), md_text(e.get("updated", ""))])
    return out + _md_table(["case", "status", "deciding feature", "before: log-density vs threshold",
                            "after", "reviewer", "updated"], rows, numeric=(3, 4))


def render_entry_markdown(entry: dict) -> str:
    """One entry as Markdown (what ``casebook show`` renders in the terminal)."""
    return "\n".join(_md_entry(entry)) + "\n"


def _md_entry(e: dict) -> list[str]:
    out = [f"## {md_code(e.get('case', ''))}: {md_text(e.get('status', ''))}", ""]
    out.append(f"*{md_text(_STATUS_WORDS.get(e.get('status'), e.get('status', '')))}*")
    out.append("")
    model = e.get("model") or {}
    facts = [
        f"- **Label:** {md_text(e.get('label') or 'none')}",
        f"- **Reviewer:** {md_text(e.get('reviewer', ''))}; created {md_text(e.get('created', ''))}, "
        f"updated {md_text(e.get('updated', ''))}",
        f"- **Model:** {md_code(model.get('path') or '(in memory)')}, fingerprint {md_code(model.get('fingerprint', ''))}"
        f" ({md_text(model.get('kind', ''))})",
    ]
    for d in e.get("derived_features") or []:
        facts.append(f"- **Derived feature:** {md_code(d.get('name', ''))} = {md_code(d.get('expression', ''))}")
    if e.get("model_after"):
        facts.append(f"- **Re-fitted model:** fingerprint {md_code(e['model_after'].get('fingerprint', ''))}")
    context = (e.get("snapshot") or {}).get("context") or {}
    if context:
        facts.append("- **Context:** " + "; ".join(f"{md_text(k)}: {md_text(v if v is not None else '')}"
                                                    for k, v in sorted(context.items())))
    out += facts + ["", f"**Note:** {md_text(e.get('note') or '(none)')}", ""]

    out += ["### Score", ""]
    out += _md_table(_SCORE_HEAD, [[k, *_score_line(e.get(k))] for k in _parts(e)], numeric=(1, 2, 3))
    metrics = e.get("metrics") or {}
    out += ["", "### Validation metrics", ""]
    out += _md_table(_METRIC_HEAD, [[k, *_metric_row(metrics.get(k))] for k in _parts(e)])
    out += ["", "### Evidence", ""]
    rows = [[md_code(name) + (" (new, after re-fit)" if new else ""), *cells] for name, cells, new in _evidence_rows(e)]
    out += _md_table(_EVIDENCE_HEAD, rows)
    d = _deciding(e)
    if d:
        h = d.get("histogram") or {}
        out += ["", f"Deciding feature {md_code(d.get('name', ''))} ({md_text(d.get('why', ''))}): case value "
                f"{shown.reading(d.get('value'))}, z {shown.z(d.get('z'))}, percentile "
                f"{shown.percentile(d.get('percentile'))} "
                + (f"among {h.get('rows', 0)} {md_text(h.get('population', 'rows'))}." if h else
                   "(normal population not available for an imported model).")]
    hist = history_rows(e, shown.log_density)
    if hist:
        out += ["", "### Earlier reviews (oldest first)", ""]
        for when, who, status, feature, before, after, note in hist:  # a list reads at 80 columns, a table does not
            out.append(f"- {md_text(when)}, {md_text(who)}: **{md_text(status)}**; derived feature "
                       f"{md_code(feature) if feature != 'none' else 'none'}; before {md_text(before)}, "
                       f"after {md_text(after)}" + (f"; note: {md_text(note)}" if note else ""))
    warnings = e.get("warnings") or []
    if warnings:
        out += [""] + [f"> {md_text(w)}" for w in warnings]
    return out


# --------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------

_CSS = """
body { font: 15px/1.45 system-ui, sans-serif; color: #1d232a; background: #fbfbf8; margin: 0; }
main { max-width: 62rem; margin: 0 auto; padding: 1.5rem; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; }
h2 { font-size: 1.15rem; margin: 0; }
h3 { font-size: 0.95rem; margin: 1rem 0 0.3rem; color: #45505b; }
section.entry { border: 1px solid #d5d8d0; border-radius: 6px; background: #fff; padding: 1rem 1.2rem;
  margin: 1.2rem 0; }
table { border-collapse: collapse; margin: 0.3rem 0; font-variant-numeric: tabular-nums; }
th, td { padding: 0.2rem 0.7rem; border-bottom: 1px solid #e6e8e2; text-align: right; }
th:first-child, td:first-child { text-align: left; }
th { font-weight: 600; color: #45505b; }
td.text, table.history td, table.history th { text-align: left; }
code { font: 0.9em ui-monospace, monospace; background: #f0f1ec; padding: 0 0.2em; border-radius: 3px; }
.status { display: inline-block; padding: 0.05rem 0.5rem; border-radius: 1rem; font-size: 0.85rem;
  border: 1px solid currentColor; margin-left: 0.5rem; }
.s-explained { color: #1f6f43; } .s-open { color: #5a6570; } .s-needs-signal { color: #8a5a00; }
.s-label-disputed { color: #6b3fa0; } .s-accepted-risk { color: #a23b2a; }
.facts { color: #45505b; margin: 0.4rem 0; } .facts div { margin: 0.1rem 0; }
.note { background: #f6f5ee; border-left: 3px solid #c9c3a6; padding: 0.4rem 0.7rem; margin: 0.6rem 0;
  white-space: pre-wrap; }
.new td { background: #eef6f0; }
.warn { color: #8a5a00; font-size: 0.9rem; }
figure { margin: 0.6rem 0; } figcaption { font-size: 0.85rem; color: #45505b; }
svg .bar { fill: #8fa3b5; } svg .case { stroke: #c0392b; stroke-width: 2; }
svg .dens { fill: #4f6f8f; } svg.pair .case { fill: none; } svg .band { fill: #b5651d; }
svg .other { stroke: #8a1c1c; stroke-width: 1.2; }
svg .caselabel { fill: #c0392b; font: 11px system-ui, sans-serif; }
svg .axis { stroke: #45505b; stroke-width: 1; } svg .tick { fill: #45505b; font: 10px system-ui, sans-serif; }
footer { color: #45505b; font-size: 0.85rem; border-top: 1px solid #d5d8d0; margin-top: 2rem; padding-top: 0.8rem; }
"""


def _e(text) -> str:
    return html.escape("" if text is None else printable(text), quote=True)


def _html_table(head: list[str], rows: Iterable[list[str]], row_classes: Iterable[str] | None = None) -> str:
    parts = ["<table><thead><tr>", "".join(f"<th>{_e(h)}</th>" for h in head), "</tr></thead><tbody>"]
    classes = list(row_classes) if row_classes is not None else None
    for k, row in enumerate(rows):
        cls = f' class="{classes[k]}"' if classes and classes[k] else ""
        parts.append(f"<tr{cls}>" + "".join(f"<td>{cell}</td>" for cell in row) + "</tr>")
    parts.append("</tbody></table>")
    return "".join(parts)


def render_html(book, *, title: str | None = None) -> str:
    """The report as one self-contained HTML file (inline style and SVG; fetches nothing)."""
    entries = _entries(book)
    heading = _title(book, title)
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        # Belt and braces: even a stray reference could not make the browser fetch anything.
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'\">",
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(heading)}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body><main>",
        f"<h1>{_e(heading)}</h1>",
    ]
    out.append(_html_summary(entries))
    for entry in entries:
        out.append(_html_entry(entry))
    out.append(f"<footer><p>{_e(caution_text())}</p></footer>")
    out.append("</main></body></html>")
    return "\n".join(out) + "\n"


def _html_summary(entries: list[dict]) -> str:
    counts = Counter(e.get("status") for e in entries)
    line = f"{len(entries)} reviewed case(s). " + ", ".join(f"{s}: {counts[s]}" for s in STATUSES if counts[s])
    if not entries:
        return f"<p>{_e(line)}</p><p>The casebook is empty.</p>"
    rows = []
    for e in entries:
        b, a = e.get("before") or {}, e.get("after") or {}
        after = f"{shown.log_density(a.get('log_density'))} vs {shown.threshold(a.get('threshold'))}" if a else "n/a"
        rows.append([f"<code>{_e(e.get('case'))}</code>", f'<span class="s-{_e(e.get("status"))}">{_e(e.get("status"))}</span>',
                     f"<code>{_e(_deciding_label(e))}</code>",
                     _e(f"{shown.log_density(b.get('log_density'))} vs {shown.threshold(b.get('threshold'))}"), _e(after),
                     _e(e.get("reviewer")), _e(e.get("updated"))])
    table = _html_table(["case", "status", "deciding feature", "before: log-density vs threshold", "after",
                         "reviewer", "updated"], rows)
    return f"<p>{_e(line)}</p>{table}"


def _html_entry(e: dict) -> str:
    status = str(e.get("status", ""))
    model = e.get("model") or {}
    out = ['<section class="entry">',
           f'<h2><code>{_e(e.get("case"))}</code><span class="status s-{_e(status)}">{_e(status)}</span></h2>',
           f"<p><em>{_e(_STATUS_WORDS.get(status, status))}</em></p>",
           '<div class="facts">',
           f"<div>Label: {_e(e.get('label') or 'none')}</div>",
           f"<div>Reviewer: {_e(e.get('reviewer'))}; created {_e(e.get('created'))}, updated {_e(e.get('updated'))}</div>",
           f"<div>Model: <code>{_e(model.get('path') or '(in memory)')}</code>, fingerprint "
           f"<code>{_e(model.get('fingerprint'))}</code> ({_e(model.get('kind'))})</div>"]
    for d in e.get("derived_features") or []:
        out.append(f"<div>Derived feature: <code>{_e(d.get('name'))}</code> = <code>{_e(d.get('expression'))}</code></div>")
    if e.get("model_after"):
        out.append(f"<div>Re-fitted model: fingerprint <code>{_e(e['model_after'].get('fingerprint'))}</code></div>")
    context = (e.get("snapshot") or {}).get("context") or {}
    if context:
        out.append("<div>Context: " + "; ".join(f"{_e(k)}: {_e(v)}" for k, v in sorted(context.items())) + "</div>")
    out.append("</div>")
    out.append(f'<div class="note">{_e(e.get("note") or "(no note)")}</div>')

    out.append("<h3>Score</h3>")
    out.append(_html_table(_SCORE_HEAD, [[_e(c) for c in (k, *_score_line(e.get(k)))] for k in _parts(e)]))
    metrics = e.get("metrics") or {}
    out.append("<h3>Validation metrics</h3>")
    out.append(_html_table(_METRIC_HEAD, [[_e(c) for c in (k, *_metric_row(metrics.get(k)))] for k in _parts(e)]))
    out.append("<h3>Evidence</h3>")
    rows, classes = [], []
    for name, cells, new in _evidence_rows(e):
        rows.append([f"<code>{_e(name)}</code>" + (" (new, after re-fit)" if new else ""), *(_e(c) for c in cells)])
        classes.append("new" if new else "")
    out.append(_html_table(_EVIDENCE_HEAD, rows, classes))
    d = _deciding(e)
    h = d.get("histogram") or {}
    if d and h.get("counts"):
        caption = (f"Deciding feature {d.get('name')} ({d.get('why', '')}): {h.get('rows', 0)} "
                   f"{h.get('population', 'rows')}; the red line is the case ({shown.reading(d.get('value'))}, "
                   f"z {shown.z(d.get('z'))}, percentile {shown.percentile(d.get('percentile'))}).")
        out.append(f"<figure>{histogram_svg(h, d.get('value'), label=str(d.get('name', '')))}"
                   f"<figcaption>{_e(caption)}</figcaption></figure>")
    p = d.get("pair") if d else None
    if p:
        caption = (f"{p.get('up')} against {p.get('across')}: {p.get('rows', 0)} normal rows of "
                   f"{p.get('population', '')} (darker: denser), dots: the edge of {d.get('name')}'s normal band "
                   "(its 1% to 99% over normal rows), crosses: other labelled anomalies, ring: the case.")
        out.append(f"<figure>{pair_svg(p, label=str(d.get('name', '')))}<figcaption>{_e(caption)}</figcaption>"
                   "</figure>")
    hist = history_rows(e, shown.log_density)
    if hist:
        out.append("<h3>Earlier reviews (oldest first)</h3>")
        table = _html_table(HISTORY_HEAD, [[_e(c) for c in row] for row in hist])
        out.append(table.replace("<table>", '<table class="history">', 1))
    for w in e.get("warnings") or []:
        out.append(f'<p class="warn">{_e(w)}</p>')
    out.append("</section>")
    return "\n".join(out)


def histogram_svg(hist: dict, case_value, *, label: str = "", width: int = 420, height: int = 150) -> str:
    """Inline SVG bars of ``hist`` (edges + counts) with a line at ``case_value``.

    The x range is widened to include the case when it lies outside the
    normal population, so the line is always drawn.
    """
    edges = [float(x) for x in hist.get("edges") or []]
    counts = [int(c) for c in hist.get("counts") or []]
    left, right, top, bottom = 10.0, 10.0, 18.0, 28.0
    plot_w, plot_h = width - left - right, height - top - bottom
    lo, hi = edges[0], edges[-1]
    value = None
    if case_value is not None and math.isfinite(float(case_value)):
        value = float(case_value)
        lo, hi = min(lo, value), max(hi, value)
    span = hi - lo
    if span <= 0:
        lo, hi, span = lo - 0.5, hi + 0.5, 1.0
    lo, hi = lo - 0.02 * span, hi + 0.02 * span
    scale = plot_w / (hi - lo)

    def x_of(v: float) -> float:
        return left + (v - lo) * scale

    tallest = max(counts) if counts and max(counts) > 0 else 1
    parts = [f'<svg class="histogram" width="{width}" height="{height}" viewBox="0 0 {width} {height}" role="img" '
             f'aria-label="{_e("histogram of " + label)}">', f"<title>{_e('histogram of ' + label)}</title>"]
    base = top + plot_h
    for k, c in enumerate(counts):
        x0, x1 = x_of(edges[k]), x_of(edges[k + 1])
        h = plot_h * c / tallest
        parts.append(f'<rect class="bar" x="{x0:.2f}" y="{base - h:.2f}" width="{max(x1 - x0 - 0.5, 0.5):.2f}" '
                     f'height="{h:.2f}"><title>{_e(f"{shown.reading(edges[k])} to {shown.reading(edges[k + 1])}: {c}")}</title></rect>')
    parts.append(f'<line class="axis" x1="{left:.2f}" y1="{base:.2f}" x2="{width - right:.2f}" y2="{base:.2f}"/>')
    parts.append(f'<text class="tick" x="{x_of(edges[0]):.2f}" y="{base + 14:.2f}" text-anchor="start">'
                 f"{_e(shown.reading(edges[0]))}</text>")
    parts.append(f'<text class="tick" x="{x_of(edges[-1]):.2f}" y="{base + 14:.2f}" text-anchor="end">'
                 f"{_e(shown.reading(edges[-1]))}</text>")
    if value is not None:
        xv = x_of(value)
        anchor = "end" if xv > left + plot_w / 2 else "start"
        dx = -4 if anchor == "end" else 4
        parts.append(f'<line class="case" x1="{xv:.2f}" y1="{top - 6:.2f}" x2="{xv:.2f}" y2="{base:.2f}"/>')
        parts.append(f'<text class="caselabel" x="{xv + dx:.2f}" y="{top - 6:.2f}" text-anchor="{anchor}">'
                     f"case {_e(shown.reading(value))}</text>")
    parts.append("</svg>")
    return "".join(parts)
