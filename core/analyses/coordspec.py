"""The coordinate specification: a small language of our own for naming a coordinate of a run.

The same text works on the command line (``phasewake coords run.h5md --coordinate "distance(0, 1)"``)
and in the window. A specification is one function call::

    spec     := NAME "(" [ argument { "," argument } ] ")"
    argument := atom | group | path | integer
    group    := INDEX | INDEX "-" INDEX | "[" item { "," item } "]" | QUERY
    item     := INDEX | INDEX "-" INDEX
    QUERY    := text in double or single quotes, an mdtraj atom selection

Functions (atoms are 0-based indices; ``a-b`` ranges include both ends)::

    x(i)  y(i)  z(i)               Cartesian component of atom i                         nm
    distance(i, j)                 distance between atoms i and j (minimum image)        nm
    angle(i, j, k)                 angle at vertex j                                     rad
    dihedral(i, j, k, l)           torsion about the j-k bond, in (-pi, pi]              rad
    com_distance(group_a, group_b) distance between the centres of mass of two groups    nm
    rg(group)                      mass-weighted radius of gyration of a group           nm
    rmsd(reference.pdb [, group])  RMSD to a reference structure after optimal fit       nm
    pc(k [, group])                k-th principal component (1-based) of the run's PCA    nm amu^1/2

Where a single atom is expected, a quoted query that selects exactly one atom also works
(``distance("name D1", "name D2")``). The text inside quotes is handed unchanged to mdtraj's own
atom-selection language (``mdtraj.Topology.select``); its rules are mdtraj's, not ours, and it needs
a topology. The reference file of ``rmsd`` is a bare path (no spaces, commas or brackets) or a quoted
path; it is read with ``mdtraj.load``.

:func:`parse` checks syntax only and never needs a run; :func:`resolve` checks atom indices against
the run, runs the mdtraj queries and loads ``rmsd`` references. Both raise
:class:`~phasewake.core.errors.CoordinateSpecError` with the 0-based position of the offending
character, so a front end can point at it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import CoordinateSpecError

if TYPE_CHECKING:
    import mdtraj

# name -> (argument kinds, number of required arguments, unit of the value, one-line help).
# Kinds: "atom" (one atom), "group" (atom group), "path" (reference file), "int" (positive integer).
FUNCTIONS: dict[str, tuple[tuple[str, ...], int, str, str]] = {
    "x": (("atom",), 1, "nm", "x component of an atom's position"),
    "y": (("atom",), 1, "nm", "y component of an atom's position"),
    "z": (("atom",), 1, "nm", "z component of an atom's position"),
    "distance": (("atom", "atom"), 2, "nm", "distance between two atoms (minimum image)"),
    "angle": (("atom", "atom", "atom"), 3, "rad", "angle i-j-k at vertex j"),
    "dihedral": (("atom", "atom", "atom", "atom"), 4, "rad", "torsion i-j-k-l about the j-k bond"),
    "com_distance": (("group", "group"), 2, "nm", "distance between the centres of mass of two groups"),
    "rg": (("group",), 1, "nm", "mass-weighted radius of gyration of a group"),
    "rmsd": (("path", "group"), 1, "nm", "RMSD to a reference structure after optimal superposition"),
    "pc": (("int", "group"), 1, "nm amu^1/2", "principal component k (1-based) of the run's PCA"),
}

_PUNCT = "(),[]"


@dataclass(frozen=True)
class Token:
    kind: str  # "name" (bare word), "string" (quoted), or one of "(),[]", or "end"
    text: str
    position: int  # index of the first character in the spec


@dataclass(frozen=True)
class GroupArg:
    """An atom group as written: explicit indices, or an mdtraj query (needs a topology).

    ``spans`` holds the indices as written, inclusive ``(first, last)`` pairs (``7`` is ``(7, 7)``,
    ``3-17`` is ``(3, 17)``), so a range is never expanded before it is checked against the run's
    atom count (``rg(0-999999999)`` costs nothing to parse).
    """

    spans: tuple[tuple[int, int], ...] | None
    query: str | None
    position: int
    end: int  # one past the last character of the argument

    @property
    def indices(self) -> tuple[int, ...] | None:
        """Every index, expanded (only for groups already checked to be small, and for tests)."""
        if self.spans is None:
            return None
        return tuple(i for lo, hi in self.spans for i in range(lo, hi + 1))

    @property
    def size(self) -> int:
        """Number of indices as written (before any check)."""
        return 0 if self.spans is None else sum(hi - lo + 1 for lo, hi in self.spans)


@dataclass(frozen=True)
class PathArg:
    path: str
    position: int


@dataclass(frozen=True)
class IntArg:
    value: int
    position: int


Argument = GroupArg | PathArg | IntArg


@dataclass(frozen=True)
class CoordinateDef:
    """A parsed specification (syntax only: nothing is checked against a run yet)."""

    spec: str
    function: str
    args: tuple[Argument, ...]
    position: int = 0  # where the function name starts

    @property
    def unit(self) -> str:
        return FUNCTIONS[self.function][2]


@dataclass(frozen=True)
class ResolvedCoordinate:
    """A specification checked against a run: every atom group is an index array.

    ``groups`` holds one int array per atom/group argument, in argument order. ``reference_nm``
    is the reference structure of ``rmsd`` (shape (len(groups[0]), 3)). ``pc_index`` is the 0-based
    component of ``pc``; ``pca`` is filled in by the first pass that computes the PCA.
    """

    spec: str
    function: str
    label: str
    unit: str
    groups: tuple[np.ndarray, ...]
    reference_nm: np.ndarray | None = None
    reference_path: str | None = None
    pc_index: int | None = None
    pca: Any = None  # phasewake.core.analyses.projection.PCAResult once computed
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def atoms(self) -> np.ndarray:
        """Every atom this coordinate depends on, sorted, unique."""
        if not self.groups:
            return np.zeros(0, dtype=np.int64)
        return np.unique(np.concatenate([np.asarray(g, dtype=np.int64) for g in self.groups]))


def tokenize(spec: str) -> list[Token]:
    """Split a specification into tokens.

    Bare words run until whitespace, a comma, a bracket or a quote; quoted strings keep everything up
    to the matching quote. Raises CoordinateSpecError on an unterminated quote.
    """
    tokens: list[Token] = []
    i, n = 0, len(spec)
    while i < n:
        c = spec[i]
        if c.isspace():
            i += 1
        elif c in _PUNCT:
            tokens.append(Token(c, c, i))
            i += 1
        elif c in "\"'":
            end = spec.find(c, i + 1)
            if end < 0:
                raise CoordinateSpecError("unterminated quoted text", spec=spec, position=i)
            tokens.append(Token("string", spec[i + 1 : end], i))
            i = end + 1
        else:
            j = i
            while j < n and not spec[j].isspace() and spec[j] not in _PUNCT and spec[j] not in "\"'":
                j += 1
            tokens.append(Token("name", spec[i:j], i))
            i = j
    tokens.append(Token("end", "", n))
    return tokens


#: Largest atom index the parser accepts (an int64; no run has this many atoms, so resolve() refuses it
#: against the run's atom count with the usual out-of-range message).
MAX_INDEX = 2**63 - 1
_DIGITS = "0123456789"


def _parse_index(part: str, spec: str, position: int) -> int:
    """A 0-based index written in ASCII digits (not "²" or other characters Python calls digits)."""
    if not part:
        raise CoordinateSpecError("expected an atom index (0-based, no sign) here", spec=spec, position=position)
    for k, ch in enumerate(part):
        if ch not in _DIGITS:
            raise CoordinateSpecError(f"expected a digit 0-9 in an atom index, found {ch!r}", spec=spec,
                                      position=position + k)
    if len(part) > 19 or int(part) > MAX_INDEX:
        raise CoordinateSpecError(f"atom index {part[:12]}{'...' if len(part) > 12 else ''} ({len(part)} digits) "
                                  "is too large to be an atom index", spec=spec, position=position)
    return int(part)


def _parse_index_item(tok: Token, spec: str) -> tuple[int, int]:
    """A bare word that is an index ``7`` or an inclusive range ``3-17``, as a (first, last) span."""
    text = tok.text
    parts = text.split("-")
    if len(parts) > 2:
        second = text.index("-", text.index("-") + 1)
        raise CoordinateSpecError("a range has one '-' (like 3-17)", spec=spec, position=tok.position + second)
    lo = _parse_index(parts[0], spec, tok.position)
    if len(parts) == 1:
        return (lo, lo)
    hi = _parse_index(parts[1], spec, tok.position + len(parts[0]) + 1)
    if hi < lo:
        raise CoordinateSpecError(
            f"range {lo}-{hi} runs backwards; write {hi}-{lo}", spec=spec, position=tok.position
        )
    return (lo, hi)


class _Parser:
    def __init__(self, spec: str) -> None:
        self.spec = spec
        self.tokens = tokenize(spec)
        self.i = 0

    def peek(self) -> Token:
        return self.tokens[self.i]

    def take(self) -> Token:
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def expect(self, kind: str, what: str) -> Token:
        tok = self.take()
        if tok.kind != kind:
            found = "the end of the text" if tok.kind == "end" else repr(tok.text if tok.kind != "string" else '"' + tok.text + '"')
            raise CoordinateSpecError(f"expected {what}, found {found}", spec=self.spec, position=tok.position)
        return tok

    def error(self, message: str, tok: Token) -> CoordinateSpecError:
        return CoordinateSpecError(message, spec=self.spec, position=tok.position)

    def parse(self) -> CoordinateDef:
        if self.peek().kind == "end":
            raise self.error("empty coordinate specification; try distance(0, 1)", self.peek())
        name_tok = self.expect("name", "a function name such as distance")
        name = name_tok.text
        if name not in FUNCTIONS:
            known = ", ".join(FUNCTIONS)
            hint = _close_match(name)
            raise self.error(
                f"unknown function {name!r}" + (f" (did you mean {hint!r}?)" if hint else "") + f"; known: {known}",
                name_tok,
            )
        kinds, n_required, _unit, _help = FUNCTIONS[name]
        self.expect("(", f"'(' after {name}")
        args: list[Argument] = []
        if self.peek().kind != ")":
            while True:
                tok = self.peek()
                if len(args) >= len(kinds):
                    raise self.error(f"{name} takes at most {len(kinds)} argument(s)", tok)
                args.append(self.argument(kinds[len(args)], name, len(args)))
                nxt = self.peek()
                if nxt.kind == ",":
                    self.take()
                    continue
                if nxt.kind == ")":
                    break
                found = "the end of the text" if nxt.kind == "end" else repr(nxt.text)
                raise self.error(f"expected ',' or ')', found {found}", nxt)
        close = self.expect(")", "')'")
        if len(args) < n_required:
            raise self.error(
                f"{name} needs {n_required} argument(s), got {len(args)}: {_signature(name)}", close
            )
        end = self.peek()
        if end.kind != "end":
            raise self.error("unexpected text after the closing ')'", end)
        return CoordinateDef(spec=self.spec, function=name, args=tuple(args), position=name_tok.position)

    def argument(self, kind: str, function: str, index: int) -> Argument:
        tok = self.peek()
        if kind == "path":
            tok = self.take()
            if tok.kind not in ("name", "string") or not tok.text:
                raise self.error(f"{function} needs a reference file name here", tok)
            return PathArg(tok.text, tok.position)
        if kind == "int":
            tok = self.take()
            if tok.kind != "name" or not tok.text or any(ch not in _DIGITS for ch in tok.text):
                raise self.error(f"{function} needs a positive whole number here (1 is the first)", tok)
            if len(tok.text) > 19 or int(tok.text) > MAX_INDEX:
                raise self.error(f"{tok.text[:12]}... is too large a component number", tok)
            if int(tok.text) < 1:
                raise self.error("components are counted from 1", tok)
            return IntArg(int(tok.text), tok.position)
        # atom or group
        if tok.kind == "string":
            self.take()
            if not tok.text.strip():
                raise self.error("empty atom query", tok)
            return GroupArg(None, tok.text, tok.position, tok.position + len(tok.text) + 2)
        if tok.kind == "[":
            if kind == "atom":
                raise self.error(f"argument {index + 1} of {function} is a single atom, not a list", tok)
            return self.bracket_list()
        if tok.kind == "name":
            self.take()
            if tok.text and tok.text[0].isalpha():
                raise self.error(
                    f"expected an atom index or a quoted mdtraj query, found {tok.text!r}"
                    f" (put queries in quotes: \"{tok.text} ...\")",
                    tok,
                )
            span = _parse_index_item(tok, self.spec)
            if kind == "atom" and span[0] != span[1]:
                raise self.error(f"argument {index + 1} of {function} is a single atom, not a range", tok)
            return GroupArg((span,), None, tok.position, tok.position + len(tok.text))
        found = "the end of the text" if tok.kind == "end" else repr(tok.text)
        raise self.error(f"expected an atom index or group, found {found}", tok)

    def bracket_list(self) -> GroupArg:
        open_tok = self.take()
        items: list[tuple[int, int]] = []
        while True:
            tok = self.take()
            if tok.kind != "name":
                found = "the end of the text" if tok.kind == "end" else repr(tok.text)
                raise self.error(f"expected an atom index or range in the list, found {found}", tok)
            items.append(_parse_index_item(tok, self.spec))
            sep = self.take()
            if sep.kind == ",":
                continue
            if sep.kind == "]":
                return GroupArg(tuple(items), None, open_tok.position, sep.position + 1)
            found = "the end of the text" if sep.kind == "end" else repr(sep.text)
            raise self.error(f"expected ',' or ']' in the list, found {found}", sep)


def _signature(name: str) -> str:
    kinds, n_required, _u, _h = FUNCTIONS[name]
    shown = []
    for k, kind in enumerate(kinds):
        word = {"atom": "atom", "group": "group", "path": "reference", "int": "k"}[kind]
        shown.append(word if k < n_required else f"[{word}]")
    return f"{name}({', '.join(shown)})"


def _close_match(name: str) -> str | None:
    import difflib

    found = difflib.get_close_matches(name.lower(), list(FUNCTIONS), n=1, cutoff=0.6)
    return found[0] if found else None


def parse(spec: str) -> CoordinateDef:
    """Parse a coordinate specification (syntax only).

    Parameters
    ----------
    spec : str
        For example ``"distance(3, 17)"`` or ``'com_distance([0-4], "resname LIG")'``.

    Returns
    -------
    CoordinateDef

    Raises
    ------
    CoordinateSpecError
        With ``spec`` and ``position`` (0-based index of the offending character).
    """
    if not isinstance(spec, str):
        raise CoordinateSpecError(f"a coordinate specification is text, not {type(spec).__name__}")
    return _Parser(spec).parse()


def describe_functions() -> list[tuple[str, str, str]]:
    """(signature, unit, help) for every function: for help texts and the window's chooser."""
    return [(_signature(name), unit, text) for name, (_k, _n, unit, text) in FUNCTIONS.items()]


