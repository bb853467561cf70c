"""Checks of phasewake.core.analyses.correlation against analytic AR(1) results and reference libraries."""

from __future__ import annotations

import contextlib
import importlib
import io
import logging

import numpy as np
import pytest
from scipy.signal import lfilter

from phasewake.core.analyses import correlation as C
from phasewake.core.analyses import verdicts
from phasewake.core.analyses.correlation import inefficiency as CI
from phasewake.core.errors import AnalysisError, TooShortError


def ar1(phi: float, n: int, seed: int, shape: tuple[int, ...] = ()) -> np.ndarray:
    rng = np.random.default_rng(seed)
    eps = rng.standard_normal(shape + (n,))
    return lfilter([1.0], [1.0, -phi], eps, axis=-1)


def quiet_import(name: str):
    """pymbar prints a banner (via logging / stderr) on import: keep it out of the test output."""
    logging.disable(logging.CRITICAL)
    try:
        with contextlib.redirect_stderr(io.StringIO()), contextlib.redirect_stdout(io.StringIO()):
            return importlib.import_module(name)
    finally:
        logging.disable(logging.NOTSET)


# --- AR(1) analytic: rho(k) = phi^k, g = (1 + phi)/(1 - phi) (e.g. Priestley 1981; REFERENCES.md 3.7) ---

def test_ar1_acf_matches_phi_power_k():
    x = ar1(0.9, 200_000, seed=11)
    rho = C.autocorrelation(x, max_lag=5)
    # analytic AR(1) autocorrelation phi^k; tolerance 0.01 from the sampling error at N = 2e5
    np.testing.assert_allclose(rho, 0.9 ** np.arange(6), atol=0.01)
    assert rho[0] == pytest.approx(1.0)


@pytest.mark.parametrize("phi,tol", [(0.5, 0.07), (0.9, 0.20)])
@pytest.mark.parametrize("method", C.METHODS)
def test_ar1_statistical_inefficiency(phi, tol, method):
    x = ar1(phi, 100_000, seed=3)
    g = C.statistical_inefficiency(x, method=method)
    # analytic g = (1 + phi) / (1 - phi); tolerances suited to N = 1e5
    assert g == pytest.approx((1 + phi) / (1 - phi), rel=tol)


def test_tau_int_is_half_g_and_ess_is_n_over_g():
    x = ar1(0.8, 50_000, seed=4)
    r = C.analyse_series(x, dt_ps=0.02, unit="kJ/mol")
    assert r.tau_int_sokal_samples == pytest.approx(r.statistical_inefficiency / 2)  # Sokal convention
    assert r.tau_int_sokal_ps == pytest.approx(r.statistical_inefficiency / 2 * 0.02)
    assert r.effective_sample_size == pytest.approx(50_000 / r.statistical_inefficiency)
    # phi = 0.8 -> g = 9 (analytic; also the emcee test gist value)
    assert r.statistical_inefficiency == pytest.approx(9.0, rel=0.15)
    # SEM = sqrt(var * g / N) with analytic var = 1/(1 - phi^2)
    assert r.standard_error_of_mean == pytest.approx(np.sqrt(9.0 / (1 - 0.64) / 50_000), rel=0.1)
    assert r.converged and r.acf[0] == 1.0 and r.acf.shape == r.acf_lag_ps.shape


def test_g_at_least_one_for_anticorrelated_series():
    x = ar1(-0.7, 20_000, seed=8)  # alternating: the true g = 0.3/1.7 < 1 is clipped
    for m in C.METHODS:
        assert C.statistical_inefficiency(x, method=m) >= 1.0


# --- reference libraries ---

@pytest.mark.slow  # measured 1.2 s of CPU
def test_acf_matches_statsmodels_biased_and_unbiased():
    from statsmodels.tsa.stattools import acf

    x = ar1(0.7, 5000, seed=21) + 3.0
    ours = C.autocorrelation(x, max_lag=200)
    ref = acf(x, nlags=200, fft=True, adjusted=False)  # statsmodels: biased (divide by N)
    np.testing.assert_allclose(ours, ref, atol=1e-10)
    ours_u = C.autocorrelation(x, max_lag=200, normalisation="unbiased")
    ref_u = acf(x, nlags=200, fft=True, adjusted=True)  # statsmodels: divide by N - k
    np.testing.assert_allclose(ours_u, ref_u, atol=1e-10)


def test_long_series_blocked_transform_matches_statsmodels():
    from statsmodels.tsa.stattools import acf

    x = ar1(0.95, 70_000, seed=22) - 7.0  # long enough for the blocked transform with a short lag window
    np.testing.assert_allclose(C.autocorrelation(x, max_lag=100), acf(x, nlags=100, fft=True), atol=1e-10)
    many = np.vstack([x, x[::-1]])
    np.testing.assert_allclose(C.autocorrelation(many, max_lag=100, axis=1)[1], acf(x[::-1], nlags=100, fft=True),
                               atol=1e-10)


