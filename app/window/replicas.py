"""Which open runs are replicas of the current one (the Sampling panel pools them for R-hat across runs).

A replica is the same atoms (count, masses, names and elements where both have a topology) run the same
way (ensemble, thermostat, its temperature and the time step, where the files or the user say). Runs that
differ are left out with the reason, which the panel shows.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.model.run import Run


def replica_difference(run: Run, other: Run) -> str:
    """Why ``other`` is not a replica of ``run`` ('' when it is one): the same atoms (count, masses, names
    and elements where both have a topology) run the same way (ensemble, thermostat, its temperature and
    the time step, where the files or the user say)."""
    if other.frames is None:
        return "no frames"
    if other.n_atoms != run.n_atoms:
        return f"{other.n_atoms} atoms, not {run.n_atoms}"
    if not np.allclose(np.asarray(other.masses_amu, float), np.asarray(run.masses_amu, float), rtol=1e-4,
                       equal_nan=True):
        return "other atom masses"
    if run.topology is not None and other.topology is not None:
        def atoms(top: Any) -> list[tuple[str, str]]:
            return [(a.name, a.element.symbol if a.element is not None else "") for a in top.atoms]
        if atoms(run.topology) != atoms(other.topology):
            return "other atom names or elements"
    a, b = run.metadata, other.metadata

    def norm(v: Any) -> str:
        return str(v or "").strip().lower()

    if norm(a.ensemble) != norm(b.ensemble):
        return f"ensemble {b.ensemble or 'unknown'}, not {a.ensemble or 'unknown'}"
    if norm(a.thermostat) != norm(b.thermostat):
        return f"thermostat {b.thermostat or 'unknown'}, not {a.thermostat or 'unknown'}"
    if (a.temperature_K is None) != (b.temperature_K is None) or (
            a.temperature_K is not None and abs(float(a.temperature_K) - float(b.temperature_K)) > 1e-6):
        def kelvin(v: float | None) -> str:
            return "not stated" if v is None else f"{v:.4g} K"
        return f"target temperature {kelvin(b.temperature_K)}, not {kelvin(a.temperature_K)}"
    if (a.timestep_ps is None) != (b.timestep_ps is None) or (
            a.timestep_ps is not None and abs(float(a.timestep_ps) - float(b.timestep_ps)) > 1e-9 * max(1.0, a.timestep_ps)):
        def fs(v: float | None) -> str:
            return "unknown" if v is None else f"{v * 1e3:.4g} fs"
        return f"time step {fs(b.timestep_ps)}, not {fs(a.timestep_ps)}"
    return ""


def replicas_of(run: Run, others: tuple[Run, ...]) -> tuple[list[Run], list[tuple[str, str]]]:
    """The runs of ``others`` that are replicas of ``run``, and (name, why not) for the rest."""
    pooled: list[Run] = []
    skipped: list[tuple[str, str]] = []
    for o in others:
        why = replica_difference(run, o)
        if why:
            skipped.append((o.name, why))
        else:
            pooled.append(o)
    return pooled, skipped