def _resolve_group(
    arg: GroupArg, *, spec: str, n_atoms: int, topology: mdtraj.Topology | None, single: bool
) -> np.ndarray:
    if arg.query is not None:
        if topology is None:
            raise CoordinateSpecError(
                "an atom query needs a topology (give --top FILE, or use atom indices)",
                spec=spec,
                position=arg.position,
            )
        try:
            found = topology.select(arg.query)
        except (ValueError, SyntaxError, KeyError, TypeError, AttributeError) as exc:
            text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise CoordinateSpecError(
                f"mdtraj could not read the atom query: {text}", spec=spec, position=arg.position
            ) from exc
        found = np.asarray(found, dtype=np.int64)
        if found.size == 0:
            raise CoordinateSpecError(
                f"the atom query {arg.query!r} selects no atoms", spec=spec, position=arg.position
            )
        if single and found.size != 1:
            raise CoordinateSpecError(
                f"the atom query {arg.query!r} selects {found.size} atoms; one is needed here",
                spec=spec,
                position=arg.position,
            )
        return found
    assert arg.spans is not None
    # checked on the spans as written, before any index list is built
    for _lo, hi in arg.spans:
        if hi >= n_atoms:
            first_bad = max(_lo, n_atoms)
            raise CoordinateSpecError(
                f"atom index {first_bad} is out of range: the run has {n_atoms} atoms (0 to {n_atoms - 1})",
                spec=spec,
                position=arg.position,
            )
    if arg.size > n_atoms:
        raise CoordinateSpecError("an atom appears twice in this group", spec=spec, position=arg.position)
    idx = np.concatenate([np.arange(lo, hi + 1, dtype=np.int64) for lo, hi in arg.spans])
    if idx.size != np.unique(idx).size:
        raise CoordinateSpecError("an atom appears twice in this group", spec=spec, position=arg.position)
    return idx


