"""Energy tables: CSV, TSV or whitespace-separated text with a header row.

- Comment lines start with ``#``, ``@`` or ``;``; a header may itself sit on the last comment line
  before the data (``#"time (ps)","potential (kJ/mol)"``).
- Units sit in the header, ``Potential Energy (kcal/mol)`` or ``E_tot [eV]`` (see
  :func:`phasewake.core.units.split_header`).
- Column roles (time, step, potential, kinetic, total, conserved, bath_heat, temperature, pressure,
  volume, density) are recognised by name; ``column_roles`` overrides them and may state a unit,
  ``{"Epot": "potential (kcal/mol)"}``.
- A column with a role must have a unit; an unknown unit, ragged rows, text in numeric columns or a
  duplicated header raise EnergyTableError naming the file and the line.
- Several tables of one run are joined on time.
"""

from __future__ import annotations

import re
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import replace
from pathlib import Path
from typing import TextIO

import numpy as np

from phasewake.core.errors import (
    NUMBERED_ROWS,
    Caveat,
    EmptyFileError,
    EnergyTableError,
    ResourceError,
    TimeAxisError,
    UnitError,
)
from phasewake.core.model.run import ENERGY_ROLES, EnergyTable, Series
from phasewake.core.readers.common import file_head, resolve_restarts
from phasewake.core.units import parse_unit, split_header

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".log", ".out", ".ene")
COMMENT_MARKS = ("#", "@", ";")

# normalised column name -> role ("T" is temperature, "t" is time: checked before lower-casing)
_ROLE_NAMES: dict[str, str] = {}
for _role, _names in {
    "time": ("time", "t", "simtime", "simulationtime"),
    "step": ("step", "steps", "nstep", "istep", "stepnumber", "timestep"),
    "potential": ("potential", "potentialenergy", "epot", "pe", "epotential", "upot", "u"),
    "kinetic": ("kinetic", "kineticenergy", "ekin", "ke", "ekinetic"),
    "total": ("total", "totalenergy", "etot", "etotal", "energy", "e"),
    "conserved": ("conserved", "conservedenergy", "conservedquantity", "econs", "econserved", "hconserved"),
    "bath_heat": ("bathheat", "heat", "thermostatheat", "heatbath", "qbath"),
    "temperature": ("temperature", "temp", "tkin"),
    "pressure": ("pressure", "press", "p"),
    "volume": ("volume", "vol", "boxvolume"),
    "density": ("density", "rho"),
}.items():
    for _n in _names:
        _ROLE_NAMES[_n] = _role

# role -> dimension its unit must have
_ROLE_DIMENSION = {"time": "time", "potential": "energy", "kinetic": "energy", "total": "energy",
                   "conserved": "energy", "bath_heat": "energy", "temperature": "temperature",
                   "pressure": "pressure", "volume": "volume", "density": "density"}


def claim(path: Path) -> bool:
    """A text file with a table suffix (the header is checked when reading)."""
    if path.suffix.lower() not in TABLE_SUFFIXES:
        return False
    head = file_head(path, 4096)
    if head is None:
        return False
    return b"\x00" not in head


def role_for(name: str) -> str:
    """The role a column name suggests ("other" when none)."""
    if name.strip() == "T":
        return "temperature"
    key = re.sub(r"[^a-z0-9]", "", name.lower())
    return _ROLE_NAMES.get(key, "other")


def _delimiter(line: str) -> str | None:
    """Comma, tab or semicolon when the line has one (in that order); else None (whitespace)."""
    for d in (",", "\t", ";"):
        if d in line:
            return d
    return None


def _split(line: str, delim: str | None) -> list[str]:
    parts = line.split(delim) if delim else line.split()
    return [p.strip().strip("\"'").strip() for p in parts]


