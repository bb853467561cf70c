"""LAMMPS ``log.lammps``: thermo blocks and the echoed input (units, timestep, fixes), as LAMMPS writes them.

- The log starts ``LAMMPS (<version>)`` and echoes every input command. Each ``run`` or ``minimize``
  prints a header row starting ``Step``, whitespace-separated rows, then ``Loop time of T on P procs for
  N steps with M atoms`` (absent when the run was killed). Minimisations are not MD: left out.
- A run's first row repeats the previous run's last step: the repeat is dropped. Columns may change from
  run to run; runs of one ensemble are joined (the columns they share); when the ensemble changes (an NVT
  equilibration, then NVE production) the last run is read, with a warning saying what was left out.
- ``thermo_style multi`` / ``thermo_modify line multi`` records (``---- Step N ----- CPU = ...`` then
  ``Name = value`` triplets) are read too; the ``yaml`` layout is not.
- Inside blocks ``SHAKE stats`` lines (and a line per constrained type) and ``WARNING`` lines are skipped.
- Units: only the echoed ``units`` command says them (default ``lj``); ``units_style`` (``--units``) is used
  when the log shows none. ``lj`` reduced units are kept as they are and labelled, never converted.
- With ``thermo_modify norm yes`` (the default in lj) energies are per atom, but ``Ecouple`` is not
  divided by N, so the log's ``Econserve`` mixes the two; it is rebuilt here as TotEng + Ecouple / N.
- The engine's degrees of freedom follow from KinEng = 1/2 dof k_B T when both columns are printed.
"""

from __future__ import annotations

import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import EnergyTableError, InputError
from phasewake.core.model.run import EnergyTable, Series
from phasewake.core.readers import lammps_units
from phasewake.core.readers.engine_common import (
    EngineEnergy,
    SeriesBuilder,
    ensemble_of,
    head_text,
    numbers,
)
from phasewake.core.units import BOHR_M

# LAMMPS thermo keywords as printed -> our roles
ROLES = {"PotEng": "potential", "KinEng": "kinetic", "TotEng": "total", "Econserve": "conserved",
         "Ecouple": "bath_heat", "Temp": "temperature", "Press": "pressure", "Volume": "volume",
         "Density": "density"}
_ENERGY_NAMES = {"PotEng", "KinEng", "TotEng", "Econserve", "Ecouple", "E_pair", "E_mol", "E_vdwl", "E_coul",
                 "E_bond", "E_angle", "E_dihed", "E_impro", "E_long", "E_tail", "Enthalpy"}

# clocks and counters of the run itself, not observables of the system (time is Step x dt)
_SKIP = {"Time", "Elapsed", "Elaplong", "CPU", "CPULeft", "TPS", "SPCPU", "Part", "Dt", "Atoms"}
_BOHR_M = BOHR_M

# unit style -> (time unit of dt and Step*dt, energy, temperature, pressure, volume, density, default dt,
#                k_B in energy units per kelvin) [LAMMPS units documentation]; the time unit is the
#                word for messages, its factor to ps comes from lammps_units.STYLES (shared with the dump reader)
STYLES: dict[str, dict[str, Any]] = {
    "real": {"time": "fs", "energy": "kcal/mol", "pressure": "atm", "volume": "Å^3", "density": "g/cm^3",
             "dt": 1.0, "kB": 0.0019872067},
    "metal": {"time": "ps", "energy": "eV", "pressure": "bar", "volume": "Å^3", "density": "g/cm^3",
              "dt": 0.001, "kB": 8.617343e-5},
    "si": {"time": "s", "energy": "J", "pressure": "Pa", "volume": "m^3", "density": "kg/m^3",
           "dt": 1e-8, "kB": 1.3806504e-23},
    "cgs": {"time": "s", "energy": "g cm^2 s^-2", "pressure": "g cm^-1 s^-2", "volume": "cm^3",
            "density": "g/cm^3", "dt": 1e-8, "kB": 1.3806504e-16},
    "electron": {"time": "fs", "energy": "Eh", "pressure": "Pa", "volume": f"{_BOHR_M ** 3!r} m^3",
                 "density": "amu/" + f"({_BOHR_M!r} m)^3", "dt": 0.001, "kB": 3.16681534e-6},
    "micro": {"time": "us", "energy": "pg um^2 us^-2", "pressure": "pg um^-1 us^-2", "volume": "um^3",
              "density": "pg/um^3", "dt": 2.0, "kB": 1.3806504e-8},
    "nano": {"time": "ns", "energy": "ag nm^2 ns^-2", "pressure": "ag nm^-1 ns^-2", "volume": "nm^3",
             "density": "ag/nm^3", "dt": 0.00045, "kB": 0.013806504},
    "lj": {"dt": 0.005, "kB": 1.0},
}
UNIT_STYLES = tuple(STYLES)
_LJ_LABELS = {"energy": "ε (lj reduced)", "energy_atom": "ε per atom (lj reduced)", "temperature":
              "ε/k_B (lj reduced)", "pressure": "ε/σ³ (lj reduced)", "volume": "σ³ (lj reduced)",
              "density": "m/σ³ (lj reduced)", "time": "τ (lj reduced)"}


