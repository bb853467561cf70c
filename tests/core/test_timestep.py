"""Time-step checks: fastest motion from the velocity spectrum, Nyquist, dt^2 scaling.

References: scipy.signal.welch (same estimator), analytic frequencies, the wavenumber conversion
nu~ = f / c (REFERENCES.md §4.3; c exact), Hairer, Lubich & Wanner 2006 for the dt^2 law.
"""

import math
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses import motion_spectrum as ms
from phasewake.core.analyses import timestep as ts
from phasewake.core.errors import AnalysisError
from tests.helpers import water_topology

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
    freq, power = ms.velocity_power_spectrum(v, m, 0.0005, segment_frames=2048)
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
    acc = ms.VelocitySpectrumAccumulator(m, 0.001, segment_frames=L)
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
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, np.ones(20), dt, segment_frames=512))
    assert fm.method.startswith("upper edge")
    assert abs(fm.wavenumber_per_cm - 1000.0) <= 2 * fm.resolution_per_ps / (C_CM_PER_S * 1e-12)


def test_weak_peak_below_prominence_is_ignored():
    t, v, m = oscillating_atoms([1000.0, 3000.0], [1.0, 0.01], [1.0, 1.0], 0.0005, 4096)
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, m, 0.0005, segment_frames=1024))
    assert fm.wavenumber_per_cm == pytest.approx(1000.0, abs=35.0)


def test_aliasing_when_frames_are_too_coarse():
    # 5 fs frames: Nyquist 3336 cm^-1 (REFERENCES.md §4.3 [C]); a 3000 cm^-1 motion sits near it.
    t, v, m = oscillating_atoms([3000.0], [1.0], [1.0], 0.005, 2048)
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, m, 0.005, segment_frames=512))
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
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import drive
    from phasewake.core.readers.memory import run_from_arrays

    dt, n = 0.0005, 4096
    t, v_slow, _ = oscillating_atoms([300.0] * 200, [1.0] * 200, [40.0] * 200, dt, n, seed=1)
    _, v_fast, _ = oscillating_atoms([3000.0] * 2, [1.0] * 2, [1.0] * 2, dt, n, seed=2)
    v = np.concatenate([v_slow, v_fast], axis=1)
    m = np.array([40.0] * 200 + [1.0] * 2)
    f_tot, p_tot = ms.velocity_power_spectrum(v, m, dt, segment_frames=1024)
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


# --- coarse frames: only resolved motions count; expected fast motions from the topology and masses ---


def test_expected_motions_of_flexible_and_rigid_water():
    top = water_topology(4)
    m = np.tile([15.999, 1.008, 1.008], 4)
    flex = ts.expected_fast_motions(top, m, n_constraints=0)
    names = [e.name for e in flex]
    assert names[0] == "O-H stretch" and "H-X-H bend" in names
    oh = flex[0]
    # common practice O-H stretch 3400-3700 cm^-1; period of 3700 cm^-1 = 1/(c nu) = 9.01 fs (REFERENCES §1.4)
    assert (oh.low_per_cm, oh.high_per_cm) == (3400.0, 3700.0) and oh.count == 8
    assert oh.shortest_period_ps * 1e3 == pytest.approx(1e15 / (3700 * C_CM_PER_S), rel=1e-9)
    # rigid water: nothing fast is left, whether the metadata says so or the positions show it
    assert ts.expected_fast_motions(top, m, n_constraints=12, constraints_words="rigid water") == ()
    rigid = np.array([[3 * k, 3 * k + j] for k in range(4) for j in (1, 2)])
    assert ts.expected_fast_motions(top, m, n_constraints=12, rigid_pairs=rigid) == ()


def test_heavy_hydrogens_scale_the_stretch_by_the_reduced_mass():
    # harmonic frequency ~ 1/sqrt(mu): hydrogen mass 3.024 amu (repartitioned) lowers the O-H band by
    # sqrt(mu(16, 1.008) / mu(16, 3.024)) (analytic)
    top = water_topology(1)
    mu = lambda a, b: a * b / (a + b)  # noqa: E731
    e = ts.expected_fast_motions(top, np.array([15.999, 3.024, 3.024]), n_constraints=0)[0]
    assert e.high_per_cm == pytest.approx(3700 * np.sqrt(mu(15.999, 1.008) / mu(15.999, 3.024)), rel=1e-9)


def test_light_atoms_without_bonds_still_expect_an_xh_stretch():
    m = np.tile([15.999, 1.008, 1.008], 3)
    e = ts.expected_fast_motions(None, m)
    assert len(e) == 1 and e[0].name == "X-H stretch" and "lighter than" in e[0].source
    assert ts.expected_fast_motions(None, np.full(5, 39.948)) == ()


