"""Energy-conservation kernels and the audit adapter, checked against analytic results.

Sources named beside each check. Simulations are tiny and seeded.
"""

import math

import numpy as np
import pytest

from phasewake.core.analyses import energy as en
from phasewake.core.analyses.energy_events import find_energy_events
from phasewake.core.errors import MissingDataError
from phasewake.core.model.run import EnergyTable, RunMetadata, Series
from phasewake.core.progress import Progress, drive
from phasewake.core.settings import chunking


def verlet_oscillator(dt, *, n_periods=200, m=1.0, w=1.0, x0=1.0):
    """1D harmonic oscillator by velocity Verlet from a turning point; returns t, x, p, E, K."""
    n = int(round(n_periods * 2 * math.pi / w / dt))
    x = np.empty(n + 1)
    p = np.empty(n + 1)
    x[0], p[0] = x0, 0.0
    k = m * w * w
    xi, pi = x0, 0.0
    for i in range(1, n + 1):
        pi -= 0.5 * dt * k * xi
        xi += dt * pi / m
        pi -= 0.5 * dt * k * xi
        x[i], p[i] = xi, pi
    kin = p * p / (2 * m)
    e = kin + 0.5 * k * x * x
    return np.arange(n + 1) * dt, x, p, e, kin


# --- Velocity Verlet harmonic oscillator: Tuckerman 2010, eq. 3.13.3 (shadow Hamiltonian) ----------


def test_shadow_hamiltonian_conserved_to_roundoff():
    # Tuckerman 2010 eq. 3.13.3: H~ = p^2 / (2 m (1 - w^2 dt^2 / 4)) + m w^2 x^2 / 2 is exact for VV.
    dt, m, w = 0.1, 1.0, 1.0
    _, x, p, e, _ = verlet_oscillator(dt)
    shadow = p * p / (2 * m * (1 - w * w * dt * dt / 4)) + 0.5 * m * w * w * x * x
    assert np.max(np.abs(shadow - shadow[0])) / shadow[0] < 1e-12
    assert np.max(np.abs(e - e[0])) > 1e-4  # while the plain energy does fluctuate


def test_fluctuation_ratio_matches_omega_dt_squared_over_four():
    # R = sigma_E / sigma_K = (w dt)^2 / 4, derived from Tuckerman 2010 eq. 3.13.3 (REFERENCES.md §1.2).
    for dt in (0.1, 0.05):
        t, _, _, e, kin = verlet_oscillator(dt)
        res = en.energy_fluctuations(t, e, kin)
        assert res.ratio == pytest.approx(dt * dt / 4, rel=0.01)
        # std(K) = E0 / (2 sqrt 2) with E0 = 1/2 (REFERENCES.md §1.2, derived from the shadow Hamiltonian)
        assert res.sigma_kinetic_kJ_per_mol == pytest.approx(0.5 / (2 * math.sqrt(2)), rel=0.01)


def test_sigma_ratio_is_four_when_dt_halves():
    # Second-order symplectic integrator: sigma_E ~ dt^2 (Hairer, Lubich & Wanner 2006); for the HO
    # REFERENCES.md §1.2 gives 4 +- 1 %.
    from phasewake.core.analyses.timestep import timestep_scaling

    t1, _, _, e1, k1 = verlet_oscillator(0.1)
    t2, _, _, e2, k2 = verlet_oscillator(0.05)
    s1 = en.energy_fluctuations(t1, e1, k1).sigma_total_kJ_per_mol
    s2 = en.energy_fluctuations(t2, e2, k2).sigma_total_kJ_per_mol
    assert s1 / s2 == pytest.approx(4.0, rel=0.01)
    sc = timestep_scaling(0.1, s1, 0.05, s2)
    assert sc.exponent == pytest.approx(2.0, abs=0.01)
    assert sc.expected_ratio == pytest.approx(4.0)


def test_oscillator_has_no_significant_drift():
    # Velocity Verlet conserves the shadow energy: no secular drift (Tuckerman 2010).
    t, _, _, e, _ = verlet_oscillator(0.1)
    d = en.drift_fit(t, e)
    assert not d.significant
    assert abs(d.slope_kJ_per_mol_per_ns) < 5 * d.slope_error_kJ_per_mol_per_ns


# --- Drift with AR(1) noise: coverage of the corrected error bar (REFERENCES.md §1.1, §3.7) --------