def claim(path: Path) -> bool:
    """A LAMMPS log: its first line is ``LAMMPS (<version>)``."""
    head = head_text(path, 256)
    return head.lstrip().startswith("LAMMPS (")


@dataclass
class _Block:
    kind: str  # "run", "minimize", "rerun"
    names: list[str]
    values: np.ndarray  # (n, ncol)
    n_atoms: int | None
    units: str | None
    dt: float | None
    fixes: dict[str, tuple[str, list[str]]]
    norm: bool | None
    complete: bool
    line: int
    shake: dict[str, int] = field(default_factory=dict)


_HEADER = re.compile(r"[ \t]*Step[ \t]+[A-Za-z_].*$")
_LOOP = re.compile(r"^Loop time of \S+ on \d+ procs for (\d+) steps with (\d+) atoms", re.M)
_LETTERS = re.compile(r"[A-DF-Za-df-z]")  # anything but e/E exponents: a non-numeric line inside a block
_SHAKE_COUNTS = re.compile(r"^\s*(\d+)\s*=\s*# of (size 2 clusters|size 3 clusters|size 4 clusters|frozen angles)",
                           re.M)


_MULTI = re.compile(r"-+ Step\s+\d+ -+")
_MULTI_SPLIT = re.compile(r"^-+ Step\s+(\d+) -+.*$", re.M)
_PAIR = re.compile(r"([A-Za-z_][\w\[\].]*)\s+=\s+(\S+)")


def _headers(text: str, start: int = 0) -> Iterator[tuple[int, int, bool]]:
    """(start, end, multi) of every thermo header line ("Step" first, then names) or first record of the
    multi-line layout, found with str.find (a multi-line regex scan of a 100 MB log takes seconds)."""
    k = text.find("Step", start)
    while k >= 0:
        line_start = text.rfind("\n", 0, k) + 1
        line_end = text.find("\n", k)
        line_end = len(text) if line_end < 0 else line_end
        line = text[line_start:line_end]
        if line_start >= start and _HEADER.match(line):
            yield line_start, line_end, False
        elif line_start >= start and _MULTI.match(line):
            yield line_start, line_end, True
        k = text.find("Step", line_end)


def _parse_multi(body: str, path: Path, line0: int) -> tuple[list[str], np.ndarray]:
    """Records of ``thermo_style multi`` (``---- Step N ----- CPU = t (sec) ----`` then ``Name = value``
    triplets) as names (Step first) and an (n, ncol) array."""
    parts = _MULTI_SPLIT.split(body)
    names: list[str] | None = None
    rows: list[list[float]] = []
    for k in range(1, len(parts) - 1, 2):
        step = float(parts[k])
        pairs = _PAIR.findall(parts[k + 1])
        rec_names = ["Step"] + [n for n, _ in pairs]
        if names is None:
            names = rec_names
        if rec_names != names:
            raise EnergyTableError(f"the thermo records from line {line0} change their keywords", path=path)
        try:
            rows.append([step] + [float(v) for _, v in pairs])
        except ValueError:
            raise EnergyTableError(f"a thermo record from line {line0} holds a value that is not a number",
                                   path=path) from None
    if names is None:
        return ["Step"], np.zeros((0, 1))
    return names, np.array(rows, dtype=np.float64).reshape(len(rows), len(names))


