"""LAMMPS data files (``write_data`` or hand-written) as a topology: masses per type, molecules, bonds.

Layout (LAMMPS read_data): a first comment line, header counts (``N atoms``, ``N atom types``,
``N bonds``, ...), box lines (``xlo xhi`` ...), then sections: a keyword line (``Masses``, ``Atoms #
full``, ``Velocities``, ``Bonds``, ``* Coeffs``, ...), a blank line and one row per entry, in any
order. The data file holds no units style, no time step and no constraints.

Atom styles read (column order of the Atoms section): atomic ``id type x y z``, charge ``id type q x y
z``, bond/angle/molecular ``id mol type x y z``, full ``id mol type q x y z``; each may end with three
image flags. The style is taken from the ``Atoms # style`` comment, else from the column count when
that is unambiguous.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from phasewake.core.errors import CorruptFileError, MissingDataError
from phasewake.core.readers.common import file_head

if TYPE_CHECKING:
    import mdtraj

DATA_SUFFIXES = (".data", ".lmp", ".lammps")

# (column of mol or None, column of type, columns of the row without image flags)
_STYLES: dict[str, tuple[int | None, int, int]] = {
    "atomic": (None, 1, 5),
    "charge": (None, 1, 6),
    "bond": (1, 2, 6),
    "angle": (1, 2, 6),
    "molecular": (1, 2, 6),
    "full": (1, 2, 7),
}
_SECTIONS = ("Atoms", "Velocities", "Masses", "Ellipsoids", "Lines", "Triangles", "Bodies", "Bonds",
             "Angles", "Dihedrals", "Impropers", "Pair Coeffs", "PairIJ Coeffs", "Bond Coeffs",
             "Angle Coeffs", "Dihedral Coeffs", "Improper Coeffs", "BondBond Coeffs", "BondAngle Coeffs",
             "MiddleBondTorsion Coeffs", "EndBondTorsion Coeffs", "AngleTorsion Coeffs",
             "AngleAngleTorsion Coeffs", "BondBond13 Coeffs", "AngleAngle Coeffs")
_COUNT = re.compile(rb"^\s*(\d+)\s+atoms\s*(#.*)?$", re.MULTILINE)
_XBOX = re.compile(rb"^\s*\S+\s+\S+\s+xlo\s+xhi", re.MULTILINE)


def claim(path: Path) -> bool:
    """A LAMMPS data file by content: an ``N atoms`` line and an ``xlo xhi`` line near the top."""
    head = file_head(path, 4096)
    if head is None:
        return False
    if b"\0" in head:
        return False
    return bool(_COUNT.search(head) and _XBOX.search(head))


@dataclass
class DataFile:
    """What a data file says about the atoms, sorted by atom id."""

    path: Path
    ids: np.ndarray  # (N,) int64, ascending
    types: np.ndarray  # (N,) int64
    molecules: np.ndarray | None  # (N,) int64 or None (atomic, charge)
    type_masses: dict[int, float]  # type -> mass in the style's mass unit
    bonds: np.ndarray  # (n_bonds, 2) atom indices (positions in the sorted order)
    atom_style: str
    header_step: int | None

    @property
    def n_atoms(self) -> int:
        return int(self.ids.size)

    def masses(self) -> np.ndarray | None:
        """Per-atom masses in the style's mass unit, or None when the Masses section lacks a type."""
        if not self.type_masses or any(int(t) not in self.type_masses for t in np.unique(self.types)):
            return None
        lookup = np.vectorize(lambda t: self.type_masses[int(t)], otypes=[float])
        return np.asarray(lookup(self.types), dtype=np.float64)


def _strip(line: str) -> str:
    return line.split("#", 1)[0].strip()


