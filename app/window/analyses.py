"""What each panel computes: thin adapters from a Run (and the window's choices) to figures.

Every panel has one job in :data:`PANEL_JOBS`: a function of an :class:`AnalysisContext` that
returns a progress generator (``phasewake.core.progress``) whose result is a :class:`PanelResult`.
The jobs call the core analyses and the figure builders of ``phasewake.core.figures.plots``; they run in a
worker thread (``workers.JobRunner``). An analysis that is not in this build yet gives a result with
no figure and a plain sentence saying so: the window never shows made-up data.
"""

from __future__ import annotations

import importlib
import threading
from collections.abc import Callable, Generator
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.figures import plots
from phasewake.core.figures.spec import FigureSpec
from phasewake.core.model.run import Run
from phasewake.core.progress import Progress
from phasewake.core.units import KB_KJ_PER_MOL_K

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


_ROOMS = {"cached": "store", "report": "figures", "export": "figures", "plots": "figures"}


def module_or_none(name: str) -> Any:
    """Import ``phasewake.core.<name>`` if it is in this build, else None."""
    try:
        return importlib.import_module(f"phasewake.core.{_ROOMS.get(name, 'analyses')}.{name}")
    except ModuleNotFoundError as exc:
        if exc.name and exc.name.startswith("phasewake.core"):
            return None
        raise


def missing(what: str, module: str) -> PanelResult:
    return PanelResult(message=f"{what} is not part of this installation of phasewake, so this panel has "
                               "nothing to show. No data is made up.")


# ---- helpers ----------------------------------------------------------------------------------


def window_run(run: Run, start: int, stop: int) -> Run:
    """The run cut to frames [start, stop): ``Run.window`` (``core/model/window.py``)."""
    return run.window(start, stop)


def _table_in_window(run: Run, window_ps: tuple[float, float] | None) -> Any:
    import dataclasses

    from phasewake.core.model.run import EnergyTable

    table = run.energies
    if table is None or window_ps is None:
        return table
    t = np.asarray(table.time_ps, float)
    sel = (t >= window_ps[0]) & (t <= window_ps[1])
    return EnergyTable(time_ps=t[sel], sources=table.sources,
                       series={k: dataclasses.replace(v, values=np.asarray(v.values)[sel])
                               for k, v in table.series.items()})


def _relay(work: Any, lo: float, hi: float, total: float, label: str) -> Generator[Progress, None, Any]:
    """Re-yield an inner generator's progress scaled into [lo, hi] of ``total``; return its result."""
    try:
        while True:
            p = next(work)
            frac = p.fraction if p.fraction is not None else 0.0
            yield Progress(lo + (hi - lo) * frac, total, f"{label}: {p.message}" if p.message else label)
    except StopIteration as stop:
        return stop.value


def _plots_figures(result: Any, **options: Any) -> list[FigureSpec]:
    """Figures core.plots draws from ``result`` ([] when it has no builder for it yet)."""
    try:
        return list(plots.figures_for(result, **options))
    except TypeError:  # a builder that takes none of these options
        return list(plots.figures_for(result))


def temperature_of(run: Run) -> tuple[float | None, str]:
    """The temperature to use for kT: the thermostat target, else the mean stored temperature."""
    if run.metadata.temperature_K:
        return float(run.metadata.temperature_K), "thermostat target"
    if run.energies is not None:
        s = run.energies.by_role("temperature")
        if s is not None and np.isfinite(s.values).any():
            return float(np.nanmean(s.values)), "mean temperature in the energy table"
    return None, ""


# A small cache of coordinate series, so the panels that share a coordinate read frames once. Each entry
# keeps its Run: a key holds id(run), and an id is only unique while the object is alive (a run closed and
# collected could hand its id to a newly opened one, which would then be shown the old run's series).
_CACHE: dict[tuple[int, str, int, int], tuple[Run, Any]] = {}
_CACHE_LOCK = threading.Lock()
_CACHE_SIZE = 8


