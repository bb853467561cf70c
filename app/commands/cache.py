"""`phasewake cache`: where the result cache is, how big, and clearing it.

The cache keeps analysis results (HDF5 files) so looking at the same run again is instant. It lives in
``PHASEWAKE_CACHE_DIR`` or ``~/.cache/phasewake``, never beside your data; ``PHASEWAKE_NO_CACHE=1`` turns
it off. What is cached today: coordinate series (``phasewake coords`` without ``--no-cache``, and the
window's Phase space / Crossings / Landscape panels), keyed by the input files' identity (a changed or
touched file is a miss) and the settings, time window included.
"""

from __future__ import annotations

import argparse
import sys

from phasewake.app.common import print_json


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--clear", action="store_true", help="remove every cached result")
    parser.add_argument("--json", action="store_true", help="print JSON")


def run(args: argparse.Namespace) -> int:
    from phasewake.core.cache import ResultCache

    cache = ResultCache()
    removed = cache.clear() if args.clear else None
    info = cache.info()
    if args.json:
        print_json({"folder": str(info.folder), "entries": info.entries, "size_bytes": info.size_bytes,
                    "enabled": info.enabled, "removed": removed})
        return 0
    if removed is not None:
        sys.stdout.write(f"removed {removed} cached results from {info.folder}\n")
    sys.stdout.write(f"cache folder: {info.folder}\nentries: {info.entries}\n"
                     f"size: {info.size_bytes / 1e6:.1f} MB\nenabled: {'yes' if info.enabled else 'no (PHASEWAKE_NO_CACHE)'}\n")
    return 0