def read_data(path: str | Path) -> DataFile:
    """Read the atoms, masses and bonds of a data file (positions and coefficients are not kept)."""
    p = Path(path)
    try:
        lines = p.read_text(encoding="utf-8", errors="replace").splitlines()
    except OSError as exc:
        raise CorruptFileError(f"cannot read ({exc})", path=p) from exc
    header_step = None
    m = re.search(r"timestep\s*=\s*(\d+)", lines[0] if lines else "")
    if m:
        header_step = int(m.group(1))
    counts, first_section = _header_counts(lines)
    if "atoms" not in counts:
        raise CorruptFileError("no 'N atoms' line in the header: not a LAMMPS data file", path=p)
    sections = _sections(lines, first_section, p)
    ids, types, molecules, style = _atoms(sections, counts["atoms"], p)
    return DataFile(path=p, ids=ids, types=types, molecules=molecules, type_masses=_type_masses(sections, p),
                    bonds=_bonds(sections, ids, p), atom_style=style, header_step=header_step)


_Sections = dict[str, tuple[str, list[list[str]], int]]  # name -> (comment, rows, line number)


def _header_counts(lines: list[str]) -> tuple[dict[str, int], int]:
    """The header's "N atoms", "N bonds", ... counts, and the index of the first section's line."""
    counts: dict[str, int] = {}
    i = 1
    while i < len(lines):
        text = _strip(lines[i])
        if text and any(text == s or text.startswith(s + " ") for s in _SECTIONS):
            break
        cm = re.match(r"^(\d+)\s+([a-z ]+)$", text)
        if cm:
            counts[cm.group(2).strip()] = int(cm.group(1))
        i += 1
    return counts, i


def _sections(lines: list[str], i: int, p: Path) -> _Sections:
    sections: _Sections = {}
    while i < len(lines):
        raw = lines[i]
        text = _strip(raw)
        if not text:
            i += 1
            continue
        name = next((s for s in _SECTIONS if text == s), None)
        if name is None:
            raise CorruptFileError(f"line {i + 1}: expected a section keyword (Masses, Atoms, Bonds, ...), found "
                                   f"{raw.strip()[:40]!r}", path=p)
        comment = raw.split("#", 1)[1].strip() if "#" in raw else ""
        start = i + 1
        i += 1
        while i < len(lines) and not _strip(lines[i]):
            i += 1
        rows: list[list[str]] = []
        while i < len(lines) and _strip(lines[i]):
            rows.append(_strip(lines[i]).split())
            i += 1
        sections[name] = (comment, rows, start)
    return sections


def _atoms(sections: _Sections, n_atoms: int, p: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, str]:
    """(atom ids in ascending order, their types, their molecules or None, the atom style) of the Atoms section."""
    if "Atoms" not in sections:
        raise MissingDataError("the data file has no Atoms section", path=p)
    comment, rows, line0 = sections["Atoms"]
    if len(rows) != n_atoms:
        raise CorruptFileError(f"the Atoms section holds {len(rows)} rows, the header says {n_atoms} atoms "
                               "(truncated?)", path=p)
    ncol = len(rows[0]) if rows else 0
    style = comment.split()[0].lower() if comment else ""
    if not style:
        fits = [s for s, (_m, _t, w) in _STYLES.items() if ncol in (w, w + 3)]
        kinds = {(_STYLES[s][0] is None, _STYLES[s][2]) for s in fits}
        if len(kinds) != 1:
            raise CorruptFileError(f"the Atoms section has no '# style' comment and {ncol} columns fit "
                                   f"{' or '.join(fits) or 'no style we read'}: add the comment "
                                   "(e.g. 'Atoms # full')", path=p)
        style = fits[0]
    if style not in _STYLES:
        raise CorruptFileError(f"atom style {style!r} is not read (we read {', '.join(_STYLES)})", path=p)
    mol_col, type_col, width = _STYLES[style]
    try:
        table = np.array([r[:width] for r in rows], dtype=np.float64)
    except ValueError as exc:
        raise CorruptFileError(f"Atoms section (from line {line0}): a row that is not {width} numbers ({exc})",
                               path=p) from exc
    if table.shape != (n_atoms, width):
        raise CorruptFileError(f"Atoms section (from line {line0}): rows shorter than the {width} columns of "
                               f"atom style {style}", path=p)
    order = np.argsort(table[:, 0], kind="stable")
    table = table[order]
    ids = table[:, 0].astype(np.int64)
    if np.any(np.diff(ids) == 0):
        raise CorruptFileError("the Atoms section lists an atom id twice", path=p)
    molecules = None if mol_col is None else table[:, mol_col].astype(np.int64)
    return ids, table[:, type_col].astype(np.int64), molecules, style


