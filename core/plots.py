"""Figure builders: analysis results -> :class:`~phasewake.core.figures.FigureSpec`.

One function per figure kind. :data:`FIGURE_BUILDERS` maps a figure key to its builder and
:data:`RESULT_FIGURES` maps a result type (by class name) to the figure keys drawn from it, so the
window and the report look a result up in a table instead of a chain of isinstance checks:

>>> specs = figures_for(result)           # every figure a result has
>>> spec = FIGURE_BUILDERS["energy.series"](run.energies)

Builders take the result objects of the analysis modules (read their attributes, never recompute the
analysis) plus keyword-only presentation options; they never import Qt or matplotlib. Every axis
carries its unit and every series a line style or marker as well as a colour (Okabe and Ito 2008).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from phasewake.core.figures import (
    LEVEL_STYLE,
    PALETTE,
    Axis,
    Band,
    FigureSpec,
    Image,
    Line,
    Mark,
    PlotItem,
    PlotSpec,
    Style,
    series_style,
)
from phasewake.core.run import EnergyTable, Series

TIME = Axis("Time", "ps")
_GREY = "#777777"


def _style(i: int, *, marker: bool = False, width: float = 1.5) -> Style:
    st = series_style(i, marker=marker)
    return Style(colour=st.colour, dash=st.dash, width=width, marker=st.marker, marker_size=st.marker_size)


def _fmt(v: float | None, unit: str = "", digits: int = 3) -> str:
    if v is None or not np.isfinite(v):
        return "n/a"
    text = f"{v:.{digits}g}"
    return f"{text} {unit}".strip()


def _settings_text(settings: Mapping[str, Any] | None) -> str:
    if not settings:
        return ""
    parts = [f"{k} = {v}" for k, v in settings.items() if v is not None and not isinstance(v, np.ndarray)]
    return "; ".join(parts)


def _get(obj: Any, *names: str, default: Any = None) -> Any:
    """The first attribute of ``obj`` that exists (results of modules still settling their names)."""
    for n in names:
        if obj is not None and hasattr(obj, n):
            return getattr(obj, n)
    return default


# --------------------------------------------------------------------------------------------------
# energies straight from the run's energy table (no analysis needed)

ENERGY_ROLES_SHOWN = ("total", "conserved", "potential", "kinetic")


def _series_time(table: EnergyTable, s: Series) -> np.ndarray:
    return np.asarray(table.time_ps, float)


def conserved_series(table: EnergyTable) -> Series | None:
    """The series judged for conservation: the conserved quantity if the file has one, else the total."""
    return table.by_role("conserved") or table.by_role("total")


def energy_series_figure(
    table: EnergyTable,
    *,
    drift_slope_kJ_per_mol_per_ps: float | None = None,
    drift_intercept_kJ_per_mol: float | None = None,
    run_name: str = "",
    cursor_ps: float | None = None,
) -> FigureSpec:
    """Energy panel: the conserved quantity (with its drift line) over the fluctuations of the terms.

    Plot 1: the conserved quantity (or total energy), plus the total energy when both exist (a
    thermostatted run), and the least-squares drift line when given. Plot 2: potential and kinetic
    energy minus their means, so their exchange is visible on one scale.
    """
    t = np.asarray(table.time_ps, float)
    cons = conserved_series(table)
    plots: list[PlotSpec] = []
    caption_bits = []
    if cons is not None:
        items: list[PlotItem] = [Line(t, np.asarray(cons.values, float), label=cons.name, style=_style(0))]
        total = table.by_role("total")
        if total is not None and total is not cons:
            items.append(Line(t, np.asarray(total.values, float), label=total.name, style=_style(1)))
        if drift_slope_kJ_per_mol_per_ps is not None and t.size:
            b = drift_intercept_kJ_per_mol
            if b is None:
                b = float(np.mean(cons.values) - drift_slope_kJ_per_mol_per_ps * np.mean(t))
            fit = b + drift_slope_kJ_per_mol_per_ps * t[[0, -1]]
            items.append(Line(t[[0, -1]], fit, label="drift fit", style=Style(colour=PALETTE[0], dash="dash", width=1.5)))
        if cursor_ps is not None:
            items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=_GREY, dash="dot")))
        plots.append(PlotSpec(title="Conserved quantity" if cons.role == "conserved" else "Total energy",
                              x=TIME, y=Axis("Energy", cons.unit or "kJ/mol"), items=tuple(items),
                              x_is_time=True))
        caption_bits.append(f"top: {cons.name} ({cons.role}) from {cons.source or 'the energy table'}")
    fluct: list[PlotItem] = []
    means: list[str] = []
    unit = "kJ/mol"
    for i, role in enumerate(("potential", "kinetic")):
        s = table.by_role(role)
        if s is None:
            continue
        v = np.asarray(s.values, float)
        unit = s.unit or unit
        fluct.append(Line(t, v - np.nanmean(v), label=s.name, style=_style(i + 2)))
        means.append(f"{s.name} {np.nanmean(v):.6g} {s.unit}")
    if fluct:
        plots.append(PlotSpec(title="Potential and kinetic energy fluctuations", x=TIME,
                              y=Axis("Energy − mean", unit), items=tuple(fluct), x_is_time=True))
        caption_bits.append("bottom: potential and kinetic energy minus their means (" + ", ".join(means) + ")")
    if not plots:
        others = [s for s in table.series.values() if s.role not in ("time", "step")]
        items2 = tuple(Line(t, np.asarray(s.values, float), label=s.name, style=_style(i))
                       for i, s in enumerate(others[:4]))
        plots.append(PlotSpec(title="Energy table", x=TIME, y=Axis("Value", others[0].unit if others else ""),
                              items=items2, x_is_time=True))
    caption = (f"Energies of {run_name or 'the run'} as stored in its files, against time. "
               + "; ".join(caption_bits) + ".")
    if drift_slope_kJ_per_mol_per_ps is not None:
        caption += (" The dashed line is the least-squares drift fit, slope "
                    f"{drift_slope_kJ_per_mol_per_ps * 1e3:.3g} kJ/mol/ns.")
    return FigureSpec(key="energy.series", title=f"Energy{': ' + run_name if run_name else ''}",
                      plots=tuple(plots), caption=caption,
                      provenance={"sources": list(table.sources)})


def temperature_figure(
    table: EnergyTable | None = None,
    *,
    time_ps: np.ndarray | None = None,
    kinetic_temperature_K: np.ndarray | None = None,
    target_K: float | None = None,
    run_name: str = "",
    label: str = "kinetic temperature (from velocities)",
) -> FigureSpec:
    """Temperature against time: the file's temperature and/or one computed from velocities."""
    items: list[PlotItem] = []
    sources = []
    i = 0
    if table is not None:
        s = table.by_role("temperature")
        if s is not None:
            items.append(Line(np.asarray(table.time_ps, float), np.asarray(s.values, float),
                              label=f"{s.name} (file)", style=_style(i)))
            sources.append(f"{s.name} from {s.source or 'the energy table'}")
            i += 1
    if kinetic_temperature_K is not None and time_ps is not None:
        items.append(Line(np.asarray(time_ps, float), np.asarray(kinetic_temperature_K, float), label=label,
                          style=_style(i + 1)))
        sources.append(label)
    if target_K is not None:
        items.append(Mark("hline", float(target_K), label=f"target {target_K:g} K", role="threshold",
                          style=Style(colour=PALETTE[0], dash="dash", width=1.2)))
    caption = (f"Temperature of {run_name or 'the run'} against time: " + ("; ".join(sources) or "no data")
               + "." + (f" Dashed line: thermostat target {target_K:g} K." if target_K is not None else ""))
    return FigureSpec(key="temperature.series", title=f"Temperature{': ' + run_name if run_name else ''}",
                      plots=(PlotSpec(title="Temperature", x=TIME, y=Axis("Temperature", "K"),
                                      items=tuple(items), x_is_time=True),),
                      caption=caption)


