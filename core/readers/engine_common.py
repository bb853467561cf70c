"""What the engine energy readers share: their result, term -> role maps, unit conversion, claims.

Each engine reader (``gromacs``, ``lammps_log``, ``amber``, ``namd``, ``cp2k``, ``openmm_csv``) returns an
:class:`EngineEnergy`: an energy table in internal units (kJ/mol, K, bar, nm^3, g/cm^3, ps), the run
facts its file states (RunMetadata field -> value) and warnings. The registry (``registry.py``) tells each
what it needs to know of the run (:class:`EnergyOptions`); ``energy_files.py`` reads every energy or
parameter file of one run and joins the tables on time.
"""

from __future__ import annotations

import re
import warnings as _warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import EnergyTableError, UnitError
from phasewake.core.model.run import ENERGY_ROLES, EnergyTable, RunMetadata, Series, TimeJoin
from phasewake.core.units import parse_unit, split_header

# dimension a role's unit must have (the same rule as the generic tables)
ROLE_DIMENSION = {"time": "time", "potential": "energy", "kinetic": "energy", "total": "energy",
                  "conserved": "energy", "bath_heat": "energy", "temperature": "temperature",
                  "pressure": "pressure", "volume": "volume", "density": "density"}


@dataclass
class EngineEnergy:
    """What one engine file gives: energies (may be None for a parameter file), facts, warnings."""

    table: EnergyTable | None
    facts: dict[str, Any] = field(default_factory=dict)  # RunMetadata field -> value
    source: str = ""  # the file name the facts came from, as shown to the user
    fact_sources: dict[str, str] = field(default_factory=dict)  # field -> source when not ``source``
    warnings: list[str] = field(default_factory=list)
    extra: dict[str, Any] = field(default_factory=dict)  # RunMetadata.extra entries


def head_text(path: Path, n: int = 65536) -> str:
    """The first ``n`` bytes as text ('' for a binary file or one that cannot be read)."""
    try:
        with open(path, "rb") as f:
            head = f.read(n)
    except OSError:
        return ""
    if b"\x00" in head:
        return ""
    return head.decode("utf-8", errors="replace")


def role_overrides(column_roles: Mapping[str, str] | None) -> dict[str, tuple[str, str | None]]:
    """``--column NAME=ROLE`` as name -> (role, unit stated with the role or None), keyed by the name
    and by the name without its unit."""
    out: dict[str, tuple[str, str | None]] = {}
    for key, given in (column_roles or {}).items():
        role, unit = split_header(given)
        role = role.strip().lower()
        if role not in ENERGY_ROLES:
            raise EnergyTableError(f"column role {role!r} for {key!r} is not one of {', '.join(ENERGY_ROLES)}")
        out[key] = (role, unit)
        out[split_header(key)[0]] = (role, unit)
    return out


class SeriesBuilder:
    """Collects the series of one engine file: each term with the engine's name, role and unit text,
    converted once to internal units; ``--column`` roles win over the engine's spelling."""

    def __init__(self, path: Path, column_roles: Mapping[str, str] | None, roles: Mapping[str, str]) -> None:
        self.path = path
        self.overrides = role_overrides(column_roles)
        self.roles = roles
        self.series: dict[str, Series] = {}
        self.used_overrides: set[str] = set()

    def role_of(self, name: str) -> str:
        if name in self.overrides:
            self.used_overrides.add(name)
            return self.overrides[name][0]
        return self.roles.get(name, "other")

    def add(self, name: str, values: np.ndarray, unit_text: str | None, *, role: str | None = None,
            label: str | None = None) -> None:
        """Add one term. ``unit_text`` None or "" with a role that needs a dimension is an error; a unit
        that is not a physical one (lj reduced units) is given as ``label`` and kept unconverted."""
        r = role if role is not None else self.role_of(name)
        if name in self.overrides and self.overrides[name][1]:
            unit_text = self.overrides[name][1]
        values = np.asarray(values, dtype=np.float64)
        if label is not None:
            self.series[name] = Series(name, values, label, r, f"{self.path.name}:{name}")
            return
        if unit_text is None or not str(unit_text).strip():
            u_factor, u_internal = 1.0, ""
            if r in ROLE_DIMENSION:
                raise EnergyTableError(f"term {name!r} ({r}) has no unit", path=self.path)
        else:
            try:
                u = parse_unit(unit_text, expect=ROLE_DIMENSION.get(r))
            except UnitError as exc:
                if r == "other":
                    return  # an engine term in a unit we do not know: left out, not guessed
                raise EnergyTableError(f"term {name!r}: {exc.problem}", path=self.path) from exc
            u_factor, u_internal = u.factor, u.internal
        conv = values if u_factor == 1.0 else values * u_factor
        self.series[name] = Series(name, conv, u_internal, r, f"{self.path.name}:{name}")

    def unused_overrides(self) -> list[str]:
        names = {k for k in self.overrides}
        return sorted(n for n in names if n not in self.used_overrides and n not in self.series)


