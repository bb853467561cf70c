"""What a run holds, as a plain dict (every number with its unit): for `phasewake describe`, the window
and the demo. Reads headers only, never frames."""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.model.run import Run


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
        "virtual_sites": int(run.virtual_sites.size),
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
        "barostat": md.barostat,
        "pressure_bar": md.pressure_bar,
        "integrator": md.integrator,
        "velocities_half_step": md.velocities_half_step,
        "constraints": md.constraints,
        "n_constraints": md.n_constraints,
        "constraints_source": md.constraints_source,
        "n_dof": md.n_dof,
        "com_motion_removed": md.com_motion_removed,
        "conserved_quantity": md.conserved_quantity,
        "units_style": md.units_style,
        "engine": md.engine,
    }
    out["metadata"] = {k: v for k, v in meta.items() if v is not None}
    out["sources"] = dict(md.sources)
    # the frames' clock when it is not ps: step numbers or frame numbers (no time step known), lj tau
    time_from = str(md.extra.get("time_from", ""))
    out["frame_time_unit"] = ("steps" if time_from == "step number" else "frames" if time_from == "frame index"
                              else "tau" if (md.units_style or "").endswith(" lj") else "ps")
    # a run joined from parts (core/readers/parts.py): each part, overlaps and gaps with their times
    out["parts"] = list(md.extra.get("parts", []))
    out["overlaps"] = list(md.extra.get("overlaps", []))
    out["gaps"] = list(md.extra.get("gaps", []))
    out["run_facts"] = run_facts(run)
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
        tu = d.get("frame_time_unit", "ps")  # "steps" / "frames" when the files give no time, "tau" for lj
        lines.append(f"time: {num(d['time_start_ps'], tu)} to {num(d['time_end_ps'], tu)} "
                     f"(span {num(d['time_span_ps'], tu)})")
        lines.append(f"frame spacing: {num(d['frame_spacing_ps'], tu)}")
        lines.append("positions: stored")
        lines.append(f"velocities: {d['velocities']}")
        lines.append(f"box: {'periodic' if d['box'] != 'none' else 'none'}")
        lines.append(f"masses: {num(d['total_mass_amu'], 'amu in total') if d['masses_known'] else 'unknown'}"
                     + (f"; {d['virtual_sites']} massless virtual sites" if d.get("virtual_sites") else ""))
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
    if d.get("run_facts"):
        lines.append("how the run was made:")
        for f in d["run_facts"]:
            lines.append(f"  {f['text']} {f['where']}")
    elif d["metadata"]:
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


def _where(src: str | None) -> str:
    if not src:
        return "(from the run file's own metadata)"
    if src == "user" or src.startswith("user "):
        return "stated"
    if src.startswith("stated"):
        return src
    if src.startswith("inferred") or src.startswith("LAMMPS default"):
        return f"({src})"
    return f"from {src}"


def run_facts(run: Run) -> list[dict[str, Any]]:
    """Each known fact of how the run was made, as a line of text and where it came from:
    {"field", "text", "where"}; "where" is "from md.log", "stated" (the user said so), ..."""
    md = run.metadata
    src = md.sources
    out: list[dict[str, Any]] = []

    def add(field: str, text: str, where: str | None = None) -> None:
        out.append({"field": field, "text": text, "where": where if where is not None else _where(src.get(field))})

    if md.engine:
        add("engine", f"engine: {md.engine}")
    if md.units_style:
        add("units_style", f"unit style: {md.units_style}")
    if md.timestep_ps is not None and (md.units_style or "").endswith(" lj"):
        add("timestep_ps", f"time step {md.timestep_ps:g} τ (lj reduced units)")
    elif md.timestep_ps is not None:
        add("timestep_ps", f"time step {md.timestep_ps * 1e3:g} fs")
    if md.integrator:
        half = {True: " (velocities half a step off the positions)", False: " (full-step velocities)",
                None: ""}[md.velocities_half_step]
        add("integrator", f"integrator {md.integrator}{half}")
    if md.ensemble:
        bits = []
        if md.thermostat and md.thermostat not in ("none", "no"):
            t = f"{md.thermostat} thermostat"
            if md.temperature_K is not None:
                t += f", {md.temperature_K:g} K"
            elif "target_temperature_lj" in md.extra:
                t += f", {md.extra['target_temperature_lj']:g} ε/k_B"
            bits.append(t)
        if md.barostat and md.barostat not in ("none", "no"):
            b = f"{md.barostat} barostat"
            if md.pressure_bar is not None:
                b += f", {md.pressure_bar:g} bar"
            bits.append(b)
        add("ensemble", f"ensemble {md.ensemble}" + (f" ({'; '.join(bits)})" if bits else ""))
    elif md.temperature_K is not None:
        add("temperature_K", f"target temperature {md.temperature_K:g} K")
    if md.constraints or md.n_constraints is not None:
        if md.constraints:
            text = f"constraints: {md.constraints}"
            if md.n_constraints is not None and str(md.n_constraints) not in md.constraints \
                    and not (md.n_constraints == 0 and md.constraints.startswith("none")):
                text += f", {md.n_constraints} in all"
        else:
            text = f"{md.n_constraints} constraints"
        add("constraints" if md.constraints else "n_constraints", text,
            _where(src.get("constraints") or md.constraints_source or src.get("n_constraints")))
        if md.n_constraints is not None and md.constraints and src.get("n_constraints") and \
                src.get("n_constraints") != src.get("constraints"):
            out[-1]["where"] += f"; count {md.n_constraints} {_where(src.get('n_constraints'))}"
    if md.n_dof is not None:
        add("n_dof", f"degrees of freedom (the engine's count) {md.n_dof}")
    if md.com_motion_removed is not None:
        add("com_motion_removed", "centre-of-mass motion " + ("removed" if md.com_motion_removed else "not removed"))
    if md.conserved_quantity:
        add("conserved_quantity", f"conserved quantity '{md.conserved_quantity}'")
    for line in md.extra.get("engine_drift") or ():
        span = f" over {line['from_ps']:g}-{line['to_ps']:g} ps" if "from_ps" in line else ""
        add("engine_drift", f"the engine's own drift {line['kJ_mol_ps_atom']:g} kJ/mol/ps per atom{span}",
            f"from {line.get('source', 'its log')}")
    tol = md.extra.get("drift_tolerance")
    if tol:
        add("drift_tolerance", f"drift target of its pair-list buffer {tol['kJ_mol_ps_atom']:g} kJ/mol/ps per atom",
            f"from {tol.get('source', 'its parameters')}")
    cell = md.extra.get("cell")
    if cell:
        a, b, c = cell["lengths_nm"]
        add("cell", f"cell {a:.5g} x {b:.5g} x {c:.5g} nm" + ("" if cell.get("fixed") else " (at the start; it changes)"),
            f"from {cell.get('source', 'the output')}")
    return out
