"""The pages of the report: what a page holds (:class:`ReportPage`), how it is laid out on A4 landscape
(tables split over pages, captions wrapped, the heuristics reminder and the folio on every page) and
written as a PDF (matplotlib's PdfPages), an HTML page with embedded PNG figures, or PNG previews.
"""

from __future__ import annotations

import base64
import html
import io
import textwrap
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from phasewake.core import __version__
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
from phasewake.core.figures.export import (
    CM_PER_INCH,
    Preset,
    check_writable,
    draw_into,
    figure_png_bytes,
    file_metadata,
    preset_rc,
    provenance_json,
)
from phasewake.core.figures.spec import LEVEL_STYLE, FigureSpec
from phasewake.core.store.atomic import write_bytes, write_text

if TYPE_CHECKING:
    from matplotlib.figure import Figure

# A4 landscape: a printed handout and a projected page both read well at this size.
PAGE_CM = (29.7, 21.0)
BODY_PRESET = Preset("report", 27.0, 12.5, 10.0, 9.0, 11.0, 1.0, fixed_height=True,
                     description="A4 landscape report page body")
_CAPTION_CHARS = 135  # characters per caption line at 9.5 pt across the page width (0.6 em each)
_TEXT_CHARS = 140  # the same for 9 pt text above a table

SECTION_ORDER = ("summary", "energy", "temperature", "timestep", "coordinate", "phase", "correlation", "sampling",
                 "crossings")
SECTION_TITLES = {
    "summary": "Run and verdicts",
    "energy": "Energy conservation",
    "temperature": "Kinetic temperature",
    "timestep": "Time step and fastest motion",
    "coordinate": "Coordinate and phase portrait",
    "phase": "Phase-space density and principal components",
    "correlation": "Time correlations",
    "sampling": "Sampling",
    "crossings": "Barrier crossings",
}


@dataclass(frozen=True)
class ReportPage:
    """One page of the report: a section's figure or table, or the reason it is missing."""

    section: str
    title: str
    figure: FigureSpec | None = None
    table: tuple[tuple[str, ...], ...] = ()  # rows of text cells (first row: header)
    table_levels: tuple[str, ...] = ()  # verdict level of each data row (for the level marker)
    text: str = ""  # free text above the figure or table (summary, or why a section is missing)
    caption: str = ""
    widths: tuple[int, ...] = ()  # characters per line of each table column (default: by the column count)
    right_aligned: tuple[int, ...] = ()  # table columns (0-based) of numbers, set flush right


def paginate(pages: Sequence[ReportPage]) -> list[ReportPage]:
    """Split long tables over several pages (the summary's table repeats its header)."""
    out: list[ReportPage] = []
    for p in pages:
        if not p.table:
            out.append(p)
            continue
        header, rows = p.table[0], list(p.table[1:])
        budget = 36 - (len(wrap_text(p.text, _TEXT_CHARS)) if p.text else 0)
        chunk: list[tuple[str, ...]] = []
        lv: list[str] = []
        used = 0
        first = True
        for i, r in enumerate(rows):
            h = _row_height(r, p)
            if chunk and used + h > budget:
                out.append(replace(p, title=p.title if first else p.title + " (continued)",
                                   table=(header, *chunk), table_levels=tuple(lv), text=p.text if first else ""))
                first, chunk, lv, used, budget = False, [], [], 0, 42
            chunk.append(r)
            if p.table_levels:
                lv.append(p.table_levels[i])
            used += h
        out.append(replace(p, title=p.title if first else p.title + " (continued)", table=(header, *chunk),
                           table_levels=tuple(lv), text=p.text if first else ""))
    return out


