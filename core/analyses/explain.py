"""Explanations of derived numbers, and one way to show every explanation (window, report, CLI).

The verdict kinds explain themselves where the analyses register them (``core.verdicts.register``).
This module registers the derived numbers that are not verdicts (statistical inefficiency g, integrated
time tau, diffusion coefficient D, transmission coefficient kappa, rates, free energy, explained
variance, ...) under kinds named ``number.*``, and turns any kind into text:

* :func:`explanation_text` / :func:`explanation_html`: the whole explanation (what it is, how it is
  computed with the paper, the threshold and its source, what to do when it is off), as plain text
  (report, command line) or HTML (the window's tooltips and side notes). Both carry the same words.
* :func:`kinds_for_figure`: which numbers a figure (by its ``FigureSpec.key``) shows, so the window can
  explain the numbers of the figure on screen and the report can say the same in its captions
  (:func:`caption_note`).

These are heuristics: the thresholds are starting points and the user's judgement decides
(``core.verdicts.HEURISTIC_NOTE``).
"""

from __future__ import annotations

import html
import importlib
from collections.abc import Sequence

from phasewake.core.analyses.verdicts import EXPLANATIONS, HEURISTIC_NOTE, THRESHOLDS, Explanation, register

NO_THRESHOLD = "No threshold: a number to read, not a verdict."


def _number(kind: str, title: str, what: str, method: str, threshold: str, advice: str) -> None:
    register(None, Explanation(title=title, what=what, method=method, threshold=threshold, advice=advice),
             kind=f"number.{kind}")


_number(
    "statistical_inefficiency", "Statistical inefficiency g",
    "How many consecutive frames count as one independent sample of a series: g = 1 + 2 sum_k rho(k), "
    "with rho the normalised autocorrelation. g = 1 for uncorrelated frames; the error of a mean grows "
    "with sqrt(g).",
    "Autocorrelation by FFT (biased estimator); the sum is cut by Sokal's automatic window (M >= 5 tau; "
    "A. D. Sokal, Monte Carlo methods in statistical mechanics, 1997), or by Geyer's initial positive "
    "sequence (Geyer 1992), or at the first zero of rho (Chodera et al. 2007), as chosen.",
    NO_THRESHOLD + " It sets the effective sample size N/g, which has its own verdict.",
    "A g that is large against the number of frames means few independent samples: run longer. Saving "
    "frames more often does not help; only more simulated time does.")
_number(
    "tau_int", "Integrated autocorrelation time tau_int",
    "The memory of a series in time: tau_int = g/2 frame spacings (Sokal's convention), in ps.",
    "From the statistical inefficiency g (Sokal 1997 automatic window), times the frame spacing.",
    NO_THRESHOLD + " Compare it with the length of the run: the run should span many tau_int.",
    "When tau_int is a sizeable fraction of the run, averages and error bars are unreliable: run longer "
    "or look at a faster coordinate.")
_number(
    "block_sem", "Blocking estimate of the standard error",
    "The standard error of the mean from averages over blocks of 2^k frames; once blocks are longer "
    "than the correlation time the estimate stops growing (a plateau).",
    "Block averaging of H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989); the plateau is "
    "where successive estimates agree within their own error.",
    NO_THRESHOLD + " No plateau means the run is too short for this estimate.",
    "Without a plateau, treat any error bar as a lower bound and run longer.")
_number(
    "kinetic_temperature", "Kinetic temperature T",
    "T = 2 K / (N_dof k_B), the temperature the kinetic energy K stands for, with its standard error "
    "corrected for correlation (sqrt(g)).",
    "Equipartition of kinetic energy over N_dof quadratic degrees of freedom (see M. E. Tuckerman, "
    "Statistical Mechanics: Theory and Molecular Simulation, 2010). K from the file's kinetic energy when "
    "present, else from the velocities.",
    "Compared with the temperature in the file and the thermostat target when known (see those verdicts).",
    "A T off the target: check N_dof (constraints, removed centre-of-mass motion), the thermostat, and "
    "whether the stored velocities are half a step off (leapfrog).")
_number(
    "conjugate_momentum", "Conjugate momentum p",
    "The momentum conjugate to the coordinate q: p = m_eff dq/dt, with the effective mass m_eff of q "
    "(for a distance, the reduced mass of the pair).",
    "dq/dt from the stored velocities through the gradient of q (chain rule), else from finite "
    "differences of q; m_eff = 1 / (sum_i |dq/dx_i|^2 / m_i), the effective mass of blue-moon work (E. A. "
    "Carter, G. Ciccotti, J. T. Hynes and R. Kapral, Chem. Phys. Lett. 156, 472 (1989)).",
    NO_THRESHOLD,
    "When velocities are not stored the momentum is estimated from frame differences; with frames far "
    "apart compared with the motion of q it is smoothed: store velocities or frames more often.")