def _type_masses(sections: _Sections, p: Path) -> dict[int, float]:
    type_masses: dict[int, float] = {}
    for r in sections["Masses"][1] if "Masses" in sections else []:
        try:
            type_masses[int(r[0])] = float(r[1])
        except (ValueError, IndexError) as exc:
            raise CorruptFileError(f"Masses section: cannot read the row {' '.join(r)!r}", path=p) from exc
    bad = {t: mval for t, mval in type_masses.items() if not (mval > 0 and np.isfinite(mval))}
    if bad:
        t, mval = next(iter(bad.items()))
        raise CorruptFileError(f"Masses section: atom type {t} has mass {mval:g}; masses must be positive", path=p)
    return type_masses


def _bonds(sections: _Sections, ids: np.ndarray, p: Path) -> np.ndarray:
    """Bonded pairs as indices into ``ids`` (shape (M, 2))."""
    if "Bonds" not in sections:
        return np.zeros((0, 2), dtype=np.int64)
    try:
        pairs = np.array([[int(r[2]), int(r[3])] for r in sections["Bonds"][1]], dtype=np.int64)
    except (ValueError, IndexError) as exc:
        raise CorruptFileError("Bonds section: a row that is not 'id type atom1 atom2'", path=p) from exc
    if not pairs.size:
        return np.zeros((0, 2), dtype=np.int64)
    pos = np.searchsorted(ids, pairs)
    pos_c = np.minimum(pos, ids.size - 1)
    if np.any(ids[pos_c] != pairs):
        raise CorruptFileError("Bonds section: a bond names an atom id the Atoms section does not have", path=p)
    return pos_c


def _element_for_mass(mass: float) -> str | None:
    """The element whose standard atomic weight is within 0.005 of ``mass`` (g/mol styles), or None."""
    from mdtraj.core import element as elem

    best, best_d = None, 0.005
    for el in elem.Element._elements_by_symbol.values():  # noqa: SLF001 - mdtraj keeps no public list
        if el.mass and abs(el.mass - mass) < best_d and el.symbol not in ("VS", "D"):
            best, best_d = el.symbol, abs(el.mass - mass)
    return best


def topology(data: DataFile, *, masses_in_amu: bool, elements: list[str] | None = None) -> mdtraj.Topology:
    """An mdtraj Topology: one residue per molecule id (per run of one atom type when there are none), atoms named by
    element when known (from a dump's element column, or a mass matching an element's in a g/mol style),
    else ``T<type>``; the bonds of the data file."""
    import mdtraj as md
    from mdtraj.core import element as elem

    top = md.Topology()
    chain = top.add_chain()
    type_el: dict[int, str | None] = {}
    if masses_in_amu:
        type_el = {t: _element_for_mass(mval) for t, mval in data.type_masses.items()}
    res = None
    last_key: object = None
    for i in range(data.n_atoms):
        mol = int(data.molecules[i]) if data.molecules is not None else None
        # a residue per molecule; without molecule ids, per run of atoms of one type
        key = mol if mol is not None else f"T{int(data.types[i])}"
        if res is None or key != last_key:
            res = top.add_residue("MOL" if mol is not None else str(key), chain,
                                  resSeq=mol if mol is not None else i + 1)
            last_key = key
        sym = elements[i] if elements else type_el.get(int(data.types[i]))
        try:
            el = elem.get_by_symbol(sym) if sym else elem.virtual
        except KeyError:
            el = elem.virtual
        top.add_atom(sym if sym else f"T{int(data.types[i])}", el, res)
    atoms = list(top.atoms)
    for a, b in data.bonds:
        top.add_bond(atoms[int(a)], atoms[int(b)])
    return top