def finish_table(path: Path, time_ps: np.ndarray, builder: SeriesBuilder, warnings: list[str]) -> EnergyTable:
    """The EnergyTable of one engine file; duplicate or backward times are dropped with a warning
    (engines repeat a step on restart: the later value is kept)."""
    time_ps = np.asarray(time_ps, dtype=np.float64)
    if not np.all(np.isfinite(time_ps)):  # NaN would pass as a "repeat" and silently drop the rows after it
        from phasewake.core.errors import TimeAxisError

        i = int(np.flatnonzero(~np.isfinite(time_ps))[0])
        raise TimeAxisError(f"energy sample {i} has time {time_ps[i]:g} ps; every sample needs a finite time "
                            "(NaN, infinite, or too large for its unit)", path=path)
    keep = _keep_last_of_repeats(time_ps)
    if keep is not None:
        n_drop = int(time_ps.size - keep.size)
        warnings.append(f"{path.name}: {n_drop} repeated or earlier time(s) dropped (restarts repeat a step; "
                        "the later value is kept)")
        time_ps = time_ps[keep]
        builder.series = {k: Series(s.name, s.values[keep], s.unit, s.role, s.source)
                          for k, s in builder.series.items()}
    return EnergyTable(time_ps=time_ps, series=builder.series, sources=(str(path),))


def _keep_last_of_repeats(t: np.ndarray) -> np.ndarray | None:
    """Indices that keep a strictly increasing time axis, the later row winning where a restart went back;
    None when the axis is already strictly increasing."""
    if t.size < 2 or bool(np.all(np.diff(t) > 0)):
        return None
    # walking backwards, keep a row when its time is below every later kept time
    rev_min = np.minimum.accumulate(t[::-1])[::-1]
    later_min = np.append(rev_min[1:], np.inf)
    return np.flatnonzero(t < later_min)


# ---- numbers from text ---------------------------------------------------------------------------

def parse_rows(lines: Sequence[str], ncol: int, path: Path, first_line_no: int | None = None) -> np.ndarray:
    """Whitespace-separated numeric rows (all with ``ncol`` fields) as an (n, ncol) float64 array, parsed
    in one call; a ragged or non-numeric row raises EnergyTableError naming it."""
    if not lines:
        return np.zeros((0, ncol))
    text = " ".join(lines)
    try:
        flat = np.array(text.split(), dtype=np.float64)
    except ValueError:
        flat = None
    if flat is None or flat.size != len(lines) * ncol:
        for k, ln in enumerate(lines):
            parts = ln.split()
            where = f"line {first_line_no + k}" if first_line_no is not None else f"row {k + 1}"
            if len(parts) != ncol:
                raise EnergyTableError(f"{where}: {len(parts)} values, the header has {ncol}", path=path)
            for v in parts:
                try:
                    float(v)
                except ValueError:
                    raise EnergyTableError(f"{where}: {v!r} is not a number", path=path) from None
        raise EnergyTableError("cannot read the numeric rows", path=path)  # pragma: no cover
    return flat.reshape(len(lines), ncol)


def numbers(text: str) -> np.ndarray | None:
    """All whitespace-separated numbers of ``text`` in one C-level parse (np.fromstring); None when some
    token is not a number (numpy 2.4 raises for unmatched text; older versions warned)."""
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        try:
            return np.fromstring(text, sep=" ")
        except ValueError:
            return None


_NUM_RE = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eEdD][-+]?\d+)?")


def first_number(text: str) -> float | None:
    m = _NUM_RE.search(text)
    return float(m.group(0).replace("D", "e").replace("d", "e")) if m else None


# ---- putting facts into the run's metadata ----------------------------------------------------------

_FACT_FIELDS = ("timestep_ps", "ensemble", "thermostat", "temperature_K", "barostat", "pressure_bar",
                "integrator", "velocities_half_step", "constraints", "n_constraints", "n_dof",
                "conserved_quantity", "units_style", "engine", "com_motion_removed")