def _ar1(rng, n_series, n, phi, sigma=1.0):
    from scipy.signal import lfilter

    eps = rng.normal(0.0, sigma, size=(n_series, n))
    x = lfilter([1.0], [1.0, -phi], eps, axis=1)
    # start in the stationary distribution: x_0 ~ N(0, sigma^2 / (1 - phi^2))
    x0 = rng.normal(0.0, sigma / math.sqrt(1 - phi * phi), size=(n_series, 1))
    return x + x0 * phi ** np.arange(1, n + 1)[None, :]


def test_drift_slope_recovered_within_three_sigma():
    # REFERENCES.md §1.1: E = E0 + a t + AR(1); recovered a within 3 sigma (g-corrected).
    rng = np.random.default_rng(11)
    n, a, dtp = 20000, 0.05, 0.01  # a in kJ/mol/ps
    t = np.arange(n) * dtp
    e = -1000.0 + a * t + _ar1(rng, 1, n, 0.9)[0]
    d = en.drift_fit(t, e, n_atoms=100, n_dof=297, temperature_K=300.0)
    assert abs(d.slope_kJ_per_mol_per_ns - a * 1e3) < 3 * d.slope_error_kJ_per_mol_per_ns
    assert d.significant
    # unit conversions: per atom, per DOF, kT/DOF/ns with k_B CODATA 2018
    assert d.slope_per_atom_kJ_per_mol_per_ns == pytest.approx(d.slope_kJ_per_mol_per_ns / 100)
    assert d.slope_kT_per_dof_per_ns == pytest.approx(
        d.slope_kJ_per_mol_per_ns / (297 * 0.00831446261815324 * 300.0))
    # AR(1) g = (1 + phi) / (1 - phi) = 19 (REFERENCES.md §3.7); residual g close to it
    assert d.residual_statistical_inefficiency == pytest.approx(19.0, rel=0.3)


def test_drift_error_bar_covers_truth_95_percent_of_seeds():
    # Coverage test (REFERENCES.md §1.1, common practice for the sqrt(g) correction): over many seeds
    # the 95 % interval slope +- 1.96 sigma must contain the true slope about 95 % of the time;
    # the uncorrected OLS interval must not (it is far too narrow for phi = 0.9).
    rng = np.random.default_rng(2026)
    n_seeds, n, phi, a = 400, 4000, 0.9, 0.02
    t = np.arange(n) * 0.01
    noise = _ar1(rng, n_seeds, n, phi)
    hit = hit_ols = 0
    for i in range(n_seeds):
        d = en.drift_fit(t, 5.0 + a * t + noise[i])
        err = abs(d.slope_kJ_per_mol_per_ns - a * 1e3)
        hit += err <= 1.96 * d.slope_error_kJ_per_mol_per_ns
        hit_ols += err <= 1.96 * d.slope_error_ols_kJ_per_mol_per_ns
    cover = hit / n_seeds
    assert 0.90 <= cover <= 0.985, cover  # binomial sd at 400 seeds ~ 0.011
    assert hit_ols / n_seeds < 0.6


def test_statistical_inefficiency_matches_ar1_g():
    # AR(1): g = (1 + phi)/(1 - phi) (REFERENCES.md §3.7); Sokal c = 5 gives 19.5 +- 1.2 at N = 1e5 for
    # phi = 0.9 (REFERENCES.md §3.2 table [C]); tolerance +-20 % as suggested there.
    rng = np.random.default_rng(5)
    for phi in (0.5, 0.9):
        x = _ar1(rng, 1, 100_000, phi)[0]
        g, _ = en.statistical_inefficiency_of(x)
        assert g == pytest.approx((1 + phi) / (1 - phi), rel=0.2 if phi == 0.9 else 0.07)


# --- Events -----------------------------------------------------------------------------------------


