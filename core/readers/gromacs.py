"""GROMACS files that say how a run went: the ``.edr`` energy file, ``md.log`` and ``.mdp`` parameters.

Layouts checked on GROMACS 2022.5 output; GROMACS works in nm, ps, kJ/mol, K, bar.

- ``.edr`` (XDR, big-endian): header ``-55555, version, nre, nre x (name, unit)`` as XDR strings; each
  frame ``real -2e10, int -7777777, int version, double t, int64 step, int nsum, int64 nsteps, double dt,
  int nre, int 0, int nblock, blocks' (id, nsub, nsub x (type, nr)), int e_size, int 0, int 0``, then nre
  reals (each followed by two accumulator reals when nsum > 0), then the block data. Single or double
  precision is told by the size of the first real. Frames of one layout follow each other at a fixed
  stride, so runs of them are read as strided numpy views, not frame by frame.
- ``md.log``: the ``Input Parameters:`` listing (integrator, dt, tcoupl, pcoupl, comm-mode ...), the
  ``grpopts:`` block (``nrdf:``, ``ref-t:``), ``There are: N Atoms``, and every nstlog a ``Step Time``
  header with an ``Energies (kJ/mol)`` block of 15-wide fields; the ``A V E R A G E S`` section at the
  end is left out.
- ``.mdp``: ``key = value`` with ``;`` comments; ``-`` and ``_`` are the same in keys.
"""

from __future__ import annotations

import re
import struct
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import CorruptFileError, EmptyFileError, EnergyTableError, UnitError
from phasewake.core.readers.common import file_head
from phasewake.core.readers.engine_common import (
    EngineEnergy,
    SeriesBuilder,
    ensemble_of,
    finish_table,
    head_text,
)
from phasewake.core.units import parse_unit

# GROMACS term names -> our roles (names as GROMACS 2022 writes them in .edr and md.log)
ROLES = {
    "Potential": "potential",
    "Kinetic En.": "kinetic",
    "Total Energy": "total",
    "Conserved En.": "conserved",
    "Temperature": "temperature",
    "Pressure": "pressure",
    "Volume": "volume",
    "Density": "density",
}
# md.log prints names without units; these are not kJ/mol (units as the .edr header gives them)
_LOG_UNITS = {"Temperature": "K", "Pressure": "bar", "Pres. DC": "bar", "Constr. rmsd": "",
              "Box-X": "nm", "Box-Y": "nm", "Box-Z": "nm", "Volume": "nm^3", "Density": "kg/m^3",
              "Box-XX": "nm", "Box-YY": "nm", "Box-ZZ": "nm", "Box-YX": "nm", "Box-ZX": "nm", "Box-ZY": "nm"}

EDR_MAGIC = -55555
FRAME_MAGIC = -7777777
_REAL_MAGIC = -2e10
_BLOCK_ITEM_BYTES = {0: 4, 1: 4, 2: 8, 3: 8, 4: 4}  # int, float, double, int64, uchar (4 bytes in XDR)


# ---- .edr ------------------------------------------------------------------------------------------

def claim_edr(path: Path) -> bool:
    """Starts with the .edr magic -55555 (or has the .edr suffix, so a damaged one gets a clear error)."""
    head = file_head(path, 8)
    if head is None:
        return False
    if len(head) >= 4 and struct.unpack(">i", head[:4])[0] == EDR_MAGIC:
        return True
    return path.suffix.lower() == ".edr"