def resolve(
    defn: CoordinateDef | str,
    *,
    n_atoms: int,
    topology: mdtraj.Topology | None = None,
    base_dir: str | Path | None = None,
) -> ResolvedCoordinate:
    """Check a parsed specification against a run and turn every group into atom indices.

    Parameters
    ----------
    defn : CoordinateDef or str
        A parsed specification (a string is parsed first).
    n_atoms : int
        Number of atoms of the run.
    topology : mdtraj.Topology, optional
        Needed for quoted atom queries and for the labels of atoms.
    base_dir : path, optional
        Folder against which a relative ``rmsd`` reference path is tried when it is not found
        relative to the working directory.

    Raises
    ------
    CoordinateSpecError
        Atom index out of range, empty or invalid mdtraj query, a missing or mismatched reference.
    """
    if isinstance(defn, str):
        defn = parse(defn)
    spec = defn.spec
    groups, pc_index, reference_path = _resolve_args(defn, n_atoms=n_atoms, topology=topology)
    fn = defn.function
    _check_groups(defn, groups)
    reference = None
    if fn == "rmsd":
        assert reference_path is not None
        reference = _rmsd_reference(defn, groups, reference_path, n_atoms=n_atoms, base_dir=base_dir)
    if fn == "pc" and len(groups) == 0:
        groups.append(np.zeros(0, dtype=np.int64))  # filled by the PCA's default group
    label = _label(defn, groups, topology)
    return ResolvedCoordinate(
        spec=spec,
        function=fn,
        label=label,
        unit=FUNCTIONS[fn][2] if fn != "pc" else "nm amu^1/2",
        groups=tuple(groups),
        reference_nm=None if reference is None else np.asarray(reference, dtype=np.float64),
        reference_path=reference_path,
        pc_index=pc_index,
    )


