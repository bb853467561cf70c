"""Figure builders and summary tables for barrier crossings: dwell times, transmission, rates."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from phasewake.core.figures.plots_text import (
    fmt_number,
    indexed_style,
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
    series_style,
)

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
                items.append(Line(lag, a, label=lab, style=indexed_style(i)))
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
                 f"{fmt_number(k.plateau)} by reactive flux (plateau over {k.plateau_window_ps[0]:.3g}–"
                 f"{k.plateau_window_ps[1]:.3g} ps), {fmt_number(k.counting)} by counting "
                 f"(A→B {fmt_number(k.counting_up)}, B→A {fmt_number(k.counting_down)})"))
    if result.tst is not None:
        t = result.tst.tst
        rows.append(("Transition-state theory",
                     f"k_TST(A→B) = {fmt_number(t.rate_up_per_ps, 'ps⁻¹')}, k_TST(B→A) = {fmt_number(t.rate_down_per_ps, 'ps⁻¹')} "
                     f"({t.flux_source}); k/k_TST = {fmt_number(result.tst.kappa_up)} and {fmt_number(result.tst.kappa_down)}"))
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
        t = result.tst.tst
        why = "" if t.rate_up_per_ps > 0 and t.rate_down_per_ps > 0 else " (k_TST = 0: no sample in the band at the surface)"
        rows.append(("κ from rates / TST", f"A→B {fmt_number(result.tst.kappa_up)}, "
                     f"B→A {fmt_number(result.tst.kappa_down)}{why}"))
    rows.append(("Velocities at crossings", result.velocity_source))
    return rows
