"""Typed errors. Every error names the file (when there is one) and what is wrong with it.

Library code raises these; only the front ends decide how to show them (exit code 2 and one line on
the command line, a message box in the window).
"""

from __future__ import annotations

from pathlib import Path


class PhasewakeError(Exception):
    """Base class for every error phasewake reports to a user."""

    def __init__(self, message: str, *, path: str | Path | None = None) -> None:
        self.path = None if path is None else Path(path)
        self.problem = message
        super().__init__(f"{self.path}: {message}" if self.path is not None else message)


class InputError(PhasewakeError):
    """A file given by the user cannot be used."""


class FileMissingError(InputError):
    pass


class EmptyFileError(InputError):
    pass


class UnknownFormatError(InputError):
    pass


class CorruptFileError(InputError):
    """Truncated, bit-flipped or otherwise unreadable content."""


class TopologyMismatchError(InputError):
    """Topology and trajectory disagree (atom count, ...)."""


class MissingDataError(InputError):
    """The file is readable but lacks what was asked for (positions, velocities, an energy column)."""


class UnitsStyleUnknown(MissingDataError):
    """A LAMMPS dump whose units style nothing states (no log.lammps, no ITEM: UNITS): a front end may ask the
    user for it and open the run again with ``units_style``."""


class UnitError(PhasewakeError):
    """A unit string is missing, unknown or of the wrong dimension."""


class ImpossibleValueError(InputError):
    """A value no physical run can have: a zero or negative mass or box edge, a NaN or non-positive time
    step, a negative constraint count. Named with where it came from (the file, or the option given)."""


class EnergyTableError(InputError):
    """An energy table has ragged rows, text in numeric columns, duplicate or unknown headers."""


class TimeAxisError(InputError):
    """Time is non-monotonic, duplicated or otherwise unusable."""


class CoordinateSpecError(PhasewakeError):
    """A coordinate specification is malformed or out of range.

    ``position`` is the 0-based index of the offending character in ``spec``.
    """

    def __init__(self, message: str, *, spec: str = "", position: int | None = None) -> None:
        self.spec = spec
        self.position = position
        text = message
        if spec and position is not None:
            text = f"{message}\n  {spec}\n  {' ' * position}^"
        super().__init__(text)


class AnalysisError(PhasewakeError):
    """An analysis cannot run on the data given (too short, no variance, ...)."""


class TooShortError(AnalysisError):
    def __init__(self, what: str, *, have: int, need: int, path: str | Path | None = None) -> None:
        self.have = have
        self.need = need
        super().__init__(f"{what} needs at least {need} samples; the run has {have}", path=path)


class ResourceError(PhasewakeError):
    """An analysis would need more memory than is available."""


class SessionError(PhasewakeError):
    """A session file is corrupt or of an unknown version."""


class Cancelled(PhasewakeError):
    """The user cancelled a long computation."""

    def __init__(self, message: str = "cancelled") -> None:
        super().__init__(message)


class Caveat(str):
    """A warning for the user that later code acts on: shown as its text, like every warning, while
    ``code`` says what it is about, so code tests the code and never searches the words."""

    code: str

    def __new__(cls, text: str, code: str) -> Caveat:
        self = super().__new__(cls, text)
        self.code = code
        return self

    def __getnewargs__(self) -> tuple[str, str]:  # type: ignore[override]
        return str(self), self.code


#: Caveat codes: frames numbered 0, 1, 2 because the trajectory holds no times; table rows numbered so.
NO_FRAME_TIMES = "no frame times"
NUMBERED_ROWS = "numbered rows"


def has_caveat(warnings: list[str], code: str) -> bool:
    """Whether one of ``warnings`` is a :class:`Caveat` with ``code``."""
    return any(isinstance(w, Caveat) and w.code == code for w in warnings)