def _loop_line(text: str, start: int) -> re.Match[str] | None:
    k = text.find("Loop time of", start)
    while k >= 0:
        if k == 0 or text[k - 1] == "\n":
            return _LOOP.match(text, k)
        k = text.find("Loop time of", k + 1)
    return None


def _parse_body(body: str, ncol: int, path: Path, line0: int) -> np.ndarray:
    """The numeric rows of one thermo block; non-numeric lines (SHAKE stats, WARNING) are skipped."""
    n_lines = body.count("\n") + (0 if body.endswith("\n") or not body else 1)
    flat = numbers(body)
    if flat is not None and flat.size == n_lines * ncol:
        return flat.reshape(n_lines, ncol)
    keep: list[str] = []
    skipping_shake = False
    for k, ln in enumerate(body.splitlines()):
        s = ln.strip()
        if not s:
            continue
        if s.startswith("SHAKE stats") or s.startswith("RATTLE stats"):
            skipping_shake = True
            continue
        parts = s.split()
        numeric = not _LETTERS.search(s)
        if skipping_shake:
            if numeric and len(parts) == ncol and re.fullmatch(r"\d+", parts[0]) and "." not in parts[0]:
                if keep and int(parts[0]) < int(float(keep[-1].split()[0])):
                    continue  # a per-type SHAKE line that happens to have the same width
                skipping_shake = False
            else:
                continue
        if not numeric or len(parts) != ncol:
            if s.startswith("WARNING") or not numeric:
                continue
            raise EnergyTableError(f"line {line0 + k}: {len(parts)} values in a thermo row, the header has "
                                   f"{ncol}", path=path)
        keep.append(s)
    if not keep:
        return np.zeros((0, ncol))
    flat = numbers("\n".join(keep))
    if flat is None or flat.size != len(keep) * ncol:
        raise EnergyTableError(f"a thermo block from line {line0} holds text that is not a number", path=path)
    return flat.reshape(len(keep), ncol)


def _scan(text: str, path: Path) -> tuple[list[_Block], dict[str, Any]]:
    """Walk the log: commands between blocks set the state each block is read with."""
    state: dict[str, Any] = {"units": None, "dt": None, "fixes": {}, "norm": None, "last_cmd": None,
                             "shake": {}, "version": None, "multi": False, "warnings": []}
    m = re.match(r"\s*LAMMPS \(([^)]*)\)", text)
    if m:
        state["version"] = m.group(1)
    blocks: list[_Block] = []
    pos = 0
    for h_start, h_end, multi in _headers(text):
        if h_start < pos:
            continue
        _commands(text[pos:h_start], state)
        names = text[h_start:h_end].split()
        body_start = h_start if multi else h_end + 1
        lm = _loop_line(text, body_start)
        nh = next((h for h in _headers(text, h_end + 1) if not (multi and h[2])), None)
        end = lm.start() if lm else len(text)
        complete = lm is not None
        if nh is not None and nh[0] < end:
            end, complete = nh[0], False
        line0 = text.count("\n", 0, body_start) + 1
        if not complete and end == len(text) and not text.endswith("\n") and "\n" in text[body_start:]:
            end = text.rfind("\n") + 1  # a run killed while writing a row: that row is not used
            state["warnings"].append(f"{path.name}: the last thermo row is cut off (the run was stopped while "
                                     "writing it); it is not used")
        if multi:
            names, values = _parse_multi(text[body_start:end], path, line0)
        else:
            values = _parse_body(text[body_start:end], len(names), path, line0)
        n_atoms = int(lm.group(2)) if (lm and complete) else None
        blocks.append(_Block(kind=state["last_cmd"] or "run", names=names, values=values, n_atoms=n_atoms,
                             units=state["units"], dt=state["dt"], fixes=dict(state["fixes"]), norm=state["norm"],
                             complete=complete, line=line0 - 1, shake=dict(state["shake"])))
        state["last_cmd"] = None
        pos = lm.end() if (lm and complete) else end
    _commands(text[pos:], state)
    return blocks, state


