"""Opening a run with what the user states about it, in the words a user states it (a time step in fs,
an ensemble, ``NAME=ROLE`` column roles): one road for the command line, the window and the Python API.

:func:`stated_options` turns the statements into :func:`phasewake.core.readers.open_run` keywords
(internal units); :func:`open_stated` opens the run with them and notes how, so worker processes open
the same run again (:mod:`phasewake.core.model.parallel`).
"""

from __future__ import annotations

import contextlib
import io
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from phasewake.core.errors import InputError
from phasewake.core.model.run import ENERGY_ROLES, Run

#: the ensembles a user may state (RunMetadata.ensemble holds them in capitals)
ENSEMBLES = ("nve", "nvt", "npt")


def column_roles(items: Iterable[str] | None, *, option: str = "--column") -> dict[str, str] | None:
    """``NAME=ROLE`` items as a mapping name -> role (None for none); InputError naming ``option`` (how the
    user gave them) for a malformed item or a role outside ``ENERGY_ROLES``."""
    if not items:
        return None
    roles: dict[str, str] = {}
    for item in items:
        name, sep, role = str(item).rpartition("=")
        name, role = name.strip(), role.strip().lower()
        if not sep or not name or role not in ENERGY_ROLES:
            raise InputError(f"{option} {item!r}: expected NAME=ROLE with ROLE one of {', '.join(ENERGY_ROLES)}")
        roles[name] = role
    return roles


def stated_options(*, timestep_fs: float | None = None, n_constraints: int | None = None,
                   temperature_K: float | None = None, ensemble: str | None = None, thermostat: str | None = None,
                   velocities: str | Path | None = None, column_roles: Mapping[str, str] | None = None,
                   units_style: str | None = None) -> dict[str, Any]:
    """:func:`~phasewake.core.readers.open_run` keywords for what the user states (None: not stated, the
    files decide). The time step is stated in fs and kept in ps; the ensemble is one of ``ENSEMBLES`` in
    any case (InputError otherwise)."""
    out: dict[str, Any] = {}
    if timestep_fs is not None:
        out["timestep_ps"] = timestep_fs * 1e-3
    if n_constraints is not None:
        out["n_constraints"] = n_constraints
    if temperature_K is not None:
        out["temperature_K"] = temperature_K
    if ensemble:
        if str(ensemble).lower() not in ENSEMBLES:
            raise InputError(f"ensemble={ensemble!r}: expected 'nve', 'nvt' or 'npt'")
        out["ensemble"] = str(ensemble).upper()
    if thermostat:
        out["thermostat"] = thermostat
    if velocities is not None:
        out["velocities"] = str(velocities)  # a file (open_run's own keyword, not metadata)
    if column_roles:
        out["column_roles"] = dict(column_roles)
    if units_style is not None:
        out["units_style"] = units_style
    return out


def stated_settings(run: Run) -> dict[str, Any]:
    """What the user stated when opening ``run`` (sources "user"), as the analyses' own settings
    (``n_constraints``, ``timestep_ps``, ``temperature_K``; None where the files decide): every front end
    hands these to the audit and the report, so the same run gives the same request and cache key."""
    meta = run.metadata
    user = {k for k, v in meta.sources.items() if v == "user"}
    return {"n_constraints": meta.n_constraints if "n_constraints" in user else None,
            "timestep_ps": meta.timestep_ps if "timestep_ps" in user else None,
            "temperature_K": meta.temperature_K if "temperature_K" in user else None}


def open_stated(files: Sequence[str | Path], *, topology: str | Path | None = None,
                options: Mapping[str, Any] | None = None) -> Run:
    """Open one run from ``files`` with ``options`` (:func:`stated_options`), keeping library chatter
    (mdtraj's DCD plugin prints) off stdout, and note how it was opened for worker processes."""
    from phasewake.core.model.ranges import RunFiles, remember_files
    from phasewake.core.readers import open_run

    opts = dict(options or {})
    with contextlib.redirect_stdout(io.StringIO()):
        run = open_run(list(files), topology=topology, **opts)
    again = RunFiles(paths=tuple(str(p) for p in files), topology=None if topology is None else str(topology),
                     options=opts)
    return remember_files(run, again)
