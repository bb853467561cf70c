"""Rate statistics checked against statsmodels and against exact integrals."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phasewake.core.analyses.rates import exponential_ks_test, poisson_rate, tst_rate
from phasewake.core.errors import AnalysisError


@pytest.mark.parametrize("n,T", [(1, 3.0), (5, 10.0), (37, 1234.5), (400, 2.0e4)])
def test_poisson_interval_matches_statsmodels_exact(n, T):
    from statsmodels.stats.rates import confint_poisson

    # Reference: statsmodels' exact (Garwood) interval for a Poisson rate with exposure.
    lo, hi = confint_poisson(n, T, method="exact-c", alpha=0.05)
    r = poisson_rate(n, T, confidence=0.95)
    assert r.rate_per_ps == pytest.approx(n / T)
    assert r.ci_low_per_ps == pytest.approx(float(lo), rel=1e-10)
    assert r.ci_high_per_ps == pytest.approx(float(hi), rel=1e-10)
    assert not r.upper_bound_only


def test_no_events_gives_an_upper_bound_not_zero():
    from statsmodels.stats.rates import confint_poisson

    r = poisson_rate(0, 50.0, confidence=0.95)
    assert r.upper_bound_only
    # One-sided 95% upper limit = -ln(0.05)/T (Poisson P(0) = exp(-kT) = 0.05; analytic), which is also
    # the upper end of statsmodels' two-sided 90% exact interval.
    assert r.ci_high_per_ps == pytest.approx(-math.log(0.05) / 50.0, rel=1e-12)
    assert r.ci_high_per_ps == pytest.approx(float(confint_poisson(0, 50.0, method="exact-c", alpha=0.1)[1]))


def test_poisson_rate_rejects_bad_confidence():
    with pytest.raises(AnalysisError, match="confidence"):
        poisson_rate(3, 1.0, confidence=1.5)


def test_interval_coverage_by_simulation():
    # The exact interval must cover the true rate in at least 95% of repeated experiments
    # (Garwood 1936: exact intervals are conservative). 2000 experiments, k T = 7.
    rng = np.random.default_rng(11)
    k, T = 0.7, 10.0
    counts = rng.poisson(k * T, 2000)
    cover = 0
    for c in counts:
        r = poisson_rate(int(c), T)
        cover += r.ci_low_per_ps <= k <= r.ci_high_per_ps
    # binomial SE at 0.95 over 2000 is 0.005: allow 3 SE below nominal
    assert cover / 2000 >= 0.95 - 0.015


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.slow  # measured 0.6 s of CPU
def test_exponential_ks_agrees_with_statsmodels_lilliefors(seed):
    from statsmodels.stats.diagnostic import lilliefors

    rng = np.random.default_rng(seed)
    x = rng.exponential(3.0, 150)
    d_ref, p_ref = lilliefors(x, dist="exp", pvalmethod="table")
    t = exponential_ks_test(x)
    # Same statistic (statsmodels, Lilliefors 1969); p-values from two approximations of the same null
    # distribution (their table vs our Monte Carlo) agree to a few hundredths.
    assert t.statistic == pytest.approx(float(d_ref), rel=1e-9)
    assert abs(t.p_value - float(p_ref)) < 0.05


def test_exponential_ks_rejects_regular_dwells():
    from statsmodels.stats.diagnostic import lilliefors

    x = np.random.default_rng(4).uniform(1.0, 2.0, 80)  # nearly regular dwells, CV ~ 0.2
    t = exponential_ks_test(x)
    assert t.p_value < 0.01
    assert float(lilliefors(x, dist="exp")[1]) < 0.01  # statsmodels agrees it is not exponential
    assert t.cv < 0.3


def test_exponential_ks_too_few():
    t = exponential_ks_test(np.array([1.0, 2.0, 3.0]))
    assert t.n == 3 and math.isnan(t.p_value)


@pytest.mark.slow  # measured 0.5 s of CPU
def test_tst_rate_of_iid_boltzmann_samples_matches_quadrature():
    # Exact 1D TST for V = dE (x^2 - 1)^2, m = kT = 1 (Eyring 1935; Wigner 1938):
    # k_TST = (1/sqrt(2 pi)) exp(-V(0)) / int_{-inf}^0 exp(-V) dx, by scipy quadrature.
    dE = 3.0
    V = lambda x: dE * (x * x - 1.0) ** 2  # noqa: E731
    z_left = quad(lambda x: math.exp(-V(x)), -np.inf, 0.0)[0]
    k_exact = math.exp(-V(0.0)) / math.sqrt(2 * math.pi) / z_left
    rng = np.random.default_rng(5)
    grid = np.linspace(-2.5, 2.5, 40001)
    cdf = np.cumsum(np.exp(-V(grid)))
    cdf /= cdf[-1]
    x = np.interp(rng.random(2_000_000), cdf, grid)
    v = rng.standard_normal(x.size)
    with_v = tst_rate(x, surface=0.0, qdot=v, bin_width=0.04)
    with_m = tst_rate(x, surface=0.0, kT_over_m_eff=1.0, bin_width=0.04)
    # P(0) from about 2e6 * 0.04 * p(0) ~ 6600 samples: 1.2% standard error; allow 5%.
    assert with_v.rate_up_per_ps == pytest.approx(k_exact, rel=0.05)
    assert with_m.rate_up_per_ps == pytest.approx(k_exact, rel=0.05)
    assert with_m.flux_factor_unit_per_ps == pytest.approx(1 / math.sqrt(2 * math.pi))
    # Symmetric well: both directions agree.
    assert with_v.rate_down_per_ps == pytest.approx(with_v.rate_up_per_ps, rel=0.05)
    # Histogram barrier F(0) - F(min) = dE (analytic), within the coarse-bin and sampling error.
    assert with_v.free_energy_barrier_up_kT == pytest.approx(dE, abs=0.15)