def _commands(chunk: str, state: dict[str, Any]) -> None:
    for ln in chunk.splitlines():
        s = ln.split("#", 1)[0].strip()
        if not s:
            continue
        parts = s.split()
        cmd = parts[0]
        if cmd == "units" and len(parts) >= 2:
            state["units"] = parts[1]
        elif cmd == "timestep" and len(parts) >= 2:
            try:
                state["dt"] = float(parts[1])
            except ValueError:
                pass
        elif cmd == "fix" and len(parts) >= 4:
            state["fixes"][parts[1]] = (parts[3], parts[4:])
        elif cmd == "unfix" and len(parts) >= 2:
            state["fixes"].pop(parts[1], None)
        elif cmd == "thermo_modify":
            for i, p in enumerate(parts[:-1]):
                if p == "norm":
                    state["norm"] = parts[i + 1] == "yes"
                if p == "line" and parts[i + 1] == "yaml":
                    state["multi"] = True
        elif cmd in ("run", "minimize", "rerun") and len(parts) >= 2:
            state["last_cmd"] = cmd
        elif cmd.startswith("minimize"):
            state["last_cmd"] = "minimize"
        elif s.startswith("Setting up") and "minimization" in s:
            state["last_cmd"] = "minimize"
        mm = _SHAKE_COUNTS.match(ln)
        if mm:
            state["shake"][mm.group(2)] = int(mm.group(1))


def _thermostat(fixes: Mapping[str, tuple[str, list[str]]]) -> tuple[str, str, float | None, float | None, str]:
    """(thermostat, barostat, target T, target P in the style's units, integrator) from the active fixes."""
    thermo, baro, T, P = "none", "none", None, None
    integ = "none"
    for style, args in fixes.values():
        base = style.split("/")[0]
        if base in ("nvt", "npt", "nph", "nve", "rigid") or style.startswith("rigid"):
            integ = "velocity Verlet"
        if base in ("nvt", "npt"):
            thermo = "nose-hoover"
            T = _after(args, "temp", 1)
        if base in ("npt", "nph"):
            baro = "nose-hoover (MTK)"
            for key in ("iso", "aniso", "tri", "x"):
                if key in args:
                    P = _after(args, key, 1)
                    break
        if style == "langevin":
            thermo = "langevin"
            T = _num(args, 1)
        elif style == "temp/berendsen":
            thermo, T = "berendsen", _num(args, 1)
        elif style == "temp/csvr":
            thermo, T = "csvr (Bussi)", _num(args, 1)
        elif style == "temp/csld":
            thermo, T = "csld", _num(args, 1)
        elif style == "temp/rescale":
            thermo, T = "velocity rescaling", _num(args, 2)
        elif style == "press/berendsen":
            baro = "berendsen"
            for key in ("iso", "aniso", "x"):
                if key in args:
                    P = _after(args, key, 1)
                    break
    return thermo, baro, T, P, integ


def _num(args: list[str], i: int) -> float | None:
    try:
        return float(args[i])
    except (IndexError, ValueError):
        return None


def _after(args: list[str], key: str, k: int) -> float | None:
    if key in args:
        return _num(args, args.index(key) + 1 + k)
    return None


