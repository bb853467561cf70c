"""The command line (`phasewake memory --json`), the window's Correlation and Sampling panels and the Python
API build the same CorrelationRequest and SamplingRequest for the sample run dimer_nve.h5md and get equal
numbers: statistical inefficiency, effective sample size, standard error, split R-hat; and the window's
principal components equal the API's for the same settings.

Each front end computes afresh (no cache), so equal numbers come from equal requests. The numbers
themselves are checked against outside references in tests/core (statsmodels, pymbar, analytic ACFs).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from phasewake.app.cli import main
from phasewake.core.progress import drive
from phasewake.core.readers import open_run

SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"
COORD = "distance(0, 1)"
SERIES = "potential_energy"


def _ctx(run):
    from phasewake.app.window import analyses

    t = run.time_ps
    return analyses.AnalysisContext(run=run, start=0, stop=run.n_frames, window_ps=(float(t[0]), float(t[-1])),
                                    coordinate=COORD)


def _numbers(correlation, sampling) -> dict:
    c = correlation.correlation
    r = sampling.rhat_segments
    return {"g": c.statistical_inefficiency, "ess": c.effective_sample_size, "sem": c.standard_error_of_mean,
            "rhat": None if r is None else r.rhat}


@pytest.fixture(scope="module")
def command_line():
    """`phasewake memory --json`, once for the coordinate and once for the energy series: rows by name."""
    import contextlib
    import io

    rows = {}
    for args in (["-c", COORD], ["--series", SERIES]):
        out = io.StringIO()
        with contextlib.redirect_stdout(out):
            code = main(["memory", str(SAMPLE), *args, "--json", "--no-cache"])
        assert code in (0, 1)
        rows.update({s["name"]: s for s in json.loads(out.getvalue())["series"]})
    return rows


def test_window_api_and_command_line_agree_on_memory(command_line):
    import phasewake as pw
    from phasewake.app.window import analyses

    run = open_run([SAMPLE])
    corr = drive(analyses.correlation_job(_ctx(run))).info["correlation"]
    samp = drive(analyses.sampling_job(_ctx(run))).info["sampling"]
    api_run = pw.open(SAMPLE)
    for key, cli_name, api_kwargs in ((COORD, "distance(DIM1:D1, DIM1:D2)", {"coordinate": COORD}),
                                      (SERIES, SERIES, {"series": SERIES})):
        window = _numbers(corr[key], samp[key])
        api = _numbers(pw.correlation(api_run, cache=False, **api_kwargs), pw.sampling(api_run, cache=False, **api_kwargs))
        row = command_line[cli_name]
        cli = {"g": row["statistical_inefficiency_g"], "ess": row["effective_sample_size"],
               "sem": row["standard_error_of_mean"], "rhat": (row.get("rhat_segments") or {}).get("rhat")}
        assert window["g"] > 1.0 and window["rhat"] is not None  # the numbers are there to compare
        for name in ("g", "ess", "sem", "rhat"):
            assert window[name] == pytest.approx(api[name], rel=1e-12), (key, name)
            assert window[name] == pytest.approx(cli[name], rel=1e-12), (key, name)


def test_window_principal_components_equal_the_api():
    import phasewake as pw
    from phasewake.app.window import analyses

    run = open_run([SAMPLE])
    window = drive(analyses.pca_job(_ctx(run))).info["pca"]
    settings = analyses._pca_settings(run)
    api = pw.pca(pw.open(SAMPLE), atoms=settings["atom_indices"].tolist(), n_components=settings["n_components"],
                 cache=False)
    np.testing.assert_allclose(window.eigenvalues, api.eigenvalues, rtol=1e-9)
    # the same modes (an eigenvector's sign is arbitrary)
    overlap = np.abs(np.einsum("dk,dk->k", window.eigenvectors, api.eigenvectors))
    np.testing.assert_allclose(overlap, 1.0, rtol=1e-6)
