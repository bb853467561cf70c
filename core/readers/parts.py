"""A run written in parts: several trajectory files of one run joined in time order.

Engines restart from a checkpoint and write the rest of the run to a new file (GROMACS ``-noappend``:
``md.part0002.xtc``, repeating the checkpoint frame; AMBER ``prod1.nc prod2.nc``; LAMMPS dumps of each
``run``). Joining follows what the engine itself did on restart:

- parts are put in order of their first time (or first step, for LAMMPS dumps before their time step is
  known);
- where a later part starts before an earlier one ended (an overlap: the restart went back to a
  checkpoint), the later part's frames are kept and the earlier part's frames from that time on are
  dropped;
- gaps (a later part starting more than 1.5 typical frame spacings after the earlier one's last kept
  frame) are kept as they are and reported;
- parts with different atom counts are an error naming both files;
- parts whose clocks all restart (two parts starting at the same time: OpenMM reporters start each file
  at the report interval) are joined in the order of their names, each continuing the previous one's
  time, and said so.

What was joined, dropped and left open is in ``run.metadata.extra["parts"]``, ``["overlaps"]`` and
``["gaps"]`` (lines a user reads, with their times) and in the run's warnings.
"""

from __future__ import annotations

import re
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from phasewake.core.errors import TopologyMismatchError
from phasewake.core.model.run import FrameChunk, FrameRequest, FrameSource, Run, RunMetadata
from phasewake.core.readers.common import ClockedFrames


@dataclass(frozen=True)
class Part:
    """One file of a run: its frames, their clock and how many of its first frames are kept."""

    path: Path
    frames: FrameSource
    time: np.ndarray  # clock of every frame of the file (ps, or steps for LAMMPS dumps before finishing)
    n_keep: int  # frames 0 .. n_keep-1 are part of the joined run


class PartsFrames(ClockedFrames):
    """A FrameSource over the kept frames of several parts, one after the other."""

    def __init__(self, parts: Sequence[Part], time: np.ndarray) -> None:
        self.parts = [p for p in parts if p.n_keep > 0]
        self.n_frames = int(sum(p.n_keep for p in self.parts))
        self.n_atoms = int(self.parts[0].frames.n_atoms)
        self.has_velocities = all(p.frames.has_velocities for p in self.parts)
        self.velocities_estimated = any(p.frames.velocities_estimated for p in self.parts)
        self.has_box = all(p.frames.has_box for p in self.parts)
        self._starts = np.cumsum([0] + [p.n_keep for p in self.parts])
        self._time = np.asarray(time, dtype=np.float64)
        precisions = [getattr(p.frames, "positions_precision_nm", None) for p in self.parts]
        known = [x for x in precisions if x is not None]
        self.positions_precision_nm = max(known) if known else None
        self.positions_lossy = any(bool(getattr(p.frames, "positions_lossy", False)) for p in self.parts)
        self.portable = all(bool(getattr(p.frames, "portable", False)) for p in self.parts)
        # LAMMPS dumps: units and time step are applied to every part by lammps_dump.finish_run
        self.lammps = getattr(self.parts[0].frames, "lammps", None)

    # ---- LAMMPS parts (see lammps_dump.finish_run)
    @property
    def steps(self) -> np.ndarray:
        return np.concatenate([np.asarray(p.frames.steps)[: p.n_keep] for p in self.parts])  # type: ignore[attr-defined]

    def set_units(self, style: Any) -> None:
        for p in self.parts:
            p.frames.set_units(style)  # type: ignore[attr-defined]

    def dump_times(self) -> np.ndarray | None:
        out = []
        for p in self.parts:
            t = p.frames.dump_times()  # type: ignore[attr-defined]
            if t is None:
                return None
            out.append(t[: p.n_keep])
        return np.concatenate(out)

    # ---- frames
    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        want, stride = request.frames, request.stride
        for k, part in enumerate(self.parts):
            lo, hi = int(self._starts[k]), int(self._starts[k + 1])
            mine = want[(want >= lo) & (want < hi)]
            if mine.size == 0:
                continue
            for ch in part.frames.iter_chunks(**request.keywords(start=int(mine[0]) - lo, stop=int(mine[-1]) - lo + 1)):
                g = ch.start + lo
                idx = np.arange(g, g + ch.n_frames * stride, stride)[: ch.n_frames]
                yield FrameChunk(start=int(g), time_ps=self._time[idx], positions_nm=ch.positions_nm,
                                 velocities_nm_per_ps=ch.velocities_nm_per_ps, box_nm=ch.box_nm)


