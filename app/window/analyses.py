"""What each panel computes: thin adapters from a Run (and the window's choices) to figures.

Every panel has one job in :data:`PANEL_JOBS`: a function of an :class:`AnalysisContext` that
returns a progress generator (``phasewake.core.progress``) whose result is a :class:`PanelResult`.
The jobs call the core analyses and the figure builders of ``phasewake.core.figures.plots``; they run in a
worker thread (``workers.JobRunner``). A panel with nothing to show says why in a plain sentence: the
window never shows made-up data.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Generator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.app.window.replicas import replicas_of
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
from phasewake.core.errors import AnalysisError, PhasewakeError
from phasewake.core.figures import plots
from phasewake.core.figures.spec import FigureSpec
from phasewake.core.model.run import Run
from phasewake.core.progress import Progress, Work, labelled
from phasewake.core.readers.stated import stated_settings
from phasewake.core.store import cached

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
    verdicts: tuple[Any, ...] = ()  # phasewake.core.analyses.verdicts.Verdict
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
    others: tuple[Run, ...] = ()  # the other runs in the Runs list (replicas), whole


Job = Callable[[AnalysisContext], Generator[Progress, None, PanelResult]]


# ---- helpers ----------------------------------------------------------------------------------


def window_run(run: Run, start: int, stop: int) -> Run:
    """The run cut to frames [start, stop): ``Run.window`` (``core/model/run.py``)."""
    return run.window(start, stop)


def _table_in_window(run: Run, window_ps: tuple[float, float] | None) -> Any:
    """The energy rows of the time window, cut as core cuts a windowed run's (``table_in_span``)."""
    from phasewake.core.model.run import table_in_span

    if run.energies is None or window_ps is None:
        return run.energies
    return table_in_span(run.energies, float(window_ps[0]), float(window_ps[1]))


# A small cache of coordinate series, so the panels that share a coordinate read frames once. Each entry
# keeps its Run: a key holds id(run), and an id is only unique while the object is alive (a run closed and
# collected could hand its id to a newly opened one, which would then be shown the old run's series).
_CACHE: dict[tuple[int, str, int, int], tuple[Run, Any]] = {}
_CACHE_LOCK = threading.Lock()
_CACHE_SIZE = 8


def forget_runs(runs: list[Run]) -> None:
    """Drop the in-memory coordinate series of ``runs`` (a closed window or a removed run): nothing here
    keeps a run, its open files or its series alive after the window that showed it."""
    gone = {id(r) for r in runs}
    with _CACHE_LOCK:
        for key in [k for k, (run, _) in _CACHE.items() if id(run) in gone]:
            del _CACHE[key]


def coordinate_series(run: Run, spec: str, start: int, stop: int) -> Generator[Progress, None, Any]:
    """One CoordinateSeries of ``spec`` over frames [start, stop) (cached per run and window in memory, and
    for runs with files in the result cache, ``phasewake.core.store.cached``)."""
    from phasewake.core.analyses.coordinates import CoordinatesRequest
    key = (id(run), spec, start, stop)
    with _CACHE_LOCK:
        hit = _CACHE.get(key)
    if hit is not None and hit[0] is run:
        return hit[1]
    # through the on-disk result cache: reopening a run reads no frames
    request = CoordinatesRequest([spec], start=start, stop=None if stop >= run.n_frames else stop)
    series = yield from labelled(requested(run, request), f"coordinate {spec}")
    with _CACHE_LOCK:
        _CACHE[key] = (run, series[0])
        while len(_CACHE) > _CACHE_SIZE:
            _CACHE.pop(next(iter(_CACHE)))
    return series[0]


USE_CACHE = True  # the window's Analysis > Use the result cache (remembered in its settings)


def window_cache() -> Any:
    """The result cache the panels use: the default one, or a disabled one when the user turned it off."""
    from phasewake.core.store.cache import ResultCache

    return ResultCache() if USE_CACHE else ResultCache(enabled=False)


