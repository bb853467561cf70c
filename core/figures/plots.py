"""Figure builders: analysis results -> :class:`~phasewake.core.figures.spec.FigureSpec`.

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

from phasewake.core.figures.spec import (
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
from phasewake.core.model.run import EnergyTable, Series

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


# analysis settings a caption may mention, in words: name -> (phrase, unit)
_SETTING_WORDS: dict[str, tuple[str, str]] = {
    "n_atoms": ("{} atoms", ""),
    "temperature_K": ("temperature", "K"),
    "significance_z": ("significance threshold", "standard errors"),
    "timestep_ps": ("time step", "ps"),
    "n_constraints": ("{} constraints", ""),
    "n_dof": ("{} degrees of freedom", ""),
    "block_frames": ("block length", "frames"),
    "n_blocks": ("{} blocks", ""),
    "segment_frames": ("segment length", "frames"),
    "chunk_frames": ("frames read at a time", ""),
}


def _setting_phrase(name: str, value: str) -> str:
    phrase, unit = _SETTING_WORDS[name]
    return (phrase.format(value) if "{}" in phrase else f"{phrase} {value}") + (f" {unit}" if unit else "")


def _settings_text(settings: Mapping[str, Any] | None) -> str:
    """Settings a caption mentions, as plain words ("temperature 122.3 K, significance threshold 3
    standard errors"), never ``name = value`` pairs; settings without a phrase are left out."""
    if not settings:
        return ""
    parts = []
    for k, v in settings.items():
        if v is None or isinstance(v, np.ndarray | list | tuple | dict | Mapping) or k not in _SETTING_WORDS:
            continue
        parts.append(_setting_phrase(k, f"{v:.4g}" if isinstance(v, float) else str(v)))
    return ", ".join(parts)


def _plain_number(v: float, decimals: int) -> str:
    return f"{v:.{max(0, decimals)}f}"


def _fix_plus_minus(m: Any) -> str:
    """"-545 ± 1.9e+02" -> "-545 ± 190": the error in plain digits and the value to the same decimal place."""
    value, err = float(m.group(1)), float(m.group(2))
    if not (1e-4 <= abs(err) < 1e6) or not np.isfinite(value):
        return m.group(0)
    decimals = 1 - int(np.floor(np.log10(abs(err))))
    return f"{_plain_number(value, decimals)} ± {_plain_number(round(err, decimals), decimals)}"


def plain_words(text: str) -> str:
    """Text for a reader, not a programmer: no module paths, "±" for "+-", σ_E for sigma_E, an error in
    plain digits beside its value, settings named in words rather than ``name = value``."""
    import re

    if not text:
        return text
    text = re.sub(r"phasewake\.(?:core|app)\.(?:[A-Za-z_]+\.)*([A-Za-z_]+)", lambda m: m.group(1).replace("_", " "), text)
    text = text.replace("+/-", "±").replace("+-", "±").replace(" <= ", " ≤ ").replace(" >= ", " ≥ ")
    text = re.sub(r"\b(cm|ps|ns|fs|nm)\^-1\b", r"\1⁻¹", text)
    text = re.sub(r"\b([AB])->([AB])\b", r"\1→\2", text)
    text = text.replace(" x sqrt(g)", " × √g").replace("sqrt(g)", "√g")
    text = re.sub(r"\bsigma_([A-Za-z]+)\b", r"σ_\1", text)
    text = re.sub(r"(-?\d+(?:\.\d+)?(?:[eE][+-]?\d+)?) ± (\d+(?:\.\d+)?[eE][+-]?\d+)", _fix_plus_minus, text)

    def setting(m: Any) -> str:
        v = m.group(2)
        try:
            v = f"{float(v):.4g}"
        except ValueError:
            pass
        return _setting_phrase(m.group(1), v)

    names = "|".join(sorted(_SETTING_WORDS, key=len, reverse=True))
    text = re.sub(rf"\b({names}) = ([-+0-9.eE]+)", setting, text)
    return text


def _notes_text(notes: Sequence[str]) -> str:
    """Notes as sentences appended to a caption."""
    out = ""
    for n in notes:
        n = n.strip()
        if n:
            out += " " + n[:1].upper() + n[1:] + ("" if n.endswith((".", "!", "?")) else ".")
    return out


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
# correlation (phasewake.core.analyses.correlation)


def autocorrelation_figure(result: Any, *, name: str = "series", max_lag_ps: float | None = None) -> FigureSpec:
    """The normalised autocorrelation of one series with the summation window and g noted.

    ``result`` is a ``phasewake.core.analyses.correlation.CorrelationResult``.
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
               + _notes_text(getattr(result, "notes", ())))
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
# audit (phasewake.core.analyses.audit)


def audit_energy_figure(audit: Any, *, cursor_ps: float | None = None) -> FigureSpec:
    """The series the audit judged for conservation, with its drift fit and the fluctuation ratio."""
    ea = audit.energy
    if ea is None:
        return _empty("energy.audit", "Energy conservation", "The run has no energy series to audit.")
    t = np.asarray(ea.time_ps, float)
    e = np.asarray(ea.values_kJ_per_mol, float)
    items: list[PlotItem] = [Line(t, e, label=ea.series_label.split(" (")[0], style=_style(0))]
    d = ea.drift
    fl = ea.fluctuations
    caption = (f"{ea.series_label[:1].upper() + ea.series_label[1:]} of {audit.run_name} against time "
               f"({ea.reason}). ")
    notes = []
    if d is not None and t.size >= 2:
        slope_ps = d.slope_kJ_per_mol_per_ns * 1e-3
        items.append(Line(t[[0, -1]], d.intercept_kJ_per_mol + slope_ps * t[[0, -1]], label="drift fit",
                          style=Style(colour=PALETTE[0], dash="dash", width=1.5)))
        notes.append(f"drift {d.slope_kJ_per_mol_per_ns:.3g} ± {d.slope_error_kJ_per_mol_per_ns:.2g} kJ/mol/ns")
        caption += (f"Dashed: least-squares drift {d.slope_kJ_per_mol_per_ns:.3g} ± "
                    f"{d.slope_error_kJ_per_mol_per_ns:.2g} kJ/mol/ns ({plain_words(d.error_method)})"
                    + (f", {d.slope_kT_per_dof_per_ns:.3g} kT per degree of freedom per ns"
                       if d.slope_kT_per_dof_per_ns is not None else "") + ". ")
    if fl is not None and fl.ratio is not None:
        notes.append(f"σ_E/σ_K = {fl.ratio:.3g}")
        caption += (f"Fluctuation after removing the line σ_E = {fl.sigma_total_kJ_per_mol:.3g} kJ/mol, "
                    f"σ_E/σ_K = {fl.ratio:.3g}. ")
    if cursor_ps is not None:
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=_GREY, dash="dot")))
    return FigureSpec(key="energy.audit", title=f"Energy conservation: {audit.run_name}",
                      plots=(PlotSpec(title="Energy conservation", x=TIME, y=Axis("Energy", "kJ/mol"),
                                      items=tuple(items), x_is_time=True, note=", ".join(notes)),),
                      caption=caption + (f"Settings: {_settings_text(getattr(d, 'settings', None))}."
                                         if _settings_text(getattr(d, "settings", None)) else ""),
                      provenance={"settings": dict(audit.settings)})


def audit_temperature_figure(audit: Any, *, cursor_ps: float | None = None) -> FigureSpec:
    """Kinetic temperature from the audit with its mean, the file's mean and the thermostat target."""
    ta = audit.temperature
    if ta is None:
        return _empty("temperature.audit", "Kinetic temperature", "No kinetic temperature could be computed.")
    t = np.asarray(ta.time_ps, float)
    items: list[PlotItem] = [Line(t, np.asarray(ta.temperature_K, float), label="kinetic temperature",
                                  style=_style(0))]
    items.append(Mark("hline", float(ta.mean_K), label=f"mean {ta.mean_K:.1f} K", role="annotation",
                      style=Style(colour=PALETTE[0], dash="dash", width=1.2)))
    target = audit.settings.get("temperature_K") if isinstance(audit.settings, Mapping) else None
    if target:
        items.append(Mark("hline", float(target), label=f"target {float(target):g} K", role="threshold",
                          style=Style(colour=PALETTE[6], dash="dot", width=1.4)))
    if cursor_ps is not None:
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=_GREY, dash="dot")))
    caption = (f"Kinetic temperature of {audit.run_name}: {ta.kinetic_source}; N_dof = {ta.n_dof} "
               f"(3N = {3 * ta.n_atoms}, constraints {ta.n_constraints} from {ta.constraints_source}, "
               f"centre-of-mass {ta.n_com_removed} from {ta.com_source}). Mean {ta.mean_K:.2f} ± "
               f"{ta.error_K:.2g} K (g-corrected standard error, g = {ta.statistical_inefficiency:.3g}), "
               f"standard deviation {ta.std_K:.3g} K."
               + (f" File temperature mean {ta.file_temperature_mean_K:.2f} K." if ta.file_temperature_mean_K
                  is not None else "")
               + (" Velocities estimated from positions by central differences." if ta.velocities_estimated
                  else ""))
    return FigureSpec(key="temperature.audit", title=f"Kinetic temperature: {audit.run_name}",
                      plots=(PlotSpec(title="Kinetic temperature", x=TIME, y=Axis("Temperature", "K"),
                                      items=tuple(items), x_is_time=True,
                                      note=f"N_dof = {ta.n_dof}"),),
                      caption=caption, provenance={"settings": dict(audit.settings)})


