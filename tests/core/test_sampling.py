"""Checks of phasewake.core.analyses.sampling: Thirumalai-Mountain, R-hat, divergence, coverage, recurrence."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import expm
from scipy.signal import lfilter
from scipy.spatial.distance import jensenshannon

from phasewake.core.analyses import sampling as S
from phasewake.core.analyses import verdicts
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking


def ar1_columns(phi: float, n: int, cols: int, seed: int) -> np.ndarray:
    return lfilter([1.0], [1.0, -phi], np.random.default_rng(seed).standard_normal((n, cols)), axis=0)


# --- harmonic oscillators (m = omega = 1, E = kT = 0.5) ---

def nve_oscillator(n_steps: int, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Velocity Verlet on V = x^2/2 from x = 1, p = 0 (E = 0.5); the map is linear, so apply it by powers."""
    # one step of velocity Verlet as a 2x2 matrix on (x, p) (Tuckerman 2010 section 3.10)
    half = np.array([[1.0, 0.0], [-dt / 2, 1.0]])
    drift = np.array([[1.0, dt], [0.0, 1.0]])
    step = half @ drift @ half
    states = np.empty((n_steps, 2))
    s = np.array([1.0, 0.0])
    block = [np.linalg.matrix_power(step, k) for k in range(1000)]
    for i in range(0, n_steps, 1000):
        k = min(1000, n_steps - i)
        states[i : i + k] = np.einsum("kab,b->ka", np.array(block[:k]), s)
        s = np.linalg.matrix_power(step, k) @ s
    return states[:, 0], states[:, 1]