def requested(run: Run, request: AnalysisRequest, work: Work[Any] | None = None) -> Work[Any]:
    """``request`` for ``run`` through the result cache the panels use (``cached.requested``): the same key as
    the command line, the report and the Python API. ``work`` computes the same result from what the panel
    already holds (e.g. ``CrossingsRequest.analyse`` on the coordinate series drawn beside it)."""
    if work is None:
        return (yield from cached.requested(run, request, cache=window_cache()))
    return (yield from cached.cached_work(run, request.name, request.settings(), work, cache=window_cache(),
                                          extra_paths=request.reference_paths(run)))


def _frame_range(ctx: AnalysisContext) -> tuple[int, int | None]:
    """The context's frames as a request states them: (0, None) for the whole run, as the command line does."""
    return ctx.start, (None if ctx.stop >= ctx.run.n_frames else ctx.stop)


def _need_coordinate(ctx: AnalysisContext) -> PanelResult | None:
    if ctx.run.frames is None:
        return PanelResult(message="This run has no frames (positions), so there is no coordinate to show.")
    if not ctx.coordinate:
        return PanelResult(message="No coordinate chosen yet: choose one with Analysis \u25b8 Coordinate\u2026 "
                                   "(Ctrl+K).")
    return None


# ---- Energy ---------------------------------------------------------------------------------

_ENERGY_GROUPS: tuple[tuple[str, str, tuple[str, ...]], ...] = (  # title, y label, roles
    ("Conserved quantity", "Energy", ("total", "conserved")),
    ("Potential and kinetic energy", "Energy", ("potential", "kinetic")),
    ("Kinetic temperature", "Temperature", ("temperature",)),
)


def energy_series_figure(run: Run, window_ps: tuple[float, float] | None = None) -> FigureSpec | None:
    """The energy table against time, restricted to ``window_ps`` (None when there is no table)."""
    table = _table_in_window(run, window_ps)
    if table is None or len(table) == 0:
        return None
    return plots.energy_series_figure(table, run_name=run.name)


def energy_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """The energy table at once (no analysis needed): the fast first figure after opening."""
    yield Progress(0, None, "energy table")
    fig = energy_series_figure(ctx.run, ctx.window_ps)
    if fig is None:
        return PanelResult(message="This run has no energy table; the audit below uses the frames.")
    figs = [fig]
    table = _table_in_window(ctx.run, ctx.window_ps)
    if table is not None and table.by_role("temperature") is not None:
        figs.append(plots.temperature_figure(table, target_K=ctx.run.metadata.temperature_K, run_name=ctx.run.name))
    return PanelResult(figures=tuple(figs), message="The audit is running\u2026")


def audit_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """The energy audit (drift, fluctuations, temperature, time step) with its verdicts."""
    from phasewake.core.analyses.audit import AuditRequest
    yield from energy_job(ctx)
    run = window_run(ctx.run, ctx.start, ctx.stop)
    # what the user stated, as the command line gives it (the same key as `phasewake audit`, shared_frames_job's)
    res = yield from labelled(requested(run, AuditRequest(**stated_settings(run))), "audit")
    figs = plots.figures_for(res)
    return PanelResult(figures=tuple(figs), verdicts=tuple(res.verdicts), message=HEURISTIC_NOTE,
                       info={"audit": res})


# ---- Phase space ----------------------------------------------------------------------------

def phase_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Coordinate against its conjugate momentum, its density, a Poincaré-style section, and PCA."""
    from phasewake.core.analyses import landscape
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    figs: list[FigureSpec] = []
    traces: dict[str, Trace] = {}
    q = np.asarray(s.values, float)
    mp = s.momentum if s.momentum is not None else s.velocity
    if mp is not None:
        figs.append(plots.phase_portrait_figure(s))
        p = np.asarray(mp, float)
        traces["phase.portrait"] = Trace(np.asarray(s.time_ps, float), q, p)
        pu = s.momentum_unit if s.momentum is not None else s.velocity_unit
        figs.append(plots.phase_density_figure(s, landscape.histogram_2d(q, p, x_unit=s.unit, y_unit=pu)))
    figs.append(plots.coordinate_time_figure(s))
    spec2 = str(ctx.choices.get("coordinate2") or "").strip()
    if spec2 and spec2 != ctx.coordinate:
        s2 = yield from coordinate_series(ctx.run, spec2, ctx.start, ctx.stop)
        figs.extend(_pair_figures(s, s2, traces))
    info: dict[str, Any] = {"coordinate": s}
    return PanelResult(figures=tuple(figs), traces=traces, info=info,
                       message="The large dot is the cursor's frame and the thin line behind it the recent path "
                               "(T toggles it); a crossing selected in the Crossings panel is drawn thick.")


PCA_EXACT_MAX_COORDS = 3_000  # above this many coordinates the randomized route (eigh of
# a 3000 x 3000 covariance takes seconds, and the full covariance grows as the square)


def _pca_settings(run: Run) -> dict[str, Any]:
    """The Phase space panel's principal components: the solute, 3 components, exact route when small."""
    from phasewake.core.analyses import coordinates
    group = coordinates.solute_atoms(run.topology, run.n_atoms)
    if group.size < 3:
        # a solute of one or two atoms has no shape to analyse (two atoms: only their distance varies once
        # rotation and translation are fitted away): the components of the whole system instead
        group = np.arange(run.n_atoms)
    method = "exact" if 3 * group.size <= PCA_EXACT_MAX_COORDS else "randomized"
    return {"atom_indices": group, "n_components": 3, "method": method}


