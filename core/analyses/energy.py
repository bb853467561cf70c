"""Energy conservation: conserved-quantity selection, drift, fluctuations and events.

Pure array kernels (``drift_fit``, ``energy_fluctuations``, ``find_energy_events``,
``statistical_inefficiency_of``) plus :func:`select_conserved`, which picks the series to judge from an
:class:`~phasewake.core.model.run.EnergyTable` and says which one it picked. The Run adapter that runs all
checks is :func:`phasewake.core.analyses.audit.audit_run`.

Units: time ps, energies kJ/mol, temperatures K. Drift is reported per ns.

Every threshold used here is registered in :mod:`phasewake.core.analyses.verdicts` with its source; these are
heuristics (:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses.verdicts import Explanation, Threshold, register
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError, UnitError
from phasewake.core.model.run import EnergyTable
from phasewake.core.units import KB_KJ_PER_MOL_K

# ---------------------------------------------------------------------------------------------------
# Thresholds (all common practice unless a source is named) and explanations
# ---------------------------------------------------------------------------------------------------

register(
    Threshold("energy.fluctuation_ratio", caution=0.05, problem=0.1, unit="",
              source="common practice (sigma_E/sigma_K <= 0.01 good, <= 0.05 acceptable; 0.1 is a step of "
                     "about period/10 on a harmonic mode, Tuckerman 2010 eq. 3.13.3)",
              description="RMS of the detrended conserved energy over the RMS of the kinetic energy"),
    Explanation(
        title="Energy fluctuation ratio",
        what="How large the fluctuations of the conserved energy are compared with those of the kinetic "
             "energy. It does not depend on the arbitrary zero of the energy.",
        method="sigma_E = standard deviation of the conserved energy after removing a least-squares line; "
               "sigma_K = standard deviation of the kinetic energy; R = sigma_E / sigma_K. For velocity "
               "Verlet on a harmonic mode R = (omega dt)^2 / 4 (from the shadow Hamiltonian, Tuckerman 2010 "
               "eq. 3.13.3).",
        threshold="R <= 0.01 good, <= 0.05 acceptable (common practice, no citable source): a caution above "
                  "0.05, a problem above 0.1. On a harmonic mode R = (omega dt)^2/4, so 0.1 is a step of about a "
                  "tenth of the period, the usual limit; flexible bonds to hydrogen at 0.5 fs give about 0.02.",
        advice="Reduce the time step, constrain bonds to hydrogen, tighten constraint and integrator "
               "tolerances, or check the cut-off treatment (a smooth switch or shift removes jumps).",
    ),
)
register(
    Threshold("energy.drift", caution=0.01, problem=0.1, unit="kT/DOF/ns",
              source="common practice (drift in kT per degree of freedom per ns; no citable source)",
              description="lower end of the 95 % interval of |least-squares slope| of the conserved "
                          "energy, in kT per DOF per ns"),
    Explanation(
        title="Energy drift",
        what="The systematic change of the conserved energy over the run.",
        method="Ordinary least-squares slope of E(t). Its error bar is the OLS standard error inflated by "
               "sqrt(g), g the statistical inefficiency of the residuals (residuals are correlated). "
               "Reported in kJ/mol/ns, per atom, per degree of freedom and as kT per DOF per ns.",
        threshold="|drift| <= 0.01 kT/DOF/ns ok, <= 0.1 caution, above that a problem: common practice, "
                  "no citable source. The value judged is the lower end of the drift's 95 % interval "
                  "(|drift| - 1.96 error), so a drift is flagged only when it exceeds the threshold beyond "
                  "its own error bar.",
        advice="A steady drift usually means a too-large time step, loose constraint tolerances, "
               "cut-off artefacts, or single-precision accumulation. Compare with a run at half the step.",
    ),
)
register(
    Threshold("energy.jumps", caution=8.0, problem=20.0, unit="robust sigma",
              source="common practice (a step between frames far outside the spread of the steps)",
              description="largest frame-to-frame change of the energy in units of the robust spread "
                          "(1.4826 MAD) of all frame-to-frame changes"),
    Explanation(
        title="Energy jumps",
        what="Sudden steps in the energy between two frames: restarts, glued runs, a changed setting.",
        method="d_i = E_(i+1) - E_i; robust spread s = 1.4826 * median|d - median(d)|; a jump is "
               "|d_i - median(d)| > threshold * s. Each jump is located in time.",
        threshold="8 robust sigma caution, 20 problem: common practice.",
        advice="Look at the run's log near the reported times: restarts from checkpoints, concatenated "
               "pieces or a changed parameter. Analyse the pieces separately if they differ.",
    ),
)
register(
    Threshold("energy.nonfinite", caution=0.0, problem=0.0, unit="rows",
              source="common practice (any NaN or infinite energy is unusable)",
              description="number of rows with NaN or infinite energy"),
    Explanation(
        title="Non-finite energies",
        what="Rows where an energy is NaN or infinite: the integration blew up or the file is damaged.",
        method="Count of rows whose selected energy terms are not finite; the other checks skip them.",
        threshold="Any such row is a problem.",
        advice="Find the first bad time and inspect the frames before it (overlapping atoms, too-large "
               "step, bad restart).",
    ),
)
register(
    Threshold("energy.runaway", caution=3.0, problem=10.0, unit="",
              source="common practice (growth of the frame-to-frame energy noise over the run)",
              description="RMS frame-to-frame energy change in the last tenth over that in the first tenth"),
    Explanation(
        title="Runaway energy",
        what="Whether the energy noise grows over the run, the signature of an integration going unstable.",
        method="Ratio of the RMS of E_(i+1) - E_i in the last tenth of the run to that in the first tenth "
               "(insensitive to a steady drift).",
        threshold="3 caution, 10 problem: common practice.",
        advice="A growing noise means the integrator is becoming unstable: reduce the step and look for "
               "atoms coming too close.",
    ),
)
register(
    Threshold("time.gaps", caution=0.0, problem=10.0, unit="gaps",
              source="common practice (a spacing more than 1.5 times the median spacing)",
              description="number of time gaps"),
    Explanation(
        title="Time gaps",
        what="Places where the time between two rows is much larger than usual: missing output or glued runs.",
        method="Spacings larger than 1.5 times the median spacing, each located in time.",
        threshold="Any gap is a caution, more than 10 a problem: common practice.",
        advice="Check whether pieces are missing; time correlations across a gap are not meaningful.",
    ),
)
register(
    Threshold("time.overlaps", caution=0.0, problem=0.0, unit="rows",
              source="common practice (time must increase strictly)",
              description="number of repeated times or reversals"),
    Explanation(
        title="Time overlaps and reversals",
        what="Repeated times or time going backwards: typically a run restarted from an earlier checkpoint "
             "and appended.",
        method="Spacings <= 0 between consecutive rows, each located in time.",
        threshold="Any overlap or reversal is a problem: common practice.",
        advice="Remove the duplicated stretch (keep one continuous piece) before analysing.",
    ),
)


# ---------------------------------------------------------------------------------------------------
# Statistical inefficiency (correlation module when present, else a private Sokal-window estimator)
# ---------------------------------------------------------------------------------------------------


def _sokal_statistical_inefficiency(x: np.ndarray, c: float = 5.0) -> float:
    """g = 1 + 2 sum_k rho(k) with Sokal's automatic window (smallest M with M >= c * g(M)).

    Sokal, "Monte Carlo Methods in Statistical Mechanics", NATO ASI Series B 361 (1997). FFT
    autocovariance, zero-padded to avoid wrap-around, biased (divide by N) normalisation.
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    if n < 4:
        return 1.0
    y = x - x.mean()
    var = float(np.dot(y, y)) / n
    if not var > 0.0:
        return 1.0
    nfft = 1 << int(math.ceil(math.log2(2 * n)))
    f = np.fft.rfft(y, nfft)
    acov = np.fft.irfft(f * np.conj(f), nfft)[:n] / n
    rho = acov / acov[0]
    g_m = 1.0 + 2.0 * np.cumsum(rho[1:])
    m = np.arange(1, n)
    ok = np.nonzero(m >= c * g_m)[0]
    g = float(g_m[ok[0]]) if ok.size else float(g_m[-1])
    return max(1.0, g)


