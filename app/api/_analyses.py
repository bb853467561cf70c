"""The analyses from Python: each builds the analysis's settings as the command line does and runs it
through the result cache (``cache=True``, as on the command line; ``cache=False`` computes afresh and
stores nothing). ``progress`` is called with each :class:`phasewake.core.progress.Progress`."""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar

import numpy as np

if TYPE_CHECKING:
    from phasewake.core.analyses.audit import AuditResult
    from phasewake.core.analyses.coordinates import CoordinateSeries
    from phasewake.core.analyses.correlation.request import CorrelationReport, Series1D
    from phasewake.core.analyses.crossings import CrossingsResult
    from phasewake.core.analyses.landscape import FreeEnergyProfile
    from phasewake.core.analyses.projection import PCAResult
    from phasewake.core.analyses.request import AnalysisRequest
    from phasewake.core.analyses.sampling import SamplingReport
    from phasewake.core.analyses.velocity import VACFResult, VDOSResult
    from phasewake.core.figures.report import ReportResult
    from phasewake.core.model.run import Run
    from phasewake.core.progress import Progress, Work
    from phasewake.core.store.cache import ResultCache

T = TypeVar("T")
ProgressCallback = Callable[["Progress"], None]
Atoms = str | Sequence[int] | np.ndarray


def _cache(cache: bool) -> ResultCache | None:
    """``cache=True``: the default cache (``PHASEWAKE_CACHE_DIR``, ``PHASEWAKE_NO_CACHE``), as the command line."""
    from phasewake.core.store.cache import ResultCache

    return None if cache else ResultCache(enabled=False)


def _requested(run: Run, request: AnalysisRequest, cache: bool) -> Work[Any]:
    """The request through the result cache: the one road of the command line, the window and the report."""
    from phasewake.core.store.cached import requested

    return requested(run, request, cache=_cache(cache))


def _drive(work: Work[T], progress: ProgressCallback | None) -> T:
    from phasewake.core.progress import drive

    return drive(work, progress)


def _run_of(run: Any, what: str) -> Run:
    from phasewake.core.errors import InputError
    from phasewake.core.model.run import Run

    if not isinstance(run, Run):
        raise InputError(f"{what}: expected a run from pw.open(...), got {type(run).__name__}")
    return run


def _atoms(run: Run, atoms: Atoms | None, what: str) -> np.ndarray | None:
    """An atom group: indices, or text in the coordinate grammar's group form (``"0-9"``, ``"[0, 4]"``,
    ``'"resname DIM"'``, as the command line's ``--pca-group``)."""
    from phasewake.core.errors import InputError

    if atoms is None:
        return None
    if isinstance(atoms, str):
        from phasewake.core.analyses.coordinates import resolve_group

        return resolve_group(atoms, run, option=what)
    idx = np.asarray(atoms)
    if idx.ndim != 1 or idx.size == 0 or idx.dtype.kind not in "iu":
        raise InputError(f"{what}: expected atom indices (a non-empty list of whole numbers) or a group text")
    if idx.min() < 0 or idx.max() >= run.n_atoms:
        raise InputError(f"{what}: atom indices must lie in 0..{run.n_atoms - 1} (the run has {run.n_atoms} atoms)",
                         path=run.paths[0] if run.paths else None)
    return idx.astype(np.intp)


def _groups(run: Run, groups: Mapping[str, Atoms] | None, what: str) -> dict[str, np.ndarray] | None:
    if groups is None:
        return None
    out = {}
    for name, atoms in groups.items():
        got = _atoms(run, atoms, f"{what}[{name!r}]")
        assert got is not None
        out[str(name)] = got
    return out or None


