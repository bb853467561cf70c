"""The energy and parameter files of one run, each read by the registry entry that claimed it, joined
into one energy table."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

from phasewake.core.model.run import EnergyTable
from phasewake.core.readers.engine_common import EnergyOptions, EngineEnergy, join_parts
from phasewake.core.readers.tables import join_on_time

if TYPE_CHECKING:
    from phasewake.core.readers.registry import ReaderEntry


def read_energy_sources(
    items: Sequence[tuple[Path, ReaderEntry]], options: EnergyOptions,
) -> tuple[EnergyTable | None, list[EngineEnergy], list[str]]:
    """Read the energy and parameter files of one run.

    ``items`` are (path, the registry entry that claimed it). Parameter files are read first: a time step
    they give sets the time axis of tables that count steps. Returns (the joined energy table or None,
    the per-file results with the energy files first, warnings).
    """
    warnings: list[str] = []
    param_results: list[EngineEnergy] = []
    known_dt = options.known_timestep_ps
    for p, entry in (item for item in items if item[1].kind == "parameters"):
        res = entry.open(p, options)
        param_results.append(res)
        warnings.extend(res.warnings)
        if known_dt is None and res.facts.get("timestep_ps"):
            known_dt = res.facts["timestep_ps"]
    options = replace(options, known_timestep_ps=known_dt)
    names = {entry.name for _, entry in items}
    results: list[EngineEnergy] = []
    tabs: list[tuple[str, EnergyTable]] = []
    for p, entry in (item for item in items if item[1].kind != "parameters"):
        energies = not names.intersection(entry.parameters_only_beside)
        res = entry.open(p, options if energies else replace(options, energies=False))
        results.append(res)
        warnings.extend(res.warnings)
        if res.table is not None:
            tabs.append((entry.name, res.table))
    results += param_results  # after the energy files and logs: their resolved values come first
    if not tabs:
        return None, results, warnings
    # parts of one run (same reader, same terms, e.g. md.edr md.part0002.edr): joined in time order;
    # different files of the same time (an .edr and a CSV): joined on their shared times
    groups: dict[tuple[str, tuple[str, ...]], list[EnergyTable]] = {}
    for name, t in tabs:
        groups.setdefault((name, tuple(t.series)), []).append(t)
    joined = [join_parts(g, warnings) for g in groups.values()]
    out = joined[0]
    for nxt in joined[1:]:
        out = join_on_time(out, nxt, warnings)
    return out, results, warnings