def read_log(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
             units_style: str | None = None) -> EngineEnergy:
    """Read the MD thermo blocks of a log.lammps and the facts its echoed input states.

    ``units_style`` is the style the user states for a log that echoes no ``units`` command; a log that
    shows one wins (with a warning when they differ). ``timestep_ps`` (a stated time step) sets the time
    axis when given.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError as exc:  # pragma: no cover
        raise InputError(f"cannot read ({exc})", path=path) from exc
    warnings: list[str] = []
    blocks, state = _scan(text, path)
    warnings.extend(state["warnings"])
    md = _md_blocks(blocks, state, path, warnings)
    style = _units_style(md[-1].units, units_style, path, warnings)
    st = STYLES[style]
    lj = style == "lj"
    common = _shared_columns(md, path, warnings)
    vals, time = _rows_and_time(md, common, timestep_ps, style, path, warnings)
    n_atoms = next((b.n_atoms for b in reversed(md) if b.n_atoms), None)
    norm = md[-1].norm if md[-1].norm is not None else lj
    builder = SeriesBuilder(path, column_roles, ROLES)
    col = {n: vals[:, k] for k, n in enumerate(common)}
    if norm and "Econserve" in col and "TotEng" in col and "Ecouple" in col and n_atoms:
        col["Econserve"] = col["TotEng"] + col["Ecouple"] / n_atoms
        warnings.append(f"{path.name}: energies are per atom (thermo_modify norm yes) but Ecouple is not divided "
                        f"by the {n_atoms} atoms; Econserve rebuilt as TotEng + Ecouple / {n_atoms}")
    elif norm and "Econserve" in col and not n_atoms:
        del col["Econserve"]
        warnings.append(f"{path.name}: Econserve left out: energies are per atom but the atom count is unknown")
    _add_columns(builder, [(n, col[n]) for n in common[1:] if n in col and n not in _SKIP], style, norm, n_atoms,
                 path, warnings)
    if norm and not lj and n_atoms:
        warnings.append(f"{path.name}: energies printed per atom (thermo_modify norm yes) are multiplied by the "
                        f"{n_atoms} atoms")
    table = EnergyTable(time_ps=time, series=builder.series, sources=(str(path),))
    if lj:
        warnings.append(f"{path.name}: LAMMPS lj reduced units: energies, temperature and time are kept in ε, "
                        "ε/k_B and τ, not converted to kJ/mol, K and ps")
    facts, fsrc, extra = _facts(md, style, st, norm, n_atoms, path, bool(units_style) and md[-1].units is None)
    facts["engine"] = f"LAMMPS ({state['version']})" if state["version"] else "LAMMPS"
    if "Econserve" in builder.series:
        facts["conserved_quantity"] = "Econserve"
    _check_time(table, path)
    return EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings,
                        extra=extra)


def _md_blocks(blocks: list[_Block], state: dict[str, Any], path: Path, warnings: list[str]) -> list[_Block]:
    """The thermo blocks of MD runs that are read: all of them when they share one ensemble, else the last."""
    if state["multi"]:
        raise EnergyTableError("thermo output in the 'yaml' line layout is not read; rerun with the default "
                               "one-line layout (thermo_modify line one) or 'multi'", path=path)
    md = [b for b in blocks if b.kind == "run" and b.values.shape[0] > 0]
    n_min = sum(1 for b in blocks if b.kind == "minimize")
    if not md:
        what = f" (only {n_min} minimisation block(s), which are not MD)" if n_min else ""
        raise EnergyTableError(f"no thermo block of an MD run in this LAMMPS log{what}", path=path)
    if n_min:
        warnings.append(f"{path.name}: {n_min} minimisation block(s) left out (not MD)")
    for b in md:
        if not b.complete:
            warnings.append(f"{path.name}: the thermo block from line {b.line} has no 'Loop time' line (the run "
                            "was stopped?); its rows are used")
    ens = [_thermostat(b.fixes)[:2] for b in md]
    if len(set(ens)) > 1:
        left = md[:-1]
        warnings.append(f"{path.name}: {len(md)} MD runs with different ensembles; the last (from step "
                        f"{int(md[-1].values[0, 0])}) is read, the earlier {len(left)} (steps "
                        f"{int(left[0].values[0, 0])}-{int(left[-1].values[-1, 0])}) left out")
        md = md[-1:]
    return md


def _units_style(shown: str | None, stated: str | None, path: Path, warnings: list[str]) -> str:
    """The units style: the one the log shows, else the one stated, else LAMMPS' default 'lj'."""
    style = shown
    if style is None:
        if stated:
            style = stated
            warnings.append(f"{path.name}: the log shows no 'units' command; using '{stated}' as stated")
        else:
            style = "lj"
            warnings.append(f"{path.name}: the log shows no 'units' command: LAMMPS' default 'lj' (reduced units) "
                            "is assumed; state another with --units")
    elif stated and stated != style:
        warnings.append(f"{path.name}: the log says 'units {style}'; the stated '{stated}' is not used")
    if style not in STYLES:
        raise EnergyTableError(f"unknown LAMMPS units style {style!r}", path=path)
    return style


