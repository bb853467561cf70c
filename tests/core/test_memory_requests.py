"""CorrelationRequest, SamplingRequest and LandscapeRequest: one request per analysis, the same numbers for
every front end.

References: the AR(1) statistical inefficiency g = (1 + phi) / (1 - phi) (Priestley, Spectral Analysis and
Time Series, 1981); a two-atom distance sampled uniformly in a ball has P(r) ~ r^2, so its profile with the
4 pi r^2 Jacobian is flat (the volume of a spherical shell); split R-hat of chains drawn from one
distribution is close to 1 (Vehtari et al., Bayesian Analysis 16, 667 (2021)).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.analyses.correlation.request import CorrelationRequest, read_series
from phasewake.core.analyses.landscape import LandscapeRequest, free_energy_profile
from phasewake.core.analyses.sampling import SamplingRequest
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import drive, result_of
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def _ar1(phi: float, n: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n)
    x = np.empty(n)
    x[0] = e[0]
    for i in range(1, n):
        x[i] = phi * x[i - 1] + e[i]
    return x


def _run_with_column(values: np.ndarray, *, positions: np.ndarray | None = None, temperature_K=None):
    n = values.size
    t = np.arange(n) * 0.01
    table = EnergyTable(time_ps=t, series={"Potential": Series("Potential", values, "kJ/mol", role="potential",
                                                               source="test")})
    pos = np.zeros((n, 2, 3), np.float32) if positions is None else positions
    return run_from_arrays(pos, t, np.array([16.0, 16.0]), energies=table,
                           metadata=RunMetadata(temperature_K=temperature_K))


@pytest.mark.slow  # measured 7.2 s of CPU
def test_correlation_request_reads_a_column_by_role_and_finds_the_ar1_g():
    phi = 0.6
    run = _run_with_column(_ar1(phi, 200_000, seed=4))
    rep = result_of(CorrelationRequest(series="potential").work(run))
    assert rep.name == "Potential" and rep.kind == "series" and rep.unit == "kJ/mol"
    # Priestley (1981): g = (1 + phi) / (1 - phi) = 4; sampling tolerance at N = 2e5
    assert rep.correlation.statistical_inefficiency == pytest.approx(4.0, rel=0.08)
    assert set(rep.g_by_method) == {"sokal", "geyer", "first_zero"}
    assert rep.blocking is not None and [v.kind for v in rep.verdicts][0] == "sampling.ess"
    with pytest.raises(MissingDataError, match="no energy series named 'kinetic'"):
        result_of(CorrelationRequest(series="kinetic").work(run))
    with pytest.raises(AnalysisError, match="either an energy series or a coordinate"):
        result_of(read_series(run))


def test_sampling_request_replicas_of_one_distribution_give_rhat_near_one():
    runs = [_run_with_column(_ar1(0.3, 20_000, seed=s)) for s in (1, 2, 3)]
    rep = result_of(SamplingRequest(series="potential", replicas=tuple(runs[1:])).work(runs[0]))
    assert rep.rhat_replicas is not None and rep.rhat_replicas.n_chains == 3
    assert rep.rhat_replicas.rhat < 1.01  # Vehtari et al. (2021): stationary, mixed chains
    assert rep.rhat_segments is not None and rep.divergence is not None and rep.coverage is None
    assert [v.kind for v in rep.verdicts] == ["sampling.rhat", "sampling.divergence", "sampling.rhat"]
    assert rep.running.mean[-1] == pytest.approx(float(np.mean(runs[0].energies.series["Potential"].values)))


def test_landscape_request_temperature_rule_and_jacobian_from_the_spec():
    rng = np.random.default_rng(8)
    n = 60_000
    # the second atom uniform in a ball of radius 1 nm around the first: P(r) = 3 r^2 on (0, 1]
    d = rng.standard_normal((n, 3))
    d *= (rng.random(n) ** (1 / 3) / np.linalg.norm(d, axis=1))[:, None]
    pos = np.zeros((n, 2, 3), np.float32)
    pos[:, 1] = d + 2.0
    pos[:, 0] = 2.0
    run = _run_with_column(np.zeros(n), positions=pos)
    with pytest.raises(AnalysisError, match="temperature is unknown"):  # never a silent 300 K
        result_of(LandscapeRequest(coordinate="distance(0, 1)").work(run))
    warm = _run_with_column(np.zeros(n), positions=pos, temperature_K=300.0)
    plain = result_of(LandscapeRequest(coordinate="distance(0, 1)", bins=20).work(warm))
    auto = result_of(LandscapeRequest(coordinate="distance(0, 1)", bins=20, jacobian="auto").work(warm))
    assert plain.jacobian == "none" and auto.jacobian == "distance"
    r = np.linalg.norm(pos[:, 1] - pos[:, 0], axis=1).astype(float)
    ref = free_energy_profile(r, temperature_K=300.0, bins=20, jacobian="distance", unit="nm")
    np.testing.assert_allclose(auto.free_energy_kJ_per_mol, ref.free_energy_kJ_per_mol, rtol=1e-6, atol=1e-6)
    inner = auto.centers > 0.2  # the shell volume makes the corrected profile flat (noisy near r = 0)
    assert np.nanmax(np.abs(auto.free_energy_kT[inner] - np.nanmean(auto.free_energy_kT[inner]))) < 0.3
    assert np.nanmax(plain.free_energy_kT) > 3.0  # without it, -ln(r^2) climbs towards r = 0


def test_memory_command_and_request_share_one_cache_entry(tmp_path, cache_dir, capsys):
    from phasewake.app.cli import main
    from phasewake.core.readers import open_run
    from phasewake.core.store.cached import requested

    path = tmp_path / "dimer_nve.h5md"
    shutil.copyfile(SAMPLES / "dimer_nve.h5md", path)
    assert main(["memory", str(path), "--series", "potential", "--json"]) in (0, 1)
    out = json.loads(capsys.readouterr().out)
    messages = []
    rep = drive(requested(open_run([path]), CorrelationRequest(series="potential")),
                on_progress=lambda p: messages.append(p.message))
    assert any("from the cache" in m for m in messages)
    assert rep.correlation.statistical_inefficiency == out["series"][0]["statistical_inefficiency_g"]


def test_thirumalai_mountain_request_of_independent_velocities_decays_as_one_over_t():
    """Independent Maxwell-Boltzmann velocities every frame: the spread of the atoms' time averages falls as
    1/t (the central limit theorem), a late log-log slope of -1 (Thirumalai and Mountain 1989)."""
    from phasewake.core.analyses.ergodicity import ThirumalaiMountainRequest, thirumalai_mountain_kinetic

    rng = np.random.default_rng(2)
    n, atoms = 4000, 40
    v = rng.standard_normal((n, atoms, 3)).astype(np.float32)
    run = run_from_arrays(np.zeros_like(v), np.arange(n) * 0.01, np.full(atoms, 16.0), velocities_nm_per_ps=v)
    req = ThirumalaiMountainRequest(atom_indices=np.arange(atoms)[::-1])
    assert req.atom_indices == tuple(range(atoms - 1, -1, -1)) and "chunk_frames" not in req.settings()
    with chunking(frames=100):
        tm = result_of(req.work(run))
        same = result_of(thirumalai_mountain_kinetic(run, atom_indices=np.arange(atoms)[::-1]))
    assert tm.late_slope == pytest.approx(-1.0, abs=0.1)
    np.testing.assert_array_equal(tm.omega, same.omega)