def test_events_are_located_in_time():
    rng = np.random.default_rng(3)
    n = 2000
    t = np.arange(n) * 0.002
    e = 100.0 + rng.normal(0, 0.01, n)
    e[1200:] += 1.0  # a glued run: a step of 100 sigma
    e[700] = np.nan
    t[1500:] += 0.05  # a gap of 25 spacings
    t = np.concatenate([t[:1800], t[1790:1800], t[1800:]])  # 10 rows repeated (restart appended)
    e = np.concatenate([e[:1800], e[1790:1800], e[1800:]])
    res = find_energy_events(t, e)
    assert res.n_nonfinite == 1
    assert [ev.time_ps for ev in res.events if ev.kind == "nonfinite"] == [pytest.approx(1.4)]
    jumps = [ev for ev in res.events if ev.kind == "jump"]
    assert jumps and jumps[0].time_ps == pytest.approx(2.4)
    assert jumps[0].size == pytest.approx(1.0, abs=0.05)
    gaps = [ev for ev in res.events if ev.kind == "gap"]
    assert len(gaps) == 1 and gaps[0].size == pytest.approx(0.052)
    assert res.n_overlaps == 1
    assert [ev.kind for ev in res.events if ev.kind in ("overlap", "reversal")] == ["reversal"]


def test_runaway_growth_is_measured():
    rng = np.random.default_rng(4)
    n = 5000
    t = np.arange(n) * 0.001
    e = rng.normal(0, 0.01, n) * np.exp(np.linspace(0, 4, n))  # noise grows e^4 ~ 55-fold
    res = find_energy_events(t, e)
    assert res.runaway_ratio > 10
    quiet = find_energy_events(t, rng.normal(0, 0.01, n))
    assert quiet.runaway_ratio < 1.5


# --- Conserved quantity ------------------------------------------------------------------------------


def _table(**cols):
    t = np.arange(10) * 0.1
    series = {name: Series(name, np.asarray(v, float), unit, role)
              for name, (v, unit, role) in cols.items()}
    return EnergyTable(time_ps=t, series=series, sources=("energies.csv",))


def test_select_conserved_rules():
    k = np.full(10, 2.0)
    u = np.full(10, -5.0)
    heat = np.linspace(0, 1, 10)
    tab = _table(kinetic_energy=(k, "kJ/mol", "kinetic"), potential_energy=(u, "kJ/mol", "potential"))
    s = en.select_conserved(tab, thermostatted=False)
    assert s.expected_conserved and "potential + kinetic" in s.label
    np.testing.assert_allclose(s.values_kJ_per_mol, -3.0)
    s = en.select_conserved(tab, thermostatted=True)
    assert not s.expected_conserved
    tab2 = _table(total_energy=(k + u - heat, "kJ/mol", "total"), bath_heat=(heat, "kJ/mol", "bath_heat"))
    s = en.select_conserved(tab2, thermostatted=True)
    assert s.expected_conserved and "bath heat" in s.label
    np.testing.assert_allclose(s.values_kJ_per_mol, -3.0)
    tab3 = _table(conserved_energy=(np.ones(10), "kJ/mol", "conserved"), total_energy=(k, "kJ/mol", "total"))
    assert "conserved energy" in en.select_conserved(tab3, thermostatted=True).label


def test_no_usable_energy_column_is_a_clear_error():
    tab = _table(temperature=(np.full(10, 300.0), "K", "temperature"))
    with pytest.raises(MissingDataError, match="no usable energy column.*temperature"):
        en.select_conserved(tab, thermostatted=False)


# --- The audit adapter on a small analytic system ------------------------------------------------------


def harmonic_traps(n_atoms=64, *, dt=0.002, n_steps=4000, every=2, w=150.0, m=12.0, temperature=300.0, seed=0,
                   gamma=None):
    """Atoms in isotropic harmonic traps (angular frequency w, 1/ps), velocity Verlet or BAOAB Langevin.

    Returns time, positions, velocities, kinetic, potential and cumulative bath heat (energy the
    thermostat removed) per saved frame. Vectorised over atoms.
    """
    rng = np.random.default_rng(seed)
    kt = 0.00831446261815324 * temperature
    k = m * w * w
    x = rng.normal(0, math.sqrt(kt / k), (n_atoms, 3))
    v = rng.normal(0, math.sqrt(kt / m), (n_atoms, 3))
    nsave = n_steps // every + 1
    X = np.empty((nsave, n_atoms, 3))
    V = np.empty((nsave, n_atoms, 3))
    heat = np.zeros(nsave)
    q = 0.0
    X[0], V[0] = x, v
    c1 = math.exp(-gamma * dt) if gamma else 1.0
    c2 = math.sqrt((1 - c1 * c1) * kt / m) if gamma else 0.0
    j = 1
    for s in range(1, n_steps + 1):
        v = v - 0.5 * dt * k / m * x
        x = x + 0.5 * dt * v
        if gamma:
            k_before = 0.5 * m * np.sum(v * v)
            v = c1 * v + c2 * rng.normal(size=v.shape)
            q += k_before - 0.5 * m * np.sum(v * v)
        x = x + 0.5 * dt * v
        v = v - 0.5 * dt * k / m * x
        if s % every == 0:
            X[j], V[j], heat[j] = x, v, q
            j += 1
    t = np.arange(nsave) * dt * every
    kin = 0.5 * m * np.einsum("fai,fai->f", V, V)
    pot = 0.5 * k * np.einsum("fai,fai->f", X, X)
    return t, X, V, kin, pot, heat