# --------------------------------------------------------------------------------------------------
# correlation (phasewake.core.correlation)


def autocorrelation_figure(result: Any, *, name: str = "series", max_lag_ps: float | None = None) -> FigureSpec:
    """The normalised autocorrelation of one series with the summation window and g noted.

    ``result`` is a ``phasewake.core.correlation.CorrelationResult``.
    """
    lag = np.asarray(result.acf_lag_ps, float)
    acf = np.asarray(result.acf, float)
    if max_lag_ps is not None:
        keep = lag <= max_lag_ps
        lag, acf = lag[keep], acf[keep]
    items: list[PlotItem] = [Line(lag, acf, label=f"ACF of {name}", style=_style(0))]
    items.append(Mark("hline", 0.0, role="annotation", style=Style(colour=_GREY, dash="solid", width=0.8)))
    w_ps = result.window_lags * result.dt_ps
    if lag.size and w_ps <= lag[-1]:
        items.append(Mark("vline", w_ps, label=f"window M = {result.window_lags} lags", role="threshold",
                          style=Style(colour=PALETTE[6], dash="dash", width=1.2)))
    note = (f"g = {result.statistical_inefficiency:.3g}, τ_int = {result.tau_int_sokal_ps:.3g} ps, "
            f"N_eff = {result.effective_sample_size:.0f}")
    caption = (f"Normalised autocorrelation of {name} ({result.n_samples} samples, {result.dt_ps:.3g} ps apart), "
               f"by FFT (biased estimator). Statistical inefficiency g = 1 + 2 Σρ by the {result.method} "
               f"method (window M = {result.window_lags} lags): g = {result.statistical_inefficiency:.3g}, "
               f"Sokal's τ_int = g/2 = {result.tau_int_sokal_ps:.3g} ps, effective sample size "
               f"{result.effective_sample_size:.0f}, standard error of the mean "
               f"{_fmt(result.standard_error_of_mean, result.unit)}."
               + (" " + " ".join(result.notes) if getattr(result, "notes", ()) else ""))
    return FigureSpec(key="correlation.acf", title=f"Autocorrelation of {name}",
                      plots=(PlotSpec(title=f"Autocorrelation of {name}", x=Axis("Lag", "ps"),
                                      y=Axis("Autocorrelation ρ", ""), items=tuple(items), note=note),),
                      caption=caption, provenance={"settings": dict(getattr(result, "settings", {}))})


