"""A multi-page report of a whole run (PDF through matplotlib's PdfPages; an HTML variant).

Sections, one page (or more) each: the run and the verdicts table; energy conservation; kinetic
temperature; the velocity spectrum behind the time-step check; the coordinate against time and its
phase portrait; time correlations (autocorrelation and blocking); sampling (free-energy profile of
the coordinate, whole run against each half); barrier crossings (summary table, dwell times).
Each figure has a caption saying what was computed with which settings, and every page carries the
reminder that these diagnostics are heuristics (:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).

An analysis that cannot run on the data (no velocities, too short, no transitions, module not
present) gives a page that says so and why, never an invented figure.

Building a report is long work: :func:`build_report` is a generator that yields
:class:`~phasewake.core.progress.Progress` and returns a :class:`ReportResult`.
"""

from __future__ import annotations

import base64
import dataclasses
import html
import importlib
import io
import textwrap
from collections.abc import Callable, Generator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core import __version__
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
from phasewake.core.errors import PhasewakeError
from phasewake.core.figures.export import (
    Preset,
    check_writable,
    draw_into,
    figure_png_bytes,
    file_metadata,
    preset_rc,
    provenance_json,
    provenance_of_run,
)
from phasewake.core.figures.spec import LEVEL_STYLE, FigureSpec, PlotSpec
from phasewake.core.progress import Progress, Work
from phasewake.core.store.atomic import write_bytes, write_text
from phasewake.core.store.cache import ResultCache
from phasewake.core.store.cached import cached_audit, cached_coordinates, cached_pca

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from phasewake.core.model.run import Run

# A4 landscape: a printed handout and a projected page both read well at this size.
PAGE_CM = (29.7, 21.0)
CM_PER_INCH = 2.54
_BODY = Preset("report", 27.0, 12.5, 10.0, 9.0, 11.0, 1.0, fixed_height=True,
               description="A4 landscape report page body")
_CAPTION_CHARS = 135  # characters per caption line at 9.5 pt across the page width (0.6 em each)
_TEXT_CHARS = 140  # the same for 9 pt text above a table

SECTION_ORDER = ("summary", "energy", "temperature", "timestep", "coordinate", "phase", "correlation", "sampling",
                 "crossings")
SECTION_TITLES = {
    "summary": "Run and verdicts",
    "energy": "Energy conservation",
    "temperature": "Kinetic temperature",
    "timestep": "Time step and fastest motion",
    "coordinate": "Coordinate and phase portrait",
    "phase": "Phase-space density and principal components",
    "correlation": "Time correlations",
    "sampling": "Sampling",
    "crossings": "Barrier crossings",
}


@dataclass(frozen=True)
class ReportPage:
    """One page of the report: a section's figure or table, or the reason it is missing."""

    section: str
    title: str
    figure: FigureSpec | None = None
    table: tuple[tuple[str, ...], ...] = ()  # rows of text cells (first row: header)
    table_levels: tuple[str, ...] = ()  # verdict level of each data row (for the level marker)
    text: str = ""  # free text above the figure or table (summary, or why a section is missing)
    caption: str = ""


@dataclass(frozen=True)
class ReportResult:
    """What was written, which sections have content and which were skipped (with the reason)."""

    path: Path
    html_path: Path | None
    n_pages: int
    sections: tuple[str, ...]  # section of each page, in order
    skipped: tuple[tuple[str, str], ...]  # (section, reason)
    verdict_levels: tuple[str, ...]
    settings: dict[str, Any] = field(default_factory=dict)
    figures: tuple[FigureSpec, ...] = ()  # every figure drawn in the report (to export one on its own)
    verdicts: tuple[Any, ...] = ()  # phasewake.core.analyses.verdicts.Verdict of the audit and crossings
    audit: Any = None  # the AuditResult, when the audit ran


# --------------------------------------------------------------------------------------------------
# collecting the analyses


def _optional(module: str) -> Any:
    """Import an analysis module, or None when this build does not have it."""
    try:
        return importlib.import_module(module)
    except ModuleNotFoundError as exc:
        if exc.name != module:
            raise
        return None


def _sub(work: Generator[Progress, None, Any], base: float, total: float, label: str) \
        -> Generator[Progress, None, Any]:
    """Run a sub-generator, rescaling its progress into [base, base + 1) of ``total`` steps."""
    try:
        while True:
            p = next(work)
            frac = p.fraction or 0.0
            yield Progress(base + min(frac, 0.999), total, f"{label}: {p.message}" if p.message else label)
    except StopIteration as stop:
        return stop.value


