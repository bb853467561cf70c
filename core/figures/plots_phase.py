"""Figure builders for coordinates and phase space: series, phase portraits, densities, principal components,
free-energy profiles and surfaces, Poincaré sections."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from phasewake.core.figures.plots_text import (
    GREY,
    TIME,
    empty_figure,
    indexed_style,
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
    items.append(Line(t, q, label="" if crossings is not None else series.label, style=indexed_style(0)))
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
        items.append(Mark("vline", cursor_ps, role="cursor", style=Style(colour=GREY, dash="dot")))
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
        return empty_figure("phase.portrait", "Phase portrait", "The run has no velocities for a phase portrait.")
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
                      items=(Line(k, ev, kind="bar", label="per component", style=indexed_style(0)),
                             Line(k, np.cumsum(ev), label="cumulative", style=indexed_style(1, marker=True))))]
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
    items.append(Line(c[ok], f[ok], label="free energy", style=indexed_style(0)))
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
                                                                label=series.spec, style=indexed_style(0)),)),))


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
                        legend=False, items=(Line(k, ev, kind="bar", label="explained variance", style=indexed_style(0)),)),)))
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