def _g_full(x: np.ndarray) -> tuple[float, str]:
    try:
        from phasewake.core.analyses.correlation import statistical_inefficiency
    except ImportError:
        return _sokal_statistical_inefficiency(x), "Sokal automatic window (c = 5), audit's own estimator"
    try:
        g = float(statistical_inefficiency(x))
    except AnalysisError:
        return 1.0, "constant series (g = 1)"
    return max(1.0, g), "phasewake.core.analyses.correlation.statistical_inefficiency (Sokal window)"


WINDOW_ABOVE = 1 << 21  # series longer than this get g from evenly spaced stretches
N_WINDOWS = 4
WINDOW = 1 << 19


def _windowed_g(piece: Callable[[int, int], np.ndarray], n: int, *, n_windows: int,
                window: int) -> tuple[float, str] | None:
    """Mean g over evenly spaced stretches; None when g is too large for them (50 g > window)."""
    starts = np.linspace(0, n - window, n_windows).astype(np.int64)
    gs = []
    method = ""
    for s0 in starts:
        g_i, method = _g_full(piece(int(s0), int(s0) + window))
        gs.append(g_i)
    g = float(np.mean(gs))
    if 50.0 * g <= window:
        return g, f"{method}, mean over {n_windows} stretches of {window} samples"
    return None


def statistical_inefficiency_of(x: np.ndarray, *, window_above: int = WINDOW_ABOVE, n_windows: int = N_WINDOWS,
                                window: int = WINDOW, value_range: float | None = None) -> tuple[float, str]:
    """Statistical inefficiency g (>= 1) of a series and the name of the estimator used.

    Uses ``phasewake.core.analyses.correlation.statistical_inefficiency`` when that module exists, else a
    private Sokal-window estimator (Sokal 1997, c = 5). Series longer than ``window_above`` are
    estimated as the mean g of ``n_windows`` evenly spaced stretches of ``window`` samples (the FFT of
    the whole series dominates the audit's cost otherwise); when g is too large for the stretches to
    hold 50 g samples (the rule emcee applies, Sokal 1997), the whole series is used.

    Parameters
    ----------
    x : ndarray, shape (n,)
    value_range : float, optional
        max(x) - min(x) when the caller knows it (saves a pass).

    Returns
    -------
    g : float, dimensionless, >= 1
    method : str
    """
    arr = np.asarray(x, dtype=np.float64)
    n = int(arr.shape[0])
    if n < 4 or not (float(np.ptp(arr)) if value_range is None else value_range) > 0.0:
        return 1.0, "constant or very short series (g = 1)"
    if n > window_above:
        got = _windowed_g(lambda a, b: arr[a:b], n, n_windows=n_windows, window=window)
        if got is not None:
            return got
    return _g_full(arr)


# ---------------------------------------------------------------------------------------------------
# Conserved quantity
# ---------------------------------------------------------------------------------------------------

ENERGY_UNIT = "kJ/mol"


@dataclass(frozen=True)
class ConservedSeries:
    """The energy series an audit judges, and why it was chosen.

    ``values_kJ_per_mol`` and ``time_ps`` have shape (n_rows,). ``expected_conserved`` is False when
    the run is thermostatted and the files give no conserved quantity or bath heat: then drift and
    fluctuation verdicts are not applicable.
    """

    time_ps: np.ndarray
    values_kJ_per_mol: np.ndarray
    label: str  # in words, e.g. "total energy (column 'total_energy')"
    columns: tuple[str, ...]
    expected_conserved: bool
    reason: str
    kinetic_kJ_per_mol: np.ndarray | None = None
    kinetic_column: str | None = None
    unit: str = ENERGY_UNIT


def _energy_values(table: EnergyTable, role: str) -> tuple[np.ndarray, str] | None:
    s = table.by_role(role)
    if s is None:
        return None
    if s.unit.replace(" ", "") not in ("kJ/mol", "kJmol-1", "kJ/mole"):
        raise UnitError(f"energy column '{s.name}' has unit '{s.unit}', expected kJ/mol after reading",
                        path=s.source.split(":")[0] or None)
    return np.asarray(s.values, dtype=np.float64), s.name


