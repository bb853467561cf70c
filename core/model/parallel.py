"""Frame ranges in parallel: one frame pass cut into ranges, each read in a worker process, merged in order.

XTC and TRR are decode-bound (decompressing a frame costs 12-30x reading its bytes) and mdtraj decodes in
one thread, so a pass over them is as fast as one core. Here a pass over frames [start, stop) is cut into
consecutive ranges at frame boundaries (every frame of an XTC/TRR with its offsets, of a DCD, NetCDF or
H5MD is a seekable point), aligned to the chunk size (the chunk setting of :mod:`phasewake.core.settings`,
handed to every range) so a consumer that works in whole chunks sees the same chunks as the serial pass.
Each range runs the consumers in a worker process:

* a run whose frame source is *portable* (XTC and TRR: a path, the frame offsets and the clock; and
  wrappers over them) travels to the worker as it is, without its topology and energies
  (:func:`travelling`): the worker opens nothing but the file's frames;
* any other run is opened again in the worker from its files and options (:class:`RunFiles`; nothing
  open is pickled), kept for the next range it gets; the parent's parsed topologies go along once per
  worker, so a 20,000-atom PDB is not parsed again in every process;
* the consumers, built in the parent from the parent's run, travel unprepared; the worker prepares them
  for its range, feeds them every chunk (:func:`phasewake.core.model.framepass.feed`) and sends them
  back with their partial state;
* the parent folds them in frame order with ``consumer.merge(later)`` and calls ``finish()`` once, so the
  result is the serial pass's (counts exactly, sums to floating-point rounding).

Progress of every worker is summed into the usual :class:`~phasewake.core.progress.Progress` records (a
shared array of frames done per range), so the command line's bar and the window's show it and their
cancel (Ctrl-C, the window's button) stops every worker at its next chunk. A worker that meets a damaged
frame fails the whole pass with the same error the serial pass raises (file and frame named); the others
are told to stop and nothing is returned.

Workers ignore SIGINT: Ctrl-C reaches the whole process group, and the parent alone decides (through
:mod:`phasewake.core.interrupts`) to stop them, so no worker prints a traceback.

The same ranges go to a running Dask scheduler with :func:`phasewake.core.model.cluster.cluster_pass`
(``--scheduler``).
"""

from __future__ import annotations

import contextlib
import os
import pickle
import signal
import weakref
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import AnalysisError, Cancelled, InputError, PhasewakeError
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

# Formats whose frames cost far more to decode than to read: a pass over them gains from more processes.
DECODE_BOUND_SUFFIXES = (".xtc", ".trr", ".dcd")
WORKERS_ENV = "PHASEWAKE_WORKERS"
_workers: int | None = None  # set_workers (command line --workers); None: the environment, else automatic
_START_METHOD = "forkserver"  # never "fork": a forked copy of a process with threads (Qt, BLAS) can hang


# ----------------------------------------------------------------------------------------------- settings


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):  # not on Linux
        return max(1, os.cpu_count() or 1)


def set_workers(n: int | None) -> None:
    """Worker processes for frame passes in this process (None: ``PHASEWAKE_WORKERS``, else automatic).

    Asking for more than one starts, in the background, the server the workers are forked from
    (:func:`warm_up`), so its start overlaps the opening of the run."""
    if n is not None and int(n) < 1:
        raise InputError(f"the number of workers must be 1 or more, not {n}")
    global _workers
    _workers = None if n is None else int(n)
    if (_workers if _workers is not None else _env_workers() or 1) > 1:
        warm_up()


def _context() -> Any:
    """The multiprocessing context of the workers (their server preloads what every worker imports)."""
    import multiprocessing as mp

    ctx = mp.get_context(_START_METHOD)
    if _START_METHOD == "forkserver":  # workers forked from a server that imported these once
        ctx.set_forkserver_preload(["numpy", "mdtraj", "phasewake.core.model.parallel",
                                    "phasewake.core.model.framepass", "phasewake.core.readers"])
    return ctx