def _load_reference(path: str, *, spec: str, position: int, base_dir: str | Path | None) -> tuple[np.ndarray, int]:
    candidates = [Path(path).expanduser()]
    if base_dir is not None and not Path(path).is_absolute():
        candidates.append(Path(base_dir) / path)
    for cand in candidates:
        if cand.is_file():
            import mdtraj

            try:
                ref = mdtraj.load(str(cand))
            except (OSError, ValueError, KeyError, TypeError, IndexError) as exc:
                raise CoordinateSpecError(
                    f"cannot read the reference {cand}: {exc}", spec=spec, position=position
                ) from exc
            return np.asarray(ref.xyz[0], dtype=np.float64), int(ref.n_atoms)
    raise CoordinateSpecError(f"reference file {path} not found", spec=spec, position=position)


def _atom_name(i: int, topology: mdtraj.Topology | None) -> str:
    if topology is None:
        return str(i)
    try:
        atom = topology.atom(int(i))
    except IndexError:
        return str(i)
    return f"{atom.residue.name}{atom.residue.resSeq}:{atom.name}"


def _label(defn: CoordinateDef, groups: list[np.ndarray], topology: mdtraj.Topology | None) -> str:
    """A short readable label: the spec itself, with atom names when a topology knows them."""
    fn = defn.function
    if fn in ("x", "y", "z", "distance", "angle", "dihedral") and topology is not None:
        names = ", ".join(_atom_name(int(g[0]), topology) for g in groups)
        return f"{fn}({names})"
    return " ".join(defn.spec.split())