def shared_frames_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """One read of the frames for the audit, the coordinate, the principal components and the velocity
    autocorrelation and spectrum, into the result cache (``cached.requested_pass``), before the panels start:
    their jobs then find these results there instead of each reading the frames. Only when the cache is on, the run has files and the whole run is
    analysed (the keys are those of the panels' own requests); otherwise nothing is done here."""
    from phasewake.core.analyses.audit import AuditRequest
    from phasewake.core.analyses.coordinates import CoordinatesRequest
    from phasewake.core.analyses.projection import PCARequest
    from phasewake.core.analyses.velocity import SpectrumRequest, VACFRequest
    run = ctx.run
    cache = window_cache()
    if (not cache.enabled or not run.paths or run.frames is None
            or ctx.start > 0 or ctx.stop < run.n_frames):
        return PanelResult()
    requests: dict[str, AnalysisRequest] = {"audit": AuditRequest(**stated_settings(run))}
    if ctx.coordinate:
        requests["coordinate"] = CoordinatesRequest([ctx.coordinate])
    if run.n_atoms >= 2:
        requests["pca"] = PCARequest(**_pca_settings(run))
    if run.frames.has_velocities and run.n_frames > 16:  # the Correlation panel's
        requests.update(vacf=VACFRequest(), spectrum=SpectrumRequest())
    try:
        yield from labelled(cached.requested_pass(run, requests, cache=cache, load_hits=False),
                             "one read of the frames")
    except PhasewakeError:
        pass  # a bad coordinate or a damaged frame: each panel runs its own request and says what went wrong
    return PanelResult()