def test_sokal_g_matches_emcee_integrated_time():
    import emcee

    for seed, phi in [(1, 0.5), (2, 0.9), (3, 0.97)]:
        x = ar1(phi, 100_000, seed=seed)
        ref = float(emcee.autocorr.integrated_time(x, c=5, quiet=True)[0])  # emcee returns g ("tau")
        ours = C.statistical_inefficiency(x, method="sokal", c=5.0)
        assert ours == pytest.approx(ref, rel=1e-6)


def test_first_zero_g_close_to_pymbar():
    ts = quiet_import("pymbar.timeseries")
    for seed, phi in [(5, 0.5), (6, 0.9)]:
        x = ar1(phi, 50_000, seed=seed)
        ref = ts.statistical_inefficiency(x, fast=False, mintime=3)  # pymbar: g = 1 + 2 tau
        ours = C.statistical_inefficiency(x, method="first_zero")
        # pymbar sums the unbiased C_t(1 - t/N) with the same stopping rule: equal up to its details
        assert ours == pytest.approx(ref, rel=0.03)


def test_vectorised_along_axis_matches_loop():
    x = ar1(0.6, 4000, seed=9, shape=(7,))
    many = C.statistical_inefficiency(x, axis=1)
    one = [C.statistical_inefficiency(row) for row in x]
    np.testing.assert_allclose(many, one, rtol=1e-12)
    many_t = C.statistical_inefficiency(x.T, axis=0, method="geyer")
    np.testing.assert_allclose(many_t, [C.statistical_inefficiency(r, method="geyer") for r in x], rtol=1e-12)
    ess = C.effective_sample_size(x, axis=-1)
    np.testing.assert_allclose(ess, 4000 / many)


def test_cross_correlation_of_shifted_copy_peaks_at_shift():
    x = ar1(0.3, 3000, seed=12)
    y = np.roll(x, 7)  # y(t) = x(t - 7): y lags behind x by 7
    lags, c = C.cross_correlation(x, y, max_lag=20)
    assert lags[np.argmax(c)] == 7
    # against numpy.correlate (reference implementation of the direct sum)
    dx, dy = x - x.mean(), y - y.mean()
    direct = np.correlate(dy, dx, mode="full")[len(x) - 1 - 20 : len(x) + 20] / len(x) / (dx.std() * dy.std())
    np.testing.assert_allclose(c, direct, atol=1e-10)


# --- blocking: Flyvbjerg & Petersen 1989 ---

@pytest.mark.parametrize("seed", [13, 14])
def test_blocking_plateau_within_15_percent_of_exact_sem(seed):
    phi, n = 0.9, 100_000
    x = ar1(phi, n, seed=seed)
    b = C.blocking(x)
    exact = np.sqrt((1 + phi) / (1 - phi) / (1 - phi ** 2) / n)  # sqrt(g var / N), analytic AR(1)
    assert b.plateau_found
    assert b.plateau_sem == pytest.approx(exact, rel=0.15)
    assert b.naive_sem < 0.3 * exact  # level 0 ignores the correlation (REFERENCES 3.6: 0.0073 vs 0.0316)
    assert np.all(np.diff(b.block_size) > 0) and b.sem.shape == b.n_blocks.shape


def test_blocking_of_white_noise_stops_early():
    x = np.random.default_rng(2).standard_normal(2 ** 14)
    b = C.blocking(x)
    assert b.plateau_level <= 2
    assert b.plateau_sem == pytest.approx(1 / np.sqrt(2 ** 14), rel=0.1)  # sigma / sqrt(N), iid


# --- Chodera 2016 equilibration detection ---

@pytest.mark.slow  # measured 0.9 s of CPU
def test_equilibration_after_transient():
    n = 100_000
    x = ar1(0.9, n, seed=17) + 5.0 * np.exp(-np.arange(n) / 200.0)
    e = C.detect_equilibration(x, dt_ps=0.5)
    # REFERENCES 3.5 suggested scenario (common practice): t0 in [300, 2000]
    assert 300 <= e.t0_index <= 2000
    assert e.t0_ps == pytest.approx(0.5 * e.t0_index)
    ts = quiet_import("pymbar.timeseries")
    t0_ref, _, _ = ts.detect_equilibration(x, fast=True, nskip=500)  # pymbar's implementation of Chodera 2016
    assert abs(e.t0_index - t0_ref) < 1000
    v = C.judge_equilibration(e)
    assert v.level == "ok" and v.kind == "sampling.equilibration"