def _header_fields(line: str, delim: str | None) -> list[str]:
    fields = _split(line, delim)
    if delim is None:  # whitespace: "Epot (kJ/mol)" arrives as two tokens; join a unit to its name
        merged: list[str] = []
        for tok in fields:
            if merged and tok[:1] in "([" and not merged[-1].endswith((")", "]")):
                merged[-1] = f"{merged[-1]} {tok}"
            else:
                merged.append(tok)
        fields = merged
    return fields


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def read_table(
    path: str | Path,
    *,
    column_roles: Mapping[str, str] | None = None,
    timestep_ps: float | None = None,
    assumed_units: Mapping[str, str] | None = None,
) -> tuple[EnergyTable, list[str]]:
    """Read one energy table.

    ``assumed_units`` (dimension -> unit text) fills in the unit of a role column whose header has none.

    Returns
    -------
    (EnergyTable in internal units, warnings)
    """
    path = Path(path)
    try:
        with open(path, encoding="utf-8") as fh:
            header_line_no, names, delim, pending, lineno = _read_header(fh, path)
            values, line_numbers = _read_rows(fh, path, names, delim, pending, lineno)
    except UnicodeDecodeError as exc:
        raise EnergyTableError(f"not a text table (byte {exc.start} of a block is not UTF-8 text)",
                               path=path) from exc
    except MemoryError:
        raise ResourceError("not enough memory to read this energy table", path=path) from None
    warnings: list[str] = []

    # roles and units
    overrides = {split_header(k)[0]: v for k, v in (column_roles or {}).items()}
    overrides.update(dict(column_roles or {}))
    series: dict[str, Series] = {}
    time = None
    step = None
    for k, header_name in enumerate(names):
        name, role, unit_text = _role_and_unit(header_name, overrides, path)
        col = values[k]
        if role == "step":
            step = col
            continue
        if unit_text is None and assumed_units and _ROLE_DIMENSION.get(role) in assumed_units:
            unit_text = assumed_units[_ROLE_DIMENSION[role]]
            warnings.append(f"{path.name}: column {name!r} has no unit; using {unit_text!r} as stated")
        if unit_text is None:
            if role == "other":
                warnings.append(f"{path.name}: column {name!r} has no unit; left out (state it in the header, "
                                "e.g. 'name (unit)')")
                continue
            raise EnergyTableError(f"line {header_line_no}: column {name!r} ({role}) has no unit; write it in "
                                   f"the header, e.g. '{name} (kJ/mol)', or state it with column_roles", path=path)
        try:
            u = parse_unit(unit_text, expect=_ROLE_DIMENSION.get(role))
        except UnitError as exc:
            if role == "other":
                warnings.append(f"{path.name}: column {name!r}: {exc.problem}; left out")
                continue
            raise EnergyTableError(f"line {header_line_no}: column {name!r}: {exc.problem}", path=path) from exc
        if u.factor != 1.0:
            with np.errstate(over="ignore"):
                col *= u.factor  # in place: a column is a row of the one array read (no second copy)
        conv = col
        if role == "time":
            time = conv
            continue
        key = name if name not in series else f"{name} ({k + 1})"
        series[key] = Series(name=key, values=conv, unit=u.internal, role=role, source=f"{path.name}:{name}")
    if time is None:
        time = _time_without_column(step, timestep_ps, values.shape[1], path, warnings)
    _check_rows(time, line_numbers, path)
    # restarts glued into the table: the later segment is kept (as engines do), each join reported
    keep, joins, join_words = resolve_restarts(time, path=path, what="row", line_numbers=line_numbers)
    if keep is not None:
        time, line_numbers = time[keep], line_numbers[keep]
        series = {k: replace(s, values=s.values[keep]) for k, s in series.items()}
        warnings.extend(join_words)
    warnings.extend(_gap_warnings(time, line_numbers, path))
    return EnergyTable(time_ps=time, series=series, sources=(str(path),), joins=joins), warnings