def _resolve_args(defn: CoordinateDef, *, n_atoms: int, topology: mdtraj.Topology | None,
                  ) -> tuple[list[np.ndarray], int | None, str | None]:
    """The specification's groups as atom indices, its component index (pc) and reference path (rmsd)."""
    spec = defn.spec
    groups: list[np.ndarray] = []
    pc_index = None
    reference_path = None
    for kind, arg in zip(FUNCTIONS[defn.function][0], defn.args, strict=False):
        if isinstance(arg, GroupArg):
            groups.append(
                _resolve_group(arg, spec=spec, n_atoms=n_atoms, topology=topology, single=kind == "atom")
            )
        elif isinstance(arg, IntArg):
            if arg.value > 3 * max(n_atoms, 1):
                raise CoordinateSpecError(
                    f"component {arg.value} does not exist: {n_atoms} atoms have at most {3 * n_atoms} "
                    "principal components", spec=spec, position=arg.position)
            pc_index = arg.value - 1
        elif isinstance(arg, PathArg):
            reference_path = arg.path
    return groups, pc_index, reference_path


def _check_groups(defn: CoordinateDef, groups: list[np.ndarray]) -> None:
    """Atoms that must differ, groups that must not overlap, a radius of gyration of two atoms or more."""
    fn, spec = defn.function, defn.spec
    if fn in ("distance", "angle", "dihedral"):
        flat = [int(g[0]) for g in groups]
        if len(set(flat)) != len(flat):
            raise CoordinateSpecError(f"the atoms of {fn} must differ", spec=spec, position=defn.args[0].position)
    if fn == "com_distance":
        a, b = groups
        if np.intersect1d(a, b).size:
            raise CoordinateSpecError(
                "the two groups of com_distance share atoms", spec=spec, position=defn.args[1].position
            )
    if fn == "rg" and groups[0].size < 2:
        raise CoordinateSpecError("rg needs a group of at least 2 atoms", spec=spec, position=defn.args[0].position)


