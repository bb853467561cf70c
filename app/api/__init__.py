"""phasewake for notebooks and scripts (installed as the top-level package ``phasewake``).

>>> import phasewake as pw
>>> run = pw.open(pw.sample_path("dimer_nve.h5md"))        # the files your engine wrote
>>> result = pw.audit(run)                                  # verdicts with numbers, thresholds, sources
>>> q = pw.coordinates(run, "distance(0, 1)", momentum=True)
>>> fig = q.figure("phase.portrait")                        # a matplotlib Figure, as the window draws it

Every function runs the same analysis as the command line with the same settings, through the same
result cache (``cache=False`` to compute afresh), and takes an optional ``progress`` callable. Results
are frozen dataclasses with units in their field names or a ``unit`` field; the main ones have
``.to_dict()`` (JSON-ready) and ``.figure()``. Bad input raises the typed errors of
``phasewake.core.errors`` (``InputError`` and its kin), naming the file and the problem.
"""

from phasewake._analyses import (
    audit,
    coordinates,
    correlation,
    crossings,
    free_energy,
    pca,
    report,
    sampling,
    spectrum,
    vacf,
)
from phasewake._figures import figure
from phasewake._figures import install as _install_figures
from phasewake._runs import describe, open, sample_path
from phasewake.core import __version__
from phasewake.core.errors import AnalysisError, CoordinateSpecError, InputError, PhasewakeError

_install_figures()  # result.figure() draws with core.figures, which core.analyses may not import

__all__ = [
    "AnalysisError", "CoordinateSpecError", "InputError", "PhasewakeError", "__version__", "audit", "coordinates",
    "correlation", "crossings", "describe", "figure", "free_energy", "open", "pca", "report", "sample_path", "sampling",
    "spectrum", "vacf",
]
