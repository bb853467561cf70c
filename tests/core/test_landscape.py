"""Densities, free-energy profiles and surfaces of section.

Sources: numpy's histogram routines (reference library) for binning; the quartic double well
V = 5 kT (x^2 - 1)^2 of REFERENCES.md 6.3-6.4 (barrier F(0) - F(+-1) = 5.0 kT) sampled by BAOAB
Langevin dynamics (Leimkuhler and Matthews 2013, from memory) started from exact Boltzmann samples;
the Maxwell distribution of a 3D Gaussian distance (scipy.stats.maxwell) for the Jacobian; the
invariant ellipse of an uncoupled 2D harmonic oscillator (textbook mechanics) for the section.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from phasewake.core.analyses.landscape import (
    auto_bins,
    free_energy_profile,
    free_energy_surface,
    histogram_1d,
    histogram_2d,
    poincare_section,
)
from phasewake.core.errors import AnalysisError

KB = 0.00831446261815324
T_UNIT_KT = 1.0 / KB  # temperature at which kT = 1 kJ/mol


def _boltzmann_samples(rng, n, barrier=5.0):
    """Exact samples of exp(-V) with V = barrier (x^2 - 1)^2 by inverse CDF on a fine grid."""
    x = np.linspace(-2.2, 2.2, 200_001)
    w = np.exp(-barrier * (x * x - 1) ** 2)
    cdf = np.cumsum(w)
    cdf /= cdf[-1]
    return np.interp(rng.uniform(size=n), cdf, x)


def _baoab_double_well(*, n_walkers=200, n_steps=4000, dt=0.005, gamma=5.0, barrier=5.0, seed=0):
    """BAOAB Langevin (m = kT = 1), vectorised over walkers; returns (n_walkers, n_steps) positions."""
    rng = np.random.default_rng(seed)
    x = _boltzmann_samples(rng, n_walkers, barrier)
    v = rng.normal(size=n_walkers)
    c1 = np.exp(-gamma * dt)
    c2 = np.sqrt(1 - c1 * c1)

    def force(q):
        return -4.0 * barrier * q * (q * q - 1.0)

    f = force(x)
    out = np.empty((n_walkers, n_steps))
    for i in range(n_steps):
        v += 0.5 * dt * f
        x += 0.5 * dt * v
        v = c1 * v + c2 * rng.normal(size=n_walkers)
        x += 0.5 * dt * v
        f = force(x)
        v += 0.5 * dt * f
        out[:, i] = x
    return out


def test_double_well_barrier_is_five_kT_within_its_error():
    traj = _baoab_double_well()
    series = traj.reshape(-1)  # walker after walker: blocks of whole, independent walkers
    prof = free_energy_profile(series, temperature_K=T_UNIT_KT, bins=np.linspace(-1.8, 1.8, 73), n_blocks=10)
    assert prof.kT_kJ_per_mol == pytest.approx(1.0)
    assert len(prof.minima) == 2 and len(prof.barriers) == 1
    assert [m.position for m in prof.minima] == pytest.approx([-1.0, 1.0], abs=0.06)
    bar = prof.barriers[0]
    assert abs(bar.position) < 0.1  # within two bins of x = 0 (the top is flat: V(0.1) = 4.9 kT)
    for height, err in [(bar.height_from_left_kJ_per_mol, bar.error_from_left_kJ_per_mol),
                        (bar.height_from_right_kJ_per_mol, bar.error_from_right_kJ_per_mol)]:
        assert 0 < err < 0.4  # the error is informative, not huge
        assert abs(height - 5.0) < 3 * err + 0.05  # 3 sigma plus the bin-averaging bias (~0.03 kT)


def test_barrier_from_exact_samples_and_block_error_scale():
    rng = np.random.default_rng(1)
    x = _boltzmann_samples(rng, 400_000)
    prof = free_energy_profile(x, temperature_K=T_UNIT_KT, bins=np.linspace(-1.8, 1.8, 73), n_blocks=20)
    bar = prof.barriers[0]
    # independent samples: error of ln(P_top/P_min) ~ sqrt(1/c_top + 1/c_min) (Poisson)
    c = prof.counts
    poisson = np.sqrt(1 / c[bar.index] + 1 / c[prof.minima[0].index])
    assert 0.5 * poisson < bar.error_from_left_kJ_per_mol < 2 * poisson
    assert abs(bar.height_from_left_kJ_per_mol - 5.0) < 3 * bar.error_from_left_kJ_per_mol + 0.05


def test_distance_jacobian():
    """r = |3D Gaussian| is Maxwell-distributed: P(r)/(4 pi r^2) ~ exp(-r^2 / 2 s^2) (scipy.stats.maxwell)."""
    s = 0.3
    r = stats.maxwell.rvs(scale=s, size=300_000, random_state=np.random.default_rng(2))
    prof = free_energy_profile(r, temperature_K=T_UNIT_KT, jacobian="distance", bins=60, value_range=(0.05, 0.9))
    ok = prof.counts > 2000
    resid = prof.free_energy_kJ_per_mol[ok] - prof.centers[ok] ** 2 / (2 * s * s)
    resid -= np.average(resid, weights=1 / prof.error_kJ_per_mol[ok] ** 2)
    assert np.all(np.abs(resid) < 4 * prof.error_kJ_per_mol[ok] + 0.01)
    # without the Jacobian the profile has a minimum at the Maxwell mode sqrt(2) s
    plain = free_energy_profile(r, temperature_K=T_UNIT_KT, bins=60, value_range=(0.05, 0.9))
    assert plain.minima[0].position == pytest.approx(np.sqrt(2) * s, abs=0.03)
    assert prof.minima[0].position < 0.1  # the jacobian-corrected one is monotonic from r = 0


def test_histograms_match_numpy():
    rng = np.random.default_rng(3)
    x = rng.gamma(3.0, size=5000)
    y = rng.normal(size=5000)
    edges = auto_bins(x)
    fd = np.histogram_bin_edges(x, bins="fd")  # numpy's Freedman-Diaconis rule
    assert abs((edges.size - 1) - (fd.size - 1)) <= 1
    h = histogram_1d(x, bins=edges)
    np.testing.assert_array_equal(h.counts, np.histogram(x, bins=edges)[0])
    np.testing.assert_allclose(h.density, np.histogram(x, bins=edges, density=True)[0])
    h2 = histogram_2d(x, y, bins=(20, 15))
    ref, _, _ = np.histogram2d(x, y, bins=[h2.x_edges, h2.y_edges])
    np.testing.assert_array_equal(h2.counts, ref)
    surf = free_energy_surface(x, y, temperature_K=T_UNIT_KT, bins=(20, 15))
    assert np.nanmin(surf.free_energy_kJ_per_mol) == 0.0
    with pytest.raises(AnalysisError):
        free_energy_profile(x, temperature_K=300.0, jacobian="sphere")


def test_poincare_section_of_incommensurate_2d_oscillator_is_one_closed_curve():
    w1, w2 = 1.0, np.sqrt(2.0)  # incommensurate frequencies
    t = np.arange(0, 3000, 0.05)
    q1, p1 = 0.7 * np.sin(w1 * t), 0.7 * w1 * np.cos(w1 * t)
    q2, p2 = 0.5 * np.sin(w2 * t + 0.3), 0.5 * w2 * np.cos(w2 * t + 0.3)
    sec = poincare_section(q1, q2, p2, t, value=0.0, direction="up")
    # q1 = 0 going up at t = 2 pi k / w1
    k = np.arange(1, sec.n_points + 1)
    np.testing.assert_allclose(sec.time_ps, 2 * np.pi * k / w1, atol=1e-4)
    # every point on the invariant ellipse p2^2 + w2^2 q2^2 = 2 E2 (uncoupled oscillators)
    e2 = 0.5 * (sec.p2**2 + w2**2 * sec.q2**2)
    np.testing.assert_allclose(e2, 0.5 * (0.5 * w2) ** 2, rtol=2e-3)
    # and the points fill the whole curve (quasi-periodic motion): no large angular gap
    ang = np.sort(np.arctan2(sec.p2, w2 * sec.q2))
    gaps = np.diff(np.concatenate([ang, ang[:1] + 2 * np.pi]))
    assert gaps.max() < 0.2
    # "up" crossings are those with p1 > 0 (REFERENCES.md 7.4)
    assert np.all(poincare_section(q1, p1, p1, t, direction="up").p2 > 0)
    down = poincare_section(q1, q2, p2, t, direction="down")
    assert abs(down.n_points - sec.n_points) <= 1


def test_series_adapters():
    """The adapters pass a CoordinateSeries through; checked on the analytic 2D oscillator above."""
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.analyses.landscape import free_energy_of_series, poincare_from_series
    from phasewake.core.progress import result_of
    from phasewake.core.readers.memory import run_from_arrays

    w1, w2 = 1.0, np.sqrt(2.0)
    t = np.arange(0, 400, 0.02)
    pos = np.zeros((t.size, 1, 3))
    vel = np.zeros_like(pos)
    pos[:, 0, 0], vel[:, 0, 0] = 0.7 * np.sin(w1 * t), 0.7 * w1 * np.cos(w1 * t)
    pos[:, 0, 1], vel[:, 0, 1] = 0.5 * np.sin(w2 * t), 0.5 * w2 * np.cos(w2 * t)
    run = run_from_arrays(pos, t, np.array([2.0]), velocities_nm_per_ps=vel)
    sx, sy = result_of(compute_coordinates(run, ["x(0)", "y(0)"]))
    sec = poincare_from_series(sx, sy)
    # p2 = m v2 on the ellipse (p2/m)^2 + w2^2 q2^2 = (0.5 w2)^2 (float32 positions)
    np.testing.assert_allclose((sec.p2 / 2.0) ** 2 + w2**2 * sec.q2**2, (0.5 * w2) ** 2, rtol=5e-3)
    assert sec.p2_unit == "amu nm/ps"
    prof = free_energy_of_series(sx, temperature_K=T_UNIT_KT)
    assert prof.jacobian == "none" and prof.unit == "nm"


def test_chunked_block_counts_equal_one_pass_over_the_whole_series(monkeypatch):
    # the profile bins the series chunk by chunk (no index array of the whole series): the same counts as
    # numpy's histogram of each block (values on the last edge in the last bin, NaN and values outside left
    # out), chunks cut across the block boundaries, and the same profile as with one chunk
    from phasewake.core.analyses import landscape as L

    rng = np.random.default_rng(12)
    x = np.concatenate([rng.normal(-1, 0.3, 5000), rng.normal(1, 0.3, 5000)])
    x[[7, 900, 4321]] = np.nan
    edges = np.linspace(-1.5, 1.5, 41)
    x[50] = edges[-1]
    n_blocks = 7
    monkeypatch.setattr(L, "_COUNT_CHUNK", 333)
    got, outside = L._block_counts(x, edges, n_blocks)
    bounds = np.linspace(0, x.size, n_blocks + 1).astype(int)
    for b in range(n_blocks):
        part = x[bounds[b]:bounds[b + 1]]
        ref, _ = np.histogram(part[np.isfinite(part)], bins=edges)
        np.testing.assert_array_equal(got[b], ref)
    assert outside == x.size - got.sum()
    small = L.free_energy_profile(x[np.isfinite(x)], temperature_K=300.0)
    monkeypatch.setattr(L, "_COUNT_CHUNK", 1 << 30)
    whole = L.free_energy_profile(x[np.isfinite(x)], temperature_K=300.0)
    np.testing.assert_array_equal(small.counts, whole.counts)
    np.testing.assert_array_equal(small.error_kJ_per_mol, whole.error_kJ_per_mol)