def _trap_run(gamma=None, *, temperature_col=None, **kw):
    from phasewake.core.readers.memory import run_from_arrays

    t, X, V, kin, pot, heat = harmonic_traps(gamma=gamma, **kw)
    cols = {"kinetic_energy": Series("kinetic_energy", kin, "kJ/mol", "kinetic"),
            "potential_energy": Series("potential_energy", pot, "kJ/mol", "potential")}
    if gamma:
        cols["bath_heat"] = Series("bath_heat", heat, "kJ/mol", "bath_heat")
    if temperature_col is not None:
        cols["temperature"] = Series("temperature", temperature_col(kin), "K", "temperature")
    table = EnergyTable(time_ps=t, series=cols)
    md = RunMetadata(timestep_ps=kw.get("dt", 0.002), ensemble="NVT" if gamma else "NVE",
                     thermostat="langevin" if gamma else "none", temperature_K=300.0 if gamma else None,
                     com_motion_removed=False, n_constraints=0)
    n = X.shape[1]
    return run_from_arrays(X, t, np.full(n, kw.get("m", 12.0)), velocities_nm_per_ps=V, energies=table,
                           metadata=md, name="traps")


def test_audit_nve_traps_against_analytic_values():
    from phasewake.core.analyses.audit import audit_run

    dt, w = 0.002, 150.0
    n = 64
    # file temperature written with 3N - 3 degrees of freedom: the audit must find that count
    run = _trap_run(dt=dt, w=w, n_atoms=n,
                    temperature_col=lambda k: 2 * k / ((3 * n - 3) * 0.00831446261815324))
    seen = []
    with chunking(frames=500):
        res = drive(audit_run(run), seen.append)
    assert seen and all(isinstance(p, Progress) for p in seen)
    fl = res.energy.fluctuations
    # independent identical VV oscillators: E = H~ - K a/(1 - a) with a = (w dt)^2/4 (Tuckerman 2010
    # eq. 3.13.3), so R = a/(1 - a) exactly, also for a sum of oscillators of one frequency
    a = (w * dt) ** 2 / 4
    assert fl.ratio == pytest.approx(a / (1 - a), rel=0.02)
    # fastest motion = w / 2 pi (analytic), within one spectral bin
    fm = res.timestep.fastest
    assert abs(fm.frequency_per_ps - w / (2 * math.pi)) <= fm.resolution_per_ps
    assert res.timestep.check.steps_per_period == pytest.approx(2 * math.pi / w / dt, rel=0.05)
    # no COM removal (metadata), no constraints: N_dof = 3N
    assert res.temperature.n_dof == 3 * n
    assert res.temperature.implied_file_dof == pytest.approx(3 * n - 3, rel=1e-9)
    by_kind = {v.kind: v for v in res.verdicts}
    # R = 0.0225: between 0.01 (good) and 0.05 (acceptable), common practice; 20.9 steps per period is a
    # step the period/10 rule accepts, so not flagged (a flexible X-H run at 0.5 fs gives about the same R)
    assert by_kind["energy.fluctuation_ratio"].level == "ok"
    assert by_kind["timestep.fastest_period"].level == "ok"  # 20.9 steps per period
    assert by_kind["temperature.file_mismatch"].level in ("caution", "problem")  # 1 / 191 = 0.5 %
    assert by_kind["temperature.kinetic_distribution"].level == "info"  # NVE: skipped with a reason
    assert "NVE" in by_kind["temperature.kinetic_distribution"].message
    assert by_kind["energy.drift"].level == "ok"