def select_conserved(table: EnergyTable, *, thermostatted: bool) -> ConservedSeries:
    """Pick the series whose conservation is judged.

    Order: a ``conserved`` column; for thermostatted runs total + ``bath_heat`` (the cumulative energy
    the thermostat removed, as the readers define it; Bussi, Donadio and Parrinello 2007 bookkeeping);
    for unthermostatted runs ``total``, else ``potential + kinetic``.

    Raises
    ------
    MissingDataError
        When the table has no usable energy column.
    """
    src = table.sources[0] if table.sources else None
    kin = _energy_values(table, "kinetic")
    pot = _energy_values(table, "potential")
    tot = _energy_values(table, "total")
    con = _energy_values(table, "conserved")
    heat = _energy_values(table, "bath_heat")
    kin_v, kin_c = (kin if kin is not None else (None, None))
    t = np.asarray(table.time_ps, dtype=np.float64)

    def made(values: np.ndarray, label: str, cols: tuple[str, ...], conserved: bool,
             reason: str) -> ConservedSeries:
        return ConservedSeries(time_ps=t, values_kJ_per_mol=values, label=label, columns=cols,
                               expected_conserved=conserved, reason=reason,
                               kinetic_kJ_per_mol=kin_v, kinetic_column=kin_c)

    total: tuple[np.ndarray, str, tuple[str, ...]] | None = None
    if tot is not None:
        total = (tot[0], f"total energy (column '{tot[1]}')", (tot[1],))
    elif pot is not None and kin is not None:
        total = (pot[0] + kin[0], f"potential + kinetic (columns '{pot[1]}' + '{kin[1]}')", (pot[1], kin[1]))

    if con is not None:
        return made(con[0], f"conserved energy (column '{con[1]}')", (con[1],), True,
                    "the file gives a conserved quantity")
    if thermostatted:
        if total is not None and heat is not None:
            return made(total[0] + heat[0], f"{total[1]} + bath heat (column '{heat[1]}')",
                        total[2] + (heat[1],), True,
                        "thermostatted run: total energy plus the heat the thermostat removed")
        if total is not None:
            return made(total[0], total[1], total[2], False,
                        "needs the thermostat's energy or the engine's conserved quantity: a thermostatted "
                        "run's total energy is not expected to be conserved")
    elif total is not None:
        return made(total[0], total[1], total[2], True, "unthermostatted run: the total energy is conserved")
    names = ", ".join(f"{s.name} ({s.role})" for s in table.series.values()) or "none"
    # no total: an energy series alone still shows jumps, non-finite rows and the time axis
    for role in ("potential", "kinetic", "total"):
        one = pot if role == "potential" else kin if role == "kinetic" else tot
        if one is not None:
            need = ("the thermostat's energy or the engine's conserved quantity" if thermostatted else
                    "a total energy, or potential and kinetic energy")
            return made(one[0], f"{role} energy (column '{one[1]}'; for jumps and the time axis only)",
                        (one[1],), False, f"needs {need} (found {names})")
    raise MissingDataError(
        "no usable energy column: need a conserved or total energy, or potential and kinetic energy; "
        f"found {names}", path=src)


# ---------------------------------------------------------------------------------------------------
# One blocked pass over the columns of a table (issue 9)
# ---------------------------------------------------------------------------------------------------

SCAN_BLOCK = 1 << 16  # rows per block: a few columns of a block stay in cache while they are summed


@dataclass(frozen=True)
class DiffScan:
    """Frame-to-frame differences d_i = x_(i+1) - x_i of one column, as seen by the pass.

    ``block_min`` / ``block_max`` (n_blocks,) bound the differences of each block of rows (block b covers
    d indices max(b B - 1, 0) .. (b + 1) B - 2), so only blocks that can hold an event are looked at
    again; ``sample`` is d[::stride] (the even subsample the robust medians use).
    """

    block_min: np.ndarray
    block_max: np.ndarray
    sample: np.ndarray
    stride: int


@dataclass(frozen=True)
class TableScan:
    """Moments of equally long float64 columns from one blocked pass (:func:`scan_columns`).

    ``mean``, ``m2`` (centred sums of squares), ``minimum``, ``maximum``: shape (C,), in the columns'
    units (squared for ``m2``); ``cross`` maps the pairs asked for to their centred cross sums
    sum_i (x_i - mean_x)(y_i - mean_y). ``finite`` is False when any value is NaN or infinite: then
    the moments are not usable and the callers take their masked routes.
    """

    n_rows: int
    names: tuple[str, ...]
    mean: np.ndarray
    m2: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    cross: dict[tuple[str, str], float]
    finite: bool
    diffs: dict[str, DiffScan]
    block_rows: int

    def index(self, name: str) -> int:
        return self.names.index(name)

    def std(self, name: str) -> float:
        """Population standard deviation of a column."""
        return math.sqrt(max(float(self.m2[self.index(name)]), 0.0) / self.n_rows)