def _time_without_column(step: np.ndarray | None, timestep_ps: float | None, n_rows: int, path: Path,
                         warnings: list[str]) -> np.ndarray:
    """A table without a time column: step x time step when both are known, else the row numbers."""
    if step is not None and timestep_ps is not None:
        warnings.append(f"{path.name}: no time column; time = step x {timestep_ps:g} ps")
        return step * timestep_ps
    warnings.append(Caveat(f"{path.name}: no time column; rows are numbered 0, 1, 2, ... (not ps)", NUMBERED_ROWS))
    return np.arange(n_rows, dtype=np.float64)


def _role_and_unit(header_name: str, overrides: Mapping[str, str], path: Path) -> tuple[str, str, str | None]:
    """(column name, role, unit text or None) of a header field: its role by name unless the user gave one
    (with a unit maybe: "potential (kcal/mol)")."""
    name, unit_text = split_header(header_name)
    role = role_for(name)
    given = overrides.get(header_name, overrides.get(name))
    if given is not None:
        role_text, role_unit = split_header(given)
        role = role_text.strip()
        if role not in ENERGY_ROLES:
            raise EnergyTableError(f"column role {role!r} for {name!r} is not one of {', '.join(ENERGY_ROLES)}",
                                   path=path)
        unit_text = role_unit or unit_text
    return name, role, unit_text


def _check_rows(time: np.ndarray, line_numbers: np.ndarray, path: Path) -> None:
    """Every row has a finite time and the axis does not overflow (a time that goes back or repeats is a
    restart: ``resolve_restarts``)."""
    finite = np.isfinite(time)
    if not finite.all():
        i = int(np.flatnonzero(~finite)[0])
        raise TimeAxisError(f"line {line_numbers[i]}: time is {time[i]:g} ps; every row needs a finite time "
                            "(NaN, infinite, or too large for its unit: the time axis overflows)", path=path)
    with np.errstate(over="ignore", invalid="ignore"):
        d = np.diff(time)
    if not np.isfinite(d).all():
        i = int(np.flatnonzero(~np.isfinite(d))[0])
        raise TimeAxisError(f"line {line_numbers[i + 1]}: the time axis overflows ({time[i]:g} ps, then "
                            f"{time[i + 1]:g} ps)", path=path)


def _gap_warnings(time: np.ndarray, line_numbers: np.ndarray, path: Path) -> list[str]:
    if time.size < 3:
        return []
    d = np.diff(time)
    med = float(np.median(d))
    gaps = np.flatnonzero(d > 1.5 * med)
    if not gaps.size:
        return []
    i = int(gaps[0])
    return [f"{path.name}: {gaps.size} gap(s) in the time column; the first between line {line_numbers[i]} "
            f"({time[i]:g} ps) and line {line_numbers[i + 1]} ({time[i + 1]:g} ps), typical spacing {med:g} ps"]


def _read_header(fh: TextIO, path: Path) -> tuple[int, list[str], str | None, list[tuple[int, str]], int]:
    """Read up to the first data row: (header line number, column names, delimiter, data lines already
    read, last line number read). Only the lines before the data are kept."""
    content: list[tuple[int, str]] = []
    lineno = 0
    first_data = None
    for raw in fh:
        lineno += 1
        ln = raw.rstrip("\r\n")
        if not ln.strip():
            continue
        content.append((lineno, ln))
        if not ln.lstrip().startswith(COMMENT_MARKS):
            first_data = len(content) - 1
            break
    if not content:
        raise EmptyFileError("energy table is empty", path=path)
    if first_data is None:
        raise EnergyTableError("energy table has a header or comments but no rows", path=path)
    line_no, first = content[first_data]
    probe = first
    first_fields = _split(first, _delimiter(first))
    pending: list[tuple[int, str]]
    if any(not _is_number(f) for f in first_fields if f):
        header_line_no, header = line_no, first
        pending = []
    else:
        comments = content[:first_data]
        if not comments:
            raise EnergyTableError(f"line {line_no}: no header row with column names (and units)", path=path)
        header_line_no, header = comments[-1]
        header = header.lstrip()[1:]
        pending = [content[first_data]]
        probe = header
    delim = _delimiter(probe)
    names = _header_fields(header, delim)
    if delim is None and "," in first:
        delim = ","
    if any(not n for n in names):
        raise EnergyTableError(f"line {header_line_no}: empty column name in the header", path=path)
    seen: dict[str, int] = {}
    for k, n in enumerate(names):
        if n in seen:
            raise EnergyTableError(f"line {header_line_no}: duplicate column {n!r} (columns {seen[n] + 1} and "
                                   f"{k + 1})", path=path)
        seen[n] = k
    return header_line_no, names, delim, pending, lineno