def audit(run: Run, *, groups: Mapping[str, Atoms] | None = None, compare: Run | None = None,
          compare_timestep_fs: float | None = None, cache: bool = True,
          progress: ProgressCallback | None = None) -> AuditResult:
    """Can this run's dynamics be trusted? Energy conservation, kinetic temperature and equipartition,
    canonical checks (thermostatted runs) and the time step, each a verdict with its number, threshold
    and source (``phasewake audit``). Verdicts are heuristics: your judgement decides.

    Parameters
    ----------
    run : Run
        From :func:`phasewake.open` (what you stated there, such as ``timestep_fs`` or
        ``constraints``, is used here as ``phasewake audit`` uses its options).
    groups : mapping name -> atoms, optional
        Extra groups for the equipartition check: atom indices, or a group text such as ``"0-1"`` or
        ``'"resname DIM"'``.
    compare : Run, optional
        A run of the same system at another time step: checks that the energy fluctuation scales as
        (dt1/dt2)^2 (``--compare``).
    compare_timestep_fs : float, optional
        The comparison run's time step in fs, when its files do not say.
    cache : bool
        Read and write the result cache (default, as the command line); False computes afresh.
    progress : callable, optional
        Called with each ``Progress`` (``done``, ``total``, ``message``).

    Returns
    -------
    AuditResult
        ``overall`` ("ok", "caution", "problem" or "not checked"), ``verdicts`` (each with ``kind``,
        ``level``, ``title``, ``measured`` and ``unit``, ``message``, ``threshold``), ``energy``,
        ``temperature``, ``timestep``; ``.to_dict()`` and ``.figure()``.

    Examples
    --------
    >>> import phasewake as pw
    >>> result = pw.audit(pw.open(pw.sample_path("dimer_nve.h5md")))
    >>> result.ensemble, result.overall
    ('NVE', 'ok')
    >>> [f.key for f in result.figure_specs()]
    ['energy.audit', 'temperature.audit', 'timestep.spectrum']
    """
    from phasewake.core.analyses.audit import AuditRequest
    from phasewake.core.readers.stated import stated_settings

    run = _run_of(run, "pw.audit")
    request = AuditRequest(**stated_settings(run), groups=_groups(run, groups, "groups"),
                           compare=None if compare is None else _run_of(compare, "compare"),
                           compare_timestep_ps=None if compare_timestep_fs is None else compare_timestep_fs * 1e-3)
    work = _requested(run, request, cache)
    result: AuditResult = _drive(work, progress)
    return result


def coordinates(run: Run, specs: str | Sequence[str], *, momentum: bool = False, start: int = 0,
                stop: int | None = None, cache: bool = True,
                progress: ProgressCallback | None = None) -> CoordinateSeries | list[CoordinateSeries]:
    """Coordinates of a run's frames, with dq/dt, effective mass and conjugate momentum
    (``phasewake coords``).

    Parameters
    ----------
    run : Run
    specs : str or list of str
        Coordinate specifications: ``"distance(0, 1)"``, ``"angle(3, 4, 5)"``, ``"dihedral(4, 6, 8, 14)"``,
        ``"x(12)"``, ``'com_distance([0-9], "resname SOL")'``, ``'rg("protein")'``, ``"rmsd(ref.pdb)"``,
        ``"pc(1)"`` (atoms 0-based).
    momentum : bool
        Require the momentum: raise ``MissingDataError`` when the run has no velocities (stored or
        estimated) to give dq/dt. Without it the momentum fields are None for such a run.
    start, stop : int
        Frames ``start`` up to ``stop`` (excluded; default: to the end).
    cache, progress
        As in :func:`phasewake.audit`.

    Returns
    -------
    CoordinateSeries, or a list of them for a list of specs
        ``time_ps`` (ps), ``values`` (in ``unit``), ``velocity``, ``m_eff``, ``momentum`` (units in
        ``velocity_unit``, ``m_eff_unit``, ``momentum_unit``); ``.figure()`` draws the series
        (``"coordinate.series"``) and the phase portrait (``"phase.portrait"``).

    Raises
    ------
    phasewake.core.errors.CoordinateSpecError
        A malformed specification (the message points at the offending character).

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_nve.h5md"))
    >>> q = pw.coordinates(run, "distance(0, 1)", momentum=True)
    >>> q.unit, q.momentum_unit, q.values.shape
    ('nm', 'amu nm/ps', (1600,))
    >>> fig = q.figure("phase.portrait")
    """
    from phasewake.core.analyses.coordinates import CoordinatesRequest
    from phasewake.core.errors import InputError, MissingDataError

    run = _run_of(run, "pw.coordinates")
    one = isinstance(specs, str)
    spec_list = [specs] if isinstance(specs, str) else [str(s) for s in specs]
    if not spec_list:
        raise InputError("pw.coordinates: no coordinate given")
    request = CoordinatesRequest.for_run(run, spec_list, start=start, stop=stop)
    series: list[CoordinateSeries] = _drive(_requested(run, request, cache), progress)
    if momentum:
        for s in series:
            if s.momentum is None:
                raise MissingDataError(f"{s.spec}: no momentum: the run has no velocities, stored or estimated",
                                       path=run.paths[0] if run.paths else None)
    return series[0] if one else series


