"""The analysis panels: Energy, Phase space, Correlation, Sampling, Crossings, Landscape.

Each panel draws the FigureSpecs of its :class:`~phasewake.app.window.analyses.PanelResult` (a
chooser picks one when there are several), shows the shared cursor on its time axes, and writes the
user's intent (cursor drags, selected events, dragged states) back to the shared model. A panel
never talks to a sibling panel: the model is the only link.
"""

from __future__ import annotations

import html

import numpy as np
import pyqtgraph as pg
from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.app.window.analyses import EventRow, PanelResult, Trace
from phasewake.app.window.model import WindowModel
from phasewake.app.window.render import CURSOR_COLOUR, FigureView
from phasewake.app.window.words import for_window
from phasewake.core.analyses import explain
from phasewake.core.figures.spec import LEVEL_STYLE, FigureSpec, Mark

LEVEL_SYMBOL = {"ok": "\u25cf", "caution": "\u25b2", "problem": "\u2716", "info": "\u25a0"}  # shape + word
DEFAULT_TRAIL = 60  # frames of recent path drawn behind the current point


EXPLAIN_SCHEME = "explain:"  # anchors of the notes strip: explain:<verdict kind or number.*>
EXPLAIN_MARK = "(?)"  # beside every explained title (plain characters: every font has them)


def explain_link(kind: str, text: str) -> str:
    """``text`` as a link whose tooltip (and click) shows the explanation of ``kind``."""
    return (f'<a href="{EXPLAIN_SCHEME}{html.escape(kind)}" style="color:#000000; text-decoration:none">'
            f"{text}</a>")


def verdict_html(level: str, title: str, message: str, kind: str = "") -> str:
    colour = LEVEL_STYLE.get(level, LEVEL_STYLE["info"])[0]
    sym = LEVEL_SYMBOL.get(level, "\u25a0")
    head = f"<b>{html.escape(for_window(title))}</b>"
    if kind and explain.explanation(kind) is not None:
        head = explain_link(kind, head + f' <span style="color:#0072B2">{EXPLAIN_MARK}</span>')
    return (f'<span style="color:{colour}; font-weight:bold">{sym} {html.escape(level)}</span> '
            f"{head}: {html.escape(for_window(message))}")


class ExplainingNotes(QtWidgets.QTextBrowser):
    """The verdicts and notes strip: hovering an explained title shows its explanation as a tooltip
    (the text of ``core.explain.explanation_html``); clicking it emits ``explainRequested(kind)``."""

    explainRequested = QtCore.Signal(str)

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.setOpenLinks(False)
        self.setOpenExternalLinks(False)
        self.anchorClicked.connect(self._clicked)

    @staticmethod
    def kind_of(anchor: str) -> str:
        return anchor[len(EXPLAIN_SCHEME):] if anchor.startswith(EXPLAIN_SCHEME) else ""

    def tooltip_at(self, pos: QtCore.QPoint) -> str:
        """The tooltip for a point of the viewport: the explanation under it, or empty."""
        kind = self.kind_of(self.anchorAt(pos))
        return explain.explanation_html(kind) if kind else ""

    def anchors(self) -> list[tuple[str, QtCore.QPoint]]:
        """Every explain link in the text with a viewport point inside it (tests walk these)."""
        found = []
        doc = self.document()
        block = doc.begin()
        while block.isValid():
            it = block.begin()
            while not it.atEnd():
                frag = it.fragment()
                href = frag.charFormat().anchorHref()
                if frag.isValid() and href.startswith(EXPLAIN_SCHEME) and frag.length() > 1:
                    cur = QtGui.QTextCursor(doc)
                    cur.setPosition(frag.position() + 1)
                    found.append((self.kind_of(href), self.cursorRect(cur).center()))
                it += 1
            block = block.next()
        return found

    def viewportEvent(self, event: QtCore.QEvent) -> bool:  # noqa: N802 - Qt override
        if event.type() == QtCore.QEvent.Type.ToolTip:
            help_event = event  # a QHelpEvent
            text = self.tooltip_at(help_event.pos())  # type: ignore[attr-defined]
            if text:
                QtWidgets.QToolTip.showText(help_event.globalPos(), text, self)  # type: ignore[attr-defined]
            else:
                QtWidgets.QToolTip.hideText()
                event.ignore()
            return True
        return super().viewportEvent(event)

    def _clicked(self, url: QtCore.QUrl) -> None:
        kind = self.kind_of(url.toString())
        if kind:
            self.explainRequested.emit(kind)


