"""Figure builders for energies, kinetic temperature and the time-step spectrum (energy table and audit)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from phasewake.core.figures.plots_text import (
    GREY,
    PER_PS_TO_PER_CM,
    TIME,
    empty_figure,
    indexed_style,
    plain_words,
    settings_text,
    spectrum_limits,
)
from phasewake.core.figures.spec import (
    PALETTE,
    Axis,
    FigureSpec,
    Line,
    Mark,
    PlotItem,
    PlotSpec,
    Style,
)
from phasewake.core.model.run import EnergyTable, Series

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
        items: list[PlotItem] = [Line(t, np.asarray(cons.values, float), label=cons.name, style=indexed_style(0))]
        total = table.by_role("total")
        if total is not None and total is not cons:
            items.append(Line(t, np.asarray(total.values, float), label=total.name, style=indexed_style(1)))
        if drift_slope_kJ_per_mol_per_ps is not None and t.size:
            b = drift_intercept_kJ_per_mol
            if b is None:
                b = float(np.mean(cons.values) - drift_slope_kJ_per_mol_per_ps * np.mean(t))
            fit = b + drift_slope_kJ_per_mol_per_ps * t[[0, -1]]
            items.append(Line(t[[0, -1]], fit, label="drift fit", style=Style(colour=PALETTE[0], dash="dash", width=1.5)))
        if cursor_ps is not None:
            items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=GREY, dash="dot")))
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
        fluct.append(Line(t, v - np.nanmean(v), label=s.name, style=indexed_style(i + 2)))
        means.append(f"{s.name} {np.nanmean(v):.6g} {s.unit}")
    if fluct:
        plots.append(PlotSpec(title="Potential and kinetic energy fluctuations", x=TIME,
                              y=Axis("Energy − mean", unit), items=tuple(fluct), x_is_time=True))
        caption_bits.append("bottom: potential and kinetic energy minus their means (" + ", ".join(means) + ")")
    if not plots:
        others = [s for s in table.series.values() if s.role not in ("time", "step")]
        items2 = tuple(Line(t, np.asarray(s.values, float), label=s.name, style=indexed_style(i))
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
                              label=f"{s.name} (file)", style=indexed_style(i)))
            sources.append(f"{s.name} from {s.source or 'the energy table'}")
            i += 1
    if kinetic_temperature_K is not None and time_ps is not None:
        items.append(Line(np.asarray(time_ps, float), np.asarray(kinetic_temperature_K, float), label=label,
                          style=indexed_style(i + 1)))
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
# audit (phasewake.core.analyses.audit)


def audit_energy_figure(audit: Any, *, cursor_ps: float | None = None) -> FigureSpec:
    """The series the audit judged for conservation, with its drift fit and the fluctuation ratio."""
    ea = audit.energy
    if ea is None:
        return empty_figure("energy.audit", "Energy conservation", "The run has no energy series to audit.")
    t = np.asarray(ea.time_ps, float)
    e = np.asarray(ea.values_kJ_per_mol, float)
    items: list[PlotItem] = [Line(t, e, label=ea.series_label.split(" (")[0], style=indexed_style(0))]
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
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=GREY, dash="dot")))
    return FigureSpec(key="energy.audit", title=f"Energy conservation: {audit.run_name}",
                      plots=(PlotSpec(title="Energy conservation", x=TIME, y=Axis("Energy", "kJ/mol"),
                                      items=tuple(items), x_is_time=True, note=", ".join(notes)),),
                      caption=caption + (f"Settings: {settings_text(getattr(d, 'settings', None))}."
                                         if settings_text(getattr(d, "settings", None)) else ""),
                      provenance={"settings": dict(audit.settings)})


def audit_temperature_figure(audit: Any, *, cursor_ps: float | None = None) -> FigureSpec:
    """Kinetic temperature from the audit with its mean, the file's mean and the thermostat target."""
    ta = audit.temperature
    if ta is None:
        return empty_figure("temperature.audit", "Kinetic temperature", "No kinetic temperature could be computed.")
    t = np.asarray(ta.time_ps, float)
    items: list[PlotItem] = [Line(t, np.asarray(ta.temperature_K, float), label="kinetic temperature",
                                  style=indexed_style(0))]
    items.append(Mark("hline", float(ta.mean_K), label=f"mean {ta.mean_K:.1f} K", role="annotation",
                      style=Style(colour=PALETTE[0], dash="dash", width=1.2)))
    target = getattr(audit, "target_temperature_K", None)
    if target is None and isinstance(audit.settings, Mapping):
        target = audit.settings.get("temperature_K")
    if target:
        items.append(Mark("hline", float(target), label=f"target {float(target):g} K", role="threshold",
                          style=Style(colour=PALETTE[6], dash="dot", width=1.4)))
    if cursor_ps is not None:
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=GREY, dash="dot")))
    caption = (f"Kinetic temperature of {audit.run_name}: {ta.kinetic_source}; N_dof = {ta.n_dof} "
               f"(3N = {3 * (ta.n_atoms - ta.n_virtual_sites)}, constraints {ta.n_constraints} from {ta.constraints_source}, "
               f"centre-of-mass {ta.n_com_removed} from {ta.com_source}). Mean {ta.mean_K:.2f} ± "
               f"{ta.error_K:.2g} K (g-corrected standard error, g = {ta.statistical_inefficiency:.3g}), "
               f"standard deviation {ta.std_K:.3g} K."
               + (f" File temperature mean {ta.file_temperature_mean_K:.2f} K." if ta.file_temperature_mean_K
                  is not None else "")
               + (" Velocities estimated from positions by central differences." if ta.velocities_estimated
                  else "")
               + (f" Dotted: the thermostat's target {float(target):g} K." if target else ""))
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
        return empty_figure("timestep.spectrum", "Velocity spectrum", note or "No velocity spectrum was computed.")
    f = np.asarray(tsa.frequency_per_ps, float)
    w = f * PER_PS_TO_PER_CM  # in cm⁻¹, as the vibrational density of states
    pw = np.asarray(tsa.power, float)
    pn = pw / (pw.max() if pw.size and pw.max() > 0 else 1.0)
    items: list[PlotItem] = [Line(w, pn, label="velocity power", style=indexed_style(0))]
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
    limits = spectrum_limits(w, pn, upper)
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

