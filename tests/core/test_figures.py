"""Figure builders: every result type gives a figure whose data, units and styles are right, and which
matplotlib draws with the same data ranges as FigureSpec.data_ranges().

Outside references: matplotlib's own record of what it drew (Axes.dataLim); numpy for the expected
data; the Okabe and Ito (2008) palette as published (hex values from memory of the paper's table,
the same as in core/figures/spec.py's comment).
"""

import numpy as np
import pytest

from phasewake.core.figures import plots
from phasewake.core.figures.export import render_figure
from phasewake.core.figures.spec import Band, FigureSpec, Image, Line, Mark
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import drive
from phasewake.core.readers.memory import run_from_arrays

# Okabe & Ito (2008): black, orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple
OKABE_ITO = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
KB = 0.0083144626  # kJ/mol/K, CODATA 2018


def _table(n=800, seed=2):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 0.01
    kin = 50 + rng.normal(0, 2, n)
    pot = -200 - (kin - 50) + rng.normal(0, 0.1, n)
    return EnergyTable(t, {
        "potential_energy": Series("potential_energy", pot, "kJ/mol", "potential", "test"),
        "kinetic_energy": Series("kinetic_energy", kin, "kJ/mol", "kinetic", "test"),
        "total_energy": Series("total_energy", pot + kin, "kJ/mol", "total", "test"),
        "temperature": Series("temperature", kin / (0.5 * 30 * KB), "K", "temperature", "test"),
    })