def pca_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Principal components of the solute: figures added to the Phase space panel when ready."""
    from phasewake.core.analyses import coordinates
    from phasewake.core.analyses.projection import PCARequest
    if ctx.run.frames is None or ctx.run.n_atoms < 2:
        return PanelResult()
    settings = _pca_settings(ctx.run)
    group = np.asarray(settings["atom_indices"])
    if group.size < 3:
        return PanelResult(message=f"No principal components: the run has {plots.atoms_text(group)}; with the "
                                   "rotation and translation fitted away only their distance varies, so PCA would "
                                   "show 100% in one component by construction. Use the distance as the coordinate.")
    sub = window_run(ctx.run, ctx.start, ctx.stop)
    pca = yield from labelled(requested(sub, PCARequest(**settings)), "principal components")  # shared_frames_job's key
    traces: dict[str, Trace] = {}
    coords_text = plots.atoms_text(group)
    solute = coordinates.solute_atoms(ctx.run.topology, ctx.run.n_atoms)
    if solute.size < 3 and group.size == ctx.run.n_atoms:
        atoms = (f"all {coords_text} (the solute, {plots.atoms_text(solute)}, is too small for principal components: "
                 "two atoms only change their distance)")
    elif solute.size < ctx.run.n_atoms:
        atoms = f"the solute, {coords_text}"
    else:
        atoms = coords_text
    figs = _pca_figures(pca, traces, atoms=atoms)
    return PanelResult(figures=tuple(figs), traces=traces, info={"pca": pca})


def _pair_figures(s1: Any, s2: Any, traces: dict[str, Trace]) -> list[FigureSpec]:
    """Two coordinates against each other, and the Poincaré section (q2, p2) where q1 crosses its median."""
    from phasewake.core.analyses import landscape
    t = np.asarray(s1.time_ps, float)
    q1 = np.asarray(s1.values, float)
    figs = [plots.coordinate_pair_figure(s1, s2)]
    traces["phase.pair"] = Trace(t, q1, np.asarray(s2.values, float))
    if s2.momentum is not None:
        sec = landscape.poincare_section(q1, np.asarray(s2.values, float), np.asarray(s2.momentum, float), t,
                                    value=float(np.median(q1)), direction="up", q2_unit=s2.unit,
                                    p2_unit=s2.momentum_unit)
        if sec.n_points:
            figs.append(plots.poincare_pair_figure(s1, s2, sec))
    return figs


def _pca_figures(pca: Any, traces: dict[str, Trace], *, atoms: str = "") -> list[FigureSpec]:
    figs = plots.principal_component_figures(pca, atoms=atoms)
    if pca.projections is not None and pca.time_ps is not None:
        t = np.asarray(pca.time_ps, float)
        pr = np.asarray(pca.projections, float)
        keys = {f.key for f in figs}
        if "phase.pc1" in keys:
            traces["phase.pc1"] = Trace(t, pr[:, 0], np.asarray(pca.momenta, float)[:, 0])
        if "phase.pc12" in keys:
            traces["phase.pc12"] = Trace(t, pr[:, 0], pr[:, 1])
    return figs


# ---- Correlation ----------------------------------------------------------------------------

def correlation_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """The memory of an energy series and of the coordinate (CorrelationRequest each: autocorrelation, g and
    block averages), and the velocity autocorrelation and vibrational spectrum of the window's frames."""
    from phasewake.core.analyses.correlation.request import CorrelationRequest
    from phasewake.core.analyses.velocity import SpectrumRequest, VACFRequest
    figs: list[FigureSpec] = []
    notes: list[str] = []
    verdicts: list[Any] = []
    reports: dict[str, Any] = {}
    run = window_run(ctx.run, ctx.start, ctx.stop)  # the window's frames and energy rows
    requests = [CorrelationRequest(series=name) for name in _energy_series(run, ("potential", "total", "temperature"))]
    if ctx.coordinate and run.frames is not None:
        requests.append(CorrelationRequest(coordinate=ctx.coordinate))
    for i, request in enumerate(requests):
        what = request.series or request.coordinate
        yield Progress(i, len(requests) + 2, f"autocorrelation of {what}")
        try:
            report = yield from labelled(requested(run, request), f"autocorrelation of {what}")
        except PhasewakeError as exc:
            notes.append(f"{what}: {exc}")
            continue
        figs.append(plots.autocorrelation_figure(report.correlation, name=report.name))
        verdicts.extend(report.verdicts)
        reports[what] = report
        if report.blocking is not None:
            figs.append(plots.blocking_figure(report.blocking, name=report.name))
    if run.frames is not None and run.frames.has_velocities and run.n_frames > 16:
        yield Progress(len(requests), len(requests) + 2, "velocity autocorrelation")
        v = yield from labelled(requested(run, VACFRequest()), "VACF")
        figs.append(plots.vacf_figure(v))
        d = yield from labelled(requested(run, SpectrumRequest()), "vibrational spectrum")
        figs.append(plots.vdos_figure(d))
    elif run.frames is not None and not run.has_velocities:
        notes.append("No velocities: the VACF and the vibrational spectrum need them.")
    if not figs:
        return PanelResult(message=" ".join(notes) or "Nothing to correlate: the run has no energy series and no "
                                                       "coordinate.")
    # the ACF of a series in time: give the keys a suffix so each can be chosen on its own
    figs = [_rekey(f, i) for i, f in enumerate(figs)]
    return PanelResult(figures=tuple(figs), verdicts=tuple(verdicts), message=" ".join(notes),
                       info={"correlation": reports})


def _energy_series(run: Run, roles: tuple[str, ...], min_rows: int = 8) -> list[str]:
    """The name of the first energy column with one of ``roles`` (as a list: none when the run has no such
    column or no more than ``min_rows`` rows in the window)."""
    table = run.energies
    if table is None or len(table) <= min_rows:
        return []
    for role in roles:
        s = table.by_role(role)
        if s is not None:
            return [s.name]
    return []