def pca(run: Run, *, atoms: Atoms | None = None, n_components: int = 10, mass_weighted: bool = True,
        fit: bool = True, fast: bool = False, passes: int = 1, start: int = 0, stop: int | None = None,
        cache: bool = True, progress: ProgressCallback | None = None) -> PCAResult:
    """Principal components of an atom group, with projections and their momenta
    (``phasewake coords --pca K``).

    Parameters
    ----------
    run : Run
    atoms : atom indices or group text, optional
        Default: every atom that does not look like solvent.
    n_components : int
        Components kept.
    mass_weighted, fit : bool
        Mass-weighted coordinates; frames superposed on the first one (no overall rotation).
    fast, passes : bool, int
        Randomized PCA of the leading components in ``passes`` passes (Halko, Martinsson and Tropp
        2011): approximate; default the exact covariance.
    start, stop, cache, progress
        As in :func:`phasewake.coordinates`.

    Returns
    -------
    PCAResult
        ``eigenvalues`` (``eigenvalue_unit``), ``explained_variance_ratio``, ``projections``
        (frames x components), ``momenta``, ``cosine_content``; ``.figure()``.

    Examples
    --------
    >>> import phasewake as pw
    >>> result = pw.pca(pw.open(pw.sample_path()), atoms=[0, 1], n_components=3)
    >>> result.projections.shape
    (1600, 3)
    >>> bool(result.explained_variance_ratio[0] > result.explained_variance_ratio[1])
    True
    """
    from phasewake.core.analyses.projection import PCARequest

    run = _run_of(run, "pw.pca")
    request = PCARequest(atom_indices=_atoms(run, atoms, "atoms"), start=start, stop=stop, n_components=n_components,
                         mass_weighted=mass_weighted, fit=fit, method="randomized" if fast else "exact",
                         n_iter=max(0, passes - 1))
    work = _requested(run, request, cache)
    result: PCAResult = _drive(work, progress)
    return result


def vacf(run: Run, *, groups: Mapping[str, Atoms] | None = None, mass_weighted: bool = False,
         max_lag_ps: float | None = None, start: int = 0, stop: int | None = None, cache: bool = True,
         progress: ProgressCallback | None = None) -> VACFResult:
    """Velocity autocorrelation per atom group (``phasewake memory --vacf``).

    Parameters
    ----------
    run : Run
        With velocities, stored or estimated.
    groups : mapping name -> atoms, optional
        Default: one group of all atoms.
    mass_weighted : bool
        <m v(0).v(t)> instead of <v(0).v(t)>.
    max_lag_ps : float, optional
        Lag window in ps (default: half the analysed time, within the memory budget).
    start, stop, cache, progress
        As in :func:`phasewake.coordinates`.

    Returns
    -------
    VACFResult
        ``lag_ps``, ``vacf`` (groups x lags, in ``unit``), ``normalised``; ``.figure()``.

    Examples
    --------
    >>> import phasewake as pw
    >>> result = pw.vacf(pw.open(pw.sample_path()), max_lag_ps=2.0)
    >>> float(result.normalised[0, 0])
    1.0
    """
    from phasewake.core.analyses.velocity import VACFRequest

    run = _run_of(run, "pw.vacf")
    request = VACFRequest(groups=_groups(run, groups, "groups"), mass_weighted=mass_weighted, max_lag_ps=max_lag_ps,
                          start=start, stop=stop)
    work = _requested(run, request, cache)
    result: VACFResult = _drive(work, progress)
    return result