class SideNote(QtWidgets.QWidget):
    """The explanation of one verdict or number, beside the notes strip, until closed."""

    def __init__(self, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.kind = ""
        self.text = QtWidgets.QTextBrowser()
        self.text.setObjectName("sideNote")
        close = QtWidgets.QToolButton()
        close.setText("\u2715")
        close.setToolTip("Close the explanation")
        close.clicked.connect(self.hide)
        lay = QtWidgets.QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.text, 1)
        lay.addWidget(close, 0, QtCore.Qt.AlignmentFlag.AlignTop)
        self.setMinimumWidth(320)
        self.hide()

    def explain(self, kind: str) -> None:
        self.kind = kind
        self.text.setHtml(explain.explanation_html(kind))
        self.show()


class Panel(QtWidgets.QWidget):
    """Base of every panel: a figure chooser, a verdict/notes strip and the figure view."""

    name = "Panel"
    movable_roles: tuple[str, ...] = ()
    figureChosen = QtCore.Signal(str)

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.model = model
        self.result: PanelResult | None = None
        self.error: str | None = None  # the last analysis error shown in this panel, if any
        self.view = FigureView(movable_roles=self.movable_roles)
        self.chooser = QtWidgets.QComboBox()
        self.chooser.setSizeAdjustPolicy(QtWidgets.QComboBox.SizeAdjustPolicy.AdjustToContents)
        self.chooser.currentIndexChanged.connect(self._chooser_changed)
        self.chooser_label = QtWidgets.QLabel("Show:")
        self.notes = ExplainingNotes()  # verdicts and notes; scrolls when there are many
        self.notes.setObjectName("panelNotes")
        self.notes.setMaximumHeight(120)
        self.notes.setFrameShape(QtWidgets.QFrame.Shape.NoFrame)
        self.notes.hide()
        self._note_lines: list[str] = []
        self._numbers_line = ""  # links explaining the numbers of the figure on screen
        self.side_note = SideNote()
        self.notes.explainRequested.connect(self.side_note.explain)
        top = QtWidgets.QHBoxLayout()
        top.addWidget(self.chooser_label)
        top.addWidget(self.chooser)
        top.addStretch(1)
        self.top_bar = top
        self.body = QtWidgets.QVBoxLayout(self)
        self.body.setContentsMargins(4, 4, 4, 4)
        self.body.addLayout(top)
        strip = QtWidgets.QHBoxLayout()
        strip.addWidget(self.notes, 3)
        strip.addWidget(self.side_note, 2)
        self.body.addLayout(strip)
        self.body.addWidget(self.view, 1)
        self._set_chooser_visible(False)
        self._marker: pg.ScatterPlotItem | None = None
        self._trail: pg.PlotDataItem | None = None
        self._highlight: pg.PlotDataItem | None = None
        self.view.cursorDragged.connect(self.model.set_cursor_time)
        self.model.cursorChanged.connect(self._on_cursor)
        self.view.show_message(f"The {self.name} panel shows its results here once a run is open.")

    # ---- states shown while a job runs --------------------------------------------------------
    def show_busy(self, text: str = "") -> None:
        if self.result is None or not self.result.figures:
            self.view.show_message(text or f"Computing the {self.name} panel\u2026")

    def _clear(self) -> None:
        """No result, no error, no chooser, no notes: the panel before a message takes it."""
        self.result = None
        self.error = None
        self._set_chooser_visible(False)
        self._note_lines = []
        self._numbers_line = ""
        self._set_notes()

    def show_loading(self, run_label: str, *, has_frames: bool = True) -> None:
        """A run is listed and being read: say so (its figures replace this when computed)."""
        self._clear()
        what = "its frames are being read" if has_frames else "its energy table is being read"
        self.view.show_message(f"Loading {run_label}: {what}. The {self.name} panel is drawn when they are "
                               "ready (the progress bar below shows how far it is).")

    def show_error(self, text: str) -> None:
        self.result = None
        self.error = text
        self.view.show_message(f"The {self.name} analysis could not run:\n{for_window(text)}")
        self._note_lines = []
        self._numbers_line = ""
        self._set_notes()

    def show_cancelled(self) -> None:
        if self.result is None or not self.result.figures:
            self.view.show_message(f"The {self.name} computation was cancelled. Press F5 to compute it again.")
        else:
            self.add_note("The new computation was cancelled: the figures are from before. Press F5 to "
                          "compute again.")

    def show_empty(self) -> None:
        self._clear()
        self.view.show_message("No run is open. Open run files with File \u25b8 Open run files\u2026 "
                               "or drop them on the window.")

    # ---- results ------------------------------------------------------------------------------
    def show_result(self, result: PanelResult) -> None:
        self.result = result
        self.error = None
        self._show_notes(result)
        self.chooser.blockSignals(True)
        self.chooser.clear()
        for fig in result.figures:
            self.chooser.addItem(fig.title, fig.key)
        self.chooser.blockSignals(False)
        self._set_chooser_visible(len(result.figures) > 1)
        if not result.figures:
            self.view.show_message(for_window(result.message) or f"The {self.name} analysis gave nothing to draw.")
            return
        wanted = self.model.choice(f"{self.name}.figure")
        idx = self.chooser.findData(wanted) if wanted else -1
        self.chooser.blockSignals(True)
        self.chooser.setCurrentIndex(max(idx, 0))
        self.chooser.blockSignals(False)
        self._draw(result.figures[max(idx, 0)])

    def add_note(self, text: str) -> None:
        """Add a plain line under the verdicts (e.g. why an extra analysis failed)."""
        self._note_lines.append(f'<span style="color:#D55E00">{html.escape(for_window(text))}</span>')
        self._set_notes()

    def _lead_lines(self) -> list[str]:
        """HTML shown above the verdicts (a panel's own summary, e.g. the Crossings rates)."""
        return []

    def _set_notes(self) -> None:
        lines = self._lead_lines() + ([self._numbers_line] if self._numbers_line else []) + self._note_lines
        self.notes.setHtml("<br>".join(lines))
        self.notes.setVisible(bool(lines))
        self._fit_notes()

    def _explain_numbers(self, fig: FigureSpec | None) -> None:
        """A line of links explaining the numbers of ``fig``; the caption's tooltip says the same."""
        kinds = explain.kinds_for_figure(fig.key) if fig is not None else ()
        links = [explain_link(k, f'<span style="color:#0072B2">{EXPLAIN_MARK} {html.escape(explain.EXPLANATIONS[k].title)}'
                                 "</span>") for k in kinds]
        self._numbers_line = ("<i>About the numbers</i> (hover or click): " + " \u00b7 ".join(links)) if links else ""
        self.view.caption.setToolTip("".join(explain.explanation_html(k) for k in kinds))
        self._set_notes()

    def _fit_notes(self) -> None:
        """As tall as the text, up to a third of the panel (the rest scrolls)."""
        if not self._note_lines and not self._numbers_line:
            return
        doc = self.notes.document()
        width = self.notes.viewport().width() if self.notes.isVisible() else self.width() - 30
        doc.setTextWidth(max(200, width))
        cap = 120 if self.height() < 700 else int(0.25 * self.height())  # the figure keeps most of a small panel
        self.notes.setFixedHeight(int(min(cap, doc.size().height() + 8)))

    def resizeEvent(self, event: QtGui.QResizeEvent) -> None:  # noqa: N802 - Qt override
        super().resizeEvent(event)
        self._fit_notes()

    def notes_text(self) -> str:
        return self.notes.toPlainText()

    def add_result(self, extra: PanelResult) -> None:
        """Add the figures (and traces, verdicts) of an extra job to what the panel shows."""
        import dataclasses

        if not extra.figures and not extra.verdicts:
            return
        if self.result is None or not self.result.figures:
            self.show_result(extra)
            return
        keys = {f.key for f in extra.figures}
        merged = dataclasses.replace(
            self.result,
            figures=tuple(f for f in self.result.figures if f.key not in keys) + extra.figures,
            traces={**self.result.traces, **extra.traces},
            verdicts=self.result.verdicts + extra.verdicts,
            info={**self.result.info, **extra.info})
        current = self.view.spec.key if self.view.spec is not None else None
        self.result = merged
        self.chooser.blockSignals(True)
        self.chooser.clear()
        for fig in merged.figures:
            self.chooser.addItem(fig.title, fig.key)
        idx = max(0, self.chooser.findData(current))
        self.chooser.setCurrentIndex(idx)
        self.chooser.blockSignals(False)
        self._set_chooser_visible(len(merged.figures) > 1)
        self._show_notes(merged)
        if current is None or self.chooser.findData(current) < 0:
            self._draw(merged.figures[idx])
        wanted = self.model.choice(f"{self.name}.figure")
        if wanted in keys and wanted != current:  # e.g. a session that was showing a PCA figure
            self.chooser.setCurrentIndex(self.chooser.findData(wanted))

    def _show_notes(self, result: PanelResult) -> None:
        # problems first, so the worst news is what a user sees without scrolling
        order = {"problem": 0, "caution": 1, "ok": 2, "info": 3}
        ranked = sorted(result.verdicts, key=lambda v: order.get(v.level, 4))
        self._note_lines = [verdict_html(v.level, v.title, v.message, getattr(v, "kind", "")) for v in ranked]
        if result.message and result.figures:
            self._note_lines.append(html.escape(for_window(result.message)))
        self._set_notes()

    def _set_chooser_visible(self, visible: bool) -> None:
        self.chooser.setVisible(visible)
        self.chooser_label.setVisible(visible)

    def _chooser_changed(self, index: int) -> None:
        if self.result is None or not 0 <= index < len(self.result.figures):
            return
        fig = self.result.figures[index]
        self.model.set_choice(f"{self.name}.figure", fig.key)
        self._draw(fig)
        self.figureChosen.emit(fig.key)

    def current_figure(self) -> FigureSpec | None:
        return self.view.spec

    def _draw(self, fig: FigureSpec) -> None:
        self._marker = self._trail = self._highlight = None
        self.view.show_figure(fig)
        self._explain_numbers(fig)
        self.view.set_cursor_time(self.model.cursor_time_ps)
        self._after_draw(fig)
        self._update_trace()

    def _after_draw(self, fig: FigureSpec) -> None:
        """Hook for subclasses (extra items on the plots)."""

    # ---- cursor -------------------------------------------------------------------------------
    def current_trace(self) -> Trace | None:
        if self.result is None or self.view.spec is None:
            return None
        return self.result.traces.get(self.view.spec.key)

    def _on_cursor(self, frame: int) -> None:
        self.view.set_cursor_time(self.model.cursor_time_ps)
        self._update_trace()

    def _update_trace(self) -> None:
        tr = self.current_trace()
        if tr is None or not self.view.plots or tr.time_ps.size == 0:
            return
        plot = self.view.plots[min(tr.plot_index, len(self.view.plots) - 1)].plot
        if self._marker is None:
            self._trail = pg.PlotDataItem(pen=pg.mkPen(CURSOR_COLOUR, width=2))
            self._marker = pg.ScatterPlotItem(symbol="o", size=13, brush=pg.mkBrush(CURSOR_COLOUR),
                                              pen=pg.mkPen("#000000", width=1.5))
            self._trail.setZValue(90)
            self._marker.setZValue(91)
            plot.addItem(self._trail, ignoreBounds=True)
            plot.addItem(self._marker, ignoreBounds=True)
        t = self.model.cursor_time_ps
        i = int(np.clip(np.searchsorted(tr.time_ps, t), 0, tr.time_ps.size - 1))
        inside = tr.time_ps[0] <= t <= tr.time_ps[-1]
        n = int(self.model.choice("trail_frames", DEFAULT_TRAIL) or 0)
        if inside:
            self._marker.setData([tr.x[i]], [tr.y[i]])
            lo = max(0, i - n)
            self._trail.setData(tr.x[lo:i + 1], tr.y[lo:i + 1]) if n > 0 else self._trail.setData([], [])
        else:  # the cursor is outside the analysis window: nothing to mark
            self._marker.setData([], [])
            self._trail.setData([], [])

    def highlight_segment(self, start_ps: float | None, end_ps: float | None) -> None:
        """Draw the trace between two times thicker (a selected crossing's path)."""
        tr = self.current_trace()
        if tr is None or not self.view.plots:
            return
        plot = self.view.plots[min(tr.plot_index, len(self.view.plots) - 1)].plot
        if self._highlight is None:
            self._highlight = pg.PlotDataItem(pen=pg.mkPen("#D55E00", width=4))
            self._highlight.setZValue(80)
            plot.addItem(self._highlight, ignoreBounds=True)
        if start_ps is None or end_ps is None:
            self._highlight.setData([], [])
            return
        sel = (tr.time_ps >= start_ps) & (tr.time_ps <= end_ps)
        self._highlight.setData(tr.x[sel], tr.y[sel])

    def highlighted_points(self) -> int:
        if self._highlight is None:
            return 0
        x, _ = self._highlight.getData()
        return 0 if x is None else len(x)


