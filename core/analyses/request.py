"""One request per analysis: a frozen settings object with a name.

The command line, the window, the report and the Python API build the same request from their own
inputs (options, widgets, report settings, keyword arguments) and hand it to the same place
(:func:`phasewake.core.store.cached.requested`): the cache key comes from ``name`` and
:meth:`AnalysisRequest.settings`, the progress label from ``label``, the result from
:meth:`AnalysisRequest.work`. Defaults, temperatures and Jacobians are decided in the request (or the
analysis it calls), never by a front end, so the same request gives the same numbers everywhere.

A request that reads frames can also offer a frame-pass consumer (:meth:`AnalysisRequest.consumer`) so
that several requests share one pass over the frames; :meth:`AnalysisRequest.after_pass` then turns the
consumer's finished value into the request's result (the identity for most).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

if TYPE_CHECKING:
    from phasewake.core.model.feeding import FrameConsumer
    from phasewake.core.model.run import Run
    from phasewake.core.progress import Work


def index_tuple(indices: Sequence[int] | np.ndarray | None) -> tuple[int, ...] | None:
    """Atom indices as a flat tuple of ints (None stays None), so that equal requests compare (and key) equal
    whatever sequence type the indices came in."""
    return None if indices is None else tuple(int(i) for i in np.asarray(indices).reshape(-1))


def index_groups(groups: Mapping[str, Sequence[int] | np.ndarray] | None) -> dict[str, tuple[int, ...]] | None:
    """Groups as {name: tuple of ints} (see :func:`index_tuple`); None for none or an empty mapping."""
    if groups is None:
        return None
    return {str(k): tuple(int(i) for i in np.asarray(v).reshape(-1)) for k, v in groups.items()} or None


@dataclass(frozen=True)
class AnalysisRequest:
    """Base of every analysis request (subclasses are frozen dataclasses of their settings)."""

    name: ClassVar[str] = ""  # the analysis name: part of the cache key, shown by `phasewake cache`
    label: ClassVar[str] = ""  # what progress says while it runs

    def settings(self) -> Mapping[str, Any]:
        """Every setting that changes the result (the cache key's part): every field but those declared
        ``field(compare=False)``, which say how to compute (a chunk size, a result handed over), not what."""
        return {f.name: getattr(self, f.name) for f in fields(self) if f.compare}

    def reference_paths(self, run: Run) -> tuple[str, ...]:
        """Files besides ``run``'s own that the result depends on (e.g. an rmsd reference)."""
        return ()

    def work(self, run: Run) -> Work[Any]:
        """The analysis of ``run`` as a progress generator returning the result."""
        raise NotImplementedError(f"{type(self).__name__} has no work")

    def consumer(self, run: Run) -> FrameConsumer | None:
        """A consumer for a shared frame pass, or None when this request cannot join one."""
        return None

    def after_pass(self, run: Run, finished: Any) -> Work[Any]:
        """The result from the consumer's finished value (another pass or the non-frame part)."""
        return finished
        yield  # pragma: no cover - makes this a generator