def test_equilibration_of_long_series_by_block_means():
    n = 1_000_000
    x = ar1(0.99, n, seed=18) + 20.0 * np.exp(-np.arange(n) / 2000.0)  # g = 199, transient ~ 2000 x ln(20/7)
    e = C.detect_equilibration(x, n_candidates=100)
    assert e.settings["block_of_samples"] == 10
    assert 2_000 <= e.t0_index <= 30_000  # after the transient, before ~3% of the run (common practice)
    # the effective sample size is that of the plain series: N/g with g = (1 + phi)/(1 - phi) = 199 (AR(1))
    assert e.effective_sample_size == pytest.approx((n - e.t0_index) / 199.0, rel=0.25)


def test_errors_are_typed():
    with pytest.raises(TooShortError):
        C.statistical_inefficiency([1.0, 2.0])
    with pytest.raises(AnalysisError):
        C.statistical_inefficiency(np.ones(100))
    with pytest.raises(AnalysisError):
        C.analyse_series(np.array([1.0, np.nan, 2, 3, 4]), dt_ps=1.0)


def test_verdict_kinds_registered_with_sources():
    for kind in ("sampling.ess", "sampling.equilibration"):
        assert kind in verdicts.EXPLANATIONS and verdicts.THRESHOLDS[kind].source
    r = C.analyse_series(ar1(0.99, 2000, seed=1), dt_ps=1.0)
    v = C.judge_ess(r, name="potential")
    assert v.level in ("caution", "problem")  # ~2000/199 = 10 independent samples


# --- short-memory series: direct lag sums instead of FFTs ---------------------------------

@pytest.mark.parametrize("phi", [-0.4, 0.0, 0.3, 0.6])
@pytest.mark.parametrize("method", C.METHODS)
def test_direct_lag_sums_give_the_fft_route_g(monkeypatch, phi, method):
    # The direct route must give the g of the FFT route (the previous float64 route), to rounding:
    # each estimator stops at the first lag meeting its rule, so the lag window does not matter.
    x = ar1(phi, 300_000, seed=21)
    assert CI._direct_estimate(np.asarray(x), None, method, 5.0) is not None  # the direct route is taken
    g_direct = C.statistical_inefficiency(x, method=method)
    monkeypatch.setattr(CI, "_DIRECT_LAGS", 0)
    g_fft = C.statistical_inefficiency(x, method=method)
    assert g_direct == pytest.approx(g_fft, rel=1e-12)
    # and the analytic AR(1) value g = (1 + phi) / (1 - phi) (Priestley 1981), clipped at 1 as documented;
    # sampling tolerance at N = 3e5
    assert g_direct == pytest.approx(max(1.0, (1 + phi) / (1 - phi)), rel=0.08)


def test_long_memory_series_falls_back_to_fft():
    x = ar1(0.95, 100_000, seed=22)  # g = 39: Sokal's window lies far beyond 32 lags
    assert CI._direct_estimate(np.asarray(x), None, "sokal", 5.0) is None
    assert C.statistical_inefficiency(x) == pytest.approx(39.0, rel=0.25)  # analytic AR(1) g


# --- the automatic estimator on oscillating series (Geyer 1992 initial sequence; Sokal 1997 window) ---

def _langevin_oscillator(n: int, omega: float, gamma: float, seed: int) -> np.ndarray:
    """Positions of a Langevin harmonic oscillator sampled every unit time by its exact propagator.

    d(x, v)/dt = A (x, v) + noise with A = [[0, 1], [-omega^2, -gamma]]; the sampled process is the
    vector AR(1) z(k+1) = F z(k) + e with F = expm(A) and noise covariance S - F S F^T, S = diag(1/omega^2, 1)
    the stationary covariance (kT = m = 1) (Uhlenbeck and Ornstein 1930; exact Gaussian update, from memory).
    """
    from scipy.linalg import expm

    a = np.array([[0.0, 1.0], [-omega ** 2, -gamma]])
    f = expm(a)
    s = np.diag([1.0 / omega ** 2, 1.0])
    chol = np.linalg.cholesky(s - f @ s @ f.T)
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((n, 2)) @ chol.T
    z = np.empty((n, 2))
    z[0] = np.linalg.cholesky(s) @ rng.standard_normal(2)
    for i in range(1, n):
        z[i] = f @ z[i - 1] + e[i]
    return z[:, 0] * omega  # unit variance


def _oscillator_rho(k: np.ndarray, omega: float, gamma: float) -> np.ndarray:
    """Analytic position autocorrelation of the underdamped Langevin oscillator:
    exp(-gamma t/2) [cos(w1 t) + gamma/(2 w1) sin(w1 t)], w1 = sqrt(omega^2 - gamma^2/4) (textbook, from memory;
    checked below against the matrix exponential)."""
    w1 = np.sqrt(omega ** 2 - gamma ** 2 / 4)
    return np.exp(-gamma * k / 2) * (np.cos(w1 * k) + gamma / (2 * w1) * np.sin(w1 * k))


