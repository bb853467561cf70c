"""What each panel computes: thin adapters from a Run (and the window's choices) to figures.

Every panel has one job in :data:`PANEL_JOBS`: a function of an :class:`AnalysisContext` that
returns a progress generator (``phasewake.core.progress``) whose result is a :class:`PanelResult`.
The jobs call the core analyses and the figure builders of ``phasewake.core.plots``; they run in a
worker thread (``workers.JobRunner``). An analysis that is not in this build yet gives a result with
no figure and a plain sentence saying so: the window never shows made-up data.
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Generator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.figures import Axis, FigureSpec, Line, PlotSpec, series_style
from phasewake.core.progress import Progress
from phasewake.core.run import Run

PANELS: tuple[str, ...] = ("Energy", "Phase space", "Correlation", "Sampling", "Crossings", "Landscape")


@dataclass(frozen=True)
class Trace:
    """Points indexed by time, so the cursor can be marked on a plot whose x axis is not time.

    time_ps, x, y : ndarray, shape (n,); x and y in the plot's units.
    """

    time_ps: np.ndarray
    x: np.ndarray
    y: np.ndarray
    plot_index: int = 0


@dataclass(frozen=True)
class EventRow:
    """One row of the Crossings panel's event table."""

    index: int
    time_ps: float
    frame: int
    kind: str  # "transition" or "recrossing"
    direction: int  # +1 / -1
    from_state: str = ""
    to_state: str = ""
    velocity: float | None = None
    velocity_unit: str = ""
    duration_ps: float | None = None
    start_ps: float | None = None  # segment to highlight in the phase portrait
    end_ps: float | None = None
    replica: int = 0


@dataclass(frozen=True)
class PanelResult:
    """What a panel shows: figures to choose from, a message, and extras for linking."""

    figures: tuple[FigureSpec, ...] = ()
    message: str = ""
    traces: dict[str, Trace] = field(default_factory=dict)  # figure key -> trace
    events: tuple[EventRow, ...] = ()
    verdicts: tuple[Any, ...] = ()  # phasewake.core.verdicts.Verdict
    info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class AnalysisContext:
    """The inputs of a panel job: run, window (frames and ps), coordinate, choices."""

    run: Run
    start: int
    stop: int
    window_ps: tuple[float, float]
    coordinate: str = ""
    choices: dict[str, Any] = field(default_factory=dict)


Job = Callable[[AnalysisContext], Generator[Progress, None, PanelResult]]


def module_or_none(name: str) -> Any:
    """Import ``phasewake.core.<name>`` if it is in this build, else None."""
    try:
        return importlib.import_module(f"phasewake.core.{name}")
    except ModuleNotFoundError as exc:
        if exc.name and exc.name.startswith("phasewake.core"):
            return None
        raise


def missing(what: str, module: str) -> PanelResult:
    return PanelResult(message=f"{what} is not in this build yet (phasewake.core.{module} is missing), "
                               "so this panel has nothing to show. No data is made up.")


# ---- Energy ---------------------------------------------------------------------------------

_ENERGY_GROUPS: tuple[tuple[str, str, tuple[str, ...]], ...] = (  # title, y label, roles
    ("Conserved quantity", "Energy", ("total", "conserved")),
    ("Potential and kinetic energy", "Energy", ("potential", "kinetic")),
    ("Kinetic temperature", "Temperature", ("temperature",)),
)


def energy_series_figure(run: Run, window_ps: tuple[float, float] | None = None) -> FigureSpec | None:
    """The energy table as plots against time (no analysis needed), restricted to ``window_ps``.

    Returns None when the run has no energy table.
    """
    table = run.energies
    if table is None or len(table) == 0:
        return None
    t = np.asarray(table.time_ps, dtype=float)
    sel = np.ones(t.size, dtype=bool)
    if window_ps is not None:
        sel = (t >= window_ps[0]) & (t <= window_ps[1])
    plots = []
    used: set[str] = set()
    for title, ylabel, roles in _ENERGY_GROUPS:
        items = []
        unit = ""
        for s in table.series.values():
            if s.role in roles:
                items.append(Line(t[sel], np.asarray(s.values, float)[sel], label=s.name,
                                  style=series_style(len(items))))
                unit = s.unit
                used.add(s.name)
        if items:
            plots.append(PlotSpec(title=title, x=Axis("Time", "ps"), y=Axis(ylabel, unit),
                                  items=tuple(items), x_is_time=True))
    if not plots:  # only unclassified columns: show the first few as they are
        for s in list(table.series.values())[:3]:
            if s.role in ("time", "step") or s.name in used:
                continue
            plots.append(PlotSpec(title=s.name, x=Axis("Time", "ps"), y=Axis(s.name, s.unit),
                                  items=(Line(t[sel], np.asarray(s.values, float)[sel], label=s.name),),
                                  x_is_time=True))
    if not plots:
        return None
    return FigureSpec(key="energy.series", title=f"Energy table of {run.name}", plots=tuple(plots),
                      caption="Series as stored in the run's energy table, against time.",
                      provenance={"run": run.name})


def energy_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    yield Progress(0, None, "energy table")
    fig = energy_series_figure(ctx.run, ctx.window_ps)
    if fig is None:
        return PanelResult(message="This run has no energy table, so the Energy panel has nothing to show.")
    return PanelResult(figures=(fig,))


def _not_yet(what: str, module: str) -> Job:
    def job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
        yield Progress(0, None, what)
        return missing(what, module)

    return job


PANEL_JOBS: dict[str, Job] = {
    "Energy": energy_job,
    "Phase space": _not_yet("The phase-space analysis", "coordinates"),
    "Correlation": _not_yet("The correlation analysis", "correlation"),
    "Sampling": _not_yet("The sampling analysis", "sampling"),
    "Crossings": _not_yet("The crossings analysis", "crossings"),
    "Landscape": _not_yet("The free-energy landscape", "landscape"),
}