_number(
    "phase_density", "Phase-space density",
    "How often the run visited each cell of the (q, p) plane in the time window.",
    "A 2-D histogram of (q, p) over the frames of the window; empty cells are left blank.",
    NO_THRESHOLD,
    "Large blank regions between visited ones suggest barriers the run crossed rarely: look at the "
    "Crossings panel and the Sampling panel's coverage.")
_number(
    "explained_variance", "Explained variance of principal components",
    "The fraction of the total (mass-weighted) positional variance each principal component carries.",
    "Principal component analysis of the covariance after optimal superposition (essential dynamics, "
    "A. Amadei, A. B. M. Linssen and H. J. C. Berendsen, Proteins 17, 412 (1993)); above a few thousand "
    "coordinates the leading components by randomized subspace iteration (N. Halko, P.-G. Martinsson "
    "and J. A. Tropp, SIAM Review 53, 217 (2011)). Quasi-harmonic frequencies omega = sqrt(kT/lambda) "
    "(M. Karplus and J. N. Kushick, Macromolecules 14, 325 (1981)).",
    NO_THRESHOLD + " The cosine content of the leading components has its own verdict (Hess 2002).",
    "Leading components that look like cosines (high cosine content) describe random diffusion, not "
    "structure: the run is too short for a meaningful PCA.")
_number(
    "poincare", "Coordinate pairs and Poincaré section",
    "A second coordinate against the first, and the points (q2, p2) where q1 crosses a plane upward "
    "(the Poincaré section).",
    "Each time q1 crosses the chosen value in the chosen direction, (q2, p2) is interpolated linearly "
    "between the two frames around the crossing.",
    NO_THRESHOLD,
    "Few points on the section mean few passages through the plane: move the plane or use a longer run.")
_number(
    "vacf", "Velocity autocorrelation C(t)/C(0)",
    "How long atoms remember their velocity, averaged over atoms and time origins, per group.",
    "Block FFT correlation over all time origins (Wiener-Khinchin); the diffusion coefficient D is its "
    "integral (Green 1954, Kubo 1957) or the slope of the mean-squared displacement, with the "
    "finite-size correction of I.-C. Yeh and G. Hummer, J. Phys. Chem. B 108, 15873 (2004).",
    NO_THRESHOLD + " D needs the VACF to have decayed into its noise before the upper limit.",
    "A VACF that has not decayed by the end of the lag window: store frames longer or more often, or "
    "use the mean-squared displacement instead.")
_number(
    "diffusion", "Diffusion coefficient D",
    "D = (1/3) integral of <v(0).v(t)> dt, in nm^2/ps (1 nm^2/ps = 1e-6 m^2/s).",
    "Green-Kubo integral of the VACF (Green 1954, Kubo 1957) or Einstein slope of the mean-squared "
    "displacement; periodic boxes underestimate D by xi kT / (6 pi eta L), xi = 2.837297 (Yeh and "
    "Hummer 2004).",
    NO_THRESHOLD,
    "Check the upper limit of the integral lies where the VACF has decayed, and apply the finite-size "
    "correction when comparing with experiment.")
_number(
    "vdos", "Vibrational density of states",
    "How the kinetic energy is spread over frequencies (cm^-1), normalised to the degrees of freedom.",
    "Fourier transform of the mass-weighted VACF with a Hann lag window (J. M. Dickey and A. Paskin, "
    "Phys. Rev. 188, 1407 (1969)); resolution 1/(lag window), upper limit the Nyquist frequency of the "
    "frame spacing.",
    NO_THRESHOLD + " Peaks near the Nyquist limit are aliased: the frames are too far apart for them.",
    "To resolve fast vibrations store frames more often; for finer resolution use a longer lag window.")
_number(
    "running_average", "Running average",
    "The mean of a series over the frames up to each time, with +-1 standard error (corrected by g).",
    "Cumulative mean; the error from the statistical inefficiency of the whole window (Sokal 1997).",
    NO_THRESHOLD,
    "A curve that still drifts at the end has not settled: drop the start (drag the time window) or run "
    "longer.")
_number(
    "coverage", "Phase-space coverage",
    "The fraction of the cells of a fixed grid in (q, p) visited by each time.",
    "Cells of a grid spanning the whole window; a cell counts once it holds a frame.",
    NO_THRESHOLD,
    "A curve still rising at the end means the run is still finding new regions: it has not sampled "
    "all it can reach.")