def _edr_header(buf: memoryview, path: Path) -> tuple[list[str], list[str], int]:
    if len(buf) < 12:
        raise CorruptFileError("too short for a GROMACS energy file header", path=path)
    magic, version, nre = struct.unpack_from(">iii", buf, 0)
    if magic != EDR_MAGIC:
        raise CorruptFileError("not a GROMACS energy file of version 5 or later (no -55555 magic at the start; "
                               "files of GROMACS before 4.6 are not read)", path=path)
    if version < 1 or version > 5 or not 0 <= nre < 100000:
        raise CorruptFileError(f"unexpected energy file version {version} with {nre} terms", path=path)
    p = 12
    names: list[str] = []
    units: list[str] = []
    for i in range(2 * nre):
        if p + 4 > len(buf):
            raise CorruptFileError(f"the header ends inside term {i // 2 + 1} of {nre}", path=path)
        (n,) = struct.unpack_from(">i", buf, p)
        if not 0 <= n < 4096 or p + 4 + n > len(buf):
            raise CorruptFileError(f"the header is damaged at term {i // 2 + 1} (string length {n})", path=path)
        text = bytes(buf[p + 4:p + 4 + n]).rstrip(b"\x00").decode("latin-1")
        p += 4 + (n + 3) // 4 * 4
        (names if i % 2 == 0 else units).append(text)
    return names, units, p


class _Layout:
    """The fixed part of one frame layout at offset ``p``."""

    def __init__(self, buf: memoryview, p: int, real: int) -> None:
        r = real
        self.real = r
        self.t, self.step, self.nsum, self.nsteps, self.dt = struct.unpack_from(">dqiqd", buf, p + r + 8)
        self.nre, self.ndisre, self.nblock = struct.unpack_from(">iii", buf, p + r + 44)
        q = p + r + 56
        self.blocks: list[tuple[int, int]] = []  # (type, nr) of every sub-block
        self.variable = False
        if not (0 <= self.nblock < 1000 and 0 <= self.nre < 100000):
            raise ValueError("frame header out of range")
        for _ in range(self.nblock):
            _bid, nsub = struct.unpack_from(">ii", buf, q)
            if not 0 <= nsub < 1000:
                raise ValueError("frame header out of range")
            q += 8
            for _ in range(nsub):
                typ, nr = struct.unpack_from(">ii", buf, q)
                q += 8
                if typ not in _BLOCK_ITEM_BYTES:
                    self.variable = True  # strings: their length is in the data
                if nr < 0:
                    raise ValueError("negative block length")
                self.blocks.append((typ, nr))
        q += 12  # e_size, 0, 0
        self.header_len = q - p
        self.per_term = 3 if self.nsum > 0 else 1
        self.data_len = self.nre * self.per_term * r + sum(_BLOCK_ITEM_BYTES.get(t, 0) * n for t, n in self.blocks)
        self.size = self.header_len + self.data_len

    def fixed_ints(self) -> list[int]:
        """Offsets of the 4-byte header words that are equal in every frame of this layout: the frame
        marker and version, nre, ndisre, nblock and every block descriptor word."""
        r = self.real
        return [r, r + 4] + list(range(r + 44, self.header_len - 12, 4))


def _frame_real_size(buf: memoryview, p: int) -> int | None:
    """4 (single) or 8 (double) when a frame starts at ``p``, else None."""
    if p + 12 <= len(buf):
        if struct.unpack_from(">f", buf, p)[0] == _REAL_MAGIC and struct.unpack_from(">i", buf, p + 4)[0] == FRAME_MAGIC:
            return 4
    if p + 16 <= len(buf):
        if struct.unpack_from(">d", buf, p)[0] == _REAL_MAGIC and struct.unpack_from(">i", buf, p + 8)[0] == FRAME_MAGIC:
            return 8
    return None