def audit_spectrum_figure(audit: Any) -> FigureSpec:
    """The mass-weighted velocity power spectrum used for the time-step check, fastest motion marked."""
    tsa = audit.timestep
    if tsa is None or np.asarray(tsa.frequency_per_ps).size == 0:
        note = getattr(tsa, "note", "") if tsa is not None else ""
        return _empty("timestep.spectrum", "Velocity spectrum", note or "No velocity spectrum was computed.")
    f = np.asarray(tsa.frequency_per_ps, float)
    w = f * PER_PS_TO_PER_CM  # in cm⁻¹, as the vibrational density of states
    pw = np.asarray(tsa.power, float)
    pn = pw / (pw.max() if pw.size and pw.max() > 0 else 1.0)
    items: list[PlotItem] = [Line(w, pn, label="velocity power", style=_style(0))]
    caption = "Mass-weighted velocity power spectrum (normalised to its maximum) against wavenumber. "
    upper = None
    if tsa.fastest is not None:
        fm = tsa.fastest
        items.append(Mark("vline", fm.wavenumber_per_cm, label=f"fastest motion, period {fm.period_ps:.3g} ps",
                          role="threshold", style=Style(colour=PALETTE[6], dash="dash", width=1.3)))
        caption += (f"Fastest significant motion at {fm.wavenumber_per_cm:.0f} cm⁻¹ ({fm.frequency_per_ps:.3g} "
                    f"ps⁻¹, period {fm.period_ps:.3g} ps); resolution {fm.resolution_per_ps * PER_PS_TO_PER_CM:.2g} "
                    f"cm⁻¹, Nyquist limit {fm.nyquist_per_ps * PER_PS_TO_PER_CM:.4g} cm⁻¹. ")
        upper = fm.wavenumber_per_cm
    limits = _spectrum_limits(w, pn, upper)
    if limits is not None:
        caption += f"Shown up to {limits[1]:.0f} cm⁻¹ (nothing significant above; the exported data hold all). "
    if tsa.check is not None:
        c = tsa.check
        caption += (f"Frames per period {c.frames_per_period:.3g}"
                    + (f", time steps per period {c.steps_per_period:.3g}" if c.steps_per_period else "")
                    + f"; a common rule of thumb keeps the time step below period/10 = "
                      f"{c.recommended_max_timestep_ps * 1e3:.3g} fs. ")
    caption += tsa.note[:1].upper() + tsa.note[1:] if tsa.note else ""
    return FigureSpec(key="timestep.spectrum", title=f"Velocity spectrum: {audit.run_name}",
                      plots=(PlotSpec(title="Velocity power spectrum", x=Axis("Wavenumber", "cm⁻¹", limits=limits),
                                      y=Axis("Power (normalised)", ""), items=tuple(items)),),
                      caption=caption)


PER_PS_TO_PER_CM = 1.0 / 0.0299792458  # 1 ps⁻¹ in cm⁻¹: 1/(c in cm/ps), c exact (SI)


def _spectrum_limits(w: np.ndarray, y: np.ndarray, highest: float | None, *,
                     weight: float = 0.995) -> tuple[float, float] | None:
    """An x range for a spectrum: up to the highest significant peak plus a margin (or, with none, to
    where ``weight`` of the spectral weight lies), never beyond the data. None when that is the whole."""
    if w.size < 2:
        return None
    top = float(w[-1])
    if highest is not None and np.isfinite(highest) and highest > 0:
        edge = highest
    else:
        yy = np.clip(np.nan_to_num(np.asarray(y, float)), 0.0, None)
        c = np.cumsum(yy)
        if c[-1] <= 0:
            return None
        edge = float(w[min(int(np.searchsorted(c, weight * c[-1])), w.size - 1)])
    cut = min(top, 1.3 * edge + 200.0)
    return None if cut >= 0.95 * top else (float(min(0.0, w[0])), cut)


def _empty(key: str, title: str, why: str) -> FigureSpec:
    return FigureSpec(key=key, title=title,
                      plots=(PlotSpec(title=title, x=Axis(""), y=Axis(""), items=(), legend=False, note=why),),
                      caption=why)


# --------------------------------------------------------------------------------------------------
# coordinates and phase space (phasewake.core.analyses.coordinates, projection, landscape)


