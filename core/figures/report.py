"""A multi-page report of a whole run (PDF through matplotlib's PdfPages; an HTML variant).

Sections, one page (or more) each: the run and the verdicts table; energy conservation; kinetic
temperature; the velocity spectrum behind the time-step check; the coordinate against time and its
phase portrait; phase-space density and principal components; time correlations (autocorrelation and
blocking); sampling (free-energy profile of the coordinate, whole run against each half); barrier
crossings (summary table, dwell times). Each figure has a caption saying what was computed with which
settings, and every page carries the reminder that these diagnostics are heuristics
(:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).

An analysis that cannot run on the data (no velocities, too short, no transitions, no temperature) gives
a page that says so and why, never an invented figure.

Building a report is long work: :func:`build_report` is a generator that yields
:class:`~phasewake.core.progress.Progress` and returns a :class:`ReportResult`. It is three named steps:
:func:`~phasewake.core.figures.report_analyses.collect_analyses` (every analysis, through the result
cache, the frames read once), :func:`~phasewake.core.figures.report_sections.build_sections` (the pages
drawn from those results) and :func:`write_report` (the PDF, the HTML and the page previews, laid out by
:mod:`phasewake.core.figures.report_pages`).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from phasewake.core.figures import plots
from phasewake.core.figures.export import check_writable, provenance_of_run
from phasewake.core.figures.report_analyses import ReportAnalyses, ReportSettings, collect_analyses
from phasewake.core.figures.report_pages import (
    SECTION_ORDER,
    SECTION_TITLES,
    ReportPage,
    write_html,
    write_previews,
)
from phasewake.core.figures.report_pages import paginate as _paginate  # a test lays out pages without drawing
from phasewake.core.figures.report_pages import write_pdf as _write_pdf  # (and replaces the PDF writer)
from phasewake.core.figures.report_sections import ReportSections, build_sections
from phasewake.core.figures.spec import FigureSpec
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run
    from phasewake.core.store.cache import ResultCache

__all__ = ["SECTION_ORDER", "SECTION_TITLES", "ReportPage", "ReportResult", "ReportSettings", "build_report",
           "write_report"]


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
    replicas: Sequence[Run] = (),
) -> Work[ReportResult]:
    """Analyse ``run`` and write a multi-page PDF report (and optionally an HTML one).

    Parameters
    ----------
    run : Run
    path : PDF to write (atomically)
    coordinate : coordinate specification for the phase portrait, correlation, sampling and
        crossings sections (default: the coordinate module's suggestion for the run)
    html_path : also write an HTML report with embedded PNG figures here
    temperature_K, n_constraints, timestep_ps : passed to the audit (override what the files say);
        ``temperature_K`` (K) is also the temperature of the free-energy profile and the crossings
    states, surface : core-set limits (A_hi, B_lo) and dividing surface for the crossings section,
        in the coordinate's unit (default: suggested from its free-energy profile)
    max_points : largest number of frames drawn in a scatter figure (every k-th frame beyond it)
    preview_folder : also draw each page as ``page-NN.png`` here (to look at pages without a PDF viewer)
    preview_dpi : resolution of the page previews
    cache : the result cache of the analyses (default: the default cache, ``ResultCache()``;
        ``ResultCache(enabled=False)`` computes everything afresh)
    replicas : the other runs of a replica ensemble (``run`` is the first): the crossings pool every run's
        events, as ``phasewake crossings --replicas`` does, and a page gives the per-replica table (transitions,
        rates, share of the between-replica spread behind R-hat, drift); the other pages are of ``run``

    Returns
    -------
    ReportResult (from the generator's ``return``; drive it with ``phasewake.core.progress.drive``)
    """
    total = 8.0
    target = Path(path)
    check_writable(target)
    if html_path is not None:
        check_writable(Path(html_path))
    settings = ReportSettings(coordinate=coordinate, temperature_K=temperature_K, n_constraints=n_constraints,
                              timestep_ps=timestep_ps, states=states, surface=surface, max_points=max_points)
    got = yield from collect_analyses(run, settings, cache=cache, total=total, replicas=replicas)
    yield Progress(5, total, "drawing figures")
    shown = shown_settings(settings, got)
    if replicas:
        shown["replicas"] = [r.name for r in (run, *replicas)]
    sections = build_sections(run, got, settings, shown)
    yield Progress(7, total, "writing the PDF")
    result = write_report(run, target, sections, got, shown, html_path=html_path, preview_folder=preview_folder,
                          preview_dpi=preview_dpi)
    yield Progress(8, total, "done")
    return result


def shown_settings(settings: ReportSettings, got: ReportAnalyses) -> dict[str, Any]:
    """The settings recorded in the report's provenance and result: the user's, with the coordinate analysed
    and why it was chosen."""
    shown = asdict(settings)
    if got.coordinate is not None:
        shown["coordinate"] = got.coordinate
    shown["coordinate_reason"] = got.coordinate_reason
    return shown


def write_report(run: Run, target: Path, sections: ReportSections, got: ReportAnalyses, shown: Mapping[str, Any], *,
                 html_path: str | Path | None = None, preview_folder: str | Path | None = None,
                 preview_dpi: float = 60.0) -> ReportResult:
    """Write the PDF (and the HTML and the page previews when asked); what was written."""
    pages = list(sections.pages)
    prov = provenance_of_run(run, settings=shown)
    n_pages = _write_pdf(target, pages, run_name=run.name, provenance=prov)
    if preview_folder is not None:
        write_previews(Path(preview_folder), pages, run_name=run.name, dpi=preview_dpi)
    html_out = None
    if html_path is not None:
        html_out = write_html(Path(html_path), pages, run_name=run.name, provenance=prov)
    figures = [p.figure for p in pages if p.figure is not None]
    if got.series is not None:  # the phase portrait alone, as the window shows it
        figures.append(plots.phase_portrait_figure(got.series, crossings=got.crossings,
                                                   max_points=int(shown["max_points"])))
    return ReportResult(path=target, html_path=html_out, n_pages=n_pages,
                        sections=tuple(p.section for p in _paginate(pages)), skipped=sections.skipped,
                        verdict_levels=tuple(v.level for v in sections.verdicts), settings=dict(shown),
                        figures=tuple(figures), verdicts=sections.verdicts, audit=got.audit)


def report_targets(path: str | Path, *, html: bool, inputs: Iterable[str | Path]) -> tuple[Path, Path | None]:
    """The report's PDF and, with ``html``, the HTML page beside it (same name, ``.html``), checked before
    any analysis runs: a name ending in .pdf, and neither over one of the ``inputs`` (InputError otherwise;
    the command line and ``pw.report`` both ask here)."""
    from phasewake.core.errors import InputError

    out = Path(path)
    if out.suffix.lower() != ".pdf":
        raise InputError("the report is a PDF: give an output name ending in .pdf", path=out)
    html_path = out.with_suffix(".html") if html else None
    given = {Path(p).resolve() for p in inputs}
    for target in (out, html_path):
        if target is not None and target.resolve() in given:
            raise InputError("the report would overwrite one of the input files", path=target)
    return out, html_path
