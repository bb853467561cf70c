"""Verdicts: every threshold that turns a number into ok / caution / problem lives here.

Each threshold carries its source (a paper, or "common practice") and can be overridden by the user
(``configure``). Each verdict says in words what was measured, against what, and what a user might
do. These are heuristics: the user's judgement and their group's practice decide.

Analyses register the thresholds they use in :data:`THRESHOLDS` and the explanation of each verdict
kind in :data:`EXPLANATIONS`; a test walks every registered kind and checks it has an explanation.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, replace
from typing import Any, Literal

Level = Literal["ok", "caution", "problem", "info"]
LEVELS: tuple[Level, ...] = ("ok", "caution", "problem", "info")

HEURISTIC_NOTE = (
    "These diagnostics are heuristics. Thresholds are starting points, not rules: your own judgement "
    "and your group's practice decide whether a run is good enough."
)


@dataclass(frozen=True)
class Threshold:
    """A pair of limits on a measured value.

    ``higher_is_worse``: caution above ``caution``, problem above ``problem`` (else the reverse).
    """

    kind: str
    caution: float
    problem: float
    unit: str
    source: str  # paper, or "common practice"
    higher_is_worse: bool = True
    description: str = ""

    def level(self, value: float) -> Level:
        if value != value:  # NaN
            return "problem"
        if self.higher_is_worse:
            if value > self.problem:
                return "problem"
            if value > self.caution:
                return "caution"
            return "ok"
        if value < self.problem:
            return "problem"
        if value < self.caution:
            return "caution"
        return "ok"


@dataclass(frozen=True)
class Explanation:
    """What a verdict kind or derived number is, how it is computed, and what to do when it is off."""

    title: str
    what: str
    method: str  # method and paper
    threshold: str  # the threshold and its source, in words
    advice: str  # what to do when it is off


@dataclass(frozen=True)
class Verdict:
    kind: str  # key into THRESHOLDS / EXPLANATIONS
    level: Level
    title: str
    measured: float | None
    unit: str
    message: str  # what was measured against what, in words
    advice: str = ""
    threshold: Threshold | None = None
    details: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        return d


THRESHOLDS: dict[str, Threshold] = {}
EXPLANATIONS: dict[str, Explanation] = {}


def register(threshold: Threshold | None, explanation: Explanation, *, kind: str | None = None) -> None:
    """Register a verdict kind. Called at import time of the analysis module that owns the kind."""
    key = threshold.kind if threshold is not None else kind
    if key is None:
        raise ValueError("a verdict kind needs a name")
    if threshold is not None:
        THRESHOLDS[key] = threshold
    EXPLANATIONS[key] = explanation


def configure(kind: str, **changes: Any) -> Threshold:
    """Override a registered threshold (e.g. ``configure("energy.fluctuation_ratio", caution=0.02)``)."""
    THRESHOLDS[kind] = replace(THRESHOLDS[kind], **changes)
    return THRESHOLDS[kind]


def judge(kind: str, value: float, *, title: str, unit: str, message: str, advice: str = "",
          details: dict[str, Any] | None = None) -> Verdict:
    """Make a verdict from a registered threshold."""
    t = THRESHOLDS[kind]
    return Verdict(kind=kind, level=t.level(value), title=title, measured=value, unit=unit,
                   message=message, advice=advice, threshold=t, details=details or {})


def worst(levels: list[Level]) -> Level:
    order = {"info": 0, "ok": 0, "caution": 1, "problem": 2}
    if not levels:
        return "ok"
    return max(levels, key=lambda lv: order[lv])


# ---------------------------------------------------------------------------------------------------
# Ensemble, partial audits, restarts, temperature assumptions, equipartition severity (the audit's
# judgement on real runs). The audit (core/analyses/audit*.py) reads these; the user may override them here.
# ---------------------------------------------------------------------------------------------------

register(
    Threshold("ensemble", caution=0.5, problem=0.05, unit="", higher_is_worse=False,
              source="common practice (an NVE run conserves its energy to sigma_E/sigma_K of 0.01-0.05; under a "
                     "thermostat E fluctuates with K and U, sigma_E/sigma_K of order 1 or more)",
              description="sigma_E/sigma_K (E with steps and a line removed): at or above 'caution' (with K and U "
                          "not traded one for one) an unstated ensemble is inferred thermostatted; below "
                          "'problem' it is inferred NVE"),
    Explanation(
        title="Ensemble",
        what="Whether the run was thermostatted (NVT, NPT) or not (NVE), and where that came from: the "
             "engine's files, your statement (--ensemble, --temperature, the window's setting), or an "
             "inference from the energies.",
        method="From the files first, then from what you state; else inferred: a bath-heat series, or a "
               "conserved quantity that differs from the total energy, means a thermostat. Otherwise two "
               "signatures of the energy table: in NVE the potential energy takes what the kinetic energy "
               "gives (their correlation near -1) and E hardly moves (sigma_E/sigma_K small); under a "
               "thermostat K and U are nearly independent (canonical momenta do not depend on positions) and "
               "sigma_E/sigma_K is of order 1 (sqrt(1 + sigma_U^2/sigma_K^2)). Steps in E (restarts) and a "
               "straight line are removed first; a run whose energy noise grows is not inferred thermostatted.",
        threshold="Thermostatted when sigma_E/sigma_K >= 0.5 and corr(K, U) > -0.7; NVE when sigma_E/sigma_K "
                  "< 0.05 or corr(K, U) < -0.95; otherwise unknown and judged as NVE: common practice, checked "
                  "on the project's GROMACS, LAMMPS and OpenMM runs (tests/data/engines). The inference is a "
                  "guess from the energies; it is shown with its evidence.",
        advice="State the ensemble with --ensemble nve|nvt|npt (or the thermostat temperature with "
               "--temperature K) when the inferred one is wrong. A thermostatted run is judged on its "
               "conserved quantity, which needs the thermostat's energy in the files.",
    ),
)
register(
    Threshold("ensemble.ku_correlation", caution=-0.7, problem=-0.95, unit="", higher_is_worse=False,
              source="common practice (NVE trades K and U one for one: correlation -1; canonical K and U are "
                     "independent: correlation near 0; Langevin runs of water at 1/ps gave -0.2 to -0.5, a "
                     "too-large NVE step -0.87)",
              description="correlation of K and U (steps and lines removed): above 'caution' a thermostat is "
                          "inferred, below 'problem' NVE"),
    Explanation(
        title="Correlation of kinetic and potential energy",
        what="How strictly the potential energy takes what the kinetic energy gives: -1 in NVE, near 0 under "
             "a thermostat.",
        method="Pearson correlation of K and U = E - K after removing steps of E and a least-squares line from "
               "each.",
        threshold="Above -0.7 a thermostat, below -0.95 NVE: common practice (see the ensemble).",
        advice="See the ensemble.",
    ),
)
register(
    Threshold("audit.min_rows", caution=3.0, problem=6.0, unit="rows",
              source="common practice (a line through fewer than 3 points, or a robust spread of fewer than "
                     "5 steps, says nothing)",
              description="caution: rows needed for the drift and fluctuation checks and the time gaps; "
                          "problem: rows needed for the energy-jump check"),
    Explanation(
        title="Too few rows to check",
        what="The least data a check needs before it says anything: with fewer rows it says 'not checked'.",
        method="Drift, fluctuations and time gaps need 3 rows; energy jumps need 6 rows (5 steps) for a "
               "robust spread; the runaway check needs 21 rows (two tenths of 10 steps).",
        threshold="3 and 6 rows: common practice.",
        advice="Write the energies more often, or audit a longer stretch of the run.",
    ),
)
register(
    Threshold("time.restarts", caution=0.0, problem=10.0, unit="joins",
              source="common practice (engines keep the later segment of a restart; a table whose time goes "
                     "back more often than once in 10 rows is unsorted, not restarted)",
              description="number of places where the time goes back or repeats (restarts glued into one "
                          "file, or a part that restarted before the previous part ended); the later segment is "
                          "kept"),
    Explanation(
        title="Restarts in the run",
        what="Places where the time of a table or trajectory goes back or repeats: a run restarted from an "
             "earlier checkpoint and appended, or written in parts of which one began before the last ended. The later segment is kept, as the engines themselves do, and "
             "the rows it replaces are dropped; every check runs on what is kept.",
        method="Row i is kept when its time is below the time of every later row (a suffix minimum), so the "
               "later segment always wins. Each join is listed with the time the run went back from and to, "
               "the rows dropped, and the energy step across the join.",
        threshold="Any join is a caution (check it was meant), more than 10 a problem: common practice. A "
                  "time axis that goes back more often than once in 10 rows is refused as unsorted.",
        advice="Make sure the later segment is the one you want (engines restart from the last checkpoint). "
               "An energy step at a join means the two pieces were not the same simulation state.",
    ),
)
register(
    Threshold("temperature.assumption", caution=0.02, problem=1.0, unit="",
              source="common practice (a temperature that changes by more than 2 % under the other plausible "
                     "count of constraints rests on that count)",
              description="relative change of the kinetic temperature between the assumed count of "
                          "constraints and the other plausible one (never more than a caution: it flags an "
                          "unknown, not a wrong run)"),
    Explanation(
        title="Temperature resting on an assumption",
        what="A kinetic temperature computed with a number of constraints (or half-step velocities) that "
             "the files do not state and that could not be inferred: the value depends on that assumption.",
        method="T = 2K / (N_dof k_B) with N_dof = 3N - constraints - centre of mass. With no topology and "
               "no engine count the audit assumes no constraints and also shows T with the other plausible "
               "count (rigid water: 3 per molecule, from the atom masses; or one per hydrogen for bonds to "
               "hydrogen).",
        threshold="A difference above 2 % between the two values is a caution (the caution level is the "
                  "largest this check gives: it flags an unknown, not a wrong run): common practice.",
        advice="Give --constraints N, a topology (--top) from which rigid bonds can be inferred, or the "
               "engine's kinetic energy or temperature column.",
    ),
)
register(
    Threshold("temperature.half_step", caution=0.0, problem=1.0, unit="",
              source="ENGINES.md (leapfrog integrators store v(t - dt/2) next to x(t); GROMACS KE(n) is the "
                     "mean of 1/2 m v^2 of frames n and n+1)",
              description="1 when velocities half a step off the positions were used as they are"),
    Explanation(
        title="Half-step velocities",
        what="Leapfrog integrators (GROMACS md, AMBER, OpenMM Verlet) store velocities half a time step off "
             "the positions; 1/2 m v^2 of such a frame is not the engine's kinetic energy at that time.",
        method="Known from the files (integrator or a half-step flag). With the file's kinetic energy or "
               "temperature present, that is shown. With frames written every step, KE(n) is the mean of "
               "1/2 m v^2 of frames n and n+1 (as GROMACS computes it). Otherwise the velocities are used "
               "as they are and the value is flagged.",
        threshold="Half-step velocities used as they are: caution.",
        advice="Write the engine's kinetic energy or temperature (energy file), or write velocities every "
               "step, or use a velocity Verlet integrator when full-step velocities matter.",
    ),
)
register(
    Threshold("temperature.equipartition_significance", caution=3.0, problem=20.0, unit="sigma",
              source="common practice (3 sigma for a real difference; a split at 20 sigma or more is no "
                     "sampling accident and is judged as a problem once it reaches the caution size)",
              description="caution: |z| at which a group split counts at all; problem: |z| at which a split "
                          "of caution size is raised to a problem"),
    Explanation(
        title="Significance of an equipartition split",
        what="How many standard errors separate the hottest and the coldest group.",
        method="z = mean(T_hot - T_cold) / its standard error (g-corrected over frames).",
        threshold="Below 3 sigma a split is not counted; at 20 sigma or more a split of caution size "
                  "(2 %) is a problem: common practice.",
        advice="See the equipartition check.",
    ),
)