def warm_up() -> None:
    """Start the workers' fork server in a background thread and return at once.

    The server imports numpy, mdtraj and phasewake's readers once (0.7-1 s on this machine); started
    while the command line opens the run (parsing a large PDB takes as long), the first pass's workers
    are then forked from a ready server instead of waiting for it. Nothing is started twice: the pool
    waits on the same server (multiprocessing holds a lock around its start)."""
    import threading

    if _START_METHOD != "forkserver":
        return

    def start() -> None:
        from multiprocessing import forkserver

        _context()
        with contextlib.suppress(Exception):  # a server that cannot start now fails the pool later, named
            forkserver.ensure_running()

    threading.Thread(target=start, name="phasewake-worker-server", daemon=True).start()


def _env_workers() -> int | None:
    text = os.environ.get(WORKERS_ENV, "").strip()
    if not text:
        return None
    try:
        value = int(text)
    except ValueError:
        return None
    return value if value >= 1 else None


def decode_bound(run: Run) -> bool:
    """Whether the run's frames come from a decode-bound format (XTC, TRR, DCD)."""
    frames: Any = run.frames
    for _ in range(4):  # through wrappers (velocities by differences, a window of frames, ...)
        if frames is None or getattr(frames, "path", None) is not None:
            break
        frames = getattr(frames, "inner", None)
    path = getattr(frames, "path", None) or run.metadata.sources.get("positions")
    return path is not None and Path(str(path)).suffix.lower() in DECODE_BOUND_SUFFIXES


def workers_for(run: Run) -> int:
    """Worker processes a frame pass over ``run`` uses: :func:`set_workers`, else ``PHASEWAKE_WORKERS``,
    else the usable cores for a decode-bound format and 1 for the others (an H5MD or mdtraj-HDF5 pass is
    bound by memory bandwidth: more processes only compete for it). Never more than the frames."""
    n = _workers if _workers is not None else _env_workers()
    if n is None:
        n = usable_cores() if decode_bound(run) else 1
    return max(1, min(int(n), max(1, run.n_frames)))


# A pass reading fewer atom-frames than this stays in one process unless workers are asked for: starting
# the workers (~0.5 s) would cost more than they save (20,000 atoms x 1,000 XTC frames decode in ~2 s).
MIN_AUTO_ATOM_FRAMES = 20_000_000


def parallel_wanted(run: Run, consumers: Mapping[str, Any], start: int, stop: int,
                    workers: int | None = None) -> bool:
    """Whether :func:`~phasewake.core.model.framepass.run_pass` should go through :func:`ranges_pass`:
    more than one worker (asked for, or automatic on a large decode-bound pass), consumers that merge,
    and files to open again."""
    if not mergeable(consumers) or not (run.paths or id(run) in _files_of) or workers == 1:
        return False
    if _on_cluster():
        return True
    asked = workers if workers is not None else (_workers if _workers is not None else _env_workers())
    n = workers_for(run) if asked is None else min(int(asked), max(1, stop - start))
    if n <= 1:
        return False
    if asked is None:
        atoms = [c.atoms for c in consumers.values()]
        n_read = run.n_atoms if any(a is None for a in atoms) else len(set().union(*map(set, atoms)))
        return (stop - start) * n_read >= MIN_AUTO_ATOM_FRAMES
    return True


def _on_cluster() -> bool:
    from phasewake.core.model import cluster

    return cluster.scheduler() is not None


# ------------------------------------------------------------------------------------------ the run's files


@dataclass(frozen=True)
class RunFiles:
    """How to open a run again in another process: its files and :func:`open_run` keywords.

    Only plain values (paths as text, numbers, mappings of them): no open file, no parsed topology.
    """

    paths: tuple[str, ...]
    topology: str | None = None
    options: Mapping[str, Any] = field(default_factory=dict)

    def open(self) -> Run:
        from phasewake.core.readers import open_run

        return open_run(list(self.paths), topology=self.topology, **dict(self.options))

    def key(self) -> bytes:
        return pickle.dumps((self.paths, self.topology, sorted(dict(self.options).items())))


_files_of: dict[int, RunFiles] = {}


def remember_files(run: Run, files: RunFiles) -> Run:
    """Note how ``run`` was opened (the command line does, with the options given), for the workers."""
    key = id(run)
    _files_of[key] = files
    weakref.finalize(run, _files_of.pop, key, None)
    return run


