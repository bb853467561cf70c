"""The coordinate builder: write a coordinate specification by picking atoms, or type one.

The specification language is ``phasewake.core.analyses.coordspec`` (documented there). Picking atoms in
the table (with their names and residues) and choosing a kind writes the text for the user; typed
text is checked as it is typed, and a mistake is pointed at by character.
"""

from __future__ import annotations

from PySide6 import QtCore, QtWidgets

from phasewake.core.errors import PhasewakeError
from phasewake.core.model.run import Run

# kind -> (function name, number of atoms, what it is)
KINDS: tuple[tuple[str, int, str], ...] = (
    ("distance", 2, "distance between two atoms (nm)"),
    ("angle", 3, "angle at the middle atom (rad)"),
    ("dihedral", 4, "torsion about the middle bond (rad)"),
    ("x", 1, "x position of one atom (nm)"),
    ("y", 1, "y position of one atom (nm)"),
    ("z", 1, "z position of one atom (nm)"),
)
MAX_ROWS = 20_000  # the atom table lists at most this many atoms; type a spec for the rest
MASS_TOLERANCE_AMU = 0.01  # a mass this close to an element's standard atomic weight suggests that element


def _elements_by_mass() -> list[tuple[float, str]]:
    from mdtraj.core import element as elem

    out = []
    for z in range(1, 119):
        try:
            e = elem.Element.getByAtomicNumber(z)
        except KeyError:
            continue
        mass = float(getattr(e.mass, "_value", e.mass))
        if mass > 0:
            out.append((mass, e.symbol))
    return out


_ELEMENT_MASSES: list[tuple[float, str]] | None = None


def element_guess(mass_amu: float) -> str:
    """The element whose standard atomic weight is within MASS_TOLERANCE_AMU of ``mass_amu`` ('' if none).

    A guess: united atoms (CH2 = 14.027 amu is not nitrogen) and repartitioned hydrogen masses do not match
    any element, and the window marks every guess with "?".
    """
    global _ELEMENT_MASSES
    if _ELEMENT_MASSES is None:
        _ELEMENT_MASSES = _elements_by_mass()
    if not mass_amu or mass_amu != mass_amu or mass_amu <= 0:
        return ""
    best = min(_ELEMENT_MASSES, key=lambda ms: abs(ms[0] - mass_amu))
    return best[1] if abs(best[0] - mass_amu) <= MASS_TOLERANCE_AMU else ""


def atom_hint(run: Run, index: int) -> str:
    """What the files say or suggest about atom ``index``: its name and element from the topology, else a
    species label from the file and an element guessed from the mass, e.g. "O? (15.999 amu)"."""
    top = run.topology
    if top is not None and index < top.n_atoms:
        a = top.atom(index)
        return f"{a.residue.name}{a.residue.resSeq} {a.name}"
    parts = []
    species = run.metadata.extra.get("species") if isinstance(run.metadata.extra, dict) else None
    if isinstance(species, list) and len(species) == run.n_atoms:
        parts.append(f"species {species[index]}")
    mass = float(run.masses_amu[index]) if index < run.masses_amu.shape[0] else float("nan")
    guess = element_guess(mass)
    if mass == mass and mass > 0:
        parts.append(f"{guess}? ({mass:.5g} amu)" if guess else f"({mass:.5g} amu)")
    elif mass == 0:
        parts.append("massless (a virtual site?)")
    return " ".join(parts)


def atom_rows(run: Run) -> list[tuple[int, str, str, str, str]]:
    """(index, atom name, residue name, residue number, element) of the run's atoms.

    Without a topology the element column holds a guess from the mass ("O? (15.999 amu)") and the name
    column a species label when the file has one, so an O-O distance can be built from a bare run.
    """
    top = run.topology
    n = min(run.n_atoms, MAX_ROWS)
    if top is None:
        species = run.metadata.extra.get("species") if isinstance(run.metadata.extra, dict) else None
        has_species = isinstance(species, list) and len(species) == run.n_atoms
        rows = []
        for i in range(n):
            mass = float(run.masses_amu[i])
            guess = element_guess(mass)
            el = (f"{guess}? ({mass:.5g} amu)" if guess else f"({mass:.5g} amu)") if mass == mass and mass > 0 else ""
            rows.append((i, f"species {species[i]}" if has_species else "", "", "", el))
        return rows
    rows = []
    for a in top.atoms:
        if a.index >= n:
            break
        el = a.element.symbol if a.element is not None else ""
        rows.append((a.index, a.name, a.residue.name, str(a.residue.resSeq), el))
    return rows


def check_spec(spec: str, run: Run | None) -> str:
    """'' when ``spec`` is a valid coordinate for ``run``, else the error text (with a caret)."""
    if not spec.strip():
        return "type a coordinate, e.g. distance(0, 1)"
    try:
        from phasewake.core.analyses import coordspec
    except ImportError:
        return ""  # no checker in this build: the analysis itself will report problems
    try:
        defn = coordspec.parse(spec)
        if run is not None:
            coordspec.resolve(defn, n_atoms=run.n_atoms, topology=run.topology)
    except PhasewakeError as exc:
        from phasewake.app.window.words import for_window

        return for_window(str(exc))
    return ""