_number(
    "rate", "Transition rates k(A->B), k(B->A)",
    "Transitions per unit time spent in the state of origin, in 1/ps, with an exact interval.",
    "Core-set (milestoning) assignment with two thresholds, so recrossings of the barrier do not count "
    "(N.-V. Buchete and G. Hummer, J. Phys. Chem. B 112, 6057 (2008)); exact Poisson interval on the "
    "count (Garwood 1936). The transition-state-theory estimate is the flux through the dividing "
    "surface; its ratio to the counted rate is the transmission coefficient.",
    "The number of transitions has its own verdict: few transitions, wide intervals.",
    "Few transitions: run longer or run several replicas; if the rates depend on the state edges you "
    "drag in the Landscape panel, the core states are not yet metastable.")
_number(
    "transmission_coefficient", "Transmission coefficient kappa",
    "The fraction of crossings of the dividing surface that commit to the other state: 1 when every "
    "crossing counts, small when the path recrosses many times.",
    "Reactive flux from the run's own crossings (C. H. Bennett 1977; D. Chandler, J. Chem. Phys. 68, "
    "2959 (1978)): kappa(t) decays to a plateau; counting estimate from transitions over crossings. "
    "A diffusive barrier gives small kappa (H. A. Kramers, Physica 7, 284 (1940)).",
    NO_THRESHOLD + " 0 < kappa <= 1; no plateau means too few crossings.",
    "A small kappa often means the dividing surface is not at the true barrier or the coordinate misses "
    "part of the reaction: drag the surface in the Landscape panel or try another coordinate.")
_number(
    "free_energy", "Free-energy profile F(q)",
    "F(q) = -kT ln P(q) + const along the coordinate, in kJ/mol, with error bars from blocks of the run.",
    "Histogram of q over the window, with the Jacobian of the coordinate removed when asked (a distance "
    "in 3-D: -kT ln[P(r) / 4 pi r^2]); "
    "errors from the spread over consecutive blocks, which are correlated frames of one run.",
    NO_THRESHOLD,
    "Large error bars or a profile that changes when you drag the time window: the run has not "
    "equilibrated along q; run longer or compare replicas.")
_number(
    "barrier", "Barrier height",
    "The free energy of the barrier top above each minimum, in kJ/mol (and in kT).",
    "From the profile F(q): the highest point between the two deepest minima, with block errors.",
    NO_THRESHOLD,
    "A barrier of a few kT is crossed often and the states mix; a barrier crossed only once or twice "
    "in the run has an unreliable height.")

# Modules that register the verdict kinds of each prefix (imported on demand).
_PREFIX_MODULES = {
    "energy": "energy", "time": "energy", "temperature": "temperature", "timestep": "timestep",
    "sampling": "sampling", "crossings": "crossings", "pca": "projection", "correlation": "correlation",
    "audit": "audit",
}

# Which numbers each figure shows, by the start of its FigureSpec key (longest match wins).
FIGURE_NUMBERS: dict[str, tuple[str, ...]] = {
    "energy": ("energy.drift", "energy.fluctuation_ratio", "number.statistical_inefficiency"),
    "energy.series": ("energy.drift",),
    "temperature": ("number.kinetic_temperature", "temperature.dof"),
    "timestep": ("timestep.fastest_period", "timestep.nyquist"),
    "phase.portrait": ("number.conjugate_momentum",),
    "phase.density": ("number.phase_density", "number.conjugate_momentum"),
    "phase.series": ("number.conjugate_momentum",),
    "phase.pca": ("number.explained_variance", "pca.cosine_content"),
    "phase.pc": ("number.explained_variance", "number.conjugate_momentum"),
    "phase.pair": ("number.poincare",),
    "phase.poincare": ("number.poincare",),
    "pca": ("number.explained_variance", "pca.cosine_content"),
    "correlation.acf": ("number.statistical_inefficiency", "number.tau_int", "sampling.ess"),
    "correlation.blocking": ("number.block_sem", "number.statistical_inefficiency"),
    "velocity.vacf": ("number.vacf", "number.diffusion"),
    "velocity.vdos": ("number.vdos",),
    "sampling.running": ("number.running_average", "number.statistical_inefficiency"),
    "sampling.coverage": ("number.coverage",),
    "sampling.divergence": ("sampling.divergence",),
    "sampling.tm": ("sampling.tm_slope",),
    "sampling.rhat": ("sampling.rhat",),
    "report.sampling": ("number.free_energy", "number.running_average", "number.coverage", "sampling.rhat",
                        "sampling.divergence"),
    "report.coordinate": ("number.conjugate_momentum",),
    "report.phase": ("number.phase_density", "number.explained_variance", "pca.cosine_content"),
    "report.correlation": ("number.statistical_inefficiency", "number.tau_int", "sampling.ess",
                           "number.block_sem"),
    "crossings": ("number.rate", "crossings.few_transitions"),
    "crossings.dwells": ("crossings.dwell_exponential",),
    "crossings.kappa": ("number.transmission_coefficient",),
    "landscape": ("number.free_energy", "number.barrier"),
}


