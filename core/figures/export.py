"""Draw a :class:`~phasewake.core.figures.spec.FigureSpec` with matplotlib and write it to disk.

One figure description, two renderers: the window draws a FigureSpec live with pyqtgraph, this module
draws the same description for files (PNG at a chosen DPI, SVG and PDF as vectors) so an export
matches the screen. pyqtgraph's own SVG exporter is broken with current Qt (FORMATS.md), which is why
exports go through matplotlib.

Presets size a figure for where it will be shown:

* ``slide``: 16:9, 25.4 cm x 14.29 cm (10 in x 5.625 in), large fonts for a projector;
* ``single``: one journal column, 8.5 cm wide;
* ``double``: a full page width, 17 cm wide.

Text stays text in vector files (``svg.fonttype = "none"``, ``pdf.fonttype = 42``), so axis labels
with their units can be searched. Every file carries its provenance (input files with their SHA-256,
phasewake version, settings) in its metadata: PNG text chunks, the SVG ``<metadata>`` block (Dublin
Core description) and the PDF information dictionary (Subject). Files are drawn in memory, then written
atomically by ``core/atomic.py`` (a temporary file beside the target, then ``os.replace``).

matplotlib is imported inside the functions that need it, and pyplot is never used: figures are
plain ``matplotlib.figure.Figure`` objects, safe to build in a worker thread.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import math
import os
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from phasewake.core import __version__
from phasewake.core.errors import PhasewakeError
from phasewake.core.figures.spec import Band, FigureSpec, Image, Line, Mark, PlotSpec, Style
from phasewake.core.store.atomic import atomic_open, write_bytes
from phasewake.core.store.jsonable import to_jsonable

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure, SubFigure

CM_PER_INCH = 2.54

Format = Literal["png", "svg", "pdf"]
FORMATS: tuple[str, ...] = ("png", "svg", "pdf")


class ExportError(PhasewakeError):
    """A figure, table or report cannot be written (bad format, unwritable folder, ...)."""


@dataclass(frozen=True)
class Preset:
    """Size and type sizes of an exported figure.

    ``height_cm`` is the height of one row of plots (``fixed_height`` False) or of the whole figure
    (``fixed_height`` True, e.g. a slide keeps 16:9 whatever the number of plots).
    """

    name: str
    width_cm: float
    height_cm: float
    font_pt: float  # axis labels and legend
    tick_pt: float
    title_pt: float
    line_scale: float  # multiplies Style.width
    fixed_height: bool = False
    max_height_cm: float = 22.0
    description: str = ""


# Type sizes: journals ask for about 7-9 pt at final size in a column figure (common practice); a
# projected slide needs about 14 pt and up to be read from the back of a room (common practice).
PRESETS: dict[str, Preset] = {
    "slide": Preset("slide", 25.4, 14.2875, 15.0, 13.0, 17.0, 1.6, fixed_height=True,
                    description="16:9 slide, 25.4 cm x 14.29 cm"),
    "single": Preset("single", 8.5, 6.4, 8.0, 7.0, 8.5, 0.8,
                     description="one journal column, 8.5 cm wide"),
    "double": Preset("double", 17.0, 8.0, 9.0, 8.0, 10.0, 1.0,
                     description="full page width, 17 cm wide"),
}

_DASH = {"solid": "-", "dash": "--", "dot": ":", "dashdot": "-."}
_MARKER = {"o": "o", "s": "s", "^": "^", "d": "D", "v": "v", "x": "x", "+": "+", "*": "*"}

# Above this many points a line with increasing x is reduced to the min and max of each of
# ~_DECIMATE_BUCKETS buckets (extremes kept, so the data range drawn is unchanged); other
# large artists are rasterised inside vector files to keep them small.
_DECIMATE_ABOVE = 20_000
_DECIMATE_BUCKETS = 4_000
_RASTERISE_ABOVE = 20_000
_DENSE = 400  # points in a line above which dashes are replaced by sparse markers
_DASH_TO_MARKER = {"dash": "s", "dot": "^", "dashdot": "d"}


@dataclass(frozen=True)
class ExportResult:
    """What was written: path, format and the size in physical and pixel units."""

    path: Path
    format: str
    preset: str
    width_cm: float
    height_cm: float
    dpi: float
    width_px: int | None  # PNG only
    height_px: int | None
    provenance: dict[str, Any] = field(default_factory=dict)


# --------------------------------------------------------------------------------------------------
# provenance


_HASH_CACHE: dict[tuple[str, int, int], str] = {}


def sha256_file(path: str | Path, *, block_bytes: int = 1 << 20) -> str:
    """SHA-256 of a file, read in blocks (cached by path, size and modification time)."""
    p = Path(path)
    try:
        st = p.stat()
    except OSError as exc:
        raise ExportError(f"cannot read input file to hash it: {exc.strerror}", path=p) from exc
    key = (str(p.resolve()), st.st_size, st.st_mtime_ns)
    if key in _HASH_CACHE:
        return _HASH_CACHE[key]
    h = hashlib.sha256()
    with open(p, "rb") as fh:
        while chunk := fh.read(block_bytes):
            h.update(chunk)
    _HASH_CACHE[key] = h.hexdigest()
    return _HASH_CACHE[key]


def provenance_for(
    paths: Sequence[str | Path] = (),
    *,
    settings: Mapping[str, Any] | None = None,
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Provenance record: input files (by file name, never the absolute path: a figure sent to a
    colleague or a journal must not carry the folders of the machine it was made on) with their SHA-256
    and size, phasewake version, settings. The checksum identifies the input wherever it now lives.

    No time stamp is recorded, so exporting the same figure twice gives the same bytes (PDF and SVG
    dates are suppressed too).
    """
    import matplotlib

    files = []
    for p in paths:
        pp = Path(p)
        files.append({"file": pp.name, "sha256": sha256_file(pp), "size_bytes": pp.stat().st_size})
    out: dict[str, Any] = {
        "phasewake_version": __version__,
        "matplotlib_version": matplotlib.__version__,
        "numpy_version": np.__version__,
        "inputs": files,
        "settings": to_jsonable(dict(settings or {})),
    }
    if extra:
        out.update(to_jsonable(dict(extra)))
    return out