def _widths(ncols: int, page: ReportPage | None = None) -> list[int]:
    """Characters per column line: the page body is 785 pt wide and a DejaVu Sans character is about
    0.6 em, so about 160 characters fit at 8 pt and 130 at 10 pt; the rest is the gap between columns.
    A page's own ``widths`` win."""
    if page is not None and len(page.widths) == ncols:
        return list(page.widths)
    if ncols == 5:
        return [13, 24, 14, 28, 85]
    if ncols == 2:
        return [28, 96]
    return [150 // max(1, ncols)] * ncols


def _row_font(ncols: int) -> float:
    return 8.0 if ncols > 2 else 10.0


def wrap_text(text: str, width: int) -> list[str]:
    out: list[str] = []
    for para in str(text).split("\n"):
        out.extend(textwrap.wrap(para, width=width) or [""])
    return out


def _row_height(row: Sequence[str], page: ReportPage) -> int:
    w = _widths(len(row), page)
    return max(len(wrap_text(c, w[i])) for i, c in enumerate(row)) + 0


def page_figure(page: ReportPage, *, run_name: str, number: int, n_total: int) -> Figure:
    from matplotlib.figure import Figure

    w, h = PAGE_CM[0] / CM_PER_INCH, PAGE_CM[1] / CM_PER_INCH
    foot = "\n".join(wrap_text(HEURISTIC_NOTE, 200))
    folio = f"phasewake {__version__} · page {number} of {n_total}"
    if page.figure is not None and not page.table:
        cap_lines = wrap_text(page.caption, _CAPTION_CHARS)
        head_in = 0.75
        cap_in = len(cap_lines) * 9.5 * 1.3 / 72 + 0.55
        fig = Figure(figsize=(w, h), layout="constrained")
        parts: Any = fig.subfigures(3, 1, height_ratios=[head_in, h - head_in - cap_in, cap_in])
        head, body, tail = parts
        head.text(0.035, 0.7, page.title, fontsize=17, weight="bold", va="center")
        head.text(0.965, 0.7, run_name, fontsize=10, va="center", ha="right", color="#444444")
        draw_into(body, page.figure, preset=BODY_PRESET, title=len(page.figure.plots) == 1)
        tail.text(0.035, 1.0, "\n".join(cap_lines), fontsize=9.5, va="top", linespacing=1.3)
        tail.text(0.035, 0.06, foot, fontsize=7.5, va="bottom", color="#444444")
        tail.text(0.965, 0.06, folio, fontsize=7.5, va="bottom", ha="right", color="#444444")
        return fig
    fig = Figure(figsize=(w, h))
    fig.text(0.035, 0.955, page.title, fontsize=17, weight="bold", va="top")
    fig.text(0.965, 0.955, run_name, fontsize=10, va="top", ha="right", color="#444444")
    fig.text(0.035, 0.025, foot, fontsize=7.5, va="bottom", color="#444444")
    fig.text(0.965, 0.025, folio, fontsize=7.5, va="bottom", ha="right", color="#444444")
    top = 0.9
    if not page.table:
        fig.text(0.035, top, "\n".join(wrap_text(page.text, 105)), fontsize=12, va="top")
        return fig
    y = top
    if page.text:
        lines = wrap_text(page.text, _TEXT_CHARS)
        fig.text(0.035, y, "\n".join(lines), fontsize=9, va="top", linespacing=1.3)
        y -= (len(lines) + 1) * 9 * 1.3 / 72 / h
    _draw_table(fig, page, y, h)
    return fig


def _draw_table(fig: Figure, page: ReportPage, y: float, h_in: float) -> None:
    widths = _widths(len(page.table[0]), page)
    total = sum(widths)
    x0, x1 = 0.035, 0.965
    xs = [x0]
    for w in widths[:-1]:
        xs.append(xs[-1] + (x1 - x0) * w / total)
    font = _row_font(len(page.table[0]))
    line_h = font * 1.3 / 72 / h_in
    for r, row in enumerate(page.table):
        cells = [wrap_text(c, widths[i]) for i, c in enumerate(row)]
        n = max(len(c) for c in cells)
        if r == 0:
            fig.patches.append(_rect(fig, x0, y - line_h * n - 0.004, x1 - x0, line_h * n + 0.008, "#e8e8e8"))
        level = page.table_levels[r - 1] if r > 0 and page.table_levels else None
        for i, c in enumerate(cells):
            text = "\n".join(c)
            colour = "black"
            weight = "bold" if r == 0 else "normal"
            dx = 0.0
            if i == 0 and level is not None:
                colour_l, marker = LEVEL_STYLE.get(level, LEVEL_STYLE["info"])
                fig.lines.append(_marker(fig, xs[0] + 0.006, y - line_h * 0.5, marker, colour_l))
                dx = 0.016
                colour = "black"
                weight = "bold" if level in ("caution", "problem") else "normal"
            right = i in page.right_aligned
            x = ((xs[i + 1] if i + 1 < len(xs) else x1) - 0.012) if right else xs[i] + dx
            fig.text(x, y, text, fontsize=font, va="top", ha="right" if right else "left", color=colour,
                     weight=weight, linespacing=1.3, multialignment="right" if right else "left")
        y -= line_h * n + 0.012
        fig.lines.append(_hline(fig, x0, x1, y + 0.006))


def _rect(fig: Figure, x: float, y: float, w: float, h: float, colour: str) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), w, h, transform=fig.transFigure, facecolor=colour, edgecolor="none", figure=fig)


def _hline(fig: Figure, x0: float, x1: float, y: float) -> Any:
    from matplotlib.lines import Line2D

    return Line2D([x0, x1], [y, y], transform=fig.transFigure, color="#cccccc", linewidth=0.6, figure=fig)


