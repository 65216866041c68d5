"""The pair picture of a casebook entry as inline SVG (the HTML report's counterpart of the pair view).

A pure function of the stored grid (``deciding_feature.pair``, see
:mod:`afterlook.analysis.review`): normal rows as shaded cells (denser
darker), the edge of the candidate's normal band as dots, other labelled
anomalies as crosses, the case as a ring; every label escaped.
"""

from __future__ import annotations

import html
import math

import numpy as np

from . import shown
from ..core.histograms import band_edge, density_shares

__all__ = ["pair_svg"]


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _grid(rows) -> np.ndarray:
    """The stored text grid (one string of counts per row, or lists) as a float array; empty when unreadable."""
    try:
        out = np.asarray([[float(v) for v in (r.split() if isinstance(r, str) else r)] for r in rows or []])
    except (TypeError, ValueError):
        return np.zeros((0, 0))
    return out if out.ndim == 2 else np.zeros((0, 0))


def _edges(values, n: int) -> list[float] | None:
    try:
        edges = [float(v) for v in values]
    except (TypeError, ValueError):
        return None
    ok = len(edges) == n + 1 and all(math.isfinite(v) for v in edges) and edges[-1] > edges[0]
    return edges if ok else None


def pair_svg(pair: dict, *, label: str = "", width: int = 420, height: int = 220) -> str:
    """The picture, or "" when the stored grid is missing or inconsistent (a damaged entry draws nothing)."""
    if not isinstance(pair, dict):
        return ""
    normal = _grid(pair.get("normal"))
    if normal.size == 0:
        return ""
    others = _grid(pair.get("others"))
    if others.shape != normal.shape:
        others = np.zeros_like(normal)
    ny, nx = normal.shape
    xe, ye = _edges(pair.get("x_edges") or [], nx), _edges(pair.get("y_edges") or [], ny)
    if xe is None or ye is None:
        return ""
    left, right, top, bottom = 48.0, 10.0, 10.0, 30.0
    cw, ch = (width - left - right) / nx, (height - top - bottom) / ny
    title = f"{pair.get('up')} against {pair.get('across')}" + (f" ({label})" if label else "")
    parts = [f'<svg class="pair" width="{width}" height="{height}" viewBox="0 0 {width} {height}" role="img" '
             f'aria-label="{_e(title)}">', f"<title>{_e(title)}</title>"]
    shares = density_shares(normal)

    def cell(col: int, row: int) -> tuple[float, float]:  # top-left corner; row 0 is the lowest y
        return left + col * cw, top + (ny - 1 - row) * ch

    for row in range(ny):
        for col in range(nx):
            n = normal[row, col]
            if n > 0:
                x, y = cell(col, row)
                shade = 0.15 + 0.85 * shares[row, col]
                parts.append(f'<rect class="dens" x="{x:.1f}" y="{y:.1f}" width="{cw:.1f}" height="{ch:.1f}" '
                             f'fill-opacity="{shade:.2f}"><title>{int(n)} normal rows</title></rect>')
    in_band = pair.get("in_band")
    if in_band is not None and len(in_band) == ny and all(isinstance(r, str) and len(r) == nx for r in in_band):
        edge = band_edge(np.asarray([[ch == "1" for ch in r] for r in in_band], dtype=bool))
        for row, col in zip(*np.nonzero(edge & (normal == 0))):
            x, y = cell(int(col), int(row))
            parts.append(f'<circle class="band" cx="{x + cw / 2:.1f}" cy="{y + ch / 2:.1f}" r="1.2"/>')
    for row, col in zip(*np.nonzero(others > 0)):
        x, y = cell(int(col), int(row))
        parts.append(f'<path class="other" d="M{x + 1:.1f},{y + 1:.1f}L{x + cw - 1:.1f},{y + ch - 1:.1f}'
                     f'M{x + cw - 1:.1f},{y + 1:.1f}L{x + 1:.1f},{y + ch - 1:.1f}"/>')
    case = pair.get("case") or [None, None]
    if len(case) == 2 and all(isinstance(v, (int, float)) and math.isfinite(v) for v in case):
        px = left + (case[0] - xe[0]) / (xe[-1] - xe[0]) * nx * cw
        py = top + (1 - (case[1] - ye[0]) / (ye[-1] - ye[0])) * ny * ch
        parts.append(f'<circle class="case" cx="{px:.1f}" cy="{py:.1f}" r="4"><title>case '
                     f'({_e(shown.reading(case[0]))}, {_e(shown.reading(case[1]))})</title></circle>')
    base = top + ny * ch
    parts.append(f'<line class="axis" x1="{left:.1f}" y1="{base:.1f}" x2="{width - right:.1f}" y2="{base:.1f}"/>')
    parts.append(f'<line class="axis" x1="{left:.1f}" y1="{top:.1f}" x2="{left:.1f}" y2="{base:.1f}"/>')
    for text, x, y, anchor in ((shown.reading(xe[0]), left, base + 13, "start"),
                               (shown.reading(xe[-1]), width - right, base + 13, "end"),
                               (pair.get("across", ""), left + nx * cw / 2, base + 26, "middle"),
                               (shown.reading(ye[-1]), left - 4, top + 9, "end"),
                               (shown.reading(ye[0]), left - 4, base, "end")):
        parts.append(f'<text class="tick" x="{x:.1f}" y="{y:.1f}" text-anchor="{anchor}">{_e(text)}</text>')
    parts.append(f'<text class="tick" x="12" y="{top + ny * ch / 2:.1f}" text-anchor="middle" '
                 f'transform="rotate(-90 12 {top + ny * ch / 2:.1f})">{_e(pair.get("up", ""))}</text>')
    parts.append("</svg>")
    return "".join(parts)