def provenance_of_run(run: Any, *, settings: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """Provenance of a :class:`~phasewake.core.model.run.Run`: its files (hashed) and the run name."""
    paths = [p for p in getattr(run, "paths", ()) if Path(p).is_file()]
    return provenance_for(paths, settings=settings, extra={"run": getattr(run, "name", "")})


def provenance_json(prov: Mapping[str, Any]) -> str:
    return json.dumps(to_jsonable(prov), sort_keys=True, separators=(",", ":"))


def _merged_provenance(spec: FigureSpec, provenance: Mapping[str, Any] | None) -> dict[str, Any]:
    prov: dict[str, Any] = {"figure": spec.key}
    prov.update(to_jsonable(dict(spec.provenance)))
    if provenance:
        prov.update(to_jsonable(dict(provenance)))
    prov.setdefault("phasewake_version", __version__)
    return prov


# --------------------------------------------------------------------------------------------------
# writing goes through the project's one atomic writer (core/atomic.py): figures are drawn into memory
# first, so a full disk meets a plain write (OutputError, the old file intact), never a half-drawn file


def _check_writable(path: Path) -> None:
    parent = path.parent if str(path.parent) else Path(".")
    if parent.exists() and not parent.is_dir():
        raise ExportError("the folder to write into is a file", path=parent)
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ExportError(f"cannot create the output folder: {exc.strerror}", path=parent) from exc
    if not os.access(parent, os.W_OK):
        raise ExportError("the output folder is not writable", path=parent)


# --------------------------------------------------------------------------------------------------
# drawing


def rc_params(preset: Preset) -> dict[str, Any]:
    """matplotlib settings for a preset: type sizes, light background, text kept as text."""
    return {
        "font.size": preset.font_pt,
        "axes.labelsize": preset.font_pt,
        "axes.titlesize": preset.title_pt,
        "figure.titlesize": preset.title_pt + 1,
        "xtick.labelsize": preset.tick_pt,
        "ytick.labelsize": preset.tick_pt,
        "legend.fontsize": preset.tick_pt,
        "legend.framealpha": 0.9,
        "legend.title_fontsize": preset.tick_pt,
        "font.family": "sans-serif",
        "font.sans-serif": ["DejaVu Sans"],  # ships with matplotlib: same look on every machine
        "mathtext.default": "regular",
        "axes.unicode_minus": True,
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "savefig.facecolor": "white",
        "axes.edgecolor": "#333333",
        "axes.grid": True,
        "grid.color": "#d9d9d9",
        "grid.linewidth": 0.5 * preset.line_scale,
        "axes.linewidth": 0.8 * preset.line_scale,
        "xtick.major.width": 0.8 * preset.line_scale,
        "ytick.major.width": 0.8 * preset.line_scale,
        "lines.linewidth": 1.5 * preset.line_scale,
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
        "ps.fonttype": 42,
        "svg.hashsalt": "phasewake",  # stable element ids: the same figure gives the same SVG
        "path.simplify": True,
        "agg.path.chunksize": 20_000,
    }


def _rc(preset: str | Preset) -> Any:
    """``matplotlib.rc_context`` with the settings of ``preset``."""
    import matplotlib

    rc: Any = rc_params(get_preset(preset))
    return matplotlib.rc_context(rc)


def get_preset(preset: str | Preset) -> Preset:
    if isinstance(preset, Preset):
        return preset
    try:
        return PRESETS[preset]
    except KeyError:
        raise ExportError(f"unknown figure preset {preset!r}; choose one of {', '.join(PRESETS)}") from None


def figure_size_cm(spec: FigureSpec, preset: str | Preset) -> tuple[float, float]:
    """(width, height) in cm of ``spec`` drawn with ``preset``."""
    pr = get_preset(preset)
    rows, _ = _grid(spec, pr)
    if pr.fixed_height:
        return pr.width_cm, pr.height_cm
    extra_title = 0.6 if len(spec.plots) > 1 else 0.0
    return pr.width_cm, min(pr.max_height_cm, pr.height_cm * rows + extra_title)


def _grid(spec: FigureSpec, preset: Preset | None = None) -> tuple[int, int]:
    n = max(1, len(spec.plots))
    if preset is not None and preset.width_cm < 12.0:
        return n, 1  # a journal column is too narrow for plots side by side: stack them
    if spec.grid is not None:
        rows, cols = spec.grid
        if rows * cols < n:
            rows = math.ceil(n / cols)
        return max(1, rows), max(1, cols)
    return n, 1


def render_figure(spec: FigureSpec, *, preset: str | Preset = "slide", title: bool = True) -> Figure:
    """Draw ``spec`` into a new matplotlib Figure sized by ``preset`` (no pyplot, no display).

    Save it yourself with ``fig.savefig`` inside ``matplotlib.rc_context(rc_params(preset))`` to keep
    text as text, or use :func:`export_figure`, which does that and adds provenance.
    """
    from matplotlib.figure import Figure

    pr = get_preset(preset)
    w, h = figure_size_cm(spec, pr)
    with _rc(pr):
        fig = Figure(figsize=(w / CM_PER_INCH, h / CM_PER_INCH), layout="constrained")
        draw_into(fig, spec, preset=pr, title=title)
    return fig


def draw_into(target: Figure | SubFigure, spec: FigureSpec, *, preset: str | Preset = "slide",
              title: bool = True) -> list[Axes]:
    """Draw the plots of ``spec`` on a grid inside a Figure or SubFigure; return the axes."""

    pr = get_preset(preset)
    rows, cols = _grid(spec, pr)
    axes: list[Axes] = []
    with _rc(pr):
        one = len(spec.plots) == 1
        for i, plot in enumerate(spec.plots):
            ax = target.add_subplot(rows, cols, i + 1)
            _draw_plot(ax, plot, pr, title=(plot.title or spec.title) if one and title else plot.title,
                       cols=cols, n_rows=rows)
            axes.append(ax)
        if not spec.plots:
            ax = target.add_subplot(1, 1, 1)
            ax.set_axis_off()
            ax.text(0.5, 0.5, "nothing to draw", ha="center", va="center", transform=ax.transAxes)
            axes.append(ax)
        if title and not one and spec.title:
            target.suptitle(mathtext(spec.title) if "_" in spec.title else spec.title)
    return axes


def _colour(style: Style) -> str:
    return style.colour


def _decimate(x: np.ndarray, y: np.ndarray, buckets: int) -> tuple[np.ndarray, np.ndarray]:
    """Keep the first, the min and the max and the last point of each bucket (order preserved)."""
    n = x.size
    edges = np.linspace(0, n, buckets + 1).astype(np.intp)
    edges = np.unique(edges)
    starts = edges[:-1]
    ends = edges[1:]
    yy = np.where(np.isfinite(y), y, np.nan)
    safe_lo = np.where(np.isnan(yy), np.inf, yy)
    safe_hi = np.where(np.isnan(yy), -np.inf, yy)
    imin = np.minimum.reduceat(safe_lo, starts)
    imax = np.maximum.reduceat(safe_hi, starts)
    # positions of the min/max inside each bucket
    bucket = np.repeat(np.arange(starts.size), ends - starts)
    is_min = safe_lo == imin[bucket]
    is_max = safe_hi == imax[bucket]
    keep = np.zeros(n, bool)
    keep[starts] = True
    keep[ends - 1] = True
    # one min and one max per bucket (the first occurrence)
    first_min = np.full(starts.size, -1)
    first_max = np.full(starts.size, -1)
    idx = np.arange(n)
    mi = idx[is_min]
    ma = idx[is_max]
    first_min[bucket[mi][::-1]] = mi[::-1]
    first_max[bucket[ma][::-1]] = ma[::-1]
    keep[first_min[first_min >= 0]] = True
    keep[first_max[first_max >= 0]] = True
    return x[keep], y[keep]


_GREEK = {"α": "alpha", "β": "beta", "γ": "gamma", "δ": "delta", "ε": "epsilon", "ζ": "zeta", "η": "eta",
          "θ": "theta", "κ": "kappa", "λ": "lambda", "μ": "mu", "ν": "nu", "ξ": "xi", "π": "pi", "ρ": "rho",
          "σ": "sigma", "τ": "tau", "φ": "phi", "χ": "chi", "ψ": "psi", "ω": "omega", "Γ": "Gamma", "Δ": "Delta",
          "Θ": "Theta", "Λ": "Lambda", "Ξ": "Xi", "Π": "Pi", "Σ": "Sigma", "Φ": "Phi", "Ψ": "Psi", "Ω": "Omega"}
# a one-letter symbol (Latin or Greek) with a subscript: σ_E, τ_int, N_dof, k_TST, k_{A→B}; never inside a
# word (a series name such as potential_energy stays as it is)
_SUBSCRIPTED = (r"(?<![A-Za-z0-9_\\])([A-Za-z" + "".join(_GREEK) + r"])_(\{[^}]+\}|[A-Za-z0-9]+)"
                r"(?![A-Za-z0-9_])")


def _math_symbol(m: Any) -> str:
    base, sub = m.group(1), m.group(2).strip("{}")
    base = "\\" + _GREEK[base] if base in _GREEK else base
    sub = sub if len(sub) == 1 else "\\mathrm{" + sub + "}"
    return f"{base}_{sub}"


def mathtext(text: str) -> str:
    """Symbols with subscripts as matplotlib mathtext: "σ_E/σ_K = 1.02" -> "$\\sigma_E/\\sigma_K$ = 1.02"
    (a literal "σ_E" shows its underscore). A run of symbols joined by "/" or "·" is one expression. Text
    without such symbols is returned with any "$" escaped, so it is never read as mathtext."""
    import re

    if not text or "_" not in text:
        return text.replace("$", "\\$") if text and "$" in text else text
    text = text.replace("$", "\\$")
    expr = _SUBSCRIPTED + r"(?:[/·]" + _SUBSCRIPTED + r")*"

    def whole(m: Any) -> str:
        return "$" + re.sub(_SUBSCRIPTED, _math_symbol, m.group(0)).replace("·", r"\cdot ") + "$"

    return re.sub(expr, whole, text)


def _apply_mathtext(host: Any) -> None:
    """Every text of a drawn figure (labels, titles, legends, notes) through :func:`mathtext`."""
    from matplotlib.text import Text

    for t in host.findobj(Text):
        s = t.get_text()
        if s and "_" in s and "$" not in s:
            t.set_text(mathtext(s))


# characters a wrapped label must not be broken at: inside "σ_E = 1.02", "3.2 kJ/mol", "a ± b"
_NO_BREAK = ((" = ", "\u00a0=\u00a0"), (" ± ", "\u00a0±\u00a0"), (" < ", "\u00a0<\u00a0"),
             (" > ", "\u00a0>\u00a0"), (" ≤ ", "\u00a0≤\u00a0"), (" ≥ ", "\u00a0≥\u00a0"),
             (" × ", "\u00a0×\u00a0"))


def _wrap_label(text: str, width: int) -> str:
    """Wrap at spaces between words, never inside an expression (an equation, a number and its unit)."""
    import re
    import textwrap

    if len(text) <= width:
        return text
    keep = text
    for a, b in _NO_BREAK:
        keep = keep.replace(a, b)
    # a number stays with its unit
    keep = re.sub(r"(\d) (?=(?:kJ|kcal|K\b|ps|ns|fs|nm|Å|amu|cm|mol|bar|rad|deg|%|°|1/))", "\\1\u00a0", keep)
    # textwrap breaks only at ASCII whitespace, so the no-break spaces hold; they are drawn as spaces
    return "\n".join(textwrap.wrap(keep, width=width, break_long_words=False)) or text


def _draw_plot(ax: Axes, plot: PlotSpec, pr: Preset, *, title: str, cols: int = 1, n_rows: int = 1) -> None:
    n_points = 0
    for item in plot.items:
        if isinstance(item, Line):
            n_points += int(np.asarray(item.x).size)
    has_image = False
    for item in plot.items:
        if isinstance(item, Image):
            _draw_image(ax, item)
            has_image = True
    for item in plot.items:
        if isinstance(item, Band):
            _draw_band(ax, item)
    for item in plot.items:
        if isinstance(item, Line):
            _draw_line(ax, item, pr)
    for item in plot.items:
        if isinstance(item, Mark):
            _draw_mark(ax, item, pr)

    # wrap labels longer than their axis (sizes in pt; a character is about 0.6 em of DejaVu Sans)
    host = ax.figure  # a Figure or a SubFigure (report pages)
    w_pt = host.bbox.width / host.dpi * 72.0
    h_pt = host.bbox.height / host.dpi * 72.0
    x_chars = max(12, int(0.8 * w_pt / cols / (0.6 * pr.font_pt)))
    y_chars = max(12, int(0.75 * h_pt / max(1, n_rows) / (0.6 * pr.font_pt)))
    ax.set_xlabel(_wrap_label(plot.x.text, x_chars))
    ax.set_ylabel(_wrap_label(plot.y.text, y_chars))
    if title:
        ax.set_title(_wrap_label(title, max(16, int(0.75 * w_pt / cols / (0.6 * pr.title_pt)))))
    if plot.x.log:
        ax.set_xscale("log")
    if plot.y.log:
        ax.set_yscale("log")
    if plot.x_is_time or has_image:
        ax.margins(x=0)
    if has_image:
        ax.margins(y=0)
        ax.grid(False)
    if plot.x.integer or plot.y.integer:
        from matplotlib.ticker import MaxNLocator

        if plot.x.integer:
            ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        if plot.y.integer:
            ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    if plot.x.limits is not None:
        ax.set_xlim(*plot.x.limits)
    if plot.y.limits is not None:
        ax.set_ylim(*plot.y.limits)
    if plot.aspect_equal:
        ax.set_aspect("equal", adjustable="datalim")
    if not (plot.x.log or plot.y.log):
        # no offset notation: a tick reads as the value itself, not "+1.234e3" in a corner
        ax.ticklabel_format(axis="both", style="sci", scilimits=(-3, 5), useOffset=False)
    handles, labels = ax.get_legend_handles_labels() if plot.legend else ([], [])
    if handles:
        # the note becomes the legend's title, so one box holds all the words and "best" placement
        # keeps it off the data
        note = plot.note or None
        if n_points > _DENSE and cols == 1 and pr.name != "single":
            # a dense trace fills its axes: the legend goes beside it, where it hides nothing; a
            # long note is wrapped so the legend does not squeeze the axes
            longest = max(len(lab) for lab in labels)
            if note is not None:
                note = _wrap_label(note, max(24, longest + 4))
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, borderaxespad=0.0,
                      title=note, alignment="left")
        else:
            # "best" placement scans every point: slow for long series, so only for small plots
            ax.legend(loc="best" if n_points <= 5000 else "upper right", frameon=True, title=note,
                      alignment="left")
    elif plot.note:
        ax.text(0.015, 0.975, plot.note, transform=ax.transAxes, ha="left", va="top",
                fontsize=pr.tick_pt, bbox={"boxstyle": "round,pad=0.3", "facecolor": "white",
                                           "edgecolor": "#999999", "alpha": 0.9}, zorder=10)
    _apply_mathtext(ax)


