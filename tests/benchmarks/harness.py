"""Benchmark harness.

Each case runs in its own subprocess (so its peak memory is its own), measures a baseline and the
phasewake operation in the same process, and reports the ratio against the case's target. Absolute
times vary up to 2x on this shared machine; same-run ratios are stable to ~15%.

``python -m tests.benchmarks [--full] [--only NAME] [--output summary.json]``
"""

from __future__ import annotations

import json
import multiprocessing as mp
import platform
import resource
import tempfile
import time
import traceback
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any


@dataclass
class Outcome:
    name: str
    what: str
    baseline: str
    measured_s: float | None = None
    baseline_s: float | None = None
    ratio: float | None = None
    target: str = ""
    target_ratio: float | None = None  # pass when ratio <= target_ratio
    absolute_target_s: float | None = None  # pass when measured_s <= this
    met: bool | None = None
    peak_rss_mb: float | None = None
    sizes: dict[str, Any] = field(default_factory=dict)
    notes: str = ""
    error: str | None = None


CASES: dict[str, Callable[[bool, Path], Outcome]] = {}


def case(fn: Callable[[bool, Path], Outcome]) -> Callable[[bool, Path], Outcome]:
    CASES[fn.__name__] = fn
    return fn


def best_of(fn: Callable[[], Any], repeat: int = 3) -> float:
    """Minimum wall time of ``repeat`` calls (the least disturbed by other load)."""
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def finish(o: Outcome) -> Outcome:
    if o.measured_s is not None and o.baseline_s:
        o.ratio = o.measured_s / o.baseline_s
    checks = []
    if o.target_ratio is not None and o.ratio is not None:
        checks.append(o.ratio <= o.target_ratio)
    if o.absolute_target_s is not None and o.measured_s is not None:
        checks.append(o.measured_s <= o.absolute_target_s)
    o.met = all(checks) if checks else None
    return o


def _child(name: str, full: bool, workdir: str, q: Any) -> None:
    # One-time import costs (scipy.stats alone takes seconds on a loaded machine) are not analysis time.
    import h5py  # noqa: F401
    import mdtraj  # noqa: F401
    import scipy.fft  # noqa: F401
    import scipy.signal  # noqa: F401
    import scipy.stats  # noqa: F401

    from tests.benchmarks import cases, parallel_cases  # noqa: F401 - registers the cases in this process too

    try:
        out = CASES[name](full, Path(workdir))
    except Exception as exc:  # noqa: BLE001 - a failing case is reported, never hides the others
        out = Outcome(name=name, what="", baseline="", error=f"{type(exc).__name__}: {exc}\n"
                      + traceback.format_exc(limit=4))
    out.peak_rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    q.put(asdict(out))


def run_cases(names: list[str], *, full: bool, workdir: Path | None = None) -> list[dict[str, Any]]:
    import os

    from tests.benchmarks import cases, parallel_cases  # noqa: F401 - registers the cases

    ctx = mp.get_context("spawn")
    results = []
    with tempfile.TemporaryDirectory(prefix="phasewake-bench-", dir=workdir) as tmp:
        # the cases' result cache (the window case's panels fill it too) lives and dies with the work folder
        os.environ["PHASEWAKE_CACHE_DIR"] = str(Path(tmp) / "cache")
        for name in names or list(CASES):
            q = ctx.Queue()
            p = ctx.Process(target=_child, args=(name, full, tmp, q))
            p.start()
            res = q.get()
            p.join()
            results.append(res)
    return results


def machine() -> dict[str, Any]:
    import os

    return {"python": platform.python_version(), "machine": platform.machine(),
            "cpus": os.cpu_count(), "system": platform.system()}


def write_summary(results: list[dict[str, Any]], path: Path, *, full: bool) -> None:
    from phasewake.core.store.atomic import write_text

    write_text(path, json.dumps({"mode": "full" if full else "quick", "machine": machine(),
                                 "when_unix": time.time(), "results": results}, indent=2))


def table(results: list[dict[str, Any]]) -> str:
    lines = ["| case | measured | baseline | ratio | target | met | peak RSS |",
             "|---|---|---|---|---|---|---|"]
    for r in results:
        if r.get("error"):
            lines.append(f"| {r['name']} | error: {r['error'].splitlines()[0]} | | | | | |")
            continue
        ms = f"{r['measured_s']:.3f} s" if r["measured_s"] is not None else "-"
        bs = f"{r['baseline_s']:.3f} s ({r['baseline']})" if r["baseline_s"] is not None else r["baseline"]
        ratio = f"{r['ratio']:.2f}x" if r["ratio"] is not None else "-"
        met = {True: "yes", False: "NO", None: "-"}[r["met"]]
        lines.append(f"| {r['name']}: {r['what']} | {ms} | {bs} | {ratio} | {r['target']} | {met} | "
                     f"{r['peak_rss_mb']:.0f} MB |")
    return "\n".join(lines)
