"""The Python API (``import phasewake as pw``): the same reader road, settings and cache as the command line.

The outside reference here is the command line itself (``phasewake.app.cli.main``, in process): the API
must give the numbers ``phasewake audit|coords|crossings --json`` print for the same files and options,
and land on the same cache entries (a hit after the command line reads no frames). The science of each
analysis is checked against outside references in tests/core.
"""

import json

import numpy as np
import pytest

import phasewake as pw
from phasewake.app.cli import main
from phasewake.core.errors import CoordinateSpecError, FileMissingError, InputError, MissingDataError

SMALL = "dimer_langevin_r2.h5md"  # 250 frames: quick


def _cli_json(capsys, *argv):
    capsys.readouterr()
    code = main(list(argv))
    out = capsys.readouterr().out
    return code, json.loads(out)


def test_open_applies_the_overrides_as_the_command_line_does():
    path = pw.sample_path(SMALL)
    run = pw.open(path, timestep_fs=2.0, constraints=0, temperature_K=130.0, ensemble="NVT")
    meta = run.metadata
    assert (meta.timestep_ps, meta.n_constraints, meta.temperature_K, meta.ensemble) == (0.002, 0, 130.0, "NVT")
    assert all(meta.sources[k] == "user" for k in ("timestep_ps", "n_constraints", "temperature_K", "ensemble"))
    assert pw.open([path]).paths == run.paths


@pytest.mark.parametrize("kwargs, words", [
    ({"ensemble": "nvx"}, "ensemble='nvx'"),
    ({"columns": {"Etot": "totl"}}, "columns"),
    ({"timestep_fs": float("nan")}, "time step"),
    ({"constraints": -1}, "constraint"),
])
def test_open_refuses_impossible_keywords_by_name(kwargs, words):
    with pytest.raises(InputError, match=words):
        pw.open(pw.sample_path(SMALL), **kwargs)


def test_bad_files_raise_typed_errors_naming_the_file(tmp_path):
    missing = tmp_path / "nowhere.h5md"
    with pytest.raises(FileMissingError) as info:
        pw.open(missing)
    assert info.value.path == missing
    empty = tmp_path / "empty.edr"
    empty.write_bytes(b"")
    with pytest.raises(InputError) as info:
        pw.open(empty)
    assert "empty.edr" in str(info.value)
    with pytest.raises(FileMissingError, match="dimer_nve.h5md"):
        pw.sample_path("no_such_sample.h5md")
    with pytest.raises(InputError, match="pw.open"):
        pw.audit(str(pw.sample_path(SMALL)))  # a path, not a run


def test_audit_equals_the_command_line_and_shares_its_cache_entry(capsys, cache_dir, h5md_reads):
    path = str(pw.sample_path(SMALL))
    code, cli = _cli_json(capsys, "audit", path, "--timestep", "4", "--json")
    assert code in (0, 1)
    reads = h5md_reads["n"]
    result = pw.audit(pw.open(path, timestep_fs=4.0))
    assert h5md_reads["n"] == reads  # the same request, so the command line's entry serves it
    assert result.overall == cli["overall"]
    assert [(v.kind, v.level) for v in result.verdicts] == [(v["kind"], v["level"]) for v in cli["verdicts"]]
    measured = {v["kind"]: v["measured"] for v in cli["verdicts"]}
    for v in result.verdicts:
        if v.measured is not None and np.isfinite(v.measured):
            assert v.measured == pytest.approx(measured[v.kind], rel=1e-12)


def test_cache_false_computes_afresh_and_progress_is_reported(cache_dir, h5md_reads):
    run = pw.open(pw.sample_path(SMALL))
    seen = []
    first = pw.coordinates(run, "distance(0, 1)", progress=seen.append)
    assert seen and all(p.total is None or 0 <= p.done <= p.total for p in seen)
    reads = h5md_reads["n"]
    again = pw.coordinates(run, "distance(0, 1)")
    assert h5md_reads["n"] == reads
    fresh = pw.coordinates(run, "distance(0, 1)", cache=False)
    assert h5md_reads["n"] > reads
    np.testing.assert_array_equal(first.values, again.values)
    np.testing.assert_array_equal(first.values, fresh.values)


def test_coordinates_equal_the_command_line(capsys, cache_dir):
    path = str(pw.sample_path(SMALL))
    code, cli = _cli_json(capsys, "coords", path, "-c", "distance(0, 1)", "-c", "angle(0, 1, 2)", "--momentum",
                          "--json", "--no-cache")
    assert code == 0
    columns = {c["name"]: np.asarray(c["values"], dtype=float) for c in cli["data"]}
    dist, angle = pw.coordinates(pw.open(path), ["distance(0, 1)", "angle(0, 1, 2)"], momentum=True)
    np.testing.assert_allclose(dist.values, columns[dist.label], rtol=1e-12)
    np.testing.assert_allclose(dist.momentum, columns[f"p {dist.label}"], rtol=1e-12)
    np.testing.assert_allclose(angle.values, columns[angle.label], rtol=1e-12)
    np.testing.assert_allclose(dist.time_ps, np.asarray(cli["time_ps"]), rtol=1e-12)


def test_coordinates_errors_are_typed(cache_dir):
    run = pw.open(pw.sample_path(SMALL))
    with pytest.raises(CoordinateSpecError) as info:
        pw.coordinates(run, "distance(0, 99)")
    assert "99" in str(info.value)
    with pytest.raises(InputError, match="atom indices"):
        pw.pca(run, atoms=[0, 54])