def _marker(fig: Figure, x: float, y: float, marker: str, colour: str) -> Any:
    from matplotlib.lines import Line2D

    m = {"d": "D"}.get(marker, marker)
    return Line2D([x], [y], transform=fig.transFigure, marker=m, color=colour, markersize=6,
                  markeredgewidth=1.5, linestyle="none", figure=fig)


def write_pdf(target: Path, pages: Sequence[ReportPage], *, run_name: str, provenance: Mapping[str, Any]) -> int:
    from matplotlib.backends.backend_pdf import PdfPages

    laid = paginate(pages)
    meta = file_metadata("pdf", f"phasewake report: {run_name}", provenance)
    buf = io.BytesIO()  # the whole PDF in memory first: a full disk meets one plain write, not the PDF writer
    with preset_rc(BODY_PRESET), PdfPages(buf, metadata=meta) as pdf:
        for i, p in enumerate(laid):
            fig = page_figure(p, run_name=run_name, number=i + 1, n_total=len(laid))
            pdf.savefig(fig)
    write_bytes(target, buf.getbuffer())
    return len(laid)


def write_html(target: Path, pages: Sequence[ReportPage], *, run_name: str, provenance: Mapping[str, Any]) -> Path:
    esc: Callable[[str], str] = html.escape
    parts = [
        "<!DOCTYPE html>", "<html lang='en'><head><meta charset='utf-8'>",
        f"<title>phasewake report: {esc(run_name)}</title>",
        f"<meta name='generator' content='phasewake {esc(__version__)}'>",
        f"<script type='application/json' id='provenance'>{esc(provenance_json(provenance))}</script>",
        "<style>body{font-family:sans-serif;max-width:70em;margin:2em auto;color:#111;line-height:1.4}"
        "img{max-width:100%}table{border-collapse:collapse;font-size:0.9em}td,th{border:1px solid #ccc;"
        "padding:0.3em 0.5em;vertical-align:top}th{background:#eee}.caption{color:#333}"
        ".note{color:#555;font-size:0.9em}.ok{color:#009E73}.caution{color:#b37a00}.problem{color:#D55E00}"
        "</style></head><body>",
        f"<h1>phasewake report: {esc(run_name)}</h1>",
        f"<p class='note'>{esc(HEURISTIC_NOTE)}</p>",
    ]
    symbol = {"ok": "●", "caution": "▲", "problem": "✖", "info": "■"}
    for p in pages:
        parts.append(f"<section><h2>{esc(p.title)}</h2>")
        if p.text:
            parts.append("<p>" + "<br>".join(esc(ln) for ln in p.text.split("\n")) + "</p>")
        if p.table:
            right = ["" if i not in p.right_aligned else " style='text-align:right'" for i in range(len(p.table[0]))]
            parts.append("<table><tr>" + "".join(f"<th{right[i]}>{esc(c)}</th>" for i, c in enumerate(p.table[0]))
                         + "</tr>")
            for i, row in enumerate(p.table[1:]):
                lv = p.table_levels[i] if p.table_levels else ""
                cells = [esc(c) for c in row]
                if lv:
                    cells[0] = f"<span class='{lv}'>{symbol.get(lv, '')} {cells[0]}</span>"
                parts.append("<tr>" + "".join(f"<td{right[i]}>{c}</td>" for i, c in enumerate(cells)) + "</tr>")
            parts.append("</table>")
        if p.figure is not None:
            png = base64.b64encode(figure_png_bytes(p.figure, preset="double", dpi=110)).decode("ascii")
            parts.append(f"<figure><img alt='{esc(p.figure.title)}' src='data:image/png;base64,{png}'>"
                         f"<figcaption class='caption'>{esc(p.caption)}</figcaption></figure>")
        parts.append("</section>")
    parts.append(f"<p class='note'>phasewake {esc(__version__)}. {esc(HEURISTIC_NOTE)}</p></body></html>")
    check_writable(target)
    write_text(target, "\n".join(parts))
    return target


def write_previews(folder: Path, pages: Sequence[ReportPage], *, run_name: str, dpi: float) -> None:
    """Each laid-out page as ``page-NN.png`` in ``folder`` (to look at pages without a PDF viewer)."""
    laid = paginate(pages)
    for i, p in enumerate(laid):
        fig = page_figure(p, run_name=run_name, number=i + 1, n_total=len(laid))
        buf = io.BytesIO()
        with preset_rc(BODY_PRESET):
            fig.savefig(buf, format="png", dpi=dpi)
        write_bytes(folder / f"page-{i + 1:02d}.png", buf.getbuffer())
