"""AMBER ``mdout`` (sander, pmemd): the NSTEP energy records and the run parameters.

Laid out from public mdout excerpts and the sander source (AMBER was not run to make them). AMBER works in
Å, ps, kcal/mol, K, bar.

- Records: `` NSTEP = 500  TIME(PS) = 1021.000  TEMP(K) = 302.32  PRESS = 0.0`` then rows of up to three
  ``NAME = value`` pairs (names may hold spaces: ``1-4 NB``), ended by a dashed line. Split on ``=``.
- The same layout repeats under ``A V E R A G E S   O V E R`` and ``R M S  F L U C T U A T I O N S``:
  those records are left out. NSTEP restarts per segment while TIME(PS) continues: time is TIME(PS).
- Parameters: the ``2.  CONTROL  DATA  FOR  THE  RUN`` section's ``name = value,`` groups (dt, ntt,
  temp0, ntc, ntf, ntb, ntp, pres0, barostat) and ``TOTAL # of degrees of freedom (RNDF) =``.
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
    head_text,
)

ROLES = {"Etot": "total", "EKtot": "kinetic", "EPtot": "potential", "TEMP(K)": "temperature",
         "PRESS": "pressure", "VOLUME": "volume", "Density": "density"}
_UNITS = {"TEMP(K)": "K", "PRESS": "bar", "VOLUME": "Å^3", "Density": "g/cm^3", "TIME(PS)": "ps"}
_NOT_ENERGY = {"NSTEP", "TIME(PS)", "TEMP(K)", "PRESS", "VOLUME", "Density", "SURFTEN"}


def claim(path: Path) -> bool:
    head = head_text(path, 16384)
    if re.search(r"Amber \d+\s+(SANDER|PMEMD)", head, re.I):
        return True
    return "&cntrl" in head and ("SANDER" in head.upper() or "PMEMD" in head.upper())


def _pairs(line: str) -> list[tuple[str, str]]:
    """``A = 1.0  B C = 2.0`` -> [(A, 1.0), (B C, 2.0)]."""
    parts = line.split("=")
    if len(parts) < 2:
        return []
    out: list[tuple[str, str]] = []
    name = parts[0].strip()
    for mid in parts[1:-1]:
        toks = mid.split(None, 1)
        if len(toks) < 2:
            return out
        out.append((name, toks[0]))
        name = toks[1].strip()
    last = parts[-1].split()
    if last:
        out.append((name, last[0]))
    return out


def _value(text: str) -> float:
    try:
        return float(text.rstrip(","))
    except ValueError:
        return float("nan")  # '*****': a value too wide for its field


def read_mdout(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
               units_style: str | None = None) -> EngineEnergy:
    """The MD records of an mdout (without averages and fluctuations) and the run's parameters."""
    path = Path(path)
    lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
    warnings: list[str] = []
    records: list[dict[str, float]] = []
    skip_next = False
    i, n = 0, len(lines)
    while i < n:
        ln = lines[i]
        if "A V E R A G E S" in ln or "F L U C T U A T I O N S" in ln:
            skip_next = True
        if ln.lstrip().startswith("NSTEP ="):
            rec: dict[str, float] = {}
            j = i
            while j < n and lines[j].strip() and not lines[j].lstrip().startswith("---"):
                if "Ewald error" not in lines[j]:
                    for name, val in _pairs(lines[j]):
                        rec[name] = _value(val)
                j += 1
            if skip_next:
                skip_next = False
            else:
                records.append(rec)
            i = j
            continue
        i += 1
    if not records:
        raise EnergyTableError("no NSTEP energy record in this AMBER output (a minimisation, or not an mdout?)",
                               path=path)
    names = [k for k in records[0] if all(k in r for r in records)]
    missing = sorted({k for r in records for k in r} - set(names))
    if missing:
        warnings.append(f"{path.name}: term(s) {', '.join(missing)} are not in every record; left out")
    if "TIME(PS)" not in names:
        raise EnergyTableError("the energy records have no TIME(PS)", path=path)
    arr = np.array([[r[k] for k in names] for r in records], dtype=np.float64)
    builder = SeriesBuilder(path, column_roles, ROLES)
    for k, name in enumerate(names):
        if name in ("NSTEP", "TIME(PS)"):
            continue
        builder.add(name, arr[:, k], _UNITS.get(name, "kcal/mol"))
    table = finish_table(path, arr[:, names.index("TIME(PS)")], builder, warnings)
    facts, fsrc = _facts(lines, path)
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings)