def _draw_line(ax: Axes, item: Line, pr: Preset) -> None:
    x = np.asarray(item.x, dtype=float).ravel()
    y = np.asarray(item.y, dtype=float).ravel()
    st = item.style
    colour = _colour(st)
    lw = st.width * pr.line_scale
    label = item.label or None
    marker = _MARKER.get(st.marker) if st.marker else None
    ms = st.marker_size * (pr.line_scale ** 0.5) * 1.2
    if item.kind == "line":
        if x.size > _DENSE and st.dash != "solid":
            # dashes vanish in a dense, noisy trace: draw it solid and tell it apart by sparse markers
            marker = marker or _MARKER[_DASH_TO_MARKER.get(st.dash, "s")]
            dash = "solid"
        else:
            dash = st.dash
        if x.size > _DENSE:
            lw *= 0.6
        rasterise = False
        if x.size > _DECIMATE_ABOVE:
            if np.all(np.diff(x) >= 0):
                x, y = _decimate(x, y, _DECIMATE_BUCKETS)
            else:
                rasterise = True
        markevery = None
        if marker is not None and x.size > 40:
            markevery = max(1, x.size // 12)
        ax.plot(x, y, linestyle=_DASH.get(dash, "-"), color=colour, linewidth=lw, marker=marker,
                markersize=ms, markevery=markevery, alpha=st.alpha, label=label, rasterized=rasterise,
                gid="data")
    elif item.kind == "scatter":
        m = marker or "o"
        size = ms if x.size < 2000 else max(1.0, ms * 0.45)
        ax.plot(x, y, linestyle="none", marker=m, markersize=size, color=colour,
                markeredgewidth=0 if m not in ("x", "+") else lw * 0.7, alpha=st.alpha, label=label,
                rasterized=x.size > _RASTERISE_ABOVE, gid="data")
    elif item.kind == "step":
        if x.size == y.size + 1:  # bin edges
            # outline only (no drop to a baseline), like the window's step curves
            ax.stairs(y, x, baseline=None, color=colour, linewidth=lw, linestyle=_DASH.get(st.dash, "-"),
                      label=label, alpha=st.alpha, gid="data")
        else:  # bin centres
            ax.step(x, y, where="mid", color=colour, linewidth=lw, linestyle=_DASH.get(st.dash, "-"),
                    label=label, alpha=st.alpha, gid="data")
    elif item.kind == "bar":
        if x.size == y.size + 1:
            centres = 0.5 * (x[1:] + x[:-1])
            widths = np.diff(x)
        else:
            centres = x
            widths = np.full(x.size, float(np.median(np.diff(x))) * 0.8 if x.size > 1 else 0.8)
        bars = ax.bar(centres, y, width=widths, color=colour, alpha=max(0.35, st.alpha * 0.8),
                      edgecolor=colour, linewidth=0.6 * pr.line_scale, label=label, gid="data")
        if marker is not None:  # a hatch keeps bars apart without colour
            for b in bars:
                b.set_hatch({"o": "", "s": "//", "^": "\\\\", "d": "xx"}.get(st.marker or "", ".."))


def _envelope(x: np.ndarray, lo: np.ndarray, hi: np.ndarray,
              buckets: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Reduce a long band to the min of ``lo`` and max of ``hi`` over buckets (its outline is kept)."""
    starts = np.unique(np.linspace(0, x.size, buckets + 1).astype(np.intp))[:-1]
    ends = np.append(starts[1:], x.size) - 1
    lo_b = np.fmin.reduceat(lo, starts)
    hi_b = np.fmax.reduceat(hi, starts)
    # each bucket drawn as a flat segment from its first to its last x
    xs = np.column_stack([x[starts], x[ends]]).ravel()
    return xs, np.repeat(lo_b, 2), np.repeat(hi_b, 2)


def _draw_band(ax: Axes, item: Band) -> None:
    x = np.asarray(item.x, dtype=float).ravel()
    lo = np.asarray(item.lo, float).ravel()
    hi = np.asarray(item.hi, float).ravel()
    if x.size > _DECIMATE_ABOVE and np.all(np.diff(x) >= 0):
        x, lo, hi = _envelope(x, lo, hi, _DECIMATE_BUCKETS)
    ax.fill_between(x, lo, hi,
                    color=item.style.colour, alpha=item.style.alpha, linewidth=0,
                    label=item.label or None, rasterized=x.size > _RASTERISE_ABOVE, gid="data")


def _draw_image(ax: Axes, item: Image) -> None:
    data = np.ma.masked_invalid(np.asarray(item.data, dtype=float))
    mesh = ax.pcolormesh(np.asarray(item.x_edges, float), np.asarray(item.y_edges, float), data.T,
                         cmap=item.colormap, shading="flat", rasterized=data.size > 4096, gid="data")
    cb = ax.figure.colorbar(mesh, ax=ax)
    if item.colorbar_label:
        cb.set_label(item.colorbar_label)


def _draw_mark(ax: Axes, m: Mark, pr: Preset) -> None:
    st = m.style
    lw = st.width * pr.line_scale
    ls = _DASH.get(st.dash, "--")
    label = m.label or None
    if m.kind == "vline":
        ax.axvline(m.value, color=st.colour, linestyle=ls, linewidth=lw, alpha=st.alpha, label=label)
    elif m.kind == "hline":
        ax.axhline(m.value, color=st.colour, linestyle=ls, linewidth=lw, alpha=st.alpha, label=label)
    elif m.kind in ("vspan", "hspan"):
        # a span is labelled inside itself, near the axes edge, not in the legend: direct labels
        # need no colour matching
        lo, hi = m.value, m.value if m.value2 is None else m.value2
        if m.kind == "vspan":
            ax.axvspan(lo, hi, color=st.colour, alpha=min(st.alpha, 0.18), linewidth=0)
            if label:
                ax.text(0.5 * (lo + hi), 0.015, label, transform=ax.get_xaxis_transform(), ha="center",
                        va="bottom", fontsize=pr.tick_pt, color="#222222", clip_on=True, zorder=4,
                        bbox={"boxstyle": "round,pad=0.15", "facecolor": "white", "edgecolor": "none",
                              "alpha": 0.7})
        else:
            ax.axhspan(lo, hi, color=st.colour, alpha=min(st.alpha, 0.18), linewidth=0)
            if label:
                # just outside the right edge, where a time series leaves room
                ax.text(1.008, 0.5 * (lo + hi), label, transform=ax.get_yaxis_transform(), ha="left",
                        va="center", rotation=90, fontsize=pr.tick_pt, color="#222222", zorder=4)
    elif m.kind == "point":
        ax.plot([m.value], [m.value2 if m.value2 is not None else 0.0], linestyle="none",
                marker=_MARKER.get(st.marker or "o", "o"), markersize=st.marker_size * 1.6 * pr.line_scale,
                color=st.colour, markeredgecolor="black", markeredgewidth=0.6 * pr.line_scale,
                label=label, zorder=5)
    elif m.kind == "text":
        ax.annotate(m.label, (m.value, m.value2 if m.value2 is not None else 0.0), xytext=(3, 3),
                    textcoords="offset points", fontsize=pr.tick_pt, color=st.colour, zorder=6)


# --------------------------------------------------------------------------------------------------
# writing


def _format_of(path: Path, fmt: str | None) -> str:
    f = (fmt or path.suffix.lstrip(".")).lower()
    if f not in FORMATS:
        raise ExportError(f"unknown figure format {f!r}; choose one of {', '.join(FORMATS)}", path=path)
    return f


def _metadata(fmt: str, title: str, prov: Mapping[str, Any]) -> dict[str, Any]:
    text = provenance_json(prov)
    software = f"phasewake {__version__}"
    if fmt == "png":  # PNG tEXt chunks: any keyword
        return {"Title": title, "Software": software, "Description": text, "phasewake-provenance": text}
    if fmt == "svg":  # Dublin Core fields inside <metadata>
        return {"Title": title, "Creator": software, "Description": text, "Date": None}
    return {"Title": title, "Creator": software, "Subject": text, "Keywords": "phasewake provenance JSON in Subject",
            "CreationDate": None}


def save_matplotlib_figure(fig: Figure, path: str | Path, *, fmt: str | None = None, dpi: float = 200.0,
                           title: str = "", provenance: Mapping[str, Any] | None = None,
                           preset: str | Preset = "slide") -> Path:
    """Save a matplotlib figure atomically with provenance metadata and text kept as text."""

    target = Path(path)
    f = _format_of(target, fmt)
    _check_writable(target)
    meta = _metadata(f, title, provenance or {})
    buf = io.BytesIO()
    with _rc(get_preset(preset)):
        fig.savefig(buf, format=f, dpi=dpi, metadata=meta)
    write_bytes(target, buf.getbuffer())
    return target


def export_figure(
    spec: FigureSpec,
    path: str | Path,
    *,
    fmt: str | None = None,
    preset: str | Preset = "slide",
    dpi: float = 200.0,
    provenance: Mapping[str, Any] | None = None,
) -> ExportResult:
    """Write ``spec`` as PNG, SVG or PDF (format from ``fmt`` or the file suffix).

    Parameters
    ----------
    spec : FigureSpec
    path : file to write (replaced atomically; its folder is created if needed)
    fmt : "png", "svg" or "pdf"; default from the suffix of ``path``
    preset : "slide", "single", "double" or a :class:`Preset`
    dpi : dots per inch of a PNG (also the raster resolution of rasterised parts of vector files)
    provenance : extra provenance (e.g. :func:`provenance_of_run`); merged over ``spec.provenance``

    Returns
    -------
    ExportResult
        With the physical size in cm and, for PNG, the size in pixels.
    """
    if not (dpi > 0 and math.isfinite(dpi)):
        raise ExportError(f"DPI must be a positive number, not {dpi!r}", path=path)
    target = Path(path)
    f = _format_of(target, fmt)
    pr = get_preset(preset)
    prov = _merged_provenance(spec, provenance)
    prov["export"] = {"format": f, "preset": pr.name, "dpi": float(dpi)}
    fig = render_figure(spec, preset=pr)
    w_in, h_in = fig.get_size_inches()
    wpx = hpx = None
    if f == "png":
        # whole pixels: the canvas truncates w * dpi, so aim a hair above the rounded pixel count
        wpx, hpx = int(round(w_in * dpi)), int(round(h_in * dpi))
        fig.set_size_inches((wpx + 1e-4) / dpi, (hpx + 1e-4) / dpi)
    save_matplotlib_figure(fig, target, fmt=f, dpi=dpi, title=spec.title, provenance=prov, preset=pr)
    return ExportResult(path=target, format=f, preset=pr.name, width_cm=float(w_in * CM_PER_INCH),
                        height_cm=float(h_in * CM_PER_INCH), dpi=float(dpi), width_px=wpx, height_px=hpx,
                        provenance=prov)


def figure_png_bytes(spec: FigureSpec, *, preset: str | Preset = "double", dpi: float = 110.0) -> bytes:
    """PNG bytes of ``spec`` (for HTML reports and quick previews)."""

    pr = get_preset(preset)
    fig = render_figure(spec, preset=pr)
    buf = io.BytesIO()
    with _rc(pr):
        fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


# --------------------------------------------------------------------------------------------------
# data as CSV

CSV_COLUMNS = ("plot", "item", "kind", "label", "x", "y", "y_lo", "y_hi", "value", "x_unit", "y_unit")


def iter_data_rows(spec: FigureSpec) -> Iterator[dict[str, Any]]:
    """Every data point of ``spec`` as a row (long format: one row per point, mark or image cell).

    Columns: plot (index), item (index within the plot), kind (line/scatter/step/bar/band/image/
    mark:<kind>), label, x, y, y_lo, y_hi (bands), value (image cells), x_unit, y_unit.
    Step and bar items given by bin edges report the bin centres as x.
    """
    for ip, plot in enumerate(spec.plots):
        xu, yu = plot.x.unit, plot.y.unit
        for ii, item in enumerate(plot.items):
            base = {"plot": ip, "item": ii, "x_unit": xu, "y_unit": yu, "label": getattr(item, "label", "")}
            if isinstance(item, Line):
                x = np.asarray(item.x, float).ravel()
                y = np.asarray(item.y, float).ravel()
                if x.size == y.size + 1:
                    x = 0.5 * (x[1:] + x[:-1])
                for a, b in zip(x, y):
                    yield {**base, "kind": item.kind, "x": a, "y": b}
            elif isinstance(item, Band):
                for a, lo, hi in zip(np.asarray(item.x, float).ravel(), np.asarray(item.lo, float).ravel(),
                                     np.asarray(item.hi, float).ravel()):
                    yield {**base, "kind": "band", "x": a, "y_lo": lo, "y_hi": hi}
            elif isinstance(item, Image):
                xe = np.asarray(item.x_edges, float)
                ye = np.asarray(item.y_edges, float)
                xc = 0.5 * (xe[1:] + xe[:-1])
                yc = 0.5 * (ye[1:] + ye[:-1])
                data = np.asarray(item.data, float)
                for i in range(data.shape[0]):
                    for j in range(data.shape[1]):
                        yield {**base, "kind": "image", "x": xc[i], "y": yc[j], "value": data[i, j]}
            elif isinstance(item, Mark):
                row = {**base, "kind": f"mark:{item.kind}", "x": item.value}
                if item.kind in ("hline", "hspan"):
                    row = {**base, "kind": f"mark:{item.kind}", "y": item.value,
                           "y_hi": item.value2 if item.value2 is not None else ""}
                elif item.value2 is not None:
                    row["y" if item.kind in ("point", "text") else "y_hi"] = item.value2
                yield row


def _fmt(v: Any) -> str:
    if v is None or v == "":
        return ""
    if isinstance(v, float | np.floating):
        return repr(float(v)) if math.isfinite(float(v)) else ("nan" if v != v else str(float(v)))
    return str(v)


def export_csv(spec: FigureSpec, path: str | Path, *, provenance: Mapping[str, Any] | None = None) -> Path:
    """Write the data of ``spec`` as CSV (see :func:`iter_data_rows`), atomically.

    Comment lines starting with ``#`` come first: the figure key and title, each plot's axes with
    units, and the provenance JSON.
    """
    target = Path(path)
    _check_writable(target)
    prov = _merged_provenance(spec, provenance)
    with atomic_open(target, "w", encoding="utf-8", newline="") as fh:
        fh.write(f"# phasewake {__version__} figure data: {spec.key}: {spec.title}\n")
        for ip, plot in enumerate(spec.plots):
            fh.write(f"# plot {ip}: {plot.title}; x = {plot.x.text}; y = {plot.y.text}\n")
        fh.write(f"# provenance: {provenance_json(prov)}\n")
        w = csv.writer(fh)
        w.writerow(CSV_COLUMNS)
        for row in iter_data_rows(spec):
            w.writerow([_fmt(row.get(c, "")) for c in CSV_COLUMNS])
    return target


def export_all(spec: FigureSpec, stem: str | Path, *, formats: Sequence[str] = ("png", "pdf"),
               preset: str | Preset = "slide", dpi: float = 200.0,
               provenance: Mapping[str, Any] | None = None, csv_data: bool = False) -> list[Path]:
    """Write ``spec`` in several formats beside each other: ``stem.png``, ``stem.pdf``, ..."""
    stem = Path(stem)
    out = []
    for f in formats:
        res = export_figure(spec, stem.with_name(stem.name + "." + f), fmt=f, preset=preset, dpi=dpi,
                            provenance=provenance)
        out.append(res.path)
    if csv_data:
        out.append(export_csv(spec, stem.with_name(stem.name + ".csv"), provenance=provenance))
    return out
