"""Which ensemble the audit judges a run in: from the files, else stated by the user, else inferred.

:func:`decide_ensemble` reads the run's metadata (an ``--ensemble`` or ``--temperature`` the user gave is
stored there with the source "user") and, when nothing is said, looks for the signature of a thermostat in
the energy table (:func:`thermostat_evidence_from_table`). The decision carries its evidence in words; the
audit shows it as the "Ensemble" line (:func:`ensemble_verdict`). A heuristic, as every verdict here
(:data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.verdicts import THRESHOLDS, Verdict
from phasewake.core.model.run import EnergyTable, Run

if TYPE_CHECKING:
    from phasewake.core.analyses.audit_results import EnergyAudit

THERMOSTATTED_ENSEMBLES = ("NVT", "NPT", "NPH_THERMOSTAT", "MUVT", "NST")


@dataclass(frozen=True)
class EnsembleDecision:
    """Which ensemble the audit judges the run in, and where that came from."""

    label: str  # "NVE", "NVT", "NPT", "thermostatted", "unknown"
    thermostatted: bool
    origin: str  # "files", "stated", "inferred", "unknown"
    source: str  # in words: "md.mdp", "you (--ensemble)", "inferred: sigma_E/sigma_K = 1.02, ..."
    evidence: dict[str, Any] = field(default_factory=dict)

    def words(self) -> str:
        return f"{self.label} ({self.source})"


_USER = ("user",)


def _is_user(src: str | None) -> bool:
    return (src or "").strip().lower().startswith(_USER)


def thermostat_evidence_from_table(table: EnergyTable | None) -> tuple[bool | None, str, dict[str, Any]]:
    """(thermostatted?, evidence in words, numbers) from the energy table alone; None when it cannot say.

    A bath-heat series, or a conserved quantity that differs from the total energy, means a thermostat.
    Otherwise, with steps of E and a line removed from E and K: sigma_E/sigma_K at or above the
    ``ensemble`` caution threshold with corr(K, U) above the ``ensemble.ku_correlation`` caution threshold
    (K and U not traded one for one) and no growing energy noise is the signature of a thermostat;
    sigma_E/sigma_K below the ``ensemble`` problem threshold or corr(K, U) below its problem threshold
    (U takes what K gives) is the signature of NVE.
    """
    if table is None or len(table) < 3:
        return None, "", {}

    def vals(role: str) -> np.ndarray | None:
        ser = table.by_role(role)
        if ser is None or ser.unit.replace(" ", "") not in ("kJ/mol", "kJmol-1", "kJ/mole"):
            return None
        return np.asarray(ser.values, dtype=np.float64)

    heat, con, tot = vals("bath_heat"), vals("conserved"), vals("total")
    pot, kin = vals("potential"), vals("kinetic")
    if tot is None and pot is not None and kin is not None:
        tot = pot + kin
    if heat is not None and np.any(np.isfinite(heat)) and float(np.nanmax(np.abs(heat))) > 0:
        return True, "a bath-heat series is present (energy exchanged with a thermostat)", {}
    if con is not None and tot is not None:
        d = con - tot
        ok = np.isfinite(d)
        scale = float(np.nanmax(np.abs(tot[ok]))) if ok.any() else 0.0
        if ok.sum() >= 3 and float(np.ptp(d[ok])) > 1e-6 * scale + 1e-3:
            return True, ("a conserved quantity differing from the total energy is present (a thermostat's "
                          "energy is in it)"), {"conserved_minus_total_range_kJ_per_mol": float(np.ptp(d[ok]))}
    if tot is None or kin is None:
        return None, "", {}
    t = np.asarray(table.time_ps, dtype=np.float64)
    ok = np.isfinite(tot) & np.isfinite(kin) & np.isfinite(t)
    if ok.sum() < 20:
        return None, "", {}
    stride = max(1, int(ok.size) // (1 << 18))  # the signatures need no more than ~260,000 rows
    tt, ee, kk = t[ok][::stride], tot[ok][::stride].copy(), kin[ok][::stride]
    # steps of E (restarts glued in, changed settings) would pass for fluctuations: take them out
    d = np.diff(ee)
    med = float(np.median(d))
    s_rob = 1.4826 * float(np.median(np.abs(d - med)))
    if s_rob > 0:
        steps = np.where(np.abs(d - med) > THRESHOLDS["energy.jumps"].caution * s_rob, d - med, 0.0)
        ee = ee - np.r_[0.0, np.cumsum(steps)]
    x = tt - tt.mean()

    def detrended(y: np.ndarray) -> np.ndarray:
        return y - np.polyval(np.polyfit(x, y, 1), x)

    re_, rk = detrended(ee), detrended(kk)
    ru = re_ - rk  # U = E - K
    s_e, s_k = float(re_.std()), float(rk.std())
    if not s_k > 0:
        return None, "", {}
    ratio = s_e / s_k
    corr = float(np.corrcoef(rk, ru)[0, 1]) if float(ru.std()) > 0 else -1.0
    dd = np.diff(ee)
    tenth = dd.size // 10
    growth = (float(np.sqrt(np.mean((dd[-tenth:] - dd.mean()) ** 2))
                    / max(float(np.sqrt(np.mean((dd[:tenth] - dd.mean()) ** 2))), 1e-300)) if tenth >= 2 else 1.0)
    nums = {"sigma_E_over_sigma_K": ratio, "kinetic_potential_correlation": corr, "noise_growth": growth}
    thr, cthr = THRESHOLDS["ensemble"], THRESHOLDS["ensemble.ku_correlation"]
    words = f"sigma_E/sigma_K = {ratio:.3g}, corr(K, U) = {corr:+.2f}"
    if ratio >= thr.caution and corr > cthr.caution and growth < THRESHOLDS["energy.runaway"].caution:
        return True, (f"{words}: E fluctuates like K and K and U are not traded one for one, the signature of "
                      "a thermostat"), nums
    if ratio < thr.problem or corr < cthr.problem:
        return False, f"{words}: U takes what K gives and E hardly moves, the signature of an NVE run", nums
    return None, f"{words}: neither signature is clear", nums


def decide_ensemble(run: Run, *, temperature_K: float | None = None) -> EnsembleDecision:
    """The ensemble the audit judges ``run`` in: from the files, else stated, else inferred.

    Stated: ``--ensemble`` (metadata source "user") or a thermostat temperature you gave (``temperature_K``
    here, or metadata ``temperature_K`` from "user"), which implies a thermostatted run. Inferred: from
    the energy table (:func:`thermostat_evidence_from_table`), with its evidence in ``source``.
    """
    md = run.metadata
    thermo = (md.thermostat or "").strip().lower()
    ens = (md.ensemble or "").strip().upper()
    src = md.sources

    def from_ens(origin: str, where: str) -> EnsembleDecision:
        return EnsembleDecision(ens, ens in THERMOSTATTED_ENSEMBLES, origin, where)

    if ens and _is_user(src.get("ensemble")):
        return from_ens("stated", "stated by you (--ensemble)")
    if thermo:
        where = src.get("thermostat") or "the files"
        origin = "stated" if _is_user(where) else "files"
        where = "stated by you" if origin == "stated" else f"from {where}"
        if thermo not in ("none", "no", "off"):
            return EnsembleDecision(ens or "thermostatted", True, origin, f"{where}: thermostat {md.thermostat}")
        return EnsembleDecision(ens or "NVE", ens in THERMOSTATTED_ENSEMBLES, origin, f"{where}: no thermostat")
    if ens:
        return from_ens("files", f"from {src.get('ensemble') or 'the files'}")
    if temperature_K is not None or (md.temperature_K is not None and _is_user(src.get("temperature_K"))):
        t_user = temperature_K if temperature_K is not None else md.temperature_K
        return EnsembleDecision("thermostatted", True, "stated",
                                f"implied by the thermostat temperature you gave ({t_user:g} K)")
    verdict, why, nums = thermostat_evidence_from_table(run.energies)
    if verdict is True:
        return EnsembleDecision("thermostatted", True, "inferred", f"inferred: {why}", nums)
    if verdict is False:
        return EnsembleDecision("NVE", False, "inferred", f"inferred: {why}", nums)
    return EnsembleDecision("unknown", False, "unknown",
                            "not stated in the files" + (f" ({why})" if why else "")
                            + "; judged as NVE (state it with --ensemble)", nums)


def is_thermostatted(run: Run, temperature_K: float | None = None) -> tuple[bool, str]:
    d = decide_ensemble(run, temperature_K=temperature_K)
    return d.thermostatted, d.label


def ensemble_verdict(decision: EnsembleDecision, ea: EnergyAudit | None) -> Verdict:
    """The ensemble the run is judged in and where it came from (information, not a verdict)."""
    msg = f"{decision.label}: {decision.source}"
    if decision.thermostatted:
        if ea is not None and ea.expected_conserved:
            msg += f"; conservation is judged on the {ea.series_label}"
        else:
            msg += ("; conservation is not judged on the total energy (a thermostat exchanges energy with the "
                    "run): it needs the thermostat's energy or the engine's conserved quantity")
    elif decision.origin in ("inferred", "unknown"):
        msg += "; conservation is judged on the total energy"
    return Verdict("ensemble", "info", "Ensemble", None, "", msg,
                   details={"origin": decision.origin, "thermostatted": decision.thermostatted,
                            **decision.evidence})