def build_report(
    run: Run,
    path: str | Path,
    *,
    coordinate: str | None = None,
    html_path: str | Path | None = None,
    temperature_K: float | None = None,
    n_constraints: int | None = None,
    timestep_ps: float | None = None,
    states: tuple[float, float] | None = None,
    surface: float | None = None,
    max_points: int = 20_000,
    preview_folder: str | Path | None = None,
    preview_dpi: float = 60.0,
    cache: ResultCache | None = None,
) -> Work[ReportResult]:
    """Analyse ``run`` and write a multi-page PDF report (and optionally an HTML one).

    Parameters
    ----------
    run : Run
    path : PDF to write (atomically)
    coordinate : coordinate specification for the phase portrait, correlation, sampling and
        crossings sections (default: the coordinate module's suggestion for the run)
    html_path : also write an HTML report with embedded PNG figures here
    temperature_K, n_constraints, timestep_ps : passed to the audit (override what the files say)
    states, surface : core-set limits (A_hi, B_lo) and dividing surface for the crossings section,
        in the coordinate's unit (default: suggested from its free-energy profile)
    max_points : largest number of frames drawn in a scatter figure (every k-th frame beyond it)
    preview_folder : also draw each page as ``page-NN.png`` here (to look at pages without a PDF viewer)
    preview_dpi : resolution of the page previews
    cache : the result cache for the audit, the coordinate and the principal components (default: the
        default cache, ``ResultCache()``; ``ResultCache(enabled=False)`` computes everything afresh)

    Returns
    -------
    ReportResult (from the generator's ``return``; drive it with ``phasewake.core.progress.drive``)
    """
    target = Path(path)
    check_writable(target)
    if html_path is not None:
        check_writable(Path(html_path))
    settings: dict[str, Any] = {"coordinate": coordinate, "temperature_K": temperature_K,
                                "n_constraints": n_constraints, "timestep_ps": timestep_ps,
                                "states": states, "surface": surface, "max_points": max_points}
    total = 8.0
    pages: list[ReportPage] = []
    skipped: list[tuple[str, str]] = []
    verdicts: list[Any] = []

    def skip(section: str, reason: str) -> None:
        skipped.append((section, reason))
        pages.append(ReportPage(section=section, title=SECTION_TITLES[section],
                                text=f"This section is not in the report: {reason}"))

    # 0. one read of the frames feeds the audit, the coordinate and the principal components ----------
    audit_kw = {"n_constraints": n_constraints, "timestep_ps": timestep_ps, "temperature_K": temperature_K}
    spec0, spec0_reason = _report_coordinate(run, coordinate)
    settings["coordinate_reason"] = spec0_reason
    shared = yield from _sub(_shared_pass(run, spec0, audit_kw, cache), 0, total, "one pass over the frames")

    # 1. audit ------------------------------------------------------------------------------------
    yield Progress(0, total, "auditing energies and temperature")
    audit = None
    audit_mod = _optional("phasewake.core.analyses.audit")
    if audit_mod is None:
        audit_reason = "the audit module is not part of this build"
    else:
        try:
            audit = yield from _sub(_or_alone(shared, "audit", lambda: cached_audit(run, cache=cache, **audit_kw)),
                                    0, total, "audit")
            verdicts.extend(audit.verdicts)
            audit_reason = ""
        except PhasewakeError as exc:
            audit_reason = f"the audit could not run: {exc}"

    # 2. coordinate, crossings --------------------------------------------------------------------
    yield Progress(1, total, "computing the coordinate")
    series = None
    coord_reason = ""
    coords_mod = _optional("phasewake.core.analyses.coordinates")
    if coords_mod is None:
        coord_reason = "the coordinate module is not part of this build"
    elif run.frames is None:
        coord_reason = "the run has no frames (energy table only)"
    else:
        try:
            spec = spec0
            if spec is None:
                coord_reason = ("no coordinate was given and " + (spec0_reason or "none could be suggested")
                                + ("" if "--coordinate" in spec0_reason else " (use --coordinate)"))
            else:
                settings["coordinate"] = spec
                out = yield from _sub(_or_alone(shared, "coordinate",
                                                lambda: cached_coordinates(run, [spec], cache=cache)),
                                      1, total, "coordinate")
                series = out[0]
        except PhasewakeError as exc:
            coord_reason = f"the coordinate could not be computed: {exc}"

    yield Progress(2, total, "finding barrier crossings")
    crossings = None
    cross_reason = coord_reason
    cross_mod = _optional("phasewake.core.analyses.crossings")
    if series is not None:
        if cross_mod is None:
            cross_reason = "the crossings module is not part of this build"
        else:
            try:
                if states is None and settings.get("coordinate") and hasattr(cross_mod, "check_not_stiff_bond"):
                    cross_mod.check_not_stiff_bond(str(settings["coordinate"]), run, [np.asarray(series.values)],
                                                   series.unit)
                crossings = cross_mod.analyse_crossings(
                    np.asarray(series.time_ps), np.asarray(series.values),
                    None if series.velocity is None else np.asarray(series.velocity),
                    **_crossing_kwargs(cross_mod, states, surface, series.unit,
                                       temperature_K or _temperature_of(run, audit)))
                verdicts.extend(crossings.verdicts)
            except PhasewakeError as exc:
                cross_reason = f"crossings could not be analysed: {exc}"

    from phasewake.core.figures import plots

    # pages ---------------------------------------------------------------------------------------
    # sampling numbers of the coordinate (their verdicts go into the table) ----------------------
    sampling = _sampling_numbers(series)
    verdicts.extend(sampling.get("verdicts", []))

    yield Progress(3, total, "drawing figures")
    pages.append(_summary_page(run, verdicts, audit, settings))

    if audit is not None and audit.energy is not None:
        fig = plots.audit_energy_figure(audit)
        pages.append(ReportPage("energy", SECTION_TITLES["energy"], figure=fig, caption=fig.caption))
    elif run.energies is not None:
        fig = plots.energy_series_figure(run.energies, run_name=run.name)
        pages.append(ReportPage("energy", SECTION_TITLES["energy"], figure=fig,
                                caption=fig.caption + (f" (No audit: {audit_reason}.)" if audit_reason else "")))
    else:
        skip("energy", "the run has no energy table")

    if audit is not None and audit.temperature is not None:
        fig = plots.audit_temperature_figure(audit)
        pages.append(ReportPage("temperature", SECTION_TITLES["temperature"], figure=fig, caption=fig.caption))
    elif run.energies is not None and run.energies.by_role("temperature") is not None:
        fig = plots.temperature_figure(run.energies, run_name=run.name, target_K=run.metadata.temperature_K)
        pages.append(ReportPage("temperature", SECTION_TITLES["temperature"], figure=fig, caption=fig.caption))
    else:
        skip("temperature", audit_reason or "no velocities and no temperature column")

    if audit is not None and audit.timestep is not None and np.asarray(audit.timestep.frequency_per_ps).size:
        fig = plots.audit_spectrum_figure(audit)
        pages.append(ReportPage("timestep", SECTION_TITLES["timestep"], figure=fig, caption=fig.caption))
    else:
        note = getattr(getattr(audit, "timestep", None), "note", "") if audit is not None else audit_reason
        skip("timestep", note or "no velocity spectrum could be computed")

    yield Progress(4, total, "phase portrait")
    if series is not None:
        f1 = plots.coordinate_series_figure(series, crossings=crossings)
        f2 = plots.phase_portrait_figure(series, crossings=crossings, max_points=max_points)
        both = FigureSpec(key="report.coordinate", title=f"{series.label}: time series and phase portrait",
                          plots=f1.plots + f2.plots, grid=(1, 2), caption=f1.caption + " " + f2.caption,
                          provenance={"parts": [f1.key, f2.key]})
        cap = both.caption if not spec0_reason or coordinate is not None else (
            f"Coordinate {series.label}, {spec0_reason}. " + both.caption)
        pages.append(ReportPage("coordinate", SECTION_TITLES["coordinate"], figure=both, caption=cap))
    else:
        skip("coordinate", coord_reason)

    yield Progress(4.5, total, "phase-space density and principal components")
    phase = yield from _phase_page(run, series, 4.5, total, cache=cache, shared=shared)
    if isinstance(phase, str):
        skip("phase", phase)
    else:
        pages.append(phase)

    yield Progress(5, total, "time correlations")
    pages.append(_correlation_page(run, audit, series) or
                 ReportPage("correlation", SECTION_TITLES["correlation"],
                            text="This section is not in the report: no series long enough to correlate."))
    if not pages[-1].figure:
        skipped.append(("correlation", "no series long enough to correlate"))

    yield Progress(6, total, "sampling")
    sp = _sampling_page(series, temperature_K or _temperature_of(run, audit), crossings, sampling)
    if isinstance(sp, str):
        skip("sampling", sp)
    else:
        pages.append(sp)

    if crossings is not None:
        rows = tuple((a, b) for a, b in plots.crossings_summary_rows(crossings))
        pages.append(ReportPage("crossings", SECTION_TITLES["crossings"],
                                table=(("Quantity", "Value"),) + rows,
                                text=" ".join(crossings.warnings)))
        fig = plots.dwell_times_figure(crossings)
        pages.append(ReportPage("crossings", SECTION_TITLES["crossings"] + ": dwell times", figure=fig,
                                caption=fig.caption))
    else:
        skip("crossings", cross_reason or "no coordinate")

    yield Progress(7, total, "writing the PDF")
    pages = [_explained(p) for p in pages]
    figs: list[FigureSpec] = []
    for p in pages:
        if p.figure is not None:
            figs.append(p.figure)
    if series is not None:
        figs.append(plots.phase_portrait_figure(series, crossings=crossings, max_points=max_points))
    prov = provenance_of_run(run, settings=settings)
    n_pages = _write_pdf(target, pages, run_name=run.name, provenance=prov)
    if preview_folder is not None:
        folder = Path(preview_folder)  # created, if need be, by the atomic writer
        laid = _paginate(pages)
        for i, p in enumerate(laid):
            fig = _page_figure(p, run_name=run.name, number=i + 1, n_total=len(laid))
            buf = io.BytesIO()
            with preset_rc(_BODY):
                fig.savefig(buf, format="png", dpi=preview_dpi)
            write_bytes(folder / f"page-{i + 1:02d}.png", buf.getbuffer())
    html_out = None
    if html_path is not None:
        html_out = _write_html(Path(html_path), pages, run_name=run.name, provenance=prov)
    yield Progress(8, total, "done")
    return ReportResult(path=target, html_path=html_out, n_pages=n_pages,
                        sections=tuple(p.section for p in _paginate(pages)), skipped=tuple(skipped),
                        verdict_levels=tuple(v.level for v in verdicts), settings=settings,
                        figures=tuple(figs), verdicts=tuple(verdicts), audit=audit)


