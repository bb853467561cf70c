"""Declarative figure descriptions.

A :class:`FigureSpec` holds data, axes with labels and units, and marks (states, dividing surface,
drift line, cursor, annotations). The window draws it live with pyqtgraph (``phasewake.app.window``);
``phasewake.core.figures.export`` draws the same description with matplotlib. One description, two
renderers, so an export matches the screen.

Colours: the Okabe and Ito (2008) colour-blind-safe palette; every series also gets a line style or
marker so colour is never the only cue.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

# Okabe, M. and Ito, K. (2008) "Color Universal Design": black, orange, sky blue, bluish green,
# yellow, blue, vermillion, reddish purple.
PALETTE: tuple[str, ...] = (
    "#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
)
# Ordered so consecutive series differ in hue and lightness; yellow last (weak on white).
SERIES_ORDER: tuple[int, ...] = (5, 6, 3, 1, 7, 2, 0, 4)
DASHES: tuple[str, ...] = ("solid", "dash", "dot", "dashdot")
MARKERS: tuple[str, ...] = ("o", "s", "^", "d", "v", "x", "+", "*")

LEVEL_STYLE: dict[str, tuple[str, str]] = {  # verdict level -> (colour, marker); a word is always shown too
    "ok": (PALETTE[3], "o"),
    "caution": (PALETTE[1], "^"),
    "problem": (PALETTE[6], "x"),
    "info": (PALETTE[0], "s"),
}


@dataclass(frozen=True)
class Style:
    colour: str = PALETTE[5]
    dash: str = "solid"  # one of DASHES
    width: float = 1.5
    marker: str | None = None  # one of MARKERS or None
    marker_size: float = 5.0
    alpha: float = 1.0


def series_style(i: int, *, marker: bool = False) -> Style:
    """The i-th series' style: colour, dash and (optionally) marker all change with i."""
    colour = PALETTE[SERIES_ORDER[i % len(SERIES_ORDER)]]
    dash = DASHES[(i // 1) % len(DASHES)] if i else "solid"
    return Style(colour=colour, dash=dash, marker=MARKERS[i % len(MARKERS)] if marker else None)


@dataclass(frozen=True)
class Axis:
    label: str  # quantity, e.g. "Total energy"
    unit: str = ""  # e.g. "kJ/mol"; "" for dimensionless
    log: bool = False
    limits: tuple[float, float] | None = None
    integer: bool = False  # ticks only at whole numbers (component numbers, counts)

    @property
    def text(self) -> str:
        return f"{self.label} ({self.unit})" if self.unit else self.label


@dataclass(frozen=True)
class Line:
    """A curve or set of points. kind: line, scatter, step (histogram outline), bar.

    For ``step`` and ``bar``, ``x`` may hold bin edges (``len(x) == len(y) + 1``) or bin centres
    (``len(x) == len(y)``); both renderers accept either. A step is drawn as an outline only (no drop
    to a baseline), so its drawn y range is the range of ``y``.
    """

    x: np.ndarray
    y: np.ndarray
    label: str = ""
    style: Style = field(default_factory=Style)
    kind: Literal["line", "scatter", "step", "bar"] = "line"


@dataclass(frozen=True)
class Band:
    """A shaded band between lo and hi (error bands)."""

    x: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    label: str = ""
    style: Style = field(default_factory=lambda: Style(alpha=0.25))


@dataclass(frozen=True)
class Image:
    """A 2D density on a regular grid; data[i, j] is the cell (x_edges[i:i+2], y_edges[j:j+2])."""

    data: np.ndarray
    x_edges: np.ndarray
    y_edges: np.ndarray
    label: str = ""
    colormap: str = "cividis"  # perceptually uniform and colour-blind friendly
    colorbar_label: str = ""


@dataclass(frozen=True)
class Mark:
    """A reference mark.

    kind: vline / hline (value), vspan / hspan (value, value2), point (value=x, value2=y),
    text (value=x, value2=y, label is the text).
    role: state, surface, drift, cursor, event, annotation, threshold.
    """

    kind: Literal["vline", "hline", "vspan", "hspan", "point", "text"]
    value: float
    value2: float | None = None
    label: str = ""
    role: str = "annotation"
    style: Style = field(default_factory=lambda: Style(colour=PALETTE[0], dash="dash", width=1.0))


PlotItem = Line | Band | Image | Mark


@dataclass(frozen=True)
class PlotSpec:
    """One set of axes."""

    title: str
    x: Axis
    y: Axis
    items: tuple[PlotItem, ...] = ()
    legend: bool = True
    x_is_time: bool = False  # a time axis in ps: linked to the shared cursor in the window
    aspect_equal: bool = False
    note: str = ""  # a short text shown in a corner (e.g. "g = 12.3, N_eff = 810")


@dataclass(frozen=True)
class FigureSpec:
    """A figure: one or more plots on a grid, with a caption that says what was computed how."""

    key: str  # stable identifier, e.g. "energy.total"
    title: str
    plots: tuple[PlotSpec, ...]
    caption: str = ""
    grid: tuple[int, int] | None = None  # (rows, cols); None = one column
    provenance: dict[str, Any] = field(default_factory=dict)

    def data_ranges(self) -> list[tuple[tuple[float, float], tuple[float, float]]]:
        """(x range, y range) of the data of each plot: what both renderers must show."""
        out = []
        for p in self.plots:
            xs: list[np.ndarray] = []
            ys: list[np.ndarray] = []
            for it in p.items:
                if isinstance(it, Line):
                    xs.append(np.asarray(it.x, float))
                    ys.append(np.asarray(it.y, float))
                elif isinstance(it, Band):
                    xs.append(np.asarray(it.x, float))
                    ys.extend([np.asarray(it.lo, float), np.asarray(it.hi, float)])
                elif isinstance(it, Image):
                    xs.append(np.asarray(it.x_edges, float))
                    ys.append(np.asarray(it.y_edges, float))
            if xs:
                x = np.concatenate([a.ravel() for a in xs])
                y = np.concatenate([a.ravel() for a in ys])
                x = x[np.isfinite(x)]
                y = y[np.isfinite(y)]
                out.append(((float(x.min()), float(x.max())) if x.size else (0.0, 1.0),
                            (float(y.min()), float(y.max())) if y.size else (0.0, 1.0)))
            else:
                out.append(((0.0, 1.0), (0.0, 1.0)))
        return out