def spectrum(run: Run, *, atoms: Atoms | None = None, max_lag_ps: float | None = None,
             peak_prominence: float = 0.05, start: int = 0, stop: int | None = None, cache: bool = True,
             progress: ProgressCallback | None = None) -> VDOSResult:
    """Vibrational density of states from the mass-weighted velocity autocorrelation
    (``phasewake memory --spectrum``).

    Parameters
    ----------
    run : Run
        With velocities, stored or estimated.
    atoms : atom indices or group text, optional
        Default: all atoms.
    max_lag_ps : float, optional
        Lag window in ps (default 2 ps, at most half the run).
    peak_prominence : float
        Smallest prominence of a reported peak, as a fraction of the highest.
    start, stop, cache, progress
        As in :func:`phasewake.coordinates`.

    Returns
    -------
    VDOSResult
        ``thz``, ``intensity`` (per cm^-1, integrating to ``n_dof``), ``peaks``,
        ``highest_significant_peak_cm1``; ``.figure()``.

    Examples
    --------
    >>> import phasewake as pw
    >>> result = pw.spectrum(pw.open(pw.sample_path()), atoms=[0, 1])
    >>> result.n_dof  # 3 per atom: the intensity integrates to it over wavenumber
    6.0
    """
    from phasewake.core.analyses.velocity import SpectrumRequest

    run = _run_of(run, "pw.spectrum")
    request = SpectrumRequest(atom_indices=_atoms(run, atoms, "atoms"), max_lag_ps=max_lag_ps,
                              peak_prominence=peak_prominence, start=start, stop=stop)
    work = _requested(run, request, cache)
    result: VDOSResult = _drive(work, progress)
    return result


def _which(series: str | None, coordinate: str | None, what: str) -> dict[str, str]:
    from phasewake.core.errors import InputError

    if bool(series) == bool(coordinate):
        raise InputError(f"{what}: name either an energy series (series='potential', a column name or role) or a "
                         "coordinate (coordinate='distance(0, 1)'), not both or neither")
    return {"series": series} if series else {"coordinate": str(coordinate)}


def _series1d(values: Any, dt_ps: float | None, unit: str) -> Series1D:
    """An array of equally spaced samples, or a CoordinateSeries, as the series the requests analyse."""
    from phasewake.core.analyses.coordinates import CoordinateSeries
    from phasewake.core.analyses.correlation.request import Series1D
    from phasewake.core.errors import InputError, MissingDataError

    if isinstance(values, CoordinateSeries):  # as read_series makes it from a run's coordinate
        return Series1D(name=values.label, unit=values.unit, kind="coordinate", source=values.spec,
                        time_ps=np.asarray(values.time_ps, float), values=np.asarray(values.values, float),
                        momentum=None if values.momentum is None else np.asarray(values.momentum, float),
                        momentum_unit=values.momentum_unit, periodic=bool(values.periodic))
    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 1:
        raise InputError(f"expected one series (a 1-d array), got shape {x.shape}")
    if dt_ps is None:
        raise MissingDataError("an array needs its sample spacing, dt_ps=")
    return Series1D(name="series", unit=unit, kind="series", source="array", time_ps=np.arange(x.size) * float(dt_ps),
                    values=x)