def files_of(run: Run) -> RunFiles:
    """The :class:`RunFiles` noted for ``run``, else its paths (a trajectory with its topology, an H5MD
    file: enough to read the same frames again)."""
    got = _files_of.get(id(run))
    if got is not None:
        return got
    if not run.paths:
        raise AnalysisError("the run has no files to read in another process")
    return RunFiles(paths=tuple(str(p) for p in run.paths))


# ---------------------------------------------------------------------------------------------- the ranges


def cut_ranges(start: int, stop: int, parts: int, *, align: int = 1) -> list[tuple[int, int]]:
    """Cut frames [start, stop) into at most ``parts`` consecutive non-empty ranges of near-equal length,
    each boundary a multiple of ``align`` frames after ``start`` (so blocks of ``align`` frames are the
    serial pass's blocks). Fewer ranges when there are fewer blocks than parts."""
    n = int(stop) - int(start)
    if n <= 0:
        raise AnalysisError(f"empty frame range {start}:{stop}")
    align = max(1, int(align))
    blocks = -(-n // align)
    parts = max(1, min(int(parts), blocks))
    edges = [int(start) + min(n, (blocks * k // parts) * align) for k in range(parts + 1)]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def mergeable(consumers: Mapping[str, Any]) -> bool:
    """Whether every consumer can fold a later consumer's partial state into its own (``merge``)."""
    return all(callable(getattr(c, "merge", None)) for c in consumers.values())


# A partial state larger than this goes back from a worker once, not once per range (a PCA's covariance).
LARGE_STATE_BYTES = 8 << 20


def ranges_per_worker(consumers: Mapping[str, Any]) -> int:
    """Frame ranges per worker: 2, so a worker that finishes early takes another's share, unless the
    consumers' partial states are large (``state_bytes``, the exact PCA's d x d sums): then 1, since
    every range's state is pickled back to the parent and added there (2 x 72 MB per worker for a PCA
    of 1,000 atoms cost more than the balance saves)."""
    size = sum(int(getattr(c, "state_bytes", 0)) for c in consumers.values())
    return 1 if size > LARGE_STATE_BYTES else 2


def before_parts(run: Run, consumers: Mapping[str, Any], start: int) -> None:
    """Fix now what a serial pass takes from its first frame (the PCA's superposition reference), so
    consumers fed different ranges share it and can be merged."""
    for consumer in consumers.values():
        first = getattr(consumer, "use_first_frame_of", None)
        if callable(first):
            first(run, start)


def merge_in_order(parts: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """Fold the consumers of consecutive ranges into the first range's, in frame order."""
    merged = dict(parts[0])
    for later in parts[1:]:
        for name, consumer in merged.items():
            consumer.merge(later[name])
    return merged


# ------------------------------------------------------------------------------------ failures from workers


class _Failure(Exception):
    """A phasewake error raised in a worker, carried back whole (its class and attributes): the parent
    raises the same error the serial pass would (``TooShortError(what, have=, need=)`` and the like do
    not survive plain pickling)."""

    def __init__(self, cls: type[BaseException], text: str, state: dict[str, Any]) -> None:
        super().__init__(text)
        self.cls, self.text, self.state = cls, text, state

    def __reduce__(self) -> tuple[Any, ...]:
        return (_Failure, (self.cls, self.text, self.state))

    def rebuild(self) -> BaseException:
        exc = self.cls.__new__(self.cls)
        Exception.__init__(exc, self.text)
        exc.__dict__.update(self.state)
        return exc


def carry(exc: PhasewakeError) -> _Failure:
    return _Failure(type(exc), str(exc), dict(exc.__dict__))


def reraise(exc: BaseException) -> None:
    """Raise what a worker raised: a carried phasewake error as itself, anything else unchanged."""
    if isinstance(exc, _Failure):
        raise exc.rebuild() from None
    raise exc


# ------------------------------------------------------------------------------------------------ the worker

_worker_state: dict[str, Any] = {}


def _init_worker(done: Any, stop: Any, chunk_mb: float | None, topologies: bytes) -> None:
    """Runs once in each worker process."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to act on (module docstring)
    from phasewake.core.settings import set_chunk_budget_mb

    set_chunk_budget_mb(chunk_mb)
    set_workers(1)  # a worker's own passes stay in it: no pools within pools
    _worker_state.update(done=done, stop=stop, runs={})
    if topologies:
        from phasewake.core.readers.trajectory import seed_topologies

        seed_topologies(pickle.loads(topologies))


def opened(files: RunFiles, runs: dict[bytes, Any]) -> Run:
    """The run of ``files``, opened once per worker process."""
    key = files.key()
    if key not in runs:
        runs.clear()  # one run at a time: a replica ensemble moves on from run to run
        runs[key] = files.open()
    return runs[key]


def travelling(run: Run, files: RunFiles) -> Run | RunFiles:
    """What a worker process gets to read ``run``'s frames: the run itself, without its topology, energies
    and warnings (a few bytes per frame and atom), when its frame source is portable; else ``files``, to
    open it again there."""
    import dataclasses

    if run.frames is not None and getattr(run.frames, "portable", False):
        return dataclasses.replace(run, topology=None, energies=None, warnings=[])
    return files


def worker_run(got: Run | RunFiles) -> Run:
    """The run a worker reads: as it travelled (:func:`travelling`), or opened from its files once."""
    if isinstance(got, RunFiles):
        return opened(got, _worker_state.setdefault("runs", {}))
    return got


def read_range(run: Run, consumers: Mapping[str, Any], start: int, stop: int, chunks: tuple[int, float],
               tick: Callable[[int], None]) -> dict[str, Any]:
    """Feed frames [start, stop) of ``run`` to ``consumers`` in the parent's chunks (``chunks``: its
    :func:`~phasewake.core.settings.chunk_setting`); ``tick(frames done)`` after every chunk (it raises to
    stop). Returns the consumers with their partial state."""
    from phasewake.core.model.framepass import feed
    from phasewake.core.settings import chunking

    with chunking(frames=chunks[0], mb=chunks[1]):  # the parent's (a pool may outlive a change of it)
        for n in feed(run, consumers, start=start, stop=stop):
            tick(n)
    return dict(consumers)


def _range_task(index: int, files: Run | RunFiles, consumers: Mapping[str, Any], start: int, stop: int,
                chunks: tuple[int, float]) -> dict[str, Any]:
    done, stop_event = _worker_state["done"], _worker_state["stop"]

    def tick(n: int) -> None:
        done[index] = n
        if stop_event.is_set():
            raise Cancelled()

    try:
        if stop_event.is_set():
            raise Cancelled()
        return read_range(worker_run(files), consumers, start, stop, chunks, tick)
    except PhasewakeError as exc:
        raise carry(exc) from None


# ------------------------------------------------------------------------------------------------ the parent


def topology_seed(run: Run) -> bytes:
    """The parent's parsed topologies of ``run``'s files, pickled once for the workers (b"" if none)."""
    from phasewake.core.readers.trajectory import topologies_for

    found = topologies_for(run.paths)
    return pickle.dumps(found) if found else b""


@contextlib.contextmanager
def _without_main() -> Iterator[None]:
    """Start processes that do not run the caller's main script again.

    Workers run only phasewake's own functions, found by module name, so they need nothing from
    ``__main__``; multiprocessing would still run a script's top level in each of them (as
    ``__mp_main__``), and a script without the ``if __name__ == "__main__":`` guard would then start
    workers from its workers and fail."""
    import multiprocessing.spawn as spawn

    real = spawn.get_preparation_data

    def prepared(name: str) -> dict[str, Any]:
        data = real(name)
        data.pop("init_main_from_path", None)
        data.pop("init_main_from_name", None)
        return data

    spawn.get_preparation_data = prepared  # type: ignore[assignment]
    try:
        yield
    finally:
        spawn.get_preparation_data = real  # type: ignore[assignment]


class ProcessRanges:
    """A pool of worker processes for one pass (or one ensemble): shared progress counters, a stop flag.

    ``with ProcessRanges(workers, n_tasks, seed) as pool: fut = pool.submit(fn, *args)``; leaving the
    block sets the stop flag and waits for the workers (each stops at its next chunk).
    """

    def __init__(self, workers: int, n_tasks: int, topologies: bytes = b"") -> None:
        from concurrent.futures import ProcessPoolExecutor

        from phasewake.core.settings import chunk_budget_mb

        ctx = _context()
        self.done = ctx.Array("q", max(1, n_tasks), lock=False)
        self.stop = ctx.Event()
        self.pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                                        initargs=(self.done, self.stop, chunk_budget_mb(), topologies))
        with _without_main():  # every worker starts here (one per submit while none is idle)
            for _ in range(workers):
                self.pool.submit(int)

    def __enter__(self) -> ProcessRanges:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def submit(self, fn: Callable[..., Any], *args: Any) -> Any:
        return self.pool.submit(fn, *args)

    def frames_done(self) -> int:
        return int(sum(self.done))

    def close(self) -> None:
        self.stop.set()
        self.pool.shutdown(wait=True, cancel_futures=True)


def follow(futures: Sequence[Any], frames_done: Callable[[], float], total: float, label: str,
           *, poll_s: float = 0.1) -> Iterator[Progress]:
    """Progress records until every future is done; the first failure (in submission order among those
    finished) is raised at once, as the worker raised it."""
    from concurrent.futures import FIRST_COMPLETED, wait

    pending = set(futures)
    while pending:
        finished, pending = wait(pending, timeout=poll_s, return_when=FIRST_COMPLETED)
        for f in [f for f in futures if f in finished]:
            exc = f.exception()
            if exc is not None:
                reraise(exc)
        yield Progress(frames_done(), total, label)


def ranges_pass(run: Run, consumers: Mapping[str, Any], *, start: int = 0, stop: int | None = None,
                workers: int | None = None, files: RunFiles | None = None) -> Work[dict[str, Any]]:
    """:func:`~phasewake.core.model.framepass.run_pass` over ``workers`` processes (module docstring).

    Parameters
    ----------
    run : Run
        The parent's run (its frame count and topology; its frames are not read here).
    consumers : mapping name -> consumer with ``merge``
        Built from ``run``; unprepared. They must pickle (no open file in their state).
    start, stop : int
        Frame range (``stop`` None: to the end).
    workers : int, optional
        Default :func:`workers_for`. With 1, or consumers without ``merge``, the serial pass runs here.
    files : RunFiles, optional
        How the workers open the run (default :func:`files_of`).

    Returns
    -------
    A generator yielding :class:`Progress` and returning ``{name: consumer.finish()}``, equal to the
    serial pass's.
    """
    from phasewake.core.model.framepass import frame_range, run_pass
    from phasewake.core.settings import chunk_setting

    start_, stop_ = frame_range(run, start, stop)
    if _on_cluster() and mergeable(consumers) and workers != 1:
        from phasewake.core.model.cluster import cluster_pass

        return (yield from cluster_pass(run, consumers, start=start_, stop=stop_, files=files))
    n = workers_for(run) if workers is None else max(1, int(workers))
    chunks = chunk_setting()  # every worker reads in the chunks a serial pass would (module docstring)
    ranges = cut_ranges(start_, stop_, ranges_per_worker(consumers) * n, align=chunks[0])
    if n <= 1 or len(ranges) < 2 or not mergeable(consumers):
        return (yield from run_pass(run, consumers, start=start_, stop=stop_, workers=1))
    files_ = travelling(run, files_of(run)) if files is None else files
    before_parts(run, consumers, start_)
    label = f"one pass over {n} workers: " + ", ".join(consumers)
    seed = topology_seed(run) if isinstance(files_, RunFiles) else b""
    with ProcessRanges(min(n, len(ranges)), len(ranges), seed) as pool:
        futures = [pool.submit(_range_task, i, files_, consumers, a, b, chunks)
                   for i, (a, b) in enumerate(ranges)]
        yield from follow(futures, pool.frames_done, stop_ - start_, label)
        parts = [f.result() for f in futures]
    merged = merge_in_order(parts)
    return {name: c.finish() for name, c in merged.items()}



# ------------------------------------------------------------------------------------------ many runs


def _call_task(index: int, fn: Callable[..., Any], args: Sequence[Any]) -> Any:
    done, stop_event = _worker_state["done"], _worker_state["stop"]
    if stop_event.is_set():
        raise Cancelled()
    try:
        out = fn(*args)
    except PhasewakeError as exc:
        raise carry(exc) from None
    done[index] = 1
    return out


def map_workers(fn: Callable[..., Any], arg_lists: Sequence[Sequence[Any]], *, workers: int | None = None,
                label: str = "runs") -> Work[list[Any]]:
    """``[fn(*args) for args in arg_lists]`` over worker processes (or the Dask cluster set with
    ``--scheduler``), results in the order given: one task per run of a replica ensemble.

    ``fn`` must be importable by name and its arguments picklable (a :class:`RunFiles` rather than a
    Run). With one worker (``workers``, else :func:`set_workers`, else ``PHASEWAKE_WORKERS``, else the
    usable cores) the calls run here, one after another. Progress counts finished tasks; cancel stops
    the tasks not yet started and waits for the running ones; the first failure is raised as raised.
    """
    total = len(arg_lists)
    if _on_cluster():
        from phasewake.core.model.cluster import cluster_map

        return (yield from cluster_map(fn, arg_lists, label=label))
    asked = workers if workers is not None else (_workers if _workers is not None else _env_workers())
    n = max(1, min(usable_cores() if asked is None else int(asked), total))
    if n <= 1:
        out = []
        for k, args in enumerate(arg_lists):
            yield Progress(k, total, label)
            out.append(fn(*args))
        yield Progress(total, total, label)
        return out
    with ProcessRanges(n, total) as pool:
        futures = [pool.submit(_call_task, k, fn, list(args)) for k, args in enumerate(arg_lists)]
        yield from follow(futures, pool.frames_done, total, f"{label} over {n} workers")
        return [f.result() for f in futures]


def frame_count(files: RunFiles) -> int:
    """The number of frames of the run of ``files`` (a small task: for tests and for a first look at an
    ensemble)."""
    return opened(files, {}).n_frames


# --------------------------------------------------------------------------------- replica ensembles


def spread_runs(runs: Sequence[Run]) -> bool:
    """Whether the runs of an ensemble go to workers, one task per run: more than one run, each with
    files to open again, and more than one worker (asked for, a Dask scheduler, or automatic when the
    runs together hold at least :data:`MIN_AUTO_ATOM_FRAMES` atom-frames)."""
    if len(runs) < 2 or not all(r.paths or id(r) in _files_of for r in runs):
        return False
    if _on_cluster():
        return True
    asked = _workers if _workers is not None else _env_workers()
    if asked is not None:
        return asked > 1
    return usable_cores() > 1 and sum(r.n_frames * r.n_atoms for r in runs) >= MIN_AUTO_ATOM_FRAMES


def coordinate_series(files: Run | RunFiles, spec: str, start: int, stop: int | None, chunks: tuple[int, float]
                      ) -> Any:
    """One replica's coordinate series (``compute_coordinates``, in the parent's chunks: ``chunks`` is its
    :func:`~phasewake.core.settings.chunk_setting`), in a worker: the run as it travelled
    (:func:`travelling`) or opened there from its files."""
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.progress import drive
    from phasewake.core.settings import chunking

    set_workers(1)  # on a Dask worker too: the replicas are the parallel part
    run = worker_run(files)
    with chunking(frames=chunks[0], mb=chunks[1]):
        return drive(compute_coordinates(run, [spec], start=start, stop=stop))[0]


def replica_coordinates(runs: Sequence[Run], spec: str, *, start: int = 0, stop: int | None = None
                        ) -> Work[list[Any]]:
    """The coordinate ``spec`` of every run, one worker task per run (:func:`map_workers`), in order."""
    from phasewake.core.settings import chunk_setting

    tasks = [(travelling(r, files_of(r)), spec, start, stop, chunk_setting()) for r in runs]
    return (yield from map_workers(coordinate_series, tasks, label=f"{spec} in {len(runs)} replicas"))
