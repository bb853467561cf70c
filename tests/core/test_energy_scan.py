"""The energy audit's one-pass route against numpy and against the masked multi-pass route.

References: numpy's own mean / var / min / max / polyfit / median (outside the project), and the
previous float64 route of the events (``events_masked`` in tests/core/energy_events_reference.py, the code
that ran before the scan).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from phasewake.core.analyses import energy as en
from phasewake.core.analyses import energy_events as en_events
from phasewake.core.analyses.energy_scan import ENERGY_COLUMN, TIME_COLUMN, fast_median, scan_columns
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from tests.core.energy_events_reference import events_masked


def _noisy(n: int, seed: int, offset: float = -3.0e5, sigma: float = 0.05) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = 10.0 + np.arange(n) * 2e-3
    e = offset + 3e-4 * t + sigma * rng.standard_normal(n)
    return t, e


def test_scan_moments_match_numpy_with_a_large_offset():
    t, e = _noisy(300_001, seed=1)
    k = 500.0 + 10.0 * np.random.default_rng(2).standard_normal(t.size)
    sc = scan_columns({"t": t, "e": e, "k": k}, cross=(("t", "e"),), block=4096)
    assert sc.finite
    for name, x in (("t", t), ("e", e), ("k", k)):
        i = sc.index(name)
        # numpy two-pass mean and variance (reference); the spread of e is 6e-6 of its offset: shifted sums
        # must not cancel (Chan, Golub and LeVeque 1983)
        assert sc.mean[i] == pytest.approx(float(np.mean(x)), rel=1e-13)
        assert sc.m2[i] == pytest.approx(float(np.var(x)) * x.size, rel=1e-9)
        assert sc.minimum[i] == np.min(x) and sc.maximum[i] == np.max(x)
    ref_cross = float(np.sum((t - t.mean()) * (e - e.mean())))
    assert sc.cross[("t", "e")] == pytest.approx(ref_cross, rel=1e-9)
    bad = e.copy()
    bad[12345] = np.nan
    assert not scan_columns({"t": t, "e": bad}).finite


def test_line_fit_matches_polyfit_and_the_residual_sum():
    t, e = _noisy(200_000, seed=3)
    fit = en._line_fit(t, e)
    slope, icpt = np.polyfit(t, e, 1)  # numpy least squares (reference)
    assert fit.slope == pytest.approx(slope, rel=1e-7)
    r = e - (icpt + slope * t)
    assert fit.ssr == pytest.approx(float(r @ r), rel=1e-7)
    # a nearly perfect line: S_yy - S_xy^2/S_xx cancels, the exact residual pass takes over
    e2 = 5.0 + 2.0 * t + 1e-9 * np.random.default_rng(4).standard_normal(t.size)
    fit2 = en._line_fit(t, e2)
    r2 = e2 - np.polyval(np.polyfit(t, e2, 1), t)
    assert fit2.ssr == pytest.approx(float(r2 @ r2), rel=1e-3)


def _planted(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 1e-3
    e = 40.0 + 0.01 * rng.standard_normal(n)
    e[[777, 4095, 4096, 9000, 20001]] += [1.0, -2.0, 3.0, 0.5, -0.7]  # jumps, two at a block border
    t[[1000, 5000]] += [0.05, 0.2]  # each makes a gap and then a reversal/overlap-like step
    t[8191] = t[8190]  # an overlap exactly at a block border
    t[15000:] += 0.01  # a gap
    return t, e


@pytest.mark.parametrize("block", [1000, 4096, 1 << 16])
def test_events_from_the_scan_equal_the_masked_route(block):
    t, e = _planted(30_000, seed=5)
    sc = scan_columns({TIME_COLUMN: t, ENERGY_COLUMN: e}, diffs=(TIME_COLUMN, ENERGY_COLUMN), no_extremes=(TIME_COLUMN,), block=block,
                         robust_sample=7000)  # a subsample, as on long series
    settings = {"jump_robust_sigma": 8.0, "gap_factor": 1.5, "max_listed": 50, "robust_sample": 7000}
    fast = en_events.find_energy_events(t, e, robust_sample=7000, scan=sc)
    ref = events_masked(t, e, jump_robust_sigma=8.0, gap_factor=1.5, max_listed=50, robust_sample=7000,
                            settings=settings)  # the previous float64 route
    assert fast == ref
    assert fast.n_jumps >= 5 and fast.n_gaps >= 3 and fast.n_overlaps >= 2


def test_events_with_non_finite_rows_equal_the_masked_route():
    """Rows with NaN or infinite energy: listed, then left out of the steps; the spacings keep every row
    (reference: the masked float64 route)."""
    t, e = _planted(30_000, seed=6)
    e[[5, 4096, 12_345]] = [np.nan, np.inf, -np.inf]
    settings = {"jump_robust_sigma": 8.0, "gap_factor": 1.5, "max_listed": 50, "robust_sample": 7000}
    got = en_events.find_energy_events(t, e, robust_sample=7000)
    assert got == events_masked(t, e, jump_robust_sigma=8.0, gap_factor=1.5, max_listed=50, robust_sample=7000,
                                settings=settings)
    assert got.n_nonfinite == 3 and got.n_jumps >= 5 and got.n_gaps >= 3


def test_fast_median_is_numpys_median():
    rng = np.random.default_rng(6)
    for n in (1, 2, 7, 1000, 1001):
        x = rng.standard_normal(n)
        assert fast_median(x) == float(np.median(x))  # numpy (reference), bit for bit
        assert fast_median(x.copy(), overwrite=True) == float(np.median(x))


def test_series_sampling_matches_numpy():
    t, e = _noisy(50_000, seed=7)
    k = 300.0 + np.random.default_rng(8).standard_normal(t.size)
    tab = EnergyTable(time_ps=t, series={"kin": Series("kin", k, "kJ/mol", "kinetic"),
                                         "tot": Series("tot", e, "kJ/mol", "total")})
    sc = en.scan_energy_table(t, e, tab)
    for ss in (en.series_sampling(tab, scan=sc), en.series_sampling(tab)):
        by = {s.name: s for s in ss}
        assert by["kin"].mean == pytest.approx(float(np.mean(k)), rel=1e-13)
        assert by["kin"].std == pytest.approx(float(np.std(k)), rel=1e-10)  # numpy population std
        assert by["tot"].std == pytest.approx(float(np.std(e)), rel=1e-9)
        assert by["kin"].statistical_inefficiency == pytest.approx(
            en.statistical_inefficiency_of(k)[0], rel=1e-12)


def _audit_of_table(t: np.ndarray, ke: np.ndarray, pe: np.ndarray, n_atoms: int):  # -> AuditResult
    """The audit of an NVE run of ``n_atoms`` atoms (1 fs step) that has only an energy table: kinetic and
    potential energy (kJ/mol) at times ``t`` (ps)."""
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import drive
    from phasewake.core.readers.memory import run_from_arrays

    table = EnergyTable(time_ps=t, series={"kinetic": Series("kinetic", ke, "kJ/mol", "kinetic"),
                                           "potential": Series("potential", pe, "kJ/mol", "potential")})
    run = run_from_arrays(np.zeros((1, n_atoms, 3)), np.zeros(1), np.ones(n_atoms), energies=table,
                          metadata=RunMetadata(ensemble="NVE", timestep_ps=0.001))
    run.frames = None
    run.time_ps = t[:0]
    return drive(audit_run(run))


@pytest.mark.slow
def test_audit_of_a_long_table_matches_direct_numpy_numbers():
    """An energy table longer than the windowed-g threshold (2^21 rows): the audit's numbers from the
    one-pass route against numpy on the whole arrays (the previous route's formulas)."""
    from phasewake.core.analyses.temperature import kinetic_temperature

    n = (1 << 21) + 4096
    rng = np.random.default_rng(9)
    t = np.arange(n) * 1e-3
    ke = 500 + 10 * rng.standard_normal(n)
    pe = -800 + 1e-5 * t - (ke - 500) + 0.05 * rng.standard_normal(n)
    res = _audit_of_table(t, ke, pe, n_atoms=100)
    e = pe + ke
    slope, icpt = np.polyfit(t, e, 1)  # numpy least squares (reference)
    d = res.energy.drift
    assert d.slope_kJ_per_mol_per_ns == pytest.approx(slope * 1e3, rel=1e-6)
    r = e - (icpt + slope * t)
    fl = res.energy.fluctuations
    assert fl.sigma_total_kJ_per_mol == pytest.approx(math.sqrt(float(r @ r) / n), rel=1e-7)
    assert fl.sigma_kinetic_kJ_per_mol == pytest.approx(float(np.std(ke)), rel=1e-10)
    tk = kinetic_temperature(ke, res.temperature.n_dof)
    assert res.temperature.mean_K == pytest.approx(float(np.mean(tk)), rel=1e-13)
    assert res.temperature.std_K == pytest.approx(float(np.std(tk)), rel=1e-10)
    g_ref, _ = en.statistical_inefficiency_of(tk)  # g of the temperature array itself (previous route)
    assert res.temperature.statistical_inefficiency == pytest.approx(g_ref, rel=1e-10)
    ev = res.energy.events
    ref = events_masked(t, e, jump_robust_sigma=8.0, gap_factor=1.5, max_listed=50, robust_sample=1 << 20,
                            settings=ev.settings)
    assert ev == ref


def test_audit_with_non_finite_rows_takes_the_masked_route():
    """A NaN kinetic energy and an infinite potential energy: the rows are dropped, and the numbers are
    numpy's on the remaining rows (reference)."""
    n = 20_000
    rng = np.random.default_rng(10)
    t = np.arange(n) * 1e-3
    ke = 500 + 10 * rng.standard_normal(n)
    pe = -800 - (ke - 500) + 0.05 * rng.standard_normal(n)
    ke[123] = np.nan
    pe[4567] = np.inf
    res = _audit_of_table(t, ke, pe, n_atoms=10)
    ok = np.isfinite(ke) & np.isfinite(pe)
    e = (pe + ke)[ok]
    assert res.energy.events.n_nonfinite == 2
    slope, icpt = np.polyfit(t[ok], e, 1)  # numpy least squares on the finite rows (reference)
    assert res.energy.drift.slope_kJ_per_mol_per_ns == pytest.approx(slope * 1e3, rel=1e-6)
    assert res.energy.fluctuations.sigma_kinetic_kJ_per_mol == pytest.approx(float(np.std(ke[ok])), rel=1e-10)
    by = {s.name: s for s in res.energy.sampling}
    assert by["kinetic"].n_samples == n - 1 and by["kinetic"].mean == pytest.approx(float(np.nanmean(ke)), rel=1e-12)
    assert res.temperature.mean_K == pytest.approx(
        float(np.nanmean(ke)) * 2 / (res.temperature.n_dof * 0.00831446261815324), rel=1e-12)  # k_B N_A, CODATA 2018
