"""The sections of a report, each drawn from the results of :mod:`phasewake.core.figures.report_analyses`.

:func:`build_sections` makes a page per section, in :data:`SECTION_ORDER`: the run and the verdicts
table; energy conservation; kinetic temperature; the velocity spectrum behind the time-step check; the
coordinate against time and its phase portrait; the phase-space density and principal components; time
correlations; sampling; barrier crossings. A section whose analysis is missing gets a page that says why.
Each figure's caption says what was computed with which settings and ends with the explanation of its
numbers that the window shows as tooltips (:mod:`phasewake.core.analyses.explain`).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
from phasewake.core.figures import plots
from phasewake.core.figures.report_analyses import ReportAnalyses, ReportSettings
from phasewake.core.figures.report_pages import SECTION_TITLES, ReportPage
from phasewake.core.figures.spec import FigureSpec, Line, PlotSpec, Style, series_style

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


@dataclass(frozen=True)
class ReportSections:
    """The report's pages in order, the sections left out (with the reason) and the verdicts of the table."""

    pages: tuple[ReportPage, ...]
    skipped: tuple[tuple[str, str], ...]
    verdicts: tuple[Any, ...]


def missing(section: str, reason: str) -> ReportPage:
    """The page of a section that is not in the report, saying why."""
    return ReportPage(section=section, title=SECTION_TITLES[section],
                      text=f"This section is not in the report: {reason}")


def build_sections(run: Run, got: ReportAnalyses, settings: ReportSettings,
                   shown: Mapping[str, Any]) -> ReportSections:
    """A page (or a few) per section from the analyses; ``shown`` is the settings table of the summary."""
    verdicts = got.verdicts
    made: list[ReportPage | tuple[str, str]] = [
        summary_page(run, verdicts, got.audit, shown),
        energy_page(run, got), temperature_page(run, got), timestep_page(got),
        coordinate_page(got, settings.max_points), phase_page(got), correlation_page(got), sampling_page(got),
        *crossings_pages(got),
    ]
    pages: list[ReportPage] = []
    skipped: list[tuple[str, str]] = []
    for item in made:
        if isinstance(item, ReportPage):
            pages.append(explained(item))
        else:
            skipped.append(item)
            pages.append(missing(*item))
    return ReportSections(pages=tuple(pages), skipped=tuple(skipped), verdicts=tuple(verdicts))


def _figure_page(section: str, fig: FigureSpec, caption: str | None = None, title: str | None = None) -> ReportPage:
    return ReportPage(section, title or SECTION_TITLES[section], figure=fig,
                      caption=fig.caption if caption is None else caption)


def _joined(key: str, title: str, figs: Sequence[FigureSpec], caption: str) -> FigureSpec:
    """Several figures side by side as one (their plots in a row, each part's key kept for the explanations)."""
    return FigureSpec(key=key, title=title, plots=tuple(p for f in figs for p in f.plots), grid=(1, len(figs)),
                      caption=caption, provenance={"parts": [f.key for f in figs]})


def _lettered(figs: Sequence[FigureSpec], *, full_stop: bool) -> list[str]:
    """Captions as "(a) ... (b) ...", each ended by a full stop when ``full_stop``."""
    out = []
    for i, f in enumerate(figs):
        c = f.caption.rstrip()
        out.append(f"({chr(97 + i)}) {c}" + ("." if full_stop and not c.endswith(".") else ""))
    return out