def _scan_edr(data: np.ndarray, start: int, nre_header: int, path: Path, warnings: list[str]
              ) -> tuple[list[tuple[int, int, _Layout]], int]:
    """Runs of equal-layout frames: (offset of the first, count, layout). Returns (runs, frames seen)."""
    buf = data.data
    size = len(buf)
    p = start
    runs: list[tuple[int, int, _Layout]] = []
    frame = 0
    window = 64
    while p < size:
        real = _frame_real_size(buf, p)
        if real is None:
            if size - p < 16:
                raise CorruptFileError(f"the file ends {size - p} bytes into frame {frame} (counting from 0): it "
                                       f"is truncated (a run stopped mid-write?); the {frame} frame(s) before "
                                       "it are complete", path=path)
            raise CorruptFileError(f"frame {frame} (byte {p}) does not start with the frame marker: the file is "
                                   "damaged", path=path)
        try:
            lay = _Layout(buf, p, real)
        except (struct.error, ValueError):
            if p + 256 >= size:
                raise CorruptFileError(f"the file ends inside the header of frame {frame} (counting from 0): "
                                       f"it is truncated (a run stopped mid-write?); the {frame} frame(s) "
                                       "before it are complete", path=path) from None
            raise CorruptFileError(f"frame {frame} (byte {p}) has a damaged header", path=path) from None
        if lay.nre not in (0, nre_header):
            raise CorruptFileError(f"frame {frame} (time {lay.t:g} ps) holds {lay.nre} terms, the header names "
                                   f"{nre_header}", path=path)
        if lay.variable:
            raise CorruptFileError(f"frame {frame} holds string blocks, which this reader does not skip", path=path)
        if p + lay.size > size:
            raise CorruptFileError(f"the file ends inside frame {frame} (step {lay.step}, time {lay.t:g} ps): it "
                                   f"is truncated (a run stopped mid-write?); the {frame} frame(s) before it are "
                                   "complete", path=path)
        # how many frames of this layout follow at a fixed stride (checked in growing windows)
        fixed = lay.fixed_ints()
        template = [struct.unpack_from(">i", buf, p + off)[0] for off in fixed]
        magic = np.frombuffer(data[p:p + real].tobytes(), dtype=">f4" if real == 4 else ">f8")[0]
        nsum_pos = real + 24
        count = 1
        while True:
            q = p + count * lay.size
            n_fit = (size - q) // lay.size
            if n_fit <= 0:
                break
            k = int(min(window, n_fit))

            def word(off: int, dtype: str = ">i4", q: int = q, k: int = k, stride: int = lay.size) -> np.ndarray:
                return np.ndarray((k,), dtype=dtype, buffer=data, offset=q + off, strides=(stride,))

            same = word(0, ">f4" if real == 4 else ">f8") == magic
            for off, val in zip(fixed, template):
                same &= word(off) == val
            same &= (word(nsum_pos) > 0) == (lay.nsum > 0)
            bad = np.flatnonzero(~same)
            if bad.size:
                count += int(bad[0])
                break
            count += k
            window *= 2
        runs.append((p, count, lay))
        frame += count
        p += count * lay.size
    return runs, frame