def scan_columns(columns: dict[str, np.ndarray], *, diffs: tuple[str, ...] = (),
                 cross: tuple[tuple[str, str], ...] = (), no_extremes: tuple[str, ...] = (),
                 robust_sample: int = 1 << 20, block: int = SCAN_BLOCK) -> TableScan:
    """Means, extremes, centred sums of squares and cross sums of columns, and difference bounds, in one pass.

    Per block of rows (in cache) every column is shifted by a reference value (the mean of an even
    subsample, so the shifted sums do not cancel) and its sum and sum of squares taken; the cross sums
    of the pairs in ``cross`` likewise. Centred sums follow as S_xy - n m_x m_y of the shifted means
    m (Chan, Golub and LeVeque 1983: with the shift within a few standard deviations of the mean the
    error is that of the two-pass sums). The differences of the columns in ``diffs`` are made per
    block too. Dot products run with one BLAS thread.

    Parameters
    ----------
    columns : dict name -> ndarray, shape (n,), float64
    diffs : names of columns whose differences are scanned
    cross : pairs of names whose centred cross sums are wanted
    no_extremes : names of columns whose minimum and maximum are not needed (reported as NaN)
    robust_sample : int
        The difference subsample holds at most this many values, every ceil((n - 1) / robust_sample)-th.
    block : int
        Rows per block.
    """
    from phasewake.core.analyses.correlation import one_blas_thread

    names = tuple(columns)
    cols = [np.asarray(columns[k], dtype=np.float64) for k in names]
    n = int(cols[0].shape[0]) if cols else 0
    c = len(cols)
    if any(x.shape != (n,) for x in cols):
        raise AnalysisError("the columns of one scan must be 1D and equally long")
    stride_sub = max(1, n // 1024)
    with np.errstate(invalid="ignore", over="ignore"):
        shift = np.array([float(np.mean(x[::stride_sub])) if n else 0.0 for x in cols])
    if not np.all(np.isfinite(shift)):
        shift = np.zeros(c)  # a non-finite value in the subsample: the pass reports it below
    pairs = [(names.index(a), names.index(b)) for a, b in cross]
    extremes = [k not in no_extremes for k in names]
    nd = max(n - 1, 0)
    dstride = int(math.ceil(nd / robust_sample)) if nd > robust_sample else 1
    n_blocks = -(-n // block) if n else 0
    dsc = {k: (np.full(n_blocks, np.inf), np.full(n_blocks, -np.inf), np.empty(-(-nd // dstride) if nd else 0))
           for k in diffs}
    sums = np.zeros(c)
    sq = np.zeros(c)
    xy = np.zeros(len(pairs))
    lo = np.full(c, np.inf)
    hi = np.full(c, -np.inf)
    width = min(block, max(n, 1))
    buf = np.empty((c, width))
    dbuf = np.empty(width)
    # non-finite values only make the sums non-finite (reported as finite=False): no warnings for them
    with one_blas_thread(), np.errstate(invalid="ignore", over="ignore"):
        for b in range(n_blocks):
            a0, a1 = b * block, min(n, (b + 1) * block)
            m = a1 - a0
            for j, col in enumerate(cols):
                raw = col[a0:a1]
                if extremes[j]:
                    lo[j] = min(lo[j], raw.min())
                    hi[j] = max(hi[j], raw.max())
                x = np.subtract(raw, shift[j], out=buf[j, :m])
                sums[j] += x.sum()
                sq[j] += np.vecdot(x, x)
            for q, (ja, jb) in enumerate(pairs):
                xy[q] += np.vecdot(buf[ja, :m], buf[jb, :m])
            for k in diffs:
                col = cols[names.index(k)]
                d0 = max(a0 - 1, 0)
                if a1 - d0 < 2:
                    continue
                d = np.subtract(col[d0 + 1:a1], col[d0:a1 - 1], out=dbuf[:a1 - d0 - 1])
                bmin, bmax, sub = dsc[k]
                bmin[b] = d.min()
                bmax[b] = d.max()
                first = -(-d0 // dstride) * dstride
                if first < d0 + d.size:
                    got = d[first - d0 :: dstride]
                    sub[first // dstride : first // dstride + got.size] = got
    ext = np.array(extremes, dtype=bool)
    finite = bool(np.all(np.isfinite(sums)) and np.all(np.isfinite(sq)) and np.all(np.isfinite(lo[ext]))
                  and np.all(np.isfinite(hi[ext])))
    lo[~ext] = np.nan
    hi[~ext] = np.nan
    mu = sums / n if n else sums
    with np.errstate(invalid="ignore", over="ignore"):
        m2 = sq - n * mu * mu
        xc = {cross[q]: float(xy[q] - n * mu[ja] * mu[jb]) for q, (ja, jb) in enumerate(pairs)}
    return TableScan(n_rows=n, names=names, mean=shift + mu, m2=m2, minimum=lo, maximum=hi, cross=xc,
                     finite=finite, diffs={k: DiffScan(v[0], v[1], v[2], dstride) for k, v in dsc.items()},
                     block_rows=block)


def fast_median(x: np.ndarray, *, overwrite: bool = False) -> float:
    """np.median of a finite 1D array by one partition (np.median partitions at two ranks plus a NaN check).

    ``overwrite``: partition ``x`` itself (a float64 array the caller no longer needs) instead of a copy.
    """
    a = np.asarray(x, dtype=np.float64)
    n = a.size
    h = n // 2
    if overwrite and a is x:
        a.partition(h)
        part = a
    else:
        part = np.partition(a, h)
    if n % 2:
        return float(part[h])
    return float((part[:h].max() + part[h]) / 2.0)


# ---------------------------------------------------------------------------------------------------
# Drift
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class DriftResult:
    """Least-squares drift of an energy series with a correlation-corrected error bar.

    Per-atom / per-DOF / kT-per-DOF numbers are None when ``n_atoms`` / ``n_dof`` / ``temperature_K``
    were not given.
    """

    slope_kJ_per_mol_per_ns: float
    slope_error_kJ_per_mol_per_ns: float  # OLS standard error inflated by sqrt(g)
    slope_error_ols_kJ_per_mol_per_ns: float  # plain OLS standard error (too small when correlated)
    z_score: float  # slope / error
    significant: bool  # |z| > significance_z
    residual_statistical_inefficiency: float
    error_method: str
    intercept_kJ_per_mol: float
    n_samples: int
    duration_ps: float
    slope_per_atom_kJ_per_mol_per_ns: float | None
    slope_per_dof_kJ_per_mol_per_ns: float | None
    slope_kT_per_dof_per_ns: float | None
    settings: dict[str, Any] = field(default_factory=dict)


def drift_fit(
    time_ps: np.ndarray,
    energy_kJ_per_mol: np.ndarray,
    *,
    n_atoms: int | None = None,
    n_dof: int | None = None,
    temperature_K: float | None = None,
    significance_z: float = 3.0,
    scan: TableScan | None = None,
) -> DriftResult:
    """Fit E(t) = E0 + s t by ordinary least squares; error bar corrected for correlated residuals.

    The OLS standard error assumes independent residuals; MD residuals are correlated, so it is
    multiplied by sqrt(g), g the statistical inefficiency of the residuals (common practice;
    common practice). Closed-form sums, no polyfit (PERFORMANCE.md).

    Parameters
    ----------
    time_ps : ndarray, shape (n,), ps
    energy_kJ_per_mol : ndarray, shape (n,), kJ/mol; must be finite
    n_atoms, n_dof : int, optional
        For per-atom and per-degree-of-freedom drifts.
    temperature_K : float, optional
        For the drift in kT per DOF per ns (needs ``n_dof`` too).
    significance_z : float
        |slope| / error above which the drift is called significant.
    scan : TableScan, optional
        A finite scan of these arrays (:func:`scan_energy_table`), so the sums are not made again.
    """
    t = np.asarray(time_ps, dtype=np.float64)
    e = np.asarray(energy_kJ_per_mol, dtype=np.float64)
    n = int(e.shape[0])
    if n < 3:
        raise TooShortError("an energy drift fit", have=n, need=3)
    fit = _line_fit(t, e, scan)
    if not fit.sxx > 0.0:
        raise TooShortError("an energy drift fit over distinct times", have=1, need=2)
    slope = fit.slope  # kJ/mol/ps
    emean = fit.ymean
    s2 = fit.ssr / (n - 2)
    se_ols = math.sqrt(s2 / fit.sxx)
    got = None
    if n > WINDOW_ABOVE:
        got = _windowed_g(fit.residuals, n, n_windows=N_WINDOWS, window=WINDOW)
    g, method = got if got is not None else statistical_inefficiency_of(fit.residuals(0, n))
    se = se_ols * math.sqrt(g)
    z = slope / se if se > 0 else (math.inf if slope != 0 else 0.0)
    slope_ns = slope * 1e3
    per_atom = slope_ns / n_atoms if n_atoms else None
    per_dof = slope_ns / n_dof if n_dof else None
    kt_dof = None
    if n_dof and temperature_K:
        kt_dof = slope_ns / (n_dof * KB_KJ_PER_MOL_K * temperature_K)
    return DriftResult(
        slope_kJ_per_mol_per_ns=slope_ns,
        slope_error_kJ_per_mol_per_ns=se * 1e3,
        slope_error_ols_kJ_per_mol_per_ns=se_ols * 1e3,
        z_score=float(z),
        significant=bool(abs(z) > significance_z),
        residual_statistical_inefficiency=g,
        error_method=f"OLS standard error x sqrt(g); g by {method}",
        intercept_kJ_per_mol=emean - slope * fit.tmean,
        n_samples=n,
        duration_ps=float(t[-1] - t[0]),
        slope_per_atom_kJ_per_mol_per_ns=per_atom,
        slope_per_dof_kJ_per_mol_per_ns=per_dof,
        slope_kT_per_dof_per_ns=kt_dof,
        settings={"n_atoms": n_atoms, "n_dof": n_dof, "temperature_K": temperature_K,
                  "significance_z": significance_z},
    )


# ---------------------------------------------------------------------------------------------------
# Fluctuations
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FluctuationResult:
    """RMS fluctuation of the detrended conserved energy and the ratio to the kinetic energy's."""

    sigma_total_kJ_per_mol: float  # std of E after removing the least-squares line
    sigma_kinetic_kJ_per_mol: float | None  # std of K
    ratio: float | None  # sigma_total / sigma_kinetic, dimensionless
    n_samples: int
    settings: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class _LineFit:
    t: np.ndarray
    y: np.ndarray
    tmean: float
    ymean: float
    sxx: float
    sxy: float
    ssr: float  # sum of squared residuals

    @property
    def slope(self) -> float:
        return self.sxy / self.sxx if self.sxx > 0 else 0.0

    def residuals(self, a: int, b: int) -> np.ndarray:
        """Residuals of rows a..b-1, shape (b - a,)."""
        r = self.y[a:b] - self.ymean
        r -= self.slope * (self.t[a:b] - self.tmean)
        return r


_FIT_BLOCK = 1 << 16  # rows per block of the exact residual sums


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """Dot product of two blocks without BLAS: many short multithreaded BLAS calls cost far more in
    thread synchronisation than they compute on a busy machine (a 1e7-row fit took 1.7 s instead of
    0.05 s in 65536-row blocks)."""
    return float(np.einsum("i,i->", a, b))


_T, _Y = "@time", "@energy"  # column names of the time and the judged energy in a scan


def _fit_scan(t: np.ndarray, y: np.ndarray) -> TableScan:
    return scan_columns({_T: t, _Y: y}, cross=((_T, _Y),), no_extremes=(_T,))


def _line_fit(t: np.ndarray, y: np.ndarray, scan: TableScan | None = None) -> _LineFit:
    """Least-squares line from the centred sums of one blocked pass (``scan``: a :class:`TableScan`
    holding columns ``@time`` and ``@energy``; made here when not given).

    The residual sum of squares is S_yy - S_xy^2 / S_xx; when that cancels (residuals below 1e-6 of the
    spread, a nearly perfect line) it is summed again exactly from the residuals, in blocks.
    """
    if scan is None or not scan.finite or scan.n_rows != t.shape[0] or (_T, _Y) not in scan.cross:
        scan = _fit_scan(t, y)
    it, iy = scan.index(_T), scan.index(_Y)
    tmean, ymean = float(scan.mean[it]), float(scan.mean[iy])
    sxx, sxy, syy = float(scan.m2[it]), scan.cross[(_T, _Y)], float(scan.m2[iy])
    slope = sxy / sxx if sxx > 0 else 0.0
    ssr = syy - slope * sxy
    if not ssr > 1e-6 * syy:
        ssr = 0.0
        for a in range(0, t.shape[0], _FIT_BLOCK):
            r = y[a:a + _FIT_BLOCK] - ymean
            r -= slope * (t[a:a + _FIT_BLOCK] - tmean)
            ssr += _dot(r, r)
    return _LineFit(t=t, y=y, tmean=tmean, ymean=ymean, sxx=sxx, sxy=sxy, ssr=max(ssr, 0.0))


def detrended_std(time_ps: np.ndarray, values: np.ndarray, *, scan: TableScan | None = None) -> float:
    """Standard deviation of ``values`` after removing a least-squares line in ``time_ps``.

    ``scan``: a finite :class:`TableScan` of these arrays as columns ``@time`` and ``@energy`` (from
    :func:`scan_energy_table`), so the sums are not made again.
    """
    t = np.asarray(time_ps, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    fit = _line_fit(t, y, scan)
    return math.sqrt(fit.ssr / y.shape[0])


def energy_fluctuations(
    time_ps: np.ndarray,
    energy_kJ_per_mol: np.ndarray,
    kinetic_kJ_per_mol: np.ndarray | None = None,
    *,
    scan: TableScan | None = None,
    kinetic_column: str | None = None,
) -> FluctuationResult:
    """sigma_E (detrended), sigma_K and R = sigma_E / sigma_K.

    For velocity Verlet on a harmonic oscillator R = (omega dt)^2 / 4, derived from the shadow
    Hamiltonian of Tuckerman 2010, eq. 3.13.3.

    Parameters
    ----------
    time_ps : ndarray, shape (n,), ps
    energy_kJ_per_mol : ndarray, shape (n,), kJ/mol
    kinetic_kJ_per_mol : ndarray, shape (n,), kJ/mol, optional
    scan : TableScan, optional
        A finite scan of these arrays (:func:`scan_energy_table`); ``kinetic_column`` names the kinetic
        energy's column in it (else its spread is summed here).
    """
    e = np.asarray(energy_kJ_per_mol, dtype=np.float64)
    n = int(e.shape[0])
    if n < 3:
        raise TooShortError("an energy fluctuation estimate", have=n, need=3)
    se = detrended_std(time_ps, e, scan=scan)
    sk = ratio = None
    if kinetic_kJ_per_mol is not None:
        if (scan is not None and scan.finite and scan.n_rows == e.shape[0] and kinetic_column is not None
                and kinetic_column in scan.names):
            sk = scan.std(kinetic_column)
        else:
            k = np.asarray(kinetic_kJ_per_mol, dtype=np.float64)
            sk = scan_columns({"k": k}, no_extremes=("k",)).std("k")
        ratio = se / sk if sk > 0 else math.inf
    return FluctuationResult(sigma_total_kJ_per_mol=se, sigma_kinetic_kJ_per_mol=sk, ratio=ratio,
                             n_samples=n, settings={"detrend": "least-squares line"})


# ---------------------------------------------------------------------------------------------------
# Events
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EnergyEvent:
    """One located event: ``kind`` in nonfinite, jump, gap, overlap, reversal, runaway."""

    kind: str
    index: int  # row index (for a spacing event: the row after the spacing)
    time_ps: float
    size: float
    unit: str
    description: str


@dataclass(frozen=True)
class EventsResult:
    events: tuple[EnergyEvent, ...]
    n_nonfinite: int
    n_jumps: int
    n_gaps: int
    n_overlaps: int  # repeated times and reversals
    max_jump_robust_sigma: float  # largest |d - median d| / robust spread; 0 when too short
    runaway_ratio: float | None  # RMS step noise last tenth / first tenth
    median_spacing_ps: float | None
    settings: dict[str, Any] = field(default_factory=dict)


def find_energy_events(
    time_ps: np.ndarray,
    energy_kJ_per_mol: np.ndarray,
    *,
    jump_robust_sigma: float = 8.0,
    gap_factor: float = 1.5,
    max_listed: int = 50,
    robust_sample: int = 1 << 20,
    scan: TableScan | None = None,
) -> EventsResult:
    """Locate non-finite rows, jumps, time gaps/overlaps/reversals and a runaway trend.

    Parameters
    ----------
    time_ps : ndarray, shape (n,), ps
    energy_kJ_per_mol : ndarray, shape (n,), kJ/mol (may contain NaN/inf)
    jump_robust_sigma : float
        A frame-to-frame change this many robust spreads from the median change is a jump.
    gap_factor : float
        A spacing above this many median spacings is a gap.
    max_listed : int
        At most this many events of each kind are listed (all are counted).
    robust_sample : int
        Median and MAD of the steps come from at most this many evenly spaced steps.
    scan : TableScan, optional
        A scan of these arrays from :func:`scan_energy_table` (made here when not given). When every
        value is finite the events come from it (one pass; only blocks whose bounds can hold an event are
        looked at again), else from the masked arrays.
    """
    t = np.asarray(time_ps, dtype=np.float64)
    e = np.asarray(energy_kJ_per_mol, dtype=np.float64)
    settings = {"jump_robust_sigma": jump_robust_sigma, "gap_factor": gap_factor, "max_listed": max_listed,
                "robust_sample": robust_sample}
    if scan is None or scan.n_rows != e.shape[0] or _Y not in scan.diffs or _T not in scan.diffs:
        scan = scan_columns({_T: t, _Y: e}, diffs=(_T, _Y), no_extremes=(_T,), robust_sample=robust_sample)
    if scan.finite and e.shape[0] >= 2:
        return _events_from_scan(t, e, scan, jump_robust_sigma=jump_robust_sigma, gap_factor=gap_factor,
                                 max_listed=max_listed, settings=settings)
    return _events_masked(t, e, jump_robust_sigma=jump_robust_sigma, gap_factor=gap_factor, max_listed=max_listed,
                          robust_sample=robust_sample, settings=settings)


def _events_masked(t: np.ndarray, e: np.ndarray, *, jump_robust_sigma: float, gap_factor: float, max_listed: int,
                   robust_sample: int, settings: dict[str, Any]) -> EventsResult:
    """:func:`find_energy_events` on whole arrays with non-finite rows masked out (several passes)."""
    events: list[EnergyEvent] = []

    good = np.isfinite(e)
    bad = np.flatnonzero(~good) if not good.all() else np.zeros(0, np.int64)
    for i in bad[:max_listed]:
        events.append(EnergyEvent("nonfinite", int(i), float(t[i]), float(e[i]) if not np.isnan(e[i]) else math.nan,
                                  ENERGY_UNIT, f"non-finite energy at t = {t[i]:.6g} ps"))

    dt = np.diff(t)
    median_dt: float | None = None
    n_gaps = n_over = 0
    if dt.size:
        dsub = dt if dt.size <= robust_sample else dt[:: int(math.ceil(dt.size / robust_sample))]
        pos = dsub[dsub > 0]
        median_dt = float(np.median(pos)) if pos.size else None
        over = np.nonzero(dt <= 0)[0]
        n_over = int(over.size)
        for i in over[:max_listed]:
            kind = "overlap" if dt[i] == 0 else "reversal"
            events.append(EnergyEvent(kind, int(i + 1), float(t[i + 1]), float(dt[i]), "ps",
                                      f"time {'repeats' if kind == 'overlap' else 'goes back'} at row {i + 1}: "
                                      f"{t[i]:.6g} ps -> {t[i + 1]:.6g} ps"))
        if median_dt is not None:
            gaps = np.nonzero(dt > gap_factor * median_dt)[0]
            n_gaps = int(gaps.size)
            for i in gaps[:max_listed]:
                events.append(EnergyEvent("gap", int(i + 1), float(t[i + 1]), float(dt[i]), "ps",
                                          f"gap of {dt[i]:.6g} ps (median spacing {median_dt:.6g} ps) "
                                          f"before t = {t[i + 1]:.6g} ps"))

    if bad.size:
        ef, tf = e[good], t[good]
        idx = np.nonzero(good)[0]
    else:  # the usual case: no copies of long series
        ef, tf = e, t
        idx = None  # row numbers are the positions themselves
    max_jump = 0.0
    n_jumps = 0
    runaway: float | None = None
    if ef.size >= 5:
        d = np.diff(ef)
        # robust centre and spread; on very long series from an even subsample (medians are the cost)
        sub = d if d.size <= robust_sample else d[:: int(math.ceil(d.size / robust_sample))]
        med = float(np.median(sub))
        s = 1.4826 * float(np.median(np.abs(sub - med)))
        floor = 1e-12 * max(1.0, float(ef.max()), -float(ef.min()))
        s = max(s, floor)
        # |d - med| / s from the extremes and two comparisons: no full-length float temporaries
        max_jump = max(float(d.max()) - med, med - float(d.min())) / s
        band = jump_robust_sigma * s * (1.0 - 1e-9)  # a little inside, then the exact rule below
        jumps = np.flatnonzero((d > med + band) | (d < med - band))
        jumps = jumps[np.abs(d[jumps] - med) / s > jump_robust_sigma]  # the exact rule at the border
        score_j = np.abs(d[jumps] - med) / s
        n_jumps = int(jumps.size)
        for r in np.argsort(-score_j)[:max_listed]:
            j = jumps[r]
            events.append(EnergyEvent("jump", int(j + 1 if idx is None else idx[j + 1]), float(tf[j + 1]), float(d[j]), ENERGY_UNIT,
                                      f"energy step of {d[j]:.6g} kJ/mol ({score_j[r]:.1f} robust sigma) at "
                                      f"t = {tf[j + 1]:.6g} ps"))
        tenth = d.size // 10
        if tenth >= 2:
            first = float(np.sqrt(np.mean((d[:tenth] - med) ** 2)))
            last = float(np.sqrt(np.mean((d[-tenth:] - med) ** 2)))
            runaway = last / max(first, floor)
            if runaway > 3.0:
                events.append(EnergyEvent("runaway", int(e.size - 1 if idx is None else idx[-1]), float(tf[-1]), runaway, "",
                                          f"frame-to-frame energy noise grew {runaway:.3g}-fold from the "
                                          "first to the last tenth of the run"))
    events.sort(key=lambda ev: (ev.time_ps if math.isfinite(ev.time_ps) else math.inf, ev.kind))
    return EventsResult(events=tuple(events), n_nonfinite=int(bad.size), n_jumps=n_jumps, n_gaps=n_gaps,
                        n_overlaps=n_over, max_jump_robust_sigma=max_jump, runaway_ratio=runaway,
                        median_spacing_ps=median_dt, settings=settings)


def _rows_of_blocks(flag: np.ndarray, block: int, n_diffs: int) -> list[tuple[int, int]]:
    """d-index ranges [lo, hi) of the flagged blocks of a scan (block b: max(bB - 1, 0) .. (b + 1)B - 2)."""
    out = []
    for b in np.flatnonzero(flag):
        lo = max(int(b) * block - 1, 0)
        hi = min((int(b) + 1) * block - 1, n_diffs)
        if hi > lo:
            out.append((lo, hi))
    return out


def _events_from_scan(t: np.ndarray, e: np.ndarray, scan: TableScan, *, jump_robust_sigma: float,
                      gap_factor: float, max_listed: int, settings: dict[str, Any]) -> EventsResult:
    """:func:`find_energy_events` for finite arrays from a scan: the same rules, the same events."""
    events: list[EnergyEvent] = []
    n = e.shape[0]
    nd = n - 1
    B = scan.block_rows
    dt_s, de_s = scan.diffs[_T], scan.diffs[_Y]
    # time spacings: overlaps/reversals (d <= 0) and gaps, looked for only in blocks that can hold one
    pos = dt_s.sample[dt_s.sample > 0]  # a copy: partitioned in place below
    median_dt = fast_median(pos, overwrite=True) if pos.size else None
    over_l: list[np.ndarray] = []
    for lo, hi in _rows_of_blocks(dt_s.block_min <= 0, B, nd):
        dt = np.diff(t[lo:hi + 1])
        over_l.append(lo + np.nonzero(dt <= 0)[0])
    over = np.concatenate(over_l) if over_l else np.zeros(0, np.int64)
    over = np.unique(over)  # neighbouring blocks share one spacing
    n_over = int(over.size)
    for i in over[:max_listed]:
        dti = float(t[i + 1] - t[i])
        kind = "overlap" if dti == 0 else "reversal"
        events.append(EnergyEvent(kind, int(i + 1), float(t[i + 1]), dti, "ps",
                                  f"time {'repeats' if kind == 'overlap' else 'goes back'} at row {i + 1}: "
                                  f"{t[i]:.6g} ps -> {t[i + 1]:.6g} ps"))
    n_gaps = 0
    if median_dt is not None:
        lim = gap_factor * median_dt
        gap_l = []
        for lo, hi in _rows_of_blocks(dt_s.block_max > lim, B, nd):
            dt = np.diff(t[lo:hi + 1])
            gap_l.append(lo + np.nonzero(dt > lim)[0])
        gaps = np.unique(np.concatenate(gap_l)) if gap_l else np.zeros(0, np.int64)
        n_gaps = int(gaps.size)
        for i in gaps[:max_listed]:
            dti = float(t[i + 1] - t[i])
            events.append(EnergyEvent("gap", int(i + 1), float(t[i + 1]), dti, "ps",
                                      f"gap of {dti:.6g} ps (median spacing {median_dt:.6g} ps) "
                                      f"before t = {t[i + 1]:.6g} ps"))
    max_jump = 0.0
    n_jumps = 0
    runaway: float | None = None
    if n >= 5:
        sub = de_s.sample
        med = fast_median(sub)
        dev = np.subtract(sub, med)
        s = 1.4826 * fast_median(np.abs(dev, out=dev), overwrite=True)
        ie = scan.index(_Y)
        floor = 1e-12 * max(1.0, float(scan.maximum[ie]), -float(scan.minimum[ie]))
        s = max(s, floor)
        dmax, dmin = float(de_s.block_max.max()), float(de_s.block_min.min())
        max_jump = max(dmax - med, med - dmin) / s
        band = jump_robust_sigma * s * (1.0 - 1e-9)  # a little inside, then the exact rule below
        flag = (de_s.block_max > med + band) | (de_s.block_min < med - band)
        jl: list[np.ndarray] = []
        for lo, hi in _rows_of_blocks(flag, B, nd):
            d = np.diff(e[lo:hi + 1])
            j = np.flatnonzero((d > med + band) | (d < med - band))
            jl.append(lo + j[np.abs(d[j] - med) / s > jump_robust_sigma])  # the exact rule at the border
        jumps = np.unique(np.concatenate(jl)) if jl else np.zeros(0, np.int64)
        dj = e[jumps + 1] - e[jumps]
        score_j = np.abs(dj - med) / s
        n_jumps = int(jumps.size)
        for r in np.argsort(-score_j)[:max_listed]:
            jr = int(jumps[r])
            events.append(EnergyEvent("jump", jr + 1, float(t[jr + 1]), float(dj[r]), ENERGY_UNIT,
                                      f"energy step of {dj[r]:.6g} kJ/mol ({score_j[r]:.1f} robust sigma) at "
                                      f"t = {t[jr + 1]:.6g} ps"))
        tenth = nd // 10
        if tenth >= 2:
            def rms(d: np.ndarray) -> float:  # sqrt(mean((d - med)^2)) without further temporaries
                d -= med
                return float(np.sqrt(np.mean(np.square(d, out=d))))

            first = rms(np.diff(e[:tenth + 1]))
            last = rms(np.diff(e[nd - tenth:]))
            runaway = last / max(first, floor)
            if runaway > 3.0:
                events.append(EnergyEvent("runaway", int(n - 1), float(t[-1]), runaway, "",
                                          f"frame-to-frame energy noise grew {runaway:.3g}-fold from the "
                                          "first to the last tenth of the run"))
    events.sort(key=lambda ev: (ev.time_ps if math.isfinite(ev.time_ps) else math.inf, ev.kind))
    return EventsResult(events=tuple(events), n_nonfinite=0, n_jumps=n_jumps, n_gaps=n_gaps,
                        n_overlaps=n_over, max_jump_robust_sigma=max_jump, runaway_ratio=runaway,
                        median_spacing_ps=median_dt, settings=settings)


# ---------------------------------------------------------------------------------------------------
# Effective sample sizes of energy-table series
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SeriesSampling:
    """Mean, spread and effective sample size of one energy-table series."""

    name: str
    role: str
    unit: str
    mean: float
    std: float
    n_samples: int
    statistical_inefficiency: float
    effective_samples: float  # n / g
    standard_error_of_mean: float  # std * sqrt(g / n), in ``unit``
    method: str


def series_sampling(table: EnergyTable, *, scan: TableScan | None = None) -> tuple[SeriesSampling, ...]:
    """g and N_eff = n/g of every numeric series in an energy table (time and step excluded).

    ``scan``: a finite :class:`TableScan` holding the series under their names (from
    :func:`scan_energy_table`): their means, spreads and ranges are not summed again.
    """
    out: list[SeriesSampling] = []
    for s in table.series.values():
        if s.role in ("time", "step"):
            continue
        v = np.asarray(s.values, dtype=np.float64)
        key = _SERIES + s.name
        if scan is not None and scan.finite and key in scan.names and v.size == scan.n_rows:
            i = scan.index(key)
            if v.size < 4:
                continue
            g, method = statistical_inefficiency_of(v, value_range=float(scan.maximum[i] - scan.minimum[i]))
            mean, sd = float(scan.mean[i]), scan.std(key)
        else:
            fin = np.isfinite(v)
            if not fin.all():  # a copy only when there is something to drop
                v = v[fin]
            if v.size < 4:
                continue
            one = scan_columns({"v": v})
            g, method = statistical_inefficiency_of(v, value_range=float(one.maximum[0] - one.minimum[0]))
            mean, sd = float(one.mean[0]), one.std("v")
        out.append(SeriesSampling(name=s.name, role=s.role, unit=s.unit, mean=mean, std=sd,
                                  n_samples=int(v.size), statistical_inefficiency=g,
                                  effective_samples=float(v.size / g),
                                  standard_error_of_mean=sd * math.sqrt(g / v.size), method=method))
    return tuple(out)


_SERIES = "series:"  # prefix of the table series' names in the scan of an energy table


def scan_energy_table(time_ps: np.ndarray, energy_kJ_per_mol: np.ndarray,
                      table: EnergyTable | None = None) -> TableScan:
    """One blocked pass over the time, the judged energy and every numeric series of ``table``.

    The result feeds :func:`find_energy_events`, :func:`drift_fit`, :func:`energy_fluctuations` and
    :func:`series_sampling` (``scan=``), which otherwise each pass over the columns themselves. Series of
    another length than the time are left out (their kernels sum them alone).
    """
    t = np.asarray(time_ps, dtype=np.float64)
    cols = {_T: t, _Y: np.asarray(energy_kJ_per_mol, dtype=np.float64)}
    if table is not None:
        for s in table.series.values():
            v = np.asarray(s.values)
            if s.role not in ("time", "step") and v.shape == t.shape:
                cols[_SERIES + s.name] = v
    return scan_columns(cols, diffs=(_T, _Y), cross=((_T, _Y),), no_extremes=(_T,))
