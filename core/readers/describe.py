"""What a run holds, as a plain dict (every number with its unit): for `phasewake describe`, the window
and the demo. Reads headers only, never frames."""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.run import Run


def describe(run: Run) -> dict[str, Any]:
    """Summary of a run.

    Returns
    -------
    dict with keys: name, files, n_atoms, n_frames, time_start_ps, time_end_ps, time_span_ps,
    frame_spacing_ps, positions, velocities ("stored" | "estimated" | "none"), box ("none" | "fixed" |
    "per frame"), energy_terms (list of {name, role, unit, n_values, source}), energy_rows, metadata
    (known fields, each with its unit in the key), sources, warnings.
    """
    t = run.time_ps
    frames = run.frames
    out: dict[str, Any] = {
        "name": run.name,
        "files": [str(p) for p in run.paths],
        "n_atoms": run.n_atoms if frames is not None else 0,
        "n_frames": run.n_frames if frames is not None else 0,
        "time_start_ps": float(t[0]) if t.size else None,
        "time_end_ps": float(t[-1]) if t.size else None,
        "time_span_ps": float(t[-1] - t[0]) if t.size else None,
        "frame_spacing_ps": run.frame_spacing_ps if frames is not None else None,
        "positions": frames is not None,
        "velocities": "none" if frames is None or not frames.has_velocities
        else ("estimated" if frames.velocities_estimated else "stored"),
        "box": "none" if frames is None or not frames.has_box else "yes",
        "masses_known": bool(run.masses_amu.size and np.all(np.isfinite(run.masses_amu))),
        "total_mass_amu": float(np.sum(run.masses_amu)) if run.masses_amu.size and np.all(np.isfinite(run.masses_amu)) else None,
        "topology": None if run.topology is None else {
            "n_atoms": run.topology.n_atoms, "n_residues": run.topology.n_residues,
            "n_chains": run.topology.n_chains, "n_bonds": run.topology.n_bonds,
        },
        "energy_terms": [],
        "energy_rows": 0 if run.energies is None else len(run.energies),
        "energy_time_span_ps": None,
    }
    if run.energies is not None and len(run.energies):
        et = run.energies.time_ps
        out["energy_time_span_ps"] = float(et[-1] - et[0])
        out["energy_terms"] = [
            {"name": s.name, "role": s.role, "unit": s.unit, "n_values": int(s.values.shape[0]), "source": s.source}
            for s in run.energies.series.values()
        ]
    md = run.metadata
    meta = {
        "timestep_ps": md.timestep_ps,
        "ensemble": md.ensemble,
        "thermostat": md.thermostat,
        "temperature_K": md.temperature_K,
        "n_constraints": md.n_constraints,
        "constraints_source": md.constraints_source,
        "com_motion_removed": md.com_motion_removed,
        "integrator": md.integrator,
    }
    out["metadata"] = {k: v for k, v in meta.items() if v is not None}
    out["sources"] = dict(md.sources)
    # a run joined from parts (core/readers/parts.py): each part, overlaps and gaps with their times
    out["parts"] = list(md.extra.get("parts", []))
    out["overlaps"] = list(md.extra.get("overlaps", []))
    out["gaps"] = list(md.extra.get("gaps", []))
    out["warnings"] = list(run.warnings)
    return out


def format_description(d: dict[str, Any]) -> str:
    """The summary as plain text lines (units written out)."""

    def num(v: float | None, unit: str) -> str:
        return "unknown" if v is None else f"{v:g} {unit}"

    lines = [f"run: {d['name']}"]
    lines.append("files: " + ", ".join(d["files"]))
    if d["positions"]:
        lines.append(f"atoms: {d['n_atoms']}")
        lines.append(f"frames: {d['n_frames']}")
        lines.append(f"time: {num(d['time_start_ps'], 'ps')} to {num(d['time_end_ps'], 'ps')} "
                     f"(span {num(d['time_span_ps'], 'ps')})")
        lines.append(f"frame spacing: {num(d['frame_spacing_ps'], 'ps')}")
        lines.append("positions: stored")
        lines.append(f"velocities: {d['velocities']}")
        lines.append(f"box: {'periodic' if d['box'] != 'none' else 'none'}")
        lines.append(f"masses: {num(d['total_mass_amu'], 'amu in total') if d['masses_known'] else 'unknown'}")
        if d["topology"]:
            tp = d["topology"]
            lines.append(f"topology: {tp['n_chains']} chains, {tp['n_residues']} residues, {tp['n_bonds']} bonds")
    else:
        lines.append("positions: none (energy table only)")
    if d["energy_terms"]:
        lines.append(f"energy terms ({d['energy_rows']} rows, span {num(d['energy_time_span_ps'], 'ps')}):")
        for s in d["energy_terms"]:
            unit = s["unit"] or "dimensionless"
            lines.append(f"  {s['name']} [{unit}] ({s['role']}) from {s['source']}")
    else:
        lines.append("energy terms: none")
    if d["metadata"]:
        lines.append("metadata:")
        for k, v in d["metadata"].items():
            lines.append(f"  {k}: {v}")
    if d.get("parts"):
        lines.append(f"parts ({len(d['parts'])}, joined in time order):")
        lines.extend(f"  {p}" for p in d["parts"])
    for key in ("overlaps", "gaps"):
        if d.get(key):
            lines.append(f"{key}:")
            lines.extend(f"  {x}" for x in d[key])
    if d["warnings"]:
        lines.append("warnings:")
        for w in d["warnings"]:
            lines.append(f"  - {w}")
    return "\n".join(lines)