def _temperature_of(run: Run, audit: Any) -> float:
    if run.metadata.temperature_K:
        return float(run.metadata.temperature_K)
    if audit is not None and audit.temperature is not None and np.isfinite(audit.temperature.mean_K):
        return float(audit.temperature.mean_K)
    if run.energies is not None:
        s = run.energies.by_role("temperature")
        if s is not None:
            return float(np.nanmean(s.values))
    return 300.0


def _crossing_kwargs(mod: Any, states: tuple[float, float] | None, surface: float | None, unit: str,
                     temperature_K: float) -> dict[str, Any]:
    import inspect

    params = inspect.signature(mod.analyse_crossings).parameters
    kw: dict[str, Any] = {}
    for name, value in (("states", states), ("surface", surface), ("unit", unit),
                        ("temperature_K", temperature_K)):
        if name in params and value is not None:
            kw[name] = value
    return kw


def _summary_page(run: Run, verdicts: Sequence[Any], audit: Any, settings: Mapping[str, Any]) -> ReportPage:
    from phasewake.core.figures import plots

    lines = [f"Run: {run.name}", f"Files: {', '.join(str(p) for p in run.paths) or '(in memory)'}",
             f"{run.n_atoms} atoms, {run.n_frames} frames"
             + (f", {run.time_ps[0]:.4g}–{run.time_ps[-1]:.4g} ps" if run.n_frames else "")
             + (f", frame spacing {run.frame_spacing_ps:.4g} ps" if run.frame_spacing_ps else ""),
             "Velocities: " + ("estimated from positions" if run.frames is not None and
                               run.frames.velocities_estimated else
                               "stored" if run.has_velocities else "none"),
             "Energy terms: " + (", ".join(f"{s.name} ({s.unit})" for s in run.energies.series.values())
                                 if run.energies is not None else "none")]
    md = run.metadata
    meta = [f"{k} {v}" for k, v in (("ensemble", md.ensemble), ("thermostat", md.thermostat),
                                   ("time step", f"{md.timestep_ps * 1e3:g} fs" if md.timestep_ps else None),
                                   ("target", f"{md.temperature_K:g} K" if md.temperature_K else None))
            if v]
    if meta:
        lines.append("Metadata: " + ", ".join(meta))
    if audit is not None and getattr(audit, "ensemble_source", None):
        lines.append(f"Ensemble judged: {audit.ensemble}, {audit.ensemble_source}")
    if audit is not None and not getattr(audit, "checked", True):
        lines.append("Audit: nothing could be checked with what the files hold (each 'not checked' row says what "
                     "its check needs).")
    why = settings.get("coordinate_reason") or ""
    lines.append("Coordinate analysed: " + str(settings.get("coordinate") or "none") + (f" ({why})" if why else ""))
    if run.warnings:
        lines.append("Reader warnings: " + " ".join(run.warnings))
    if audit is not None and audit.notes:
        notes = [n for n in audit.notes if not any(w in n or n in w for w in run.warnings)]
        if notes:
            lines.append("Audit notes: " + " ".join(notes))
    rows = plots.verdict_rows(verdicts)
    table = [("Verdict", "Check", "Measured", "Threshold (source)", "What was measured; what to do")]
    levels = []
    for r in rows:
        thr = r["threshold"] + (f" ({r['source']})" if r["source"] else "")
        table.append((r["level"], r["check"], r["measured"], thr,
                      r["message"].replace(HEURISTIC_NOTE, "").strip()
                      + (" Advice: " + r["advice"] if r["advice"] and r["level"] in ("caution", "problem") else "")))
        levels.append(r["level"])
    if not rows:
        lines.append("No verdicts: no analysis that judges the run could run on it.")
    return ReportPage("summary", SECTION_TITLES["summary"], table=tuple(table), table_levels=tuple(levels),
                      text="\n".join(lines))