def apply_facts(md: RunMetadata, facts: Mapping[str, Any], source: str,
                fact_sources: Mapping[str, str] | None = None) -> None:
    """Fill the metadata fields the run does not know yet, each with where it came from."""
    for key, val in facts.items():
        if val is None or key not in _FACT_FIELDS:
            continue
        if getattr(md, key) is not None:
            continue
        setattr(md, key, val)
        src = (fact_sources or {}).get(key, source)
        md.sources[key] = src
        if key == "n_constraints":
            md.constraints_source = src


def ensemble_of(thermostat: str | None, barostat: str | None) -> str:
    t = bool(thermostat) and thermostat not in ("none", "no")
    b = bool(barostat) and barostat not in ("none", "no")
    return {(False, False): "NVE", (True, False): "NVT", (True, True): "NPT", (False, True): "NPH"}[(t, b)]


# ---- several files of one run ------------------------------------------------------------------------

@dataclass(frozen=True)
class EnergyOptions:
    """What an energy or parameter reader is told about the run it reads for.

    ``timestep_ps`` is the time step the user states (engine readers use it for their time axis);
    ``known_timestep_ps`` the best one known (stated, from the frames, or from a parameter file), for
    tables that count steps. ``energies=False``: read the run parameters only.
    """

    column_roles: Mapping[str, str] | None = None
    timestep_ps: float | None = None
    known_timestep_ps: float | None = None
    assumed_units: Mapping[str, str] | None = None
    units_style: str | None = None
    energies: bool = True


def join_parts(parts: Sequence[EnergyTable], warnings: list[str]) -> EnergyTable:
    """Energy tables of one run written in parts, in time order. A part that starts before the previous
    one ended (a restart from an earlier checkpoint) replaces the rows from its first time on, as the
    engine's restart did; overlaps and gaps are reported with their times."""
    if len(parts) == 1:
        return parts[0]
    order = sorted(parts, key=lambda t: (float(t.time_ps[0]) if len(t) else np.inf))
    acc_t = order[0].time_ps
    acc = {k: s.values for k, s in order[0].series.items()}
    name = lambda t: Path(t.sources[0]).name if t.sources else "?"  # noqa: E731
    prev = order[0]
    joins: list[TimeJoin] = list(order[0].joins)
    for part in order[1:]:
        if not len(part):
            continue
        t0 = float(part.time_ps[0])
        spacing = float(np.median(np.diff(part.time_ps))) if len(part) > 1 else 0.0
        tol = 1e-6 * max(spacing, 1e-9)
        keep = acc_t < t0 - tol
        n_keep = int(np.count_nonzero(keep))
        n_over = int(acc_t.size - n_keep)
        joins = [j for j in joins if j.index < n_keep]  # joins inside the rows this part replaces go
        if n_over == 1 and abs(float(acc_t[-1]) - t0) <= tol:
            warnings.append(f"energy parts: {name(part)} repeats the row at {t0:g} ps (the step it restarted "
                            "from); its row is kept")
        elif n_over:
            warnings.append(f"energy parts: {name(part)} starts at {t0:g} ps, before {name(prev)} ended "
                            f"({float(acc_t[-1]):g} ps); {n_over} overlapping row(s) {t0:g}-{float(acc_t[-1]):g} ps "
                            f"are taken from {name(part)} (the restart)")
            # a restart from an earlier checkpoint: a join, as one glued into a single file is
            joins.append(TimeJoin(time_ps=t0, back_from_ps=float(acc_t[-1]), n_dropped=n_over,
                                  index=n_keep,
                                  where=f"{name(part)} restarted before {name(prev)} ended"))
        elif acc_t.size and spacing and t0 - float(acc_t[-1]) > 1.5 * spacing:
            warnings.append(f"energy parts: a gap between {name(prev)} (ends {float(acc_t[-1]):g} ps) and "
                            f"{name(part)} (starts {t0:g} ps)")
        joins += [replace(j, index=j.index + n_keep) for j in part.joins]
        acc_t = np.concatenate([acc_t[keep], part.time_ps])
        acc = {k: np.concatenate([v[keep], part.series[k].values]) for k, v in acc.items()}
        prev = part
    first = order[0]
    series = {k: Series(s.name, acc[k], s.unit, s.role, s.source) for k, s in first.series.items()}
    sources = tuple(src for t in order for src in t.sources)
    return EnergyTable(time_ps=acc_t, series=series, sources=sources, joins=tuple(joins))
