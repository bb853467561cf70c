"""How many threads a numpy/BLAS kernel may use right now without competing with other work.

numpy's loops and BLAS release the GIL, so two parts of a large reduction can run on two cores. On a
shared machine a second thread only helps when a core is idle; when every core is busy it competes with
the other work and can be slower (measured on a shared 2-core machine: no gain at load 2-3.5). The
load average is a poor guide here because it counts this process's own recent work and lags by a
minute; the instantaneous number of runnable tasks (Linux ``/proc/loadavg``, 4th field) is used instead.
Threads change only the speed, never the numbers (the kernels that use this add in a fixed order).
"""

from __future__ import annotations

import os

MAX_THREADS = 2  # the kernels split into at most this many parts


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the OS reports it)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def spare_cores(loadavg_path: str = "/proc/loadavg") -> int:
    """Cores not running anything right now besides the calling thread (0 when unknown).

    From the runnable-task count of ``/proc/loadavg`` (which includes the caller itself).
    """
    try:
        with open(loadavg_path, encoding="ascii") as fh:
            running = int(fh.read().split()[3].split("/")[0])
    except (OSError, ValueError, IndexError):
        return 0
    return max(0, available_cores() - max(1, running))


def kernel_threads(override: int | None = None, *, limit: int = MAX_THREADS,
                   loadavg_path: str = "/proc/loadavg") -> int:
    """Threads for one large kernel call: ``override`` when given, else 1 + the spare cores, at most ``limit``."""
    if override is not None:
        return max(1, int(override))
    return max(1, min(int(limit), 1 + spare_cores(loadavg_path)))
