"""The one pass over the frames: every analysis that reads frames is a consumer of it.

A request that needs coordinates, the kinetic temperature per group and the VACF reads every frame once,
not once per analysis: :func:`run_pass` iterates ``run.frames.iter_chunks`` a single time (asking for
positions and velocities only if some consumer needs them, and for the union of the atoms they need) and
hands each chunk to every consumer. A single analysis (``compute_coordinates``, ``velocity.vacf``,
``projection.compute_pca``) is this pass with one consumer, as scikit-learn's ``fit`` is a loop of
``partial_fit``: there is no second loop over frames.

What a consumer is and the loop that feeds it are in :mod:`phasewake.core.model.feeding`; here the pass
is run in this process or, cut into frame ranges, over worker processes
(:mod:`phasewake.core.model.parallel`). Each consumer lives beside its analysis
(``analyses/coordinates.py``, ``analyses/group_kinetics.py``, ``analyses/velocity/``,
``analyses/projection.py``, ``analyses/audit_frames.py``, ...); this module is the engine only and imports
no analysis.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.feeding import FrameConsumer, frame_range, run_path, serial_pass
from phasewake.core.model.run import WindowFrames
from phasewake.core.progress import Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


def run_pass(run: Run, consumers: Mapping[str, FrameConsumer], *, start: int = 0, stop: int | None = None,
             stride: int = 1, label: str | None = None, workers: int | None = None) -> Work[dict[str, Any]]:
    """Read frames [start, stop) once and feed every chunk to every consumer.

    Parameters
    ----------
    run : Run
    consumers : mapping name -> :class:`FrameConsumer`
    start, stop, stride : int
        Frame range (``stop`` None: to the end) and step.
    label : str, optional
        Progress text (default "one pass: " and the names).
    workers : int, optional
        Worker processes reading frame ranges (``phasewake.core.model.parallel``); default: the
        ``--workers`` setting, else automatic (several only for a large pass over XTC, TRR or DCD).

    Returns
    -------
    A generator yielding :class:`Progress` and returning ``{name: consumer.finish()}``.
    """
    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=run_path(run))
    start_, stop_ = frame_range(run, start, stop)
    if workers != 1 and int(stride) == 1 and not isinstance(run.frames, WindowFrames):
        # (a worker opens the run again from its files: the whole run, not a window of it)
        from phasewake.core.model import parallel

        if parallel.parallel_wanted(run, consumers, start_, stop_, workers):
            return (yield from parallel.ranges_pass(run, consumers, start=start_, stop=stop_, workers=workers))
    return (yield from serial_pass(run, consumers, start=start_, stop=stop_, stride=stride, label=label))


def run_one(run: Run, consumer: FrameConsumer, *, label: str, start: int = 0, stop: int | None = None,
            stride: int = 1) -> Work[Any]:
    """The pass with one consumer: a single analysis (yields Progress, returns ``consumer.finish()``)."""
    got = yield from run_pass(run, {label: consumer}, start=start, stop=stop, stride=stride, label=label)
    return got[label]


class FramePass:
    """A builder for :func:`run_pass`: add consumers, then ``work()``.

    ::

        fp = FramePass(run, start=0, stop=None)
        fp.add("q", CoordinatesConsumer(run, ["distance(0, 1)"])).add("T", GroupTemperatureConsumer(run))
        results = drive(fp.work())   # {"q": [...], "T": GroupKinetics}
    """

    def __init__(self, run: Run, *, start: int = 0, stop: int | None = None) -> None:
        self.run = run
        self.start, self.stop = int(start), stop
        self.consumers: dict[str, FrameConsumer] = {}

    def add(self, name: str, consumer: FrameConsumer) -> FramePass:
        if name in self.consumers:
            raise AnalysisError(f"two analyses named {name!r} in one pass")
        self.consumers[name] = consumer
        return self

    def work(self) -> Work[dict[str, Any]]:
        return run_pass(self.run, self.consumers, start=self.start, stop=self.stop)
