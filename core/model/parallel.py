"""Frame ranges in parallel: one frame pass cut into ranges, each read in a worker process, merged in order.

XTC and TRR are decode-bound (decompressing a frame costs 12-30x reading its bytes) and mdtraj decodes in
one thread, so a pass over them is as fast as one core. Here a pass over frames [start, stop) is cut into
consecutive ranges at frame boundaries (every frame of an XTC/TRR with its offsets, of a DCD, NetCDF or
H5MD is a seekable point), aligned to the chunk size (the chunk setting of :mod:`phasewake.core.settings`,
handed to every range) so a consumer that works in whole chunks sees the same chunks as the serial pass.
Each range runs the consumers in a worker process:

* a run whose frame source is *portable* (XTC and TRR: a path, the frame offsets and the clock; and
  wrappers over them) travels to the worker as it is, without its topology and energies
  (:func:`phasewake.core.model.ranges.travelling`): the worker opens nothing but the file's frames;
* any other run is opened again in the worker from its files and options
  (:class:`~phasewake.core.model.ranges.RunFiles`; nothing open is pickled), kept for the next range it
  gets; the parent's parsed topologies go along once per worker, so a 20,000-atom PDB is not parsed
  again in every process;
* the consumers, built in the parent from the parent's run, travel unprepared; the worker prepares them
  for its range, feeds them every chunk (:func:`phasewake.core.model.feeding.feed`) and sends them
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

What a range's work needs wherever it runs is in :mod:`phasewake.core.model.ranges`; the same ranges go
to a running Dask scheduler with :func:`phasewake.core.model.cluster.cluster_pass` (``--scheduler``).
"""

from __future__ import annotations

import contextlib
import os
import pickle
import signal
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import Cancelled, InputError, PhasewakeError
from phasewake.core.model.ranges import (
    RunFiles,
    before_parts,
    carry,
    cut_ranges,
    files_of,
    has_files,
    merge_in_order,
    mergeable,
    ranges_per_worker,
    read_range,
    reraise,
    travelling,
    worker_run,
)
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
    if not mergeable(consumers) or not has_files(run) or workers == 1:
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


# ------------------------------------------------------------------------------------------------ the worker

_worker_state: dict[str, Any] = {}  # in a worker process: the pool's progress counters and stop flag


def _init_worker(done: Any, stop: Any, chunk_mb: float | None, topologies: bytes) -> None:
    """Runs once in each worker process."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to act on (module docstring)
    from phasewake.core.settings import set_chunk_budget_mb

    set_chunk_budget_mb(chunk_mb)
    set_workers(1)  # a worker's own passes stay in it: no pools within pools
    _worker_state.update(done=done, stop=stop)
    if topologies:
        from phasewake.core.readers.trajectory import seed_topologies

        seed_topologies(pickle.loads(topologies))


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
    from phasewake.core.model.feeding import frame_range, serial_pass
    from phasewake.core.settings import chunk_setting

    start_, stop_ = frame_range(run, start, stop)
    if _on_cluster() and mergeable(consumers) and workers != 1:
        from phasewake.core.model.cluster import cluster_pass

        return (yield from cluster_pass(run, consumers, start=start_, stop=stop_, files=files))
    n = workers_for(run) if workers is None else max(1, int(workers))
    chunks = chunk_setting()  # every worker reads in the chunks a serial pass would (module docstring)
    ranges = cut_ranges(start_, stop_, ranges_per_worker(consumers) * n, align=chunks[0])
    if n <= 1 or len(ranges) < 2 or not mergeable(consumers):
        return (yield from serial_pass(run, consumers, start=start_, stop=stop_))
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


# --------------------------------------------------------------------------------- replica ensembles


def spread_runs(runs: Sequence[Run]) -> bool:
    """Whether the runs of an ensemble go to workers, one task per run: more than one run, each with
    files to open again, and more than one worker (asked for, a Dask scheduler, or automatic when the
    runs together hold at least :data:`MIN_AUTO_ATOM_FRAMES` atom-frames)."""
    if len(runs) < 2 or not all(has_files(r) for r in runs):
        return False
    if _on_cluster():
        return True
    asked = _workers if _workers is not None else _env_workers()
    if asked is not None:
        return asked > 1
    return usable_cores() > 1 and sum(r.n_frames * r.n_atoms for r in runs) >= MIN_AUTO_ATOM_FRAMES
