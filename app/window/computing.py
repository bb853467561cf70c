"""Computing the panels: when to recompute, which jobs to start, and what each job does when it ends.

A part of :class:`~phasewake.app.window.main.MainWindow` (it uses the window's model, panels, job runner
and status line). Every job is started with its own completion handler (``JobRunner.start(on_done=...)``):
the energy table, the audit, each panel, the extra figures of a panel (principal components) and the
shared read of the frames each have a handler below, so a newcomer finds what happens to a result
beside the code that asked for it.

The order after a run is opened or the time window changes: the energy table first (no analysis, drawn
at once), then one shared read of the frames into the result cache, then every panel's own job.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import partial

from PySide6 import QtCore, QtWidgets

from phasewake.app.window.analyses import (
    EXTRA_JOBS,
    FIRST_JOB,
    PANEL_JOBS,
    PANELS,
    AnalysisContext,
    PanelResult,
    shared_frames_job,
)
from phasewake.app.window.panels import Panel
from phasewake.app.window.workers import JobOutcome

# Choices that change what an analysis computes (others, like the trail length, only redraw).
RECOMPUTE_CHOICES: dict[str, tuple[str, ...]] = {
    "landscape_marks": ("Crossings", "Landscape"),
    "coordinate2": ("Phase space",),
}


class PanelComputing:
    """Recomputing the panels of the current run in the background (part of MainWindow)."""

    def _choice_changed(self, key: str) -> None:
        if key in RECOMPUTE_CHOICES and self.model.current is not None:
            self.schedule_recompute(RECOMPUTE_CHOICES[key])

    def _runs_changed(self) -> None:
        # the Sampling panel compares the current run with the others (R-hat across replicas)
        if self.model.current is not None and self._computed_for is self.model.current.run:
            self.schedule_recompute(("Sampling",))

    def schedule_recompute(self, panels: Sequence[str] | None = None) -> None:
        """Recompute soon (debounced: a dragged window recomputes once it rests)."""
        pending = self._recompute_timer.isActive()
        previous = self._recompute_only
        if not panels or (pending and previous is None):
            self._recompute_only = None
        else:
            self._recompute_only = tuple(dict.fromkeys((previous or ()) + tuple(panels)))
        # a run not computed yet is computed at once (the first panel should appear fast); later
        # changes wait until a drag rests
        e = self.model.current
        first = e is not None and self._computed_for is not e.run
        self._recompute_timer.start(0 if first else 150)

    def context(self) -> AnalysisContext | None:
        e = self.model.current
        if e is None:
            return None
        start, stop = self.model.window_frames()
        others = tuple(o.run for o in self.model.entries if o is not e)
        return AnalysisContext(run=e.run, start=start, stop=stop, window_ps=self.model.effective_window_ps,
                               coordinate=self.model.coordinate, choices=self.model.choices, others=others)

    def recompute(self) -> None:
        """Compute every panel of the current run: Energy first, the others once it is drawn."""
        self._recompute_timer.stop()
        only = self._recompute_only
        self._recompute_only = None
        ctx = self.context()
        if ctx is None:
            return
        self._computed_for = ctx.run
        if only:
            self._start_panels(ctx, only)
        else:
            self.panels["Energy"].show_busy()
            self.jobs.start("Energy", lambda: FIRST_JOB(ctx), label="Energy table", on_done=self._energy_table_done)
            self._rest_pending = True

    def _start_panels(self, ctx: AnalysisContext, names: Sequence[str]) -> None:
        for name in names:
            job = PANEL_JOBS[name]
            self.panels[name].show_busy()
            if name == "Energy":  # the energy table stays up while the audit runs
                self.jobs.start("Energy#audit", lambda job=job, ctx=ctx: job(ctx), label="Energy audit",
                                on_done=self._audit_done)
            else:
                self.jobs.start(name, lambda job=job, ctx=ctx: job(ctx), label=f"{name} panel",
                                on_done=partial(self._panel_done, name))
            for suffix, (panel_name, extra) in EXTRA_JOBS.items():
                if panel_name == name:
                    self.jobs.start(f"{name}#{suffix}", lambda extra=extra, ctx=ctx: extra(ctx),
                                    label=f"{name} panel ({suffix})", on_done=partial(self._extra_done, name, suffix))

    def _start_rest(self) -> None:
        """After the energy table: one shared read of the frames (``shared_frames_job``), then the panels."""
        if not self._rest_pending:
            return
        ctx = self.context()
        if ctx is None:
            self._rest_pending = False
            return
        self.jobs.start("frames:shared", lambda ctx=ctx: shared_frames_job(ctx),
                        label="Reading the frames once for the audit, coordinate and principal components",
                        on_done=self._shared_read_done)

    def _start_rest_now(self) -> None:
        if not self._rest_pending:
            return  # cancelled meanwhile
        self._rest_pending = False
        ctx = self.context()
        if ctx is not None:
            self._start_panels(ctx, PANELS)

    # ---- what each job does when it ends --------------------------------------------------------
    def _energy_table_done(self, outcome: JobOutcome) -> None:
        self._panel_done("Energy", outcome)
        if self._rest_pending:
            # let the energy figure reach the screen before the other analyses compete for the CPU
            QtCore.QTimer.singleShot(30, self._start_rest)

    def _shared_read_done(self, outcome: JobOutcome) -> None:
        """The shared read is done (or cancelled, or failed): the panels find its results in the cache."""
        QtCore.QTimer.singleShot(0, self._start_rest_now)

    def _audit_done(self, outcome: JobOutcome) -> None:
        panel = self.panels["Energy"]
        if outcome.error and not outcome.cancelled and panel.result is not None and panel.result.figures:
            panel.add_note(f"The audit could not run: {outcome.error}")  # keep the energy table shown
            self._say_problem(f"Energy audit: {outcome.error.splitlines()[0]}")
            return
        self._show_panel_outcome("Energy", outcome, [])

    def _panel_done(self, name: str, outcome: JobOutcome) -> None:
        """A panel's main job ended: show its result (and extras that finished first), error or cancellation."""
        self._show_panel_outcome(name, outcome, self._extras_waiting.pop(name, []))

    def _show_panel_outcome(self, name: str, outcome: JobOutcome, waiting: list[PanelResult]) -> None:
        panel = self.panels[name]
        if outcome.cancelled:
            panel.show_cancelled()
        elif outcome.error:
            panel.show_error(outcome.error)
            self._say_problem(f"{name} panel: {outcome.error.splitlines()[0]}")
        else:
            result: PanelResult = outcome.result
            panel.show_result(result)
            self._note_audit_temperature(result)
            for extra in waiting:
                self._apply_extra(panel, extra)
            if not self.jobs.busy:
                self.say(f"Panels up to date ({outcome.elapsed_s:.2g} s for the last).")

    def _note_audit_temperature(self, result: PanelResult) -> None:
        """The audit's kinetic temperature beside the run in the Runs list."""
        ta = getattr(result.info.get("audit"), "temperature", None)
        if ta is not None and self.model.current is not None:
            self.runs.note_kinetic_temperature(
                self.model.current.run, f"{ta.mean_K:.4g} \u00b1 {ta.error_K:.2g} K (audit, {ta.n_dof} degrees "
                                        "of freedom)")

    def _extra_done(self, name: str, suffix: str, outcome: JobOutcome) -> None:
        """An extra job of panel ``name`` ended: its figures join what the panel shows."""
        panel = self.panels[name]
        if outcome.cancelled:
            panel.show_cancelled()
        elif outcome.error:
            panel.add_note(f"{suffix}: {outcome.error}")
        elif name in self.jobs.running():
            # the panel's main job is still running: add the extra figures once it has drawn
            self._extras_waiting.setdefault(name, []).append(outcome.result)
        else:
            self._apply_extra(panel, outcome.result)

    @staticmethod
    def _apply_extra(panel: Panel, result: PanelResult) -> None:
        if not result.figures and result.message:  # e.g. why there are no principal components
            panel.add_note(result.message)
        else:
            panel.add_result(result)

    # ---- progress and cancelling ----------------------------------------------------------------
    def _job_started(self, key: str, label: str) -> None:
        self.progress.show()
        self.cancel_button.show()
        self.progress.setRange(0, 0)
        self.say(f"{label}\u2026")

    def _job_progress(self, key: str, fraction: float, message: str) -> None:
        if fraction < 0:
            self.progress.setRange(0, 0)
        else:
            self.progress.setRange(0, 1000)
            self.progress.setValue(int(round(1000 * fraction)))
        label = self.jobs.labels.get(key, key)
        self.say(f"{label}: {message}" if message else label)

    def _busy_changed(self, busy: bool) -> None:
        self.progress.setVisible(busy)
        self.cancel_button.setVisible(busy)

    def cancel_work(self) -> None:
        running = self.jobs.running()
        self.jobs.cancel_all()
        self._rest_pending = False
        if running:
            self.say("Cancelled: " + ", ".join(self.jobs.labels.get(k, k) for k in running) + ".")

    def wait_idle(self, timeout_ms: int = 20_000) -> bool:
        """Process events until no job is running (tests and screenshots)."""
        timer = QtCore.QElapsedTimer()
        timer.start()
        app = QtWidgets.QApplication.instance()
        while timer.elapsed() < timeout_ms:
            app.processEvents(QtCore.QEventLoop.ProcessEventsFlag.AllEvents, 50)
            if not self.jobs.busy and not self._recompute_timer.isActive() and not self._rest_pending:
                app.processEvents()
                return True
            QtCore.QThread.msleep(5)
        return False
