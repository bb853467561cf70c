"""CP2K ``PROJECT-1.ener``: one row per MD step (checked on CP2K 2023.1 Fist output).

Header ``#     Step Nr.          Time[fs]        Kin.[a.u.]          Temp[K]            Pot.[a.u.]
Cons Qty[a.u.]        UsedTime[s]``; energies in Hartree (converted with the CODATA Hartree
energy and N_A), time in fs. ``Cons Qty`` includes the thermostat's energy: it is the conserved quantity.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from pathlib import Path

from phasewake.core.errors import EnergyTableError
from phasewake.core.readers.engine_common import (
    EngineEnergy,
    SeriesBuilder,
    finish_table,
    first_number,
    head_text,
    numbers,
)

# header names -> (our name, role, unit)
_COLUMNS = {"Step Nr.": ("Step", "step", ""), "Time[fs]": ("Time", "time", "fs"),
            "Kin.[a.u.]": ("Kin.", "kinetic", "Eh"), "Temp[K]": ("Temp", "temperature", "K"),
            "Pot.[a.u.]": ("Pot.", "potential", "Eh"), "Cons Qty[a.u.]": ("Cons Qty", "conserved", "Eh"),
            "UsedTime[s]": ("UsedTime", "other", None)}


def claim(path: Path) -> bool:
    first = head_text(path, 512).split("\n", 1)[0]
    return first.startswith("#") and "Step Nr." in first and "Time[fs]" in first


def _header_names(line: str) -> list[str]:
    # names hold single spaces ("Step Nr.", "Cons Qty[a.u.]"); columns are 2+ spaces apart
    return [n for n in re.split(r"\s{2,}", line.lstrip("#").strip()) if n]


def read_ener(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
              units_style: str | None = None) -> EngineEnergy:
    path = Path(path)
    text = path.read_text(encoding="utf-8", errors="replace")
    first, _, body = text.partition("\n")
    names = _header_names(first)
    body = "\n".join(ln for ln in body.splitlines() if ln.strip() and not ln.lstrip().startswith("#"))
    flat = numbers(body)
    n_rows = body.count("\n") + 1 if body else 0
    if n_rows == 0:
        raise EnergyTableError("no rows after the header", path=path)
    if flat is None or flat.size != n_rows * len(names):
        raise EnergyTableError(f"rows do not all hold the {len(names)} numbers the header names", path=path)
    arr = flat.reshape(n_rows, len(names))
    warnings: list[str] = []
    roles = {v[0]: v[1] for v in _COLUMNS.values()}
    builder = SeriesBuilder(path, column_roles, roles)
    time = step = None
    for k, raw in enumerate(names):
        name, role, unit = _COLUMNS.get(raw, (raw, "other", None))
        if role == "time":
            time = arr[:, k] * 1e-3
        elif role == "step":
            step = arr[:, k]
        elif unit is not None:
            builder.add(name, arr[:, k], unit)
    if time is None:
        raise EnergyTableError("no Time[fs] column", path=path)
    facts: dict[str, object] = {"engine": "CP2K", "conserved_quantity": "Cons Qty"}
    fsrc = {"engine": path.name, "conserved_quantity": path.name}
    if step is not None and step.size >= 2 and step[1] != step[0]:
        facts["timestep_ps"] = float(f"{(time[1] - time[0]) / (step[1] - step[0]):.12g}")
        fsrc["timestep_ps"] = f"{path.name} (Step Nr. and Time[fs] columns)"
    table = finish_table(path, time, builder, warnings)
    out = output_beside(path)
    if out is not None:  # the main output beside it says how the run was made
        more = read_output(out)
        for key, val in more.facts.items():
            if key not in facts or key == "engine":  # the output names the version
                facts[key] = val
                fsrc[key] = f"{out.name} (beside {path.name})"
        extra = more.extra
    else:
        extra = {}
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings,
                        extra=extra)


# ---- the main output (stdout of cp2k): run parameters -----------------------------------------------------

def claim_output(path: Path) -> bool:
    head = head_text(path, 65536)
    return "CP2K|" in head and ("PROGRAM STARTED" in head or "CP2K| version" in head)


def _field(lines: list[str], prefix: str) -> str | None:
    for ln in lines:
        if ln.startswith(prefix):
            return ln[len(prefix):].strip()
    return None


def read_output(path: Path, **_: object) -> EngineEnergy:
    """Run facts from a CP2K main output: ``MD_PAR| Ensemble type``, ``Time step [fs]``, ``Temperature
    [K]``, ``DOF| Degrees of freedom`` (3N - constraints - invariants), ``THERMOSTAT| Type of thermostat``
    (checked on CP2K 2023.1)."""
    path = Path(path)
    lines = [ln.strip() for ln in path.read_text(encoding="utf-8", errors="replace").splitlines()]
    facts: dict[str, object] = {"integrator": "velocity Verlet", "velocities_half_step": False}
    version = _field(lines, "CP2K| version string:")
    facts["engine"] = version.replace("CP2K version", "CP2K").strip() if version else "CP2K"
    ens = _field(lines, "MD_PAR| Ensemble type")
    if ens:
        facts["ensemble"] = ens.split("_")[0].upper()
        thermo = _field(lines, "THERMOSTAT| Type of thermostat")
        facts["thermostat"] = thermo.lower() if thermo and ens.upper().startswith(("NVT", "NPT")) else "none"
        if facts["thermostat"] != "none":
            t = first_number(_field(lines, "MD_PAR| Temperature [K]") or "")
            if t is not None:
                facts["temperature_K"] = t
        facts["barostat"] = "cp2k barostat" if ens.upper().startswith(("NPT", "NPE")) else "none"
    dt = first_number(_field(lines, "MD_PAR| Time step [fs]") or "")
    if dt is not None:
        facts["timestep_ps"] = dt * 1e-3
    dof = first_number(_field(lines, "DOF| Degrees of freedom") or "")
    if dof is not None:
        facts["n_dof"] = int(dof)
    intra = first_number(_field(lines, "DOF| Number of intramolecular constraints") or "")
    inter = first_number(_field(lines, "DOF| Number of intermolecular constraints") or "")
    if intra is not None and inter is not None:
        facts["n_constraints"] = int(intra + inter)
        facts["constraints"] = "none" if intra + inter == 0 else f"{int(intra + inter)} constraints"
    inv = first_number(_field(lines, "DOF| Invariants (translations + rotations)") or "")
    if inv is not None:
        facts["com_motion_removed"] = inv >= 3
    return EngineEnergy(table=None, facts=facts, source=path.name,
                        fact_sources={k: f"{path.name} (MD_PAR, DOF, THERMOSTAT lines)" for k in facts},
                        extra=_cell(lines, path, str(facts.get("ensemble", ""))))


def _cell(lines: list[str], path: Path, ensemble: str) -> dict[str, object]:
    """The periodic cell from ``MD_INI| Cell lengths [ang]`` and ``Cell angles [deg]`` (CP2K's positions
    xyz holds none), as ``extra["cell"]``: lengths in nm, angles in degrees, where from, and whether it
    stays fixed (not under a barostat: NPT and NPE change it, and only the first cell is printed here)."""
    lengths = _field(lines, "MD_INI| Cell lengths [ang]")
    angles = _field(lines, "MD_INI| Cell angles [deg]")
    if lengths is None:
        return {}
    try:
        abc = [float(x) * 0.1 for x in lengths.split()[:3]]
        ang = [float(x) for x in angles.split()[:3]] if angles else [90.0, 90.0, 90.0]
    except ValueError:
        return {}
    if len(abc) != 3 or len(ang) != 3 or min(abc) <= 0:
        return {}
    return {"cell": {"lengths_nm": abc, "angles_deg": ang, "source": f"{path.name} (MD_INI| Cell lengths, angles)",
                     "fixed": not ensemble.upper().startswith(("NPT", "NPE"))}}


def output_beside(ener: Path) -> Path | None:
    """The main output in the same folder that names this .ener file (its MD_PAR| Energies line)."""
    for cand in sorted(ener.parent.iterdir()):
        if cand.suffix.lower() in (".out", ".log") and cand.is_file() and claim_output(cand):
            try:
                if ener.name in cand.read_text(encoding="utf-8", errors="replace"):
                    return cand
            except OSError:
                continue
    return None
