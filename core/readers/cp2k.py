"""CP2K ``PROJECT-1.ener``: one row per MD step, as in ENGINES.md (checked on CP2K 2023.1 Fist output).

Header ``#     Step Nr.          Time[fs]        Kin.[a.u.]          Temp[K]            Pot.[a.u.]
Cons Qty[a.u.]        UsedTime[s]``; energies in Hartree (converted with scipy.constants' Hartree
energy and N_A), time in fs. ``Cons Qty`` includes the thermostat's energy: it is the conserved quantity.
"""

from __future__ import annotations

import re
import warnings as _warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from phasewake.core.errors import EnergyTableError
from phasewake.core.readers.engine_common import EngineEnergy, SeriesBuilder, finish_table, head_text

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
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        flat = np.fromstring(body, sep=" ")
    n_rows = body.count("\n") + 1 if body else 0
    if n_rows == 0:
        raise EnergyTableError("no rows after the header", path=path)
    if flat.size != n_rows * len(names):
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
        facts["timestep_ps"] = float((time[1] - time[0]) / (step[1] - step[0]))
        fsrc["timestep_ps"] = f"{path.name} (Step Nr. and Time[fs] columns)"
    table = finish_table(path, time, builder, warnings)
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings)
