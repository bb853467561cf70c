"""Energy conservation: conserved-quantity selection, drift, fluctuations and events.

Pure array kernels (``drift_fit``, ``energy_fluctuations``, events in energy_events.py,
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

from phasewake.core.analyses.correlation import statistical_inefficiency
from phasewake.core.analyses.energy_scan import (
    ENERGY_COLUMN,
    ENERGY_UNIT,
    TIME_COLUMN,
    TableScan,
    scan_columns,
)
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
                  "its own error bar. When the upper end of the interval is above the problem size and the "
                  "lower end below the caution size, the run cannot tell: the drift is shown as unresolved "
                  "(info), not ok; a problem whose slope is less than 3 standard errors from zero is a caution "
                  "(one in twenty of the 95 % intervals misses by chance). "
                  "When the engine states its own target (GROMACS verlet-buffer-tolerance, in kJ/mol/ps "
                  "per atom, read from md.log) and the whole interval lies within it, a problem becomes a "
                  "caution. A first row that differs from the next by a jump (a start before the first "
                  "constraint step) is left out of the fit.",
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
# Statistical inefficiency (of phasewake.core.analyses.correlation, on long series from stretches)
# ---------------------------------------------------------------------------------------------------


def _g_full(x: np.ndarray) -> tuple[float, str]:
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

    Uses ``phasewake.core.analyses.correlation.statistical_inefficiency`` (Sokal 1997 window). Series
    longer than ``window_above`` are estimated as the mean g of ``n_windows`` evenly spaced stretches of ``window`` samples (the FFT of
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
    common practice). Closed-form sums, no polyfit (faster on long series).

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


def _fit_scan(t: np.ndarray, y: np.ndarray) -> TableScan:
    return scan_columns({TIME_COLUMN: t, ENERGY_COLUMN: y}, cross=((TIME_COLUMN, ENERGY_COLUMN),), no_extremes=(TIME_COLUMN,))


def _line_fit(t: np.ndarray, y: np.ndarray, scan: TableScan | None = None) -> _LineFit:
    """Least-squares line from the centred sums of one blocked pass (``scan``: a :class:`TableScan`
    holding columns ``@time`` and ``@energy``; made here when not given).

    The residual sum of squares is S_yy - S_xy^2 / S_xx; when that cancels (residuals below 1e-6 of the
    spread, a nearly perfect line) it is summed again exactly from the residuals, in blocks.
    """
    if scan is None or not scan.finite or scan.n_rows != t.shape[0] or (TIME_COLUMN, ENERGY_COLUMN) not in scan.cross:
        scan = _fit_scan(t, y)
    it, iy = scan.index(TIME_COLUMN), scan.index(ENERGY_COLUMN)
    tmean, ymean = float(scan.mean[it]), float(scan.mean[iy])
    sxx, sxy, syy = float(scan.m2[it]), scan.cross[(TIME_COLUMN, ENERGY_COLUMN)], float(scan.m2[iy])
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
        key = SERIES_PREFIX + s.name
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


SERIES_PREFIX = "series:"  # prefix of the table series' names in the scan of an energy table


def scan_energy_table(time_ps: np.ndarray, energy_kJ_per_mol: np.ndarray,
                      table: EnergyTable | None = None) -> TableScan:
    """One blocked pass over the time, the judged energy and every numeric series of ``table``.

    The result feeds :func:`~phasewake.core.analyses.energy_events.find_energy_events`, :func:`drift_fit`, :func:`energy_fluctuations` and
    :func:`series_sampling` (``scan=``), which otherwise each pass over the columns themselves. Series of
    another length than the time are left out (their kernels sum them alone).
    """
    t = np.asarray(time_ps, dtype=np.float64)
    cols = {TIME_COLUMN: t, ENERGY_COLUMN: np.asarray(energy_kJ_per_mol, dtype=np.float64)}
    if table is not None:
        for s in table.series.values():
            v = np.asarray(s.values)
            if s.role not in ("time", "step") and v.shape == t.shape:
                cols[SERIES_PREFIX + s.name] = v
    return scan_columns(cols, diffs=(TIME_COLUMN, ENERGY_COLUMN), cross=((TIME_COLUMN, ENERGY_COLUMN),), no_extremes=(TIME_COLUMN,))