def read_edr(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
             units_style: str | None = None) -> EngineEnergy:
    """Read a GROMACS .edr: every term in internal units, time from the frames, dt from the frame header.

    A file that ends inside a frame (a run stopped mid-write) is an error naming the frame and how many
    before it are complete, as a cut trajectory (XTC, TRR, DCD, LAMMPS dump) is; so is a missing frame
    marker.
    """
    path = Path(path)
    data = np.fromfile(path, dtype=np.uint8)
    if data.size == 0:
        raise EmptyFileError("energy file is empty", path=path)
    buf = data.data
    names, units, start = _edr_header(buf, path)
    warnings: list[str] = []
    runs, n_frames = _scan_edr(data, start, len(names), path, warnings)
    runs = [(p, n, lay) for p, n, lay in runs if lay.nre > 0]
    if not runs:
        raise CorruptFileError("no complete energy frame (frame 0 is cut or missing)", path=path)
    total = sum(n for _, n, _ in runs)
    nre = len(names)
    values = np.empty((total, nre), dtype=np.float64)  # one strided copy; each term is a column view
    time = np.empty(total, dtype=np.float64)
    step = np.empty(total, dtype=np.int64)
    k = 0
    for p, n, lay in runs:
        r = lay.real
        vdtype = np.dtype(">f4" if r == 4 else ">f8")
        vals = np.ndarray((n, nre), dtype=vdtype, buffer=data, offset=p + lay.header_len,
                          strides=(lay.size, r * lay.per_term))
        values[k:k + n] = vals
        time[k:k + n] = np.ndarray((n,), dtype=">f8", buffer=data, offset=p + r + 8, strides=(lay.size,))
        step[k:k + n] = np.ndarray((n,), dtype=">i8", buffer=data, offset=p + r + 16, strides=(lay.size,))
        k += n
    first = runs[0][2]
    builder = SeriesBuilder(path, column_roles, ROLES)
    for j, (name, unit) in enumerate(zip(names, units)):
        builder.add(name, values[:, j], unit)
    table = finish_table(path, time, builder, warnings)
    facts: dict[str, Any] = {"engine": "GROMACS"}
    if first.dt > 0:
        facts["timestep_ps"] = float(first.dt)
    if "Conserved En." in names:
        facts["conserved_quantity"] = "Conserved En."
    res = EngineEnergy(table=table, facts=facts, source=f"{path.name} (frame header)" , warnings=warnings,
                       extra={"edr_precision": "double" if first.real == 8 else "single",
                              "edr_steps": (int(step[0]), int(step[-1]))})
    res.fact_sources = {"engine": path.name, "conserved_quantity": path.name}
    # md.log beside the .edr (same name) states how the run was made
    log = path.with_suffix(".log")
    if log.is_file() and claim_md_log(log):
        try:
            extra = read_md_log(log, energies=False)
        except (EnergyTableError, CorruptFileError, ValueError, OSError) as exc:
            warnings.append(f"{log.name} beside {path.name} could not be read for run parameters: {exc}")
        else:
            res.facts = {**extra.facts, **{k: v for k, v in facts.items() if k not in extra.facts or k == "timestep_ps"}}
            res.fact_sources = {**{k: f"{log.name} (beside {path.name})" for k in extra.facts},
                                **{k: v for k, v in res.fact_sources.items() if k not in extra.facts}}
            if "timestep_ps" in facts:
                res.fact_sources["timestep_ps"] = f"{path.name} (frame header)"
            res.extra.update(extra.extra)
            warnings.extend(extra.warnings)
    _mdp_beside(path, res)
    return res


def _mdp_beside(path: Path, res: EngineEnergy) -> None:
    """mdout.mdp or grompp.mdp in the same folder adds what the other files did not say."""
    for name in ("mdout.mdp", "grompp.mdp"):
        mdp = path.parent / name
        if mdp.is_file():
            extra = read_mdp(mdp)
            for key, val in extra.facts.items():
                if key not in res.facts:
                    res.facts[key] = val
                    res.fact_sources[key] = f"{name} (beside {path.name})"
            return


# ---- md.log ---------------------------------------------------------------------------------------

_MDRUN_BANNER = re.compile(r"^\s*:-\) GROMACS - (gmx )?mdrun|^GROMACS:\s+(gmx )?mdrun", re.M)


def claim_md_log(path: Path) -> bool:
    """The log of gmx mdrun: its banner (``:-) GROMACS - gmx mdrun``) or ``GROMACS:  gmx mdrun, version``."""
    return bool(_MDRUN_BANNER.search(head_text(path, 8192)))


_STEP_HEADER = re.compile(r"^\s+Step\s+Time\s*$")
_PARAM = re.compile(r"^   (\S[^=]*?)\s*=\s*(.*?)\s*$")


def _fields15(line: str) -> list[str]:
    """Names in 15-character right-aligned fields."""
    n = (len(line.rstrip()) + 14) // 15
    return [line[15 * i:15 * (i + 1)].strip() for i in range(n)]