def correlation(source: Any, series: str | None = None, *, coordinate: str | None = None, dt_ps: float | None = None,
                unit: str = "", method: str = "auto", max_lag_ps: float | None = None, start: int = 0,
                stop: int | None = None, cache: bool = True,
                progress: ProgressCallback | None = None) -> CorrelationReport:
    """Memory of one series: autocorrelation, statistical inefficiency g by every estimator, integrated
    correlation time, effective sample size, the g-corrected standard error of the mean, blocking and the
    start of equilibrated data (``phasewake memory``).

    Parameters
    ----------
    source : Run, CoordinateSeries or array
        A run (then name ``series``, an energy column by name or role such as ``"potential"``, or a
        ``coordinate``); a coordinate from :func:`phasewake.coordinates`; or a 1-d array of equally spaced
        samples (give ``dt_ps``, and its ``unit``).
    series, coordinate : str, optional
        What to read from a run (exactly one).
    dt_ps : float, optional
        Sample spacing in ps (arrays only).
    unit : str
        Unit of an array's values.
    method : {"auto", "sokal", "geyer", "first_zero"}
        Estimator of g: ``auto`` takes Sokal's window, Geyer's initial sequence on an oscillating
        autocorrelation, compares them with blocking and keeps the largest when they disagree.
    max_lag_ps : float, optional
        Largest lag used for g, in ps (default: the whole series).
    start, stop : int
        Rows of the energy table, or frames, of a run.
    cache, progress
        As in :func:`phasewake.audit` (only runs are cached).

    Returns
    -------
    CorrelationReport
        ``correlation`` (``statistical_inefficiency``, ``tau_int_sokal_ps``, ``effective_sample_size``,
        ``standard_error_of_mean``, ``acf``; ``.figure()``), ``g_by_method``, ``blocking``,
        ``equilibration``, ``verdicts``.

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_langevin_r2.h5md"))
    >>> report = pw.correlation(run, "potential")
    >>> g = report.correlation
    >>> bool(g.effective_sample_size < g.n_samples), g.unit
    (True, 'kJ/mol')
    >>> noise = pw.correlation([0.3, -1.2, 0.8, 0.1, -0.5, 1.1, -0.9, 0.4] * 8, dt_ps=0.01)
    """
    from phasewake.core.analyses.correlation.request import CorrelationRequest
    from phasewake.core.model.run import Run

    if isinstance(source, Run):
        request = CorrelationRequest(**_which(series, coordinate, "pw.correlation"), method=method,  # type: ignore[arg-type]
                                     max_lag_ps=max_lag_ps, start=start, stop=stop)
        report: CorrelationReport = _drive(_requested(source, request, cache), progress)
        return report
    request = CorrelationRequest(method=method, max_lag_ps=max_lag_ps)  # type: ignore[arg-type]
    report = _drive(request.analyse(_series1d(source, dt_ps, unit)), progress)
    return report


def sampling(run: Run, series: str | None = None, *, coordinate: str | None = None, segments: int = 4,
             bins: int = 50, method: str = "auto", max_lag_ps: float | None = None, replicas: Sequence[Run] = (),
             start: int = 0, stop: int | None = None, cache: bool = True,
             progress: ProgressCallback | None = None) -> SamplingReport:
    """Did the run sample ergodically? Running average with its error band, split R-hat over segments (and
    across replicas), half-against-half divergence and, for a coordinate with a momentum, the (q, p)
    coverage over time (``phasewake memory``). Heuristics: your judgement decides.

    Parameters
    ----------
    run : Run
    series, coordinate : str
        An energy column (name or role) or a coordinate specification (exactly one).
    segments : int
        Contiguous segments of the split R-hat.
    bins : int
        Histogram bins of the divergence.
    method, max_lag_ps
        As in :func:`phasewake.correlation`.
    replicas : list of Run
        Other runs of the same system: R-hat across them.
    start, stop, cache, progress
        As in :func:`phasewake.correlation`.

    Returns
    -------
    SamplingReport
        ``running``, ``rhat_segments``, ``divergence``, ``coverage``, ``rhat_replicas``, ``verdicts``.

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_langevin_r2.h5md"))
    >>> report = pw.sampling(run, coordinate="distance(0, 1)")
    >>> report.rhat_segments.n_chains
    4
    """
    from phasewake.core.analyses.sampling import SamplingRequest

    run = _run_of(run, "pw.sampling")
    request = SamplingRequest(**_which(series, coordinate, "pw.sampling"), segments=segments, bins=bins,  # type: ignore[arg-type]
                              method=method, max_lag_ps=max_lag_ps,
                              replicas=tuple(_run_of(r, "replicas") for r in replicas), start=start, stop=stop)
    report: SamplingReport = _drive(_requested(run, request, cache), progress)
    return report