def _switching_run(n=2500, seed=5):
    """Two atoms whose distance switches between ~0.35 and ~0.55 nm, with matching velocities."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 0.01
    r = 0.45 + 0.1 * np.tanh(4 * np.sin(2 * np.pi * t / 6.0)) + 0.01 * np.sin(2 * np.pi * t / 0.13)
    r += 0.004 * rng.standard_normal(n)
    vr = np.gradient(r, t)
    pos = np.zeros((n, 2, 3))
    vel = np.zeros((n, 2, 3))
    pos[:, 0, 0], pos[:, 1, 0] = 1 - r / 2, 1 + r / 2
    vel[:, 0, 0], vel[:, 1, 0] = -vr / 2, vr / 2
    tab = _table(n)
    return run_from_arrays(pos, t, np.full(2, 39.948), velocities_nm_per_ps=vel, energies=tab,
                           metadata=RunMetadata(timestep_ps=0.002, ensemble="NVE", n_constraints=0,
                                                com_motion_removed=True), name="switching")


@pytest.fixture(scope="module")
def results():
    """One real result of each analysis module (small inputs, computed by those modules)."""
    from phasewake.core.analyses import correlation, crossings, landscape, projection, velocity
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.analyses.coordinates import compute_coordinates

    rng = np.random.default_rng(9)
    run = _switching_run()
    series = drive(compute_coordinates(run, ["distance(0, 1)"]))[0]
    cross = crossings.analyse_crossings(series.time_ps, series.values, series.velocity, unit=series.unit,
                                        temperature_K=120.0)
    x = np.empty(4000)
    x[0] = 0
    e = rng.standard_normal(4000)
    for i in range(1, 4000):
        x[i] = 0.8 * x[i - 1] + e[i]
    acf = correlation.analyse_series(x, dt_ps=0.01, unit="nm")
    blk = correlation.blocking(x, unit="nm")
    prof = landscape.free_energy_profile(series.values, temperature_K=120.0, unit="nm")
    surf = landscape.free_energy_surface(series.values, np.asarray(series.momentum), temperature_K=120.0,
                                         x_unit="nm", y_unit=series.momentum_unit)
    tt = np.arange(20000) * 0.01
    q1, q2 = np.cos(1.0 * tt), 0.5 * np.cos(np.sqrt(2.0) * tt + 0.3)
    p2 = -0.5 * np.sqrt(2.0) * np.sin(np.sqrt(2.0) * tt + 0.3)
    sec = landscape.poincare_section(q1, q2, p2, tt, value=0.0, q2_unit="nm", p2_unit="nm/ps")
    vel = rng.normal(0, 0.3, (400, 6, 3))
    vac = velocity.vacf_from_velocities(vel, 0.01, max_lag=50)
    vdos = velocity.vdos_from_velocities(vel, np.full(6, 39.948), 0.01, max_lag=100)
    pos = rng.normal(0, 0.05, (300, 5, 3)) + np.arange(5)[None, :, None] * 0.3
    pca = projection.pca_arrays(pos, np.full(5, 12.0), n_components=4)
    audit = drive(audit_run(run))
    from phasewake.core.analyses import sampling

    per_particle = rng.normal(0, 1, (1000, 8))  # independent noise per particle: an ergodic case
    samp = {
        "running": sampling.running_average(series.values, dt_ps=0.01, unit="nm"),
        "divergence": sampling.segment_divergence(series.values),
        "tm": sampling.thirumalai_mountain(per_particle, dt_ps=0.01),
        "coverage": sampling.coverage_over_time(series.values, np.asarray(series.momentum), dt_ps=0.01),
        "recurrence": sampling.recurrence(series.values[:400], dt_ps=0.01),
    }
    density = landscape.histogram_2d(series.values, np.asarray(series.momentum), x_unit="nm",
                                     y_unit=series.momentum_unit)
    return {"density": density, "sampling": samp, "table": _table(), "series": series, "crossings": cross, "acf": acf, "blocking": blk,
            "profile": prof, "surface": surf, "poincare": sec, "vacf": vac, "vdos": vdos, "pca": pca,
            "audit": audit}


def _all_specs(r):
    return [
        plots.energy_series_figure(r["table"], drift_slope_kJ_per_mol_per_ps=0.001),
        plots.temperature_figure(r["table"], target_K=120.0),
        plots.audit_energy_figure(r["audit"]),
        plots.audit_temperature_figure(r["audit"]),
        plots.audit_spectrum_figure(r["audit"]),
        plots.autocorrelation_figure(r["acf"], name="x"),
        plots.blocking_figure(r["blocking"], name="x"),
        plots.coordinate_series_figure(r["series"], crossings=r["crossings"]),
        plots.coordinate_series_figure(r["series"]),
        plots.phase_portrait_figure(r["series"], crossings=r["crossings"], cursor_index=10),
        plots.pca_figure(r["pca"]),
        plots.free_energy_profile_figure(r["profile"], label="r", crossings=r["crossings"]),
        plots.free_energy_surface_figure(r["surface"], x_label="r", y_label="p"),
        plots.poincare_figure(r["poincare"]),
        plots.vacf_figure(r["vacf"]),
        plots.vdos_figure(r["vdos"]),
        plots.dwell_times_figure(r["crossings"]),
        plots.transmission_figure(r["crossings"]),
        plots.running_average_figure(r["sampling"]["running"], name="r"),
        plots.divergence_figure(r["sampling"]["divergence"], name="r", unit="nm"),
        plots.tm_figure(r["sampling"]["tm"]),
        plots.coverage_figure(r["sampling"]["coverage"], x_label="r", y_label="p"),
        plots.recurrence_figure(r["sampling"]["recurrence"]),
        plots.phase_density_figure(r["series"], r["density"]),
        plots.coordinate_time_figure(r["series"]),
        plots.coordinate_pair_figure(r["series"], r["series"]),
        plots.poincare_pair_figure(r["series"], r["series"], r["poincare"]),
        plots.pca_variance_figure(r["pca"]),
        plots.landscape_states_figure(r["profile"], r["series"], states=(0.4, 0.5), surface=0.45),
    ]


def test_every_builder_is_in_the_tables(results):
    keys = {s.key for s in _all_specs(results)}
    assert keys <= set(plots.FIGURE_BUILDERS)
    for figure_keys in plots.RESULT_FIGURES.values():
        assert set(figure_keys) <= set(plots.FIGURE_BUILDERS)
    # the lookup by result type gives the figures of each result
    assert [f.key for f in plots.figures_for(results["crossings"])] == list(plots.RESULT_FIGURES["CrossingsResult"])
    assert [f.key for f in plots.figures_for(results["series"])] == ["coordinate.series", "phase.portrait"]


def test_axes_have_labels_and_units_and_captions(results):
    dimensionless = {"Autocorrelation ρ", "C(t)/C(0)", "κ(t)", "Power (normalised)", "Fraction of variance",
                     "Fraction longer than t", "Principal component", "Ω(0)/Ω(t)", "Fraction of grid visited"}
    for spec in _all_specs(results):
        assert spec.caption, spec.key
        for p in spec.plots:
            for ax in (p.x, p.y):
                assert ax.label, spec.key
                if ax.label not in dimensionless:
                    assert ax.unit, f"{spec.key}: axis {ax.label!r} has no unit"
            if p.x_is_time:
                assert p.x.unit == "ps"


def test_colour_blind_safe_and_never_colour_alone(results):
    for spec in _all_specs(results):
        for p in spec.plots:
            lines = [it for it in p.items if isinstance(it, Line)]
            for it in p.items:
                if isinstance(it, Line | Band | Mark):
                    c = it.style.colour.upper()
                    grey = len(c) == 7 and c[1:3] == c[3:5] == c[5:7]  # neutral reference lines
                    assert c in OKABE_ITO or (grey and not it.label), (spec.key, it.style.colour)
            # two curves in one plot differ by more than colour: dash, marker or kind
            cues = [(it.style.dash, it.style.marker, it.kind) for it in lines]
            labelled = [c for c, it in zip(cues, lines) if it.label]
            assert len(set(labelled)) == len(labelled), (spec.key, labelled)


def test_energy_figure_holds_the_table_data(results):
    tab = results["table"]
    spec = plots.energy_series_figure(tab)
    top, bottom = spec.plots
    np.testing.assert_array_equal(top.items[0].y, tab.series["total_energy"].values)
    pot = tab.series["potential_energy"].values
    np.testing.assert_allclose(bottom.items[0].y, pot - pot.mean(), rtol=0, atol=1e-12)


@pytest.mark.slow  # measured 1.7 s of CPU
def test_matplotlib_draws_the_spec_data_ranges(results):
    # the exported figure shows the same data ranges as the description (what the window shows too)
    for spec in _all_specs(results):
        data_only = FigureSpec(key=spec.key, title=spec.title, grid=spec.grid, plots=tuple(
            type(p)(title=p.title, x=p.x, y=p.y, items=tuple(it for it in p.items if not isinstance(it, Mark)),
                    legend=p.legend, x_is_time=p.x_is_time)
            for p in spec.plots))
        fig = render_figure(data_only, preset="double")
        axes = [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]
        for ax, p, ((x0, x1), (y0, y1)) in zip(axes, data_only.plots, data_only.data_ranges()):
            if not any(isinstance(it, Line | Band | Image) for it in p.items):
                continue
            lim = ax.dataLim
            if p.y.log:  # a log axis drops values <= 0; compare on what can be drawn
                continue
            if any(isinstance(it, Line) and it.kind == "bar" for it in p.items):
                # bars are drawn with their width around each x: the drawn range holds the data range
                assert lim.x0 <= x0 and lim.x1 >= x1 and lim.y0 <= y0 and lim.y1 >= y1, spec.key
                continue
            assert (lim.x0, lim.x1) == pytest.approx((x0, x1), rel=1e-9, abs=1e-12), spec.key
            assert (lim.y0, lim.y1) == pytest.approx((y0, y1), rel=1e-9, abs=1e-12), spec.key


def test_crossings_figure_marks_every_event(results):
    cross = results["crossings"]
    spec = plots.coordinate_series_figure(results["series"], crossings=cross)
    scat = [it for it in spec.plots[0].items if isinstance(it, Line) and it.kind == "scatter"]
    n_marked = sum(it.x.size for it in scat)
    ev = cross.events
    assert n_marked == int(np.sum(np.isin(ev["kind"], ["transition", "recrossing"])))
    assert n_marked > 0
    spans = [it for it in spec.plots[0].items if isinstance(it, Mark) and it.kind == "hspan"]
    assert len(spans) == 2
    assert spans[0].value2 == pytest.approx(cross.settings.a_hi)
    assert spans[1].value == pytest.approx(cross.settings.b_lo)


# ---- the window's phase-space and landscape figures, drawn by core.plots for window and report ----------

def test_phase_density_is_the_numpy_histogram_with_empty_cells_blank(results):
    s, h = results["series"], results["density"]
    spec = plots.phase_density_figure(s, h)
    img = next(it for it in spec.plots[0].items if isinstance(it, Image))
    # numpy.histogram2d on the same edges is the reference (density=True: counts / (N * cell area))
    ref, _, _ = np.histogram2d(s.values, np.asarray(s.momentum), bins=[img.x_edges, img.y_edges], density=True)
    filled = ref > 0
    np.testing.assert_allclose(np.asarray(img.data)[filled], ref[filled], rtol=1e-10)
    assert np.all(np.isnan(np.asarray(img.data)[~filled]))
    assert spec.plots[0].x.unit == "nm" and spec.plots[0].y.unit == s.momentum_unit


def test_pca_figures_carry_the_explained_variance_of_sklearn(results):
    from sklearn.decomposition import PCA

    rng = np.random.default_rng(4)
    # anisotropic Gaussian cloud of 4 atoms, no fit needed: compare with scikit-learn on the same data
    pos = rng.normal(0, 1, (500, 4, 3)) * np.array([0.3, 0.1, 0.02])[None, None, :] + np.arange(4)[None, :, None]
    from phasewake.core.analyses import projection

    pca = projection.pca_arrays(pos, np.full(4, 1.0), n_components=3, fit=False)
    figs = plots.principal_component_figures(pca)
    assert figs[0].key == "phase.pca_variance"
    bars = figs[0].plots[0].items[0]
    ref = PCA(n_components=12).fit(pos.reshape(500, -1)).explained_variance_ratio_  # scikit-learn
    np.testing.assert_allclose(np.asarray(bars.y)[:3], ref[:3], rtol=1e-6)
    assert "phase.pc12" in [f.key for f in figs]  # PC 2 carries variance here


def test_landscape_states_marks_can_be_dragged_and_profile_is_minus_kT_ln_p(results):
    prof, s = results["profile"], results["series"]
    spec = plots.landscape_states_figure(prof, s, states=(0.41, 0.49), surface=0.45)
    marks = {(m.role, m.label): m.value for m in spec.plots[0].items if isinstance(m, Mark)}
    assert marks == {("state", "A"): 0.41, ("state", "B"): 0.49, ("surface", "dividing surface"): 0.45}
    line = next(it for it in spec.plots[0].items if isinstance(it, Line))
    # F = -kT ln P from numpy's histogram on the profile's bins (Boltzmann inversion), lowest bin at 0
    counts, _ = np.histogram(s.values, bins=np.asarray(prof.edges))
    ok = counts > 0
    ref = -KB * 120.0 * np.log(counts[ok] / np.diff(prof.edges)[ok])
    ref -= ref.min()
    np.testing.assert_allclose(np.asarray(line.y)[ok], ref, atol=1e-6)


def test_kappa_from_rates_is_not_a_number_to_read_when_no_sample_lies_at_the_surface():
    # A two-state series that hops from 0.40 to 0.60 nm between frames is never sampled at the surface:
    # the TST rate (flux factor x density at q*) is then 0 by its definition, and k/k_TST has no value;
    # the table says so instead of printing "nan"
    from phasewake.core.analyses.crossings.pooled import analyse_crossings
    from phasewake.core.figures.plots_crossings import crossings_summary_rows

    rng = np.random.default_rng(1)
    n = 4000
    q = np.where((np.arange(n) // 37) % 2 == 0, 0.40, 0.60) + 0.005 * rng.standard_normal(n)
    r = analyse_crossings(np.arange(n) * 0.1, q, states=(0.45, 0.55), surface=0.5, unit="nm", kT_over_m_eff=1.0)
    assert r.tst.tst.rate_up_per_ps == 0.0 and r.tst.tst.n_at_surface == 0
    row = dict(crossings_summary_rows(r))["κ from rates / TST"]
    assert "nan" not in row and "n/a" in row and "k_TST = 0" in row