def _correlation_page(run: Run, audit: Any, series: Any) -> ReportPage | None:
    corr = _optional("phasewake.core.analyses.correlation")
    if corr is None:
        return None
    from phasewake.core.figures import plots

    candidates: list[tuple[str, np.ndarray, float, str]] = []
    if series is not None and series.values.size > 20:
        dt = float(np.median(np.diff(series.time_ps)))
        candidates.append((series.label, np.asarray(series.values, float), dt, series.unit))
    if run.energies is not None and len(run.energies) > 20:
        pot = run.energies.by_role("potential")
        if pot is not None:
            dt = float(np.median(np.diff(run.energies.time_ps)))
            candidates.append((pot.name, np.asarray(pot.values, float), dt, pot.unit))
    figs: list[FigureSpec] = []
    for name, x, dt, unit in candidates[:2]:
        x = x[np.isfinite(x)]
        try:
            res = corr.analyse_series(x, dt_ps=dt, unit=unit)
            figs.append(plots.autocorrelation_figure(res, name=name))
            if len(figs) == 1 and hasattr(corr, "blocking"):
                figs.append(plots.blocking_figure(corr.blocking(x, unit=unit), name=name))
        except PhasewakeError:
            continue
    if not figs:
        return None
    spec = FigureSpec(key="report.correlation", title="Time correlations",
                      plots=tuple(p for f in figs for p in f.plots), grid=(1, len(figs)),
                      provenance={"parts": [f.key for f in figs]},
                      caption=" ".join(f"({chr(97 + i)}) {f.caption.rstrip()}" + ("" if f.caption.rstrip().endswith(".")
                                                                                 else ".")
                                       for i, f in enumerate(figs)))
    return ReportPage("correlation", SECTION_TITLES["correlation"], figure=spec, caption=spec.caption)


def _explained(page: ReportPage) -> ReportPage:
    """The page with the explanation of its figure's numbers appended to its caption: the words of the
    window's tooltips (``phasewake.core.analyses.explain``)."""
    from phasewake.core.analyses import explain

    if page.figure is None:
        return page
    parts = page.figure.provenance.get("parts") if isinstance(page.figure.provenance, dict) else None
    note = explain.caption_note(list(parts) if parts else page.figure.key,
                                numbers_only=True)  # verdicts: explained in the verdict table
    if not note:
        return page
    caption = page.caption.rstrip()
    caption = (caption + ("" if not caption or caption.endswith(".") else ".") + " About the numbers. " + note).strip()
    return dataclasses.replace(page, caption=caption)