def summary_page(run: Run, verdicts: Sequence[Any], audit: Any, shown: Mapping[str, Any]) -> ReportPage:
    """The run in a few lines (files, atoms, frames, velocities, energy terms, metadata) and the verdicts table."""
    lines = [f"Run: {run.name}", f"Files: {', '.join(str(p) for p in run.paths) or '(in memory)'}",
             f"{run.n_atoms} atoms, {run.n_frames} frames"
             + (f", {run.time_ps[0]:.4g}–{run.time_ps[-1]:.4g} ps" if run.n_frames else "")
             + (f", frame spacing {run.frame_spacing_ps:.4g} ps" if run.frame_spacing_ps else ""),
             "Velocities: " + ("estimated from positions" if run.frames is not None and
                               run.frames.velocities_estimated else
                               "stored" if run.has_velocities else "none"),
             "Energy terms: " + (", ".join(f"{s.name} ({s.unit})" if s.unit else s.name
                                           for s in run.energies.series.values())
                                 if run.energies is not None else "none")]
    md = run.metadata
    meta = [f"{k} {v}" for k, v in (("ensemble", md.ensemble), ("thermostat", md.thermostat),
                                   ("time step", f"{md.timestep_ps * 1e3:g} fs" if md.timestep_ps else None),
                                   ("target", f"{md.temperature_K:g} K" if md.temperature_K else None))
            if v]
    if meta:
        lines.append("Metadata: " + ", ".join(meta))
    if audit is not None and audit.ensemble_source:
        lines.append(f"Ensemble judged: {audit.ensemble}, {audit.ensemble_source}")
    if audit is not None and not audit.checked:
        lines.append("Audit: nothing could be checked with what the files hold (each 'not checked' row says what "
                     "its check needs).")
    if shown.get("replicas"):
        names = list(shown["replicas"])
        lines.append(f"Replica ensemble: {len(names)} runs ({', '.join(names)}); the barrier-crossing pages pool "
                     f"all of them and give a row per replica; every other page is of {names[0]}.")
    why = shown.get("coordinate_reason") or ""
    lines.append("Coordinate analysed: " + str(shown.get("coordinate") or "none") + (f" ({why})" if why else ""))
    if run.warnings:
        lines.append("Reader warnings: " + " ".join(run.warnings))
    if audit is not None and audit.notes:
        notes = [n for n in audit.notes if not any(w in n or n in w for w in run.warnings)]
        if notes:
            lines.append("Audit notes: " + " ".join(notes))
    table, levels = verdict_table(verdicts)
    if len(table) == 1:
        lines.append("No verdicts: no analysis that judges the run could run on it.")
    return ReportPage("summary", SECTION_TITLES["summary"], table=table, table_levels=levels,
                      text="\n".join(lines))


def verdict_table(verdicts: Sequence[Any]) -> tuple[tuple[tuple[str, ...], ...], tuple[str, ...]]:
    """The verdicts as table rows (header first) and the level of each row."""
    table: list[tuple[str, ...]] = [("Verdict", "Check", "Measured", "Threshold (source)",
                                     "What was measured; what to do")]
    levels = []
    for r in plots.verdict_rows(verdicts):
        thr = r["threshold"] + (f" ({r['source']})" if r["source"] else "")
        table.append((r["level"], r["check"], r["measured"], thr,
                      r["message"].replace(HEURISTIC_NOTE, "").strip()
                      + (" Advice: " + r["advice"] if r["advice"] and r["level"] in ("caution", "problem") else "")))
        levels.append(r["level"])
    return tuple(table), tuple(levels)


