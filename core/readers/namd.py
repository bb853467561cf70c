"""NAMD logs: ``ETITLE:`` / ``ENERGY:`` lines and the ``Info:`` start-up lines.

Laid out from public NAMD logs and Controller.C (NAMD was not run to make them). NAMD works in Å, fs,
kcal/mol, K, bar. Each ``ENERGY:`` line is read with the columns of the latest ``ETITLE:``; ``TS`` is the
step, time = TS x the ``Info: TIMESTEP`` (fs). ``TOTAL3`` is a smoothed total, not a conserved quantity.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import EnergyTableError
from phasewake.core.readers.engine_common import (
    EngineEnergy,
    SeriesBuilder,
    ensemble_of,
    finish_table,
    first_number,
    head_text,
    numbers,
)

ROLES = {"TOTAL": "total", "KINETIC": "kinetic", "POTENTIAL": "potential", "TEMP": "temperature",
         "PRESSURE": "pressure", "VOLUME": "volume"}
_UNITS = {"TEMP": "K", "TEMPAVG": "K", "PRESSURE": "bar", "GPRESSURE": "bar", "PRESSAVG": "bar",
          "GPRESSAVG": "bar", "VOLUME": "Å^3", "DRUDECOM": "K", "DRUDEBOND": "K"}


def claim(path: Path) -> bool:
    head = head_text(path, 65536)
    return "Info: NAMD" in head or bool(re.search(r"^ETITLE:", head, re.M))


def read_log(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
             units_style: str | None = None) -> EngineEnergy:
    path = Path(path)
    lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    warnings: list[str] = []
    groups: list[tuple[list[str], list[str]]] = []  # (names, ENERGY lines with that ETITLE)
    names: list[str] | None = None
    info: list[str] = []
    for ln in lines:
        if ln.startswith("ETITLE:"):
            new = ln.split()[1:]
            if new != names:
                names = new
                groups.append((names, []))
        elif ln.startswith("ENERGY:"):
            if names is None:
                raise EnergyTableError("an ENERGY: line comes before any ETITLE: line", path=path)
            groups[-1][1].append(ln[7:])
        elif ln.startswith("Info:") or ln.startswith("TCL:"):
            info.append(ln)
    groups = [(nm, rows) for nm, rows in groups if rows]
    if not groups:
        raise EnergyTableError("no ENERGY: lines in this NAMD log", path=path)
    common = [c for c in groups[0][0] if all(c in g[0] for g in groups)]
    parts = []
    for nm, rows in groups:
        flat = numbers(" ".join(rows))
        if flat is None or flat.size != len(rows) * len(nm):
            raise EnergyTableError(f"ENERGY: lines do not match their ETITLE: ({len(nm)} columns)", path=path)
        arr = flat.reshape(len(rows), len(nm))
        parts.append(arr[:, [nm.index(c) for c in common]])
    vals = np.concatenate(parts)
    facts, fsrc = _facts(info, path)
    dt_ps = timestep_ps or facts.get("timestep_ps")
    if "TS" not in common:
        raise EnergyTableError("ETITLE: has no TS column", path=path)
    if dt_ps is None:
        raise EnergyTableError("the log has no 'Info: TIMESTEP' line; state the time step (--timestep)", path=path)
    time = vals[:, common.index("TS")] * float(dt_ps)
    builder = SeriesBuilder(path, column_roles, ROLES)
    for k, name in enumerate(common):
        if name == "TS":
            continue
        builder.add(name, vals[:, k], _UNITS.get(name, "kcal/mol"))
    table = finish_table(path, time, builder, warnings)
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings)


def _facts(info: list[str], path: Path) -> tuple[dict[str, Any], dict[str, str]]:
    d: dict[str, str] = {}
    for ln in info:
        body = ln.split(":", 1)[1].strip()
        key = re.split(r"\s{2,}|\s+(?=[-\d.])", body, maxsplit=1)[0].strip()
        d.setdefault(key, body[len(key):].strip())
    facts: dict[str, Any] = {"integrator": "velocity Verlet", "velocities_half_step": False}
    fsrc: dict[str, str] = {}
    src = f"{path.name} (Info lines)"
    eng = next((ln for ln in info if ln.startswith("Info: NAMD")), None)
    facts["engine"] = "NAMD " + eng.split()[2] if eng and len(eng.split()) > 2 else "NAMD"
    if "TIMESTEP" in d and first_number(d["TIMESTEP"]) is not None:
        facts["timestep_ps"] = first_number(d["TIMESTEP"]) * 1e-3  # type: ignore[operator]
    thermostat, temp = "none", None
    if "LANGEVIN DYNAMICS ACTIVE" in d:
        thermostat, temp = "langevin", first_number(d.get("LANGEVIN TEMPERATURE", ""))
    elif "TEMPERATURE COUPLING ACTIVE" in d:
        thermostat, temp = "berendsen", first_number(d.get("COUPLING TEMPERATURE", ""))
    elif "STOCHASTIC RESCALING ACTIVE" in d:
        thermostat, temp = "csvr (stochastic rescaling)", first_number(d.get("STOCHASTIC RESCALING TEMPERATURE", ""))
    elif "VELOCITY RESCALE FREQ" in d:
        thermostat, temp = "velocity rescaling", first_number(d.get("VELOCITY RESCALE TEMP", ""))
    elif "LOWE-ANDERSEN DYNAMICS ACTIVE" in d:
        thermostat, temp = "lowe-andersen", first_number(d.get("LOWE-ANDERSEN TEMPERATURE", ""))
    barostat, pres = "none", None
    if "LANGEVIN PISTON PRESSURE CONTROL ACTIVE" in d:
        barostat = "langevin piston"
    elif "BERENDSEN PRESSURE COUPLING ACTIVE" in d:
        barostat = "berendsen"
    for ln in info:
        m = re.search(r"TARGET PRESSURE IS\s+([-\d.eE+]+)\s*BAR", ln)
        if m:
            pres = float(m.group(1))
    facts.update(thermostat=thermostat, barostat=barostat, ensemble=ensemble_of(thermostat, barostat))
    if temp is not None and thermostat != "none":
        facts["temperature_K"] = temp
    if pres is not None and barostat != "none":
        facts["pressure_bar"] = pres
    rigid = next((ln for ln in info if "RIGID BONDS TO HYDROGEN" in ln), None)
    if rigid is not None:
        facts["constraints"] = "bonds to hydrogen" + (" and water" if "ALL" in rigid or "WATER" in rigid else "")
    elif any("RIGID WATER" in ln for ln in info):
        facts["constraints"] = "rigid water"
    for k in facts:
        fsrc[k] = src
    return facts, fsrc