class EnergyPanel(Panel):
    name = "Energy"


class PhaseSpacePanel(Panel):
    name = "Phase space"

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(model, parent)
        self.trail = QtWidgets.QCheckBox("Trail the recent path")
        self.trail.setToolTip("Draw the last frames before the cursor behind the current point (T)")
        self.trail.setChecked(True)
        self.trail.toggled.connect(
            lambda on: self.model.set_choice("trail_frames", DEFAULT_TRAIL if on else 0))
        self.top_bar.addWidget(self.trail)
        model.choicesChanged.connect(self._on_choice)

    def _on_choice(self, key: str) -> None:
        if key == "trail_frames":
            on = bool(self.model.choice("trail_frames", DEFAULT_TRAIL))
            if self.trail.isChecked() != on:
                self.trail.setChecked(on)
            self._update_trace()
        elif key == "highlight_ps":
            seg = self.model.choice("highlight_ps")
            self.highlight_segment(*(seg if seg else (None, None)))

    def _after_draw(self, fig: FigureSpec) -> None:
        seg = self.model.choice("highlight_ps")
        if seg:
            self.highlight_segment(*seg)


class CorrelationPanel(Panel):
    name = "Correlation"


class SamplingPanel(Panel):
    name = "Sampling"


class CrossingsPanel(Panel):
    """Figures plus the event table; selecting a row moves the cursor to that crossing."""

    name = "Crossings"
    COLUMNS = ("#", "time (ps)", "frame", "kind", "direction", "from \u2192 to", "velocity", "path (ps)")
    COLUMN_TIPS = (
        "Number of the crossing of the dividing surface, in time order",
        "Time of the crossing, interpolated linearly between the two frames around it (ps)",
        "The frame nearest to the crossing",
        "transition: the coordinate reaches the other core state next; recrossing: it comes back to the "
        "state it left (core-set assignment, Buchete and Hummer 2008); censored: the run ends or starts "
        "before the outcome is known",
        "+ when the coordinate increases through the dividing surface, \u2212 when it decreases",
        "Core state left and core state reached next",
        "dq/dt of the coordinate at the crossing (from the stored velocities, or from frame differences "
        "when the run has none)",
        "Transition path time: from leaving one core state to entering the other, for transitions (ps)",
    )

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(model, parent)
        self.filter = QtWidgets.QComboBox()
        self.filter.addItem("all crossings", "all")
        self.filter.addItem("transitions only", "transition")
        self.filter.addItem("recrossings only", "recrossing")
        self.filter.currentIndexChanged.connect(self._fill_table)
        self.table = QtWidgets.QTableWidget(0, len(self.COLUMNS))
        self.table.setHorizontalHeaderLabels(list(self.COLUMNS))
        for c, tip in enumerate(self.COLUMN_TIPS):
            self.table.horizontalHeaderItem(c).setToolTip(tip)
        self.table.setSelectionBehavior(QtWidgets.QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QtWidgets.QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setEditTriggers(QtWidgets.QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.verticalHeader().hide()
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.itemSelectionChanged.connect(self._row_selected)
        box = QtWidgets.QWidget()
        lay = QtWidgets.QVBoxLayout(box)
        lay.setContentsMargins(0, 0, 0, 0)
        row = QtWidgets.QHBoxLayout()
        row.addWidget(QtWidgets.QLabel("Show:"))
        row.addWidget(self.filter)
        row.addStretch(1)
        lay.addLayout(row)
        lay.addWidget(self.table)
        # Under the figure: the rates and checks (the numbers the crossings verb prints) and the event
        # table, as tabs in a splitter the user can drag. The verdicts are not squeezed into a strip of a
        # few lines above the figure, and the table does not squeeze the time plot.
        self.body.removeWidget(self.view)
        self.notes.setParent(None)
        self.notes.setMaximumHeight(16_777_215)
        self.notes.setMinimumHeight(60)
        self.lower = QtWidgets.QTabWidget()
        self.lower.setDocumentMode(True)
        self.lower.addTab(self.notes, "Rates and checks")
        self.lower.addTab(box, "Events")
        split = QtWidgets.QSplitter(QtCore.Qt.Orientation.Vertical)
        split.setChildrenCollapsible(False)
        split.addWidget(self.view)
        split.addWidget(self.lower)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        split.setSizes([480, 260])
        self.splitter = split
        self.body.addWidget(split, 1)
        self._rows: list[EventRow] = []
        self._rates_html = ""

    def _lead_lines(self) -> list[str]:
        return [self._rates_html] if self._rates_html else []

    def _fit_notes(self) -> None:
        """The notes fill their tab (it scrolls only when they are longer than the tab)."""
        self.notes.setVisible(True)

    def rates_text(self) -> str:
        """The rates as plain text (what the Rates and checks tab shows first)."""
        doc = QtGui.QTextDocument()
        doc.setHtml(self._rates_html)
        return doc.toPlainText()

    def show_result(self, result: PanelResult) -> None:
        from phasewake.core.figures import plots

        res = result.info.get("crossings")
        self._rates_html = ""
        if res is not None:
            rows = "".join(f"<tr><td style='padding-right:10px'><b>{html.escape(k)}</b></td><td>{html.escape(v)}</td></tr>"
                           for k, v in plots.crossings_rate_rows(res))
            self._rates_html = f"<table cellspacing='2'>{rows}</table>"
        super().show_result(result)
        self._fill_table()

    def show_error(self, text: str) -> None:
        self._rates_html = ""
        super().show_error(text)
        self._fill_table()

    def show_empty(self) -> None:
        self._rates_html = ""
        super().show_empty()
        self._fill_table()

    def show_loading(self, run_label: str, *, has_frames: bool = True) -> None:
        self._rates_html = ""
        super().show_loading(run_label, has_frames=has_frames)
        self._fill_table()

    def visible_events(self) -> list[EventRow]:
        return list(self._rows)

    def _fill_table(self) -> None:
        events = self.result.events if self.result is not None else ()
        kind = self.filter.currentData()
        self._rows = [e for e in events if kind in (None, "all") or e.kind == kind]
        self.table.blockSignals(True)
        self.table.setRowCount(len(self._rows))
        for r, e in enumerate(self._rows):
            vel = "" if e.velocity is None else f"{e.velocity:.3g} {e.velocity_unit}".strip()
            cells = (str(e.index), f"{e.time_ps:.4g}", str(e.frame), e.kind, "+" if e.direction > 0 else "\u2212",
                     f"{e.from_state} \u2192 {e.to_state}" if e.from_state or e.to_state else "",
                     vel, "" if e.duration_ps is None else f"{e.duration_ps:.3g}")
            for c, text in enumerate(cells):
                item = QtWidgets.QTableWidgetItem(text)
                if c == 3:
                    item.setForeground(QtGui.QColor({"transition": "#0072B2", "recrossing": "#D55E00"}
                                                    .get(e.kind, "#555555")))
                self.table.setItem(r, c, item)
        self.table.blockSignals(False)
        self.table.resizeColumnsToContents()
        n = len(events)
        kinds = {k: sum(1 for e in events if e.kind == k) for k in ("transition", "recrossing", "censored")}
        words = {"transition": "transitions", "recrossing": "recrossings", "censored": "unfinished at an end"}
        parts = ", ".join(f"{kinds[k]} {words[k]}" for k in words if kinds[k])
        self.lower.setTabText(1, f"Events ({n}: {parts})" if n else "Events")
        self.lower.setTabToolTip(1, "Crossings of the dividing surface: transitions (they commit to the other "
                                    "state), recrossings (back before committing), and crossings whose outcome "
                                    "the run does not show (before the first or after the last core visit)")

    def select_event(self, row: int) -> None:
        self.table.selectRow(row)

    def _row_selected(self) -> None:
        rows = self.table.selectionModel().selectedRows()
        if not rows:
            return
        e = self._rows[rows[0].row()]
        self.model.set_cursor_time(e.time_ps)
        if e.start_ps is not None and e.end_ps is not None:
            self.model.set_choice("highlight_ps", (e.start_ps, e.end_ps))


class LandscapePanel(Panel):
    """The free-energy profile; its state and dividing-surface marks can be dragged."""

    name = "Landscape"
    movable_roles = ("state", "surface")

    def __init__(self, model: WindowModel, parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(model, parent)
        self.view.markMoved.connect(self._mark_moved)
        hint = QtWidgets.QLabel("Drag the states or the dividing surface to redefine them.")
        hint.setStyleSheet("color: #555555")
        self.top_bar.addWidget(hint)

    def _mark_moved(self, mark: Mark, value: float, value2: object) -> None:
        # record every movable mark as it now stands, so moving one keeps the others where they are
        marks: dict[str, list[float]] = {}
        for rp in self.view.plots:
            for m, item in rp.movable_marks:
                if isinstance(item, pg.InfiniteLine):
                    marks[f"{m.role}:{m.label}"] = [float(item.value())]
                elif isinstance(item, pg.LinearRegionItem):
                    marks[f"{m.role}:{m.label}"] = [float(v) for v in item.getRegion()]
        marks[f"{mark.role}:{mark.label}"] = [value, value2] if value2 is not None else [value]  # type: ignore[list-item]
        self.model.set_choice("landscape_marks", marks)


PANEL_CLASSES: dict[str, type[Panel]] = {
    "Energy": EnergyPanel,
    "Phase space": PhaseSpacePanel,
    "Correlation": CorrelationPanel,
    "Sampling": SamplingPanel,
    "Crossings": CrossingsPanel,
    "Landscape": LandscapePanel,
}
