"""The analyses behind a report, each a named step that returns its result or the reason it is missing.

The report builds the same requests as the command line and the window (:mod:`phasewake.core.analyses.
request`) and runs them through the result cache: :func:`collect_analyses` runs the audit, the
coordinate and the principal components (``AuditRequest``, ``CoordinatesRequest``, ``PCARequest``) in one
read of the frames (``cached.requested_pass``), then, on the coordinate series already read, the
crossings (``CrossingsRequest``), the time correlations (``CorrelationRequest``, also of the potential
energy) and the sampling checks (``SamplingRequest``), each stored under its request's own key, so
``phasewake crossings`` or ``phasewake memory`` of the same run find them and the other way round. The
phase-space density and the free-energy profile (whole run and each half on the same bins; the
temperature by the one rule, ``crossings.run_temperature``, and the Jacobian ``"none"``, as
``LandscapeRequest`` decides) are computed from the same series. The report's pages are drawn from the
:class:`ReportAnalyses` it returns (:mod:`phasewake.core.figures.report_sections`); nothing is computed
while drawing.

An analysis that cannot run on the data (no frames, no velocities, too short, no temperature) leaves
its result None and says why, so its page can say so instead of inventing a figure.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, TypeVar

import numpy as np

from phasewake.core.errors import PhasewakeError
from phasewake.core.progress import Progress, Work
from phasewake.core.store.cached import cached_work, requested, requested_pass

if TYPE_CHECKING:
    from phasewake.core.analyses.correlation.request import Series1D
    from phasewake.core.analyses.projection import PCARequest
    from phasewake.core.analyses.request import AnalysisRequest
    from phasewake.core.model.run import Run
    from phasewake.core.store.cache import ResultCache

T = TypeVar("T")

PCA_EXACT_MAX_COORDS = 3_000  # above this many coordinates the randomized route (as in the window)
MIN_SERIES_FRAMES = 40  # fewer frames of the coordinate: no sampling checks or free-energy profile


@dataclass(frozen=True)
class ReportSettings:
    """What a user sets for a report (every other choice is the analyses' own default)."""

    coordinate: str | None = None  # coordinate specification; None: chosen for the run
    temperature_K: float | None = None
    n_constraints: int | None = None
    timestep_ps: float | None = None
    states: tuple[float, float] | None = None  # core-set limits (A_hi, B_lo) in the coordinate's unit
    surface: float | None = None
    max_points: int = 20_000  # largest number of frames drawn in a scatter figure

    def audit_settings(self) -> dict[str, Any]:
        return {"n_constraints": self.n_constraints, "timestep_ps": self.timestep_ps,
                "temperature_K": self.temperature_K}


@dataclass(frozen=True)
class SeriesAnalyses:
    """Analyses of the coordinate's values (and of the potential energy's), reading no frames again."""

    correlations: tuple[Any, ...] = ()  # CorrelationReport of the coordinate, then of the potential energy
    sampling: Any = None  # SamplingReport of the coordinate
    density: Any = None  # landscape.Histogram2D of (q, p)
    density_reason: str = ""
    profile: Any = None  # landscape.FreeEnergyProfile of the whole run
    halves: tuple[Any, ...] = ()  # the same on the same bins from each half
    profile_reason: str = ""
    temperature_K: float | None = None  # of the profile
    temperature_source: str = ""

    @property
    def verdicts(self) -> list[Any]:
        """The coordinate's correlation verdicts (effective samples, estimators, equilibration) and its sampling
        verdicts (R-hat over segments, half against half)."""
        out: list[Any] = []
        if self.correlations and self.correlations[0].kind == "coordinate":
            out.extend(self.correlations[0].verdicts)
        if self.sampling is not None:
            out.extend(self.sampling.verdicts)
        return out


@dataclass(frozen=True)
class ReportAnalyses:
    """Every result a report draws, each with the reason it is missing (empty when present)."""

    coordinate: str | None  # the coordinate analysed
    coordinate_reason: str  # why it was chosen, or why there is none
    audit: Any = None
    audit_reason: str = ""
    series: Any = None  # CoordinateSeries of the coordinate
    series_reason: str = ""
    crossings: Any = None
    crossings_reason: str = ""
    pca: Any = None
    pca_reason: str = ""
    of_series: SeriesAnalyses = field(default_factory=SeriesAnalyses)

    @property
    def verdicts(self) -> list[Any]:
        """The verdicts of the audit, the crossings and the sampling checks, in that order."""
        out: list[Any] = []
        if self.audit is not None:
            out.extend(self.audit.verdicts)
        if self.crossings is not None:
            out.extend(self.crossings.verdicts)
        out.extend(self.of_series.verdicts)
        return out


def relay(work: Work[Any], base: float, total: float, label: str) -> Work[Any]:
    """Run ``work`` as the part [base, base + 1) of ``total`` steps, its messages after ``label``."""
    try:
        while True:
            p = next(work)
            frac = p.fraction or 0.0
            yield Progress(base + min(frac, 0.999), total, f"{label}: {p.message}" if p.message else label)
    except StopIteration as stop:
        return stop.value


def collect_analyses(run: Run, settings: ReportSettings, *, cache: ResultCache | None = None,
                     total: float = 8.0, replicas: Sequence[Run] = ()) -> Work[ReportAnalyses]:
    """Every analysis of the report, as steps 0 to 4 of ``total`` progress steps (``replicas``: the other runs
    of a replica ensemble, pooled with ``run`` in the crossings)."""
    spec, spec_reason = choose_report_coordinate(run, settings.coordinate)
    requests, refused = frame_requests(run, spec, settings)
    got = yield from relay(requested_pass(run, requests, cache=cache, alone=True), 0, total, "one pass over the frames")
    audit, audit_reason = outcome(got, "audit", "the audit could not run")
    series, series_reason = coordinate_outcome(run, spec, spec_reason, refused, got)
    pca, pca_reason = pca_outcome(run, got)
    yield Progress(2, total, "finding barrier crossings")
    crossings, crossings_reason = yield from relay(crossings_step(run, spec, series, settings, cache, replicas), 2,
                                                   total, "crossings")
    yield Progress(4, total, "correlations, sampling and the free-energy profile")
    temperature, source = report_temperature(run, settings.temperature_K)
    return ReportAnalyses(coordinate=spec, coordinate_reason=spec_reason, audit=audit, audit_reason=audit_reason,
                          series=series, series_reason=series_reason, crossings=crossings,
                          crossings_reason=crossings_reason or series_reason, pca=pca, pca_reason=pca_reason,
                          of_series=(yield from relay(series_analyses(run, spec, series, temperature, source, cache),
                                                      4, total, "memory of the coordinate")))


def choose_report_coordinate(run: Run, coordinate: str | None) -> tuple[str | None, str]:
    """The report's coordinate and why: the one given (reason ""), else the automatic choice of
    :func:`phasewake.core.analyses.coordinate_choice.choose_coordinate` with its reason (None for a pure liquid)."""
    from phasewake.core.analyses.coordinate_choice import choose_coordinate

    if coordinate is not None or run.frames is None:
        return coordinate, ""
    try:
        choice = choose_coordinate(run)
    except PhasewakeError as exc:
        return None, f"no coordinate could be chosen automatically: {exc}"
    return choice.spec, choice.reason


def pca_request(run: Run) -> PCARequest | None:
    """The principal components of the report (solute atoms; exact route when small), or None when there is
    nothing to decompose (no frames; two atoms: one distance)."""
    from phasewake.core.analyses.atom_groups import solute_atoms
    from phasewake.core.analyses.projection import PCARequest

    if run.frames is None:
        return None
    group = np.asarray(solute_atoms(run.topology, run.n_atoms))
    if group.size < 3:
        return None
    method = "exact" if 3 * group.size <= PCA_EXACT_MAX_COORDS else "randomized"
    return PCARequest(atom_indices=group, n_components=3, method=method)


def frame_requests(run: Run, spec: str | None,
                   settings: ReportSettings) -> tuple[dict[str, AnalysisRequest], str]:
    """The requests of the one pass over the frames (the audit; the coordinate and the principal components
    when the run has frames) and why the coordinate was refused ("" when it was not)."""
    from phasewake.core.analyses.audit import AuditRequest
    from phasewake.core.analyses.coordinates import CoordinatesRequest

    requests: dict[str, AnalysisRequest] = {"audit": AuditRequest(**settings.audit_settings())}
    refused = ""
    if run.frames is not None and spec is not None:
        coordinate = CoordinatesRequest([spec])
        try:
            coordinate.reference_paths(run)  # a specification the run cannot resolve raises here
            requests["coordinate"] = coordinate
        except PhasewakeError as exc:
            refused = f"the coordinate could not be computed: {exc}"
    pca = pca_request(run)
    if pca is not None:
        requests["pca"] = pca
    return requests, refused


def outcome(got: Mapping[str, Any], name: str, failed: str) -> tuple[Any, str]:
    """The result of request ``name`` of the pass, or None and why (``failed``: what the error follows)."""
    value = got.get(name)
    if isinstance(value, PhasewakeError):
        return None, f"{failed}: {value}"
    return value, ""


def coordinate_outcome(run: Run, spec: str | None, spec_reason: str, refused: str,
                       got: Mapping[str, Any]) -> tuple[Any, str]:
    """The coordinate series (with its momentum when the run has velocities), or the reason there is none."""
    if run.frames is None:
        return None, "the run has no frames (energy table only)"
    if spec is None:
        return None, ("no coordinate was given and " + (spec_reason or "none could be suggested")
                      + ("" if "--coordinate" in spec_reason else " (use --coordinate)"))
    if refused:
        return None, refused
    series, why = outcome(got, "coordinate", "the coordinate could not be computed")
    return (None, why) if series is None else (series[0], "")


def pca_outcome(run: Run, got: Mapping[str, Any]) -> tuple[Any, str]:
    """The principal components of the solute atoms, or the reason there are none."""
    if run.frames is None:
        return None, "the run has no frames"
    if "pca" not in got:
        return None, "principal components left out: the solute has fewer than 3 atoms"
    return outcome(got, "pca", "the principal components could not be computed")


def crossings_step(run: Run, spec: str | None, series: Any, settings: ReportSettings, cache: ResultCache | None,
                   replicas: Sequence[Run] = ()) -> Work[tuple[Any, str]]:
    """Barrier crossings of the coordinate: the command line's :class:`CrossingsRequest` (its temperature
    rule, kT/m_eff, Jacobian and defaults), analysed on the series already read and kept in the result cache
    under the request's own key (so ``phasewake crossings`` of the same run finds it, and the other way round).
    With ``replicas`` it is the request of ``phasewake crossings --replicas`` (every run's coordinate read by
    the request, spread over the workers as there), whose result holds the per-replica table.
    """
    from phasewake.core.analyses.crossings import CrossingsRequest

    if series is None or spec is None:
        return None, ""
    request = CrossingsRequest(coordinate=spec, states=settings.states, surface=settings.surface,
                               temperature_K=settings.temperature_K, replicas=tuple(replicas))
    try:
        result = yield from (requested(run, request, cache=cache) if replicas
                             else on_series(run, request, request.analyse([run], [series]), cache))
    except PhasewakeError as exc:
        return None, f"crossings could not be analysed: {exc}"
    return result, ""


def report_temperature(run: Run, given: float | None) -> tuple[float | None, str]:
    """The temperature (K) for kT in the report and where it comes from: the one given, else the rule of
    :func:`phasewake.core.analyses.crossings.run_temperature` (the crossings use the same); (None, why)
    when unknown, never a guess."""
    from phasewake.core.analyses.crossings import run_temperature

    if given is not None:
        return float(given), "given by the user"
    return run_temperature(run)


def series_analyses(run: Run, spec: str | None, series: Any, temperature_K: float | None, temperature_source: str,
                    cache: ResultCache | None) -> Work[SeriesAnalyses]:
    """Correlations, sampling checks, phase-space density and free-energy profile of the coordinate's values
    (the correlations and sampling checks are the requests of ``phasewake memory`` and the window)."""
    density, density_reason = phase_density(series)
    profile, halves, profile_reason = free_energy_profiles(series, temperature_K, temperature_source)
    correlations = yield from correlation_step(run, spec, series, cache)
    sampling = yield from sampling_step(run, spec, series, cache)
    return SeriesAnalyses(correlations=correlations, sampling=sampling, density=density,
                          density_reason=density_reason, profile=profile, halves=halves,
                          profile_reason=profile_reason, temperature_K=temperature_K,
                          temperature_source=temperature_source)


def _finite_values(series: Any) -> np.ndarray:
    q = np.asarray(series.values, float)
    return q[np.isfinite(q)]


def on_series(run: Run, request: AnalysisRequest, work: Work[T], cache: ResultCache | None) -> Work[T]:
    """``work``, the request's own analysis of a series the report has already read, kept in the result cache
    under the request's key (that of ``requested(run, request)``): the command line's request of the same run
    finds it, and the other way round, and the frames are not read again."""
    return (yield from cached_work(run, request.name, request.settings(), work, cache=cache,
                                   extra_paths=request.reference_paths(run)))


def _now(make: Callable[[], T]) -> Work[T]:
    """A result made at once, as work (for the cache)."""
    return make()
    yield  # pragma: no cover - makes this a generator


def as_series_1d(series: Any) -> Series1D:
    """A coordinate series as the memory requests read one (``correlation.request.read_series``)."""
    from phasewake.core.analyses.correlation.request import Series1D

    return Series1D.of_coordinate(series)


def correlation_step(run: Run, spec: str | None, series: Any, cache: ResultCache | None) -> Work[tuple[Any, ...]]:
    """:class:`CorrelationRequest` of the coordinate and of the potential energy (those that can be had)."""
    from phasewake.core.analyses.correlation.request import CorrelationRequest

    out = []
    if series is not None and spec is not None:
        request = CorrelationRequest(coordinate=spec)
        try:
            out.append((yield from on_series(run, request, request.analyse(as_series_1d(series)), cache)))
        except PhasewakeError:
            pass  # too short or constant: the page says no series could be correlated
    if run.energies is not None and run.energies.by_role("potential") is not None:
        try:
            out.append((yield from requested(run, CorrelationRequest(series="potential"), cache=cache)))
        except PhasewakeError:
            pass
    return tuple(out)


def sampling_step(run: Run, spec: str | None, series: Any, cache: ResultCache | None) -> Work[Any]:
    """:class:`SamplingRequest` of the coordinate, or None when it cannot be had."""
    from phasewake.core.analyses.sampling import SamplingRequest

    if series is None or spec is None or _finite_values(series).size < MIN_SERIES_FRAMES:
        return None
    request = SamplingRequest(coordinate=spec)
    try:
        return (yield from on_series(run, request, _now(lambda: request.analyse(as_series_1d(series), [])), cache))
    except PhasewakeError:
        return None


def phase_density(series: Any) -> tuple[Any, str]:
    """The density of the coordinate in the (q, p) plane, or the reason there is none."""
    from phasewake.core.analyses.landscape import histogram_2d

    if series is None:
        return None, "no coordinate"
    p = series.momentum if series.momentum is not None else series.velocity
    if p is None:
        return None, "the coordinate has no momentum (no velocities)"
    p_unit = series.momentum_unit if series.momentum is not None else series.velocity_unit
    try:
        return histogram_2d(np.asarray(series.values, float), np.asarray(p, float), x_unit=series.unit,
                            y_unit=p_unit), ""
    except PhasewakeError as exc:
        return None, f"the density could not be computed: {exc}"


def free_energy_profiles(series: Any, temperature_K: float | None,
                         temperature_source: str) -> tuple[Any, tuple[Any, ...], str]:
    """The free-energy profile of the coordinate over the whole run and over each half on the same bins
    (``temperature_source``: why the temperature is what it is, or unknown)."""
    from phasewake.core.analyses.landscape import free_energy_profile

    if series is None:
        return None, (), "no coordinate"
    q = _finite_values(series)
    if q.size < MIN_SERIES_FRAMES:
        return None, (), f"the coordinate has only {q.size} frames"
    if temperature_K is None:
        return None, (), temperature_source
    try:
        whole = free_energy_profile(q, temperature_K=temperature_K, unit=series.unit)
        half = q.size // 2
        halves = tuple(free_energy_profile(part, temperature_K=temperature_K, unit=series.unit,
                                           bins=np.asarray(whole.edges)) for part in (q[:half], q[half:]))
    except PhasewakeError as exc:
        return None, (), f"the free-energy profile could not be computed: {exc}"
    return whole, halves, ""