class CoordinateBuilder(QtWidgets.QDialog):
    """Dialog returning a specification string in :attr:`spec` when accepted."""

    def __init__(self, run: Run | None, current: str = "", parent: QtWidgets.QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Coordinate builder")
        self.run = run
        self.picked: list[int] = []
        self.kind = QtWidgets.QComboBox()
        for name, n, what in KINDS:
            self.kind.addItem(f"{name}  \u2014  {what}", (name, n))
        self.kind.currentIndexChanged.connect(self._compose)
        self.filter = QtWidgets.QLineEdit()
        self.filter.setPlaceholderText("filter atoms by name, residue, element or index")
        self.filter.textChanged.connect(self._apply_filter)
        self.table = QtWidgets.QTableWidget(0, 5)
        self.table.setHorizontalHeaderLabels(["index", "atom", "residue", "res. no.", "element"])
        self.table.verticalHeader().hide()
        self.table.setEditTriggers(QtWidgets.QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.setSelectionBehavior(QtWidgets.QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.cellDoubleClicked.connect(lambda r, c: self.pick_row(r))
        rows = atom_rows(run) if run is not None else []
        self.table.setRowCount(len(rows))
        for r, values in enumerate(rows):
            for c, v in enumerate(values):
                self.table.setItem(r, c, QtWidgets.QTableWidgetItem(str(v)))
        self.table.resizeColumnsToContents()
        self.pick_button = QtWidgets.QPushButton("Pick selected atom")
        self.pick_button.clicked.connect(self._pick_selected)
        self.clear_button = QtWidgets.QPushButton("Clear picks")
        self.clear_button.clicked.connect(self.clear_picks)
        self.picked_label = QtWidgets.QLabel("picked: none (double-click atoms in order)")
        self.text = QtWidgets.QLineEdit(current)
        self.text.setPlaceholderText("or type a specification, e.g. distance(0, 1)")
        self.text.textChanged.connect(self._validate)
        self.error = QtWidgets.QLabel()
        self.error.setStyleSheet("font-family: monospace; color: #D55E00")
        self.error.setWordWrap(True)
        self.buttons = QtWidgets.QDialogButtonBox(
            QtWidgets.QDialogButtonBox.StandardButton.Ok | QtWidgets.QDialogButtonBox.StandardButton.Cancel)
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        lay = QtWidgets.QVBoxLayout(self)
        form = QtWidgets.QFormLayout()
        form.addRow("Kind", self.kind)
        lay.addLayout(form)
        lay.addWidget(self.filter)
        lay.addWidget(self.table, 1)
        row = QtWidgets.QHBoxLayout()
        row.addWidget(self.pick_button)
        row.addWidget(self.clear_button)
        row.addWidget(self.picked_label, 1)
        lay.addLayout(row)
        lay.addWidget(QtWidgets.QLabel("Specification"))
        lay.addWidget(self.text)
        lay.addWidget(self.error)
        lay.addWidget(self.buttons)
        self.resize(560, 520)
        self._validate(current)

    @property
    def spec(self) -> str:
        return self.text.text().strip()

    def pick_row(self, row: int) -> None:
        item = self.table.item(row, 0)
        if item is None:
            return
        _, n = self.kind.currentData()
        if len(self.picked) >= n:
            self.picked = []
        self.picked.append(int(item.text()))
        self._compose()

    def pick_atoms(self, indices: list[int]) -> None:
        self.picked = [int(i) for i in indices]
        self._compose()

    def clear_picks(self) -> None:
        self.picked = []
        self._compose()

    def _pick_selected(self) -> None:
        for idx in self.table.selectionModel().selectedRows():
            self.pick_row(idx.row())

    def _compose(self) -> None:
        name, n = self.kind.currentData()
        names = []
        for i in self.picked:
            label = str(i)
            if self.run is not None and i < self.run.n_atoms:
                hint = atom_hint(self.run, i)
                label = f"{i} {hint}" if hint else label
            names.append(label)
        self.picked_label.setText(f"picked {len(self.picked)}/{n}: " + (", ".join(names) or "none"))
        if len(self.picked) == n:
            self.text.setText(f"{name}({', '.join(str(i) for i in self.picked)})")

    def _apply_filter(self, text: str) -> None:
        text = text.strip().lower()
        for r in range(self.table.rowCount()):
            cells = " ".join((it.text() if (it := self.table.item(r, c)) is not None else "").lower()
                             for c in range(5))
            self.table.setRowHidden(r, bool(text) and text not in cells)

    def _validate(self, text: str) -> None:
        problem = check_spec(text, self.run)
        self.error.setText(problem)
        ok = self.buttons.button(QtWidgets.QDialogButtonBox.StandardButton.Ok)
        ok.setEnabled(not problem)

    def sizeHint(self) -> QtCore.QSize:  # noqa: N802 - Qt override
        return QtCore.QSize(560, 520)