def test_momentum_true_needs_velocities(cache_dir):
    energy_only = pw.open(pw.sample_path("dimer_nve_energy.csv"))
    with pytest.raises(MissingDataError) as info:
        pw.coordinates(energy_only, "distance(0, 1)", momentum=True)
    assert "dimer_nve_energy.csv" in str(info.value)


def test_crossings_equal_the_command_line(capsys, cache_dir):
    paths = [str(pw.sample_path(n)) for n in ("dimer_langevin_r2.h5md", "dimer_langevin_r3.h5md")]
    code, cli = _cli_json(capsys, "crossings", *paths, "--replicas", "-c", "distance(0, 1)", "--json", "--no-cache")
    assert code in (0, 1)
    result = pw.crossings([pw.open(p) for p in paths], "distance(0, 1)", cache=False)
    assert result.n_replicas == 2
    assert result.rate_ab.n_transitions == cli["rate_ab"]["n_transitions"]
    assert result.rate_ab.rate_per_ps == pytest.approx(cli["rate_ab"]["rate_per_ps"], rel=1e-12)
    assert result.kappa.counting == pytest.approx(cli["kappa"]["counting"], rel=1e-12, nan_ok=True)


def test_results_give_json_and_the_figures_the_window_draws(cache_dir):
    from matplotlib.figure import Figure

    from phasewake.core.errors import AnalysisError
    from phasewake.core.figures.plots import figures_for

    run = pw.open(pw.sample_path(SMALL))
    q = pw.coordinates(run, "distance(0, 1)", momentum=True)
    data = q.to_dict()
    json.dumps(data, allow_nan=False)
    assert data["unit"] == "nm" and len(data["values"]) == run.n_frames
    specs = q.figure_specs()
    assert [s.key for s in specs] == [s.key for s in figures_for(q)] == ["coordinate.series", "phase.portrait"]
    fig = q.figure("phase.portrait")
    assert isinstance(fig, Figure)
    assert len(fig.axes) == len(specs[1].plots)
    assert specs[1].plots[0].x.label.split(" ")[0] in fig.axes[0].get_xlabel()
    with pytest.raises(AnalysisError, match="coordinate.series"):
        q.figure("no.such")
    with pytest.raises(AnalysisError, match="2 figure"):
        q.figure(5)


def test_memory_of_a_coordinate_equals_the_command_line(capsys, cache_dir):
    path = str(pw.sample_path(SMALL))
    code, cli = _cli_json(capsys, "memory", path, "-c", "distance(0, 1)", "--json", "--no-cache")
    assert code in (0, 1)
    row = cli["series"][0]
    run = pw.open(path)
    report = pw.correlation(run, coordinate="distance(0, 1)")
    assert report.correlation.statistical_inefficiency == pytest.approx(row["statistical_inefficiency_g"], rel=1e-12)
    assert report.correlation.standard_error_of_mean == pytest.approx(row["standard_error_of_mean"], rel=1e-12)
    # the same series handed over as a coordinate already computed, or as a bare array of the same spacing
    q = pw.coordinates(run, "distance(0, 1)")
    again = pw.correlation(q).correlation
    bare = pw.correlation(q.values, dt_ps=float(q.time_ps[1] - q.time_ps[0])).correlation
    assert again.statistical_inefficiency == report.correlation.statistical_inefficiency
    assert bare.statistical_inefficiency == pytest.approx(report.correlation.statistical_inefficiency, rel=1e-9)
    sampling = pw.sampling(run, coordinate="distance(0, 1)")
    assert sampling.rhat_segments.rhat == pytest.approx(row["rhat_segments"]["rhat"], rel=1e-12)
    json.dumps(report.to_dict(), allow_nan=False)
    assert sampling.to_dict()["rhat_segments"]["rhat"] == pytest.approx(row["rhat_segments"]["rhat"], rel=1e-12)


def test_correlation_needs_one_series_and_an_arrays_spacing():
    run = pw.open(pw.sample_path(SMALL))
    with pytest.raises(InputError, match="either"):
        pw.correlation(run)
    with pytest.raises(InputError, match="either"):
        pw.sampling(run, "potential", coordinate="distance(0, 1)")
    with pytest.raises(MissingDataError, match="dt_ps"):
        pw.correlation(np.zeros(64))
    with pytest.raises(InputError, match="1-d"):
        pw.correlation(np.zeros((8, 8)), dt_ps=0.1)


def test_report_refuses_to_overwrite_its_input_and_a_non_pdf(tmp_path, cache_dir):
    run = pw.open(pw.sample_path(SMALL))
    with pytest.raises(InputError, match=r"\.pdf"):
        pw.report(run, tmp_path / "report.png")
    with pytest.raises(CoordinateSpecError, match="99"):
        pw.report(run, tmp_path / "report.pdf", coordinate="distance(0, 99)")
    assert not list(tmp_path.iterdir())


def test_pw_figure_draws_any_result_the_builders_know(cache_dir):
    from matplotlib.figure import Figure

    from phasewake.core.errors import AnalysisError
    from phasewake.core.figures.plots import RESULT_FIGURES

    run = pw.open(pw.sample_path(SMALL))
    result = pw.pca(run, atoms=[0, 1], n_components=2)
    assert isinstance(pw.figure(result), Figure)
    assert isinstance(pw.figure(run.energies, RESULT_FIGURES["EnergyTable"][1], preset="single"), Figure)
    with pytest.raises(AnalysisError, match="has 0 figure"):
        pw.figure(run)