def explanation(kind: str) -> Explanation | None:
    """The registered explanation of a verdict kind or derived number, importing its module if needed."""
    if kind not in EXPLANATIONS:
        module = _PREFIX_MODULES.get(kind.split(".", 1)[0])
        if module is not None:
            importlib.import_module(f"phasewake.core.analyses.{module}")
    return EXPLANATIONS.get(kind)


def threshold_words(kind: str) -> str:
    """The threshold in words with its source, and the limits now in force (they may be configured)."""
    e = explanation(kind)
    words = e.threshold if e is not None else ""
    t = THRESHOLDS.get(kind)
    if t is None:
        return words
    side = "above" if t.higher_is_worse else "below"
    unit = f" {t.unit}" if t.unit and t.unit != "1" else ""
    limits = (f"Limits in force: caution {side} {t.caution:g}{unit}, problem {side} {t.problem:g}{unit} "
              f"(source: {t.source}).")
    return f"{words} {limits}".strip()


def _parts(kind: str) -> list[tuple[str, str]] | None:
    e = explanation(kind)
    if e is None:
        return None
    return [("What it is", e.what), ("How it is computed", e.method), ("Threshold", threshold_words(kind)),
            ("When it is off", e.advice)]


def explanation_text(kind: str) -> str:
    """The whole explanation of ``kind`` as plain text (title line, then one line per part).

    Returns an empty string for an unknown kind.
    """
    parts = _parts(kind)
    if parts is None:
        return ""
    e = EXPLANATIONS[kind]
    return "\n".join([e.title] + [f"{label}: {text}" for label, text in parts])


def explanation_html(kind: str) -> str:
    """The same words as :func:`explanation_text`, as HTML for a tooltip or a side note."""
    parts = _parts(kind)
    if parts is None:
        return ""
    e = EXPLANATIONS[kind]
    rows = "".join(f"<p><b>{html.escape(label)}:</b> {html.escape(text)}</p>" for label, text in parts)
    return (f"<qt><h4>{html.escape(e.title)}</h4>{rows}"
            f"<p><i>{html.escape(HEURISTIC_NOTE)}</i></p></qt>")


def plain_of_html(text: str) -> str:
    """The plain words of an :func:`explanation_html` text (tags dropped, entities decoded), for tests."""
    import re

    body = re.sub(r"<p><i>.*?</i></p>", "", text)
    body = re.sub(r"</(h4|p)>", "\n", body)
    body = re.sub(r"<[^>]+>", "", body)
    return html.unescape(body).strip()


def kinds_for_figure(key: str) -> tuple[str, ...]:
    """The kinds (verdicts and derived numbers) a figure with this ``FigureSpec.key`` shows."""
    best = ""
    for prefix in FIGURE_NUMBERS:
        if (key == prefix or key.startswith(prefix + ".") or key.startswith(prefix)) and len(prefix) > len(best):
            best = prefix
    return tuple(k for k in FIGURE_NUMBERS.get(best, ()) if explanation(k) is not None)


def caption_note(key: str | Sequence[str], *, numbers_only: bool = False) -> str:
    """A sentence for a report caption: what each number of the figure is and how it was computed.

    The words are those of the window's tooltips (the ``what`` and ``method`` of each explanation).
    ``key`` may be several figure keys (a page that combines figures). ``numbers_only`` leaves out verdict kinds (a report lists those, with threshold and advice, in its
    verdict table) and keeps the derived numbers (``number.*``).
    """
    keys = [key] if isinstance(key, str) else list(key)
    kinds = dict.fromkeys(k for one in keys for k in kinds_for_figure(one))  # in order, once each
    notes = []
    for kind in kinds:
        if numbers_only and not kind.startswith("number."):
            continue
        e = EXPLANATIONS[kind]
        notes.append(f"{e.title}: {e.what} {e.method}")
    return " ".join(notes)


__all__ = ["FIGURE_NUMBERS", "caption_note", "explanation", "explanation_html", "explanation_text",
           "kinds_for_figure", "plain_of_html", "threshold_words"]
