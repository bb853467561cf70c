"""Every verdict and derived number shown in the window explains itself.

The window's tooltip for each verdict shown must be exactly the explanation the analysis registered
(core.verdicts.EXPLANATIONS, rendered by core.explain), so the words a user reads on screen are those
of the report and of `phasewake audit --explain`. The check goes through Qt: the point of each link is
found in the laid-out text and a real tooltip event is sent there.
"""

from pathlib import Path

import pytest
from PySide6 import QtCore, QtGui, QtWidgets

from phasewake.app.window.main import MainWindow, delete_now
from phasewake.core.analyses import explain
from phasewake.core.analyses.verdicts import EXPLANATIONS

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(scope="module")
def window(qapp, tmp_path_factory):
    sample = ROOT / "sample_data" / "dimer_nve.h5md"
    folder = tmp_path_factory.mktemp("explain")
    w = MainWindow(settings=QtCore.QSettings(str(folder / "s.ini"), QtCore.QSettings.Format.IniFormat))
    w.resize(1300, 850)
    w.show()
    w.open_paths([str(sample)])
    assert w.wait_idle(90_000)
    assert not w.messages, w.messages
    yield w
    delete_now(w)  # now, not during a later test's event loop


def _tooltip_through_qt(notes, point) -> str:
    QtWidgets.QToolTip.hideText()
    event = QtGui.QHelpEvent(QtCore.QEvent.Type.ToolTip, point, notes.viewport().mapToGlobal(point))
    QtWidgets.QApplication.sendEvent(notes.viewport(), event)
    return QtWidgets.QToolTip.text()


@pytest.mark.slow
def test_every_verdict_shown_has_its_explanation_as_tooltip(window):
    walked = set()
    for name, panel in window.panels.items():
        window.tabs.setCurrentWidget(panel)
        QtWidgets.QApplication.processEvents()
        if panel.result is None:
            continue
        anchors = dict(panel.notes.anchors())
        for v in panel.result.verdicts:
            assert v.kind in EXPLANATIONS, f"{name}: verdict kind {v.kind} has no explanation"
            assert v.kind in anchors, f"{name}: verdict {v.kind} shown without its explanation link"
            expected = explain.explanation_html(v.kind)
            assert panel.notes.tooltip_at(anchors[v.kind]) == expected
            assert _tooltip_through_qt(panel.notes, anchors[v.kind]) == expected
            # the tooltip carries the registered words: what, method (with the paper), threshold, advice
            plain = explain.plain_of_html(expected)
            e = EXPLANATIONS[v.kind]
            for part in (e.what, e.method, e.threshold, e.advice):
                assert part in plain
            walked.add(v.kind)
    # the sample run shows the audit, correlation, sampling and crossings verdicts
    assert {"energy.drift", "energy.fluctuation_ratio", "sampling.rhat", "sampling.ess",
            "crossings.few_transitions"} <= walked


@pytest.mark.slow
def test_numbers_of_every_figure_are_explained_and_clicking_opens_a_side_note(window):
    explained = set()
    for panel in window.panels.values():
        if panel.result is None:
            continue
        window.tabs.setCurrentWidget(panel)
        for i in range(panel.chooser.count()):
            panel.chooser.setCurrentIndex(i)
            QtWidgets.QApplication.processEvents()
            fig = panel.current_figure()
            kinds = explain.kinds_for_figure(fig.key)
            anchors = panel.notes.anchors()
            for kind in kinds:
                points = [p for k, p in anchors if k == kind]
                assert points, f"{fig.key}: no link explaining {kind}"
                assert panel.notes.tooltip_at(points[-1]) == explain.explanation_html(kind)
                explained.add(kind)
            # the caption's tooltip says the same
            assert panel.view.caption.toolTip() == "".join(explain.explanation_html(k) for k in kinds)
    for kind in ("number.statistical_inefficiency", "number.tau_int", "number.transmission_coefficient",
                 "number.rate", "number.free_energy", "number.explained_variance", "number.kinetic_temperature",
                 "temperature.dof", "energy.drift"):
        assert kind in explained, kind
    panel = window.panels["Correlation"]
    window.tabs.setCurrentWidget(panel)
    panel.notes.anchorClicked.emit(QtCore.QUrl("explain:number.tau_int"))
    assert panel.side_note.isVisible() and panel.side_note.kind == "number.tau_int"
    assert "Sokal" in panel.side_note.text.toPlainText()


def test_explanations_of_numbers_are_complete_and_cite_their_method():
    numbers = [k for k in EXPLANATIONS if k.startswith("number.")]
    assert len(numbers) >= 15
    for k in numbers:
        text = explain.explanation_text(k)
        assert text.count("\n") == 4, k  # title + four parts
    # papers named beside the methods (the references of core/analyses/correlation/, crossings/, velocity/)
    assert "Sokal" in EXPLANATIONS["number.statistical_inefficiency"].method
    assert "Flyvbjerg" in EXPLANATIONS["number.block_sem"].method
    assert "Yeh" in EXPLANATIONS["number.diffusion"].method
    assert "Buchete" in EXPLANATIONS["number.rate"].method
    assert "Chandler" in EXPLANATIONS["number.transmission_coefficient"].method
    assert "Amadei" in EXPLANATIONS["number.explained_variance"].method


def test_threshold_words_show_the_configured_limits():
    from phasewake.core.analyses import verdicts

    explain.explanation("energy.fluctuation_ratio")
    old = verdicts.THRESHOLDS["energy.fluctuation_ratio"]
    try:
        verdicts.configure("energy.fluctuation_ratio", caution=0.0123)
        assert "caution above 0.0123" in explain.threshold_words("energy.fluctuation_ratio")
        assert old.source in explain.threshold_words("energy.fluctuation_ratio")
    finally:
        verdicts.THRESHOLDS["energy.fluctuation_ratio"] = old
    assert explain.explanation_text("no.such.kind") == ""


@pytest.mark.slow
def test_event_table_columns_say_what_they_hold(window):
    table = window.panels["Crossings"].table
    for c in range(table.columnCount()):
        assert len(table.horizontalHeaderItem(c).toolTip()) > 20, table.horizontalHeaderItem(c).text()