def free_energy(run: Run, coordinate: str, *, jacobian: str = "none", bins: int | None = None, n_blocks: int = 10,
                start: int = 0, stop: int | None = None, cache: bool = True,
                progress: ProgressCallback | None = None) -> FreeEnergyProfile:
    """The free-energy profile F(q) = -kT ln P(q) of a coordinate, with block errors, at the run's
    temperature (the same rule as :func:`phasewake.crossings`).

    Parameters
    ----------
    run : Run
    coordinate : str
        A coordinate specification, e.g. ``"distance(0, 1)"``.
    jacobian : {"none", "auto"}
        ``"auto"`` removes the distance Jacobian 4 pi r^2 from a distance's histogram.
    bins : int, optional
        Histogram bins (default: chosen from the data).
    n_blocks : int
        Blocks of the error estimate.
    start, stop, cache, progress
        As in :func:`phasewake.coordinates`.

    Returns
    -------
    FreeEnergyProfile
        ``centers`` (in ``unit``), F in kJ/mol with block errors, ``minima``, ``barriers``; ``.figure()``.

    Examples
    --------
    >>> import phasewake as pw
    >>> profile = pw.free_energy(pw.open(pw.sample_path("dimer_langevin.h5md")), "distance(0, 1)")
    >>> fig = profile.figure()
    """
    from phasewake.core.analyses.landscape import LandscapeRequest

    run = _run_of(run, "pw.free_energy")
    request = LandscapeRequest(coordinate=coordinate, jacobian=jacobian, bins=bins, n_blocks=n_blocks, start=start,
                               stop=stop)
    result: FreeEnergyProfile = _drive(_requested(run, request, cache), progress)
    return result


def crossings(runs: Run | Sequence[Run], coordinate: str, *, states: tuple[float, float] | None = None,
              surface: float | None = None, confidence: float = 0.95,
              kappa_window_ps: tuple[float, float] | None = None, temperature_K: float | None = None,
              start: int = 0, stop: int | None = None, cache: bool = True,
              progress: ProgressCallback | None = None) -> CrossingsResult:
    """Barrier crossings of a coordinate: core-set states, crossings and recrossings of the dividing
    surface, transition paths, dwell times, rates with intervals, transmission coefficients and the
    transition-state-theory comparison (``phasewake crossings``).

    Parameters
    ----------
    runs : Run or list of Run
        One run, or replicas of one system (their events pool).
    coordinate : str
        A coordinate specification, e.g. ``"distance(0, 1)"``.
    states : (float, float), optional
        Core sets in the coordinate's unit: A is q <= states[0], B is q >= states[1] (default:
        suggested from the free-energy profile).
    surface : float, optional
        Dividing surface in the coordinate's unit (default: the barrier top between the states).
    confidence : float
        Of the rate intervals.
    kappa_window_ps : (float, float), optional
        Plateau window of the transmission coefficient, in ps.
    temperature_K : float, optional
        For kT (default: the first run's thermostat target, as stated in :func:`phasewake.open`, else
        its mean kinetic temperature).
    start, stop : int
        Frames ``start`` up to ``stop`` (excluded) of every run.
    cache, progress
        As in :func:`phasewake.audit`.

    Returns
    -------
    CrossingsResult
        ``rate_ab``, ``rate_ba`` (per ps, with intervals), ``kappa`` (transmission coefficient),
        ``tst``, ``dwells``, ``events``, ``verdicts``; ``.figure()`` (dwell times, transmission).

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_langevin.h5md"))
    >>> result = pw.crossings(run, "distance(0, 1)")
    >>> result.n_transitions > 0
    True
    """
    from phasewake.core.analyses.crossings import CrossingsRequest
    from phasewake.core.errors import InputError
    from phasewake.core.model.run import Run

    all_runs = [_run_of(runs, "pw.crossings")] if isinstance(runs, Run) else [
        _run_of(r, "pw.crossings") for r in runs]
    if not all_runs:
        raise InputError("pw.crossings: no run given")
    # only what the caller gave: every default is the request's own, as on the command line
    given = {k: v for k, v in (("states", None if states is None else (float(states[0]), float(states[1]))),
                               ("surface", surface), ("confidence", confidence),
                               ("kappa_window_ps", kappa_window_ps), ("temperature_K", temperature_K))
             if v is not None}
    request = CrossingsRequest(coordinate=coordinate, replicas=tuple(all_runs[1:]), start=start, stop=stop, **given)
    work = _requested(all_runs[0], request, cache)
    result: CrossingsResult = _drive(work, progress)
    return result