def coordinate_series(run: Run, spec: str, start: int, stop: int) -> Generator[Progress, None, Any]:
    """One CoordinateSeries of ``spec`` over frames [start, stop) (cached per run and window in memory, and
    for runs with files in the result cache, ``phasewake.core.store.cached``)."""
    key = (id(run), spec, start, stop)
    with _CACHE_LOCK:
        hit = _CACHE.get(key)
    if hit is not None and hit[0] is run:
        return hit[1]
    coords = module_or_none("coordinates")
    if coords is None:
        raise ModuleNotFoundError("phasewake.core.analyses.coordinates")
    cached = module_or_none("cached")  # the on-disk result cache: reopening a run reads no frames
    work = (cached.cached_coordinates(run, [spec], start=start, stop=stop, cache=window_cache()) if cached is not None
            else coords.compute_coordinates(run, [spec], start=start, stop=stop))
    series = yield from _relay(work, 0, 1, 1, f"coordinate {spec}")
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


def through_cache(run: Run, analysis: str, settings: dict[str, Any],
                  work: Generator[Progress, None, Any]) -> Generator[Progress, None, Any]:
    """``work`` through the on-disk result cache (``phasewake.core.store.cached.cached_work``): a panel shown again,
    or the same file reopened, reads no frames. ``settings`` must hold everything that changes the result.
    Analysis \u25b8 Use the result cache or ``PHASEWAKE_NO_CACHE=1`` turns it off; runs without files are
    never cached."""
    cached = module_or_none("cached")
    if cached is None:
        return (yield from work)
    return (yield from cached.cached_work(run, analysis, settings, work, cache=window_cache()))


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
    audit = module_or_none("audit")
    quick = yield from energy_job(ctx)
    if audit is None:
        return PanelResult(figures=quick.figures, message="The energy audit is not part of this installation: "
                                                          "only the energy table is shown.")
    run = window_run(ctx.run, ctx.start, ctx.stop)
    cached = module_or_none("cached")
    work = (cached.cached_audit(run, cache=window_cache()) if cached is not None  # the key shared_frames_job uses
            else audit.audit_run(run))
    res = yield from _relay(work, 0, 1, 1, "audit")
    figs = list(_plots_figures(res, run_name=run.name))
    if not figs:
        figs = _audit_figures(res, run, ctx.window_ps)
    if not figs:
        figs = list(quick.figures)
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE

    return PanelResult(figures=tuple(figs), verdicts=tuple(res.verdicts), message=HEURISTIC_NOTE,
                       info={"audit": res})


def _audit_figures(res: Any, run: Run, window_ps: tuple[float, float] | None) -> list[FigureSpec]:
    """The audit's figures when core.plots has no builder for its result type."""
    figs = []
    table = _table_in_window(run, window_ps)
    drift = None if res.energy is None else res.energy.drift
    if table is not None and len(table):
        figs.append(plots.energy_series_figure(
            table, run_name=run.name,
            drift_slope_kJ_per_mol_per_ps=None if drift is None else drift.slope_kJ_per_mol_per_ns * 1e-3,
            drift_intercept_kJ_per_mol=None if drift is None else drift.intercept_kJ_per_mol))
    if res.temperature is not None and np.size(res.temperature.temperature_K):
        figs.append(plots.audit_temperature_figure(res))
    if res.timestep is not None and np.size(res.timestep.frequency_per_ps):
        figs.append(plots.audit_spectrum_figure(res))
    return figs


# ---- Phase space ----------------------------------------------------------------------------