_THERMOSTATS = {0: "none", 1: "berendsen", 2: "andersen", 3: "langevin", 9: "isokinetic (OIN)",
                10: "stochastic isokinetic (SIN)", 11: "bussi (stochastic rescaling)"}


def _facts(lines: list[str], path: Path) -> tuple[dict[str, Any], dict[str, str]]:
    params: dict[str, float] = {}
    start = next((k for k, ln in enumerate(lines) if "CONTROL  DATA  FOR  THE  RUN" in ln), None)
    section = lines[start:] if start is not None else lines
    for ln in section:
        if start is not None and ("3.  ATOMIC" in ln or "4.  RESULTS" in ln):
            break
        for m in re.finditer(r"\b([A-Za-z_]\w*)\s*=\s*([-+]?\d+\.?\d*(?:[eEdD][-+]?\d+)?)", ln):
            params.setdefault(m.group(1).lower(), float(m.group(2).replace("D", "e").replace("d", "e")))
    text = "\n".join(section)
    if "ntt" not in params:  # the section is named by ntt; the echoed &cntrl has it too
        for title, code in (("Berendsen (weak-coupling) temperature regulation", 1), ("Anderson", 2),
                            ("Langevin dynamics temperature regulation", 3)):
            if title in text:
                params["ntt"] = code
                break
        else:
            mt = re.search(r"\bntt\s*=\s*(\d+)", "\n".join(lines[:start] if start else lines), re.I)
            if mt:
                params["ntt"] = float(mt.group(1))
    if "Monte-Carlo Barostat" in text:
        params.setdefault("barostat", 2)
    facts: dict[str, Any] = {"engine": "AMBER", "integrator": "leap-frog", "velocities_half_step": True}
    where = f"{path.name} (control data)"
    fsrc: dict[str, str] = {}
    if "dt" in params:
        facts["timestep_ps"] = params["dt"]
    imin = int(params.get("imin", 0))
    if imin == 0:
        ntt = int(params.get("ntt", 0))
        thermostat = _THERMOSTATS.get(ntt, f"ntt={ntt}")
        ntp = int(params.get("ntp", 0))
        ntb = int(params.get("ntb", 2 if ntp > 0 else 1))
        barostat = "none"
        if ntp > 0 or ntb == 2:
            barostat = {1: "berendsen", 2: "monte-carlo"}.get(int(params.get("barostat", 1)), "berendsen")
        facts.update(thermostat=thermostat, barostat=barostat, ensemble=ensemble_of(thermostat, barostat))
        if thermostat != "none" and "temp0" in params:
            facts["temperature_K"] = params["temp0"]
        if barostat != "none" and "pres0" in params:
            facts["pressure_bar"] = params["pres0"]
    ntc = int(params.get("ntc", 1))
    facts["constraints"] = {1: "none (ntc=1)", 2: "bonds to hydrogen, water rigid (SHAKE, ntc=2)",
                            3: "all bonds (SHAKE, ntc=3)"}.get(ntc, f"ntc={ntc}")
    for ln in lines:
        if "(RNDF)" in ln and "=" in ln:
            try:
                facts["n_dof"] = int(round(float(ln.split("=")[-1].split()[0])))
                fsrc["n_dof"] = f"{path.name} (RNDF)"
            except (ValueError, IndexError):
                pass
            break
    for k in facts:
        fsrc.setdefault(k, where)
    fsrc["engine"] = path.name
    return facts, fsrc
