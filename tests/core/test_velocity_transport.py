"""Diffusion with error bars: Green-Kubo refused on coarse frames, compared with the MSD.

References: the Langevin free particle (VACF = (kT/m) exp(-gamma t), D = kT/(m gamma); REFERENCES.md 4.1,
exact Ornstein-Uhlenbeck update), the trapezoid rule's analytic bias on an exponential, and rigid TIP3P
water made with OpenMM (tests/data/engines/openmm/tip3p_rigid_nve_verlet: frames every 50 steps of 2 fs).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses import velocity as V
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays

KB = 0.00831446261815324  # kJ/mol/K (exact since SI 2019)
ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm"


def _langevin_run(*, spacing_ps: float, n_frames: int, n_atoms: int = 20, m: float = 12.0, gamma: float = 3.0,
                  temp: float = 300.0, seed: int = 0):
    """Free Langevin particles sampled every ``spacing_ps`` by the exact OU update of the velocities, and
    the exact positions' increments (Gaussian, jointly with the velocities: integrated OU process)."""
    rng = np.random.default_rng(seed)
    kT = KB * temp
    fine = 10  # substeps per frame for the positions (trapezoid of a smooth OU path: O(dt^2), tiny)
    dt = spacing_ps / fine
    a = np.exp(-gamma * dt)
    v = np.empty((n_frames * fine, n_atoms, 3))
    v[0] = rng.standard_normal((n_atoms, 3)) * np.sqrt(kT / m)
    noise = rng.standard_normal(v.shape) * np.sqrt(kT / m * (1 - a * a))
    for i in range(1, v.shape[0]):
        v[i] = a * v[i - 1] + noise[i]
    x = np.concatenate([np.zeros((1, n_atoms, 3)), np.cumsum(0.5 * (v[1:] + v[:-1]), axis=0) * dt])
    t = np.arange(n_frames) * spacing_ps
    run = run_from_arrays(x[::fine], t, np.full(n_atoms, m), velocities_nm_per_ps=v[::fine])
    return run, kT / (m * gamma)


def test_decay_frames_of_an_exponential():
    # exp(-k/tau) falls to 1/e at k = tau (analytic); linear interpolation between integer lags
    c = np.exp(-np.arange(40) / 6.0)
    assert V.decay_frames(c) == pytest.approx(6.0, abs=0.05)


@pytest.mark.slow  # measured 0.6 s of CPU
def test_langevin_fine_frames_green_kubo_and_msd_agree_with_error_bars():
    # spacing 0.01 ps, gamma 3/ps: the VACF falls to 1/e in 33 frames; D = kT/(m gamma) (Einstein relation)
    run, d_exact = _langevin_run(spacing_ps=0.01, n_frames=8000)
    tr = result_of(V.transport(run, max_lag_ps=3.0))
    g = tr.green_kubo[0]
    assert g.reliable and g.decay_frames == pytest.approx(1 / (3.0 * 0.01), rel=0.1)
    assert g.error_nm2_per_ps is not None and tr.n_blocks >= 3
    # the truth lies within 3 standard errors (block error and plateau spread) and within 15%
    assert abs(g.diffusion_nm2_per_ps - d_exact) < 3 * g.error_nm2_per_ps + 0.02 * d_exact
    assert g.diffusion_nm2_per_ps == pytest.approx(d_exact, rel=0.15)
    dm, em = float(tr.msd.diffusion_nm2_per_ps[0]), tr.msd_block_error_nm2_per_ps[0]
    assert em is not None and dm == pytest.approx(d_exact, rel=0.15)
    levels = {v.kind: v.level for v in tr.verdicts}
    assert levels["transport.vacf_resolution"] == "ok" and levels["transport.gk_msd_agreement"] == "ok"


def test_langevin_coarse_frames_green_kubo_marked_unreliable():
    # frames 1 ps apart with gamma = 3/ps: the VACF is exp(-3) = 0.05 after one frame. The trapezoid sum of
    # C0 exp(-x k), x = gamma dt = 3, is C0 dt (1/2 + 1/(e^x - 1)) against C0/gamma: 1.66 x too large
    # (analytic), while the MSD of the same frames stays right (positions integrated on a 10x finer grid).
    run, d_exact = _langevin_run(spacing_ps=1.0, n_frames=3000, seed=3)
    tr = result_of(V.transport(run, max_lag_ps=300.0))
    g = tr.green_kubo[0]
    assert not g.reliable and g.decay_frames < 2
    assert g.diffusion_nm2_per_ps > 1.3 * d_exact  # the bias the check guards against
    assert float(tr.msd.diffusion_nm2_per_ps[0]) == pytest.approx(d_exact, rel=0.15)
    v = {x.kind: x for x in tr.verdicts}
    assert v["transport.vacf_resolution"].level == "problem" and "unreliable" in v["transport.vacf_resolution"].message
    assert v["transport.gk_msd_agreement"].level != "ok" and "use the MSD" in v["transport.gk_msd_agreement"].message


def test_rigid_water_frames_every_50_steps():
    # rigid TIP3P NVE, velocities every 100 fs (reported.json): Green-Kubo refused, or within 30% of the MSD
    from phasewake.core.readers import open_run

    folder = ENGINES / "tip3p_rigid_nve_verlet"
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    run = open_run([folder / "frames.h5md"], topology=folder / "start.pdb")
    oxygens = np.array([a.index for a in run.topology.atoms if a.element.symbol == "O"])
    tr = result_of(V.transport(run, groups={"O": oxygens}))
    g = tr.green_kubo[0]
    dm = float(tr.msd.diffusion_nm2_per_ps[0])
    assert (not g.reliable) or g.diffusion_nm2_per_ps == pytest.approx(dm, rel=0.30)
    assert not g.reliable  # water's VACF falls to 1/e within tens of fs: under one frame here


def test_trapezoid_bias_on_an_exponential_matches_the_threshold_source():
    # analytic: the trapezoid sum of exp(-x k) over k >= 0 times the spacing, against the integral 1/x
    for frames_per_decay, bias in ((2.0, 0.0208), (1.0, 0.0820), (1 / 3, 0.657)):
        x = 1 / frames_per_decay
        k = np.arange(0, 20_000)
        trap = x * (np.sum(np.exp(-x * k)) - 0.5)  # trapezoid: half weight at lag 0, spacing x in decay units
        assert trap - 1 == pytest.approx(bias, abs=2e-3)