def phase_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Coordinate against its conjugate momentum, its density, a Poincaré-style section, and PCA."""
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    if module_or_none("coordinates") is None:
        return missing("The phase-space analysis", "coordinates")
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    figs: list[FigureSpec] = []
    traces: dict[str, Trace] = {}
    q = np.asarray(s.values, float)
    mp = s.momentum if s.momentum is not None else s.velocity
    if mp is not None:
        figs.append(plots.phase_portrait_figure(s))
        p = np.asarray(mp, float)
        traces["phase.portrait"] = Trace(np.asarray(s.time_ps, float), q, p)
        land = module_or_none("landscape")
        if land is not None:
            pu = s.momentum_unit if s.momentum is not None else s.velocity_unit
            figs.append(plots.phase_density_figure(s, land.histogram_2d(q, p, x_unit=s.unit, y_unit=pu)))
    figs.append(plots.coordinate_time_figure(s))
    spec2 = str(ctx.choices.get("coordinate2") or "").strip()
    if spec2 and spec2 != ctx.coordinate:
        s2 = yield from coordinate_series(ctx.run, spec2, ctx.start, ctx.stop)
        figs.extend(_pair_figures(s, s2, traces))
    info: dict[str, Any] = {"coordinate": s}
    return PanelResult(figures=tuple(figs), traces=traces, info=info,
                       message="The large dot is the cursor's frame and the thin line behind it the recent path "
                               "(T toggles it); a crossing selected in the Crossings panel is drawn thick.")


PCA_EXACT_MAX_COORDS = 3_000  # above this many coordinates the randomized route (PERFORMANCE.md: eigh of
# a 3000 x 3000 covariance takes seconds, and the full covariance grows as the square)


def _pca_settings(run: Run) -> dict[str, Any]:
    """The Phase space panel's principal components: the solute, 3 components, exact route when small."""
    coords = module_or_none("coordinates")
    group = coords.solute_atoms(run.topology, run.n_atoms)
    if group.size < 3:
        # a solute of one or two atoms has no shape to analyse (two atoms: only their distance varies once
        # rotation and translation are fitted away): the components of the whole system instead
        group = np.arange(run.n_atoms)
    method = "exact" if 3 * group.size <= PCA_EXACT_MAX_COORDS else "randomized"
    return {"atom_indices": group, "n_components": 3, "method": method}


def shared_frames_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """One read of the frames for the audit, the coordinate and the principal components, into the result
    cache (``cached.cached_pass``), before the panels start: their jobs then find these results there
    instead of each reading the frames. Only when the cache is on, the run has files and the whole run is
    analysed (the keys are those of the panels' own requests); otherwise nothing is done here."""
    cached = module_or_none("cached")
    run = ctx.run
    cache = window_cache()
    if (cached is None or not cache.enabled or not run.paths or run.frames is None
            or ctx.start > 0 or ctx.stop < run.n_frames):
        return PanelResult()
    from phasewake.core.errors import PhasewakeError

    items: dict[str, Any] = {}
    try:
        if module_or_none("audit") is not None:
            items["audit"] = cached.audit_item(run)
        if ctx.coordinate and module_or_none("coordinates") is not None:
            items["coordinate"] = cached.coordinates_item(run, [ctx.coordinate])
        if module_or_none("projection") is not None and module_or_none("coordinates") is not None \
                and run.n_atoms >= 2:
            items["pca"] = cached.pca_item(run, **_pca_settings(run))
    except PhasewakeError:
        return PanelResult()  # a bad coordinate: the panels say so themselves
    if items:
        try:
            yield from _relay(cached.cached_pass(run, items, cache=cache, load_hits=False), 0, 1, 1,
                              "one read of the frames")
        except PhasewakeError:
            pass  # each panel runs its own analysis and reports what went wrong
    return PanelResult()


