"""The default coordinate (never a stiff bond or a constant; none for a pure liquid) and the refusal to
define states without a barrier. References: analytic Boltzmann distributions, the sample dimer's own
double-well bond (sample_data/README.md), and water runs made with OpenMM (PyPI)."""

from __future__ import annotations

import sys
from pathlib import Path

import mdtraj as md
import numpy as np
import pytest

from phasewake.core.analyses.coordinate_choice import barrier_kT, choose_coordinate
from phasewake.core.analyses.crossings import analyse_crossings, crossings_of_runs
from phasewake.core.analyses.verdicts import THRESHOLDS
from phasewake.core.errors import AnalysisError
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays

sys.path.insert(0, str(Path(__file__).parent))
from langevin_models import boltzmann_positions  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def test_barrier_threshold_is_registered_as_common_practice():
    t = THRESHOLDS["crossings.barrier"]
    assert t.caution == 1.0 and "common practice" in t.source
    assert "common practice" in THRESHOLDS["coordinate.stiff_pair"].source


def test_barrier_of_boltzmann_samples():
    # p(x) ~ exp(-h (x^2 - 1)^2): barrier h kT (analytic); a Gaussian has none
    rng = np.random.default_rng(4)
    assert barrier_kT(boltzmann_positions(rng, 200_000, 3.0)) == pytest.approx(3.0, abs=0.4)
    assert barrier_kT(rng.standard_normal(200_000)) < 0.5


def test_no_states_on_a_distribution_without_barrier():
    # a Gaussian Ornstein-Uhlenbeck series (AR(1), analytic: unimodal) has no states: refused, not counted
    rng = np.random.default_rng(1)
    x = np.zeros(50_000)
    for i in range(1, x.size):
        x[i] = 0.9 * x[i - 1] + rng.standard_normal()
    with pytest.raises(AnalysisError, match="no states defined.*at least 1 kT"):
        analyse_crossings(np.arange(x.size) * 0.01, x)


def test_a_constant_coordinate_is_refused():
    # a rigid bond: 0.09572 nm with float32 round-off (relative 6e-8), as a constrained O-H in a file
    rng = np.random.default_rng(2)
    q = (0.09572 + 1e-9 * rng.standard_normal(5000)).astype(np.float32).astype(float)
    with pytest.raises(AnalysisError, match="the coordinate is constant"):
        analyse_crossings(np.arange(q.size) * 0.01, q, states=(0.095719, 0.095721))


@pytest.mark.skipif(not (SAMPLES / "dimer_nve.h5md").exists(), reason="sample runs not generated")
def test_default_on_the_sample_dimer_is_the_dimer_distance():
    from phasewake.core.readers import open_run

    for name in ("dimer_nve.h5md", "dimer_langevin.h5md"):
        choice = choose_coordinate(open_run([SAMPLES / name]))
        # the double-well bond between atoms 0 and 1 (sample_data/README.md), not a pair with a bath atom
        assert choice.spec == "distance(0, 1)"
        assert choice.reason.startswith("chosen automatically")


def _small_solute_run():
    """A 4-atom solute in 20 one-atom 'solvent' residues: atoms 0-1 a stiff bond (2% spread), atoms 2-3 a
    double well (Boltzmann samples of h (x^2 - 1)^2 with h = 3 kT mapped to 0.40-0.60 nm), iid frames."""
    rng = np.random.default_rng(5)
    n_frames = 400
    top = md.Topology()
    chain = top.add_chain()
    res = top.add_residue("MOL", chain)
    atoms = [top.add_atom(f"C{i}", md.element.carbon, res) for i in range(4)]
    top.add_bond(atoms[0], atoms[1])
    for _ in range(20):
        r = top.add_residue("SOL", chain)
        top.add_atom("AR", md.element.argon, r)
    pos = np.zeros((n_frames, 24, 3))
    pos[:, 1, 0] = 0.15 * (1 + 0.02 * rng.standard_normal(n_frames))
    pos[:, 2, 1] = 2.0
    pos[:, 3, 1] = 2.0 + 0.5 + 0.1 * boltzmann_positions(rng, n_frames, 3.0)
    pos[:, 4:, 2] = 5.0 + rng.standard_normal((n_frames, 20))
    return run_from_arrays(pos, np.arange(n_frames) * 0.1, np.full(24, 12.011), topology=top)


def test_default_is_the_two_state_pair_never_the_stiff_bond():
    choice = choose_coordinate(_small_solute_run())
    assert choice.spec is not None and choice.spec != "distance(0, 1)"
    # a pair with atom 3, whose distance to the others is two-state (barrier 3 kT by construction)
    assert choice.spec in ("distance(2, 3)", "distance(1, 3)", "distance(0, 3)")
    assert "two-state" in choice.reason and choice.details["barrier_kT"] >= 1.0


ENGINES = Path(__file__).resolve().parents[1] / "data" / "engines" / "openmm"


def _engine_run(name: str):
    from phasewake.core.readers import open_run

    folder = ENGINES / name
    if not (folder / "frames.h5md").exists():
        pytest.skip("engine runs not generated")
    return open_run([folder / "frames.h5md"], topology=folder / "start.pdb")


def test_rigid_water_has_no_obvious_coordinate_and_its_bond_is_constant():
    # rigid TIP3P made with OpenMM (tests/data/engines/openmm/tip3p_rigid_nve_verlet)
    run = _engine_run("tip3p_rigid_nve_verlet")
    choice = choose_coordinate(run)
    assert choice.spec is None and "no obvious reaction coordinate" in choice.reason
    # the first O-H bond of rigid water: its 'crossings' would be round-off (the issue: "rates" of 135/ps)
    with pytest.raises(AnalysisError, match="the coordinate is constant"):
        result_of(crossings_of_runs(run, "distance(0, 1)"))


def test_flexible_water_bond_gets_no_states():
    # the issue: an O-H bond of flexible water gave "barrier 1.25 kT" and k = 394/ps (turning points of
    # the vibration). Its spread is a few % of its length: a stiff bond, refused.
    run = _engine_run("tip3p_flexible_frames_1fs")
    assert choose_coordinate(run).spec is None
    with pytest.raises(AnalysisError, match="stiff bond"):
        result_of(crossings_of_runs(run, "distance(0, 1)"))
    # given states, the user's choice is analysed (the check is on suggesting states only)
    res = result_of(crossings_of_runs(run, "distance(0, 1)", states=(0.090, 0.102)))
    assert res.n_samples == run.n_frames


@pytest.mark.skipif(not (SAMPLES / "dimer_nve.h5md").exists(), reason="sample runs not generated")
def test_report_and_window_use_the_same_choice_with_its_reason():
    from phasewake.core.analyses.coordinate_choice import default_coordinates
    from phasewake.core.figures.report_analyses import choose_report_coordinate as _report_coordinate
    from phasewake.core.readers import open_run

    run = open_run([SAMPLES / "dimer_nve.h5md"])
    spec, reason = _report_coordinate(run, None)
    assert spec == "distance(0, 1)" and reason.startswith("chosen automatically")
    assert default_coordinates(run) == [spec]  # coords, memory and the window call the same chooser
    assert _report_coordinate(run, "angle(0, 1, 2)") == ("angle(0, 1, 2)", "")  # a given one has no reason
    water = _engine_run("tip3p_rigid_nve_verlet")
    spec, reason = _report_coordinate(water, None)
    assert spec is None and "no obvious reaction coordinate" in reason
