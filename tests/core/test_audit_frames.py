"""The audit's frame pass as a chunk reduction: AuditFramesConsumer in a shared one pass.

References: the definition K = sum_i m_i v_i^2 / 2 in float64 numpy, |sum_i m_i v_i|^2 / (2M) for the
centre-of-mass part, and the array form of the streaming Welch spectrum fed the whole velocity array at
once (the previous route, itself checked against scipy.signal.welch in test_timestep.py).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from phasewake.core.analyses import motion_spectrum as ms
from phasewake.core.analyses.audit import AuditFramesConsumer, audit_run, audit_summary
from phasewake.core.analyses.coordinates import CoordinatesConsumer
from phasewake.core.model.framepass import run_pass
from phasewake.core.model.run import RunMetadata
from phasewake.core.progress import drive
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking
from tests.counting import counted


def _water_ions(n_frames: int = 300, thermostatted: bool = True, seed: int = 3):
    """60 three-site molecules and 20 ions with an mdtraj topology; H atoms carry a 40/ps oscillation."""
    import mdtraj as md

    top = md.Topology()
    ch = top.add_chain()
    for _ in range(60):
        r = top.add_residue("HOH", ch)
        o = top.add_atom("O", md.element.oxygen, r)
        top.add_bond(o, top.add_atom("H1", md.element.hydrogen, r))
        top.add_bond(o, top.add_atom("H2", md.element.hydrogen, r))
    for _ in range(20):
        top.add_atom("NA", md.element.sodium, top.add_residue("NA", ch))
    n = top.n_atoms
    rng = np.random.default_rng(seed)
    m = np.array([a.element.mass for a in top.atoms])
    t = np.arange(n_frames) * 0.002
    x = rng.uniform(0, 3, (n, 3))[None] + 0.01 * rng.standard_normal((n_frames, n, 3))
    v = rng.standard_normal((n_frames, n, 3)) * np.sqrt(2.494 / m)[None, :, None]
    v += 0.3 * np.sin(2 * np.pi * 40 * t)[:, None, None] * (m < 2)[None, :, None]
    meta = RunMetadata(ensemble="NVT" if thermostatted else "NVE", thermostat="langevin" if thermostatted else None,
                       temperature_K=300.0, timestep_ps=0.002)
    return run_from_arrays(x.astype(np.float32), t, m, velocities_nm_per_ps=v.astype(np.float32), topology=top,
                           metadata=meta, name="water-ions")


_counting = counted


def test_one_pass_feeds_the_audit_and_coordinates_reading_frames_once():
    run, counter = _counting(_water_ions())
    consumers = {"audit": AuditFramesConsumer.for_run(run), "q": CoordinatesConsumer(run, ["distance(0, 1)"])}
    with chunking(frames=64):
        out = drive(run_pass(run, consumers))
    assert counter.calls == 1 and counter.frames_read == run.n_frames
    fr = out["audit"]
    assert fr.kinetic_kJ_per_mol.shape == (run.n_frames,) and out["q"][0].values.shape == (run.n_frames,)
    # the audit fed from the shared pass reads no frames and says exactly what its own pass says
    with chunking(frames=64):
        shared = drive(audit_run(run, frames=fr))
        assert counter.calls == 1
        alone = drive(audit_run(run))
    assert counter.calls == 2
    assert audit_summary(shared) == audit_summary(alone)
    np.testing.assert_array_equal(shared.temperature.temperature_K, alone.temperature.temperature_K)
    np.testing.assert_array_equal(shared.timestep.power, alone.timestep.power)


@pytest.mark.parametrize("chunk", [37, 256])
def test_frame_sums_match_their_definitions(chunk):
    run = _water_ions(n_frames=301, thermostatted=False)
    groups = {"water": np.arange(180), "ions": np.arange(180, 200), "some": np.arange(5, 50, 3)}
    c = AuditFramesConsumer(run, groups=groups, infer=True, want_speeds=True, segment_frames=64)
    with chunking(frames=chunk):
        fr = drive(run_pass(run, {"a": c}))["a"]
    v = np.asarray(run.frames.iter_chunks(chunk_frames=run.n_frames).__next__().velocities_nm_per_ps,
                   dtype=np.float64)
    m = run.masses_amu
    k_ref = 0.5 * np.einsum("fia,fia,i->f", v, v, m)  # K = sum m v^2 / 2 (definition), float64
    np.testing.assert_allclose(fr.kinetic_kJ_per_mol, k_ref, rtol=1e-5)  # float32 products
    for j, idx in enumerate(groups.values()):
        kg = 0.5 * np.einsum("fia,fia,i->f", v[:, idx], v[:, idx], m[idx])
        np.testing.assert_allclose(fr.group_kinetic_kJ_per_mol[:, j], kg, rtol=1e-5)
    p = np.einsum("fia,i->fa", v, m)
    com_ref = np.einsum("fa,fa->f", p, p) / (2 * m.sum())
    # the total momentum is a sum with cancellation in float32: its error is judged against K itself
    np.testing.assert_allclose(fr.com_kinetic_kJ_per_mol, com_ref, atol=1e-6 * float(k_ref.mean()))
    # the spectrum equals the accumulator fed the whole array at once (previous route), to float32 rounding
    labels, names = ms.spectrum_groups(run.topology, m)
    h = float(np.median(np.diff(run.time_ps)))  # the frame spacing, as the audit takes it
    acc = ms.VelocitySpectrumAccumulator(m, h, segment_frames=64, labels=labels, max_segments=64)
    acc.update(v.astype(np.float32))
    f_ref, p_ref = acc.finish()
    np.testing.assert_array_equal(fr.spectrum_frequency_per_ps, f_ref)
    np.testing.assert_allclose(fr.spectrum_power, p_ref, rtol=1e-6)
    for name, gp in zip(names, acc.finish_groups(), strict=True):
        np.testing.assert_allclose(fr.group_spectra[name], gp, rtol=1e-6, atol=1e-9 * float(gp.max()))
    # speeds of kept frames: |v| of the stored velocities (every stride-th frame)
    sp = next(iter(fr.speeds_nm_per_ps))
    got = fr.speeds_nm_per_ps[sp]
    from phasewake.core.analyses.temperature import species_of

    idx = species_of(run.topology, m)[sp][: got.shape[1]]
    ref = np.sqrt((v[:: fr.speed_frame_stride] ** 2).sum(axis=2))[:, idx]
    np.testing.assert_allclose(got, ref, rtol=1e-6)
    assert fr.inference is not None and fr.inference.n_frames_used == run.n_frames


def test_spectrum_groups_by_mass_match_the_per_atom_rule():
    m = np.random.default_rng(0).choice([1.008, 15.999, 12.011, 1.0080001, 39.948], 3000)
    labels, names = ms.spectrum_groups(None, m)
    keys = [f"mass {x:.4g} amu" for x in m]  # the rule, atom by atom
    assert names == sorted(set(keys))
    assert [names[i] for i in labels] == keys


def test_frames_for_other_groups_are_refused():
    from phasewake.core.errors import AnalysisError

    run = _water_ions(n_frames=64)
    fr = drive(run_pass(run, {"a": AuditFramesConsumer.for_run(run, groups={"x": np.arange(3)})}))["a"]
    with pytest.raises(AnalysisError, match="other groups"):
        drive(audit_run(run, frames=fr))


def test_centre_of_mass_sums_only_when_the_audit_needs_them():
    nve = _water_ions(n_frames=64, thermostatted=False)
    fr = drive(run_pass(nve, {"a": AuditFramesConsumer.for_run(nve)}))["a"]
    assert fr.com_kinetic_kJ_per_mol is None  # NVE: 3 removed by rule, nothing to decide from frames
    nvt = _water_ions(n_frames=64, thermostatted=True)
    fr2 = drive(run_pass(nvt, {"a": AuditFramesConsumer.for_run(nvt)}))["a"]
    assert fr2.com_kinetic_kJ_per_mol is not None and fr2.com_kinetic_kJ_per_mol.shape == (64,)
    from phasewake.core.errors import AnalysisError

    fr3 = drive(run_pass(nvt, {"a": AuditFramesConsumer(nvt, groups={}, infer=True, want_speeds=True,
                                                        want_com=False)}))["a"]
    with pytest.raises(AnalysisError, match="centre-of-mass"):
        drive(audit_run(nvt, frames=dataclasses.replace(fr3, group_names=fr2.group_names,
                                                        group_kinetic_kJ_per_mol=fr2.group_kinetic_kJ_per_mol)))


def test_frame_pass_builder_carries_the_audit_with_the_pca_and_vacf():
    """The audit's frames next to a PCA and a VACF: one read; each equals its own analysis run alone."""
    from phasewake.core.analyses.projection import PCAConsumer, compute_pca
    from phasewake.core.analyses.velocity import VACFConsumer, vacf
    from phasewake.core.model.framepass import FramePass

    run, counter = _counting(_water_ions())
    got = drive(FramePass(run).add("audit", AuditFramesConsumer.for_run(run))
                .add("pca", PCAConsumer(run, atom_indices=np.arange(6), n_components=2))
                .add("v", VACFConsumer(run, max_lag_ps=0.02)).work())
    assert counter.calls == 1
    assert audit_summary(drive(audit_run(run, frames=got["audit"]))) == audit_summary(drive(audit_run(run)))
    alone = drive(compute_pca(run, atom_indices=np.arange(6), n_components=2, projections=False))
    np.testing.assert_array_equal(got["pca"].eigenvalues, alone.eigenvalues)
    np.testing.assert_allclose(got["v"].vacf, drive(vacf(run, max_lag_ps=0.02)).vacf, rtol=1e-10)