def _rmsd_reference(defn: CoordinateDef, groups: list[np.ndarray], reference_path: str, *, n_atoms: int,
                    base_dir: str | Path | None) -> np.ndarray:
    """The rmsd reference positions matched to the group (all atoms when no group is given: appended)."""
    spec = defn.spec
    path_arg = defn.args[0]
    ref_xyz, ref_n = _load_reference(reference_path, spec=spec, position=path_arg.position, base_dir=base_dir)
    if len(groups) == 0:
        if ref_n != n_atoms:
            raise CoordinateSpecError(
                f"the reference has {ref_n} atoms but the run has {n_atoms}; give a group, e.g. "
                f"rmsd({reference_path}, 0-{min(ref_n, n_atoms) - 1})",
                spec=spec,
                position=path_arg.position,
            )
        groups.append(np.arange(n_atoms, dtype=np.int64))
        return np.asarray(ref_xyz)
    g = groups[0]
    if g.size < 3:
        raise CoordinateSpecError("rmsd needs at least 3 atoms", spec=spec, position=defn.args[1].position)
    if ref_n == n_atoms:
        return np.asarray(ref_xyz[g])
    if ref_n == g.size:
        return np.asarray(ref_xyz)
    raise CoordinateSpecError(
        f"the reference has {ref_n} atoms, neither the run's {n_atoms} nor the group's {g.size}",
        spec=spec,
        position=path_arg.position,
    )
