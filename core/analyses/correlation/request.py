"""CorrelationRequest: the memory of one series of a run, the same for the command line, the window and the report.

A series is an energy-table column (``series``: its name or role, e.g. ``"potential"``) or a coordinate
(``coordinate``: a specification, e.g. ``"distance(0, 1)"``), over rows or frames [start, stop).
:func:`read_series` reads it (shared with :class:`phasewake.core.analyses.sampling.SamplingRequest`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.analyses.correlation.acf import METHODS, Method
from phasewake.core.analyses.correlation.blocking import BlockingResult, blocking
from phasewake.core.analyses.correlation.inefficiency import statistical_inefficiency
from phasewake.core.analyses.correlation.series import (
    CorrelationResult,
    EquilibrationResult,
    analyse_series,
    equilibration_work,
    judge_equilibration,
    judge_ess,
    judge_estimators,
)
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run, Series


@dataclass(frozen=True)
class Series1D:
    """The samples of one series: name, unit, where it came from, times (ps) and values (unit)."""

    name: str
    unit: str
    kind: str  # "series" (energy table) or "coordinate"
    source: str
    time_ps: np.ndarray
    values: np.ndarray
    momentum: np.ndarray | None = None  # m_eff dq/dt of a coordinate, in momentum_unit
    momentum_unit: str = ""
    periodic: bool = False

    @classmethod
    def of_coordinate(cls, c: Any) -> Series1D:
        """The samples of a coordinate series (a ``coordinates.CoordinateSeries``: label, unit, spec, times,
        values, optional momentum): the one builder of a coordinate's Series1D, for requests and the report."""
        return cls(name=c.label, unit=c.unit, kind="coordinate", source=c.spec,
                   time_ps=np.asarray(c.time_ps, float), values=np.asarray(c.values, float),
                   momentum=None if c.momentum is None else np.asarray(c.momentum, float),
                   momentum_unit=c.momentum_unit, periodic=bool(c.periodic))


def find_energy_series(run: Run, name: str) -> Series:
    """The energy-table column ``name`` (exact, then any case, then a role such as ``potential``)."""
    table = run.energies
    where = run.paths[0] if run.paths else None
    if table is None:
        raise MissingDataError("the run has no energy table; use --coordinate for a coordinate", path=where)
    if name in table.series:
        return table.series[name]
    low = {k.lower(): k for k in table.series}
    if name.lower() in low:
        return table.series[low[name.lower()]]
    by_role = table.by_role(name.lower())
    if by_role is not None:
        return by_role
    names = ", ".join(sorted(table.series)) or "none"
    raise MissingDataError(f"no energy series named {name!r}; the run has: {names}", path=where)


def sample_spacing(time_ps: np.ndarray, what: str) -> float:
    """The spacing (ps) of evenly spaced samples; refuses fewer than 4 or uneven ones."""
    t = np.asarray(time_ps, dtype=float)
    if t.size < 4:
        raise TooShortError(what, have=int(t.size), need=4)
    d = np.diff(t)
    dt = float(np.median(d))
    if not dt > 0 or np.max(np.abs(d - dt)) > 1e-3 * dt + 1e-12:
        raise AnalysisError(f"{what}: samples are not evenly spaced in time")
    return dt


def read_series(run: Run, *, series: str = "", coordinate: str = "", start: int = 0,
                stop: int | None = None) -> Work[Series1D]:
    """The energy column ``series`` (finite rows of [start, stop)) or the coordinate ``coordinate`` (frames
    [start, stop)) of ``run``: exactly one of them."""
    if bool(series) == bool(coordinate):
        raise AnalysisError("name either an energy series or a coordinate, not both or neither")
    if series:
        s = find_energy_series(run, series)
        assert run.energies is not None  # find_energy_series refuses a run without a table
        values = np.asarray(s.values, float)[start:stop]
        t = np.asarray(run.energies.time_ps, float)[start:stop]
        ok = np.isfinite(values)
        return Series1D(name=s.name, unit=s.unit, kind="series", source=s.source or "energy table",
                        time_ps=t[ok], values=values[ok])
    from phasewake.core.analyses.coordinates import compute_coordinates

    out = yield from compute_coordinates(run, [coordinate], start=start, stop=stop)
    return Series1D.of_coordinate(out[0])


@dataclass(frozen=True)
class CorrelationReport(ResultMixin):
    """What :class:`CorrelationRequest` finds for one series."""

    name: str
    unit: str
    kind: str
    source: str
    correlation: CorrelationResult
    g_by_method: dict[str, float]  # g of each single estimator, samples
    blocking: BlockingResult | None  # None below 32 samples
    equilibration: EquilibrationResult
    verdicts: tuple[verdicts.Verdict, ...]  # effective samples, estimator agreement, equilibration
    notes: tuple[str, ...] = ()


PERIODIC_NOTE = ("a periodic coordinate (an angle in (-pi, pi]): jumps across +-pi count as large changes; if it "
                 "sits near +-pi, analyse cos or sin of it instead")


@dataclass(frozen=True)
class CorrelationRequest(AnalysisRequest):
    """Autocorrelation, statistical inefficiency g (``method``; every estimator too), blocking and the start
    of equilibrated data of one series (see :mod:`phasewake.core.analyses.correlation`).

    ``max_lag_ps`` bounds the lags used for g (default: the whole series).
    """

    name: ClassVar[str] = "correlation"
    label: ClassVar[str] = "autocorrelation"

    series: str = ""
    coordinate: str = ""
    method: Method = "auto"
    max_lag_ps: float | None = None
    start: int = 0
    stop: int | None = None

    def work(self, run: Run) -> Work[CorrelationReport]:
        s = yield from read_series(run, series=self.series, coordinate=self.coordinate, start=self.start,
                                   stop=self.stop)
        return (yield from self.analyse(s))

    def analyse(self, s: Series1D) -> Work[CorrelationReport]:
        """The numbers of a series already read."""
        x = s.values
        dt = sample_spacing(s.time_ps, f"series {s.name}")
        max_lag = None if self.max_lag_ps is None else max(1, int(round(self.max_lag_ps / dt)))
        yield Progress(0, 2, f"autocorrelation of {s.name}")
        res = analyse_series(x, dt_ps=dt, method=self.method, max_lag=max_lag, unit=s.unit)
        g_all = {m: statistical_inefficiency(x, method=m, max_lag=max_lag) for m in METHODS}
        block = blocking(x, unit=s.unit) if x.size >= 32 else None
        equil = yield from equilibration_work(x, dt_ps=dt, method=self.method, max_lag=max_lag)
        found = [judge_ess(res, name=s.name), judge_estimators(res, name=s.name),
                 judge_equilibration(equil, name=s.name)]
        return CorrelationReport(
            name=s.name, unit=s.unit, kind=s.kind, source=s.source, correlation=res, g_by_method=g_all,
            blocking=block, equilibration=equil, verdicts=tuple(v for v in found if v is not None),
            notes=(PERIODIC_NOTE,) if s.periodic else ())
