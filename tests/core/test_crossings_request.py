"""CrossingsRequest: the one place where temperature, kT/m_eff, Jacobian and defaults of crossings are decided.

References: the Boltzmann constant is CODATA's (scipy.constants); equipartition of dq/dt,
<(dq/dt)^2> = kT <1/m_eff>, is the textbook result the coordinates module states; the 4 pi r^2 Jacobian
of a distance in 3D is the volume of a spherical shell.
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.constants as sc

from phasewake.core.analyses.crossings import (
    CrossingsRequest,
    crossings_of_runs,
    kt_over_m_eff,
    run_temperature,
)
from phasewake.core.analyses.landscape import jacobian_of
from phasewake.core.errors import AnalysisError
from phasewake.core.progress import drive, result_of
from phasewake.core.settings import chunking

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def _fake_run(temperature_K=None, column=None, name="fake"):
    energies = None
    if column is not None:
        energies = SimpleNamespace(by_role=lambda role: SimpleNamespace(values=np.asarray(column, float))
                                   if role == "temperature" else None)
    return SimpleNamespace(name=name, metadata=SimpleNamespace(temperature_K=temperature_K), energies=energies)


def test_temperature_rule_thermostat_then_kinetic_then_unknown():
    assert run_temperature(_fake_run(310.0, [1.0, 2.0])) == (310.0, "thermostat target of the run")
    t, why = run_temperature(_fake_run(None, [290.0, np.nan, 310.0]))
    assert t == pytest.approx(300.0) and "kinetic" in why
    t, why = run_temperature(_fake_run(None, None))
    assert t is None and "unknown" in why  # never a silent 300 K


def test_kt_over_m_eff_equipartition():
    # kT <1/m_eff> with k_B N_A from CODATA (scipy.constants), kJ/mol/K
    kb = sc.k * sc.N_A / 1000.0
    s1 = SimpleNamespace(m_eff=np.array([2.0, 4.0]))
    s2 = SimpleNamespace(m_eff=np.array([4.0, 4.0]))
    assert kt_over_m_eff(300.0, [s1, s2]) == pytest.approx(kb * 300.0 * np.mean([0.5, 0.25, 0.25, 0.25]), rel=1e-12)
    assert kt_over_m_eff(None, [s1]) is None
    assert kt_over_m_eff(300.0, [SimpleNamespace(m_eff=None)]) is None


def test_jacobian_from_the_parsed_specification():
    assert jacobian_of("distance(0, 1)") == "distance"
    assert jacobian_of("  distance( 3 ,17 )") == "distance"  # spacing does not fool it (no string prefix test)
    assert jacobian_of('com_distance([0-4], [5-9])') == "distance"
    assert jacobian_of("angle(0, 1, 2)") == "none"
    assert jacobian_of("dihedral(0, 1, 2, 3)") == "none"


def _double_well_series(seed=3, n=20000):
    # an Ornstein-Uhlenbeck-like walk in a double well: two states around -1 and +1
    rng = np.random.default_rng(seed)
    x = np.empty(n)
    x[0] = -1.0
    for i in range(1, n):
        x[i] = x[i - 1] + 0.01 * (x[i - 1] - x[i - 1] ** 3) + 0.12 * rng.standard_normal()
    return (np.arange(n) * 0.01, x)


def test_unknown_temperature_is_said_not_guessed():
    t, q = _double_well_series()
    req = CrossingsRequest(coordinate="q", states=(-0.6, 0.6), surface=0.0)
    res = result_of(req.analyse([_fake_run()], [(t, q)]))
    assert res.settings.temperature_K is None
    assert any("temperature is unknown" in w for w in res.warnings)
    res2 = result_of(req.analyse([_fake_run(250.0)], [(t, q)]))
    assert res2.settings.temperature_K == 250.0 and res2.settings.temperature_source == "thermostat target of the run"
    assert not any("temperature is unknown" in w for w in res2.warnings)
    assert res2.n_transitions == res.n_transitions  # counts do not depend on kT


def test_unknown_jacobian_refused():
    t, q = _double_well_series(n=500)
    with pytest.raises(AnalysisError, match="jacobian"):
        result_of(CrossingsRequest(coordinate="q", states=(-0.6, 0.6), jacobian="sphere").analyse(
            [_fake_run(300.0)], [(t, q)]))


def test_settings_are_the_cache_key_without_chunking():
    with chunking(frames=10):
        a = CrossingsRequest(coordinate="distance(0, 1)")
    with chunking(frames=999):
        b = CrossingsRequest(coordinate="distance(0, 1)")
    assert a == b and a.settings() == b.settings() and "chunk_frames" not in a.settings()
    assert a.settings()["jacobian"] == "none" and a.settings()["temperature_K"] is None


def test_command_line_and_request_share_one_cache_entry(tmp_path, cache_dir, h5md_reads, capsys):
    """`phasewake crossings` builds CrossingsRequest with the request's own defaults: the request built
    directly (as the window and the report do) finds the command line's entry and reads no frames."""
    from phasewake.app.cli import main
    from phasewake.core.readers import open_run
    from phasewake.core.store.cached import requested

    path = tmp_path / "dimer_langevin.h5md"
    shutil.copyfile(SAMPLES / "dimer_langevin.h5md", path)
    main(["crossings", str(path), "-c", "distance(0, 1)", "--json"])
    out = json.loads(capsys.readouterr().out)
    n = h5md_reads["n"]
    run = open_run([path])
    seen = []
    res = drive(requested(run, CrossingsRequest(coordinate="distance(0, 1)")),
                on_progress=lambda p: seen.append(p.message))
    assert h5md_reads["n"] == n and any("from the cache" in m for m in seen)
    assert res.n_transitions == out["n_transitions"]
    assert res.rate_ab.rate_per_ps == out["rate_ab"]["rate_per_ps"]
    assert res.settings.temperature_K == 120.0  # the H5MD file's thermostat target (sample_data/make_samples.py)
    assert out["settings"]["temperature_source"] == "thermostat target of the run"
    assert math.isfinite(res.suggestion.barrier_from_a_kT)
    # the thin face over several runs is the same request with replicas
    again = result_of(crossings_of_runs([run], "distance(0, 1)"))
    assert again.n_transitions == res.n_transitions
