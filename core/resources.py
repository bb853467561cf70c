"""Memory checks made before an analysis starts, so a user hears "needs 28 GB, 12 GB available"
instead of meeting a crash or a swapping machine half-way through.
"""

from __future__ import annotations

import os
from pathlib import Path

from phasewake.core.errors import ResourceError

# Leave room for the rest of the process and the system (common practice: never plan on all of it).
USABLE_FRACTION = 0.8


def available_memory_bytes() -> int | None:
    """Memory the system can give without swapping (Linux MemAvailable), or None when unknown."""
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def require_memory(n_bytes: float, *, what: str, hint: str = "", path: str | Path | None = None,
                   available: int | None = None) -> None:
    """Raise ResourceError when ``what`` would need more than the usable part of available memory."""
    avail = available_memory_bytes() if available is None else available
    if avail is None:
        return
    if n_bytes > USABLE_FRACTION * avail:
        text = (f"{what} needs about {n_bytes / 1e9:.1f} GB of memory; {avail / 1e9:.1f} GB is available "
                f"(at most {USABLE_FRACTION:.0%} of it is used)")
        raise ResourceError(text + (f"; {hint}" if hint else ""), path=path)