def test_audit_request_consumer_then_after_pass_equals_its_work():
    """AuditRequest joins a shared pass with its consumer; after_pass gives what work() gives alone (reference:
    the request's own work, which reads the frames itself)."""
    from phasewake.core.analyses.audit import AuditRequest

    run, counter = _counting(_water_ions())
    request = AuditRequest(groups={"ions": range(180, 200)})
    assert request == AuditRequest(groups={"ions": np.arange(180, 200)})  # indices as tuples
    consumer = request.consumer(run)
    assert consumer is not None
    with chunking(frames=64):
        fr = drive(run_pass(run, {"audit": consumer, "q": CoordinatesConsumer(run, ["distance(0, 1)"])}))["audit"]
        shared = drive(request.after_pass(run, fr))
        assert counter.calls == 1
        alone = drive(request.work(run))
    assert counter.calls == 2
    assert audit_summary(shared) == audit_summary(alone)
    assert [g.name for g in alone.temperature.groups].count("ions") == 1
    # an energy table alone: the audit joins no pass and its work reads no frames
    no_velocities = dataclasses.replace(run, frames=None)
    assert AuditRequest().consumer(no_velocities) is None


def _fed(run, consumer, lo, hi, chunk):
    """A consumer fed frames [lo, hi) and sent through pickle both ways, as a worker process would."""
    import pickle

    from phasewake.core.model.feeding import feed

    c = pickle.loads(pickle.dumps(consumer))
    with chunking(frames=chunk):
        for _ in feed(run, {"a": c}, start=lo, stop=hi):
            pass
    return pickle.loads(pickle.dumps(c))


