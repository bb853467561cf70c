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