def pca_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Principal components of the solute: figures added to the Phase space panel when ready."""
    proj = module_or_none("projection")
    coords = module_or_none("coordinates")
    if proj is None or coords is None or ctx.run.frames is None or ctx.run.n_atoms < 2:
        return PanelResult()
    settings = _pca_settings(ctx.run)
    group = np.asarray(settings["atom_indices"])
    if group.size < 3:
        return PanelResult(message=f"No principal components: the run has {plots.atoms_text(group)}; with the "
                                   "rotation and translation fitted away only their distance varies, so PCA would "
                                   "show 100% in one component by construction. Use the distance as the coordinate.")
    sub = window_run(ctx.run, ctx.start, ctx.stop)
    cached = module_or_none("cached")
    work = (cached.cached_pca(sub, cache=window_cache(), **settings) if cached is not None  # shared_frames_job's key
            else proj.compute_pca(sub, **settings))
    pca = yield from _relay(work, 0, 1, 1, "principal components")
    traces: dict[str, Trace] = {}
    coords_text = plots.atoms_text(group)
    solute = coords.solute_atoms(ctx.run.topology, ctx.run.n_atoms)
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
    t = np.asarray(s1.time_ps, float)
    q1 = np.asarray(s1.values, float)
    figs = [plots.coordinate_pair_figure(s1, s2)]
    traces["phase.pair"] = Trace(t, q1, np.asarray(s2.values, float))
    land = module_or_none("landscape")
    if land is not None and s2.momentum is not None:
        sec = land.poincare_section(q1, np.asarray(s2.values, float), np.asarray(s2.momentum, float), t,
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
    corr = module_or_none("correlation")
    if corr is None:
        return missing("The correlation analysis", "correlation")
    figs: list[FigureSpec] = []
    notes: list[str] = []
    run = ctx.run
    series: list[tuple[str, np.ndarray, float, str]] = []
    table = _table_in_window(run, ctx.window_ps)
    if table is not None and len(table) > 8:
        for role in ("potential", "total", "temperature"):
            s = table.by_role(role)
            if s is not None:
                t = np.asarray(table.time_ps, float)
                series.append((s.name, np.asarray(s.values, float), float(np.median(np.diff(t))), s.unit))
                break
    if ctx.coordinate and run.frames is not None and module_or_none("coordinates") is not None:
        cs = yield from coordinate_series(run, ctx.coordinate, ctx.start, ctx.stop)
        t = np.asarray(cs.time_ps, float)
        if t.size > 8:
            series.append((cs.spec, np.asarray(cs.values, float), float(np.median(np.diff(t))), cs.unit))
    verdicts = []
    for i, (name, x, dt, unit) in enumerate(series):
        yield Progress(i, len(series) + 2, f"autocorrelation of {name}")
        what = {"series": name, "coordinate": ctx.coordinate, "start": ctx.start, "stop": ctx.stop,
                "window_ps": ctx.window_ps}
        res, blocks = yield from through_cache(run, "correlation", what, _correlation_numbers(corr, x, dt, unit))
        figs.append(plots.autocorrelation_figure(res, name=name))
        verdicts.append(corr.judge_ess(res, name=name))
        figs.append(plots.blocking_figure(blocks, name=name))
    vel = module_or_none("velocity")
    if vel is not None and run.frames is not None and run.frames.has_velocities and ctx.stop - ctx.start > 16:
        yield Progress(len(series), len(series) + 2, "velocity autocorrelation")
        sub = window_run(run, ctx.start, ctx.stop)
        v = yield from _relay(through_cache(sub, "vacf", {}, vel.vacf(sub)), 0, 1, 1, "VACF")
        figs.append(plots.vacf_figure(v))
        d = yield from _relay(through_cache(sub, "spectrum", {}, vel.vibrational_spectrum(sub)), 0, 1, 1,
                              "vibrational spectrum")
        figs.append(plots.vdos_figure(d))
    elif run.frames is not None and not run.has_velocities:
        notes.append("No velocities: the VACF and the vibrational spectrum need them.")
    if not figs:
        return PanelResult(message="Nothing to correlate: the run has no energy series and no coordinate.")
    # the ACF of a series in time: give the keys a suffix so each can be chosen on its own
    figs = [_rekey(f, i) for i, f in enumerate(figs)]
    return PanelResult(figures=tuple(figs), verdicts=tuple(verdicts), message=" ".join(notes))


def _correlation_numbers(corr: Any, x: np.ndarray, dt: float, unit: str) -> Generator[Progress, None, Any]:
    """Autocorrelation, statistical inefficiency and block averages of one series (FFTs of the whole series)."""
    yield Progress(0, 1, "autocorrelation and block averages")
    return corr.analyse_series(x, dt_ps=dt, unit=unit), corr.blocking(x, unit=unit)


def _rekey(fig: FigureSpec, i: int) -> FigureSpec:
    import dataclasses

    return dataclasses.replace(fig, key=f"{fig.key}.{i}")


# ---- Sampling -------------------------------------------------------------------------------

def sampling_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    """Running averages, coverage of phase space, segment divergence and R-hat (within and across runs)."""
    sampling = module_or_none("sampling")
    yield Progress(0, None, "sampling")
    if sampling is None:
        return missing("The sampling analysis (R-hat, coverage, running averages)", "sampling")
    from phasewake.core.errors import PhasewakeError

    figs: list[FigureSpec] = []
    verdicts: list[Any] = []
    notes: list[str] = []
    run = ctx.run
    series: list[tuple[str, str, np.ndarray, np.ndarray, str]] = []  # name, key, time, values, unit
    q_series = None
    if ctx.coordinate and run.frames is not None and module_or_none("coordinates") is not None:
        q_series = yield from coordinate_series(run, ctx.coordinate, ctx.start, ctx.stop)
        series.append((q_series.spec, "coordinate", np.asarray(q_series.time_ps, float),
                       np.asarray(q_series.values, float), q_series.unit))
    table = _table_in_window(run, ctx.window_ps)
    if table is not None and len(table) > 16:
        s = table.by_role("potential") or table.by_role("total")
        if s is not None:
            series.append((s.name, "energy", np.asarray(table.time_ps, float), np.asarray(s.values, float), s.unit))
    for name, key, t, x, unit in series:
        if t.size < 16:
            continue
        dt = float(np.median(np.diff(t)))
        try:
            what = {"series": key, "name": name, "coordinate": ctx.coordinate, "start": ctx.start, "stop": ctx.stop,
                    "window_ps": ctx.window_ps}
            ra, rh, div = yield from through_cache(run, "sampling", what, _sampling_numbers(sampling, x, dt, unit))
            verdicts.append(sampling.judge_rhat(rh, name=name))
            verdicts.append(sampling.judge_divergence(div, name=name))
        except PhasewakeError as exc:
            notes.append(f"{name}: {exc}")
            continue
        figs.append(plots.running_average_figure(ra, name=name, key=f"sampling.running.{key}",
                                                 time_offset_ps=float(t[0])))
    if q_series is not None and q_series.momentum is not None and q_series.values.size > 16:
        t = np.asarray(q_series.time_ps, float)
        cov = sampling.coverage_over_time(q_series.values, q_series.momentum, dt_ps=float(np.median(np.diff(t))))
        figs.append(plots.coverage_figure(cov, x_label=q_series.spec, y_label="p", time_offset_ps=float(t[0])))
    # across replicas: R-hat of the coordinate between the open runs that really are replicas of this one
    pooled, skipped = replicas_of(run, ctx.others)
    if skipped:
        notes.append("Not pooled as replicas: " + "; ".join(f"{name} ({why})" for name, why in skipped) + ".")
    if pooled and q_series is not None:
        chains = [np.asarray(q_series.values, float)]
        for k, other in enumerate(pooled):
            yield Progress(k, len(pooled), f"replica {other.name}")
            o = yield from coordinate_series(other, ctx.coordinate, 0, other.n_frames)
            chains.append(np.asarray(o.values, float))
        n = min(c.size for c in chains)
        names = ", ".join([run.name] + [o.name for o in pooled])
        try:
            verdicts.append(sampling.judge_rhat(sampling.rhat(np.stack([c[:n] for c in chains])),
                                                name=f"{ctx.coordinate} across {len(chains)} replicas ({names})"))
            notes.append(f"Pooled as replicas (same atoms, ensemble, thermostat, temperature and time step): {names}.")
        except PhasewakeError as exc:
            notes.append(f"R-hat across replicas: {exc}")
    if not figs and not verdicts:
        return PanelResult(message="Nothing to judge: the run has no coordinate and no energy series.")
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE

    return PanelResult(figures=tuple(figs), verdicts=tuple(verdicts), message=" ".join(notes + [HEURISTIC_NOTE]))


def replica_difference(run: Run, other: Run) -> str:
    """Why ``other`` is not a replica of ``run`` ('' when it is one): the same atoms (count, masses, names
    and elements where both have a topology) run the same way (ensemble, thermostat, its temperature and
    the time step, where the files or the user say)."""
    if other.frames is None:
        return "no frames"
    if other.n_atoms != run.n_atoms:
        return f"{other.n_atoms} atoms, not {run.n_atoms}"
    if not np.allclose(np.asarray(other.masses_amu, float), np.asarray(run.masses_amu, float), rtol=1e-4,
                       equal_nan=True):
        return "other atom masses"
    if run.topology is not None and other.topology is not None:
        def atoms(top: Any) -> list[tuple[str, str]]:
            return [(a.name, a.element.symbol if a.element is not None else "") for a in top.atoms]
        if atoms(run.topology) != atoms(other.topology):
            return "other atom names or elements"
    a, b = run.metadata, other.metadata

    def norm(v: Any) -> str:
        return str(v or "").strip().lower()

    if norm(a.ensemble) != norm(b.ensemble):
        return f"ensemble {b.ensemble or 'unknown'}, not {a.ensemble or 'unknown'}"
    if norm(a.thermostat) != norm(b.thermostat):
        return f"thermostat {b.thermostat or 'unknown'}, not {a.thermostat or 'unknown'}"
    if (a.temperature_K is None) != (b.temperature_K is None) or (
            a.temperature_K is not None and abs(float(a.temperature_K) - float(b.temperature_K)) > 1e-6):
        def kelvin(v: float | None) -> str:
            return "not stated" if v is None else f"{v:.4g} K"
        return f"target temperature {kelvin(b.temperature_K)}, not {kelvin(a.temperature_K)}"
    if (a.timestep_ps is None) != (b.timestep_ps is None) or (
            a.timestep_ps is not None and abs(float(a.timestep_ps) - float(b.timestep_ps)) > 1e-9 * max(1.0, a.timestep_ps)):
        def fs(v: float | None) -> str:
            return "unknown" if v is None else f"{v * 1e3:.4g} fs"
        return f"time step {fs(b.timestep_ps)}, not {fs(a.timestep_ps)}"
    return ""


def replicas_of(run: Run, others: tuple[Run, ...]) -> tuple[list[Run], list[tuple[str, str]]]:
    """The runs of ``others`` that are replicas of ``run``, and (name, why not) for the rest."""
    pooled: list[Run] = []
    skipped: list[tuple[str, str]] = []
    for o in others:
        why = replica_difference(run, o)
        if why:
            skipped.append((o.name, why))
        else:
            pooled.append(o)
    return pooled, skipped


def _sampling_numbers(sampling: Any, x: np.ndarray, dt: float, unit: str) -> Generator[Progress, None, Any]:
    """Running average, segment R-hat and segment divergence of one series (the heavy part: null draws)."""
    yield Progress(0, 1, "running average, R-hat and divergence")
    return (sampling.running_average(x, dt_ps=dt, unit=unit), sampling.rhat_segments(x),
            sampling.segment_divergence(x))


# ---- Crossings and Landscape ----------------------------------------------------------------

def _given_states(ctx: AnalysisContext) -> tuple[tuple[float, float] | None, float | None]:
    """States and surface dragged on the Landscape panel (choice 'landscape_marks')."""
    marks = ctx.choices.get("landscape_marks") or {}
    a = marks.get("state:A")
    b = marks.get("state:B")
    surf = marks.get("surface:dividing surface")
    states = (float(a[0]), float(b[0])) if a and b else None
    return states, (float(surf[0]) if surf else None)


def crossings_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    cr = module_or_none("crossings")
    if cr is None or module_or_none("coordinates") is None:
        return missing("The crossings analysis", "crossings")
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    temp, _ = temperature_of(ctx.run)
    states, surface = _given_states(ctx)
    kt_m = None
    if temp is not None and s.m_eff is not None and np.all(np.isfinite(s.m_eff)):
        kt_m = float(KB_KJ_PER_MOL_K * temp * np.mean(1.0 / np.asarray(s.m_eff, float)))
    work = cr.crossings_work([cr.as_trace(s, name=ctx.run.name)], states=states, surface=surface, unit=s.unit,
                             temperature_K=temp, kT_over_m_eff=kt_m)
    what = {"coordinate": ctx.coordinate, "start": ctx.start, "stop": ctx.stop, "name": ctx.run.name,
            "states": states, "surface": surface, "temperature_K": temp, "kT_over_m_eff": kt_m}
    res = yield from _relay(through_cache(ctx.run, "crossings", what, work), 0, 1, 1, "crossings")
    events = _event_rows(res, ctx)
    # the coordinate against time (linked to the cursor) first, then what core.plots draws of the result
    figs = [plots.coordinate_series_figure(s, crossings=res, key="crossings.series")] + _plots_figures(res)
    msg = (f"{res.n_transitions} transitions and {res.n_recrossings} recrossings of the dividing surface "
           f"{res.settings.surface:.4g} {res.settings.unit} (states: A \u2264 {res.settings.a_hi:.4g}, "
           f"B \u2265 {res.settings.b_lo:.4g}; {res.settings.states_source}).")
    return PanelResult(figures=tuple(figs), events=events, verdicts=tuple(res.verdicts), message=msg,
                       info={"crossings": res})


def _event_rows(res: Any, ctx: AnalysisContext) -> tuple[EventRow, ...]:
    ev = res.events
    rows = []
    paths = res.paths
    for r in ev:
        start_ps = end_ps = None
        if int(r["path"]) >= 0 and paths is not None and len(paths):
            pr = paths[int(r["path"])]
            names = pr.dtype.names or ()
            s_key = next((n for n in ("start_ps", "exit_ps", "t_start_ps", "time_start_ps") if n in names), None)
            e_key = next((n for n in ("end_ps", "entry_ps", "t_end_ps", "time_end_ps") if n in names), None)
            if s_key and e_key:
                start_ps, end_ps = float(pr[s_key]), float(pr[e_key])
        if start_ps is None:  # a few frames around the crossing
            dt = float(res.frame_spacing_ps)
            start_ps, end_ps = float(r["time_ps"]) - 5 * dt, float(r["time_ps"]) + 5 * dt
        dur = float(r["path_duration_ps"])
        rows.append(EventRow(index=int(r["index"]), time_ps=float(r["time_ps"]), frame=int(r["frame"]) + ctx.start,
                             kind=str(r["kind"]), direction=int(r["direction"]), from_state=str(r["from_state"]),
                             to_state=str(r["to_state"]), velocity=float(r["velocity"]),
                             velocity_unit=res.velocity_unit, duration_ps=None if not np.isfinite(dur) else dur,
                             start_ps=start_ps, end_ps=end_ps, replica=int(r["replica"])))
    return tuple(rows)


def landscape_job(ctx: AnalysisContext) -> Generator[Progress, None, PanelResult]:
    need = _need_coordinate(ctx)
    if need is not None:
        return need
    land = module_or_none("landscape")
    if land is None or module_or_none("coordinates") is None:
        return missing("The free-energy landscape", "landscape")
    s = yield from coordinate_series(ctx.run, ctx.coordinate, ctx.start, ctx.stop)
    temp, source = temperature_of(ctx.run)
    if temp is None:
        return PanelResult(message="The free-energy profile needs a temperature: state the thermostat "
                                   "temperature in the Runs list (the files do not say).")
    # the same profile as the report (no Jacobian), so both give the same barrier for one run; until both
    # come from one request, a distance's 4 pi r^2 correction is not applied here either
    jac = "none"
    try:
        prof = land.free_energy_profile(np.asarray(s.values, float), temperature_K=temp, unit=s.unit, jacobian=jac)
    except TypeError:
        prof = land.free_energy_profile(np.asarray(s.values, float), temperature_K=temp, unit=s.unit)
    states, surface = _given_states(ctx)
    cr = module_or_none("crossings")
    if states is None and cr is not None:
        try:
            sug = cr.suggest_states(np.asarray(s.values, float), unit=s.unit)
            states, surface = (sug.a_hi, sug.b_lo), (surface if surface is not None else sug.surface)
        except Exception:  # noqa: BLE001 - a profile without two states is still worth drawing
            states = None
    if surface is None and states is not None:
        surface = 0.5 * (states[0] + states[1])
    # ours first: it carries the states and the dividing surface as marks a user can drag
    figs = [plots.landscape_states_figure(prof, s, states=states, surface=surface, temperature_source=source)]
    figs += _plots_figures(prof)
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