def coordinate_series_figure(series: Any, *, crossings: Any = None, cursor_ps: float | None = None,
                             key: str = "coordinate.series") -> FigureSpec:
    """A coordinate against time; with a crossings result, its core sets, dividing surface and events."""
    t = np.asarray(series.time_ps, float)
    q = np.asarray(series.values, float)
    items: list[PlotItem] = []
    caption = f"{_name_of(series)} against time."
    if crossings is not None:
        items.extend(_state_marks(crossings, horizontal=True, data=q))
    # with crossings the legend explains the marks; the trace itself is named by the y axis
    items.append(Line(t, q, label="" if crossings is not None else series.label, style=_style(0)))
    if crossings is not None:
        ev = crossings.events
        if ev.size:
            for kind, colour, marker in (("transition", PALETTE[6], "o"), ("recrossing", PALETTE[1], "^")):
                sel = ev[ev["kind"] == kind]
                if sel.size:
                    items.append(Line(sel["time_ps"], np.full(sel.size, crossings.settings.surface), kind="scatter",
                                      label=f"{kind} ({sel.size})",
                                      style=Style(colour=colour, marker=marker, marker_size=6.0)))
        cs = crossings.settings
        caption += (f" Shaded: core sets A (q ≤ {cs.a_hi:.4g} {cs.unit}) and B (q ≥ {cs.b_lo:.4g} {cs.unit}), "
                    f"{cs.states_source}; dashed: dividing surface q* = {cs.surface:.4g} {cs.unit}. Markers: "
                    "crossings of q*, classed as transitions (the other core is reached next) or recrossings.")
    if cursor_ps is not None:
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=_GREY, dash="dot")))
    # a long name (distance(DIM1:D1, DIM1:D2)) is the title; the axis says q, so it is never cut
    y_name = series.label if len(series.label) <= 16 else "q"
    return FigureSpec(key=key, title=f"{series.label} against time",
                      plots=(PlotSpec(title=series.label, x=TIME, y=Axis(y_name, series.unit),
                                      items=tuple(items), x_is_time=True),),
                      caption=caption, provenance={"settings": {"coordinate": series.spec}})


def _name_of(series: Any) -> str:
    return series.label if series.label == series.spec else f"{series.label} ({series.spec})"


def _state_marks(crossings: Any, *, horizontal: bool, data: np.ndarray | None = None) -> list[PlotItem]:
    """Core sets A and B as shaded spans (out to the data's extent) and the dividing surface as a line."""
    cs = crossings.settings
    width = abs(cs.b_lo - cs.a_hi)
    lo, hi = cs.a_hi - width, cs.b_lo + width
    if data is not None and data.size and np.isfinite(data).any():
        # spans reach out to the data, so they do not widen the axes beyond it
        if np.nanmin(data) < cs.a_hi:
            lo = float(np.nanmin(data))
        if np.nanmax(data) > cs.b_lo:
            hi = float(np.nanmax(data))
    span = "hspan" if horizontal else "vspan"
    line = "hline" if horizontal else "vline"
    return [
        Mark(span, lo, cs.a_hi, label="core A", role="state", style=Style(colour=PALETTE[2], alpha=0.18)),
        Mark(span, cs.b_lo, hi, label="core B", role="state", style=Style(colour=PALETTE[3], alpha=0.18)),
        Mark(line, cs.surface, label="dividing surface", role="surface",
             style=Style(colour=PALETTE[0], dash="dash", width=1.2)),
    ]


