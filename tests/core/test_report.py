"""The run report: a page per section, the verdicts table, captions, provenance; the HTML variant.

Outside references: pypdf parses the PDF and extracts its text; html.parser parses the HTML.
The run is a Langevin double-well dimer made here (BAOAB, Leimkuhler and Matthews 2013) so the
report has crossings, velocities and energies to show.
"""

import base64
import html
import json
from html.parser import HTMLParser

import numpy as np
import pytest

from phasewake.core import __version__
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE
from phasewake.core.figures.report import SECTION_TITLES, build_report
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import drive
from phasewake.core.readers.memory import run_from_arrays

pytestmark = pytest.mark.slow  # each report draws about ten pages (seconds)

KB = 0.0083144626  # kJ/mol/K (CODATA 2018 R / 1000)


def dimer_run(n_frames: int = 3000, *, seed: int = 11, temperature_K: float = 120.0):
    """Two argon-mass atoms whose distance is a double well V(r) = h [1 - ((r - r0 - w)/w)^2]^2
    (the bistable dimer of Dellago, Bolhuis and Chandler 1999), plus 4 free bath atoms, by BAOAB."""
    rng = np.random.default_rng(seed)
    kT = KB * temperature_K
    h, r0, w = 2.5 * kT, 0.35, 0.1
    m = 39.948
    mu = m / 2
    gamma, dt, every = 5.0, 0.002, 5
    c1 = np.exp(-gamma * dt)
    c2 = np.sqrt((1 - c1 * c1) * kT)

    def force(r):
        z = (r - r0 - w) / w
        return 4 * h * (1 - z * z) * z / w

    r, vr = r0, 0.0
    vb = rng.normal(0, np.sqrt(kT / m), (4, 3))
    xb = rng.uniform(0, 2, (4, 3))
    rs = np.empty(n_frames)
    vs = np.empty(n_frames)
    pos_b = np.empty((n_frames, 4, 3))
    vel_b = np.empty((n_frames, 4, 3))
    noise = rng.normal(size=(n_frames * every, 1 + 12))
    k = 0
    for i in range(n_frames):
        for _ in range(every):
            vr += 0.5 * dt * force(r) / mu
            r += 0.5 * dt * vr
            vr = c1 * vr + c2 / np.sqrt(mu) * noise[k, 0]
            r += 0.5 * dt * vr
            vr += 0.5 * dt * force(r) / mu
            vb = c1 * vb + c2 / np.sqrt(m) * noise[k, 1:].reshape(4, 3)
            xb = xb + dt * vb
            k += 1
        rs[i], vs[i] = r, vr
        pos_b[i], vel_b[i] = xb, vb
    pos = np.zeros((n_frames, 6, 3))
    vel = np.zeros((n_frames, 6, 3))
    pos[:, 0, 0], pos[:, 1, 0] = 1.0 - rs / 2, 1.0 + rs / 2
    vel[:, 0, 0], vel[:, 1, 0] = -vs / 2, vs / 2
    pos[:, 2:], vel[:, 2:] = pos_b, vel_b
    masses = np.full(6, m)
    t = np.arange(n_frames) * dt * every
    z = (rs - r0 - w) / w
    pot = h * (1 - z * z) ** 2
    kin = 0.5 * np.einsum("i,fij->f", masses, vel * vel)
    n_dof = 3 * 6
    table = EnergyTable(t, {
        "potential_energy": Series("potential_energy", pot, "kJ/mol", "potential", "made in test"),
        "kinetic_energy": Series("kinetic_energy", kin, "kJ/mol", "kinetic", "made in test"),
        "total_energy": Series("total_energy", pot + kin, "kJ/mol", "total", "made in test"),
        "temperature": Series("temperature", 2 * kin / (n_dof * KB), "K", "temperature", "made in test"),
    })
    md = RunMetadata(timestep_ps=dt, ensemble="NVT", thermostat="langevin", temperature_K=temperature_K,
                     n_constraints=0, com_motion_removed=False)
    return run_from_arrays(pos, t, masses, velocities_nm_per_ps=vel, energies=table, metadata=md,
                           name="test dimer")


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    run = dimer_run()
    res = drive(build_report(run, out / "run-report.pdf", coordinate="distance(0, 1)",
                             html_path=out / "run-report.html"))
    return run, res