PCA_EXACT_MAX_COORDS = 3_000  # above this many coordinates the randomized route (as in the window)


def _report_coordinate(run: Run, coordinate: str | None) -> tuple[str | None, str]:
    """The report's coordinate and why: the one given (reason ""), else the automatic choice of
    :func:`phasewake.core.analyses.coordinate_choice.choose_coordinate` with its reason (spec None for a pure liquid)."""
    chooser = _optional("phasewake.core.analyses.coordinate_choice")
    if coordinate is not None or chooser is None or run.frames is None:
        return coordinate, ""
    try:
        choice = chooser.choose_coordinate(run)
    except PhasewakeError as exc:
        return None, f"no coordinate could be chosen automatically: {exc}"
    return choice.spec, choice.reason


def _pca_request(run: Run) -> dict[str, Any] | None:
    """The principal-components settings of the report (solute atoms; exact route when small), or None."""
    coords = _optional("phasewake.core.analyses.coordinates")
    if coords is None or run.frames is None or _optional("phasewake.core.analyses.projection") is None:
        return None
    group = coords.solute_atoms(run.topology, run.n_atoms)
    if group is None or np.asarray(group).size < 3:  # 2 atoms: one distance, no PCA
        return None
    method = "exact" if 3 * np.asarray(group).size <= PCA_EXACT_MAX_COORDS else "randomized"
    return {"atom_indices": group, "n_components": 3, "method": method}


def _shared_pass(run: Run, spec: str | None, audit_kw: Mapping[str, Any],
                 cache: ResultCache | None) -> Generator[Progress, None, dict[str, Any]]:
    """The audit, the coordinate and the principal components from one read of the frames (each looked up in
    the result cache first: ``cached.cached_pass``). Analyses that cannot share it are left to run alone."""
    from phasewake.core.store import cached as cached_mod

    if run.frames is None:
        return {}
    items: dict[str, Any] = {}
    try:
        if _optional("phasewake.core.analyses.audit") is not None:
            items["audit"] = cached_mod.audit_item(run, **audit_kw)
        if spec is not None and _optional("phasewake.core.analyses.coordinates") is not None:
            items["coordinate"] = cached_mod.coordinates_item(run, [spec])
        pca_kw = _pca_request(run)
        if pca_kw is not None:
            items["pca"] = cached_mod.pca_item(run, **pca_kw)
    except PhasewakeError:
        return {}  # a bad coordinate and the like: each section reports it on its own
    if not items:
        return {}
    return (yield from cached_mod.cached_pass(run, items, cache=cache))


def _or_alone(shared: Mapping[str, Any], name: str, alone: Any) -> Generator[Progress, None, Any]:
    """The shared pass's result for ``name`` (raising the error that stopped it), else ``alone()`` run alone."""
    value = shared.get(name)
    if isinstance(value, PhasewakeError):
        raise value
    if value is not None:
        return value
    return (yield from alone())


def _phase_page(run: Run, series: Any, base: float, total: float, *, cache: ResultCache | None = None,
                shared: Mapping[str, Any] | None = None) -> Generator[Progress, None, ReportPage | str]:
    """Density of the coordinate in the (q, p) plane and the principal components of the solute."""
    from phasewake.core.figures import plots

    yield Progress(base, total, "phase-space density")
    figs: list[FigureSpec] = []
    reasons: list[str] = []
    land = _optional("phasewake.core.analyses.landscape")
    if series is None:
        reasons.append("no coordinate")
    elif land is None:
        reasons.append("the landscape module is not part of this build")
    else:
        p = series.momentum if series.momentum is not None else series.velocity
        if p is None:
            reasons.append("the coordinate has no momentum (no velocities)")
        else:
            pu = series.momentum_unit if series.momentum is not None else series.velocity_unit
            try:
                h = land.histogram_2d(np.asarray(series.values, float), np.asarray(p, float), x_unit=series.unit,
                                      y_unit=pu)
                figs.append(plots.phase_density_figure(series, h))
            except PhasewakeError as exc:
                reasons.append(f"the density could not be computed: {exc}")
    proj = _optional("phasewake.core.analyses.projection")
    coords = _optional("phasewake.core.analyses.coordinates")
    group = None if coords is None or run.frames is None else coords.solute_atoms(run.topology, run.n_atoms)
    if proj is not None and group is not None and np.asarray(group).size >= 3:  # 2 atoms: one distance, no PCA
        try:
            method = "exact" if 3 * np.asarray(group).size <= PCA_EXACT_MAX_COORDS else "randomized"
            pca = yield from _sub(_or_alone(shared or {}, "pca", lambda: cached_pca(
                run, atom_indices=group, n_components=3, method=method, cache=cache)), base, total,
                "principal components")
            figs.append(plots.pca_variance_figure(pca))
        except PhasewakeError as exc:
            reasons.append(f"the principal components could not be computed: {exc}")
    elif run.frames is None:
        reasons.append("the run has no frames")
    elif group is not None:
        reasons.append("principal components left out: the solute has fewer than 3 atoms")
    if not figs:
        return "; ".join(reasons) or "nothing to draw"
    spec = FigureSpec(key="report.phase", title=SECTION_TITLES["phase"], plots=tuple(pl for f in figs for pl in f.plots),
                      grid=(1, len(figs)), provenance={"parts": [f.key for f in figs]},
                      caption=" ".join([f"({chr(97 + i)}) {f.caption.rstrip()}" for i, f in enumerate(figs)]
                                       + [r[0].upper() + r[1:] + "." for r in reasons]))
    return ReportPage("phase", SECTION_TITLES["phase"], figure=spec, caption=spec.caption)