def langevin_oscillator(n_steps: int, dt: float, gamma: float, kT: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact discretisation of the underdamped Langevin oscillator (a linear Ornstein-Uhlenbeck process):
    z' = A z + xi, A = expm(M dt), cov(xi) = Sigma - A Sigma A^T with Sigma = kT I (canonical)."""
    M = np.array([[0.0, 1.0], [-1.0, -gamma]])
    A = expm(M * dt)
    Q = kT * np.eye(2) - A @ (kT * np.eye(2)) @ A.T
    L = np.linalg.cholesky(Q)
    rng = np.random.default_rng(seed)
    xi = rng.standard_normal((n_steps, 2)) @ L.T
    z = np.empty((n_steps, 2))
    cur = rng.standard_normal(2) * np.sqrt(kT)
    a00, a01, a10, a11 = A.ravel()
    for i in range(n_steps):  # two scalars per step: cheap
        x0, p0 = cur[0], cur[1]
        cur = np.array([a00 * x0 + a01 * p0 + xi[i, 0], a10 * x0 + a11 * p0 + xi[i, 1]])
        z[i] = cur
    return z[:, 0], z[:, 1]


@pytest.fixture(scope="module")
def oscillators():
    dt = 0.05
    n = int(100 * 2 * np.pi / dt)  # 100 periods
    xn, pn = nve_oscillator(n, dt)
    xl, pl = langevin_oscillator(n, dt, gamma=0.5, kT=0.5, seed=3)
    return {"dt": dt, "n": n, "nve": (xn, pn), "lang": (xl, pl)}


def test_coverage_nve_saturates_langevin_grows(oscillators):
    dt, n = oscillators["dt"], oscillators["n"]
    period = 2 * np.pi
    # the same fixed 50 x 50 grid for both: +-4 sigma of the canonical distribution (sigma = sqrt(kT) = sqrt(0.5))
    lim = (-4 * np.sqrt(0.5), 4 * np.sqrt(0.5))
    cn = S.coverage_over_time(*oscillators["nve"], dt_ps=dt, x_range=lim, y_range=lim)
    cl = S.coverage_over_time(*oscillators["lang"], dt_ps=dt, x_range=lim, y_range=lim)
    after = cn.time_ps > 2 * period
    # REFERENCES 5.4 (common practice thresholds): NVE flat after 2T, Langevin >= 5x NVE at 100 T
    assert cn.fraction[after][-1] == pytest.approx(cn.fraction[after][0], abs=1.5 / 2500)
    assert cl.fraction[-1] >= 5 * cn.fraction[-1]
    mid = np.searchsorted(cl.time_ps, 10 * period)
    assert cl.fraction[-1] > cl.fraction[mid]  # still growing
    assert cn.visits.sum() == n and 0 < cn.fraction[-1] < 0.2


def test_half_divergence_langevin_near_null(oscillators):
    xl, _ = oscillators["lang"]
    d = S.segment_divergence(xl, bins=40)
    assert d.max_ratio < 3.0  # within the noise band (common practice flag at 3x)
    assert S.judge_divergence(d).level == "ok"
    # our JSD equals the square of scipy's Jensen-Shannon distance (natural log)
    assert d.half_jsd_nats == pytest.approx(jensenshannon(d.histograms[0], d.histograms[1]) ** 2, rel=1e-9)


def test_divergence_flags_a_shift_and_null_level_is_calibrated():
    rng = np.random.default_rng(5)
    # iid N(0,1), 1e4 samples per half, 50 bins: mean JSD 1.23e-3 nats (REFERENCES 5.3, empirical)
    vals = [S.segment_divergence(rng.standard_normal(20_000), bins=50, g=1.0, value_range=(-4, 4))
            for _ in range(40)]
    mean_jsd = np.mean([v.half_jsd_nats for v in vals])
    assert mean_jsd == pytest.approx(1.23e-3, rel=0.15)
    assert vals[0].half_null_nats == pytest.approx(mean_jsd, rel=0.15)
    # correlated data: the null from the effective size of the histograms tracks the simulated mean JSD
    # (Monte Carlo over 30 AR(1) runs, phi = 0.9; +-30% allows for the chi-square approximation)
    reps = [S.segment_divergence(ar1_columns(0.9, 40_000, 1, seed=100 + k)[:, 0], bins=50) for k in range(30)]
    sim = np.mean([r.half_jsd_nats for r in reps])
    assert np.mean([r.half_null_nats for r in reps]) == pytest.approx(sim, rel=0.3)
    x = ar1_columns(0.9, 40_000, 1, seed=6)[:, 0]
    x[20_000:] += 4.0  # second half shifted by ~1.7 sigma
    d = S.segment_divergence(x, n_segments=4)
    assert d.ratio[0, 3] > 10 and d.ratio[0, 1] < 3
    assert S.judge_divergence(d).level == "problem"


# --- R-hat, Vehtari et al. 2021 ---

def test_rhat_independent_chains_below_threshold():
    rng = np.random.default_rng(7)
    vals = [S.rhat(rng.standard_normal((4, 1000))).rhat for _ in range(50)]
    # REFERENCES 5.2 [C]: 99th percentile 1.0019 for 4 x 1000 iid; threshold 1.01 (Vehtari et al. 2021)
    assert max(vals) < 1.01


def test_rhat_flags_shifted_chain():
    rng = np.random.default_rng(8)
    c = rng.standard_normal((4, 1000))
    c[0] += 0.5
    r = S.rhat(c)
    assert r.rhat > 1.01 and S.judge_rhat(r).level in ("caution", "problem")
    assert r.expected_from_correlation == pytest.approx(1.0, abs=1e-3)  # iid draws: no memory


def test_rhat_expected_level_from_memory():
    # stationary AR(1) chains, phi = 0.95 (g = 39): R-hat sits near sqrt(1 + (g - 1)/n) (Gelman-Rubin algebra)
    vals, exp = [], []
    for k in range(20):
        r = S.rhat(ar1_columns(0.95, 2000, 4, seed=200 + k).T)
        vals.append(r.classic_split)
        exp.append(r.expected_from_correlation)
    assert np.mean(vals) == pytest.approx(np.mean(exp), abs=0.01)
    assert np.mean(exp) == pytest.approx(np.sqrt(1 + 38 / 1000), abs=0.01)


def test_folded_rhat_flags_double_spread_that_classic_misses():
    rng = np.random.default_rng(9)
    c = rng.standard_normal((4, 1000))
    c[0] *= 2.0
    r = S.rhat(c)
    assert r.classic_split < 1.01  # Gelman-Rubin on means misses a change of spread
    assert r.tail > 1.01 and r.rhat == r.tail  # the folded (tail) R-hat catches it (Vehtari et al. 2021)


def test_classic_rhat_matches_textbook_formula():
    rng = np.random.default_rng(10)
    c = rng.standard_normal((3, 200)) + np.array([[0.0], [0.3], [-0.2]])
    r = S.rhat(c, split=False)
    n = 200
    w = c.var(axis=1, ddof=1).mean()
    b = n * c.mean(axis=1).var(ddof=1)
    # Gelman & Rubin (1992): R = sqrt(((n-1)/n W + B/n) / W)
    assert r.classic_split == pytest.approx(np.sqrt(((n - 1) / n * w + b / n) / w), rel=1e-12)


def test_rhat_segments_of_a_drifting_run():
    x = ar1_columns(0.5, 8000, 1, seed=11)[:, 0]
    assert S.rhat_segments(x).rhat < 1.01
    assert S.rhat_segments(x + np.linspace(0, 3, 8000)).rhat > 1.1


# --- Thirumalai-Mountain ---

def test_tm_metric_decays_as_one_over_g_t():
    phi = 0.9
    e = ar1_columns(phi, 20_000, 200, seed=12)
    r = S.thirumalai_mountain(e, dt_ps=0.5)
    g = (1 + phi) / (1 - phi)
    # REFERENCES 5.1 derivation: D_e = 1/(g dt) for independent stationary series; +-25% with 200 particles
    assert r.d_per_ps == pytest.approx(1 / (g * 0.5), rel=0.25)
    assert r.late_slope == pytest.approx(-1.0, abs=0.15)
    assert not r.plateau and S.judge_tm(r).level == "ok"


def test_tm_metric_plateaus_for_offset_particles():
    e = ar1_columns(0.9, 20_000, 200, seed=13)
    e[:, :100] += 1.0
    r = S.thirumalai_mountain(e, dt_ps=1.0)
    assert r.omega[-1] > 0.2  # plateau at 0.25 = variance of the offsets (REFERENCES 5.1)
    assert r.plateau and abs(r.late_slope) < 0.3
    assert S.judge_tm(r).level == "problem"


def test_tm_kinetic_streams_over_run():
    rng = np.random.default_rng(14)
    v = (rng.standard_normal((500, 20, 3)) * 0.3).astype(np.float32)
    m = np.full(20, 39.948)
    run = run_from_arrays(np.zeros_like(v), np.arange(500) * 0.01, m, velocities_nm_per_ps=v)
    with chunking(frames=64):
        r = result_of(S.thirumalai_mountain_kinetic(run))
    ke = 0.5 * m * np.sum(v.astype(float) ** 2, axis=2)
    direct = S.thirumalai_mountain(ke, dt_ps=0.01)
    np.testing.assert_allclose(r.omega, direct.omega, rtol=1e-10)
    with pytest.raises(MissingDataError):
        result_of(S.thirumalai_mountain_kinetic(run_from_arrays(np.zeros_like(v), np.arange(500) * 0.01, m)))


# --- running average, recurrence ---

def test_running_average_band_covers_the_mean():
    x = ar1_columns(0.8, 50_000, 1, seed=15)[:, 0] + 2.0
    r = S.running_average(x, dt_ps=0.1)
    assert r.mean[-1] == pytest.approx(x.mean())
    np.testing.assert_allclose(r.mean, [x[: int(round(t / 0.1))].mean() for t in r.time_ps], rtol=1e-12)
    # g-corrected SEM of AR(1): sqrt(g var / N), g = 9, var = 1/(1 - 0.64)
    assert r.sem[-1] == pytest.approx(np.sqrt(9 / 0.36 / 50_000), rel=0.15)
    assert abs(r.mean[-1] - 2.0) < 3 * r.sem[-1]


def test_recurrence_rate_on_circle():
    th = np.random.default_rng(16).uniform(0, 2 * np.pi, 3000)
    r = S.recurrence(np.c_[np.cos(th), np.sin(th)], epsilon=0.3, max_points=3000)
    # uniform points on the unit circle: RR = (2/pi) arcsin(eps/2) (REFERENCES 5.5, derivation)
    assert r.recurrence_rate == pytest.approx(2 / np.pi * np.arcsin(0.15), abs=0.004)
    assert r.matrix.shape == (3000, 3000) and r.matrix[0, 0]
    q = S.recurrence(np.cos(np.linspace(0, 20 * np.pi, 5000)), quantile=0.1, max_points=1000)
    assert q.stride == 5 and q.matrix.shape == (1000, 1000)
    assert q.recurrence_rate == pytest.approx(0.1, abs=0.01)  # the epsilon quantile sets the rate


def test_errors_and_verdicts_registered():
    with pytest.raises(AnalysisError):
        S.rhat(np.ones((4, 100)))
    with pytest.raises(AnalysisError):
        S.segment_divergence(np.ones(1000))
    for kind in ("sampling.rhat", "sampling.divergence", "sampling.tm_slope"):
        assert verdicts.THRESHOLDS[kind].source and kind in verdicts.EXPLANATIONS



def test_short_series_leaves_split_rhat_out_instead_of_failing():
    # 21 samples in 4 segments of 5: split halves of 2 cannot give a statistical inefficiency (4 needed);
    # 'phasewake memory' on a 21-frame run used to fail with exit 2 here
    from phasewake.core.errors import TooShortError

    x = np.random.default_rng(4).normal(size=21)
    with pytest.raises(TooShortError):
        S.rhat(x[:20].reshape(4, 5), split=True)
    with pytest.raises(TooShortError):
        S.rhat_segments(x)
    assert S.rhat_segments(np.random.default_rng(5).normal(size=32)).n_draws == 8  # 4 segments of 8, split in halves of 4
