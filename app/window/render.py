"""Draw a declarative :class:`phasewake.core.figures.spec.FigureSpec` live with pyqtgraph.

The same description is drawn by ``phasewake.core.figures.export`` with matplotlib, so what a user exports
is what they see here. Time axes (``PlotSpec.x_is_time``) are x-linked inside a figure and carry the
shared cursor as a draggable vertical line. Long monotonic series use peak downsampling and clip to
view, so 1e7-point curves stay smooth.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.core.figures.spec import Band, FigureSpec, Image, Line, Mark, PlotSpec, Style

_DASH = {
    "solid": QtCore.Qt.PenStyle.SolidLine,
    "dash": QtCore.Qt.PenStyle.DashLine,
    "dot": QtCore.Qt.PenStyle.DotLine,
    "dashdot": QtCore.Qt.PenStyle.DashDotLine,
}
# figure marker names (matplotlib-like, see core.figures.MARKERS) -> pyqtgraph symbols
_SYMBOL = {"o": "o", "s": "s", "^": "t1", "d": "d", "v": "t", "x": "x", "+": "+", "*": "star"}

BIG_SERIES = 20_000  # above this many points a monotonic curve is downsampled and clipped to view
FONT_PT = 10
CURSOR_COLOUR = "#CC79A7"  # Okabe-Ito reddish purple: distinct from every series colour in use


def qcolour(hex_colour: str, alpha: float = 1.0) -> QtGui.QColor:
    c = QtGui.QColor(hex_colour)
    c.setAlphaF(max(0.0, min(1.0, float(alpha))))
    return c


def make_pen(style: Style) -> QtGui.QPen:
    pen = pg.mkPen(qcolour(style.colour, style.alpha), width=style.width)
    pen.setStyle(_DASH.get(style.dash, QtCore.Qt.PenStyle.SolidLine))
    pen.setCosmetic(True)
    return pen


def _monotonic(x: np.ndarray) -> bool:
    return x.size < 2 or bool(np.all(np.diff(x) >= 0))


def _edges(x: np.ndarray, n: int) -> np.ndarray:
    """Bin edges for a step outline: x as given when it has n+1 values, else midpoints."""
    if x.size == n + 1:
        return x
    if x.size < 2:
        return np.array([x[0] - 0.5, x[0] + 0.5]) if x.size else np.arange(n + 1, dtype=float)
    mid = 0.5 * (x[1:] + x[:-1])
    return np.concatenate([[x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]])


class LogAxis(pg.AxisItem):
    """An axis for log mode that labels only 1, 2 and 5 times a power of ten when ticks are dense.

    pyqtgraph labels every minor tick of a log axis; within a decade near 1 the labels 0.7, 0.8 and 0.9
    were printed on top of each other. Unlabelled ticks are still drawn.
    """

    KEEP = (1, 2, 5)

    def logTickStrings(self, values, scale, spacing):  # noqa: N802 - pyqtgraph override
        strings = super().logTickStrings(values, scale, spacing)
        vals = np.asarray(values, float)
        if vals.size <= 4:
            return strings
        out = []
        for v, text in zip(vals, strings):
            mantissa = 10 ** (v - np.floor(v + 1e-9))
            out.append(text if any(abs(mantissa - k) < 1e-6 * k for k in self.KEEP) else "")
        return out


def _axis_text(label: str, unit: str) -> str:
    return f"{label} ({unit})" if unit else label


def _style_axes(plot: pg.PlotItem, spec: PlotSpec) -> None:
    swap = {name: LogAxis(orientation=name) for name, axis in (("bottom", spec.x), ("left", spec.y)) if axis.log}
    if swap:
        plot.setAxisItems(swap)
    font = QtGui.QFont()
    font.setPointSize(FONT_PT)
    for name, axis in (("bottom", spec.x), ("left", spec.y)):
        ax = plot.getAxis(name)
        ax.enableAutoSIPrefix(False)  # units like kJ/mol must not get SI prefixes glued on
        ax.setLabel(text=_axis_text(axis.label, axis.unit), **{"font-size": f"{FONT_PT}pt"})
        ax.setTickFont(font)
        ax.setTextPen(pg.mkPen("#000000"))
        ax.setPen(pg.mkPen("#444444"))
        # axes also draw the grid across the plot: cache them, so a moving cursor does not redraw them
        ax.setCacheMode(QtWidgets.QGraphicsItem.CacheMode.DeviceCoordinateCache)
        if axis.integer:  # whole numbers only (component numbers): no tick at 1.5 or 2.5
            ax.setTickSpacing(major=1.0, minor=1.0)
    plot.setLogMode(x=spec.x.log, y=spec.y.log)
    plot.setTitle(spec.title, size=f"{FONT_PT + 1}pt", color="#000000")
    plot.showGrid(x=True, y=True, alpha=0.15)


class RenderedPlot:
    """One drawn PlotSpec: the pyqtgraph plot, its spec, and the items drawn from it."""

    def __init__(self, plot: pg.PlotItem, spec: PlotSpec) -> None:
        self.plot = plot
        self.spec = spec
        self.items: list[pg.GraphicsObject] = []
        self.cursor: pg.InfiniteLine | None = None
        self.movable_marks: list[tuple[Mark, pg.GraphicsObject]] = []

    def data_bounds(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """(x range, y range) of the drawn data items (not marks): compared with FigureSpec.data_ranges."""
        xs: list[float] = []
        ys: list[float] = []
        for it in self.items:
            if isinstance(it, pg.PlotDataItem):
                x, y = it.getOriginalDataset()
                if x is None or len(x) == 0:
                    continue
                x = np.asarray(x, float)
                y = np.asarray(y, float)
                xs += [np.nanmin(x), np.nanmax(x)]
                ys += [np.nanmin(y), np.nanmax(y)]
            elif isinstance(it, pg.PlotCurveItem):  # a band's edge: drawn in view coordinates
                x, y = it.getData()
                if x is None or len(x) == 0:
                    continue
                x, y = from_view(x, self.spec.x.log), from_view(y, self.spec.y.log)
                xs += [float(np.nanmin(x)), float(np.nanmax(x))]
                ys += [float(np.nanmin(y)), float(np.nanmax(y))]
            elif isinstance(it, pg.ImageItem):
                r = it.mapRectToParent(it.boundingRect())
                xs += [r.left(), r.right()]
                ys += [r.top(), r.bottom()]
            elif isinstance(it, pg.BarGraphItem):
                r = it.boundingRect()
                h = np.asarray(it.opts["height"], float)
                xs += [r.left(), r.right()]
                ys += [min(0.0, h.min()), h.max()]
        if not xs:
            return (0.0, 1.0), (0.0, 1.0)
        return (min(xs), max(xs)), (min(ys), max(ys))


def _draw_line(plot: pg.PlotItem, it: Line) -> pg.GraphicsObject:
    x = np.asarray(it.x, dtype=float)
    y = np.asarray(it.y, dtype=float)
    st = it.style
    name = it.label or None
    if it.kind == "bar":
        if x.size == y.size + 1:  # bin edges, as core.export reads them
            centres, width = 0.5 * (x[1:] + x[:-1]), np.diff(x)
        else:
            centres = x
            width = float(np.median(np.diff(x))) * 0.8 if x.size > 1 else 0.8
        item = pg.BarGraphItem(x=centres, height=y, width=width, brush=qcolour(st.colour, 0.6 * st.alpha),
                               pen=make_pen(st), name=name)
        plot.addItem(item)
        if name and plot.legend is not None:
            plot.legend.addItem(item, name)
        return item
    if it.kind == "step":
        edges = _edges(x, y.size)
        item = pg.PlotDataItem(edges, y, stepMode="center", pen=make_pen(st), name=name)
    elif it.kind == "scatter":
        item = pg.PlotDataItem(
            x, y, pen=None, symbol=_SYMBOL.get(st.marker or "o", "o"), symbolSize=st.marker_size,
            symbolBrush=qcolour(st.colour, st.alpha), symbolPen=None, name=name,
        )
    else:
        kw: dict = {}
        if st.marker:
            kw = dict(symbol=_SYMBOL.get(st.marker, "o"), symbolSize=st.marker_size,
                      symbolBrush=qcolour(st.colour, st.alpha), symbolPen=None)
        item = pg.PlotDataItem(x, y, pen=make_pen(st), name=name, **kw)
    plot.addItem(item)  # before the options below: they look up the item's ViewBox
    if x.size > BIG_SERIES and it.kind == "line":
        if _monotonic(x):
            item.setDownsampling(auto=True, method="peak")
            item.setClipToView(True)
        # A thin pen without antialiasing paints a dense curve several times faster, and a cached
        # picture of it lets the cursor move over it without repainting the curve.
        pen = make_pen(st)
        pen.setWidthF(min(pen.widthF(), 1.0))
        item.setPen(pen)
        item.curve.setCacheMode(QtWidgets.QGraphicsItem.CacheMode.DeviceCoordinateCache)
        item.opts["antialias"] = False
        item.curve.opts["antialias"] = False
    return item


def to_view(values: np.ndarray, log: bool) -> np.ndarray:
    """Data values in the coordinates a pyqtgraph view uses on an axis: log10 on a log axis.

    pyqtgraph's log mode transforms the data of PlotDataItems only; curves, fills and lines drawn
    directly (a band's edges, InfiniteLines, text) must be given log10 values, or they land on the
    linear scale (a band of 1e-3 to 1e2 then stretched the axis to 10^60). Values <= 0 have no place
    on a log axis: they become NaN.
    """
    v = np.asarray(values, dtype=float)
    if not log:
        return v
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(v > 0, np.log10(np.where(v > 0, v, 1.0)), np.nan)


def from_view(values: np.ndarray, log: bool) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    return np.power(10.0, v) if log else v


def _finite_runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) of the runs of True in ``mask`` with at least two samples."""
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    starts, stops = np.nonzero(edges == 1)[0], np.nonzero(edges == -1)[0]
    return [(int(a), int(b)) for a, b in zip(starts, stops) if b - a >= 2]


def _draw_band(plot: pg.PlotItem, it: Band, *, log_x: bool = False, log_y: bool = False) -> list[pg.GraphicsObject]:
    x = to_view(it.x, log_x)
    ylo = np.asarray(it.lo, float)
    yhi = np.asarray(it.hi, float)
    if log_y:  # a lower edge at or below zero is drawn down to the smallest positive value shown
        floor = np.nanmin(yhi[yhi > 0]) * 1e-3 if np.any(yhi > 0) else 1.0
        ylo = to_view(np.where(ylo > 0, ylo, floor), True)
        yhi = to_view(yhi, True)
    # a fill through NaN breaks the whole path: fill each finite stretch on its own
    out: list[pg.GraphicsObject] = []
    fill = None
    for a, b in _finite_runs(np.isfinite(x) & np.isfinite(ylo) & np.isfinite(yhi)):
        # curves with an invisible pen: a PlotDataItem without a pen builds no path to fill between
        edge = pg.mkPen(qcolour(it.style.colour, 0.0))
        lo = pg.PlotCurveItem(x[a:b], ylo[a:b], pen=edge)
        hi = pg.PlotCurveItem(x[a:b], yhi[a:b], pen=edge)
        fill = pg.FillBetweenItem(lo, hi, brush=qcolour(it.style.colour, it.style.alpha))
        for item in (lo, hi, fill):
            plot.addItem(item)
        out += [lo, hi]
    if fill is not None and it.label and plot.legend is not None:
        # pyqtgraph's legend cannot draw a sample of a FillBetweenItem: show a filled square instead
        # a ScatterPlotItem: the legend draws an empty PlotDataItem's symbol in pyqtgraph's default colour
        sample = pg.ScatterPlotItem(symbol="s", size=12, brush=qcolour(it.style.colour, max(it.style.alpha, 0.35)),
                                    pen=pg.mkPen(qcolour(it.style.colour, 0.8)))
        plot.legend.addItem(sample, it.label)
        fill._legend_sample = sample  # keep the Python object alive with the fill
    return out


def _colormap(name: str) -> pg.ColorMap:
    try:
        return pg.colormap.get(name)
    except (FileNotFoundError, KeyError, ValueError):
        return pg.colormap.get("cividis")


def _draw_image(plot: pg.PlotItem, it: Image) -> pg.ImageItem:
    data = np.asarray(it.data, dtype=float)
    xe = np.asarray(it.x_edges, float)
    ye = np.asarray(it.y_edges, float)
    img = pg.ImageItem(data, axisOrder="col-major")  # data[i, j]: i along x, j along y
    img.setRect(QtCore.QRectF(xe[0], ye[0], xe[-1] - xe[0], ye[-1] - ye[0]))
    cmap = _colormap(it.colormap)
    finite = data[np.isfinite(data)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    if hi <= lo:
        hi = lo + 1.0
    img.setLookupTable(cmap.getLookupTable(nPts=256))
    img.setLevels((lo, hi))
    plot.addItem(img)
    bar = pg.ColorBarItem(values=(lo, hi), colorMap=cmap, label=it.colorbar_label or it.label,
                          interactive=False, width=14)
    bar.setImageItem(img, insert_in=plot)
    return img


def _draw_mark(plot: pg.PlotItem, m: Mark, *, movable: bool, log_x: bool = False, log_y: bool = False,
               inline_label: bool = True) -> pg.GraphicsObject | None:
    """One mark; values on a log axis are given to pyqtgraph as log10 (see :func:`to_view`).

    inline_label : False when the plot's legend names the mark (a label drawn on a horizontal line sits
    over the data of a time series).
    """
    pen = make_pen(m.style)
    horizontal_value = m.kind in ("hline", "hspan")
    value = float(to_view(np.array([m.value]), log_y if horizontal_value else log_x)[0])
    value2 = None
    if m.value2 is not None:
        value2 = float(to_view(np.array([m.value2]),
                               log_y if (horizontal_value or m.kind in ("point", "text")) else log_x)[0])
    if not np.isfinite(value) or (m.value2 is not None and not np.isfinite(value2 or np.nan)):
        return None  # e.g. a zero line on a log axis
    m = Mark(m.kind, value, value2, label=m.label if inline_label or m.kind not in ("hline", "vline") else "",
             role=m.role, style=m.style)
    # labels of vertical lines near the top, of horizontal lines near the left (legends sit top right)
    label_opts = {"position": 0.92 if m.kind == "vline" else 0.04, "color": m.style.colour, "movable": False,
                  "fill": (255, 255, 255, 200), "anchors": [(0, 1), (0, 1)] if m.kind == "hline" else None}
    if label_opts["anchors"] is None:
        del label_opts["anchors"]
    if m.kind in ("vline", "hline"):
        item = pg.InfiniteLine(pos=m.value, angle=90 if m.kind == "vline" else 0, pen=pen,
                               movable=movable, label=m.label or None, labelOpts=label_opts)
        if movable:
            item.setHoverPen(pg.mkPen(m.style.colour, width=m.style.width + 2))
    elif m.kind in ("vspan", "hspan"):
        v2 = m.value if m.value2 is None else m.value2
        item = pg.LinearRegionItem(
            values=(m.value, v2),
            orientation="vertical" if m.kind == "vspan" else "horizontal",
            brush=qcolour(m.style.colour, 0.15), pen=pen, movable=movable,
        )
        item.setZValue(-10)
    elif m.kind == "point":
        item = pg.ScatterPlotItem([m.value], [m.value2 if m.value2 is not None else 0.0],
                                  symbol=_SYMBOL.get(m.style.marker or "o", "o"),
                                  size=m.style.marker_size + 4, brush=qcolour(m.style.colour),
                                  pen=pg.mkPen("#000000"))
    elif m.kind == "text":
        item = pg.TextItem(m.label, color=m.style.colour, anchor=(0, 1))
        item.setPos(m.value, m.value2 if m.value2 is not None else 0.0)
    else:
        return None
    plot.addItem(item, ignoreBounds=m.kind in ("vline", "hline", "text"))
    return item


def _has_labels(ps: PlotSpec) -> bool:
    return any(getattr(it, "label", "") for it in ps.items if not isinstance(it, Mark | Image))


def _legend_sample(legend: pg.LegendItem, m: Mark) -> None:
    """A legend entry for a line or shaded span (their own labels would sit on the data)."""
    if m.kind in ("hline", "vline"):
        sample = pg.PlotDataItem([], [], pen=make_pen(m.style))
    else:
        sample = pg.ScatterPlotItem(symbol="s", size=12, brush=qcolour(m.style.colour, max(m.style.alpha, 0.35)),
                                    pen=pg.mkPen(qcolour(m.style.colour, 0.8)))
    legend.addItem(sample, m.label)
    legend._phasewake_samples = [*getattr(legend, "_phasewake_samples", []), sample]  # keep them alive


class FigureView(QtWidgets.QWidget):
    """A widget that draws one FigureSpec (or a plain message when there is none).

    Signals
    -------
    cursorDragged(float)
        The user dragged the cursor line on a time axis to this time (ps).
    markMoved(object, float, object)
        A movable mark (see ``movable_roles``) was dragged: (Mark, new value, new value2 or None).
    """

    cursorDragged = QtCore.Signal(float)
    markMoved = QtCore.Signal(object, float, object)

    def __init__(self, parent: QtWidgets.QWidget | None = None, *,
                 movable_roles: Sequence[str] = ()) -> None:
        super().__init__(parent)
        self.movable_roles = tuple(movable_roles)
        self.layout_widget = pg.GraphicsLayoutWidget()
        self.layout_widget.setBackground("w")
        self.message = QtWidgets.QLabel()
        self.message.setWordWrap(True)
        self.message.setAlignment(QtCore.Qt.AlignmentFlag.AlignCenter)
        self.message.setObjectName("panelMessage")
        self.caption = QtWidgets.QLabel()
        self.caption.setWordWrap(True)
        self.caption.setObjectName("figureCaption")
        self.caption.setTextInteractionFlags(QtCore.Qt.TextInteractionFlag.TextSelectableByMouse)
        self.stack = QtWidgets.QStackedWidget()
        self.stack.addWidget(self.message)
        self.stack.addWidget(self.layout_widget)
        lay = QtWidgets.QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.stack, 1)
        lay.addWidget(self.caption)
        self.spec: FigureSpec | None = None
        self.plots: list[RenderedPlot] = []
        self._cursor_time: float | None = None
        self._setting_cursor = False
        self.show_message("Nothing to show yet.")

    # ---- content ----------------------------------------------------------------------------
    def show_message(self, text: str) -> None:
        """Replace the figure by a plain sentence (analysis missing, failed, or still running)."""
        self.clear()
        self.message.setText(text)
        self.caption.setText("")
        self.stack.setCurrentWidget(self.message)

    def clear(self) -> None:
        self.layout_widget.clear()
        self.plots = []
        self.spec = None

    def show_figure(self, spec: FigureSpec) -> None:
        self.clear()
        self.spec = spec
        cols = spec.grid[1] if spec.grid else 1
        first_time: pg.PlotItem | None = None
        for i, ps in enumerate(spec.plots):
            row, col = divmod(i, cols)
            legend = None
            if ps.legend and ps.x_is_time and _has_labels(ps):
                # a time series fills its plot from edge to edge: its legend goes beside it, where it
                # hides no data (a legend inside covered the end of the trace) and takes no height
                cell = self.layout_widget.addLayout(row=row, col=col)
                cell.setContentsMargins(0, 0, 0, 0)
                plot = cell.addPlot(row=0, col=0)
                legend = pg.LegendItem(labelTextSize=f"{FONT_PT}pt", colCount=1)
                legend.setLabelTextColor("#000000")
                cell.addItem(legend, row=0, col=1)
                cell.layout.setColumnStretchFactor(0, 1)
                cell.layout.setColumnStretchFactor(1, 0)
                # as tall as its entries, at the top (stretched to the plot's height its rows drifted apart)
                legend.setSizePolicy(QtWidgets.QSizePolicy.Policy.Fixed, QtWidgets.QSizePolicy.Policy.Fixed)
                cell.layout.setAlignment(legend, QtCore.Qt.AlignmentFlag.AlignTop)
                plot.legend = legend  # PlotItem.addItem puts named items into plot.legend
            else:
                plot = self.layout_widget.addPlot(row=row, col=col)
            rp = self._draw_plot(plot, ps, outside_legend=legend)
            if ps.x_is_time:
                if first_time is None:
                    first_time = plot
                else:
                    plot.setXLink(first_time)
                self._add_cursor(rp)
            self.plots.append(rp)
        from phasewake.app.window.words import for_window

        self.caption.setText(for_window(spec.caption))
        self.caption.setVisible(bool(spec.caption))
        self.stack.setCurrentWidget(self.layout_widget)
        if self._cursor_time is not None:
            self.set_cursor_time(self._cursor_time)

    def _draw_plot(self, plot: pg.PlotItem, ps: PlotSpec, *, outside_legend: pg.LegendItem | None = None) -> RenderedPlot:
        rp = RenderedPlot(plot, ps)
        _style_axes(plot, ps)
        if outside_legend is None and ps.legend and _has_labels(ps):
            legend = plot.addLegend(offset=(-10, 10), labelTextSize=f"{FONT_PT}pt")
            legend.setBrush(pg.mkBrush(255, 255, 255, 210))
            legend.setPen(pg.mkPen("#999999"))
            legend.setLabelTextColor("#000000")
        log_x, log_y = ps.x.log, ps.y.log
        for it in ps.items:
            if isinstance(it, Line):
                rp.items.append(_draw_line(plot, it))
            elif isinstance(it, Band):
                rp.items.extend(_draw_band(plot, it, log_x=log_x, log_y=log_y))
            elif isinstance(it, Image):
                rp.items.append(_draw_image(plot, it))
            elif isinstance(it, Mark):
                movable = it.role in self.movable_roles
                # where the plot has a legend, lines and shaded spans are named there: a label drawn on the
                # line sat over the data or over the plot's note; a mark the user drags keeps its own label
                legend_obj = outside_legend if outside_legend is not None else plot.legend
                named_in_legend = (legend_obj is not None and bool(it.label) and not movable
                                   and it.kind in ("hline", "hspan", "vline", "vspan"))
                item = _draw_mark(plot, it, movable=movable, log_x=log_x, log_y=log_y,
                                  inline_label=not named_in_legend)
                if item is not None and named_in_legend:
                    _legend_sample(legend_obj, it)
                if item is not None and movable:
                    rp.movable_marks.append((it, item))
                    self._watch_mark(it, item, log=log_y if it.kind in ("hline", "hspan") else log_x)
        if ps.x.limits:
            plot.setXRange(*to_view(np.array(ps.x.limits, float), log_x), padding=0)
            plot.setAutoVisible(y=True)  # the y range follows the part of the data that is shown
        if ps.y.limits:
            plot.setYRange(*to_view(np.array(ps.y.limits, float), log_y), padding=0)
        if ps.aspect_equal:
            plot.setAspectLocked(True)
        if ps.note:
            note = pg.LabelItem(ps.note, size=f"{FONT_PT}pt", color="#000000")
            note.setParentItem(plot.vb)
            note.anchor(itemPos=(0, 0), parentPos=(0, 0), offset=(6, 4))
            note.setZValue(50)
        return rp

    def _watch_mark(self, mark: Mark, item: pg.GraphicsObject, *, log: bool = False) -> None:
        def data(v: float) -> float:
            return float(from_view(np.array([v]), log)[0])

        if isinstance(item, pg.InfiniteLine):
            item.sigPositionChangeFinished.connect(
                lambda line: self.markMoved.emit(mark, data(line.value()), None))
        elif isinstance(item, pg.LinearRegionItem):
            item.sigRegionChangeFinished.connect(
                lambda reg: self.markMoved.emit(mark, data(reg.getRegion()[0]), data(reg.getRegion()[1])))

    # ---- cursor -----------------------------------------------------------------------------
    def _add_cursor(self, rp: RenderedPlot) -> None:
        line = pg.InfiniteLine(angle=90, movable=True, pen=pg.mkPen(CURSOR_COLOUR, width=2),
                               hoverPen=pg.mkPen(CURSOR_COLOUR, width=4))
        line.setZValue(100)
        rp.plot.addItem(line, ignoreBounds=True)
        rp.cursor = line
        line.sigPositionChanged.connect(self._cursor_line_moved)

    def _cursor_line_moved(self, line: pg.InfiniteLine) -> None:
        if self._setting_cursor:
            return
        t = float(line.value())
        self.cursorDragged.emit(t)

    def set_cursor_time(self, time_ps: float) -> None:
        """Place the cursor on every time axis of this figure (no signal is emitted)."""
        self._cursor_time = time_ps
        self._setting_cursor = True
        try:
            for rp in self.plots:
                if rp.cursor is not None and rp.cursor.value() != time_ps:
                    rp.cursor.setValue(time_ps)
        finally:
            self._setting_cursor = False

    @property
    def time_plots(self) -> list[RenderedPlot]:
        return [rp for rp in self.plots if rp.spec.x_is_time]