def report(run: Run | Sequence[Run], path: str | Path, *, coordinate: str | None = None, html: bool = False,
           states: tuple[float, float] | None = None, surface: float | None = None, cache: bool = True,
           progress: ProgressCallback | None = None) -> ReportResult:
    """Write a multi-page PDF report of a run, with captions, for a group meeting (``phasewake report``).

    Parameters
    ----------
    run : Run or list of Run
        One run, or replicas of one system (``phasewake report --replicas``): the first run's pages,
        the crossings pooled over all of them and a page with one row per replica.
    path : str or Path
        The PDF to write (atomically; never over an input file).
    coordinate : str, optional
        Coordinate of the phase-portrait, correlation, sampling and crossings pages (default: the
        coordinate chosen for the run, with its reason).
    html : bool
        Also write an HTML page with the same content beside the PDF (same name, ``.html``).
    states, surface : optional
        Core sets and dividing surface of the crossings page, as in :func:`phasewake.crossings`.
    cache, progress
        As in :func:`phasewake.audit`.

    Returns
    -------
    ReportResult
        ``path``, ``html_path``, ``n_pages``, ``sections``, ``skipped`` (section, reason).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> import phasewake as pw
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> run = pw.open(pw.sample_path("dimer_langevin_r2.h5md"))
    >>> done = pw.report(run, folder / "langevin.pdf", coordinate="distance(0, 1)")
    >>> done.path.name, done.n_pages > 1
    ('langevin.pdf', True)
    """
    from phasewake.core.analyses.coordinates import stated_coordinate
    from phasewake.core.analyses.crossings.states import stated_states
    from phasewake.core.errors import InputError
    from phasewake.core.figures.report import build_report, report_targets
    from phasewake.core.model.run import Run
    from phasewake.core.readers.stated import stated_settings

    runs = [_run_of(run, "pw.report")] if isinstance(run, Run) else [_run_of(r, "pw.report") for r in run]
    if not runs:
        raise InputError("pw.report: no run given")
    run, replicas = runs[0], runs[1:]
    out, html_path = report_targets(path, html=html, inputs=tuple(p for r in runs for p in r.paths))
    states = stated_states(states, surface, option="states", surface_option="surface")
    if coordinate is not None:
        stated_coordinate(coordinate, run, option="coordinate")
    work = build_report(run, out, coordinate=coordinate, html_path=html_path, **stated_settings(run), states=states,
                        surface=surface, cache=_cache(cache), replicas=replicas)
    result: ReportResult = _drive(work, progress)
    return result
