"""Draw a :class:`~phasewake.core.figures.spec.FigureSpec` with matplotlib (for files; the window draws the
same description with pyqtgraph, so an export matches the screen).

Lines, bands, images and marks of each plot, axis labels with their units, the legend; very long lines
are reduced to the extremes of each bucket and large artists rasterised inside vector files.
matplotlib is imported inside the functions that need it, and pyplot is never used: figures are plain
``matplotlib.figure.Figure`` objects, safe to build in a worker thread.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.figures.presets import CM_PER_INCH, Preset, get_preset, preset_rc
from phasewake.core.figures.spec import Band, FigureSpec, Image, Line, Mark, PlotSpec, Style

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure, SubFigure


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


def figure_size_cm(spec: FigureSpec, preset: str | Preset) -> tuple[float, float]:
    """(width, height) in cm of ``spec`` drawn with ``preset``."""
    pr = get_preset(preset)
    rows, _ = grid_shape(spec, pr)
    if pr.fixed_height:
        return pr.width_cm, pr.height_cm
    extra_title = 0.6 if len(spec.plots) > 1 else 0.0
    return pr.width_cm, min(pr.max_height_cm, pr.height_cm * rows + extra_title)


def grid_shape(spec: FigureSpec, preset: Preset | None = None) -> tuple[int, int]:
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
    with preset_rc(pr):
        fig = Figure(figsize=(w / CM_PER_INCH, h / CM_PER_INCH), layout="constrained")
        draw_into(fig, spec, preset=pr, title=title)
    return fig


def draw_into(target: Figure | SubFigure, spec: FigureSpec, *, preset: str | Preset = "slide",
              title: bool = True) -> list[Axes]:
    """Draw the plots of ``spec`` on a grid inside a Figure or SubFigure; return the axes."""

    pr = get_preset(preset)
    rows, cols = grid_shape(spec, pr)
    axes: list[Axes] = []
    with preset_rc(pr):
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


def wrap_label(text: str, width: int) -> str:
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
    ax.set_xlabel(wrap_label(plot.x.text, x_chars))
    ax.set_ylabel(wrap_label(plot.y.text, y_chars))
    if title:
        ax.set_title(wrap_label(title, max(16, int(0.75 * w_pt / cols / (0.6 * pr.title_pt)))))
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
                note = wrap_label(note, max(24, longest + 4))
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
