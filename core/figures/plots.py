"""Figure builders: analysis results -> :class:`~phasewake.core.figures.spec.FigureSpec`.

One function per figure kind, grouped by topic in sibling modules: ``plots_energy`` (energies,
temperature, time-step spectrum), ``plots_phase`` (coordinates, phase space, principal components,
free-energy profiles), ``plots_memory`` (correlations, sampling, velocity autocorrelation),
``plots_crossings`` (barrier crossings) and ``plots_text`` (numbers and words for captions). This module
keeps every builder importable as ``plots.<name>`` and holds the verdict rows and two lookup tables:
:data:`FIGURE_BUILDERS` maps a figure key to its builder and :data:`RESULT_FIGURES` maps a result type (by class name) to the figure keys drawn from it, so the
window and the report look a result up in a table instead of a chain of isinstance checks:

>>> specs = figures_for(result)           # every figure a result has
>>> spec = FIGURE_BUILDERS["energy.series"](run.energies)

Builders take the result objects of the analysis modules (read their attributes, never recompute the
analysis) plus keyword-only presentation options; they never import Qt or matplotlib. Every axis
carries its unit and every series a line style or marker as well as a colour (Okabe and Ito 2008).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from phasewake.core.figures.plots_crossings import (
    crossings_rate_rows,
    crossings_summary_rows,
    dwell_times_figure,
    transmission_figure,
)
from phasewake.core.figures.plots_energy import (
    ENERGY_ROLES_SHOWN,
    audit_energy_figure,
    audit_spectrum_figure,
    audit_temperature_figure,
    conserved_series,
    energy_series_figure,
    temperature_figure,
)
from phasewake.core.figures.plots_memory import (
    DECAY_LEVEL,
    autocorrelation_figure,
    blocking_figure,
    coverage_figure,
    divergence_figure,
    recurrence_figure,
    running_average_figure,
    tm_figure,
    vacf_figure,
    vdos_figure,
)
from phasewake.core.figures.plots_phase import (
    atoms_text,
    coordinate_pair_figure,
    coordinate_series_figure,
    coordinate_time_figure,
    free_energy_profile_figure,
    free_energy_surface_figure,
    landscape_states_figure,
    pca_figure,
    pca_variance_figure,
    phase_density_figure,
    phase_path_figure,
    phase_portrait_figure,
    poincare_figure,
    poincare_pair_figure,
    principal_component_figures,
)
from phasewake.core.figures.plots_text import PER_PS_TO_PER_CM, TIME, fmt_number, plain_words
from phasewake.core.figures.spec import LEVEL_STYLE, FigureSpec, Style

__all__ = [
    "DECAY_LEVEL", "ENERGY_ROLES_SHOWN", "FIGURE_BUILDERS", "PER_PS_TO_PER_CM", "RESULT_FIGURES", "TIME",
    "atoms_text", "audit_energy_figure", "audit_spectrum_figure", "audit_temperature_figure",
    "autocorrelation_figure", "blocking_figure", "conserved_series", "coordinate_pair_figure",
    "coordinate_series_figure", "coordinate_time_figure", "coverage_figure", "crossings_rate_rows",
    "crossings_summary_rows", "divergence_figure", "dwell_times_figure", "energy_series_figure",
    "figures_for", "free_energy_profile_figure", "free_energy_surface_figure", "landscape_states_figure",
    "pca_figure", "pca_variance_figure", "phase_density_figure", "phase_path_figure",
    "phase_portrait_figure", "plain_words", "poincare_figure", "poincare_pair_figure",
    "principal_component_figures", "recurrence_figure", "running_average_figure", "temperature_figure",
    "tm_figure", "transmission_figure", "vacf_figure", "vdos_figure", "verdict_rows", "verdict_style",
]


def verdict_rows(verdicts: Sequence[Any]) -> list[dict[str, str]]:
    """Verdicts as table rows of text: level word, check, measured value, threshold, source, message."""
    rows = []
    for v in verdicts:
        thr = v.threshold
        if thr is not None:
            rel = ">" if thr.higher_is_worse else "<"
            thr_text = f"caution {rel} {thr.caution:g}, problem {rel} {thr.problem:g} {thr.unit}".strip()
            source = thr.source
        else:
            thr_text, source = "", ""
        measured = "" if v.measured is None else fmt_number(float(v.measured), v.unit, 4)
        rows.append({"level": v.level, "check": v.title, "measured": measured, "threshold": thr_text,
                     "source": source, "message": v.message, "advice": v.advice, "kind": v.kind})
    return rows


def verdict_style(level: str) -> Style:
    colour, marker = LEVEL_STYLE.get(level, LEVEL_STYLE["info"])
    return Style(colour=colour, marker=marker)


FIGURE_BUILDERS: dict[str, Callable[..., FigureSpec]] = {
    "energy.series": energy_series_figure,
    "temperature.series": temperature_figure,
    "energy.audit": audit_energy_figure,
    "temperature.audit": audit_temperature_figure,
    "timestep.spectrum": audit_spectrum_figure,
    "correlation.acf": autocorrelation_figure,
    "correlation.blocking": blocking_figure,
    "coordinate.series": coordinate_series_figure,
    "phase.portrait": phase_portrait_figure,
    "phase.pca": pca_figure,
    "phase.pca_variance": pca_variance_figure,
    "phase.density": phase_density_figure,
    "phase.series": coordinate_time_figure,
    "phase.pair": coordinate_pair_figure,
    "phase.poincare_pair": poincare_pair_figure,
    "landscape.states": landscape_states_figure,
    "phase.poincare": poincare_figure,
    "landscape.profile": free_energy_profile_figure,
    "landscape.surface": free_energy_surface_figure,
    "sampling.running": running_average_figure,
    "sampling.divergence": divergence_figure,
    "sampling.tm": tm_figure,
    "sampling.coverage": coverage_figure,
    "sampling.recurrence": recurrence_figure,
    "velocity.vacf": vacf_figure,
    "velocity.vdos": vdos_figure,
    "crossings.dwells": dwell_times_figure,
    "crossings.kappa": transmission_figure,
}

# result class name -> figure keys drawn from a result of that class (its first builder argument)
RESULT_FIGURES: dict[str, tuple[str, ...]] = {
    "EnergyTable": ("energy.series", "temperature.series"),
    "AuditResult": ("energy.audit", "temperature.audit", "timestep.spectrum"),
    "CorrelationResult": ("correlation.acf",),
    "BlockingResult": ("correlation.blocking",),
    "CoordinateSeries": ("coordinate.series", "phase.portrait"),
    "PCAResult": ("phase.pca",),
    "PoincareSection": ("phase.poincare",),
    "FreeEnergyProfile": ("landscape.profile",),
    "FreeEnergySurface": ("landscape.surface",),
    "RunningAverage": ("sampling.running",),
    "DivergenceResult": ("sampling.divergence",),
    "TMResult": ("sampling.tm",),
    "CoverageResult": ("sampling.coverage",),
    "RecurrenceResult": ("sampling.recurrence",),
    "VACFResult": ("velocity.vacf",),
    "VDOSResult": ("velocity.vdos",),
    "CrossingsResult": ("crossings.dwells", "crossings.kappa"),
}


def figures_for(result: Any, **options: Any) -> list[FigureSpec]:
    """Every figure drawn from ``result`` (looked up by its class name in :data:`RESULT_FIGURES`)."""
    keys = RESULT_FIGURES.get(type(result).__name__, ())
    out = []
    for k in keys:
        builder = FIGURE_BUILDERS[k]
        out.append(builder(result, **options))
    return out