_BLOCK_ROWS = 8192
# Text the C parser (numpy.fromstring) reads exactly as float() does: digits, signs, exponents, nan/inf,
# delimiters and blanks. A block with anything else (quotes, hex, underscores, words) takes the careful path.
_PLAIN_NUMBERS = re.compile(r"[^0-9eE+\-.naifNAIFtyTY,;\t ]")


def _line_count(path: Path) -> int:
    """Newlines in the file plus one: an upper bound on its rows, found without holding the text."""
    n = 1
    with open(path, "rb") as f:
        while block := f.read(1 << 22):
            n += block.count(b"\n")
    return n


def _fast_block(lines: list[str], delim: str | None, ncol: int) -> np.ndarray | None:
    """The block's numbers as (rows, ncol) by numpy's C parser, or None when any line is not plain
    numbers with exactly ncol fields (then the careful path names the line and the problem)."""
    if delim is None:
        if any(len(ln.split()) != ncol for ln in lines):
            return None
        text, sep = " ".join(lines), " "
    else:
        if any(ln.count(delim) != ncol - 1 for ln in lines):
            return None
        text, sep = delim.join(lines), delim
    if _PLAIN_NUMBERS.search(text):
        return None
    import warnings

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # older numpy warns where 2.4 raises on unmatched text
            arr = np.fromstring(text, dtype=np.float64, sep=sep)
    except (ValueError, DeprecationWarning):
        return None
    if arr.size != len(lines) * ncol:
        return None
    return arr.reshape(len(lines), ncol)