def test_pdf_has_a_page_per_section_with_titles_and_captions(report):
    from pypdf import PdfReader  # reference PDF parser

    run, res = report
    reader = PdfReader(res.path)
    assert len(reader.pages) == res.n_pages == len(res.sections)
    texts = [pg.extract_text() for pg in reader.pages]
    # every section has at least one page, in the documented order
    present = list(dict.fromkeys(res.sections))
    assert present == [s for s in SECTION_TITLES if s in present]
    assert set(present) == set(SECTION_TITLES), f"missing sections; skipped: {res.skipped}"
    for sec, text in zip(res.sections, texts):
        assert SECTION_TITLES[sec] in text.replace("\n", " ")
        # the heuristic caution is on every page
        assert "heuristics" in text
    joined = "\n".join(texts).replace("\n", " ")
    assert "Time (ps)" in joined and "(kJ/mol)" in joined and "Temperature (K)" in joined
    # captions say what was computed with which settings
    assert "distance(0, 1)" in joined
    assert "N_dof" in joined or "degrees of freedom" in joined


def test_verdicts_table_lists_every_verdict(report):
    from pypdf import PdfReader

    run, res = report
    reader = PdfReader(res.path)
    first = " ".join(pg.extract_text() for pg, s in zip(reader.pages, res.sections) if s == "summary")
    assert "Verdict" in first and "Threshold" in first
    assert res.verdict_levels, "the audit and crossings gave no verdicts"
    for level in set(res.verdict_levels):
        assert level in first


def test_report_records_provenance_and_settings(report):
    from pypdf import PdfReader

    run, res = report
    meta = json.loads(PdfReader(res.path).metadata["/Subject"])
    assert meta["phasewake_version"] == __version__
    assert meta["settings"]["coordinate"] == "distance(0, 1)"
    assert res.settings["coordinate"] == "distance(0, 1)"


def test_html_variant_parses_and_embeds_figures(report):
    run, res = report
    text = res.html_path.read_text(encoding="utf-8")

    class Collect(HTMLParser):
        def __init__(self):
            super().__init__()
            self.imgs, self.h2 = [], []
            self._in_h2 = False

        def handle_starttag(self, tag, attrs):
            if tag == "img":
                self.imgs.append(dict(attrs)["src"])
            self._in_h2 = tag == "h2"

        def handle_data(self, data):
            if self._in_h2:
                self.h2.append(data)
                self._in_h2 = False

    c = Collect()
    c.feed(text)
    assert len(c.imgs) >= 5
    for src in c.imgs:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature
    assert SECTION_TITLES["summary"] in c.h2
    assert html.escape(HEURISTIC_NOTE) in text


def test_missing_velocities_give_an_honest_page(tmp_path):
    from pypdf import PdfReader

    full = dimer_run(300)
    # the same run with an energy table only: no frames at all
    from phasewake.core.model.run import Run

    run = Run(name="energies only", paths=(), topology=None, masses_amu=full.masses_amu, time_ps=full.time_ps,
              frames=None, energies=full.energies, metadata=full.metadata)
    res = drive(build_report(run, tmp_path / "r.pdf"))
    skipped = dict(res.skipped)
    assert "coordinate" in skipped and "no frames" in skipped["coordinate"]
    text = " ".join(p.extract_text() for p in PdfReader(res.path).pages)
    assert "not in the report" in text
    assert "Energy conservation" in text


def test_report_is_cancellable_and_leaves_no_file(tmp_path):
    from phasewake.core.errors import Cancelled
    from phasewake.core.progress import CancelToken

    token = CancelToken()
    seen = []

    def on_progress(p):
        seen.append(p)
        token.cancel()  # the user presses cancel as soon as work starts

    target = tmp_path / "r.pdf"
    with pytest.raises(Cancelled):
        drive(build_report(dimer_run(300), target), on_progress, token)
    assert len(seen) == 1 and seen[0].total is not None
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []


def test_phase_page_draws_the_density_of_distance_and_reduced_mass_momentum(report):
    run, res = report
    spec = next(f for f in res.figures if f.key == "report.phase")
    from phasewake.core.figures.spec import Image

    img = next(it for p in spec.plots for it in p.items if isinstance(it, Image))
    # reference made here with numpy: q = |x1 - x0| (the atoms move along x), p = mu dq/dt with the
    # reduced mass mu = m/2 of the pair (analytic effective mass of a distance)
    pos = np.concatenate([c.positions_nm for c in run.frames.iter_chunks()])
    vel = np.concatenate([c.velocities_nm_per_ps for c in run.frames.iter_chunks()])
    q = pos[:, 1, 0] - pos[:, 0, 0]
    p = 39.948 / 2 * (vel[:, 1, 0] - vel[:, 0, 0])
    ref, _, _ = np.histogram2d(q, p, bins=[img.x_edges, img.y_edges])
    area = np.outer(np.diff(img.x_edges), np.diff(img.y_edges))
    counts = np.nan_to_num(np.asarray(img.data)) * area * q.size  # density back to frames per cell
    # frames exactly on a bin edge may fall either side (float32 frames against float64 here)
    diff = np.abs(counts - ref)
    assert np.all(diff < 1.5) and np.count_nonzero(diff > 0.5) <= 4, np.count_nonzero(diff > 0.5)
    assert abs(counts.sum() - q.size) <= 4
    assert len(spec.plots) == 2  # and the principal components of the six atoms


def test_captions_carry_the_explanations_the_window_shows(report):
    from phasewake.core.analyses import explain
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    _, res = report
    text = html.unescape(res.html_path.read_text(encoding="utf-8"))
    for kind in ("number.statistical_inefficiency", "number.tau_int", "number.phase_density",
                 "number.free_energy", "number.conjugate_momentum"):
        e = EXPLANATIONS[kind]
        assert f"{e.title}: {e.what} {e.method}" in text, kind
    assert explain.caption_note("correlation.acf", numbers_only=True) in explain.caption_note("correlation.acf")


def test_report_reads_the_frames_once(sample_report):
    """The audit and the coordinate of the report come from one read of the sample file (frames are read once
    per request, not once per analysis); the numbers are those of the separate analyses
    (tests/core/test_cached.py checks the shared pass against them). The report is the sample run's, built
    once per session by the ``sample_report`` fixture (tests/conftest.py) with an empty cache."""
    h5md_reads, tmp_path = sample_report.reads, sample_report.pdf.parent
    res = None if sample_report.code else sample_report.pdf  # the command's exit 0, or None
    assert h5md_reads["n"] == 1
    assert (tmp_path / "r.pdf").stat().st_size > 0 and res is not None


def test_report_numbers_are_those_of_the_requests_the_command_line_and_window_build():
    """The report's free-energy profile, time correlation, sampling checks and crossings of the sample's
    coordinate equal those of LandscapeRequest, CorrelationRequest, SamplingRequest and CrossingsRequest run on
    their own through cached.requested (the road of `phasewake memory`, `phasewake crossings` and the window)."""
    from pathlib import Path

    from phasewake.core.analyses.correlation.request import CorrelationRequest
    from phasewake.core.analyses.crossings import CrossingsRequest
    from phasewake.core.analyses.landscape import LandscapeRequest
    from phasewake.core.analyses.sampling import SamplingRequest
    from phasewake.core.figures.report_analyses import ReportSettings, collect_analyses
    from phasewake.core.readers import open_run
    from phasewake.core.store.cache import ResultCache
    from phasewake.core.store.cached import requested

    sample = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_langevin.h5md"
    off = ResultCache(enabled=False)
    got = drive(collect_analyses(open_run([sample]), ReportSettings(), cache=off))
    spec = got.coordinate
    assert spec == "distance(0, 1)"

    def alone(request):
        return drive(requested(open_run([sample]), request, cache=off))

    land = alone(LandscapeRequest(coordinate=spec))
    profile = got.of_series.profile
    assert profile.temperature_K == land.temperature_K == 120.0  # the file's thermostat target
    np.testing.assert_array_equal(profile.free_energy_kJ_per_mol, land.free_energy_kJ_per_mol)
    assert [b.position for b in profile.barriers] == [b.position for b in land.barriers]
    corr = alone(CorrelationRequest(coordinate=spec))
    mine = got.of_series.correlations[0]
    assert mine.correlation.statistical_inefficiency == corr.correlation.statistical_inefficiency
    assert [(v.kind, v.level, v.measured) for v in mine.verdicts] == [(v.kind, v.level, v.measured)
                                                                     for v in corr.verdicts]
    samp = alone(SamplingRequest(coordinate=spec))
    assert got.of_series.sampling.rhat_segments.rhat == samp.rhat_segments.rhat
    assert got.of_series.sampling.divergence.half_jsd_nats == samp.divergence.half_jsd_nats
    # NaN fields compare equal as JSON text
    assert json.dumps(got.crossings.to_dict(), sort_keys=True, default=str) == json.dumps(
        alone(CrossingsRequest(coordinate=spec)).to_dict(), sort_keys=True, default=str)