def _rekey(fig: FigureSpec, i: int) -> FigureSpec:
    import dataclasses

    return dataclasses.replace(fig, key=f"{fig.key}.{i}")


# ---- Sampling -------------------------------------------------------------------------------

def sampling_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Running averages, coverage of phase space, segment divergence and R-hat, of the coordinate (with the open
    runs that are replicas of this one) and of an energy series: SamplingRequest each."""
    from phasewake.core.analyses.sampling import SamplingRequest
    yield Progress(0, None, "sampling")
    figs: list[FigureSpec] = []
    verdicts: list[Any] = []
    notes: list[str] = []
    reports: dict[str, Any] = {}
    run = window_run(ctx.run, ctx.start, ctx.stop)
    # across replicas: the open runs that really are replicas of this one
    pooled, skipped = replicas_of(ctx.run, ctx.others)
    if skipped:
        notes.append("Not pooled as replicas: " + "; ".join(f"{name} ({why})" for name, why in skipped) + ".")
    wanted: list[tuple[str, SamplingRequest, float]] = []  # figure key, request, time of its first sample
    if ctx.coordinate and run.frames is not None and run.n_frames >= 16:
        wanted.append(("coordinate", SamplingRequest(coordinate=ctx.coordinate, replicas=tuple(pooled)),
                       float(run.time_ps[0])))
    for name in _energy_series(run, ("potential", "total"), min_rows=16):
        t0 = float(run.energies.time_ps[0])  # type: ignore[union-attr]
        wanted.append(("energy", SamplingRequest(series=name), t0))
    for key, request, t0 in wanted:
        what = request.series or request.coordinate
        try:
            report = yield from labelled(requested(run, request), f"sampling of {what}")
        except PhasewakeError as exc:
            notes.append(f"{what}: {exc}")
            continue
        verdicts.extend(report.verdicts)
        reports[what] = report
        figs.append(plots.running_average_figure(report.running, name=report.name, key=f"sampling.running.{key}",
                                                 time_offset_ps=t0))
        if report.coverage is not None:
            figs.append(plots.coverage_figure(report.coverage, x_label=report.name, y_label="p", time_offset_ps=t0))
        if report.rhat_replicas is not None:
            names = ", ".join([ctx.run.name] + [o.name for o in pooled])
            notes.append(f"Pooled as replicas (same atoms, ensemble, thermostat, temperature and time step): {names}.")
    if not figs and not verdicts:
        return PanelResult(message="Nothing to judge: the run has no coordinate and no energy series.")
    return PanelResult(figures=tuple(figs), verdicts=tuple(verdicts), message=" ".join(notes + [HEURISTIC_NOTE]),
                       info={"sampling": reports})


# ---- Crossings and Landscape ----------------------------------------------------------------

def dragged_states(choices: dict[str, Any]) -> tuple[tuple[float, float] | None, float | None]:
    """States and surface dragged on the Landscape panel (choice 'landscape_marks')."""
    marks = choices.get("landscape_marks") or {}
    a = marks.get("state:A")
    b = marks.get("state:B")
    surf = marks.get("surface:dividing surface")
    states = (float(a[0]), float(b[0])) if a and b else None
    return states, (float(surf[0]) if surf else None)


def crossings_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Crossings of the coordinate: :class:`~phasewake.core.analyses.crossings.CrossingsRequest` (the same request,
    temperature rule, kT/m_eff and cache key as the command line and the report) with the dragged states."""
    from phasewake.core.analyses import crossings
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    states, surface = dragged_states(ctx.choices)
    start, stop = _frame_range(ctx)
    request = crossings.CrossingsRequest(coordinate=ctx.coordinate, states=states, surface=surface, start=start,
                                         stop=stop)
    # the series is already here (the panel draws it): the request's second step on it, under its own key
    try:
        res = yield from labelled(requested(ctx.run, request, request.analyse([ctx.run], [s])), "crossings")
    except AnalysisError as exc:  # what the data do not allow (too short, never crossed) is not a fault:
        # the panel draws the series and says why, and what the user can change
        return PanelResult(figures=(plots.coordinate_series_figure(s, key="crossings.series"),),
                           message=f"No crossings counted: {exc}. States dragged on the Landscape panel need no "
                                   "suggestion from the profile; a wider time window has more frames.")
    events = _event_rows(res, ctx)
    # the coordinate against time (linked to the cursor) first, then what core.plots draws of the result
    figs = [plots.coordinate_series_figure(s, crossings=res, key="crossings.series")] + plots.figures_for(res)
    msg = (f"{res.n_transitions} transitions and {res.n_recrossings} recrossings of the dividing surface "
           f"{res.settings.surface:.4g} {res.settings.unit} (states: A \u2264 {res.settings.a_hi:.4g}, "
           f"B \u2265 {res.settings.b_lo:.4g}; {res.settings.states_source}).")
    return PanelResult(figures=tuple(figs), events=events, verdicts=tuple(res.verdicts), message=msg,
                       info={"crossings": res})