def _read_rows(fh: TextIO, path: Path, names: list[str], delim: str | None, pending: list[tuple[int, str]],
               lineno: int) -> tuple[np.ndarray, np.ndarray]:
    """Stream the data rows into one float64 array of shape (n_columns, n_rows), a block at a time.

    Memory: the array (8 bytes per number) and one block of text; never the whole text, nor a Python
    object per cell (a 70 MB table read whole peaked at 1 GB). The size is checked against the memory
    available before anything is allocated. Plain numeric blocks are parsed by numpy's C parser; any
    other block line by line, which names the first bad line.
    """
    from phasewake.core.resources import require_memory

    ncol = len(names)
    capacity = max(_line_count(path) - lineno + len(pending), 1)
    line_type = np.int32 if capacity + lineno < 2**31 else np.int64  # line numbers: for messages only
    require_memory(capacity * (ncol * 8.0 + np.dtype(line_type).itemsize), what="reading this energy table",
                   path=path)
    values = np.empty((ncol, capacity), dtype=np.float64)
    line_numbers = np.empty(capacity, dtype=line_type)
    n = 0
    block: list[str] = []
    block_lines: list[int] = []

    def careful(lines: list[str], numbers: list[int]) -> np.ndarray:
        rows = []
        for no, ln in zip(numbers, lines, strict=True):
            r = _split(ln, delim)
            if len(r) != ncol:
                raise EnergyTableError(f"line {no}: {len(r)} fields, the header has {ncol} (ragged row)", path=path)
            rows.append(r)
        try:
            return np.array(rows, dtype=np.float64)
        except ValueError:
            for no, r in zip(numbers, rows, strict=True):
                for k, v in enumerate(r):
                    if not _is_number(v):
                        raise EnergyTableError(f"line {no}: column {names[k]!r} holds {v!r}, not a number",
                                               path=path) from None
            raise

    def flush() -> None:
        nonlocal values, line_numbers, n
        if not block:
            return
        m = len(block)
        if n + m > values.shape[1]:  # more rows than newlines (lone CR line ends): grow
            grow = max(n + m, 2 * values.shape[1])
            values = np.concatenate([values[:, :n], np.empty((ncol, grow - n))], axis=1)
            line_numbers = np.concatenate([line_numbers[:n], np.empty(grow - n, dtype=np.int64)])  # int64 from here
        arr = _fast_block(block, delim, ncol)
        if arr is None:
            arr = careful(block, block_lines)
        values[:, n : n + m] = arr.T
        line_numbers[n : n + m] = block_lines
        n += m
        block.clear()
        block_lines.clear()

    def rows() -> Iterator[tuple[int, str]]:
        yield from pending
        no = lineno
        for raw in fh:
            no += 1
            yield no, raw.rstrip("\r\n")

    for no, ln in rows():
        if not ln.strip() or ln.lstrip().startswith(COMMENT_MARKS):
            continue
        block.append(ln)
        block_lines.append(no)
        if len(block) >= _BLOCK_ROWS:
            flush()
    flush()
    if n == 0:
        raise EnergyTableError("energy table has a header but no rows", path=path)
    if n < values.shape[1] // 2:
        return values[:, :n].copy(), line_numbers[:n].copy()
    return values[:, :n], line_numbers[:n]


def read_tables(
    paths: Sequence[str | Path],
    *,
    column_roles: Mapping[str, str] | None = None,
    timestep_ps: float | None = None,
    assumed_units: Mapping[str, str] | None = None,
) -> tuple[EnergyTable, list[str]]:
    """Read several tables of one run and join them on time (rows at times all tables share)."""
    tables = []
    warnings: list[str] = []
    for p in paths:
        t, w = read_table(p, column_roles=column_roles, timestep_ps=timestep_ps, assumed_units=assumed_units)
        tables.append(t)
        warnings.extend(w)
    out = tables[0]
    for nxt in tables[1:]:
        out = join_on_time(out, nxt, warnings)
    return out, warnings


def join_on_time(a: EnergyTable, b: EnergyTable, warnings: list[str]) -> EnergyTable:
    """Two tables of one run joined on the times they share (all rows when their axes are the same)."""
    if len(a) == len(b) and np.allclose(a.time_ps, b.time_ps, rtol=1e-9, atol=1e-9):
        ia = ib = slice(None)
        time = a.time_ps
    else:
        ta = np.round(a.time_ps, 9)
        tb = np.round(b.time_ps, 9)
        time, ia_idx, ib_idx = np.intersect1d(ta, tb, assume_unique=True, return_indices=True)
        if time.size == 0:
            raise EnergyTableError(f"the tables {', '.join(Path(s).name for s in a.sources + b.sources)} share "
                                   "no times; they cannot be joined", path=Path(b.sources[0]))
        warnings.append(f"tables joined on {time.size} shared times ({len(a)} and {len(b)} rows before)")
        ia, ib = ia_idx, ib_idx  # type: ignore[assignment]
    series: dict[str, Series] = {}
    for s in a.series.values():
        series[s.name] = Series(s.name, s.values[ia], s.unit, s.role, s.source)
    for s in b.series.values():
        name = s.name if s.name not in series else f"{s.name} [{Path(s.source.split(':')[0]).stem}]"
        series[name] = Series(name, s.values[ib], s.unit, s.role, s.source)
    return EnergyTable(time_ps=np.asarray(time, dtype=np.float64), series=series, sources=a.sources + b.sources,
                       joins=a.joins + b.joins)
