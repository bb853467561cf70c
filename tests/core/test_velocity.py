"""Checks of phasewake.core.analyses.velocity: VACF, Green-Kubo and Einstein diffusion, VDOS, Yeh-Hummer."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import lfilter

from phasewake.core.analyses import velocity as V
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking

C_CM_PER_S = 2.99792458e10  # exact (SI 2019)


def direct_vacf(v: np.ndarray, lags: int, w: np.ndarray | None = None) -> np.ndarray:
    """Brute-force average over origins and atoms of w_i v_i(t).v_i(t+k) (numpy, O(F L))."""
    f, n = v.shape[:2]
    w = np.ones(n) if w is None else w
    return np.array([np.einsum("tnc,tnc,n->", v[: f - k], v[k:], w) / ((f - k) * n) for k in range(lags)])


def langevin_free(m: float, gamma: float, kT: float, dt: float, n_particles: int, n_steps: int, seed: int):
    """Exact Ornstein-Uhlenbeck update of the velocity, v' = a v + sqrt(kT/m (1 - a^2)) xi, a = exp(-gamma dt),
    started from the Maxwell-Boltzmann distribution; positions by the trapezoidal rule."""
    rng = np.random.default_rng(seed)
    a = np.exp(-gamma * dt)
    noise = rng.standard_normal((n_steps, n_particles, 3)) * np.sqrt(kT / m * (1 - a * a))
    noise[0] = rng.standard_normal((n_particles, 3)) * np.sqrt(kT / m)
    v = lfilter([1.0], [1.0, -a], noise, axis=0)
    x = np.concatenate([np.zeros((1, n_particles, 3)), np.cumsum(0.5 * (v[1:] + v[:-1]), axis=0) * dt])
    return x, v


@pytest.fixture(scope="module")
def ou():
    m, gamma, kT, dt = 2.0, 3.0, 1.0, 0.05
    x, v = langevin_free(m, gamma, kT, dt, 200, 20_000, seed=1)
    return {"m": m, "gamma": gamma, "kT": kT, "dt": dt, "x": x, "v": v}


# --- the block correlator against the direct sum (numpy) ---

@pytest.mark.parametrize("f,lag", [(50, 1), (50, 16), (50, 49), (50, 50), (203, 37)])
def test_block_vacf_equals_direct_sum(f, lag):
    v = np.random.default_rng(f + lag).standard_normal((f, 4, 3)).astype(np.float32)
    r = V.vacf_from_velocities(v, 0.1, max_lag=lag)
    np.testing.assert_allclose(r.vacf[0], direct_vacf(v.astype(float), min(lag, f)), rtol=1e-4, atol=1e-5)
    assert r.unit == "nm^2/ps^2" and r.lag_ps[-1] == pytest.approx(0.1 * (min(lag, f) - 1))


@pytest.mark.parametrize("engine", ["gram", "fft"])
@pytest.mark.parametrize("lag", [1, 7, 40, 203])
def test_both_engines_equal_direct_sum_with_ragged_chunks(engine, lag):
    x = np.random.default_rng(lag).standard_normal((203, 5, 3))
    w = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    lab = np.array([0, 1, 1, -1, 0])  # atom 3 unused
    c = V.BlockCorrelator(n_atoms=5, max_lag=lag, weights=w, group_of_atom=lab, n_groups=2, dtype=np.float64,
                          engine=engine)
    for i in range(0, 203, 17):
        c.update(x[i : i + 17])
    sums, counts = c.finish()
    np.testing.assert_allclose(sums[0] / counts / 2, direct_vacf(x[:, [0, 4]], lag, w[[0, 4]]), rtol=1e-10)
    np.testing.assert_allclose(sums[1] / counts / 2, direct_vacf(x[:, [1, 2]], lag, w[[1, 2]]), rtol=1e-10)


def test_groups_and_mass_weighting():
    v = np.random.default_rng(3).standard_normal((120, 5, 3)).astype(np.float32)
    masses = np.array([1.0, 2.0, 3.0, 4.0, 16.0])
    r = V.vacf_from_velocities(v, 0.5, masses_amu=masses, mass_weighted=True, groups={"a": [0, 3], "b": [4]},
                               max_lag=20)
    vf = v.astype(float)
    np.testing.assert_allclose(r.vacf[0], direct_vacf(vf[:, [0, 3]], 20, masses[[0, 3]]), rtol=1e-4, atol=1e-5)
    np.testing.assert_allclose(r.vacf[1], direct_vacf(vf[:, [4]], 20, masses[[4]]), rtol=1e-4, atol=1e-4)
    assert r.unit == "kJ/mol" and r.groups == ("a", "b")
    with pytest.raises(AnalysisError):
        V.vacf_from_velocities(v, 0.5, groups={"a": [0, 1], "b": [1]})


def test_streaming_run_adapter_matches_kernel():
    v = np.random.default_rng(4).standard_normal((301, 6, 3)).astype(np.float32)
    t = np.arange(301) * 0.002
    run = run_from_arrays(np.zeros_like(v), t, np.full(6, 12.0), velocities_nm_per_ps=v)
    with chunking(frames=17):  # chunks do not align with blocks
        streamed = result_of(V.vacf(run, max_lag_ps=0.1))
    kernel = V.vacf_from_velocities(v, 0.002, max_lag=50)
    np.testing.assert_allclose(streamed.vacf, kernel.vacf, rtol=1e-5, atol=1e-6)
    no_vel = run_from_arrays(np.zeros_like(v), t, np.full(6, 12.0))
    with pytest.raises(MissingDataError):
        result_of(V.vacf(no_vel))


# --- Langevin free particle: VACF = (kT/m) exp(-gamma t) per component, D = kT/(m gamma) (Einstein) ---

@pytest.mark.slow  # measured 1.1 s of CPU
def test_langevin_vacf_is_exponential(ou):
    r = V.vacf_from_velocities(ou["v"].astype(np.float32), ou["dt"], max_lag=400)
    t = r.lag_ps[:20]  # up to ~3/gamma
    exact = 3 * ou["kT"] / ou["m"] * np.exp(-ou["gamma"] * t)  # three components
    np.testing.assert_allclose(r.vacf[0][:20], exact, rtol=0.03, atol=0.005)


def test_green_kubo_diffusion_of_langevin_particle(ou):
    d_exact = ou["kT"] / (ou["m"] * ou["gamma"])  # Einstein relation
    r = V.vacf_from_velocities(ou["v"].astype(np.float32), ou["dt"], max_lag=400)
    for limit in (5 / ou["gamma"], 10 / ou["gamma"]):
        gk = V.green_kubo(r, limit_ps=limit)
        assert gk.diffusion_nm2_per_ps == pytest.approx(d_exact, rel=0.02)  # within 2%
        assert gk.limit_rule == "user"
    auto = V.green_kubo(r)
    assert auto.diffusion_nm2_per_ps == pytest.approx(d_exact, rel=0.02)
    assert auto.limit_ps >= 3 / ou["gamma"]  # chosen after the decay (truncation error e^-3 would be 5%)
    assert auto.diffusion_cm2_per_s == pytest.approx(auto.diffusion_nm2_per_ps * 1e-2)


@pytest.mark.slow  # measured 0.8 s of CPU
def test_msd_diffusion_of_langevin_particle(ou):
    d_exact = ou["kT"] / (ou["m"] * ou["gamma"])
    r = V.msd_from_positions(ou["x"], ou["dt"], max_lag=200)
    assert r.diffusion_nm2_per_ps[0] == pytest.approx(d_exact, rel=0.02)
    # finite-time MSD of the OU process: 2 d D [t - (1 - exp(-gamma t))/gamma] (textbook, from memory)
    t = r.lag_ps[1:100]
    g = ou["gamma"]
    exact = 6 * d_exact * (t - (1 - np.exp(-g * t)) / g)
    np.testing.assert_allclose(r.msd_nm2[0][1:100], exact, rtol=0.05)


def test_msd_unwraps_through_the_box():
    # ballistic particles crossing a 2 nm periodic box many times: MSD(k) = |u|^2 (k dt)^2 exactly
    f, dt = 400, 0.01
    u = np.array([[1.3, -0.7, 0.4], [0.2, 0.9, -1.1]])
    t = np.arange(f) * dt
    true = t[:, None, None] * u[None]
    wrapped = np.mod(true, 2.0)
    r = V.msd_from_positions(wrapped, dt, box_nm=np.array([2.0, 2.0, 2.0]), max_lag=100)
    np.testing.assert_allclose(r.msd_nm2[0], np.mean(np.sum(u ** 2, 1)) * r.lag_ps ** 2, rtol=1e-9, atol=1e-12)
    run = run_from_arrays(wrapped, t, np.ones(2), box_nm=np.array([2.0, 2.0, 2.0]))
    with chunking(frames=33):
        streamed = result_of(V.msd(run, max_lag_ps=1.0))
    np.testing.assert_allclose(streamed.msd_nm2, r.msd_nm2, rtol=1e-6, atol=1e-6)  # positions stored as float32


# --- vibrational density of states ---

def test_vdos_of_3657_cosine_peaks_within_one_bin():
    dt = 0.0005  # 0.5 fs
    t = np.arange(20_000) * dt  # 10 ps
    v = np.zeros((t.size, 1, 3), np.float32)
    v[:, 0, 0] = np.cos(2 * np.pi * C_CM_PER_S * 3657.0 * t * 1e-12)  # c exact; 3657 cm^-1 water nu1
    r = V.vdos_from_velocities(v, np.ones(1), dt, max_lag=10_000)  # lag window 5 ps: bins of 1/(c 10 ps)
    assert len(r.peaks) == 1
    # within one bin of 1/(c * 10 ps) = 3.336 cm^-1 (REFERENCES 4.3)
    assert abs(r.peaks[0].wavenumber_cm1 - 3657.0) <= 1 / (C_CM_PER_S * 10e-12)
    assert r.highest_significant_peak_cm1 == r.peaks[0].wavenumber_cm1
    assert r.nyquist_cm1 == pytest.approx(1 / (2 * C_CM_PER_S * 0.5e-15))  # 33356 cm^-1
    assert np.trapezoid(r.intensity, r.wavenumber_cm1) == pytest.approx(3.0)  # normalised to N_dof = 3N
    assert r.thz[np.argmax(r.intensity)] == pytest.approx(3657 * C_CM_PER_S * 1e-12, abs=0.2)


def test_vdos_two_modes_and_highest_peak():
    dt = 0.0005
    t = np.arange(16_000) * dt
    rng = np.random.default_rng(0)
    v = np.zeros((t.size, 2, 3), np.float32)
    v[:, 0, 1] = np.cos(2 * np.pi * C_CM_PER_S * 1595.0 * t * 1e-12 + rng.uniform(0, 6))
    v[:, 1, 2] = 0.5 * np.cos(2 * np.pi * C_CM_PER_S * 3756.0 * t * 1e-12 + rng.uniform(0, 6))
    r = V.vdos_from_velocities(v, np.array([1.0, 4.0]), dt)  # equal mass-weighted power in both modes
    assert r.max_lag_ps == pytest.approx(2.0)  # default lag window
    assert r.resolution_cm1 == pytest.approx(1 / (C_CM_PER_S * 2e-12))  # 16.7 cm^-1
    found = sorted(p.wavenumber_cm1 for p in r.peaks)
    assert len(found) == 2
    assert abs(found[0] - 1595) <= r.bin_spacing_cm1 and abs(found[1] - 3756) <= r.bin_spacing_cm1
    assert r.highest_significant_peak_cm1 == pytest.approx(found[1])
    # 99% of the weight lies below a little above the top mode (Hann leakage spreads ~ one resolution)
    assert 3756 < r.upper_wavenumber_cm1 < 3756 + 3 * r.resolution_cm1


def test_streaming_spectrum_matches_kernel():
    dt = 0.001
    t = np.arange(2000) * dt
    v = np.random.default_rng(2).standard_normal((2000, 3, 3)).astype(np.float32)
    v[:, :, 0] += np.cos(2 * np.pi * C_CM_PER_S * 2000 * t * 1e-12)[:, None]
    run = run_from_arrays(np.zeros_like(v), t, np.array([1.0, 12.0, 16.0]), velocities_nm_per_ps=v)
    with chunking(frames=64):
        a = result_of(V.vibrational_spectrum(run))
    b = V.vdos_from_velocities(v, np.array([1.0, 12.0, 16.0]), dt)
    assert a.max_lag_ps == pytest.approx(1.0)  # half of the 2 ps run
    np.testing.assert_allclose(a.intensity, b.intensity, rtol=1e-4, atol=1e-9)
    assert abs(a.highest_significant_peak_cm1 - 2000) < 2 * a.bin_spacing_cm1


# --- Yeh-Hummer (J. Phys. Chem. B 108, 15873 (2004)) ---

@pytest.mark.parametrize("eta,box,expected", [(0.89, 3.0, 0.232e-9), (0.89, 5.0, 0.139e-9), (0.32, 3.0, 0.645e-9)])
def test_yeh_hummer_values(eta, box, expected):
    # check values from REFERENCES 4.4 (computed there from the published formula, 298.15 K)
    d = V.yeh_hummer_correction_nm2_per_ps(temperature_K=298.15, viscosity_mPa_s=eta, box_edge_nm=box)
    assert d * 1e-6 == pytest.approx(expected, rel=3e-3)  # nm^2/ps -> m^2/s


# --- real OpenMM output: free particles under OpenMM's Langevin integrator ---

@pytest.mark.slow
def test_openmm_langevin_free_particles_diffusion():
    import openmm
    from openmm import unit as u

    n, mass, gamma, temp = 500, 12.0, 3.0, 300.0
    system = openmm.System()
    for _ in range(n):
        system.addParticle(mass)
    system.addForce(openmm.CustomExternalForce("0"))  # no forces: free particles
    dt = 0.02  # ps; free particles: the integrator's O step is an exact Ornstein-Uhlenbeck update
    integ = openmm.LangevinMiddleIntegrator(temp * u.kelvin, gamma / u.picosecond, dt * u.picoseconds)
    integ.setRandomNumberSeed(7)
    ctx = openmm.Context(system, integ, openmm.Platform.getPlatformByName("Reference"))
    ctx.setPositions(np.zeros((n, 3)) * u.nanometer)
    ctx.setVelocitiesToTemperature(temp * u.kelvin, 11)
    integ.step(100)
    every, frames = 1, 4000
    vel = np.empty((frames, n, 3), np.float32)
    for i in range(frames):
        integ.step(every)
        vel[i] = ctx.getState(getVelocities=True).getVelocities(asNumpy=True).value_in_unit(u.nanometer / u.picosecond)
    r = V.vacf_from_velocities(vel, every * dt, max_lag=200)
    kT = 0.00831446261815324 * temp
    t = r.lag_ps[:17]
    # OU velocity autocorrelation 3 (kT/m) exp(-gamma t) and Einstein D = kT/(m gamma)
    np.testing.assert_allclose(r.vacf[0][:17], 3 * kT / mass * np.exp(-gamma * t), rtol=0.05, atol=0.01)
    gk = V.green_kubo(r)
    assert gk.diffusion_nm2_per_ps == pytest.approx(kT / (mass * gamma), rel=0.02)  # within 2%
