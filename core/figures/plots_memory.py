"""Figure builders for a run's memory: time correlations, sampling checks, velocity autocorrelation and spectrum."""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.figures.plots_text import (
    GREY,
    TIME,
    fmt_number,
    indexed_style,
    notes_text,
    spectrum_limits,
)
from phasewake.core.figures.spec import (
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
    items: list[PlotItem] = [Line(lag, acf, label=f"ACF of {name}", style=indexed_style(0))]
    items.append(Mark("hline", 0.0, role="annotation", style=Style(colour=GREY, dash="solid", width=0.8)))
    w_ps = result.window_lags * result.dt_ps
    if lag.size and w_ps <= lag[-1]:
        items.append(Mark("vline", w_ps, label=f"window M = {result.window_lags} lags", role="threshold",
                          style=Style(colour=PALETTE[6], dash="dash", width=1.2)))
    note = (f"g = {result.statistical_inefficiency:.3g}, τ_int = {result.tau_int_sokal_ps:.3g} ps, "
            f"N_eff = {result.effective_sample_size:.0f}")
    caption = (f"Normalised autocorrelation of {name} ({result.n_samples} samples, {result.dt_ps:.3g} ps apart), "
               f"by FFT (biased estimator). Statistical inefficiency g = 1 + 2 Σρ, summed by "
               f"{result.method} (window M = {result.window_lags} lags): g = {result.statistical_inefficiency:.3g}, "
               f"Sokal's τ_int = g/2 = {result.tau_int_sokal_ps:.3g} ps, effective sample size "
               f"{result.effective_sample_size:.0f}, standard error of the mean "
               f"{fmt_number(result.standard_error_of_mean, result.unit)}."
               + notes_text(getattr(result, "notes", ())))
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
        Line(bs, sem, label="standard error of the mean", style=indexed_style(0, marker=True)),
    ]
    if result.plateau_found:
        items.append(Mark("hline", float(result.plateau_sem), label=f"plateau {fmt_number(result.plateau_sem, result.unit)}",
                          role="threshold", style=Style(colour=PALETTE[6], dash="dash")))
    caption = (f"Block averaging (Flyvbjerg and Petersen 1989) of {name}: the standard error of the mean "
               f"estimated from blocks of 2^k samples. "
               + (f"Plateau at {fmt_number(result.plateau_sem, result.unit)} (block size "
                  f"{int(bs[result.plateau_level])}), g = {result.statistical_inefficiency:.3g}."
                  if result.plateau_found else "No plateau was found: the run is too short for this estimate."))
    return FigureSpec(key="correlation.blocking", title=f"Blocking of {name}",
                      plots=(PlotSpec(title=f"Blocking of {name}", x=Axis("Block size", "samples", log=True),
                                      y=Axis("Standard error of the mean", result.unit), items=tuple(items)),),
                      caption=caption, provenance={"settings": dict(getattr(result, "settings", {}))})


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
        Line(t, m, label="running average", style=indexed_style(0)),
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
    items: list[PlotItem] = [Line(t[ok], r[ok], label="Ω(0)/Ω(t)", style=indexed_style(0))]
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
                                      items=(Line(t, f, label="visited", style=indexed_style(0)),), x_is_time=True,
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
    items: list[PlotItem] = [Mark("hline", 0.0, style=Style(colour=GREY, dash="solid", width=0.8))]
    for i, name in enumerate(result.groups):
        c0 = v[i, 0] if v[i, 0] != 0 else 1.0
        items.append(Line(lag, v[i] / c0, label=f"{name} ({int(result.n_atoms_per_group[i])} atoms)",
                          style=indexed_style(i)))
    limits = _decay_limits(lag, v)
    caption = (f"Velocity autocorrelation C(t)/C(0) per group ({'mass-weighted' if result.mass_weighted else 'plain'}), "
               f"averaged over atoms and time origins of {result.n_frames} frames {result.dt_ps:.3g} ps apart."
               + (" Velocities estimated from positions." if result.velocities_estimated else "")
               + (f" Shown to {limits[1]:.3g} ps, a few times the lag after which |C(t)/C(0)| stays below "
                  f"{DECAY_LEVEL:g} (the exported data hold every lag up to {lag[-1]:.3g} ps)."
                  if limits is not None else "")
               + notes_text(result.notes))
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
    items: list[PlotItem] = [Line(w, y, label="density of states", style=indexed_style(0))]
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
    limits = None if max_cm1 is not None else spectrum_limits(w, y, getattr(result, "highest_significant_peak_cm1", None))
    caption = (f"Vibrational density of states (Fourier transform of the mass-weighted VACF, {result.window} window), "
               f"normalised to {result.n_dof:g} degrees of freedom. Resolution {result.resolution_cm1:.3g} cm⁻¹ "
               f"(lag window {result.max_lag_ps:.3g} ps), Nyquist limit {result.nyquist_cm1:.4g} cm⁻¹ from the "
               f"frame spacing {result.dt_ps:.3g} ps."
               + (f" Shown up to {limits[1]:.0f} cm⁻¹, past the highest significant peak (nothing significant "
                  "above; the exported data hold the whole range)." if limits is not None else "")
               + (" Velocities estimated from positions: high frequencies are damped." if result.velocities_estimated
                  else "") + notes_text(result.notes))
    return FigureSpec(key="velocity.vdos", title="Vibrational density of states",
                      plots=(PlotSpec(title="Vibrational density of states", x=Axis("Wavenumber", "cm⁻¹", limits=limits),
                                      y=Axis("Density of states", "1/cm⁻¹"), items=tuple(items)),),
                      caption=caption, provenance={"settings": dict(result.settings)})