def energy_page(run: Run, got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    if got.audit is not None and got.audit.energy is not None:
        return _figure_page("energy", plots.audit_energy_figure(got.audit))
    if run.energies is not None:
        fig = plots.energy_series_figure(run.energies, run_name=run.name)
        return _figure_page("energy", fig, fig.caption + (f" (No audit: {got.audit_reason}.)"
                                                          if got.audit_reason else ""))
    return "energy", "the run has no energy table"


def temperature_page(run: Run, got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    if got.audit is not None and got.audit.temperature is not None:
        return _figure_page("temperature", plots.audit_temperature_figure(got.audit))
    if run.energies is not None and run.energies.by_role("temperature") is not None:
        return _figure_page("temperature", plots.temperature_figure(run.energies, run_name=run.name,
                                                                    target_K=run.metadata.temperature_K))
    return "temperature", got.audit_reason or "no velocities and no temperature column"


def timestep_page(got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    audit = got.audit
    if audit is not None and audit.timestep is not None and np.asarray(audit.timestep.frequency_per_ps).size:
        return _figure_page("timestep", plots.audit_spectrum_figure(audit))
    note = (audit.timestep.note if audit.timestep is not None else "") if audit is not None else got.audit_reason
    return "timestep", note or "no velocity spectrum could be computed"


def coordinate_page(got: ReportAnalyses, max_points: int) -> ReportPage | tuple[str, str]:
    """The coordinate against time beside its phase portrait (core sets and crossings marked)."""
    series = got.series
    if series is None:
        return "coordinate", got.series_reason
    f1 = plots.coordinate_series_figure(series, crossings=got.crossings)
    f2 = plots.phase_portrait_figure(series, crossings=got.crossings, max_points=max_points)
    both = _joined("report.coordinate", f"{series.label}: time series and phase portrait", (f1, f2),
                   f1.caption + " " + f2.caption)
    caption = f"Coordinate {series.label}, {got.coordinate_reason}. " + both.caption if got.coordinate_reason \
        else both.caption
    return _figure_page("coordinate", both, caption)


def phase_page(got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    """Density of the coordinate in the (q, p) plane and the principal components of the solute."""
    of = got.of_series
    figs: list[FigureSpec] = []
    reasons = []
    if of.density is not None:
        figs.append(plots.phase_density_figure(got.series, of.density))
    elif of.density_reason:
        reasons.append(of.density_reason)
    if got.pca is not None:
        figs.append(plots.pca_variance_figure(got.pca))
    elif got.pca_reason:
        reasons.append(got.pca_reason)
    if not figs:
        return "phase", "; ".join(reasons) or "nothing to draw"
    caption = " ".join(_lettered(figs, full_stop=False) + [r[0].upper() + r[1:] + "." for r in reasons])
    return _figure_page("phase", _joined("report.phase", SECTION_TITLES["phase"], figs, caption))


def correlation_page(got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    """Autocorrelation and blocking of the coordinate, autocorrelation of the potential energy."""
    reports = got.of_series.correlations
    figs = [plots.autocorrelation_figure(r.correlation, name=r.name) for r in reports]
    if reports and reports[0].blocking is not None:
        figs.insert(1, plots.blocking_figure(reports[0].blocking, name=reports[0].name))
    if not figs:
        return "correlation", "no series long enough to correlate"
    spec = _joined("report.correlation", "Time correlations", figs, " ".join(_lettered(figs, full_stop=True)))
    return _figure_page("correlation", spec)


def sampling_page(got: ReportAnalyses) -> ReportPage | tuple[str, str]:
    """Free-energy profile of the coordinate over the whole run and each half, the running average and the
    (q, p) coverage over time, with the half-against-half divergence and R-hat in the caption."""
    of, series = got.of_series, got.series
    if series is None:
        return "sampling", got.series_reason or "no coordinate"
    plots_: list[PlotSpec] = []
    parts: list[str] = []
    caption = ""
    if of.profile is not None:
        plot, caption = _profile_with_halves(got)
        plots_.append(plot)
        parts.append("landscape.profile")
    elif of.sampling is None:
        return "sampling", of.profile_reason
    else:
        caption = f"No free-energy profile: {of.profile_reason}."
    places = ("Right", "Far right") if plots_ else ("Left", "Right")
    for (key, fig), where in zip(_sampling_figures(got), places):
        plots_.extend(fig.plots)
        parts.append(key)
        caption += f" {where}: " + fig.caption
    sampling = of.sampling
    if sampling is not None and sampling.divergence is not None:
        d = sampling.divergence
        caption += (f" Half against half, the Jensen–Shannon divergence of {series.label} is "
                    f"{d.half_jsd_nats:.3g} nats against {d.half_null_nats:.2g} nats expected from noise.")
    if sampling is not None and sampling.rhat_segments is not None:
        rh = sampling.rhat_segments
        caption += (f" Rank-normalised split R̂ over {rh.n_chains} segments (Vehtari et al. 2021): {rh.rhat:.3f} "
                    f"(threshold {rh.threshold:g}).")
    spec = FigureSpec(key="report.sampling", title="Sampling", plots=tuple(plots_), grid=(1, len(plots_)),
                      caption=caption.strip(), provenance={"parts": parts})
    return _figure_page("sampling", spec)


def _profile_with_halves(got: ReportAnalyses) -> tuple[PlotSpec, str]:
    """The whole run's free-energy profile with each half's drawn over it, and its caption."""
    of, series = got.of_series, got.series
    base = plots.free_energy_profile_figure(of.profile, label=series.label, crossings=got.crossings)
    items = list(base.plots[0].items)
    for i, (h, name) in enumerate(zip(of.halves, ("first half", "second half"))):
        f = np.asarray(h.free_energy_kJ_per_mol, float)
        ok = np.isfinite(f)
        st = series_style(i + 1, marker=True)
        items.append(Line(np.asarray(h.centers)[ok], f[ok], label=name,
                          style=Style(colour=st.colour, dash=st.dash, marker=st.marker, width=1.2)))
    p0 = base.plots[0]
    caption = (base.caption + f" T: {of.temperature_source}."
               " Dashed and dotted: the same profile from the first and the second half of the "
               "run on the same bins; halves that disagree beyond the block errors mean the run has not "
               "sampled the coordinate's distribution yet.")
    return PlotSpec(title=p0.title, x=p0.x, y=p0.y, items=tuple(items), note=p0.note), caption


def _sampling_figures(got: ReportAnalyses) -> list[tuple[str, FigureSpec]]:
    """The running average and the (q, p) coverage figures, with their keys."""
    sampling, series = got.of_series.sampling, got.series
    if sampling is None:
        return []
    out = [("sampling.running", plots.running_average_figure(sampling.running, name=series.label))]
    if sampling.coverage is not None:
        out.append(("sampling.coverage", plots.coverage_figure(sampling.coverage, x_label=series.label, y_label="p")))
    return out


def crossings_pages(got: ReportAnalyses) -> list[ReportPage | tuple[str, str]]:
    """The crossings summary table and the dwell-time figure."""
    c = got.crossings
    if c is None:
        return [("crossings", got.crossings_reason or "no coordinate")]
    rows = tuple((a, b) for a, b in plots.crossings_summary_rows(c))
    fig = plots.dwell_times_figure(c)
    pooled = f"Pooled over {c.n_replicas} replicas (a row per replica on the next page).\n" if c.n_replicas > 1 else ""
    pages: list[ReportPage | tuple[str, str]] = [
        ReportPage("crossings", SECTION_TITLES["crossings"], table=(("Quantity", "Value"),) + rows,
                   text=(pooled + "\n".join(f"Warning: {w}" for w in c.warnings)).strip())]
    if c.n_replicas > 1 and c.replicas:
        pages.append(replica_page(c))
    pages.append(_figure_page("crossings", fig, title=SECTION_TITLES["crossings"] + ": dwell times"))
    return pages


#: characters per line of the per-replica table's columns (11 columns at 8 pt, ~160 characters a line)
REPLICA_WIDTHS = (22, 9, 5, 5, 9, 9, 10, 10, 10, 14, 11)


def replica_table(result: Any) -> tuple[tuple[str, ...], ...]:
    """The per-replica rows of a crossings result (``result.replicas``, core/analyses/replica_table.py) as
    table cells, header first: the numbers of ``phasewake crossings --replicas`` to the same 4 digits."""
    u = result.settings.unit

    def g(x: float) -> str:
        return "–" if math.isnan(x) else f"{x:.4g}"

    table: list[tuple[str, ...]] = [("Replica", "Length (ps)", "A→B", "B→A", "In A (ps)", "In B (ps)",
                                     "k(A→B) (1/ps)", "k(B→A) (1/ps)", f"Mean q ({u})", "Share of spread (R̂)",
                                     f"Drift ({u}/ns)")]
    for r in result.replicas:
        share = "–" if math.isnan(r.between_share) else f"{100 * r.between_share:.0f}%"
        table.append((r.name, g(r.time_ps), str(r.transitions_ab), str(r.transitions_ba), g(r.time_in_a_ps),
                      g(r.time_in_b_ps), g(r.rate_ab_per_ps), g(r.rate_ba_per_ps), g(r.mean), share,
                      g(r.drift_per_ns)))
    return tuple(table)


def replica_page(result: Any) -> ReportPage:
    """The per-replica table, with what each column means."""
    u = result.settings.unit
    text = (f"One row per replica of the {result.n_replicas} runs pooled on the previous page. Transitions and the "
            "time committed to each core set (In A, In B) are the replica's own; its rates are transitions / time "
            "in the origin state (– where it never committed to that state). Share of spread: the replica's part "
            "n_r (mean_r − mean)² of the between-replica spread of the mean q, the between-chain part of the "
            "Gelman–Rubin R̂ (Gelman and Rubin 1992); a replica with a large share is the one that keeps R̂ above 1. "
            f"Drift: least-squares slope of q against time ({u}/ns); a replica whose q still drifts has not "
            "relaxed. These point at a replica worth a look; they are not verdicts on it.")
    return ReportPage("crossings", SECTION_TITLES["crossings"] + ": per replica", table=replica_table(result),
                      text=text, widths=REPLICA_WIDTHS, right_aligned=tuple(range(1, len(REPLICA_WIDTHS))))


def explained(page: ReportPage) -> ReportPage:
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