def _sampling_numbers(series: Any) -> dict[str, Any]:
    """Running average, half-against-half divergence and segment R-hat of the coordinate, with verdicts."""
    samp = _optional("phasewake.core.analyses.sampling")
    out: dict[str, Any] = {"verdicts": []}
    if samp is None or series is None:
        return out
    q = np.asarray(series.values, float)
    q = q[np.isfinite(q)]
    if q.size < 40:
        return out
    dt = float(np.median(np.diff(series.time_ps)))
    name = series.label
    corr = _optional("phasewake.core.analyses.correlation")
    if corr is not None and hasattr(corr, "judge_estimators"):
        try:  # the estimators of g compared (an oscillating coordinate closes Sokal's window early)
            est = corr.judge_estimators(corr.analyse_series(q, dt_ps=dt, unit=series.unit), name=name)
            if est is not None:
                out["verdicts"].append(est)
        except PhasewakeError as exc:
            out["estimators_error"] = str(exc)
    try:
        out["running"] = samp.running_average(q, dt_ps=dt, unit=series.unit)
    except PhasewakeError as exc:
        out["running_error"] = str(exc)
    try:
        div = samp.segment_divergence(q)
        out["divergence"] = div
        out["verdicts"].append(samp.judge_divergence(div, name=name))
    except PhasewakeError as exc:
        out["divergence_error"] = str(exc)
    p = series.momentum if series.momentum is not None else series.velocity
    if p is not None and np.asarray(p).size == np.asarray(series.values).size:
        both = np.isfinite(series.values) & np.isfinite(p)
        try:
            out["coverage"] = samp.coverage_over_time(np.asarray(series.values)[both], np.asarray(p)[both], dt_ps=dt)
        except PhasewakeError as exc:
            out["coverage_error"] = str(exc)
    try:
        rh = samp.rhat_segments(q)
        out["rhat"] = rh
        out["verdicts"].append(samp.judge_rhat(rh, name=name))
    except PhasewakeError as exc:
        out["rhat_error"] = str(exc)
    return out


def _sampling_page(series: Any, temperature_K: float, crossings: Any,
                   sampling: Mapping[str, Any] | None = None) -> ReportPage | str:
    """Free-energy profile of the coordinate over the whole run and over each half (a sampling check)."""
    land = _optional("phasewake.core.analyses.landscape")
    if land is None:
        return "the landscape module is not part of this build"
    if series is None:
        return "no coordinate"
    from phasewake.core.figures import plots
    from phasewake.core.figures.spec import Line, Style, series_style

    q = np.asarray(series.values, float)
    q = q[np.isfinite(q)]
    if q.size < 40:
        return f"the coordinate has only {q.size} frames"
    try:
        whole = land.free_energy_profile(q, temperature_K=temperature_K, unit=series.unit)
        edges = np.asarray(whole.edges)
        half = q.size // 2
        halves = [land.free_energy_profile(part, temperature_K=temperature_K, unit=series.unit, bins=edges)
                  for part in (q[:half], q[half:])]
    except PhasewakeError as exc:
        return f"the free-energy profile could not be computed: {exc}"
    base = plots.free_energy_profile_figure(whole, label=series.label, crossings=crossings)
    items = list(base.plots[0].items)
    for i, (h, name) in enumerate(zip(halves, ("first half", "second half"))):
        f = np.asarray(h.free_energy_kJ_per_mol, float)
        ok = np.isfinite(f)
        st = series_style(i + 1, marker=True)
        items.append(Line(np.asarray(h.centers)[ok], f[ok], label=name,
                          style=Style(colour=st.colour, dash=st.dash, marker=st.marker, width=1.2)))
    p0 = base.plots[0]
    plot = PlotSpec(title=p0.title, x=p0.x, y=p0.y, items=tuple(items), note=p0.note)
    caption = (base.caption + " Dashed and dotted: the same profile from the first and the second half of the "
               "run on the same bins; halves that disagree beyond the block errors mean the run has not "
               "sampled the coordinate's distribution yet.")
    plots_: list[PlotSpec] = [plot]
    sampling = sampling or {}
    if "running" in sampling:
        ra = plots.running_average_figure(sampling["running"], name=series.label)
        plots_.extend(ra.plots)
        caption += " Right: " + ra.caption
    if "coverage" in sampling:
        cov = plots.coverage_figure(sampling["coverage"], x_label=series.label, y_label="p")
        plots_.extend(cov.plots)
        caption += " Far right: " + cov.caption
    if "divergence" in sampling:
        d = sampling["divergence"]
        caption += (f" Half against half, the Jensen–Shannon divergence of {series.label} is "
                    f"{d.half_jsd_nats:.3g} nats against {d.half_null_nats:.2g} nats expected from noise.")
    if "rhat" in sampling:
        rh = sampling["rhat"]
        caption += (f" Rank-normalised split R̂ over {rh.n_chains} segments (Vehtari et al. 2021): {rh.rhat:.3f} "
                    f"(threshold {rh.threshold:g}).")
    parts = ["landscape.profile"] + (["sampling.running"] if "running" in sampling else []) \
        + (["sampling.coverage"] if "coverage" in sampling else [])
    spec = FigureSpec(key="report.sampling", title="Sampling", plots=tuple(plots_), grid=(1, len(plots_)),
                      caption=caption, provenance={"parts": parts})
    return ReportPage("sampling", SECTION_TITLES["sampling"], figure=spec, caption=caption)