def natural_key(path: Path) -> list[Any]:
    """Sort key in which md.part0002 follows md, prod2 follows prod1 and prod10 follows prod9."""
    name = path.name.lower()
    m = re.search(r"\.part(\d+)(?=\.[^.]+$)", name)
    part = int(m.group(1)) if m else 1
    base = name[: m.start()] + name[m.end() :] if m else name
    return [int(t) if t.isdigit() else t for t in re.split(r"(\d+)", base)] + [part]


def join_runs(runs: Sequence[Run], *, clock: str = "ps") -> tuple[Run, list[str]]:
    """Join runs opened from the parts of one run (each with frames) in time order.

    ``clock`` names the unit of the runs' time axes in messages ("ps"; "step" for LAMMPS dumps before
    their time step is applied). Returns the joined run and warnings describing overlaps and gaps.
    """
    first = runs[0]
    for r in runs[1:]:
        if r.n_atoms != first.n_atoms:
            raise TopologyMismatchError(
                f"parts of one run must have the same atoms: {first.paths[0].name} has {first.n_atoms}, "
                f"{r.paths[0].name} has {r.n_atoms}", path=r.paths[0])
    numbered = any(r.metadata.extra.get("time_from") == "frame index" for r in runs)
    # parts whose clocks all restart (OpenMM reporters start each file at the report interval): their
    # times cannot order them; they follow their names and each continues the previous part's clock
    starts = [float(r.time_ps[0]) for r in runs]
    restarted = not numbered and len(set(starts)) < len(starts)
    numbered = numbered or restarted
    if numbered:
        order = sorted(runs, key=lambda r: natural_key(r.paths[0]))
    else:
        order = sorted(runs, key=lambda r: (float(r.time_ps[0]), natural_key(r.paths[0])))
    warnings: list[str] = []
    keep, overlaps = ([len(r.time_ps) for r in order], []) if numbered else _kept_frames(order, clock)
    pieces = [np.asarray(r.time_ps, dtype=np.float64)[:k] for r, k in zip(order, keep)]
    gaps: list[str] = []
    if restarted:
        time = _continued_clocks(pieces)
        warnings.append(f"the parts start at the same time ({_at(min(starts), clock)}): each file restarts the "
                        "clock (as OpenMM reporters do), so they are joined in the order of their file names "
                        f"({', '.join(r.paths[0].name for r in order)}), each continuing the previous one's "
                        "time; check that order")
    elif numbered:
        time = np.arange(sum(keep), dtype=np.float64)
        warnings.append("the parts hold no time axis: they are joined in the order of their file names "
                        f"({', '.join(r.paths[0].name for r in order)})")
    else:
        time = np.concatenate(pieces)
        gaps = _gaps(order, pieces, clock)
    parts = [Part(path=r.paths[0], frames=r.frames, time=np.asarray(r.time_ps), n_keep=k)  # type: ignore[arg-type]
             for r, k in zip(order, keep)]
    overlaps += [f"{p.path.name} is replaced entirely by later parts" for p in parts if p.n_keep == 0]
    frames = PartsFrames(parts, time)
    meta = _joined_metadata(order, parts, frames, numbered, clock, warnings)
    meta.extra["overlaps"] = list(meta.extra.get("overlaps", [])) + overlaps
    meta.extra["gaps"] = gaps
    warnings += overlaps + gaps
    for r in order:
        warnings.extend(r.warnings)
    top = next((r.topology for r in order if r.topology is not None), None)
    joined = Run(name=order[0].name, paths=tuple(dict.fromkeys(p for r in order for p in r.paths)),
                 topology=top, masses_amu=order[0].masses_amu, time_ps=time, frames=frames,
                 energies=order[0].energies, metadata=meta, warnings=list(dict.fromkeys(warnings)))
    return joined, warnings


