"""OpenMM StateDataReporter CSV: read by the generic table reader (``tables``); this module claims it by
its header (``#"Step","Time (ps)",...``) and adds what its Step and Time columns say: the time step
dt = (Time_2 - Time_1) / (Step_2 - Step_1) (checked on OpenMM 8.6.1 output)."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

from phasewake.core.readers.engine_common import EngineEnergy, head_text


def claim(path: Path) -> bool:
    first = head_text(path, 4096).split("\n", 1)[0]
    return first.startswith('#"') and '"Step"' in first and '"Time (ps)"' in first


def read_csv(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
             units_style: str | None = None) -> EngineEnergy:
    from phasewake.core.readers import tables

    path = Path(path)
    table, warnings = tables.read_table(path, column_roles=column_roles, timestep_ps=timestep_ps)
    facts: dict[str, object] = {"engine": "OpenMM"}
    fsrc: dict[str, str] = {"engine": f"{path.name} (StateDataReporter header)"}
    head = head_text(path, 65536).splitlines()
    header = head[0].lstrip("#")
    sep = "," if "," in header else ("\t" if "\t" in header else None)
    names = [n.strip().strip('"') for n in header.split(sep)]
    rows = [ln.split(sep) for ln in head[1:4] if ln.strip() and not ln.startswith("#")]
    try:
        i_s, i_t = names.index("Step"), names.index("Time (ps)")
        (s1, t1), (s2, t2) = [(float(r[i_s]), float(r[i_t])) for r in rows[:2]]
        if s2 > s1:
            facts["timestep_ps"] = float(f"{(t2 - t1) / (s2 - s1):.12g}")  # Time is printed with float noise
            fsrc["timestep_ps"] = f"{path.name} (Step and Time columns)"
    except (ValueError, IndexError):
        pass
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings)