def _shared_columns(md: list[_Block], path: Path, warnings: list[str]) -> list[str]:
    common = [n for n in md[0].names if all(n in b.names for b in md)]
    dropped = sorted({n for b in md for n in b.names} - set(common) - _SKIP)
    if dropped:
        warnings.append(f"{path.name}: column(s) {', '.join(dropped)} are not printed in every run; left out")
    if "Step" not in common:
        raise EnergyTableError("thermo blocks without a Step column", path=path)
    return common


def _rows_and_time(md: list[_Block], common: list[str], timestep_ps: float | None, style: str, path: Path,
                   warnings: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """The rows of every block (a run's first row dropped when it repeats the previous run's last step) and
    their times: cumulative step x time step, in ps (or in tau for lj)."""
    cols: list[np.ndarray] = []
    times: list[np.ndarray] = []
    t_end = 0.0
    last_step: float | None = None
    dts = []
    to_ps = lammps_units.STYLES[style].time_ps  # the style's time unit in ps (one table for log and dump)
    for b in md:
        idx = [b.names.index(n) for n in common]
        v = b.values[:, idx]
        step = v[:, 0]
        if last_step is not None and step.size and step[0] == last_step:
            v, step = v[1:], step[1:]
        if not step.size:
            continue
        dt_native = b.dt if b.dt is not None else STYLES[style]["dt"]
        dts.append(dt_native)
        dt = float(timestep_ps) if timestep_ps is not None else (dt_native if style == "lj" else dt_native * to_ps)
        base_step = last_step if last_step is not None else 0.0
        times.append(t_end + (step - base_step) * dt)
        t_end = float(times[-1][-1])
        last_step = float(step[-1])
        cols.append(v)
    if len(set(dts)) > 1:
        warnings.append(f"{path.name}: the time step changes between runs ({', '.join(f'{d:g}' for d in dts)}); "
                        "time is accumulated run by run")
    return np.concatenate(cols), np.concatenate(times)


def _add_columns(builder: SeriesBuilder, columns: list[tuple[str, np.ndarray]], style: str, norm: bool,
                 n_atoms: int | None, path: Path, warnings: list[str]) -> None:
    """Each thermo column with its unit: the style's, per atom times the atom count (norm yes), or lj labels."""
    st = STYLES[style]
    for name, v in columns:
        kind = _kind(name)
        if style == "lj":
            if kind is None:
                builder.add(name, v, None, label="lj reduced units")
                continue
            label = _LJ_LABELS["energy_atom" if kind == "energy" and norm and name != "Ecouple" else kind]
            builder.add(name, v, None, label=label)
            continue
        if kind is None:
            builder.add(name, v, None, label=f"units {style} (as printed)")
            continue
        unit = "K" if kind == "temperature" else st[kind]
        if kind == "energy" and norm and name != "Ecouple":
            if not n_atoms:
                warnings.append(f"{path.name}: {name} is per atom and the atom count is unknown; left out")
                continue
            v = v * n_atoms
        builder.add(name, v, unit)


def _kind(name: str) -> str | None:
    if name in _ENERGY_NAMES or name.startswith("E_"):
        return "energy"
    return {"Temp": "temperature", "Press": "pressure", "Volume": "volume", "Density": "density"}.get(name)


def _check_time(table: EnergyTable, path: Path) -> None:
    d = np.diff(table.time_ps)
    if d.size and np.any(d <= 0):
        i = int(np.flatnonzero(d <= 0)[0])
        raise EnergyTableError(f"the Step column goes back within a run (row {i + 2}); is this several logs "
                               "appended?", path=path)


def _facts(md: list[_Block], style: str, st: dict[str, Any], norm: bool, n_atoms: int | None, path: Path,
           stated: bool) -> tuple[dict[str, Any], dict[str, str], dict[str, Any]]:
    last = md[-1]
    facts: dict[str, Any] = {"units_style": f"lammps {style}"}
    fsrc: dict[str, str] = {}
    extra: dict[str, Any] = {"lammps_units": style, "lammps_norm": bool(norm)}
    if last.units:
        fsrc["units_style"] = f"{path.name} (echoed 'units {style}')"
    elif stated:
        fsrc["units_style"] = "stated (--units)"
    else:
        fsrc["units_style"] = "LAMMPS default (the log shows no units command)"
    dt_native = last.dt if last.dt is not None else st["dt"]
    if style == "lj":  # in τ, like the run's time axis (the dump reader reads it so too)
        extra["timestep_tau"] = dt_native
        facts["timestep_ps"] = dt_native
        fsrc["timestep_ps"] = (f"{path.name} (echoed 'timestep {dt_native:g}', τ in lj reduced units)"
                               if last.dt is not None else "LAMMPS default for units lj (0.005 τ)")
    else:
        facts["timestep_ps"] = dt_native * lammps_units.STYLES[style].time_ps
        fsrc["timestep_ps"] = (f"{path.name} (echoed 'timestep {dt_native:g}', {st['time']})" if last.dt is not None
                               else f"LAMMPS default for units {style} ({dt_native:g} {st['time']})")
    thermo, baro, T, P, integ = _thermostat(last.fixes)
    if integ == "none" and thermo == "none":
        integ = "none found"
    facts["thermostat"] = thermo
    facts["barostat"] = baro
    facts["ensemble"] = ensemble_of(thermo, baro)
    facts["integrator"] = "velocity Verlet" if integ != "none found" else None
    facts["velocities_half_step"] = False if integ != "none found" else None
    fix_words = ", ".join(f"fix {s}" for s, _ in last.fixes.values()) or "no fixes"
    for key in ("thermostat", "barostat", "ensemble", "integrator", "velocities_half_step"):
        fsrc[key] = f"{path.name} (echoed {fix_words})"
    if T is not None:
        if style == "lj":
            extra["target_temperature_lj"] = T
        else:
            facts["temperature_K"] = T
            fsrc["temperature_K"] = f"{path.name} (echoed fix)"
    if P is not None and style != "lj":
        factor = {"real": 1.01325, "metal": 1.0, "si": 1e-5, "electron": 1e-5, "cgs": 1e-6}.get(style)
        if factor is not None:
            facts["pressure_bar"] = P * factor
            fsrc["pressure_bar"] = f"{path.name} (echoed fix)"
    shake = [(s, a) for s, a in last.fixes.values() if s in ("shake", "rattle")]
    if shake:
        c = last.shake
        n_con = (c.get("size 2 clusters", 0) + 2 * c.get("size 3 clusters", 0) + 3 * c.get("size 4 clusters", 0)
                 + 3 * c.get("frozen angles", 0))
        words = shake[0][0].upper()
        if c:
            facts["n_constraints"] = n_con
            fsrc["n_constraints"] = f"{path.name} ({words} cluster counts)"
            facts["constraints"] = f"{words}: {n_con} constraints"
        else:
            facts["constraints"] = f"{words} (count not printed)"
        fsrc["constraints"] = f"{path.name} (echoed fix {shake[0][0]})"
    else:
        facts["constraints"] = "none (no fix shake or rattle)"
        fsrc["constraints"] = f"{path.name} (echoed input)"
    # dof from KinEng = 1/2 dof k_B T (per atom under norm yes)
    names = last.names
    if "KinEng" in names and "Temp" in names:
        ke = last.values[:, names.index("KinEng")]
        tt = last.values[:, names.index("Temp")]
        ok = tt > 0
        if np.any(ok):
            scale = n_atoms if norm else 1
            if scale:
                dof = 2.0 * ke[ok] * scale / (st["kB"] * tt[ok])
                d = float(np.median(dof))
                if abs(d - round(d)) < 0.02 * max(1.0, d) ** 0.5:
                    facts["n_dof"] = int(round(d))
                    fsrc["n_dof"] = f"{path.name} (KinEng = 1/2 dof k_B Temp)"
    if "n_constraints" not in facts and "n_dof" in facts and n_atoms and not shake:
        facts["n_constraints"] = 0
        fsrc["n_constraints"] = fsrc["constraints"]
    facts["com_motion_removed"] = None
    return facts, fsrc, extra


def lj_series_label(s: Series) -> bool:
    """True when a series is in LAMMPS lj reduced units (not converted)."""
    return "lj reduced" in s.unit
