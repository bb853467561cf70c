"""Time-step checks: fastest motion from the velocity spectrum, Nyquist, dt^2 scaling.

References: scipy.signal.welch (same estimator), analytic frequencies, the wavenumber conversion
nu~ = f / c (REFERENCES.md §4.3; c exact), Hairer, Lubich & Wanner 2006 for the dt^2 law.
"""

import math

import numpy as np
import pytest

from phasewake.core import timestep as ts
from phasewake.core.errors import AnalysisError

C_CM_PER_S = 2.99792458e10  # exact


def oscillating_atoms(wavenumbers_cm, amplitudes, masses, dt_ps, n_frames, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n_frames) * dt_ps
    n = len(wavenumbers_cm)
    v = np.zeros((n_frames, n, 3))
    for i, (nu, a) in enumerate(zip(wavenumbers_cm, amplitudes)):
        f = nu * C_CM_PER_S * 1e-12  # 1/ps
        phase = rng.uniform(0, 2 * math.pi, 3)
        v[:, i, :] = a * np.cos(2 * math.pi * f * t[:, None] + phase)
    return t, v, np.asarray(masses, float)


def test_fastest_peak_is_the_oh_stretch_within_one_bin():
    # A 3657 cm^-1 and a 1595 cm^-1 motion (H2O fundamentals, REFERENCES.md §9 [V2]) sampled every 0.5 fs.
    t, v, m = oscillating_atoms([1595.0, 3657.0], [1.0, 1.0], [16.0, 1.0], 0.0005, 8192)
    freq, power = ts.velocity_power_spectrum(v, m, 0.0005, segment_frames=2048)
    fm = ts.fastest_motion(freq, power)
    assert abs(fm.wavenumber_per_cm - 3657.0) <= fm.resolution_per_ps / (C_CM_PER_S * 1e-12)
    assert fm.period_ps * 1e3 == pytest.approx(1e15 / (3657 * C_CM_PER_S), rel=0.01)  # 9.12 fs, REFERENCES §1.4
    assert not fm.near_nyquist


def test_spectrum_shape_matches_scipy_welch():
    # Our streaming estimator is Welch's (Hann, no overlap, constant detrend): compare with scipy.signal.welch.
    from scipy.signal import welch

    rng = np.random.default_rng(1)
    n, L = 4096, 512
    v = rng.normal(size=(n, 4, 3)).cumsum(axis=0) * 0.01 + rng.normal(size=(n, 4, 3))
    m = np.array([1.0, 12.0, 16.0, 2.0])
    acc = ts.VelocitySpectrumAccumulator(m, 0.001, segment_frames=L)
    for start in range(0, n, 700):  # chunks that do not align with segments
        acc.update(v[start:start + 700])
    freq, ours = acc.finish()
    f_ref, p_ref = welch(v, fs=1000.0, window="hann", nperseg=L, noverlap=0, detrend="constant",
                         scaling="spectrum", axis=0)
    ref = np.einsum("fai,a->f", p_ref, m)
    np.testing.assert_allclose(freq, f_ref)
    inner = slice(1, -1)  # welch doubles the one-sided bins except DC and Nyquist
    ratio = ours[inner] / ref[inner]
    np.testing.assert_allclose(ratio, ratio[0], rtol=1e-4)


def test_broad_band_upper_edge():
    # Liquids give bands, not lines: white-noise velocities low-pass filtered (brick wall) at 1000 cm^-1
    # have a flat spectrum up to that edge and nothing above, so the fastest motion is the edge.
    rng = np.random.default_rng(7)
    n, dt = 8192, 0.001
    f = np.fft.rfftfreq(n, dt)
    cut = 1000.0 * C_CM_PER_S * 1e-12
    spec = np.fft.rfft(rng.normal(size=(n, 20, 3)), axis=0)
    spec[f > cut] = 0.0
    v = np.fft.irfft(spec, n, axis=0)
    fm = ts.fastest_motion(*ts.velocity_power_spectrum(v, np.ones(20), dt, segment_frames=512))
    assert fm.method.startswith("upper edge")
    assert abs(fm.wavenumber_per_cm - 1000.0) <= 2 * fm.resolution_per_ps / (C_CM_PER_S * 1e-12)


