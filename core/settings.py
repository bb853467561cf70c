"""Process-wide settings of how phasewake works (never of what it computes).

``threads``: how many threads one large numpy kernel may split into (numpy's loops release the GIL).
Default: every core this process may run on (``os.sched_getaffinity`` where the OS reports it, else
``os.cpu_count``). The command line sets it with ``--threads``; a script with :func:`set_threads`.
Results never depend on it: the kernels that split work add their parts in a fixed order.
"""

from __future__ import annotations

import os

_threads: int | None = None  # None: default_threads()


def default_threads() -> int:
    """Cores this process may run on (its CPU affinity where the OS reports it)."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def threads() -> int:
    """The thread count of one large kernel (the setting, else :func:`default_threads`)."""
    return _threads if _threads is not None else default_threads()


def set_threads(n: int | None) -> int | None:
    """Set the thread count (``None``: back to the default); returns the previous setting.

    Raises ValueError for a count below 1.
    """
    global _threads
    if n is not None and int(n) < 1:
        raise ValueError(f"the thread count must be at least 1, got {n}")
    previous = _threads
    _threads = None if n is None else int(n)
    return previous