def read_md_log(path: Path, *, column_roles: Mapping[str, str] | None = None, timestep_ps: float | None = None,
                units_style: str | None = None, energies: bool = True) -> EngineEnergy:
    """The energies of every nstlog step of an md.log (without the averages at the end) and the run
    parameters it lists."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError as exc:  # pragma: no cover
        raise CorruptFileError(f"cannot read ({exc})", path=path) from exc
    lines = text.splitlines()
    warnings: list[str] = []
    facts, fsrc, params = _md_log_facts(lines, path)
    extra = _md_log_drift(lines, path, params)
    if not energies:
        return EngineEnergy(table=None, facts=facts, source=path.name, warnings=warnings, extra=extra)

    names: list[str] | None = None
    rows: list[str] = []
    steps: list[int] = []
    times: list[float] = []
    i = 0
    n = len(lines)
    cur: tuple[int, float] | None = None
    n_name_rows = 0
    while i < n:
        ln = lines[i]
        if "A V E R A G E S" in ln:
            break
        if _STEP_HEADER.match(ln) and i + 1 < n:
            parts = lines[i + 1].split()
            try:
                cur = (int(parts[0]), float(parts[1]))
            except (ValueError, IndexError):
                cur = None
            i += 2
            continue
        if ln.strip() == "Energies (kJ/mol)" and cur is not None:
            j = i + 1
            block_names: list[str] = []
            vals: list[str] = []
            while j + 1 < n and lines[j].strip():
                block_names += _fields15(lines[j])
                vals.append(lines[j + 1])
                j += 2
            if names is None:
                names = block_names
                n_name_rows = len(vals)
            if block_names != names:
                raise EnergyTableError(f"line {i + 1}: the energy terms change from {names} to {block_names}",
                                       path=path)
            if len(vals) == n_name_rows:
                rows.extend(vals)
                steps.append(cur[0])
                times.append(cur[1])
            cur = None
            i = j
            continue
        i += 1
    if names is None:
        raise EnergyTableError("no energy block ('Energies (kJ/mol)' after a Step/Time header) in this log",
                               path=path)
    arr = np.array(" ".join(rows).split(), dtype=np.float64)
    if arr.size != len(steps) * len(names):
        raise EnergyTableError("an energy block has fewer values than names", path=path)
    arr = arr.reshape(len(steps), len(names))
    builder = SeriesBuilder(path, column_roles, ROLES)
    for k, raw in enumerate(names):
        name, unit = _log_name_unit(raw)
        builder.add(name, arr[:, k], unit)
    table = finish_table(path, np.asarray(times), builder, warnings)
    if "Conserved En." in names:
        facts["conserved_quantity"] = "Conserved En."
    res = EngineEnergy(table=table, facts=facts, source=path.name, fact_sources=fsrc, warnings=warnings,
                       extra=extra)
    _mdp_beside(path, res)
    return res


_DRIFT_PART = re.compile(r"^Energy conservation over simulation part #(\d+) of length (\S+) ps, "
                         r"time (\S+) to (\S+) ps")
_DRIFT_LINE = re.compile(r"^\s*Conserved energy drift:\s*(\S+) kJ/mol/ps per atom")


def _md_log_drift(lines: list[str], path: Path, params: Mapping[str, str]) -> dict[str, Any]:
    """What GROMACS says of its own energy conservation, for ``RunMetadata.extra``.

    ``engine_drift``: the closing ``Conserved energy drift`` line of each part (kJ/mol/ps per atom, with the
    part's time span); GROMACS takes it from the first and last conserved energy of the part, so a step at
    the start weighs in fully. ``drift_tolerance``: ``verlet-buffer-tolerance`` from the input parameters
    (kJ/mol/ps per atom; the pair-list buffer is set so that its own drift stays below it; -1 switches the
    buffer estimate off and gives nothing here).
    """
    out: dict[str, Any] = {}
    parts = []
    span: tuple[int, float, float] | None = None
    for ln in lines[-400:]:  # the closing lines of the log
        m = _DRIFT_PART.match(ln)
        if m:
            try:
                span = (int(m.group(1)), float(m.group(3)), float(m.group(4)))
            except ValueError:
                span = None
            continue
        m = _DRIFT_LINE.match(ln)
        if m:
            try:
                value = float(m.group(1))
            except ValueError:
                continue
            parts.append({"kJ_mol_ps_atom": value, "source": path.name,
                          **({"part": span[0], "from_ps": span[1], "to_ps": span[2]} if span else {})})
            span = None
    if parts:
        out["engine_drift"] = parts
    try:
        tol = float(params.get("verlet-buffer-tolerance", ""))
    except ValueError:
        tol = -1.0
    if tol > 0:
        out["drift_tolerance"] = {"kJ_mol_ps_atom": tol, "source": f"{path.name} (verlet-buffer-tolerance)"}
    return out


def _log_name_unit(raw: str) -> tuple[str, str]:
    """md.log names carry a unit only when it is not kJ/mol ("Pressure (bar)"); "(SR)" is part of a name."""
    m = re.match(r"^(.*?)\s*\(([^()]*)\)$", raw)
    if m:
        try:
            parse_unit(m.group(2))
        except UnitError:
            pass
        else:
            return m.group(1), m.group(2)
    if raw.startswith("T-"):
        return raw, "K"
    return raw, _LOG_UNITS.get(raw, "kJ/mol")


_INTEGRATORS = {
    "md": ("leap-frog", True), "md-vv": ("velocity Verlet", False), "md-vv-avek": ("velocity Verlet", False),
    "sd": ("leap-frog stochastic dynamics (Langevin)", True), "bd": ("Brownian dynamics", None),
}


def _md_log_facts(lines: list[str], path: Path) -> tuple[dict[str, Any], dict[str, str], dict[str, str]]:
    """Run facts of the log's input parameters (RunMetadata fields), where each came from, and the
    parameters themselves (``key -> value`` as listed)."""
    params: dict[str, str] = {}
    grp: dict[str, list[str]] = {}
    n_atoms = None
    settle = False
    version = None
    in_params = False
    for ln in lines:
        if ln.startswith("Input Parameters:"):
            in_params = True
            continue
        if in_params:
            if _STEP_HEADER.match(ln) or ln.startswith("Started mdrun"):
                in_params = False
            else:
                m = _PARAM.match(ln)
                if m and m.group(1) not in params:
                    params[m.group(1)] = m.group(2)
                for key in ("nrdf", "ref-t", "tau-t"):
                    if ln.strip().startswith(f"{key}:") and key not in grp:
                        grp[key] = ln.split(":", 1)[1].split()
        if n_atoms is None and ln.startswith("There are:") and "Atoms" in ln:
            try:
                n_atoms = int(ln.split()[2])
            except (ValueError, IndexError):
                pass
        if ln.startswith("SETTLE"):
            settle = True
        if version is None and ln.startswith("GROMACS:") and "version" in ln:
            version = ln.split("version", 1)[1].strip()
        if _STEP_HEADER.match(ln) and params:
            break
    facts = _facts_from_params(params)
    facts["engine"] = f"GROMACS {version}" if version else "GROMACS"
    if "nrdf" in grp:
        try:
            facts["n_dof"] = int(round(sum(float(x) for x in grp["nrdf"])))
        except ValueError:
            pass
    if "ref-t" in grp and facts.get("thermostat") not in (None, "none"):
        try:
            temps = [float(x) for x in grp["ref-t"]]
        except ValueError:
            temps = []
        if temps:
            facts["temperature_K"] = temps[0]
    cons = []
    if settle:
        cons.append("rigid water (SETTLE)")
    c = params.get("constraints", "").lower()
    if c and c != "none":
        cons.append({"h-bonds": "bonds to hydrogen", "all-bonds": "all bonds", "h-angles": "bonds and angles "
                     "with hydrogen", "all-angles": "all bonds and angles"}.get(c, c))
    if cons:
        facts["constraints"] = ", ".join(cons)
    elif "nrdf" in grp and n_atoms:
        pass
    com = params.get("comm-mode", "").lower()
    if com:
        facts["com_motion_removed"] = com not in ("none", "no")
    if facts.get("n_dof") is not None and n_atoms:
        n_com = 3 if facts.get("com_motion_removed") else 0
        n_con = 3 * n_atoms - n_com - facts["n_dof"]
        if n_con >= 0:
            facts["n_constraints"] = int(n_con)
            if not cons:
                facts["constraints"] = "none" if n_con == 0 else f"{n_con} constraints"
    fsrc = {}
    if "n_constraints" in facts:
        fsrc["n_constraints"] = f"{path.name} (nrdf {facts['n_dof']} = 3 x {n_atoms} atoms - constraints"\
            f"{' - 3 (centre-of-mass motion removed)' if facts.get('com_motion_removed') else ''})"
    if "n_dof" in facts:
        fsrc["n_dof"] = f"{path.name} (grpopts nrdf)"
    return facts, fsrc, params


def _facts_from_params(params: Mapping[str, str]) -> dict[str, Any]:
    """Run facts from GROMACS parameters (md.log listing or .mdp; keys with '-')."""
    facts: dict[str, Any] = {}
    integ = params.get("integrator", "").strip().lower()
    if integ:
        name, half = _INTEGRATORS.get(integ, (integ, None))
        facts["integrator"] = name
        if half is not None:
            facts["velocities_half_step"] = half
    dt = params.get("dt")
    if dt:
        try:
            facts["timestep_ps"] = float(dt)
        except ValueError:
            pass
    if integ in ("md", "md-vv", "md-vv-avek", "sd", "bd"):
        tc = params.get("tcoupl", "no").strip().lower()
        thermostat = "none" if tc in ("no", "") else tc
        if integ == "sd":
            thermostat = "langevin (sd integrator)"
        elif integ == "bd":
            thermostat = "brownian (bd integrator)"
        pc = params.get("pcoupl", "no").strip().lower()
        barostat = "none" if pc in ("no", "") else pc
        facts["thermostat"] = thermostat
        facts["barostat"] = barostat
        facts["ensemble"] = ensemble_of(thermostat, barostat)
        for name, keys, coupling in (("temperature_K", ("ref-t", "ref_t"), thermostat),
                                     ("pressure_bar", ("ref-p", "ref_p"), barostat)):
            for key in keys:
                if key in params and coupling != "none":
                    try:
                        facts[name] = float(params[key].split()[0])  # the first group's reference
                    except (ValueError, IndexError):
                        pass
    return facts


# ---- .mdp -----------------------------------------------------------------------------------------

def claim_mdp(path: Path) -> bool:
    return path.suffix.lower() == ".mdp" and bool(head_text(path, 4096) or path.stat().st_size == 0)


def read_mdp(path: Path, **_: Any) -> EngineEnergy:
    """Run parameters from an .mdp (grompp input or mdout.mdp): integrator, dt, thermostat, barostat,
    reference temperature and pressure, constraints (``define = -DFLEXIBLE`` makes water flexible)."""
    path = Path(path)
    params: dict[str, str] = {}
    for ln in path.read_text(encoding="utf-8", errors="replace").splitlines():
        body = ln.split(";", 1)[0]
        if "=" not in body:
            continue
        key, val = body.split("=", 1)
        params.setdefault(key.strip().lower().replace("_", "-"), val.strip())
    facts = _facts_from_params(params)
    c = params.get("constraints", "").lower()
    flexible = "-DFLEXIBLE" in params.get("define", "")
    words = {"h-bonds": "bonds to hydrogen", "all-bonds": "all bonds", "h-angles": "bonds and angles with "
             "hydrogen", "all-angles": "all bonds and angles", "none": ""}.get(c, c)
    parts = [w for w in (words, "flexible water (-DFLEXIBLE)" if flexible else "") if w]
    if parts:
        facts["constraints"] = ", ".join(parts)
    elif c == "none":
        facts["constraints"] = "none in the parameters (rigid water comes from the topology's settles)"
    com = params.get("comm-mode", "").lower()
    if com:
        facts["com_motion_removed"] = com not in ("none", "no")
    facts["engine"] = "GROMACS"
    return EngineEnergy(table=None, facts=facts, source=path.name)