def test_oscillator_analytic_acf_matches_matrix_exponential():
    # the closed form against [expm(A k) S]_00 / S_00 (an independent route to the same ACF)
    from scipy.linalg import expm

    omega, gamma = 2 * np.pi / 9, 0.3
    a = np.array([[0.0, 1.0], [-omega ** 2, -gamma]])
    ks = np.arange(0, 40)
    ref = np.array([(expm(a * k) @ np.diag([1 / omega ** 2, 1.0]))[0, 0] * omega ** 2 for k in ks])
    np.testing.assert_allclose(_oscillator_rho(ks, omega, gamma), ref, atol=1e-12)


def test_oscillating_bond_plus_slow_environment_sokal_closes_early_auto_uses_geyer_and_blocking():
    """Like an O-H distance sampled every fs: a 9-sample vibration (90% of the variance) on a slow AR(1)
    environment (10%). Analytic g = 0.9 g_osc + 0.1 g_AR1 (variance-weighted sum of independent parts),
    g_osc = 1 + 2 sum rho_osc(k), g_AR1 = (1 + phi)/(1 - phi) (Sokal 1997)."""
    n, omega, gamma, phi = 100_000, 2 * np.pi / 9, 0.1, 0.95
    k = np.arange(1, 20_000)
    g_true = 0.9 * (1 + 2 * _oscillator_rho(k, omega, gamma).sum()) + 0.1 * (1 + phi) / (1 - phi)
    x = np.sqrt(0.9) * _langevin_oscillator(n, omega, gamma, seed=1) + np.sqrt(0.1) * ar1(phi, n, seed=2) * np.sqrt(1 - phi ** 2)
    # the failure the automatic rule guards against: Sokal's window (c = 5) closes on the first trough
    assert C.statistical_inefficiency(x, method="sokal") < 0.5 * g_true
    r = C.analyse_series(x, dt_ps=0.001, unit="nm")
    assert r.oscillating is True
    assert r.estimators_disagree is True and r.disagreement_z > 3
    assert set(r.estimates) >= {"sokal", "geyer", "blocking"}
    # the reported g is the largest (conservative) and lies within 25% of the analytic value
    assert r.statistical_inefficiency == pytest.approx(max(v[0] for v in r.estimates.values()))
    assert r.statistical_inefficiency == pytest.approx(g_true, rel=0.25)
    assert any("disagree" in note for note in r.notes)
    v = C.judge_estimators(r, name="O-H")
    assert v is not None and v.level == "caution" and "largest" in v.message


@pytest.mark.slow  # measured 0.6 s of CPU
def test_damped_oscillator_auto_is_never_below_the_analytic_g():
    # a pure damped oscillator: g from its analytic ACF; the automatic choice may be conservative, never low
    n, omega, gamma = 100_000, 2 * np.pi / 9, 0.6
    k = np.arange(1, 20_000)
    g_true = 1 + 2 * _oscillator_rho(k, omega, gamma).sum()
    x = _langevin_oscillator(n, omega, gamma, seed=5)
    r = C.analyse_series(x, dt_ps=0.001)
    assert r.oscillating is True
    assert r.statistical_inefficiency >= 0.9 * g_true
    assert r.statistical_inefficiency <= 2.0 * g_true


@pytest.mark.parametrize("phi,tol", [(0.5, 0.07), (0.9, 0.20)])
def test_auto_on_ar1_is_sokal_and_estimators_agree(phi, tol):
    x = ar1(phi, 100_000, seed=3)
    r = C.analyse_series(x, dt_ps=1.0)
    # analytic g = (1 + phi)/(1 - phi) (Sokal 1997); no oscillation, no disagreement
    assert r.oscillating is False and r.estimators_disagree is False
    assert r.method.startswith("Sokal's window")
    assert r.statistical_inefficiency == pytest.approx((1 + phi) / (1 - phi), rel=tol)
    assert C.statistical_inefficiency(x, method="auto") == pytest.approx(r.statistical_inefficiency)
    v = C.judge_estimators(r)
    assert v is not None and v.level == "ok"
    # the standard error of Sokal's g (Madras-Sokal 1988) covers the truth within 3 errors
    g_s, se_s = r.estimates["sokal"]
    assert abs(g_s - (1 + phi) / (1 - phi)) < 3 * se_s


def test_single_method_keeps_its_number_and_has_no_estimator_verdict():
    x = ar1(0.8, 20_000, seed=9)
    r = C.analyse_series(x, dt_ps=1.0, method="sokal")
    assert r.method == "sokal" and r.oscillating is None
    assert r.statistical_inefficiency == pytest.approx(C.statistical_inefficiency(x, method="sokal"))
    assert C.judge_estimators(r) is None