def test_alias_folds_about_nyquist_like_the_sampled_spectrum():
    # a 3657 cm^-1 motion (REFERENCES §9) seen in frames 10 fs apart: Nyquist 1668 cm^-1 (REFERENCES §4.3);
    # the sampled cosine's spectrum (same estimator as scipy.signal.welch, tested above) peaks at the folded
    # frequency |3657 - 2 x 1667.8| = 321.4 cm^-1 (sampling theorem, analytic)
    dt = 0.010
    t, v, m = oscillating_atoms([3657.0], [1.0], [1.0], dt, 4096)
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, m, dt, segment_frames=1024))
    ny = 1 / (2 * dt * 1e-12 * C_CM_PER_S)
    assert ts.alias_of(3657.0, dt) == pytest.approx(abs(3657.0 - 2 * ny), rel=1e-12)
    assert fm.wavenumber_per_cm == pytest.approx(ts.alias_of(3657.0, dt), abs=fm.resolution_per_ps / (C_CM_PER_S * 1e-12))
    band = ts.alias_band(ts.ExpectedMotion("O-H stretch", 3400.0, 3700.0, 1, "test"), dt)
    assert any(lo <= fm.wavenumber_per_cm <= hi for lo, hi in band)


def test_peak_at_nyquist_is_never_ok():
    # issue: a peak at the Nyquist frequency gave "100 steps per period, ok". Frames 5 fs apart, a motion
    # at 0.95 x Nyquist (3169 cm^-1), time step 0.1 fs: the period seen is only an upper bound.
    dt = 0.005
    ny = 1 / (2 * dt * 1e-12 * C_CM_PER_S)
    t, v, m = oscillating_atoms([0.95 * ny], [1.0], [12.0], dt, 2048)
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, m, dt, segment_frames=512))
    assert fm.near_nyquist
    out = {v.kind: v for v in ts.timestep_verdicts(fm, dt, 0.0001, "user")}
    assert out["timestep.fastest_period"].level == "caution"
    assert "at most" in out["timestep.fastest_period"].message
    # a frame-spacing verdict is never "ok" here, and never flags the run either: it says what the frames
    # cannot show (the time step is judged by its own verdict above)
    assert out["timestep.nyquist"].level == "info" and "not the run itself" in out["timestep.nyquist"].message
    # the advice no longer swaps the bounds: the frequency found is a lower bound, the period an upper bound
    assert "lower bound on the fastest frequency" in out["timestep.nyquist"].message
    assert "upper bound on the fastest period" in out["timestep.nyquist"].message


def test_unresolved_oh_stretch_decides_the_time_step_not_its_alias():
    # flexible water frames 10 fs apart: the spectrum's top peak (an alias near 321 cm^-1) would allow a
    # 3 fs step; the O-H stretch from the topology (period 9.0 fs: limit 0.9 fs, common practice) does not.
    dt = 0.010
    t, v, m = oscillating_atoms([3657.0], [1.0], [1.0], dt, 4096)
    fm = ts.fastest_motion(*ms.velocity_power_spectrum(v, m, dt, segment_frames=1024))
    top = water_topology(2)
    exp = ts.expected_fast_motions(top, np.tile([15.999, 1.008, 1.008], 2), n_constraints=0)
    out = {v.kind: v for v in ts.timestep_verdicts(fm, dt, 0.003, "user (--timestep)", exp)}
    step = out["timestep.fastest_period"]
    assert step.level == "problem" and step.measured == pytest.approx(9.01 / 3, rel=0.01)
    assert "the O-H stretch near 3400-3700 cm^-1 cannot be seen at 10 fs frames" in out["timestep.expected_motion"].message
    assert out["timestep.expected_motion"].level == "info"  # what the frames show, not a fault of the run
    # with a 0.5 fs step (common practice for flexible X-H) the same frames give 18 steps per period: ok
    ok = {v.kind: v for v in ts.timestep_verdicts(fm, dt, 0.0005, "user", exp)}
    assert ok["timestep.fastest_period"].level == "ok"


# --- real flexible-water runs made with OpenMM (tests/data/engines/openmm, see its README and reported.json) ---

ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm"


def _flexible(frames_fs: int, *, topology: bool = True, tmp: Path | None = None):
    """The run with start.pdb as its topology, or (``topology=False``) with none at all: a copy in ``tmp``
    of the H5MD without its species, whose atomic numbers and bonds would otherwise give one."""
    import shutil

    import h5py

    from phasewake.core.readers import open_run

    folder = ENGINES / f"tip3p_flexible_frames_{frames_fs}fs"
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    if topology:
        return open_run([folder / "frames.h5md"], topology=folder / "start.pdb")
    assert tmp is not None
    bare = tmp / "frames.h5md"
    shutil.copyfile(folder / "frames.h5md", bare)
    with h5py.File(bare, "a") as f:
        del f["particles/all/species"]
    return open_run([bare])


