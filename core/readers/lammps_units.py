"""LAMMPS unit styles: how to turn a style's numbers into ours (nm, ps, amu, nm/ps).

LAMMPS files carry no units: the style comes from the ``units`` command echoed in log.lammps (default
``lj``), from ``ITEM: UNITS`` in a dump written with ``dump_modify units yes``, or from the user. Factors
follow the LAMMPS units documentation (the units command). ``lj`` is reduced
units: its numbers are kept as they are and labelled, never passed off as nm or ps.
"""

from __future__ import annotations

from dataclasses import dataclass

# CODATA 2018: the atomic mass constant in kg, the Bohr radius in nm.
_AMU_KG = 1.66053906660e-27
_BOHR_NM = 0.0529177210903


@dataclass(frozen=True)
class UnitStyle:
    """Factors from one LAMMPS style to our internal units."""

    name: str
    length_nm: float
    time_ps: float
    velocity_nm_per_ps: float
    mass_amu: float
    reduced: bool = False  # lj: numbers kept as they are (sigma, tau, m), not converted

    @property
    def words(self) -> str:
        """The style's units in words, for messages."""
        return _WORDS[self.name]


STYLES: dict[str, UnitStyle] = {
    "lj": UnitStyle("lj", 1.0, 1.0, 1.0, 1.0, reduced=True),
    # g/mol, Angstrom, fs, Angstrom/fs
    "real": UnitStyle("real", 0.1, 1e-3, 100.0, 1.0),
    # g/mol, Angstrom, ps, Angstrom/ps
    "metal": UnitStyle("metal", 0.1, 1.0, 0.1, 1.0),
    # kg, m, s, m/s
    "si": UnitStyle("si", 1e9, 1e12, 1e-3, 1.0 / _AMU_KG),
    # g, cm, s, cm/s
    "cgs": UnitStyle("cgs", 1e7, 1e12, 1e-5, 1e-3 / _AMU_KG),
    # amu, Bohr, fs, Bohr per 1.03275e-15 s
    "electron": UnitStyle("electron", _BOHR_NM, 1e-3, _BOHR_NM / 1.03275e-3, 1.0),
    # pg, micrometre, microsecond, micrometre/microsecond
    "micro": UnitStyle("micro", 1e3, 1e6, 1e-3, 1e-15 / _AMU_KG),
    # ag, nm, ns, nm/ns
    "nano": UnitStyle("nano", 1.0, 1e3, 1e-3, 1e-21 / _AMU_KG),
}

_WORDS = {
    "lj": "reduced units (lengths in sigma, times in tau, masses in m)",
    "real": "g/mol, Angstrom, fs, Angstrom/fs",
    "metal": "g/mol, Angstrom, ps, Angstrom/ps",
    "si": "kg, m, s, m/s",
    "cgs": "g, cm, s, cm/s",
    "electron": "amu, Bohr, fs, Bohr per 1.03275e-15 s",
    "micro": "pg, micrometre, microsecond, micrometre/microsecond",
    "nano": "ag, nm, ns, nm/ns",
}


def style_from_text(text: str | None) -> UnitStyle | None:
    """The style named in ``text`` ("real", "lammps metal", "LAMMPS lj units"), or None."""
    if not text:
        return None
    for word in str(text).lower().replace(",", " ").replace("/", " ").split():
        if word in STYLES:
            return STYLES[word]
    return None