def test_weak_peak_below_prominence_is_ignored():
    t, v, m = oscillating_atoms([1000.0, 3000.0], [1.0, 0.01], [1.0, 1.0], 0.0005, 4096)
    fm = ts.fastest_motion(*ts.velocity_power_spectrum(v, m, 0.0005, segment_frames=1024))
    assert fm.wavenumber_per_cm == pytest.approx(1000.0, abs=35.0)


def test_aliasing_when_frames_are_too_coarse():
    # 5 fs frames: Nyquist 3336 cm^-1 (REFERENCES.md §4.3 [C]); a 3000 cm^-1 motion sits near it.
    t, v, m = oscillating_atoms([3000.0], [1.0], [1.0], 0.005, 2048)
    fm = ts.fastest_motion(*ts.velocity_power_spectrum(v, m, 0.005, segment_frames=512))
    assert fm.nyquist_per_ps / (C_CM_PER_S * 1e-12) == pytest.approx(3336, abs=1)
    assert fm.near_nyquist
    chk = ts.check_timestep(fm.period_ps, 0.005, 0.001)
    assert chk.frames_per_period < 2.5
    assert chk.steps_per_period == pytest.approx(11.1, rel=0.02)  # 11.1 fs period, 1 fs step (REFERENCES §1.4)


def test_scaling_exponent_and_errors():
    # sigma ~ dt^2 for second-order symplectic integrators (Hairer, Lubich & Wanner 2006).
    r = ts.timestep_scaling(0.004, 16.0, 0.001, 1.0)
    assert r.exponent == pytest.approx(2.0)
    assert ts.timestep_scaling(0.004, 8.0, 0.001, 1.0).exponent == pytest.approx(1.5)
    with pytest.raises(AnalysisError):
        ts.timestep_scaling(0.001, 1.0, 0.001, 2.0)
    with pytest.raises(AnalysisError):
        ts.fastest_motion(np.arange(10.0), np.zeros(10))


def test_few_fast_atoms_are_not_drowned_by_many_slow_ones():
    # 200 heavy atoms at 300 cm^-1 and 2 light atoms at 3000 cm^-1 carrying 0.03 % of the mass-weighted
    # power: the total spectrum alone would miss the fast motion; the per-group spectra find it.
    from phasewake.core.audit import audit_run
    from phasewake.core.progress import drive
    from phasewake.core.readers.memory import run_from_arrays

    dt, n = 0.0005, 4096
    t, v_slow, _ = oscillating_atoms([300.0] * 200, [1.0] * 200, [40.0] * 200, dt, n, seed=1)
    _, v_fast, _ = oscillating_atoms([3000.0] * 2, [1.0] * 2, [1.0] * 2, dt, n, seed=2)
    v = np.concatenate([v_slow, v_fast], axis=1)
    m = np.array([40.0] * 200 + [1.0] * 2)
    f_tot, p_tot = ts.velocity_power_spectrum(v, m, dt, segment_frames=1024)
    assert ts.fastest_motion(f_tot, p_tot).wavenumber_per_cm < 400  # the total alone misses it
    pos = np.cumsum(v, axis=0) * dt
    run = run_from_arrays(pos, t, m, velocities_nm_per_ps=v)
    res = drive(audit_run(run, timestep_ps=0.002, segment_frames=1024))
    fm = res.timestep.fastest
    assert abs(fm.wavenumber_per_cm - 3000.0) <= fm.resolution_per_ps / (C_CM_PER_S * 1e-12)
    assert res.timestep.fastest_group == "mass 1 amu"
    # period 11.1 fs at dt = 2 fs: 5.6 steps per period -> caution (common practice: >= 10)
    v_ts = {x.kind: x for x in res.verdicts}["timestep.fastest_period"]
    assert v_ts.level == "caution"