# --------------------------------------------------------------------------------------------------
# drawing pages


def _paginate(pages: Sequence[ReportPage]) -> list[ReportPage]:
    """Split long tables over several pages (the summary's table repeats its header)."""
    out: list[ReportPage] = []
    for p in pages:
        if not p.table:
            out.append(p)
            continue
        header, rows = p.table[0], list(p.table[1:])
        budget = 36 - (len(_wrap(p.text, _TEXT_CHARS)) if p.text else 0)
        chunk: list[tuple[str, ...]] = []
        lv: list[str] = []
        used = 0
        first = True
        for i, r in enumerate(rows):
            h = _row_height(r, p)
            if chunk and used + h > budget:
                out.append(ReportPage(p.section, p.title if first else p.title + " (continued)",
                                      table=(header, *chunk), table_levels=tuple(lv),
                                      text=p.text if first else "", caption=p.caption))
                first, chunk, lv, used, budget = False, [], [], 0, 42
            chunk.append(r)
            if p.table_levels:
                lv.append(p.table_levels[i])
            used += h
        out.append(ReportPage(p.section, p.title if first else p.title + " (continued)",
                              table=(header, *chunk), table_levels=tuple(lv), text=p.text if first else "",
                              caption=p.caption))
    return out


def _widths(ncols: int) -> list[int]:
    """Characters per column line: the page body is 785 pt wide and a DejaVu Sans character is about
    0.6 em, so about 160 characters fit at 8 pt and 130 at 10 pt; the rest is the gap between columns."""
    if ncols == 5:
        return [13, 24, 14, 28, 85]
    if ncols == 2:
        return [28, 96]
    return [150 // max(1, ncols)] * ncols


def _row_font(ncols: int) -> float:
    return 8.0 if ncols > 2 else 10.0


def _wrap(text: str, width: int) -> list[str]:
    out: list[str] = []
    for para in str(text).split("\n"):
        out.extend(textwrap.wrap(para, width=width) or [""])
    return out


def _row_height(row: Sequence[str], page: ReportPage) -> int:
    w = _widths(len(row))
    return max(len(_wrap(c, w[i])) for i, c in enumerate(row)) + 0


def _page_figure(page: ReportPage, *, run_name: str, number: int, n_total: int) -> Figure:
    from matplotlib.figure import Figure

    w, h = PAGE_CM[0] / CM_PER_INCH, PAGE_CM[1] / CM_PER_INCH
    foot = "\n".join(_wrap(HEURISTIC_NOTE, 200))
    folio = f"phasewake {__version__} · page {number} of {n_total}"
    if page.figure is not None and not page.table:
        cap_lines = _wrap(page.caption, _CAPTION_CHARS)
        head_in = 0.75
        cap_in = len(cap_lines) * 9.5 * 1.3 / 72 + 0.55
        fig = Figure(figsize=(w, h), layout="constrained")
        parts: Any = fig.subfigures(3, 1, height_ratios=[head_in, h - head_in - cap_in, cap_in])
        head, body, tail = parts
        head.text(0.035, 0.7, page.title, fontsize=17, weight="bold", va="center")
        head.text(0.965, 0.7, run_name, fontsize=10, va="center", ha="right", color="#444444")
        draw_into(body, page.figure, preset=_BODY, title=len(page.figure.plots) == 1)
        tail.text(0.035, 1.0, "\n".join(cap_lines), fontsize=9.5, va="top", linespacing=1.3)
        tail.text(0.035, 0.06, foot, fontsize=7.5, va="bottom", color="#444444")
        tail.text(0.965, 0.06, folio, fontsize=7.5, va="bottom", ha="right", color="#444444")
        return fig
    fig = Figure(figsize=(w, h))
    fig.text(0.035, 0.955, page.title, fontsize=17, weight="bold", va="top")
    fig.text(0.965, 0.955, run_name, fontsize=10, va="top", ha="right", color="#444444")
    fig.text(0.035, 0.025, foot, fontsize=7.5, va="bottom", color="#444444")
    fig.text(0.965, 0.025, folio, fontsize=7.5, va="bottom", ha="right", color="#444444")
    top = 0.9
    if not page.table:
        fig.text(0.035, top, "\n".join(_wrap(page.text, 105)), fontsize=12, va="top")
        return fig
    y = top
    if page.text:
        lines = _wrap(page.text, _TEXT_CHARS)
        fig.text(0.035, y, "\n".join(lines), fontsize=9, va="top", linespacing=1.3)
        y -= (len(lines) + 1) * 9 * 1.3 / 72 / h
    _draw_table(fig, page, y, h)
    return fig


def _draw_table(fig: Figure, page: ReportPage, y: float, h_in: float) -> None:
    widths = _widths(len(page.table[0]))
    total = sum(widths)
    x0, x1 = 0.035, 0.965
    xs = [x0]
    for w in widths[:-1]:
        xs.append(xs[-1] + (x1 - x0) * w / total)
    font = _row_font(len(page.table[0]))
    line_h = font * 1.3 / 72 / h_in
    for r, row in enumerate(page.table):
        cells = [_wrap(c, widths[i]) for i, c in enumerate(row)]
        n = max(len(c) for c in cells)
        if r == 0:
            fig.patches.append(_rect(fig, x0, y - line_h * n - 0.004, x1 - x0, line_h * n + 0.008, "#e8e8e8"))
        level = page.table_levels[r - 1] if r > 0 and page.table_levels else None
        for i, c in enumerate(cells):
            text = "\n".join(c)
            colour = "black"
            weight = "bold" if r == 0 else "normal"
            dx = 0.0
            if i == 0 and level is not None:
                colour_l, marker = LEVEL_STYLE.get(level, LEVEL_STYLE["info"])
                fig.lines.append(_marker(fig, xs[0] + 0.006, y - line_h * 0.5, marker, colour_l))
                dx = 0.016
                colour = "black"
                weight = "bold" if level in ("caution", "problem") else "normal"
            fig.text(xs[i] + dx, y, text, fontsize=font, va="top", color=colour, weight=weight,
                     linespacing=1.3)
        y -= line_h * n + 0.012
        fig.lines.append(_hline(fig, x0, x1, y + 0.006))


def _rect(fig: Figure, x: float, y: float, w: float, h: float, colour: str) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), w, h, transform=fig.transFigure, facecolor=colour, edgecolor="none", figure=fig)


