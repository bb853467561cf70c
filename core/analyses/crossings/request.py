"""CrossingsRequest: the one request of crossings for the command line, the window, the report and the
Python API. The temperature, kT/m_eff, the profile's Jacobian and every default are decided here."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses.crossings.checks import check_not_stiff_bond
from phasewake.core.analyses.crossings.pooled import crossings_work
from phasewake.core.analyses.crossings.results import CrossingsResult, as_trace
from phasewake.core.analyses.landscape import resolve_jacobian, run_temperature
from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.errors import AnalysisError
from phasewake.core.progress import Progress, Work
from phasewake.core.units import KB_KJ_PER_MOL_K

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

def kt_over_m_eff(temperature_K: float | None, series: Sequence[Any]) -> float | None:
    """kT <1/m_eff> in (unit/ps)^2 over every frame of every series (equipartition of dq/dt; see
    :mod:`phasewake.core.analyses.coordinates`), or None when the temperature or an m_eff is unknown."""
    if temperature_K is None:
        return None
    inverse = []
    for s in series:
        m = getattr(s, "m_eff", None)
        if m is None or not np.all(np.isfinite(m)):
            return None
        inverse.append(1.0 / np.asarray(m, dtype=float))
    return float(KB_KJ_PER_MOL_K * float(temperature_K) * np.mean(np.concatenate(inverse)))


@dataclass(frozen=True)
class CrossingsRequest(AnalysisRequest):
    """Crossings of ``coordinate`` in a run (and its ``replicas``, pooled): the one request of every front end.

    The defaults are decided here and nowhere else:

    - temperature: ``temperature_K`` when given, else :func:`run_temperature` of the first run (its
      thermostat target, else its mean kinetic temperature); unknown is said in the result's warnings,
      never replaced by a guess;
    - kT/m_eff for the TST flux factor of a coordinate without velocities: :func:`kt_over_m_eff` over
      every replica's frames;
    - the Jacobian of the profile from which states are suggested: ``"none"`` by default, since the
      dividing surface of least TST rate lies at the minimum of P(q) itself (Truhlar, Garrett and
      Klippenstein, J. Phys. Chem. 100, 12771 (1996), variational TST), where q dwells; ``"auto"`` applies
      the distance Jacobian to distances (from the parsed specification);
    - states and surface suggested from the profile when not given (:func:`suggest_states`), refused for
      a stiff bond (:func:`check_not_stiff_bond`).

    ``start``/``stop`` select frames [start, stop) of every run (how many frames are read at once is the
    process's chunk setting, :mod:`phasewake.core.settings`: it never changes the result).
    """

    name: ClassVar[str] = "crossings"
    label: ClassVar[str] = "crossings"

    coordinate: str
    states: tuple[float, float] | None = None
    surface: float | None = None
    confidence: float = 0.95
    kappa_window_ps: tuple[float, float] | None = None
    temperature_K: float | None = None
    jacobian: str = "none"
    replicas: tuple[Run, ...] = ()
    start: int = 0
    stop: int | None = None

    def reference_paths(self, run: Run) -> tuple[str, ...]:
        from phasewake.core.analyses.coordinates import resolve_for_run
        from phasewake.core.errors import PhasewakeError

        try:
            ref = resolve_for_run(self.coordinate, run).reference_path
        except PhasewakeError:  # a bad specification is reported by the analysis itself
            return ()
        return (str(ref),) if ref else ()

    def work(self, run: Run) -> Work[CrossingsResult]:
        runs = [run, *self.replicas]
        series = yield from self._series(runs)
        return (yield from self.analyse(runs, series, base=len(runs), total=len(runs) + 1))

    def _series(self, runs: Sequence[Run]) -> Work[list[Any]]:
        """Step 1: the coordinate (and dq/dt, m_eff) of every run, read chunk by chunk."""
        from phasewake.core.analyses.coordinates import compute_coordinates
        from phasewake.core.model import parallel

        if parallel.spread_runs(runs):  # one worker task per replica (--workers, --scheduler)
            return (yield from replica_coordinates(runs, self.coordinate, start=self.start, stop=self.stop))
        out = []
        for k, r in enumerate(runs):
            work = compute_coordinates(r, [self.coordinate], start=self.start, stop=self.stop)
            s = yield from _relay(work, k, len(runs) + 1, r.name)
            out.append(s[0])
        return out

    def analyse(self, runs: Sequence[Run], series: Sequence[Any], *, base: float = 0.0,
                total: float = 1.0) -> Work[CrossingsResult]:
        """Step 2: crossings of given coordinate series of ``runs`` (one per run; CoordinateSeries, Trace or
        (time_ps, q[, dq/dt]) as :func:`as_trace` reads them) with this request's settings.

        For a front end that already holds the series; :meth:`work` is both steps.
        """
        resolve_jacobian(self.jacobian, self.coordinate)  # an unknown Jacobian is refused before any work
        temp, why = ((float(self.temperature_K), "given") if self.temperature_K is not None
                     else run_temperature(runs[0]))
        traces = [as_trace(s, name=r.name) for s, r in zip(series, runs)]
        unit = str(getattr(series[0], "unit", ""))
        if self.states is None:
            check_not_stiff_bond(self.coordinate, runs[0], [tr.values for tr in traces], unit)
        inner = crossings_work(traces, states=self.states, surface=self.surface, unit=unit,
                               confidence=self.confidence, kappa_window_ps=self.kappa_window_ps,
                               temperature_K=temp, kT_over_m_eff=kt_over_m_eff(temp, series),
                               jacobian=resolve_jacobian(self.jacobian, self.coordinate))
        try:
            result: CrossingsResult = yield from _relay(inner, base, total, "")
        except AnalysisError as exc:  # what the series do not allow: said of the run's files
            if exc.path is not None or not runs or not runs[0].paths:
                raise
            raise AnalysisError(str(exc), path=runs[0].paths[0]) from None
        if temp is None:
            result = replace(result, warnings=(*result.warnings, f"{why} (the TST flux factor of a coordinate "
                                                                 "without velocities needs it)"))
        from phasewake.core.analyses.replica_table import replica_rows

        return replace(result, settings=replace(result.settings, temperature_source=why),
                       replicas=replica_rows(result, traces, unit))


def replica_series(got: Any, spec: str, start: int, stop: int | None, chunks: tuple[int, float]) -> Any:
    """One replica's coordinate series in a worker process (``compute_coordinates`` in the parent's chunks:
    ``chunks`` is its :func:`~phasewake.core.settings.chunk_setting`); ``got`` is the run as it travelled
    or its files (:func:`phasewake.core.model.ranges.travelling`)."""
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.model.parallel import set_workers
    from phasewake.core.model.ranges import worker_run
    from phasewake.core.progress import drive
    from phasewake.core.settings import chunking

    set_workers(1)  # on a Dask worker too: the replicas are the parallel part
    with chunking(frames=chunks[0], mb=chunks[1]):
        return drive(compute_coordinates(worker_run(got), [spec], start=start, stop=stop))[0]


def replica_coordinates(runs: Sequence[Run], spec: str, *, start: int = 0, stop: int | None = None
                        ) -> Work[list[Any]]:
    """The coordinate ``spec`` of every run, one worker task per run
    (:func:`phasewake.core.model.parallel.map_workers`), in order."""
    from phasewake.core.model.parallel import map_workers
    from phasewake.core.model.ranges import files_of, travelling
    from phasewake.core.settings import chunk_setting

    tasks = [(travelling(r, files_of(r)), spec, start, stop, chunk_setting()) for r in runs]
    return (yield from map_workers(replica_series, tasks, label=f"{spec} in {len(runs)} replicas"))


def _relay(work: Work[Any], base: float, total: float, prefix: str) -> Work[Any]:
    """Run ``work`` as the part [base, base + 1) of ``total``, its messages after ``prefix``."""
    try:
        while True:
            p = next(work)
            msg = f"{prefix}: {p.message}" if prefix and p.message else (prefix or p.message)
            yield Progress(base + (p.fraction or 0.0), total, msg)
    except StopIteration as stop:
        return stop.value


def crossings_of_runs(
    runs: Run | Sequence[Run],
    coordinate: str,
    *,
    states: tuple[float, float] | None = None,
    surface: float | None = None,
    confidence: float = 0.95,
    kappa_window_ps: tuple[float, float] | None = None,
    temperature_K: float | None = None,
) -> Work[CrossingsResult]:
    """Crossings of ``coordinate`` (a coordinate spec, e.g. ``"distance(0, 1)"``) in one or more runs:
    :class:`CrossingsRequest` on the first run with the others as replicas (their events pool)."""
    run_list: list[Run] = [runs] if not isinstance(runs, Sequence) else list(runs)
    if not run_list:
        raise AnalysisError("no run given")
    request = CrossingsRequest(coordinate=coordinate, states=states, surface=surface, confidence=confidence,
                               kappa_window_ps=kappa_window_ps, temperature_K=temperature_K,
                               replicas=tuple(run_list[1:]))
    return (yield from request.work(run_list[0]))
