"""Frame ranges and replicas on a running Dask cluster (``dask.distributed``): ``--scheduler ADDRESS``.

The work is the same as on one machine (:mod:`phasewake.core.model.parallel`): a pass is cut into
frame ranges, each range's consumers run where a worker reads the files, and the partial states come
back and are merged in frame order; a replica ensemble sends one task per run. Dask only carries the
tasks: phasewake starts no scheduler and no workers of its own. Someone starts them (README, "Beyond one
machine"); the workers must see the input files at the same paths and run the same phasewake version.

A run whose frame source is portable (XTC, TRR) travels to the workers as it is, without its topology
(:func:`phasewake.core.model.ranges.travelling`); any other is opened on the worker from its files,
and each worker keeps the last run it opened (a second range of the same run does not open it again).
Progress counts the frames of finished ranges (the ranges are smaller than on one machine, four per
worker, so the bar moves often); cancelling releases every task and asks running ones to stop at their
next chunk (a Dask ``Event`` named for the job).
"""

from __future__ import annotations

import socket
import time
import uuid
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit

from phasewake.core.errors import Cancelled, InputError, PhasewakeError
from phasewake.core.model import ranges
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

CONNECT_TIMEOUT_S = 5.0
RANGES_PER_WORKER = 4
_address: str | None = None  # set_scheduler (command line --scheduler)
_client: Any = None


def set_scheduler(address: str | None) -> None:
    """Send frame passes and replicas of this process to the Dask scheduler at ``address`` (None: none).

    Connects at once, so an address that cannot be reached is an :class:`InputError` (one line) before
    any file is read."""
    global _address, _client
    if _client is not None:
        _client.close()
        _client = None
    _address = None
    if address is None:
        return
    _client = connect(address)
    _address = address


def scheduler() -> str | None:
    """The scheduler address set for this process, or None."""
    return _address


def client() -> Any:
    return _client


def _probe(address: str, timeout_s: float) -> None:
    """A plain TCP connection to a ``tcp://host:port`` (or ``host:port``) address: an unreachable one fails
    here in one line, before a Dask client is built (whose failed start leaves noise at exit)."""
    text = address if "://" in address else "tcp://" + address
    parts = urlsplit(text)
    if parts.scheme != "tcp":
        return  # tls://, ucx://, ...: left to Dask
    try:
        host, port = parts.hostname, parts.port
    except ValueError:
        host, port = None, None
    if not host or port is None:
        raise InputError(f"--scheduler {address}: expected an address such as tcp://host:8786")
    try:
        with socket.create_connection((host, port), timeout=timeout_s):
            pass
    except OSError as exc:
        reason = "timed out" if isinstance(exc, TimeoutError) else (exc.strerror or str(exc))
        raise InputError(f"cannot reach the Dask scheduler at {address} ({reason}); is it running, "
                         "and is the address the one it printed?") from None


def connect(address: str, *, timeout_s: float = CONNECT_TIMEOUT_S) -> Any:
    """A ``distributed.Client`` for the scheduler at ``address`` (InputError when it cannot be reached)."""
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--scheduler needs the 'distributed' package (pip install distributed)") from None
    _probe(address, timeout_s)
    try:
        return Client(address, timeout=timeout_s, set_as_default=False)
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {address} ({exc})") from None


def n_workers(cl: Any) -> int:
    return max(1, len(cl.scheduler_info().get("workers", {})))


# ------------------------------------------------------------------------------------------ worker side

def _stop_check(job: str) -> Any:
    """A function that raises Cancelled once the job's stop event is set (asked at most twice a second)."""
    from distributed import Event

    event = Event(job)
    last = [0.0]

    def check() -> None:
        now = time.monotonic()
        if now - last[0] > 0.5:
            last[0] = now
            if event.is_set():
                raise Cancelled()

    return check


def range_task(job: str, files: Run | ranges.RunFiles, consumers: Mapping[str, Any], start: int, stop: int,
               chunks: tuple[int, float]) -> dict[str, Any]:
    """One frame range on a Dask worker (see :func:`phasewake.core.model.ranges.read_range`)."""
    check = _stop_check(job)
    try:
        run = ranges.worker_run(files)  # as it travelled, or opened once per worker from its files
        return ranges.read_range(run, consumers, start, stop, chunks, lambda n: check())
    except PhasewakeError as exc:
        raise ranges.carry(exc) from None


def call_task(job: str, fn: Any, args: Sequence[Any]) -> Any:
    """One replica (any picklable ``fn(*args)``) on a Dask worker; phasewake errors come back whole."""
    _stop_check(job)()
    try:
        return fn(*args)
    except PhasewakeError as exc:
        raise ranges.carry(exc) from None


# ------------------------------------------------------------------------------------------ client side


def _follow(cl: Any, job: str, futures: list[Any], weights: Sequence[float], total: float,
            label: str) -> Work[list[Any]]:
    """Progress until every future is done; the first failure raised as the worker raised it. Leaving
    early (cancel, failure) sets the job's stop event and releases every future."""
    from distributed import Event

    done = [False] * len(futures)
    try:
        while not all(done):
            time.sleep(0.1)  # futures are polled: distributed.wait wants a default client, which we never set
            for k, f in enumerate(futures):
                if not done[k] and f.done():
                    if f.status == "error":
                        ranges.reraise(f.exception())
                    done[k] = True
            yield Progress(sum(w for w, d in zip(weights, done) if d), total, label)
        return [f.result() for f in futures]
    finally:
        if not all(done):
            Event(job, client=cl).set()
            cl.cancel(futures)


def cluster_pass(run: Run, consumers: Mapping[str, Any], *, start: int, stop: int,
                 files: ranges.RunFiles | None = None, cl: Any = None) -> Work[dict[str, Any]]:
    """:func:`phasewake.core.model.parallel.ranges_pass` with the ranges run by Dask workers (in this
    process's chunks and chunk budget, :func:`phasewake.core.settings.chunk_setting`)."""
    from phasewake.core.settings import chunk_setting

    cl = cl if cl is not None else _client
    if cl is None:
        raise InputError("no Dask scheduler set (--scheduler ADDRESS)")
    files_ = ranges.travelling(run, ranges.files_of(run)) if files is None else files
    chunks = chunk_setting()
    cuts = ranges.cut_ranges(start, stop, RANGES_PER_WORKER * n_workers(cl), align=chunks[0])
    ranges.before_parts(run, consumers, start)
    job = f"phasewake-{uuid.uuid4().hex}"
    futures = [cl.submit(range_task, job, files_, consumers, a, b, chunks, pure=False)
               for a, b in cuts]
    label = f"one pass on the Dask cluster ({len(cuts)} ranges): " + ", ".join(consumers)
    parts = yield from _follow(cl, job, futures, [b - a for a, b in cuts], stop - start, label)
    merged = ranges.merge_in_order(parts)
    return {name: c.finish() for name, c in merged.items()}


def cluster_map(fn: Any, arg_lists: Sequence[Sequence[Any]], *, label: str, cl: Any = None) -> Work[list[Any]]:
    """``[fn(*args) for args in arg_lists]`` on the Dask workers, results in order (replica ensembles)."""
    cl = cl if cl is not None else _client
    if cl is None:
        raise InputError("no Dask scheduler set (--scheduler ADDRESS)")
    job = f"phasewake-{uuid.uuid4().hex}"
    futures = [cl.submit(call_task, job, fn, list(args), pure=False) for args in arg_lists]
    return (yield from _follow(cl, job, futures, [1.0] * len(futures), float(len(futures)), label))