def test_flexible_water_1fs_vdos_top_peak_is_the_oh_stretch():
    from phasewake.core.analyses.velocity import vibrational_spectrum
    from phasewake.core.progress import result_of

    s = result_of(vibrational_spectrum(_flexible(1)))
    # the top (highest-frequency) significant peak is the O-H stretch of flexible TIP3P, in 3000-4000 cm^-1
    # (the check; gas-phase fundamentals 3657/3756 cm^-1, REFERENCES §9)
    assert s.highest_significant_peak_cm1 is not None and 3000 < s.highest_significant_peak_cm1 < 4000
    assert not s.unresolved_motions and all(not p.not_a_motion for p in s.peaks)


@pytest.mark.parametrize("topology", [True, False])
def test_flexible_water_10fs_peaks_are_not_motions(topology, tmp_path):
    # the issue: at 10 fs the stretches and the bend fold to ~350, 417 and 967 cm^-1 and were listed as motions
    from phasewake.core.analyses.velocity import vibrational_spectrum
    from phasewake.core.progress import result_of

    s = result_of(vibrational_spectrum(_flexible(10, topology=topology, tmp=tmp_path)))
    assert s.peaks and all(p.not_a_motion for p in s.peaks)
    assert s.highest_significant_peak_cm1 is None
    what = "the O-H stretch near 3400-3700 cm^-1" if topology else "the X-H stretch"
    assert any(what in n and "cannot be seen at 10 fs frames" in n for n in s.notes)


@pytest.mark.parametrize("topology", [True, False])
def test_flexible_water_10fs_says_the_stretch_is_not_resolved_and_3fs_is_not_ok(topology, tmp_path):
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import result_of

    res = result_of(audit_run(_flexible(10, topology=topology, tmp=tmp_path), timestep_ps=0.003))
    v = {x.kind: x for x in res.verdicts}
    # was "ok, 11.4 steps per period"; limit ~0.9 fs = period of 3700 cm^-1 / 10 (common practice). With the
    # topology the positions show the bonds are free (problem); without it that is an assumption (caution)
    assert v["timestep.fastest_period"].level == ("problem" if topology else "caution")
    period = v["timestep.fastest_period"].details["period_ps"]
    assert period == pytest.approx(1 / (3700 * C_CM_PER_S * 1e-12), rel=1e-3)  # H mass of the file, not 1.008
    what = "O-H stretch near 3400-3700 cm^-1" if topology else "X-H stretch"
    assert what in v["timestep.expected_motion"].message
    assert "cannot be seen at 10 fs frames" in v["timestep.expected_motion"].message
    # frames 10 fs apart are a choice of output, not a fault of the run: said, not flagged
    assert v["timestep.expected_motion"].level == "info"


def test_flexible_water_1fs_resolves_the_stretch_and_judges_by_the_measured_peak():
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.progress import result_of

    res = result_of(audit_run(_flexible(1), timestep_ps=0.003))
    v = {x.kind: x for x in res.verdicts}
    assert v["timestep.fastest_period"].level == "problem"
    assert "spectrum's fastest motion" in v["timestep.fastest_period"].message
    assert v["timestep.expected_motion"].level == "ok"
    # the run's own step, 0.5 fs (reported.json), is ok against the measured stretch
    ok = {x.kind: x for x in result_of(audit_run(_flexible(1), timestep_ps=0.0005)).verdicts}
    assert ok["timestep.fastest_period"].level == "ok"


def test_constraints_known_or_unknown_set_how_sure_the_check_is():
    m = np.tile([15.999, 1.008, 1.008], 4)
    # no topology, constraints unknown: an assumption, said so; with 8 constraints for 8 hydrogens: none expected
    e = ts.expected_fast_motions(None, m)
    assert e[0].assumed and "assumed free" in e[0].source
    assert ts.expected_fast_motions(None, m, n_constraints=8) == ()
    assert not ts.expected_fast_motions(None, m, n_constraints=0)[0].assumed
    # an assumed stretch caps the verdicts at caution and says why
    out = {v.kind: v for v in ts.timestep_verdicts(None, 0.010, 0.003, "user", e)}
    assert out["timestep.fastest_period"].level == "caution" and "assumption" in out["timestep.fastest_period"].message
    assert out["timestep.expected_motion"].level == "info"
