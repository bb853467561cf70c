"""The window as a practitioner uses it, on small synthetic runs (pytest-qt, offscreen).

Points of the "window on real runs" issue that need no sample run: the blocking band drawn in log
space, one coordinate per open run, replicas pooled only when they are replicas, the loading text,
element hints without a topology, run settings that reach the analyses, readable plot axes, plain
words, the start-up check naming the X11 libraries really missing, the status line and the dialogs'
folders. The sample-run checks (rates on screen, settings changing the audit's verdicts, laptop size)
are in test_window.py.
"""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("pytestqt")
pg = pytest.importorskip("pyqtgraph")
from PySide6 import QtCore  # noqa: E402

from phasewake.app.window.main import MainWindow  # noqa: E402
from phasewake.app.window.model import RunEntry, RunSettings, WindowModel  # noqa: E402
from phasewake.app.window.render import FigureView, LogAxis  # noqa: E402
from phasewake.app.window.replicas import replica_difference, replicas_of  # noqa: E402
from phasewake.core.figures import plots  # noqa: E402
from phasewake.core.model.run import RunMetadata  # noqa: E402
from phasewake.core.readers.memory import run_from_arrays  # noqa: E402

pytestmark = pytest.mark.gui


def _run(n_atoms=2, n=300, dt=0.01, *, name="run", masses=None, metadata=None, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * dt
    pos = rng.normal(0.0, 0.01, (n, n_atoms, 3)).astype(np.float32) + np.arange(n_atoms)[None, :, None] * 0.3
    vel = rng.normal(0.0, 0.3, (n, n_atoms, 3)).astype(np.float32)
    m = np.full(n_atoms, 39.948) if masses is None else np.asarray(masses, float)
    return run_from_arrays(pos, t, m, velocities_nm_per_ps=vel, name=name, metadata=metadata or RunMetadata())


def _window(qtbot, tmp_path) -> MainWindow:
    w = MainWindow(settings=QtCore.QSettings(str(tmp_path / "settings.ini"), QtCore.QSettings.Format.IniFormat))
    qtbot.addWidget(w)
    w.resize(1024, 640)
    w.show()
    return w


# ---- 2. the blocking curve on its log axis ------------------------------------------------------

def test_blocking_band_is_drawn_in_log_space(qtbot):
    from phasewake.core.analyses.correlation import blocking

    rng = np.random.default_rng(3)
    x = np.convolve(rng.normal(size=20_000), np.ones(20) / 20, mode="same")  # correlated over ~20 samples
    spec = plots.blocking_figure(blocking(x, unit="nm"), name="q")
    view = FigureView()
    qtbot.addWidget(view)
    view.resize(800, 500)
    view.show_figure(spec)
    rp = view.plots[0]
    bs = np.asarray([it for it in spec.plots[0].items if hasattr(it, "lo")][0].x, float)
    # the band's edges are given to pyqtgraph as log10(block size), like the curve log mode transforms
    edges = [it for it in rp.items if isinstance(it, pg.PlotCurveItem)]
    assert edges
    ex, _ = edges[0].getData()
    np.testing.assert_allclose(ex, np.log10(bs), rtol=0, atol=1e-12)
    # so the axis spans the block sizes (a few decades), not 10^60 as with the band on the linear scale
    (x0, x1), _ = rp.plot.vb.viewRange()
    assert -1.0 <= x0 and x1 <= np.log10(bs.max()) + 1.0, (x0, x1)
    # and the drawn data still span the spec's data ranges in data units (the renderer contract)
    (a0, a1), _ = rp.data_bounds()
    assert (a0, a1) == pytest.approx((bs.min(), bs.max()), rel=1e-9)


def test_log_axis_labels_do_not_pile_up():
    axis = LogAxis(orientation="left")
    # minor ticks of one decade near 1, as on the dwell-time survival axis
    values = list(np.log10([0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0]))
    labels = axis.logTickStrings(values, 1.0, 1.0)
    shown = [lab for lab in labels if lab]
    assert len(shown) == 4, labels  # 0.1, 0.2, 0.5 and 1 only; 0.7/0.8/0.9 overlapped
    assert labels[6] == labels[7] == labels[8] == ""


# ---- 4. one coordinate per run; replicas only when they are replicas ------------------------------

def test_each_run_keeps_its_own_coordinate(qtbot):
    m = WindowModel()
    m.add_run(RunEntry(run=_run(2, name="dimer")))
    m.set_coordinate("distance(0, 1)")
    m.add_run(RunEntry(run=_run(1, name="single atom")))
    m.set_current(1)
    assert m.coordinate == ""  # not the dimer's distance(0, 1): atom 1 does not exist here
    m.set_coordinate("x(0)")
    m.set_current(0)
    assert m.coordinate == "distance(0, 1)"
    m.set_current(1)
    assert m.coordinate == "x(0)"


@pytest.mark.slow  # measured ~1 s of CPU
def test_a_one_atom_run_beside_the_dimer_breaks_nothing(qtbot, tmp_path):
    w = _window(qtbot, tmp_path)
    w.add_run(_run(2, name="dimer"))
    assert w.wait_idle(60_000)
    dimer_coordinate = w.model.coordinate
    assert dimer_coordinate
    w.add_run(_run(1, name="single atom"))
    w.model.set_current(1)
    assert w.wait_idle(60_000)
    assert w.model.coordinate and "1" not in w.model.coordinate.split("(")[1]
    for name in ("Phase space", "Crossings", "Landscape", "Sampling", "Correlation"):
        p = w.panels[name]
        assert not p.error or "out of range" not in p.error, (name, p.error)
        # what the Show box offers is about this run's coordinate
        titles = [p.chooser.itemText(i) for i in range(p.chooser.count())]
        assert not any(dimer_coordinate in t for t in titles), (name, titles)
    w.model.set_current(0)
    assert w.wait_idle(60_000)
    assert w.model.coordinate == dimer_coordinate
    assert not any(p.error and "out of range" in p.error for p in w.panels.values())


def test_only_real_replicas_are_pooled():
    nve = RunMetadata(ensemble="NVE", timestep_ps=0.002)
    langevin = RunMetadata(ensemble="NVT", thermostat="langevin", temperature_K=120.0, timestep_ps=0.002)
    a = _run(2, name="nve", metadata=nve)
    b = _run(2, name="langevin 1", metadata=langevin, seed=1)
    c = _run(2, name="langevin 2", metadata=RunMetadata(**{**langevin.__dict__, "sources": {}}), seed=2)
    d = _run(3, name="three atoms", metadata=langevin)
    e = _run(2, name="heavier", metadata=langevin, masses=[39.948, 83.8])
    pooled, skipped = replicas_of(b, (a, c, d, e))
    assert [r.name for r in pooled] == ["langevin 2"]
    why = dict(skipped)
    assert "ensemble" in why["nve"] and "atoms" in why["three atoms"] and "masses" in why["heavier"]
    hot = _run(2, name="hot", metadata=RunMetadata(ensemble="NVT", thermostat="langevin", temperature_K=300.0,
                                                   timestep_ps=0.002))
    assert "temperature" in replica_difference(b, hot)
    other_step = _run(2, name="4 fs", metadata=RunMetadata(ensemble="NVT", thermostat="langevin",
                                                           temperature_K=120.0, timestep_ps=0.004))
    assert "time step" in replica_difference(b, other_step)


# ---- 5. loading, not "no run" -------------------------------------------------------------------

def test_panels_say_loading_while_a_listed_run_is_read(qtbot, tmp_path):
    w = _window(qtbot, tmp_path)
    w.add_run(_run(2, name="being read"))
    # the run is listed; nothing has been computed yet (the first job starts from the event loop)
    for name in ("Correlation", "Sampling"):
        text = w.panels[name].view.message.text()
        assert "No run is open" not in text and "Loading being read" in text, text
    assert w.wait_idle(60_000)


# ---- 6. element hints without a topology --------------------------------------------------------

def test_coordinate_builder_guesses_elements_from_masses(qtbot):
    from phasewake.app.window.builder import CoordinateBuilder, atom_rows, element_guess

    # standard atomic weights (IUPAC 2013, as in mdtraj's element table): O 15.999, H 1.008, N 14.007
    assert element_guess(15.999) == "O" and element_guess(1.008) == "H" and element_guess(39.948) == "Ar"
    assert element_guess(14.027) == ""  # a united-atom CH2 is not nitrogen (14.007): no guess
    assert element_guess(3.024) == ""  # repartitioned hydrogen mass: no element
    run = _run(4, masses=[15.999, 1.008, 1.008, 14.027])
    rows = atom_rows(run)
    assert rows[0][4] == "O? (15.999 amu)" and rows[1][4] == "H? (1.008 amu)" and rows[3][4] == "(14.027 amu)"
    dlg = CoordinateBuilder(run, "")
    qtbot.addWidget(dlg)
    dlg.pick_atoms([0, 3])
    assert "0 O? (15.999 amu)" in dlg.picked_label.text()
    dlg.filter.setText("o?")  # the filter finds atoms by their element guess too
    visible = [r for r in range(dlg.table.rowCount()) if not dlg.table.isRowHidden(r)]
    assert visible == [0]
    # species numbers an H5MD file carries without a meaning are shown as they are
    run.metadata.extra["species"] = [8, 1, 1, 7]
    assert atom_rows(run)[0][1] == "species 8"


# ---- 7. run settings reach the analyses -----------------------------------------------------------

@pytest.mark.slow  # measured ~1 s of CPU
def test_settings_form_reaches_the_run_and_can_be_undone(qtbot, tmp_path):
    w = _window(qtbot, tmp_path)
    w.add_run(_run(2, name="stated later", metadata=RunMetadata(ensemble=None)))
    assert w.wait_idle(60_000)
    form = w.runs.settings
    form.ensemble.setCurrentIndex(form.ensemble.findData("NVT"))
    form.thermostat.setCurrentIndex(form.thermostat.findData("langevin"))
    form.temperature.setValue(120.0)
    form.timestep.setValue(2.0)
    qtbot.mouseClick(form.apply, QtCore.Qt.MouseButton.LeftButton)
    md = w.model.current.run.metadata
    assert (md.ensemble, md.thermostat, md.temperature_K, md.timestep_ps) == ("NVT", "langevin", 120.0,
                                                                               pytest.approx(0.002))
    assert md.sources["ensemble"] == "user" and md.sources["thermostat"] == "user"
    assert w.wait_idle(60_000)
    # back to "as in files": the files' values again, not the last ones applied
    w.model.update_settings(0, RunSettings())
    md = w.model.current.run.metadata
    assert md.ensemble is None and md.thermostat is None and md.temperature_K is None
    assert w.wait_idle(60_000)
    # the same settings go to open_run when a run is opened (command line, sessions)
    st = RunSettings(timestep_fs=1.0, ensemble="NVT", thermostat="nose-hoover", temperature_K=300.0)
    assert st.overrides() == {"timestep_ps": 0.001, "ensemble": "NVT", "thermostat": "nose-hoover",
                              "temperature_K": 300.0}
    assert RunSettings.from_dict(st.to_dict()) == st


def test_a_time_step_stated_in_the_window_is_read_into_the_run(qtbot, tmp_path):
    # A LAMMPS dump's times are step x time step: stating another step opens the files again with it, as
    # --timestep does (before, only the metadata changed and the time axis stayed at the log's 4 fs). The
    # log's own dt is 4 fs (tests/data/engines/lammps/argon_real_nve/reported.json).
    import json
    from pathlib import Path

    from phasewake.core.model.ranges import files_of

    folder = Path(__file__).resolve().parents[1] / "data" / "engines" / "lammps" / "argon_real_nve"
    dt_log = json.loads((folder / "reported.json").read_text())["reported"]["time_step_ps"]
    w = _window(qtbot, tmp_path)
    w.open_paths([str(folder / "dump.lammpstrj"), str(folder / "log.lammps")])
    qtbot.waitUntil(lambda: w.model.current is not None, timeout=60_000)
    assert w.wait_idle(60_000)
    before = w.model.current.run
    t_log = before.time_ps.copy()
    form = w.runs.settings
    form.timestep.setValue(1e3 * dt_log / 2)
    qtbot.mouseClick(form.apply, QtCore.Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: w.model.current.run is not before, timeout=60_000)
    run = w.model.current.run
    np.testing.assert_allclose(run.time_ps, t_log / 2, rtol=1e-12)
    assert run.metadata.timestep_ps == pytest.approx(dt_log / 2) and run.metadata.sources["timestep_ps"] == "user"
    assert files_of(run).options["timestep_ps"] == pytest.approx(dt_log / 2)  # what worker processes open
    # the other settings change the run in place, and reach the workers too
    w.model.update_settings(0, RunSettings(timestep_fs=1e3 * dt_log / 2, temperature_K=120.0))
    assert w.model.current.run is run and files_of(run).options["temperature_K"] == 120.0
    assert w.wait_idle(60_000)


def test_a_lammps_dump_without_its_log_asks_for_the_units_style(qtbot, tmp_path, monkeypatch):
    # nothing says the style (no log.lammps, no ITEM: UNITS): the window asks, then opens with the answer,
    # as 'phasewake describe --units real' does; the answer is the run's setting (LAMMPS units)
    from pathlib import Path

    from phasewake.core.readers import open_run

    folder = Path(__file__).resolve().parents[1] / "data" / "engines" / "lammps" / "argon_real_nve"
    files = [str(folder / "dump.lammpstrj"), str(folder / "argon.data")]
    w = _window(qtbot, tmp_path)
    asked = []
    monkeypatch.setattr(w, "ask_units_style", lambda paths, why: asked.append(why) or "real")
    w.open_paths(files)
    qtbot.waitUntil(lambda: w.model.current is not None, timeout=60_000)
    assert asked and "units style is not known" in asked[0]
    run = w.model.current.run
    ref = open_run(files, units_style="real")
    np.testing.assert_array_equal(run.masses_amu, ref.masses_amu)
    assert run.metadata.units_style == "lammps real" and w.model.current.settings.units_style == "real"
    assert w.runs.settings.units.currentData() == "real"
    assert w.wait_idle(60_000)
    # cancelled: nothing opened, and the reason is shown
    monkeypatch.setattr(w, "ask_units_style", lambda paths, why: None)
    shown = []
    monkeypatch.setattr(w, "show_problem", lambda title, text: shown.append(text))
    w.open_paths(files)
    qtbot.waitUntil(lambda: bool(shown), timeout=60_000)
    assert len(w.model.entries) == 1 and "units style is not known" in shown[0]
    assert w.wait_idle(60_000)


# ---- 9. plots that do not mislead ------------------------------------------------------------------

def test_vacf_axis_ends_where_the_decay_is_over():
    from phasewake.core.analyses.velocity import vacf_from_velocities

    # Ornstein-Uhlenbeck velocities: C(t)/C(0) = exp(-t/tau) exactly in expectation (tau = 0.05 ps)
    rng = np.random.default_rng(0)
    dt, tau, n = 0.002, 0.05, 20_000
    a = np.exp(-dt / tau)
    v = np.zeros((n, 8, 3))
    for i in range(1, n):
        v[i] = a * v[i - 1] + np.sqrt(1 - a * a) * rng.normal(size=(8, 3))
    res = vacf_from_velocities(v, dt, max_lag=5000)  # lags to 10 ps, 200 decay times
    spec = plots.vacf_figure(res)
    lim = spec.plots[0].x.limits
    assert lim is not None
    # exp(-t/tau) < 0.05 after t = tau ln 20 = 0.15 ps: the axis ends at a few of those, not at 10 ps
    assert 0.1 < lim[1] < 2.0, lim
    assert "exported data hold every lag" in spec.caption


def test_spectra_axes_end_past_the_highest_peak_and_share_units():
    from types import SimpleNamespace

    w = np.linspace(0.0, 16_700.0, 4000)
    y = np.exp(-0.5 * ((w - 250.0) / 30.0) ** 2) + 1e-4
    peak = SimpleNamespace(wavenumber_cm1=250.0, intensity=1.0)
    res = SimpleNamespace(wavenumber_cm1=w, intensity=y, peaks=(peak,), highest_significant_peak_cm1=250.0,
                          window="Hann", n_dof=6.0, resolution_cm1=5.0, max_lag_ps=5.0, nyquist_cm1=16_700.0,
                          dt_ps=0.001, velocities_estimated=False, notes=(), settings={})
    spec = plots.vdos_figure(res)
    lo, hi = spec.plots[0].x.limits
    assert lo == 0.0 and 250.0 < hi < 1000.0  # not to the Nyquist limit at 16,700 cm⁻¹
    # the velocity spectrum of the time-step check is in cm⁻¹ too (1 ps⁻¹ = 33.356 cm⁻¹, c exact)
    f = np.linspace(0, 500, 2001)
    fm = SimpleNamespace(frequency_per_ps=7.5, period_ps=1 / 7.5, wavenumber_per_cm=7.5 * 33.35641,
                         resolution_per_ps=0.25, nyquist_per_ps=500.0)
    tsa = SimpleNamespace(frequency_per_ps=f, power=np.exp(-0.5 * ((f - 7.5) / 0.5) ** 2), fastest=fm,
                          check=None, note="")
    spec = plots.audit_spectrum_figure(SimpleNamespace(timestep=tsa, run_name="r"))
    assert spec.plots[0].x.unit == "cm⁻¹"
    line = spec.plots[0].items[0]
    assert np.asarray(line.x)[-1] == pytest.approx(500.0 * 33.35641, rel=1e-6)
    assert spec.plots[0].x.limits[1] < 1500.0


def test_pca_says_which_atoms_and_explains_two(qtbot):
    from types import SimpleNamespace

    pca = SimpleNamespace(explained_variance_ratio=np.array([1.0, 0.0, 0.0]), cosine_content=None,
                          n_frames=100, mass_weighted=True, fit=True, method="exact",
                          atom_indices=np.array([0, 1]), projections=None, time_ps=None, momenta=None)
    figs = plots.principal_component_figures(pca)
    cap = figs[0].caption
    assert "atoms 0 and 1" in cap and "only their distance can vary" in cap
    assert figs[0].plots[0].x.integer
    assert plots.atoms_text(range(54)) == "atoms 0–53 (54 atoms)"
    view = FigureView()
    qtbot.addWidget(view)
    view.show_figure(figs[0])
    axis = view.plots[0].plot.getAxis("bottom")
    ticks = axis.tickValues(0.5, 3.5, 400)
    values = [v for _, vals in ticks for v in vals]
    assert values and all(float(v).is_integer() for v in values), values


def test_time_series_legend_sits_above_the_trace(qtbot):
    from phasewake.core.figures.spec import Axis, FigureSpec, Line, Mark, PlotSpec

    t = np.linspace(0, 10, 500)
    spec = FigureSpec(key="k", title="t", plots=(PlotSpec(
        title="q", x=Axis("Time", "ps"), y=Axis("q", "nm"), x_is_time=True,
        items=(Line(t, np.sin(t), label="q"), Mark("hline", 0.0, label="dividing surface", role="surface"))),))
    view = FigureView()
    qtbot.addWidget(view)
    view.resize(900, 500)
    view.show()
    view.show_figure(spec)
    rp = view.plots[0]
    legend = rp.plot.legend
    assert legend is not None and legend.parentItem() is not rp.plot.vb  # not inside the data area
    names = [label.text for _, label in legend.items]
    assert "dividing surface" in names  # named in the legend, not by a label drawn over the data
    lines = [it for it in rp.plot.items if isinstance(it, pg.InfiniteLine) and it is not rp.cursor]
    assert lines and all(getattr(line, "label", None) is None for line in lines)


# ---- 10. plain words ------------------------------------------------------------------------------

def test_window_text_is_in_plain_words():
    from phasewake.app.window.words import for_window

    # what the issue saw in captions and dialogs, and what a reader should see instead
    text = for_window("g by phasewake.core.analyses.correlation.statistical_inefficiency (Sokal window); n_atoms = 54; "
                      "temperature_K = 122.259; significance_z = 3; mean -545 ± 1.9e+02 kJ/mol; sigma_E/sigma_K "
                      "= 0.02 +- 0.01; 6 A->B transitions")
    for bad in ("phasewake.core", "n_atoms =", "temperature_K", "significance_z", "e+02", "sigma_E", "+-", "->"):
        assert bad not in text, (bad, text)
    for good in ("statistical inefficiency", "54 atoms", "temperature 122.3 K", "-545 ± 190", "σ_E/σ_K",
                 "0.02 ± 0.01", "A→B"):
        assert good in text, (good, text)
    # dialogs say what to do in the window, not which option to give
    msg = for_window("a .dcd trajectory holds no topology: give one (--top FILE: PDB, GRO, PSF, PRMTOP)")
    assert "--top" not in msg and "Open run files" in msg
    msg = for_window("the time step is unknown (give --timestep FS); common practice asks for at most 2 fs")
    assert "--timestep" not in msg and "Time step" in msg and "Apply" in msg


def test_exported_figures_write_symbols_as_mathtext(tmp_path):
    from phasewake.core.figures.draw import wrap_label as _wrap_label
    from phasewake.core.figures.export import export_figure, mathtext
    from phasewake.core.figures.spec import Axis, FigureSpec, Line, PlotSpec

    assert mathtext("σ_E/σ_K = 1.02") == r"$\sigma_E/\sigma_K$ = 1.02"
    assert mathtext("τ_int = 3 ps") == r"$\tau_\mathrm{int}$ = 3 ps"
    assert mathtext("potential_energy (kJ/mol)") == "potential_energy (kJ/mol)"  # a name is not a symbol
    wrapped = _wrap_label("Fluctuation ratio σ_E/σ_K = 1.02 and a drift of 3.2 kJ/mol/ns over the run", 24)
    for line in wrapped.splitlines():  # never broken inside "σ_E/σ_K = 1.02" or "3.2 kJ/mol/ns"
        assert not line.rstrip().endswith(("=", "3.2", "σ_E/σ_K")), wrapped
    x = np.linspace(0, 1, 50)
    spec = FigureSpec(key="k", title="t", plots=(PlotSpec(title="Fluctuations", x=Axis("Time", "ps"),
                                                          y=Axis("σ_E/σ_K"), items=(Line(x, x, label="N_dof = 12"),),
                                                          note="σ_E/σ_K = 0.02"),))
    out = export_figure(spec, tmp_path / "f.svg", preset="single").path  # mathtext that did not parse would raise
    assert out.stat().st_size > 0


def test_runs_list_puts_the_runs_facts_before_a_long_list_of_energy_terms():
    # a GROMACS run's .edr holds 32 terms: counted, the ones the analyses use named first, after the facts
    from pathlib import Path

    from phasewake.app.window.runs import run_summary
    from phasewake.core.readers import open_run

    run = open_run([Path(__file__).resolve().parents[1] / "data" / "engines" / "gromacs" / "spce_rigid_nvt_vrescale"])
    rows = run_summary(run)
    keys = [k for k, _ in rows]
    assert keys.index("time step") < keys.index("energy terms") and keys.index("constraints") < keys.index("energy terms")
    terms = dict(rows)["energy terms"]
    assert terms.startswith(f"{len(run.energies.series)} terms, among them Total Energy (kJ/mol), Conserved En.")