def _kept_frames(order: Sequence[Run], clock: str) -> tuple[list[int], list[str]]:
    """Frames kept of each part in time order (those before the next part starts; a restart from an earlier
    checkpoint replaces the frames it repeats), and what was replaced."""
    keep = []
    overlaps = []
    for i, r in enumerate(order):
        t = np.asarray(r.time_ps, dtype=np.float64)
        if i == len(order) - 1:
            keep.append(t.size)
            continue
        later_start = min(float(o.time_ps[0]) for o in order[i + 1 :])
        n_keep = int(np.searchsorted(t, later_start, side="left"))
        keep.append(n_keep)
        if n_keep < t.size:
            nxt = next(o for o in order[i + 1 :] if float(o.time_ps[0]) == later_start)
            dropped = t[n_keep:]
            what = "repeats" if dropped.size == 1 and dropped[0] == later_start else "overlaps"
            overlaps.append(f"{nxt.paths[0].name} starts at {_at(later_start, clock)}, before "
                            f"{r.paths[0].name} ended ({_at(float(t[-1]), clock)}): it {what} "
                            f"{dropped.size} frame(s) of {r.paths[0].name} ({_at(float(dropped[0]), clock)} to "
                            f"{_at(float(dropped[-1]), clock)}); the later part's frames are kept")
    return keep, overlaps


def _continued_clocks(pieces: list[np.ndarray]) -> np.ndarray:
    """Parts whose clocks restart: each continues the previous part's clock at its own frame spacing."""
    shifted = [pieces[0]]
    for piece in pieces[1:]:
        step = float(np.median(np.diff(piece))) if piece.size > 1 else float(np.median(np.diff(shifted[-1])))
        shifted.append(piece - piece[0] + shifted[-1][-1] + step)
    return np.concatenate(shifted)


def _gaps(order: Sequence[Run], pieces: list[np.ndarray], clock: str) -> list[str]:
    """Gaps between parts wider than 1.5 typical frame spacings."""
    spacing = [float(np.median(np.diff(piece))) for piece in pieces if piece.size > 1]
    typical = float(np.median(spacing)) if spacing else None
    ends = [(r, p) for r, p in zip(order, pieces) if p.size]
    gaps = []
    for (ra, pa), (rb, pb) in zip(ends, ends[1:]):
        if typical is not None and pb[0] - pa[-1] > 1.5 * typical:
            gaps.append(f"gap of {_span(float(pb[0] - pa[-1]), clock)} between {ra.paths[0].name} (last frame "
                        f"at {_at(float(pa[-1]), clock)}) and {rb.paths[0].name} (first frame at "
                        f"{_at(float(pb[0]), clock)}); typical frame spacing {_span(typical, clock)}")
    return gaps


def _joined_metadata(order: Sequence[Run], parts: list[Part], frames: PartsFrames, numbered: bool, clock: str,
                     warnings: list[str]) -> RunMetadata:
    """The first part's metadata, with the sources and extents of every part."""
    meta = order[0].metadata
    names = [r.paths[0].name for r in order]
    meta.sources["positions"] = " + ".join(names)
    if frames.has_velocities:
        meta.sources["velocities"] = " + ".join(names)
    else:
        meta.sources.pop("velocities", None)
        stored = [r.paths[0].name for r in order if r.frames is not None and r.frames.has_velocities]
        if stored:
            warnings.append(f"velocities are stored in {', '.join(stored)} but not in every part; "
                            "stored velocities are not used")
    meta.extra["parts"] = [f"{p.path.name}: {p.n_keep} of {p.frames.n_frames} frames"
                           + (f", {_at(float(p.time[0]), clock)} to {_at(float(p.time[p.n_keep - 1]), clock)}"
                              if p.n_keep and not numbered else "") for p in parts]
    return meta


def _at(value: float, clock: str) -> str:
    return f"step {value:.0f}" if clock == "step" else f"t = {value:g} ps"


def _span(value: float, clock: str) -> str:
    return f"{value:.0f} steps" if clock == "step" else f"{value:g} ps"