def phase_portrait_figure(series: Any, *, crossings: Any = None, max_points: int = 20_000,
                          cursor_index: int | None = None) -> FigureSpec:
    """Phase portrait: a coordinate against its conjugate momentum (or its velocity when no mass)."""
    q = np.asarray(series.values, float)
    use_p = series.momentum is not None
    if use_p:
        p = np.asarray(series.momentum, float)
        p_axis = Axis("Conjugate momentum p", series.momentum_unit)
        what = "conjugate momentum p = m_eff dq/dt"
    elif series.velocity is not None:
        p = np.asarray(series.velocity, float)
        p_axis = Axis("Rate of change dq/dt", series.velocity_unit or f"{series.unit}/ps")
        what = "rate of change dq/dt"
    else:
        return _empty("phase.portrait", "Phase portrait", "The run has no velocities for a phase portrait.")
    stride = max(1, q.size // max_points)
    items: list[PlotItem] = []
    if crossings is not None:
        items.extend(_state_marks(crossings, horizontal=False, data=q))
    items.append(Line(q[::stride], p[::stride], kind="scatter", label="frames" if stride == 1 else
                      f"every {stride}th frame", style=Style(colour=PALETTE[5], marker="o", marker_size=2.5,
                                                           alpha=0.5)))
    if cursor_index is not None and 0 <= cursor_index < q.size:
        items.append(Mark("point", float(q[cursor_index]), float(p[cursor_index]), label="cursor",
                          role="cursor", style=Style(colour=PALETTE[6], marker="o", marker_size=5.0)))
    caption = (f"Phase portrait of {_name_of(series)}: the coordinate against its {what}"
               + (f", {series.momentum_unit}" if use_p else "")
               + (f"; every {stride}th of {q.size} frames" if stride > 1 else f"; all {q.size} frames")
               + "." + (" Velocities were estimated from positions by central differences."
                        if series.velocities_estimated else " Velocities as stored in the run."))
    if crossings is not None:
        caption += " Shaded: core sets; dashed: the dividing surface."
    return FigureSpec(key="phase.portrait", title=f"Phase portrait of {series.label}",
                      plots=(PlotSpec(title=f"Phase portrait of {series.label}", x=Axis(series.label, series.unit),
                                      y=p_axis, items=tuple(items)),),
                      caption=caption, provenance={"settings": {"coordinate": series.spec, "stride": stride}})


def pca_figure(pca: Any, *, max_components: int = 10, max_points: int = 20_000) -> FigureSpec:
    """Principal components: eigenvalue spectrum (explained variance) and PC1 vs PC2 projection."""
    ev = np.asarray(pca.explained_variance_ratio, float)[:max_components]
    k = np.arange(1, ev.size + 1, dtype=float)
    plots = [PlotSpec(title="Explained variance", x=Axis("Principal component", "", integer=True),
                      y=Axis("Fraction of variance", ""),
                      items=(Line(k, ev, kind="bar", label="per component", style=_style(0)),
                             Line(k, np.cumsum(ev), label="cumulative", style=_style(1, marker=True))))]
    proj = pca.projections
    if proj is not None and np.asarray(proj).ndim == 2 and np.asarray(proj).shape[1] >= 2:
        pr = np.asarray(proj, float)
        stride = max(1, pr.shape[0] // max_points)
        plots.append(PlotSpec(title="Projection on PC1 and PC2", x=Axis("PC1", pca.projection_unit),
                              y=Axis("PC2", pca.projection_unit),
                              items=(Line(pr[::stride, 0], pr[::stride, 1], kind="scatter", label="frames",
                                          style=Style(colour=PALETTE[5], marker="o", marker_size=2.5, alpha=0.5)),),
                              legend=False))
    cc = pca.cosine_content
    cc_text = ""
    if cc is not None and np.asarray(cc).size:
        cc_text = f" Cosine content of PC1: {float(np.asarray(cc)[0]):.2f} (Hess 2002; near 1 suggests random diffusion)."
    caption = (f"Principal components of {atoms_text(pca.atom_indices)} over {pca.n_frames} frames "
               f"({'mass-weighted' if pca.mass_weighted else 'not mass-weighted'}, "
               f"{'after optimal superposition' if pca.fit else 'no superposition'}, method {pca.method}). "
               f"PC1 explains {100 * ev[0]:.1f}% of the variance." + cc_text if ev.size else "")
    return FigureSpec(key="phase.pca", title="Principal components", plots=tuple(plots),
                      grid=(1, len(plots)), caption=caption,
                      provenance={"settings": {"mass_weighted": pca.mass_weighted, "fit": pca.fit,
                                               "method": pca.method, "n_components": pca.n_components}})


def free_energy_profile_figure(profile: Any, *, label: str = "q", crossings: Any = None) -> FigureSpec:
    """F(q) = −kT ln P(q) with block errors, minima and barrier tops marked."""
    c = np.asarray(profile.centers, float)
    f = np.asarray(profile.free_energy_kJ_per_mol, float)
    err = np.asarray(profile.error_kJ_per_mol, float)
    ok = np.isfinite(f)
    items: list[PlotItem] = []
    if crossings is not None:
        items.extend(_state_marks(crossings, horizontal=False))
    e_ok = ok & np.isfinite(err)
    if e_ok.any():
        items.append(Band(c[e_ok], f[e_ok] - err[e_ok], f[e_ok] + err[e_ok], label="± block error",
                          style=Style(colour=PALETTE[5], alpha=0.25)))
    items.append(Line(c[ok], f[ok], label="free energy", style=_style(0)))
    bar_text = []
    for m in profile.minima:
        items.append(Mark("point", m.position, m.free_energy_kJ_per_mol, role="state",
                          style=Style(colour=PALETTE[3], marker="o", marker_size=5.0)))
    for i, b in enumerate(profile.barriers):
        items.append(Mark("vline", b.position, label="barrier top" if i == 0 else "", role="surface",
                          style=Style(colour=PALETTE[6], dash="dash", width=1.2)))
        bar_text.append(f"barrier at {b.position:.4g} {profile.unit}: {b.height_from_left_kJ_per_mol:.3g} ± "
                        f"{b.error_from_left_kJ_per_mol:.2g} kJ/mol from the left, "
                        f"{b.height_from_right_kJ_per_mol:.3g} ± {b.error_from_right_kJ_per_mol:.2g} kJ/mol "
                        "from the right")
    kt = profile.kT_kJ_per_mol
    caption = (f"Free-energy profile F = −kT ln P of {label} at T = {profile.temperature_K:g} K "
               f"(kT = {kt:.3g} kJ/mol) from {profile.n_samples} frames; errors from {profile.n_blocks} "
               f"blocks; Jacobian correction: {profile.jacobian}. Minima: "
               + (", ".join(f"{m.position:.4g} {profile.unit}" for m in profile.minima) or "none")
               + ". " + ("; ".join(bar_text) + "." if bar_text else "No barrier found.")
               + " Frames of one run are correlated: the profile is only as good as the sampling.")
    return FigureSpec(key="landscape.profile", title=f"Free-energy profile of {label}",
                      plots=(PlotSpec(title=f"Free-energy profile of {label}", x=Axis(label, profile.unit),
                                      y=Axis("Free energy", "kJ/mol"), items=tuple(items),
                                      note=f"kT = {kt:.3g} kJ/mol"),),
                      caption=caption,
                      provenance={"settings": {"temperature_K": profile.temperature_K, "n_blocks": profile.n_blocks,
                                               "jacobian": profile.jacobian}})


def free_energy_surface_figure(surface: Any, *, x_label: str = "x", y_label: str = "y") -> FigureSpec:
    """2D free-energy surface as an image (empty bins left blank)."""
    f = np.asarray(surface.free_energy_kJ_per_mol, float)
    f = np.where(np.isfinite(f), f, np.nan)
    items: list[PlotItem] = [Image(f, np.asarray(surface.x_edges, float), np.asarray(surface.y_edges, float),
                                   label="free energy", colorbar_label="Free energy (kJ/mol)")]
    for i, (x, y, _) in enumerate(surface.minima):
        items.append(Mark("point", float(x), float(y), label="minimum" if i == 0 else "", role="state",
                          style=Style(colour=PALETTE[7], marker="s", marker_size=5.0)))
    caption = (f"Free-energy surface F = −kT ln P over {x_label} and {y_label} at T = {surface.temperature_K:g} K "
               f"(kT = {surface.kT_kJ_per_mol:.3g} kJ/mol), errors from {surface.n_blocks} blocks; empty bins blank.")
    return FigureSpec(key="landscape.surface", title="Free-energy surface",
                      plots=(PlotSpec(title="Free-energy surface", x=Axis(x_label, surface.x_unit),
                                      y=Axis(y_label, surface.y_unit), items=tuple(items)),),
                      caption=caption)


def poincare_figure(section: Any, *, q2_label: str = "q2", p2_label: str = "p2") -> FigureSpec:
    """Poincaré surface of section: (q2, p2) at each crossing of q1 = value."""
    items: list[PlotItem] = [Line(np.asarray(section.q2, float), np.asarray(section.p2, float), kind="scatter",
                                  label=f"{section.q2.size} crossings",
                                  style=Style(colour=PALETTE[5], marker="o", marker_size=3.0))]
    caption = (f"Poincaré section: {q2_label} and {p2_label} each time q1 crosses {section.value:g} going "
               f"{section.direction}, interpolated linearly between frames ({section.q2.size} points). Points on "
               "one closed curve suggest regular motion; a scattered cloud suggests chaotic motion.")
    return FigureSpec(key="phase.poincare", title="Poincaré section",
                      plots=(PlotSpec(title="Poincaré section", x=Axis(q2_label, section.q2_unit),
                                      y=Axis(p2_label, section.p2_unit), items=tuple(items)),),
                      caption=caption)


# --------------------------------------------------------------------------------------------------
# sampling (phasewake.core.analyses.sampling)


def running_average_figure(result: Any, *, name: str = "series", key: str = "sampling.running",
                           time_offset_ps: float = 0.0) -> FigureSpec:
    """Running average of a series with its g-corrected standard-error band.

    time_offset_ps : added to the result's times (which start at 0), e.g. the start of a time window.
    """
    t = np.asarray(result.time_ps, float) + time_offset_ps
    m = np.asarray(result.mean, float)
    e = np.asarray(result.sem, float)
    items: list[PlotItem] = [
        Band(t, m - e, m + e, label="± standard error (g-corrected)", style=Style(colour=PALETTE[5], alpha=0.25)),
        Line(t, m, label="running average", style=_style(0)),
    ]
    if m.size:
        items.append(Mark("hline", float(m[-1]), label="final average", role="annotation",
                          style=Style(colour=PALETTE[0], dash="dash", width=1.0)))
    caption = (f"Running average of {name} from the start of the run up to each time, with ± one standard error "
               f"from the statistical inefficiency g = {result.statistical_inefficiency:.3g}. An average that "
               "still wanders outside its band late in the run has not converged.")
    return FigureSpec(key=key, title=f"Running average of {name}",
                      plots=(PlotSpec(title=f"Running average of {name}", x=TIME, y=Axis(name, result.unit),
                                      items=tuple(items), x_is_time=True),),
                      caption=caption, provenance={"settings": dict(result.settings)})


def divergence_figure(result: Any, *, name: str = "series", unit: str = "") -> FigureSpec:
    """Histograms of a series over consecutive segments, with the Jensen–Shannon divergence noted."""
    edges = np.asarray(result.bin_edges, float)
    h = np.asarray(result.histograms, float)
    widths = np.diff(edges)
    items: list[PlotItem] = []
    labels = ("first half", "second half") if result.n_segments == 2 else \
        tuple(f"segment {i + 1}" for i in range(result.n_segments))
    for i in range(h.shape[0]):
        tot = h[i].sum()
        dens = h[i] / (tot * widths) if tot > 0 else h[i]
        st = series_style(i)
        items.append(Line(edges, dens, kind="step", label=labels[i] if i < len(labels) else f"segment {i + 1}",
                          style=Style(colour=st.colour, dash=st.dash, width=1.6)))
    note = f"JSD = {result.half_jsd_nats:.3g} nats (noise level {result.half_null_nats:.2g})"
    caption = (f"Distribution of {name} in {result.n_segments} consecutive segments of the run (normalised "
               f"histograms, {edges.size - 1} bins). Jensen–Shannon divergence of the first against the "
               f"{'second half' if result.n_segments == 2 else 'last segment'}: {result.half_jsd_nats:.3g} nats, "
               f"against {result.half_null_nats:.2g} nats expected from noise alone for the effective sample size "
               f"(g = {result.statistical_inefficiency:.3g}); the largest pairwise ratio to the noise level is "
               f"{result.max_ratio:.3g}.")
    return FigureSpec(key="sampling.divergence", title=f"Segments of {name}",
                      plots=(PlotSpec(title=f"Distribution of {name} by segment", x=Axis(name, unit),
                                      y=Axis("Probability density", f"1/{unit}" if unit else ""),
                                      items=tuple(items), note=note),),
                      caption=caption, provenance={"settings": dict(result.settings)})


def tm_figure(result: Any) -> FigureSpec:
    """Thirumalai–Mountain ergodic measure: Ω(0)/Ω(t) against t (a straight line for an ergodic run)."""
    t = np.asarray(result.time_ps, float)
    r = np.asarray(result.ratio, float)
    ok = np.isfinite(r)
    items: list[PlotItem] = [Line(t[ok], r[ok], label="Ω(0)/Ω(t)", style=_style(0))]
    f0, f1 = result.fit_range_ps
    items.append(Mark("vspan", f0, f1, label="fit range", role="annotation", style=Style(colour=PALETTE[2], alpha=0.15)))
    caption = (f"Thirumalai–Mountain fluctuation metric of {result.quantity} over {result.n_particles} particles "
               f"(Thirumalai, Mountain and Kirkpatrick 1989): Ω(0)/Ω(t) grows as D t when the particles' time "
               f"averages converge to one value. Fitted D = {result.d_per_ps:.3g} ps⁻¹ over {f0:.3g}–{f1:.3g} ps; "
               f"late log-log slope {result.late_slope:.2f}" + (" (a plateau: not ergodic on this time scale)."
                                                                 if result.plateau else "."))
    return FigureSpec(key="sampling.tm", title="Ergodic measure",
                      plots=(PlotSpec(title="Thirumalai–Mountain metric", x=TIME, y=Axis("Ω(0)/Ω(t)", ""),
                                      items=tuple(items), x_is_time=True),),
                      caption=caption, provenance={"settings": dict(result.settings)})


def coverage_figure(result: Any, *, x_label: str = "x", y_label: str = "y", time_offset_ps: float = 0.0) -> FigureSpec:
    """Phase-space coverage: the fraction of a fixed grid visited so far, against time.

    time_offset_ps : added to the result's times (which start at 0), e.g. the start of a time window.
    """
    t = np.asarray(result.time_ps, float) + time_offset_ps
    f = np.asarray(result.fraction, float)
    shape = np.asarray(result.visits).shape
    caption = (f"Fraction of a fixed {shape[0]} × {shape[1]} grid over {x_label} and {y_label} visited up to each "
               "time. A curve still rising at the end means the run is still finding new regions.")
    return FigureSpec(key="sampling.coverage", title="Phase-space coverage",
                      plots=(PlotSpec(title="Phase-space coverage", x=TIME, y=Axis("Fraction of grid visited", ""),
                                      items=(Line(t, f, label="visited", style=_style(0)),), x_is_time=True,
                                      legend=False),),
                      caption=caption, provenance={"settings": dict(result.settings)})


def recurrence_figure(result: Any) -> FigureSpec:
    """Recurrence plot: frames i and j closer than ε in the projection."""
    t = np.asarray(result.time_ps, float)
    m = np.asarray(result.matrix, float)
    if t.size >= 2:
        dt = float(np.median(np.diff(t)))
        edges = np.concatenate([t - dt / 2, [t[-1] + dt / 2]])
    else:
        edges = np.array([0.0, 1.0])
    caption = (f"Recurrence plot (Eckmann, Kamphorst and Ruelle 1987): dark where frames i and j lie within ε = "
               f"{result.epsilon:.3g} of each other (every {result.stride}th frame); recurrence rate "
               f"{result.recurrence_rate:.3g}.")
    return FigureSpec(key="sampling.recurrence", title="Recurrence plot",
                      plots=(PlotSpec(title="Recurrence plot", x=TIME, y=Axis("Time", "ps"),
                                      items=(Image(m, edges, edges, label="recurrence", colormap="Greys",
                                                   colorbar_label="recurrent (1) or not (0)"),),
                                      aspect_equal=True, legend=False),),
                      caption=caption, provenance={"settings": dict(result.settings)})


# --------------------------------------------------------------------------------------------------
# velocities (phasewake.core.analyses.velocity)


def vacf_figure(result: Any) -> FigureSpec:
    """Velocity autocorrelation per atom group, normalised to its value at zero lag."""
    lag = np.asarray(result.lag_ps, float)
    v = np.atleast_2d(np.asarray(result.vacf, float))
    items: list[PlotItem] = [Mark("hline", 0.0, style=Style(colour=_GREY, dash="solid", width=0.8))]
    for i, name in enumerate(result.groups):
        c0 = v[i, 0] if v[i, 0] != 0 else 1.0
        items.append(Line(lag, v[i] / c0, label=f"{name} ({int(result.n_atoms_per_group[i])} atoms)",
                          style=_style(i)))
    limits = _decay_limits(lag, v)
    caption = (f"Velocity autocorrelation C(t)/C(0) per group ({'mass-weighted' if result.mass_weighted else 'plain'}), "
               f"averaged over atoms and time origins of {result.n_frames} frames {result.dt_ps:.3g} ps apart."
               + (" Velocities estimated from positions." if result.velocities_estimated else "")
               + (f" Shown to {limits[1]:.3g} ps, a few times the lag after which |C(t)/C(0)| stays below "
                  f"{DECAY_LEVEL:g} (the exported data hold every lag up to {lag[-1]:.3g} ps)."
                  if limits is not None else "")
               + _notes_text(result.notes))
    return FigureSpec(key="velocity.vacf", title="Velocity autocorrelation",
                      plots=(PlotSpec(title="Velocity autocorrelation", x=Axis("Lag", "ps", limits=limits),
                                      y=Axis("C(t)/C(0)", ""), items=tuple(items)),),
                      caption=caption, provenance={"settings": dict(result.settings)})


DECAY_LEVEL = 0.05  # a correlation below this fraction of its start is taken as decayed (common practice)


def _decay_limits(lag: np.ndarray, c: np.ndarray, *, times: float = 4.0) -> tuple[float, float] | None:
    """(0, a few decay times) for correlation curves ``c`` (n_curves, n_lags) against ``lag``: the decay time
    is the lag after which every normalised curve stays below DECAY_LEVEL. None when that is most of the
    range (a curve that never decays, e.g. an undamped vibration, is shown whole)."""
    if lag.size < 4:
        return None
    c = np.atleast_2d(np.asarray(c, float))
    c0 = np.where(c[:, :1] != 0, c[:, :1], 1.0)
    above = np.any(np.abs(c / c0) >= DECAY_LEVEL, axis=0)
    idx = np.nonzero(above)[0]
    if idx.size == 0:
        return None
    t_decay = float(lag[min(int(idx[-1]) + 1, lag.size - 1)])
    cut = max(times * t_decay, float(lag[min(8, lag.size - 1)]))
    return None if cut >= 0.8 * float(lag[-1]) else (float(lag[0]), cut)


def vdos_figure(result: Any, *, max_cm1: float | None = None) -> FigureSpec:
    """Vibrational density of states against wavenumber, significant peaks marked."""
    w = np.asarray(result.wavenumber_cm1, float)
    y = np.asarray(result.intensity, float)
    if max_cm1 is not None:
        keep = w <= max_cm1
        w, y = w[keep], y[keep]
    items: list[PlotItem] = [Line(w, y, label="density of states", style=_style(0))]
    seen: set[str] = set()
    for pk in result.peaks[:6]:
        # a peak the frames do not resolve (a possible alias, velocity.judge_peaks) is not a motion
        kind = "possible aliases, not motions" if getattr(pk, "not_a_motion", "") else "peaks"
        items.append(Mark("point", pk.wavenumber_cm1, pk.intensity, label="" if kind in seen else kind, role="event",
                          style=Style(colour=PALETTE[6] if kind == "peaks" else PALETTE[3],
                                      marker="v" if kind == "peaks" else "x", marker_size=5.0)))
        seen.add(kind)
        items.append(Mark("text", pk.wavenumber_cm1, pk.intensity, label=f"{pk.wavenumber_cm1:.0f}",
                          style=Style(colour=PALETTE[0])))
    limits = None if max_cm1 is not None else _spectrum_limits(w, y, getattr(result, "highest_significant_peak_cm1", None))
    caption = (f"Vibrational density of states (Fourier transform of the mass-weighted VACF, {result.window} window), "
               f"normalised to {result.n_dof:g} degrees of freedom. Resolution {result.resolution_cm1:.3g} cm⁻¹ "
               f"(lag window {result.max_lag_ps:.3g} ps), Nyquist limit {result.nyquist_cm1:.4g} cm⁻¹ from the "
               f"frame spacing {result.dt_ps:.3g} ps."
               + (f" Shown up to {limits[1]:.0f} cm⁻¹, past the highest significant peak (nothing significant "
                  "above; the exported data hold the whole range)." if limits is not None else "")
               + (" Velocities estimated from positions: high frequencies are damped." if result.velocities_estimated
                  else "") + _notes_text(result.notes))
    return FigureSpec(key="velocity.vdos", title="Vibrational density of states",
                      plots=(PlotSpec(title="Vibrational density of states", x=Axis("Wavenumber", "cm⁻¹", limits=limits),
                                      y=Axis("Density of states", "1/cm⁻¹"), items=tuple(items)),),
                      caption=caption, provenance={"settings": dict(result.settings)})


# --------------------------------------------------------------------------------------------------
# crossings (phasewake.core.analyses.crossings)


def dwell_times_figure(result: Any) -> FigureSpec:
    """Completed dwell times in each core set, as survival curves against the fitted exponential."""
    dw = result.dwells
    items: list[PlotItem] = []
    text = []
    for i, state in enumerate(("A", "B")):
        sel = dw[(dw["state"] == state) & ~dw["censored_start"] & ~dw["censored_end"]] if dw.size else dw
        d = np.sort(np.asarray(sel["duration_ps"], float)) if sel.size else np.zeros(0)
        if d.size == 0:
            text.append(f"{state}: no completed dwell")
            continue
        # survival S(t): 1 on [0, d_1), then (n - i)/n on [d_i, d_{i+1}), drawn on bin edges
        edges = np.concatenate([[0.0], d])
        surv = 1.0 - np.arange(d.size) / d.size
        st = series_style(i)
        items.append(Line(edges, surv, kind="step", label=f"state {state} ({d.size} dwells)",
                          style=Style(colour=st.colour, dash="solid" if i == 0 else "dashdot", width=1.8)))
        grid = np.linspace(0.0, d.max(), 100)
        items.append(Line(grid, np.exp(-grid / d.mean()), label=f"exponential, mean {d.mean():.3g} ps",
                          style=Style(colour=st.colour, dash="dot" if i == 0 else "dash", width=1.2)))
        test = result.dwell_tests.get(state) if isinstance(result.dwell_tests, Mapping) else None
        if test is not None and np.isfinite(test.p_value):
            text.append(f"{state}: KS D = {test.statistic:.3g}, p = {test.p_value:.3g}")
    caption = ("Fraction of completed dwells in each core set longer than t (censored first and last segments "
               "left out), with the exponential of the same mean. Kolmogorov–Smirnov test against an "
               "exponential with a fitted mean (Lilliefors 1969): " + ("; ".join(text) or "not enough dwells") + ".")
    return FigureSpec(key="crossings.dwells", title="Dwell times",
                      plots=(PlotSpec(title="Dwell times", x=Axis("Dwell time", "ps"),
                                      y=Axis("Fraction longer than t", "", log=bool(items)), items=tuple(items)),),
                      caption=caption)


def transmission_figure(result: Any) -> FigureSpec:
    """Reactive-flux transmission coefficient κ(t) with its plateau window and value."""
    k = result.kappa
    lag = np.asarray(k.lag_ps, float)
    items: list[PlotItem] = []
    if lag.size:
        w0, w1 = k.plateau_window_ps
        items.append(Mark("vspan", w0, w1, label="plateau window", role="annotation",
                          style=Style(colour=PALETTE[2], alpha=0.18)))
        for i, (arr, lab) in enumerate(((k.kappa, "both directions"), (k.kappa_up, "A→B"), (k.kappa_down, "B→A"))):
            a = np.asarray(arr, float)
            if a.size == lag.size and np.isfinite(a).any():
                items.append(Line(lag, a, label=lab, style=_style(i)))
        if np.isfinite(k.plateau):
            items.append(Mark("hline", float(k.plateau), label=f"κ = {k.plateau:.3g}", role="threshold",
                              style=Style(colour=PALETTE[6], dash="dash", width=1.2)))
    caption = (f"Transmission coefficient κ(t) from the run's own crossings of the dividing surface (reactive flux, "
               f"Bennett 1977, Chandler 1978): plateau {k.plateau:.3g} (raw {k.plateau_raw:.3g}) over "
               f"{k.plateau_window_ps[0]:.3g}–{k.plateau_window_ps[1]:.3g} ps; counting estimate "
               f"{k.counting:.3g} ({k.n_crossings_up} up, {k.n_crossings_down} down crossings). {k.assumptions}")
    return FigureSpec(key="crossings.kappa", title="Transmission coefficient",
                      plots=(PlotSpec(title="Transmission coefficient", x=Axis("Time after crossing", "ps"),
                                      y=Axis("κ(t)", ""), items=tuple(items)),),
                      caption=caption)


def _rate_text(r: Any) -> str:
    if r.upper_bound_only:
        return (f"< {r.ci_high_per_ps:.3g} ps⁻¹ ({100 * r.confidence:.0f}% upper limit: no transition in "
                f"{r.exposure_ps:.4g} ps in {r.from_state})")
    mfpt = f"; mean first-passage time {r.mfpt_ps:.3g} ps" if np.isfinite(r.mfpt_ps) else ""
    return (f"{r.rate_per_ps:.3g} ps⁻¹, {100 * r.confidence:.0f}% interval [{r.ci_low_per_ps:.3g}, "
            f"{r.ci_high_per_ps:.3g}] ps⁻¹ ({r.n_transitions} transition{'s' if r.n_transitions != 1 else ''} in "
            f"{r.exposure_ps:.4g} ps in {r.from_state}{mfpt})")


def crossings_rate_rows(result: Any) -> list[tuple[str, str]]:
    """The rates of a crossings result as (name, value with unit) rows: the numbers the ``crossings`` verb
    prints (rates with their intervals, transmission coefficients, transition-state-theory rates)."""
    rows = [(f"k({r.from_state}→{r.to_state})", _rate_text(r)) for r in (result.rate_ab, result.rate_ba)]
    k = result.kappa
    rows.append(("κ, transmission coefficient",
                 f"{_fmt(k.plateau)} by reactive flux (plateau over {k.plateau_window_ps[0]:.3g}–"
                 f"{k.plateau_window_ps[1]:.3g} ps), {_fmt(k.counting)} by counting "
                 f"(A→B {_fmt(k.counting_up)}, B→A {_fmt(k.counting_down)})"))
    if result.tst is not None:
        t = result.tst.tst
        rows.append(("Transition-state theory",
                     f"k_TST(A→B) = {_fmt(t.rate_up_per_ps, 'ps⁻¹')}, k_TST(B→A) = {_fmt(t.rate_down_per_ps, 'ps⁻¹')} "
                     f"({t.flux_source}); k/k_TST = {_fmt(result.tst.kappa_up)} and {_fmt(result.tst.kappa_down)}"))
    else:
        rows.append(("Transition-state theory", "not computed (needs the temperature and the effective mass)"))
    return rows


def crossings_summary_rows(result: Any) -> list[tuple[str, str]]:
    """Key numbers of a crossings result as (name, value with unit) rows for tables."""
    cs = result.settings
    rows = [("Core sets", f"A: q ≤ {cs.a_hi:.4g} {cs.unit}; B: q ≥ {cs.b_lo:.4g} {cs.unit} ({cs.states_source})"),
            ("Dividing surface", f"q* = {cs.surface:.4g} {cs.unit}")]
    ev = result.events
    n_tr = int(np.sum(ev["kind"] == "transition")) if ev.size else 0
    n_re = int(np.sum(ev["kind"] == "recrossing")) if ev.size else 0
    rows.append(("Crossings", f"{ev.size} ({n_tr} transitions, {n_re} recrossings)"))
    for r in (result.rate_ab, result.rate_ba):
        if r.upper_bound_only:
            val = f"< {r.ci_high_per_ps:.3g} 1/ps ({100 * r.confidence:.0f}% upper bound, no transition seen)"
        else:
            val = (f"{r.rate_per_ps:.3g} 1/ps [{r.ci_low_per_ps:.3g}, {r.ci_high_per_ps:.3g}] "
                   f"({100 * r.confidence:.0f}%, {r.interval_method}); {r.n_transitions} transitions in "
                   f"{r.exposure_ps:.4g} ps")
        rows.append((f"Rate {r.from_state}→{r.to_state}", val))
    pt = result.path_times
    if pt.n:
        rows.append(("Transition-path time", f"mean {pt.mean_ps:.3g} ± {pt.sem_ps:.2g} ps, median {pt.median_ps:.3g} ps "
                     f"({pt.n} paths)"))
    rows.append(("Transmission coefficient", f"κ = {result.kappa.plateau:.3g} (reactive flux), "
                 f"{result.kappa.counting:.3g} (counting)"))
    if result.tst is not None:
        rows.append(("κ from rates / TST", f"A→B {result.tst.kappa_up:.3g}, B→A {result.tst.kappa_down:.3g}"))
    rows.append(("Velocities at crossings", result.velocity_source))
    return rows


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


# --------------------------------------------------------------------------------------------------
# the window's phase-space, sampling and landscape figures (also drawn in the report)


def phase_path_figure(x: np.ndarray, y: np.ndarray, *, key: str, title: str, x_axis: Axis, y_axis: Axis,
                      caption: str, label: str) -> FigureSpec:
    """Two quantities against each other as a thin line through the frames in time order.

    x, y : ndarray, shape (n_frames,), in the units of ``x_axis`` and ``y_axis``.
    """
    style = Style(colour=PALETTE[5], width=1.0, alpha=0.55)
    return FigureSpec(key=key, title=title, caption=caption, plots=(
        PlotSpec(title=title, x=x_axis, y=y_axis, legend=False,
                 items=(Line(np.asarray(x, float), np.asarray(y, float), label=label, style=style),)),))


def _momentum_of(series: Any) -> tuple[np.ndarray, str, str] | None:
    if series.momentum is not None:
        return np.asarray(series.momentum, float), series.momentum_unit, "Conjugate momentum"
    if series.velocity is not None:
        return np.asarray(series.velocity, float), series.velocity_unit or f"{series.unit}/ps", "Rate of change"
    return None


def phase_density_figure(series: Any, histogram: Any) -> FigureSpec:
    """Density of the frames in the (q, p) plane (key ``phase.density``); empty cells blank.

    histogram : phasewake.core.analyses.landscape.Histogram2D of (q, p), computed by the caller.
    """
    mp = _momentum_of(series)
    pu, pname = (mp[1], mp[2]) if mp is not None else ("", "Momentum")
    dens = np.where(np.asarray(histogram.counts) > 0, np.asarray(histogram.density, float), np.nan)
    title = f"Phase-space density of {series.label or series.spec}"
    return FigureSpec(
        key="phase.density", title=title,
        caption=(f"Histogram of ({series.spec}, p) over the window, {histogram.n_samples} frames; empty cells "
                 "blank. Blank regions between visited ones are where the run rarely went."),
        plots=(PlotSpec(title=title, x=Axis(series.spec, series.unit), y=Axis(pname, pu), legend=False,
                        items=(Image(dens, np.asarray(histogram.x_edges, float), np.asarray(histogram.y_edges, float),
                                     colorbar_label=f"density (1/({series.unit} \u00b7 {pu}))"),)),))


def coordinate_time_figure(series: Any) -> FigureSpec:
    """A coordinate frame by frame against time (key ``phase.series``), linked to the time cursor."""
    title = f"{series.label or series.spec} against time"
    return FigureSpec(key="phase.series", title=title, caption=f"The coordinate {series.spec} frame by frame.",
                      plots=(PlotSpec(title=title, x=TIME, y=Axis(series.spec, series.unit), x_is_time=True,
                                      legend=False, items=(Line(np.asarray(series.time_ps, float),
                                                                np.asarray(series.values, float),
                                                                label=series.spec, style=_style(0)),)),))


def coordinate_pair_figure(first: Any, second: Any) -> FigureSpec:
    """Two coordinates against each other, frame by frame (key ``phase.pair``)."""
    return phase_path_figure(
        np.asarray(first.values, float), np.asarray(second.values, float), key="phase.pair",
        title=f"{first.spec} against {second.spec}", x_axis=Axis(first.spec, first.unit),
        y_axis=Axis(second.spec, second.unit), label=f"{first.spec}, {second.spec}",
        caption=f"The coordinate pair ({first.spec}, {second.spec}) frame by frame; the large dot is the cursor's frame.")


def poincare_pair_figure(first: Any, second: Any, section: Any) -> FigureSpec:
    """Poincaré section of a coordinate pair: (q2, p2) where q1 crosses ``section.value`` upwards
    (key ``phase.poincare_pair``). section : phasewake.core.analyses.landscape.PoincareSection."""
    level = float(section.value)
    title = f"Poincar\u00e9 section at {first.spec} = {level:.4g} {first.unit}"
    return FigureSpec(
        key="phase.poincare_pair", title=title,
        caption=(f"({second.spec}, its momentum) each time {first.spec} crosses {level:.4g} {first.unit} "
                 f"going {section.direction}, interpolated between frames: {section.n_points} points. Regular "
                 "motion lies on curves, chaotic motion fills areas."),
        plots=(PlotSpec(title="Poincar\u00e9 section", x=Axis(second.spec, second.unit),
                        y=Axis(f"Momentum of {second.spec}", section.p2_unit), legend=False,
                        items=(Line(np.asarray(section.q2, float), np.asarray(section.p2, float), kind="scatter",
                                    label="section", style=Style(colour=PALETTE[5], marker="o", marker_size=5)),)),))


def pca_variance_figure(pca: Any) -> FigureSpec:
    """Explained variance per principal component (key ``phase.pca_variance``)."""
    return principal_component_figures(pca)[0]


def atoms_text(indices: Sequence[int] | np.ndarray) -> str:
    """Atom indices in words: "atoms 0 and 1", "atoms 0–53 (54 atoms)", "12 atoms (0–3, 8–15)"."""
    idx = sorted(int(i) for i in np.asarray(indices).ravel())
    if not idx:
        return "no atoms"
    if len(idx) == 1:
        return f"atom {idx[0]}"
    if len(idx) == 2:
        return f"atoms {idx[0]} and {idx[1]}"
    runs: list[tuple[int, int]] = []
    for i in idx:
        if runs and i == runs[-1][1] + 1:
            runs[-1] = (runs[-1][0], i)
        else:
            runs.append((i, i))
    parts = [f"{a}–{b}" if b > a else f"{a}" for a, b in runs[:4]] + (["…"] if len(runs) > 4 else [])
    if len(runs) == 1:
        return f"atoms {parts[0]} ({len(idx)} atoms)"
    return f"{len(idx)} atoms ({', '.join(parts)})"


def principal_component_figures(pca: Any, *, atoms: str = "") -> list[FigureSpec]:
    """Explained variance per component (``phase.pca_variance``), PC 1 against its momentum
    (``phase.pc1``) and PC 1 against PC 2 (``phase.pc12``, when PC 2 carries variance).

    pca : phasewake.core.analyses.projection.PCAResult.
    atoms : which atoms, in words, for the captions (e.g. "the solute: atoms 0–53 (54 atoms)"); default
        from ``pca.atom_indices``.
    """
    out = []
    atoms = atoms or atoms_text(pca.atom_indices)
    ev = np.asarray(pca.explained_variance_ratio, float)
    k = np.arange(1, ev.size + 1, dtype=float)
    cc = pca.cosine_content
    cc_text = ""
    if cc is not None and np.asarray(cc).size:
        cc_text = (f" Cosine content of PC 1: {float(np.asarray(cc)[0]):.2f} (Hess 2002; near 1 suggests random "
                   "diffusion rather than structure).")
    out.append(FigureSpec(
        key="phase.pca_variance", title="Principal components: explained variance",
        caption=(f"Fraction of the total variance per principal component of the positions of {atoms} "
                 f"({pca.n_frames} frames, {'mass-weighted' if pca.mass_weighted else 'unweighted'}, "
                 f"{'after optimal superposition' if pca.fit else 'no fit'}, method {pca.method})." + cc_text
                 + (" With two atoms and the rotation and translation fitted away, only their distance can vary:"
                    " all the variance is in PC 1 by construction, so use the distance itself as the coordinate."
                    if np.asarray(pca.atom_indices).size == 2 and pca.fit else "")),
        plots=(PlotSpec(title="Explained variance", x=Axis("Principal component", integer=True),
                        y=Axis("Fraction of variance"),
                        legend=False, items=(Line(k, ev, kind="bar", label="explained variance", style=_style(0)),)),)))
    proj = pca.projections
    if proj is None or pca.time_ps is None or np.asarray(proj).ndim != 2 or np.asarray(proj).shape[1] < 1:
        return out
    pr = np.asarray(proj, float)
    if pca.momenta is not None:
        out.append(phase_path_figure(
            pr[:, 0], np.asarray(pca.momenta, float)[:, 0], key="phase.pc1",
            title="First principal component: phase portrait", x_axis=Axis("PC 1", pca.projection_unit),
            y_axis=Axis("Momentum of PC 1", pca.momentum_unit), label="pc(1)",
            caption=f"Projection of {atoms} on the first principal component against its momentum "
                    "(mass-weighted velocities projected)."))
    # a second component with no variance (a diatomic after superposition) is not worth a plot
    if pr.shape[1] >= 2 and ev.size >= 2 and ev[1] > 1e-4:
        out.append(phase_path_figure(
            pr[:, 0], pr[:, 1], key="phase.pc12", title="Principal components 1 and 2",
            x_axis=Axis("PC 1", pca.projection_unit), y_axis=Axis("PC 2", pca.projection_unit),
            label="pc(1), pc(2)", caption=f"The run ({atoms}) projected on its first two principal components."))
    return out


def landscape_states_figure(profile: Any, series: Any, *, states: tuple[float, float] | None,
                            surface: float | None, temperature_source: str = "") -> FigureSpec:
    """The free-energy profile with the core-state edges A, B and the dividing surface as marks a user
    can drag (key ``landscape.states``; roles ``state`` and ``surface``).

    profile : phasewake.core.analyses.landscape.FreeEnergyProfile; series : the coordinate it was made from;
    states : (A_hi, B_lo) in the coordinate's unit.
    """
    x = np.asarray(profile.centers, float)
    f = np.asarray(profile.free_energy_kJ_per_mol, float)
    e = np.asarray(profile.error_kJ_per_mol, float)
    items: list[PlotItem] = [Band(x, f - e, f + e, label="\u00b1 block error", style=Style(colour=PALETTE[5], alpha=0.3)),
                             Line(x, f, label="free energy", style=series_style(0, marker=True))]
    if states is not None:
        items.append(Mark("vline", float(states[0]), label="A", role="state",
                          style=Style(colour=PALETTE[3], dash="dashdot", width=2.0)))
        items.append(Mark("vline", float(states[1]), label="B", role="state",
                          style=Style(colour=PALETTE[1], dash="dashdot", width=2.0)))
    if surface is not None:
        items.append(Mark("vline", float(surface), label="dividing surface", role="surface",
                          style=Style(colour=PALETTE[0], dash="dash", width=2.0)))
    bar = " ".join(f"Barrier top at {b.position:.3g} {profile.unit}." for b in profile.barriers[:2])
    source = f" ({temperature_source})" if temperature_source else ""
    name = series.label or series.spec
    return FigureSpec(key="landscape.states", title=f"Free-energy profile along {name}", caption=(
        f"F(q) = \u2212kT ln P(q) at T = {profile.temperature_K:.4g} K{source}, {profile.n_samples} frames, error bars "
        f"from {profile.n_blocks} blocks, Jacobian: {profile.jacobian}. Vertical lines: the edge of core A "
        f"(q \u2264 A), of core B (q \u2265 B) and the dividing surface; drag them to redefine them. {bar}").strip(),
        plots=(PlotSpec(title=f"Free-energy profile along {name}", x=Axis(series.spec, series.unit),
                        y=Axis("Free energy", "kJ/mol"), items=tuple(items)),))



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