@pytest.mark.slow  # measured 0.6 s of CPU
def test_audit_langevin_traps_conserved_quantity_and_canonical_checks():
    from phasewake.core.analyses.audit import audit_run

    run = _trap_run(gamma=5.0, n_atoms=100, n_steps=20000, every=10, w=60.0, seed=1)
    res = drive(audit_run(run))
    assert "bath heat" in res.energy.series_label
    by_kind = {v.kind: v for v in res.verdicts}
    # BAOAB with heat bookkeeping: total + heat removed is conserved up to integration error
    assert res.energy.expected_conserved and by_kind["energy.drift"].level == "ok"
    # canonical: K ~ Gamma(N_dof/2, kT) and speeds ~ Maxwell (scipy.stats), N_com = 0 for Langevin
    assert res.temperature.n_com_removed == 0
    assert res.temperature.kinetic_distribution is not None
    assert res.temperature.kinetic_distribution.p_value > 0.001
    assert res.temperature.maxwell and res.temperature.maxwell[0].p_value > 0.001
    assert res.temperature.mean_K == pytest.approx(300.0, abs=4 * res.temperature.error_K + 1.0)


def test_audit_without_energies_or_velocities_is_an_error():
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.readers.memory import run_from_arrays

    run = run_from_arrays(np.zeros((1, 2, 3)), np.arange(1.0), np.ones(2))
    # was: MissingDataError "nothing to audit". One frame, no velocities, no energies: the run was read, so
    # the audit says that nothing could be checked (the command exits 1 and says so) instead of refusing
    res = drive(audit_run(run))
    assert not res.checked and res.overall == "not checked"
    assert any("Nothing to audit" in n for n in res.notes)
    t = np.arange(5.0)
    table = EnergyTable(time_ps=t, series={"total": Series("total", np.ones(5), "kJ/mol", "total")})
    run2 = run_from_arrays(np.zeros((5, 2, 3)), t, np.ones(2), energies=table)
    with pytest.raises(MissingDataError, match="velocities are missing"):
        drive(audit_run(run2, require_temperature=True))


def test_windowed_g_for_long_series_matches_ar1():
    # Long series are estimated on evenly spaced stretches; AR(1) phi = 0.5: g = 3 (REFERENCES.md §3.7),
    # +-7 % at 1e5 samples (REFERENCES.md §3.2 tolerance).
    rng = np.random.default_rng(8)
    x = _ar1(rng, 1, 1 << 18, 0.5)[0]
    g, method = en.statistical_inefficiency_of(x, window_above=1 << 16, n_windows=4, window=1 << 15)
    assert "stretches" in method
    assert g == pytest.approx(3.0, rel=0.07)
    # a slowly correlated series (g ~ 2000 > window / 50) falls back to the whole series
    y = _ar1(rng, 1, 1 << 18, 0.999)[0]
    _, method_y = en.statistical_inefficiency_of(y, window_above=1 << 16, n_windows=4, window=1 << 15)
    assert "stretches" not in method_y


def test_audit_compares_velocity_temperature_with_file_when_no_kinetic_column():
    # The file holds only total energy and a temperature written with 3N - 3 degrees of freedom; the
    # audit computes K = sum m v^2 / 2 from the velocities (frames matched to rows by time) and finds
    # the N_dof the file used (3N - 3 = 189 for 64 atoms), as the definition T = 2K/(N_dof k_B) implies.
    from phasewake.core.analyses.audit import audit_run
    from phasewake.core.readers.memory import run_from_arrays

    t, X, V, kin, pot, _ = harmonic_traps(n_atoms=64, n_steps=2000, every=2, w=50.0, seed=3)
    table = EnergyTable(time_ps=t[::2], series={
        "total": Series("total", (kin + pot)[::2], "kJ/mol", "total"),
        "temperature": Series("temperature", (2 * kin / (189 * 0.00831446261815324))[::2], "K", "temperature")})
    md = RunMetadata(timestep_ps=0.002, ensemble="NVE", com_motion_removed=False, n_constraints=0)
    run = run_from_arrays(X, t, np.full(64, 12.0), velocities_nm_per_ps=V, energies=table, metadata=md)
    res = drive(audit_run(run))
    assert res.temperature.kinetic_source.startswith("velocities")
    assert res.temperature.implied_file_dof == pytest.approx(189, rel=1e-6)
    assert res.energy.kinetic_source.startswith("velocities")  # sigma_K from velocities on matched rows
    assert res.energy.fluctuations.ratio is not None