@pytest.mark.parametrize(("cuts", "max_segments"), [((100,), 64), ((37, 300), 64), ((512,), 5), ((128, 250, 700), 5),
                                                    ((20, 21, 1000), None)])
def test_audit_consumer_merged_from_ranges_equals_the_serial_pass(cuts, max_segments):
    """Ranges cut anywhere (inside a spectrum segment, inside the first 500 frames of the constraint
    inference, past the last segment kept), each consumer pickled as a worker sends it: merged in order they
    give the serial pass (reference: the serial pass of the same consumer; per-frame values and counts
    exactly, the spectrum and the pair statistics to float64 rounding of their sums)."""
    run = _water_ions(n_frames=1200)
    make = lambda: AuditFramesConsumer.for_run(run, segment_frames=64, max_spectrum_segments=max_segments)  # noqa: E731
    with chunking(frames=50):
        serial = drive(run_pass(run, {"a": make()}, workers=1))["a"]
    bounds = [0, *cuts, run.n_frames]
    parts = [_fed(run, make(), lo, hi, 50) for lo, hi in zip(bounds[:-1], bounds[1:], strict=False)]
    merged = parts[0]
    for later in parts[1:]:
        merged.merge(later)
    got = merged.finish()
    np.testing.assert_array_equal(got.time_ps, serial.time_ps)
    np.testing.assert_allclose(got.kinetic_kJ_per_mol, serial.kinetic_kJ_per_mol, rtol=1e-6)  # float32 sums
    np.testing.assert_allclose(got.group_kinetic_kJ_per_mol, serial.group_kinetic_kJ_per_mol, rtol=1e-6)
    np.testing.assert_allclose(got.com_kinetic_kJ_per_mol, serial.com_kinetic_kJ_per_mol, rtol=1e-5)
    np.testing.assert_array_equal(got.spectrum_frequency_per_ps, serial.spectrum_frequency_per_ps)
    np.testing.assert_allclose(got.spectrum_power, serial.spectrum_power, rtol=1e-9)
    for name in serial.group_spectra:
        np.testing.assert_allclose(got.group_spectra[name], serial.group_spectra[name], rtol=1e-9)
    assert got.speed_frame_stride == serial.speed_frame_stride
    assert got.speeds_nm_per_ps.keys() == serial.speeds_nm_per_ps.keys()
    for sp in serial.speeds_nm_per_ps:
        np.testing.assert_array_equal(got.speeds_nm_per_ps[sp], serial.speeds_nm_per_ps[sp])
    assert serial.n_molecules == got.n_molecules == 80  # 60 waters and 20 ions
    np.testing.assert_array_equal(got.translation_kJ_per_mol, serial.translation_kJ_per_mol)
    np.testing.assert_array_equal(got.translation_total_kJ_per_mol, serial.translation_total_kJ_per_mol)
    gi, si = got.inference, serial.inference
    assert (gi.n_constraints, gi.n_rigid_pairs, gi.n_frames_used) == (si.n_constraints, si.n_rigid_pairs,
                                                                        si.n_frames_used)
    assert gi.smallest_flexible_relative_std == pytest.approx(si.smallest_flexible_relative_std, rel=1e-9)
    assert got.settings == serial.settings
