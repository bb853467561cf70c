"""The Help menu's dialogs: the short guide, the user guide and the About box.

The words live in :mod:`phasewake.app.window.guide_text`; the licences of the dependencies are read
from the installed packages' metadata (``importlib.metadata``), never typed in by hand.
"""

from __future__ import annotations

import html
import re
from dataclasses import dataclass

from PySide6 import QtCore, QtWidgets

from phasewake.app.window import guide_text

DISTRIBUTION = "phasewake"
# Shown when the project's own metadata cannot be read (a source tree that is not installed).
FALLBACK_DEPENDENCIES = ("numpy", "scipy", "mdtraj", "h5py", "matplotlib", "PySide6-Essentials", "pyqtgraph")


@dataclass(frozen=True)
class Licence:
    """A dependency with its installed version and licence, as its metadata states them."""

    name: str
    version: str
    licence: str
    field: str  # "License-Expression", "License", "classifier" or "" (not stated)


def _requirement_name(req: str) -> str:
    return re.split(r"[\s;<>=!~\[(]", req.strip(), maxsplit=1)[0]


def runtime_dependencies() -> list[str]:
    """The names of phasewake's runtime requirements (no extras), from its installed metadata."""
    from importlib import metadata

    try:
        reqs = metadata.requires(DISTRIBUTION) or []
    except metadata.PackageNotFoundError:
        return list(FALLBACK_DEPENDENCIES)
    return [_requirement_name(r) for r in reqs if "extra ==" not in r]


def licence_of(name: str) -> Licence:
    """Version and licence of an installed distribution: License-Expression, else a short License field,
    else the licence classifiers; 'not installed' or 'not stated' otherwise."""
    from importlib import metadata

    try:
        md = metadata.metadata(name)
        version = metadata.version(name)
    except metadata.PackageNotFoundError:
        return Licence(name, "", "not installed", "")
    expr = (md.get("License-Expression") or "").strip()
    if expr:
        return Licence(name, version, expr, "License-Expression")
    text = (md.get("License") or "").strip()
    if text and "\n" not in text and len(text) <= 80:
        return Licence(name, version, text, "License")
    classifiers = [c.split("::")[-1].strip() for c in md.get_all("Classifier") or [] if c.startswith("License ::")]
    if classifiers:
        return Licence(name, version, "; ".join(classifiers), "classifier")
    if text:
        return Licence(name, version, text.splitlines()[0].strip()[:80] + " (see the package)", "License")
    return Licence(name, version, "not stated in its metadata", "")


def dependency_licences() -> list[Licence]:
    """Licences of the runtime dependencies (and of shiboken6, which PySide6 needs)."""
    names = runtime_dependencies()
    if any(n.lower().startswith("pyside6") for n in names) and "shiboken6" not in names:
        names.append("shiboken6")
    return [licence_of(n) for n in names]


def version() -> str:
    from phasewake.core import __version__

    return str(__version__)


def about_html() -> str:
    """The About box: version, licences of the dependencies, how to cite the methods, the caution."""
    from phasewake.core.analyses.verdicts import HEURISTIC_NOTE

    rows = "".join(f"<tr><td>{html.escape(d.name)}</td><td>{html.escape(d.version)}</td>"
                   f"<td>{html.escape(d.licence)}</td></tr>" for d in dependency_licences())
    cites = "".join(f"<li>{html.escape(what)}: {html.escape(ref)}</li>" for what, ref in guide_text.CITATIONS)
    return (f"<h2>phasewake {html.escape(version())}</h2>"
            "<p>Inspect finished molecular-dynamics runs: energy conservation and time step, kinetic "
            "temperature, phase space, time correlations, sampling and barrier crossings.</p>"
            "<h3>Dependencies and their licences</h3>"
            "<p>As stated by the installed packages' own metadata.</p>"
            "<table border='1' cellpadding='3' cellspacing='0'><tr><th>package</th><th>version</th>"
            f"<th>licence</th></tr>{rows}</table>"
            "<h3>How to cite the methods</h3>"
            "<p>When you publish numbers phasewake computed, cite the papers of the methods you used "
            "(each figure caption and explanation names its method):</p>"
            f"<ul>{cites}</ul>"
            f"<p><i>{html.escape(HEURISTIC_NOTE)}</i></p>")


class TextDialog(QtWidgets.QDialog):
    """A non-modal dialog with an HTML text (QTextBrowser) and a close button."""

    def __init__(self, title: str, text: str, parent: QtWidgets.QWidget | None = None, *,
                 button: str = "Close", size: tuple[int, int] = (720, 640)) -> None:
        super().__init__(parent)
        self.setWindowTitle(title)
        self.browser = QtWidgets.QTextBrowser()
        self.browser.setOpenExternalLinks(False)
        self.browser.setHtml(text)
        self.close_button = QtWidgets.QPushButton(button)
        self.close_button.setDefault(True)
        self.close_button.clicked.connect(self.close)
        lay = QtWidgets.QVBoxLayout(self)
        lay.addWidget(self.browser, 1)
        lay.addWidget(self.close_button, 0, QtCore.Qt.AlignmentFlag.AlignRight)
        self.setModal(False)
        self.resize(*size)


def short_guide(parent: QtWidgets.QWidget | None = None) -> TextDialog:
    return TextDialog("phasewake: a short guide", guide_text.SHORT_GUIDE, parent, button="Got it",
                      size=(560, 520))


def user_guide(parent: QtWidgets.QWidget | None = None) -> TextDialog:
    return TextDialog("phasewake user guide", guide_text.user_guide_html(), parent, size=(780, 720))


def about(parent: QtWidgets.QWidget | None = None) -> TextDialog:
    return TextDialog("About phasewake", about_html(), parent, size=(760, 680))


__all__ = ["Licence", "TextDialog", "about", "about_html", "dependency_licences", "licence_of",
           "runtime_dependencies", "short_guide", "user_guide"]
