"""Units: parse the unit strings found in files and convert to phasewake's internal system.

Internal system (converted once, at the reader): nm, ps, amu, kJ/mol, K, nm/ps, bar, nm^3, g/cm^3,
elementary charge e. Energies are molar (kJ/mol): a per-particle energy such as eV is multiplied by the
Avogadro constant, and ``mol`` counts N_A particles.

Strings understood (examples):

- H5MD 1.1 style: space-separated factors with signed powers and an optional leading number,
  ``"nm ps-1"``, ``"kJ mol-1"``, ``"10+3 m"``, ``"nm^2 ps^-1"``;
- mdtraj HDF5 / OpenMM style: ``"nanometers/picosecond"``, ``"kilojoules_per_mole"``, ``"kelvin"``,
  ``"nanometer**3"``, ``"gram/(centimeter**3)"``;
- table headers: ``"Potential Energy (kcal/mol)"``, ``"E_tot [eV]"``, ``"time (fs)"`` (see
  :func:`split_header`).

An unknown or missing unit raises :class:`~phasewake.core.errors.UnitError` naming it; nothing is
guessed. Constants are CODATA values as ``scipy.constants`` gives them (the exact SI-2019 values for
k_B, N_A and e; the dalton and the Hartree energy of CODATA 2022), written out here so that importing
phasewake does not load scipy (about 0.1 s); tests/core/test_units.py holds them to scipy.constants. The
thermochemical calorie is 4.184 J exactly (NIST SP 811, 2008, B.8).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from phasewake.core.errors import UnitError

# CODATA constants (the values of scipy.constants; tests/core/test_units.py compares them).
AVOGADRO_PER_MOL = 6.02214076e23  # N_A, exact since SI 2019
BOLTZMANN_J_PER_K = 1.380649e-23  # k_B, exact since SI 2019
#: The one Boltzmann constant of phasewake, molar, in kJ mol^-1 K^-1: k_B N_A / 1000 with the exact SI-2019
#: values (k_B = 1.380649e-23 J/K, N_A = 6.02214076e23 /mol) = 0.00831446261815324 (= R/1000).
KB_KJ_PER_MOL_K: float = BOLTZMANN_J_PER_K * AVOGADRO_PER_MOL / 1000.0
ELEMENTARY_CHARGE_C = 1.602176634e-19  # e, exact since SI 2019
ATOMIC_MASS_KG = 1.66053906892e-27  # dalton (unified atomic mass unit), CODATA 2022
HARTREE_J = 4.359744722206e-18  # Hartree energy, CODATA 2022
BOHR_M = 5.29177210544e-11  # Bohr radius a0, CODATA 2022
HBAR_J_S = 1.0545718176461565e-34  # h / 2 pi, exact since SI 2019 (h = 6.62607015e-34 J s)

# Dimension vector: powers of (length, time, mass, temperature, charge). ``mol`` is a pure number
# (N_A particles), tracked separately so molar/per-particle conversions stay exact where possible.
_Dim = tuple[int, int, int, int, int]
_ZERO: _Dim = (0, 0, 0, 0, 0)
_L: _Dim = (1, 0, 0, 0, 0)
_T: _Dim = (0, 1, 0, 0, 0)
_M: _Dim = (0, 0, 1, 0, 0)
_TH: _Dim = (0, 0, 0, 1, 0)
_Q: _Dim = (0, 0, 0, 0, 1)
_ENERGY: _Dim = (2, -2, 1, 0, 0)
_PRESSURE: _Dim = (-1, -2, 1, 0, 0)


@dataclass(frozen=True)
class _Quantity:
    """An SI factor, a dimension and a power of ``mol`` (each mol = N_A particles)."""

    si: Fraction
    dim: _Dim
    mol: int = 0

    def __mul__(self, other: _Quantity) -> _Quantity:
        return _Quantity(
            self.si * other.si, tuple(a + b for a, b in zip(self.dim, other.dim)), self.mol + other.mol  # type: ignore[arg-type]
        )

    def __pow__(self, p: int) -> _Quantity:
        return _Quantity(self.si**p, tuple(a * p for a in self.dim), self.mol * p)  # type: ignore[arg-type]


def _q(si: float | str | Fraction, dim: _Dim, mol: int = 0) -> _Quantity:
    return _Quantity(Fraction(si), dim, mol)


# Symbols that take SI prefixes (symbol -> quantity). "Å" and friends are exact decimal values.
_PREFIXABLE: dict[str, _Quantity] = {
    "m": _q(1, _L),
    "s": _q(1, _T),
    "g": _q("0.001", _M),
    "J": _q(1, _ENERGY),
    "cal": _q("4.184", _ENERGY),  # thermochemical calorie, exact (NIST SP 811)
    "eV": _q(ELEMENTARY_CHARGE_C, _ENERGY),
    "Pa": _q(1, _PRESSURE),
    "bar": _q(100000, _PRESSURE),
    "mol": _q(1, _ZERO, 1),
    "L": _q("0.001", (3, 0, 0, 0, 0)),
    "l": _q("0.001", (3, 0, 0, 0, 0)),
    "Da": _q(ATOMIC_MASS_KG, _M),
    "K": _q(1, _TH),
    "C": _q(1, _Q),
}
_PREFIXES: dict[str, Fraction] = {
    "y": Fraction(1, 10**24), "z": Fraction(1, 10**21), "a": Fraction(1, 10**18),
    "f": Fraction(1, 10**15), "p": Fraction(1, 10**12), "n": Fraction(1, 10**9),
    "u": Fraction(1, 10**6), "µ": Fraction(1, 10**6), "μ": Fraction(1, 10**6),
    "m": Fraction(1, 10**3), "c": Fraction(1, 100), "d": Fraction(1, 10),
    "k": Fraction(10**3), "M": Fraction(10**6), "G": Fraction(10**9), "T": Fraction(10**12),
}
# Symbols without prefixes.
_PLAIN: dict[str, _Quantity] = {
    "Å": _q("1e-10", _L),
    "\u212b": _q("1e-10", _L),  # the angstrom sign, U+212B
    "A": _q("1e-10", _L),
    "Ang": _q("1e-10", _L),
    "amu": _q(ATOMIC_MASS_KG, _M),
    "u": _q(ATOMIC_MASS_KG, _M),
    "atm": _q(101325, _PRESSURE),
    "Eh": _q(HARTREE_J, _ENERGY),
    "Ha": _q(HARTREE_J, _ENERGY),
    "e": _q(ELEMENTARY_CHARGE_C, _Q),
    "min": _q(60, _T),
    "h": _q(3600, _T),
    "day": _q(86400, _T),
    "1": _q(1, _ZERO),
}
# Long names (lower case, singular) -> symbol; SI prefixes may be spelt out ("kilojoule").
_NAMES: dict[str, str] = {
    "meter": "m", "metre": "m", "second": "s", "sec": "s", "gram": "g", "joule": "J",
    "calorie": "cal", "electronvolt": "eV", "electron_volt": "eV", "pascal": "Pa", "bar": "bar",
    "mole": "mol", "mol": "mol", "liter": "L", "litre": "L", "dalton": "Da", "kelvin": "K",
    "coulomb": "C", "angstrom": "Å", "atmosphere": "atm", "hartree": "Eh", "minute": "min",
    "hour": "h", "day": "day", "elementary_charge": "e", "atomic_mass_unit": "amu",
}
_LONG_PREFIXES: dict[str, str] = {
    "yocto": "y", "zepto": "z", "atto": "a", "femto": "f", "pico": "p", "nano": "n", "micro": "u",
    "milli": "m", "centi": "c", "deci": "d", "kilo": "k", "mega": "M", "giga": "G", "tera": "T",
}
_DIMENSIONLESS_WORDS = {"1", "dimensionless", "none", "unitless", "-"}
_NOT_MULTIPLICATIVE = {"°C", "degC", "celsius", "degree_celsius", "°F", "degF", "fahrenheit"}

# Internal unit for each dimension (string as it appears in results).
_INTERNAL_TEXT: dict[_Dim, tuple[str, str]] = {
    _ZERO: ("", "dimensionless"),
    _L: ("nm", "length"),
    _T: ("ps", "time"),
    _M: ("amu", "mass"),
    _TH: ("K", "temperature"),
    _Q: ("e", "charge"),
    (1, -1, 0, 0, 0): ("nm/ps", "velocity"),
    (1, -2, 0, 0, 0): ("nm/ps^2", "acceleration"),
    _ENERGY: ("kJ/mol", "energy"),
    (1, -2, 1, 0, 0): ("kJ/(mol nm)", "force"),
    _PRESSURE: ("bar", "pressure"),
    (2, 0, 0, 0, 0): ("nm^2", "area"),
    (3, 0, 0, 0, 0): ("nm^3", "volume"),
    (-3, 0, 1, 0, 0): ("g/cm^3", "density"),
    (0, -1, 0, 0, 0): ("1/ps", "frequency"),
    (-1, 0, 0, 0, 0): ("1/nm", "inverse length"),
    (2, -2, 1, -1, 0): ("kJ/(mol K)", "entropy"),
    (2, -1, 0, 0, 0): ("nm^2/ps", "diffusion coefficient"),
    (1, -1, 1, 0, 0): ("amu nm/ps", "momentum"),
    (2, -1, 1, 0, 0): ("kJ ps/mol", "action"),
    (-1, 0, 1, 0, 0): ("amu/nm", "linear density"),
    (0, -2, 1, 0, 0): ("bar nm", "surface tension"),  # GROMACS's #Surf*SurfTen; 1 bar nm = 0.1 mN/m
}
_BASE_TEXT = ("nm", "ps", "amu", "K", "e")


@dataclass(frozen=True)
class Unit:
    """A parsed unit.

    factor : multiply a value in this unit by ``factor`` to get it in ``internal``.
    internal : the internal unit string ("kJ/mol", "nm/ps", "" for dimensionless, ...).
    dimension : a plain name of the dimension ("energy", "length", ...).
    text : the string that was parsed.
    """

    factor: float
    internal: str
    dimension: str
    text: str = ""


_NUMBER_RE = re.compile(r"^(?:10([+-]\d+)|[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)$")
_TOKEN_RE = re.compile(
    r"\s*(?:(?P<num>10[+-]\d+(?![\w.])|[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)"
    r"|(?P<atom>[A-Za-z\u00c5\u212b\u00b5\u03bc\u00b0_]+)(?P<pow>\^?[+-]?\d+)?"
    r"|(?P<op>[/*()])(?P<gpow>(?<=\))\^?[+-]?\d+)?)"
)
_SUPERSCRIPTS = str.maketrans("⁻⁺⁰¹²³⁴⁵⁶⁷⁸⁹", "-+0123456789")


def _atom(name: str, text: str) -> _Quantity:
    if name in _PLAIN:
        return _PLAIN[name]
    if name in _PREFIXABLE:
        return _PREFIXABLE[name]
    if len(name) > 1 and name[0] in _PREFIXES and name[1:] in _PREFIXABLE:
        base = _PREFIXABLE[name[1:]]
        return _Quantity(base.si * _PREFIXES[name[0]], base.dim, base.mol)
    if name in _NOT_MULTIPLICATIVE:
        raise UnitError(f"unit {text!r}: {name!r} is not a multiplicative unit; state temperatures in K")
    low = name.lower()
    candidates = [low]
    if low.endswith("s") and not low.endswith("ss"):
        candidates.append(low[:-1])
    for cand in candidates:
        if cand in _NAMES:
            return _atom(_NAMES[cand], text)
        for word, sym in _LONG_PREFIXES.items():
            if cand.startswith(word) and cand[len(word):] in _NAMES:
                base = _atom(_NAMES[cand[len(word):]], text)
                return _Quantity(base.si * _PREFIXES[sym], base.dim, base.mol)
    raise UnitError(f"unknown unit {name!r} in {text!r} (state the unit explicitly)")


def _parse_power(p: str | None) -> int:
    if not p:
        return 1
    return int(p.lstrip("^"))


def _normalise(text: str) -> str:
    s = text.strip().translate(_SUPERSCRIPTS)
    s = s.replace("**", "^").replace("·", " ").replace("⋅", " ").replace("×", " ")
    s = re.sub(r"_per_", "/", s)
    s = re.sub(r"\s+per\s+", "/", s)
    s = re.sub(r"(?<=[A-Za-z\u00c5\u212b])\.(?=[A-Za-z\u00c5\u212b])", " ", s)  # "kJ.mol-1"
    s = re.sub(r"\^\s*\(\s*([+-]?\d+)\s*\)", r"^\1", s)  # "m^(-1)"
    s = s.replace("^ ", "^")
    return s


_MAX_POWER = 12  # no physical unit string needs more
_MAX_EXP10 = 300  # beyond this the factor leaves float range


class _Parser:
    """Recursive descent over tokens.

    expr   := group ('/' group | '*' group)*       whitespace-juxtaposition binds tighter than '/',
    group  := factor+                              so "J/mol K" is J/(mol K)
    factor := number | atom[power] | '(' expr ')'[power]
    """

    def __init__(self, text: str, norm: str) -> None:
        self.text = text
        self.tokens: list[tuple[str, str, str | None]] = []
        pos = 0
        while pos < len(norm):
            if norm[pos].isspace():
                pos += 1
                continue
            m = _TOKEN_RE.match(norm, pos)
            if m is None or m.end() == pos:
                raise UnitError(f"cannot read unit {text!r} at {norm[pos:]!r}")
            if m.group("num") is not None:
                self.tokens.append(("num", m.group("num"), None))
            elif m.group("atom") is not None:
                self.tokens.append(("atom", m.group("atom"), m.group("pow")))
            else:
                self.tokens.append(("op", m.group("op"), m.group("gpow")))
            pos = m.end()
        self.i = 0

    def _power(self, p: str | None) -> int:
        n = _parse_power(p)
        if n == 0 or abs(n) > _MAX_POWER:
            raise UnitError(f"unit {self.text!r}: power {n} is not a usable unit power")
        return n

    def peek(self) -> tuple[str, str, str | None] | None:
        return self.tokens[self.i] if self.i < len(self.tokens) else None

    def expr(self) -> _Quantity:
        q = self.group()
        while (t := self.peek()) is not None and t[0] == "op" and t[1] in "/*":
            self.i += 1
            g = self.group()
            q = q * (g**-1 if t[1] == "/" else g)
        return q

    def group(self) -> _Quantity:
        q = self.factor()
        while (t := self.peek()) is not None and not (t[0] == "op" and t[1] in "/*)"):
            q = q * self.factor()
        return q

    def factor(self) -> _Quantity:
        t = self.peek()
        if t is None:
            raise UnitError(f"unit {self.text!r} ends early")
        self.i += 1
        kind, val, pw = t
        if kind == "num":
            m = re.fullmatch(r"10([+-]\d+)", val)
            if m:
                exp = int(m.group(1))
                if abs(exp) > _MAX_EXP10:
                    raise UnitError(f"unit {self.text!r}: factor 10^{exp} is out of range")
                return _q(Fraction(10) ** exp, _ZERO)
            num = Fraction(val)
            if num <= 0 or not (Fraction(1, 10**_MAX_EXP10) < num < 10**_MAX_EXP10):
                raise UnitError(f"unit {self.text!r}: numeric factor {val} must be positive and finite")
            return _q(num, _ZERO)
        if kind == "atom":
            return _atom(val, self.text) ** self._power(pw)
        if val == "(":
            q = self.expr()
            close = self.peek()
            if close is None or close[1] != ")":
                raise UnitError(f"unit {self.text!r}: unbalanced parenthesis")
            self.i += 1
            return q ** self._power(close[2])
        raise UnitError(f"unit {self.text!r}: unexpected {val!r}")


def _parse_quantity(text: str) -> _Quantity:
    norm = _normalise(text)
    if norm.lower() in _DIMENSIONLESS_WORDS:
        return _q(1, _ZERO)
    p = _Parser(text, norm)
    q = p.expr()
    if p.i != len(p.tokens):
        raise UnitError(f"cannot read unit {text!r} (unbalanced or stray {p.tokens[p.i][1]!r})")
    return q


def _internal_for(dim: _Dim) -> tuple[str, str, _Quantity]:
    if dim in _INTERNAL_TEXT:
        text, name = _INTERNAL_TEXT[dim]
        return text, name, _internal_quantity(text) if text else _q(1, _ZERO)
    parts = []
    for base, p in zip(_BASE_TEXT, dim):
        if p == 1:
            parts.append(base)
        elif p != 0:
            parts.append(f"{base}^{p}")
    text = " ".join(parts)
    return text, "derived", _parse_quantity(text)


_INTERNAL_CACHE: dict[str, _Quantity] = {}


def _internal_quantity(text: str) -> _Quantity:
    if text not in _INTERNAL_CACHE:
        _INTERNAL_CACHE[text] = _parse_quantity(text)
    return _INTERNAL_CACHE[text]


def parse_unit(text: str | bytes | None, *, expect: str | None = None) -> Unit:
    """Parse a unit string into its factor to the internal system.

    Parameters
    ----------
    text : the unit as found in a file (str or bytes). None or empty raises UnitError.
    expect : optional dimension name ("energy", "length", "time", ...); a unit of another dimension
        raises UnitError.

    Returns
    -------
    Unit with ``factor`` such that ``value_internal = value * factor``.
    """
    if isinstance(text, bytes):
        text = text.decode("utf-8", errors="replace")
    if text is None or not str(text).strip():
        raise UnitError("missing unit (state the unit explicitly)")
    text = str(text)
    q = _parse_quantity(text)
    internal, dim_name, iq = _internal_for(q.dim)
    ratio = q.si / iq.si
    mol_diff = q.mol - iq.mol  # each excess mol^+1 in the source = N_A particles
    try:
        factor = float(ratio) if mol_diff == 0 else float(ratio * Fraction(AVOGADRO_PER_MOL) ** mol_diff)
    except OverflowError:
        factor = float("inf")
    if not (np.isfinite(factor) and factor > 0):
        raise UnitError(f"unit {text!r} gives a conversion factor out of range")
    if expect is not None and dim_name != expect:
        raise UnitError(f"unit {text!r} is a {dim_name} unit, expected a unit of {expect}")
    return Unit(factor=factor, internal=internal, dimension=dim_name, text=text)


def to_internal(values: object, unit_text: str | bytes | None, *, expect: str | None = None) -> tuple[np.ndarray, str]:
    """Convert values to the internal system.

    Parameters
    ----------
    values : array-like of any shape, in ``unit_text``.
    unit_text : unit string as found in a file.
    expect : optional dimension name the unit must have.

    Returns
    -------
    (float64 array of the same shape in internal units, internal unit string)
    """
    u = parse_unit(unit_text, expect=expect)
    arr = np.asarray(values, dtype=np.float64)
    return (arr if u.factor == 1.0 else arr * u.factor), u.internal


_HEADER_RE = re.compile(r"^(?P<name>.*?)\s*[\(\[](?P<unit>[^\(\)\[\]]*(?:\([^\(\)]*\)[^\(\)\[\]]*)*)[\)\]]\s*$")


def split_header(header: str) -> tuple[str, str | None]:
    """Split a table header into its name and unit text.

    ``"Potential Energy (kcal/mol)"`` -> ``("Potential Energy", "kcal/mol")``;
    ``"E_tot [eV]"`` -> ``("E_tot", "eV")``; ``"step"`` -> ``("step", None)``.
    Quotes and a leading comment mark (``#``) are removed.
    """
    h = header.strip().strip("\"'").strip()
    if h.startswith("#"):
        h = h[1:].strip().strip("\"'").strip()
    m = _HEADER_RE.match(h)
    if m and m.group("name"):
        unit = m.group("unit").strip()
        return m.group("name").strip(), (unit or None)
    return h, None