def blocking_figure(result: Any, *, name: str = "series") -> FigureSpec:
    """Flyvbjerg–Petersen blocking curve: standard error of the mean against block size."""
    bs = np.asarray(result.block_size, float)
    sem = np.asarray(result.sem, float)
    err = np.asarray(result.sem_error, float)
    items: list[PlotItem] = [
        Band(bs, sem - err, sem + err, label="± error of the estimate", style=Style(colour=PALETTE[5], alpha=0.2)),
        Line(bs, sem, label="standard error of the mean", style=_style(0, marker=True)),
    ]
    if result.plateau_found:
        items.append(Mark("hline", float(result.plateau_sem), label=f"plateau {_fmt(result.plateau_sem, result.unit)}",
                          role="threshold", style=Style(colour=PALETTE[6], dash="dash")))
    caption = (f"Block averaging (Flyvbjerg and Petersen 1989) of {name}: the standard error of the mean "
               f"estimated from blocks of 2^k samples. "
               + (f"Plateau at {_fmt(result.plateau_sem, result.unit)} (block size "
                  f"{int(bs[result.plateau_level])}), g = {result.statistical_inefficiency:.3g}."
                  if result.plateau_found else "No plateau was found: the run is too short for this estimate."))
    return FigureSpec(key="correlation.blocking", title=f"Blocking of {name}",
                      plots=(PlotSpec(title=f"Blocking of {name}", x=Axis("Block size", "samples", log=True),
                                      y=Axis("Standard error of the mean", result.unit), items=tuple(items)),),
                      caption=caption, provenance={"settings": dict(getattr(result, "settings", {}))})


# --------------------------------------------------------------------------------------------------
# verdicts


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
        measured = "" if v.measured is None else _fmt(float(v.measured), v.unit, 4)
        rows.append({"level": v.level, "check": v.title, "measured": measured, "threshold": thr_text,
                     "source": source, "message": v.message, "advice": v.advice, "kind": v.kind})
    return rows


def verdict_style(level: str) -> Style:
    colour, marker = LEVEL_STYLE.get(level, LEVEL_STYLE["info"])
    return Style(colour=colour, marker=marker)


# --------------------------------------------------------------------------------------------------
# tables


FIGURE_BUILDERS: dict[str, Callable[..., FigureSpec]] = {
    "energy.series": energy_series_figure,
    "temperature.series": temperature_figure,
    "correlation.acf": autocorrelation_figure,
    "correlation.blocking": blocking_figure,
}

# result class name -> figure keys drawn from a result of that class (first argument of the builder)
RESULT_FIGURES: dict[str, tuple[str, ...]] = {
    "EnergyTable": ("energy.series", "temperature.series"),
    "CorrelationResult": ("correlation.acf",),
    "BlockingResult": ("correlation.blocking",),
}


def figures_for(result: Any, **options: Any) -> list[FigureSpec]:
    """Every figure drawn from ``result`` (looked up by its class name in :data:`RESULT_FIGURES`)."""
    keys = RESULT_FIGURES.get(type(result).__name__, ())
    out = []
    for k in keys:
        builder = FIGURE_BUILDERS[k]
        out.append(builder(result, **options))
    return out


__all__ = [
    "FIGURE_BUILDERS",
    "RESULT_FIGURES",
    "figures_for",
    "energy_series_figure",
    "temperature_figure",
    "autocorrelation_figure",
    "blocking_figure",
    "verdict_rows",
    "Image",
]