def _event_rows(res: Any, ctx: AnalysisContext) -> tuple[EventRow, ...]:
    """The event table of a CrossingsResult, each row with the span to highlight in the phase portrait: its
    transition path (leaving the origin core to entering the destination core), else a few frames around it."""
    rows = []
    dt = float(res.frame_spacing_ps)
    for r in res.events:
        if int(r["path"]) >= 0:
            path = res.paths[int(r["path"])]
            start_ps, end_ps = float(path["exit_time_ps"]), float(path["entry_time_ps"])
        else:
            start_ps, end_ps = float(r["time_ps"]) - 5 * dt, float(r["time_ps"]) + 5 * dt
        dur = float(r["path_duration_ps"])
        rows.append(EventRow(index=int(r["index"]), time_ps=float(r["time_ps"]), frame=int(r["frame"]) + ctx.start,
                             kind=str(r["kind"]), direction=int(r["direction"]), from_state=str(r["from_state"]),
                             to_state=str(r["to_state"]), velocity=float(r["velocity"]),
                             velocity_unit=res.velocity_unit, duration_ps=None if not np.isfinite(dur) else dur,
                             start_ps=start_ps, end_ps=end_ps, replica=int(r["replica"])))
    return tuple(rows)


def landscape_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    from phasewake.core.analyses import crossings
    from phasewake.core.analyses.landscape import LandscapeRequest
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    temp, source = crossings.run_temperature(ctx.run)  # what LandscapeRequest takes when none is given
    if temp is None:
        return PanelResult(message="The free-energy profile needs a temperature: state the thermostat "
                                   "temperature in the Runs list (the files do not say).")
    # the request of the command line and the report: the same profile (and Jacobian) for one run
    start, stop = _frame_range(ctx)
    prof = yield from labelled(requested(ctx.run, LandscapeRequest(coordinate=ctx.coordinate, start=start,
                                                                    stop=stop)), "free-energy profile")
    states, surface = dragged_states(ctx.choices)
    if states is None:
        try:
            sug = crossings.suggest_states(np.asarray(s.values, float), unit=s.unit)
            states, surface = (sug.a_hi, sug.b_lo), (surface if surface is not None else sug.surface)
        except PhasewakeError:  # a profile without two states is still worth drawing
            states = None
    if surface is None and states is not None:
        surface = 0.5 * (states[0] + states[1])
    # ours first: it carries the states and the dividing surface as marks a user can drag
    figs = [plots.landscape_states_figure(prof, s, states=states, surface=surface, temperature_source=source)]
    figs += plots.figures_for(prof)
    return PanelResult(figures=tuple(figs), info={"profile": prof, "states": states, "surface": surface})


PANEL_JOBS: dict[str, Job] = {
    "Energy": audit_job,
    "Phase space": phase_job,
    "Correlation": correlation_job,
    "Sampling": sampling_job,
    "Crossings": crossings_job,
    "Landscape": landscape_job,
}
# Extra jobs whose figures are added to a panel after its main job: key suffix -> (panel, job).
EXTRA_JOBS: dict[str, tuple[str, Job]] = {"pca": ("Phase space", pca_job)}
# The first figure after opening: the energy table alone (no analysis), drawn before the audit runs.
FIRST_JOB: Job = energy_job