def _hline(fig: Figure, x0: float, x1: float, y: float) -> Any:
    from matplotlib.lines import Line2D

    return Line2D([x0, x1], [y, y], transform=fig.transFigure, color="#cccccc", linewidth=0.6, figure=fig)


def _marker(fig: Figure, x: float, y: float, marker: str, colour: str) -> Any:
    from matplotlib.lines import Line2D

    m = {"d": "D"}.get(marker, marker)
    return Line2D([x], [y], transform=fig.transFigure, marker=m, color=colour, markersize=6,
                  markeredgewidth=1.5, linestyle="none", figure=fig)


def _write_pdf(target: Path, pages: Sequence[ReportPage], *, run_name: str, provenance: Mapping[str, Any]) -> int:
    from matplotlib.backends.backend_pdf import PdfPages

    laid = _paginate(pages)
    meta = file_metadata("pdf", f"phasewake report: {run_name}", provenance)
    buf = io.BytesIO()  # the whole PDF in memory first: a full disk meets one plain write, not the PDF writer
    with preset_rc(_BODY), PdfPages(buf, metadata=meta) as pdf:
        for i, p in enumerate(laid):
            fig = _page_figure(p, run_name=run_name, number=i + 1, n_total=len(laid))
            pdf.savefig(fig)
    write_bytes(target, buf.getbuffer())
    return len(laid)


def _write_html(target: Path, pages: Sequence[ReportPage], *, run_name: str, provenance: Mapping[str, Any]) -> Path:
    esc: Callable[[str], str] = html.escape
    parts = [
        "<!DOCTYPE html>", "<html lang='en'><head><meta charset='utf-8'>",
        f"<title>phasewake report: {esc(run_name)}</title>",
        f"<meta name='generator' content='phasewake {esc(__version__)}'>",
        f"<script type='application/json' id='provenance'>{esc(provenance_json(provenance))}</script>",
        "<style>body{font-family:sans-serif;max-width:70em;margin:2em auto;color:#111;line-height:1.4}"
        "img{max-width:100%}table{border-collapse:collapse;font-size:0.9em}td,th{border:1px solid #ccc;"
        "padding:0.3em 0.5em;vertical-align:top}th{background:#eee}.caption{color:#333}"
        ".note{color:#555;font-size:0.9em}.ok{color:#009E73}.caution{color:#b37a00}.problem{color:#D55E00}"
        "</style></head><body>",
        f"<h1>phasewake report: {esc(run_name)}</h1>",
        f"<p class='note'>{esc(HEURISTIC_NOTE)}</p>",
    ]
    symbol = {"ok": "●", "caution": "▲", "problem": "✖", "info": "■"}
    for p in pages:
        parts.append(f"<section><h2>{esc(p.title)}</h2>")
        if p.text:
            parts.append("<p>" + "<br>".join(esc(ln) for ln in p.text.split("\n")) + "</p>")
        if p.table:
            parts.append("<table><tr>" + "".join(f"<th>{esc(c)}</th>" for c in p.table[0]) + "</tr>")
            for i, row in enumerate(p.table[1:]):
                lv = p.table_levels[i] if p.table_levels else ""
                cells = [esc(c) for c in row]
                if lv:
                    cells[0] = f"<span class='{lv}'>{symbol.get(lv, '')} {cells[0]}</span>"
                parts.append("<tr>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
            parts.append("</table>")
        if p.figure is not None:
            png = base64.b64encode(figure_png_bytes(p.figure, preset="double", dpi=110)).decode("ascii")
            parts.append(f"<figure><img alt='{esc(p.figure.title)}' src='data:image/png;base64,{png}'>"
                         f"<figcaption class='caption'>{esc(p.caption)}</figcaption></figure>")
        parts.append("</section>")
    parts.append(f"<p class='note'>phasewake {esc(__version__)}. {esc(HEURISTIC_NOTE)}</p></body></html>")
    check_writable(target)
    write_text(target, "\n".join(parts))
    return target
