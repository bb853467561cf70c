"""`phasewake cache`: where the result cache is, how big, what it holds, and clearing it.

The cache keeps analysis results (HDF5 files) so looking at the same run again is instant. It lives in
``PHASEWAKE_CACHE_DIR`` or ``~/.cache/phasewake``, never beside your data; ``PHASEWAKE_NO_CACHE=1`` turns
it off. What is cached: the audit (``phasewake audit``, the window's Energy panel), coordinate series
(``phasewake coords``, the Phase space / Crossings / Landscape panels), principal components, the VACF
and vibrational spectrum (Correlation panel), barrier crossings (``phasewake crossings``, the Crossings
panel) and what the report computes. Each is keyed by the input files' identity (a changed or touched
file is a miss) and every setting that changes the result, time window included. Commands that use it
take ``--no-cache`` to compute afresh without reading or writing it.

The folder carries a mark (``.phasewake-cache``) and ``--clear`` deletes only our own entries
(``*.pwcache`` files with our header) and our stale temporary files; a folder holding other files and
no mark is refused (exit 2) and left as it is.
"""

from __future__ import annotations

import argparse
import sys

from phasewake.app.common import print_json


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--clear", action="store_true", help="remove every cached result")
    parser.add_argument("--json", action="store_true", help="print JSON")


def _summary(entries: int, size_bytes: int, by_analysis: dict[str, int]) -> str:
    parts = ", ".join(f"{name} {n}" for name, n in sorted(by_analysis.items()))
    text = f"{entries} {'entry' if entries == 1 else 'entries'}, {size_bytes / 1e6:.1f} MB"
    return f"{text} ({parts})" if parts else text


def run(args: argparse.Namespace) -> int:
    from phasewake.core.store.cache import ResultCache

    cache = ResultCache()
    if cache.owned() is False:  # someone else's files and no mark of ours: touch nothing
        raise cache.refusal()
    removed = cache.clear() if args.clear else None
    info = cache.info()
    by_analysis = cache.entries_by_analysis()
    if args.json:
        print_json({"folder": str(info.folder), "entries": info.entries, "size_bytes": info.size_bytes,
                    "enabled": info.enabled, "removed": removed, "by_analysis": by_analysis,
                    "stale_temporary_files": info.temporaries})
        return 0
    if removed is not None:
        sys.stdout.write(f"removed {removed} cached results from {info.folder}\n")
    temps = (f"\n{info.temporaries} temporary file{'s' if info.temporaries != 1 else ''} left by interrupted "
             "writers (removed on the next write)") if info.temporaries else ""
    sys.stdout.write(f"cache folder: {info.folder}\n{_summary(info.entries, info.size_bytes, by_analysis)}{temps}\n"
                     f"enabled: {'yes' if info.enabled else 'no (PHASEWAKE_NO_CACHE)'}\n")
    return 0
