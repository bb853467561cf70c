"""Pieces shared by the readers: topology JSON, time-axis checks, box conversion, estimated velocities."""

from __future__ import annotations

import json
import math
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.errors import CorruptFileError, ImpossibleValueError, TimeAxisError
from phasewake.core.model.run import (
    ChunkedFrames,
    FrameChunk,
    FrameRequest,
    FrameSource,
    RunMetadata,
    TimeJoin,
    no_positions,
)

if TYPE_CHECKING:
    import mdtraj


def file_head(path: Path, n_bytes: int) -> bytes | None:
    """The first ``n_bytes`` of a file (fewer when it is shorter), or None when it cannot be read: what a
    reader's claim looks at."""
    try:
        with open(path, "rb") as f:
            return f.read(n_bytes)
    except OSError:
        return None


def decode(value: Any) -> Any:
    """HDF5 strings come back as bytes, numpy bytes or str: give str (recursively for arrays)."""
    if isinstance(value, bytes | np.bytes_):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray) and value.dtype.kind in "SO":
        return [decode(v) for v in value.tolist()]
    if isinstance(value, np.ndarray) and value.ndim == 0:
        return decode(value.item())
    if isinstance(value, np.generic):
        return value.item()
    return value


# --- topology as JSON (the layout of mdtraj's HDF5 "topology" node, so one parser serves both) ---


def topology_to_json(top: mdtraj.Topology) -> str:
    """Serialise an mdtraj Topology: chains -> residues -> atoms (name, element), and bonds."""
    chains = []
    for chain in top.chains:
        residues = []
        for res in chain.residues:
            atoms = [
                {"index": int(a.index), "name": a.name,
                 "element": a.element.symbol if a.element is not None else "VS"}
                for a in res.atoms
            ]
            residues.append({"index": int(res.index), "name": res.name, "resSeq": int(res.resSeq),
                             "segmentID": getattr(res, "segment_id", "") or "", "atoms": atoms})
        chains.append({"index": int(chain.index), "chain_id": getattr(chain, "chain_id", None),
                       "residues": residues})
    bonds = [[int(b[0].index), int(b[1].index)] for b in top.bonds]
    return json.dumps({"chains": chains, "bonds": bonds})


def topology_from_json(text: str | bytes, *, path: str | Path | None = None) -> mdtraj.Topology:
    """Rebuild an mdtraj Topology from :func:`topology_to_json` / mdtraj HDF5 JSON."""
    import mdtraj as md
    from mdtraj.core import element as elem

    try:
        d = json.loads(decode(text))
        top = md.Topology()
        for cd in sorted(d["chains"], key=lambda c: c["index"]):
            chain = top.add_chain()
            for rd in sorted(cd["residues"], key=lambda r: r["index"]):
                res = top.add_residue(rd["name"], chain, resSeq=rd.get("resSeq", rd["index"]),
                                      segment_id=rd.get("segmentID", "") or "")
                for ad in sorted(rd["atoms"], key=lambda a: a["index"]):
                    try:
                        el = elem.get_by_symbol(ad["element"])
                    except KeyError:
                        el = elem.virtual
                    top.add_atom(ad["name"], el, res)
        atoms = list(top.atoms)
        for i, j in d.get("bonds", []):
            top.add_bond(atoms[int(i)], atoms[int(j)])
    except (ValueError, KeyError, TypeError, IndexError) as exc:
        raise CorruptFileError(f"topology JSON cannot be read ({exc})", path=path) from exc
    return top


def topology_from_elements(symbols: Sequence[str], bonds: np.ndarray | None = None) -> mdtraj.Topology:
    """A minimal topology: one chain, one residue per atom, atoms named by element."""
    import mdtraj as md
    from mdtraj.core import element as elem

    top = md.Topology()
    chain = top.add_chain()
    for i, sym in enumerate(symbols):
        res = top.add_residue(str(sym), chain, resSeq=i + 1)
        try:
            el = elem.get_by_symbol(str(sym))
        except KeyError:
            el = elem.virtual
        top.add_atom(str(sym), el, res)
    if bonds is not None:
        atoms = list(top.atoms)
        for i, j in np.asarray(bonds, dtype=int).reshape(-1, 2):
            top.add_bond(atoms[i], atoms[j])
    return top


def masses_from_topology(top: mdtraj.Topology | None, n_atoms: int) -> np.ndarray | None:
    """Masses (amu) from element data, or None when any atom has no element mass. mdtraj's virtual-site
    element (atomic number 0, e.g. GROMACS's MW of TIP4P water) gives 0: a massless site."""
    if top is None or top.n_atoms != n_atoms:
        return None
    masses = np.array([a.element.mass if a.element is not None else np.nan for a in top.atoms], float)
    virtual = np.array([a.element is not None and a.element.atomic_number == 0 for a in top.atoms], bool)
    if not np.all(np.isfinite(masses)) or np.any((masses <= 0) & ~virtual) or virtual.all():
        return None
    masses[virtual] = 0.0
    return masses


# --- values no physical run can have (refused by name, where a reader or an override meets them) ---


def check_masses(masses_amu: np.ndarray, *, path: str | Path | None, where: str = "masses") -> None:
    """ImpossibleValueError when a known mass is negative or infinite, or when every mass is zero. NaN means
    unknown, zero a massless virtual site (TIP4P's M, a lone pair): both allowed."""
    m = np.asarray(masses_amu, dtype=np.float64).ravel()
    known = ~np.isnan(m)
    bad = np.flatnonzero(known & ~((m >= 0) & np.isfinite(m)))
    if bad.size:
        i = int(bad[0])
        more = f" ({bad.size} atoms in all)" if bad.size > 1 else ""
        raise ImpossibleValueError(f"{where}: atom {i} has mass {m[i]:g} amu{more}; a mass must be a positive "
                                   "number (or 0 for a massless virtual site)", path=path)
    if m.size and known.all() and not (m > 0).any():
        raise ImpossibleValueError(f"{where}: every mass is 0; only virtual sites may be massless", path=path)


def check_timestep(timestep_ps: float | None, *, path: str | Path | None, where: str = "time step") -> None:
    """ImpossibleValueError for a time step that is NaN, infinite, zero or negative (None: unknown, allowed)."""
    if timestep_ps is None:
        return
    try:
        dt = float(timestep_ps)
    except (TypeError, ValueError):
        raise ImpossibleValueError(f"{where} {timestep_ps!r} is not a number", path=path) from None
    if not (math.isfinite(dt) and dt > 0):
        raise ImpossibleValueError(f"{where} is {dt:g} ps; a time step must be a positive number", path=path)


def check_constraints(n_constraints: int | None, *, n_atoms: int | None, path: str | Path | None,
                      where: str = "constraint count") -> None:
    """ImpossibleValueError for a negative constraint count, or more constraints than 3 N coordinates."""
    if n_constraints is None:
        return
    n = int(n_constraints)
    if n < 0:
        raise ImpossibleValueError(f"{where} is {n}; the number of constraints cannot be negative", path=path)
    if n_atoms and n > 3 * n_atoms:
        raise ImpossibleValueError(f"{where} is {n}, more than the 3 x {n_atoms} = {3 * n_atoms} coordinates "
                                   "of the atoms", path=path)


def check_temperature(temperature_K: float | None, *, path: str | Path | None,
                      where: str = "target temperature", allow_zero: bool = False) -> None:
    """ImpossibleValueError for a thermostat target that is NaN, infinite or negative, or zero unless
    ``allow_zero`` (an engine file may state a 0 K target: a quench; analyses then use the measured one)."""
    if temperature_K is None:
        return
    t = float(temperature_K)
    if not (math.isfinite(t) and (t > 0 or (allow_zero and t == 0))):
        raise ImpossibleValueError(f"{where} is {t:g} K; it must be a positive number of kelvin", path=path)


def check_metadata(md: RunMetadata, *, n_atoms: int | None, path: str | Path | None) -> None:
    """The time step, constraint count and target temperature of a run's metadata, each named by its
    source ("user" when given as an option)."""
    def where(key: str, what: str) -> str:
        src = md.sources.get(key)
        return f"{what} ({'as given' if src == 'user' else 'from ' + src})" if src else what

    check_timestep(md.timestep_ps, path=path, where=where("timestep_ps", "time step"))
    check_constraints(md.n_constraints, n_atoms=n_atoms, path=path,
                      where=where("n_constraints", "constraint count"))
    check_temperature(md.temperature_K, path=path, where=where("temperature_K", "target temperature"),
                      allow_zero=md.sources.get("temperature_K") != "user")


_EDGE = "abc"


def check_box(box_nm: np.ndarray | None, *, path: str | Path | None, first_frame: int = 0) -> np.ndarray | None:
    """Box edge vectors (F, 3, 3) as rows, checked: every edge finite and non-zero, a right-handed cell
    of positive volume. A box that is all zeros is returned as None: engines write it for a run without
    periodic boundaries (GROMACS in vacuum, DCD without a cell). ImpossibleValueError names the frame."""
    if box_nm is None:
        return None
    b = np.asarray(box_nm, dtype=np.float64)
    if b.ndim != 3 or b.shape[1:] != (3, 3) or b.shape[0] == 0:
        return box_nm
    if not np.any(b):
        return None
    finite = np.isfinite(b).all(axis=(1, 2))
    if not finite.all():
        f = int(np.flatnonzero(~finite)[0])
        raise ImpossibleValueError(f"box of frame {first_frame + f} holds NaN or infinite values", path=path)
    lengths = np.linalg.norm(b, axis=2)
    diag = np.diagonal(b, axis1=1, axis2=2)
    bad = (lengths == 0) | ((diag <= 0) & np.all(b == diag[:, :, None] * np.eye(3), axis=2))
    if bad.any():
        f, k = (int(x) for x in np.argwhere(bad)[0])
        raise ImpossibleValueError(f"box edge {_EDGE[k]} of frame {first_frame + f} is {diag[f, k]:g} nm; box "
                                   "edges must be positive", path=path)
    vol = np.linalg.det(b)
    if np.any(vol <= 0):
        f = int(np.flatnonzero(vol <= 0)[0])
        raise ImpossibleValueError(f"box of frame {first_frame + f} is flat or inside out (volume "
                                   f"{vol[f]:g} nm^3); box edges must span a positive volume", path=path)
    return box_nm


# --- time axis ---


def check_time_axis(time_ps: np.ndarray, *, path: str | Path | None, what: str = "frame") -> list[str]:
    """Raise TimeAxisError on a non-finite, overflowing or unsorted time axis; return warnings for gaps and
    for restarts glued in (time going back or repeating: ``open_run`` keeps the later segment, see
    :func:`resolve_restarts`). Never sorts."""
    t = np.asarray(time_ps, dtype=np.float64)
    warnings: list[str] = []
    if not np.all(np.isfinite(t)):
        bad = int(np.flatnonzero(~np.isfinite(t))[0])
        raise TimeAxisError(f"time of {what} {bad} is not a finite number ({t[bad]:g}; NaN, infinite, or "
                            "too large: the time axis overflows)", path=path)
    with np.errstate(over="ignore", invalid="ignore"):
        d = np.diff(t)
    if not np.all(np.isfinite(d)):
        bad = int(np.flatnonzero(~np.isfinite(d))[0])
        raise TimeAxisError(f"the time axis overflows between {what} {bad} and {bad + 1} ({t[bad]:g} and "
                            f"{t[bad + 1]:g} ps)", path=path)
    if t.size < 2:
        return warnings
    if np.any(d <= 0):
        # restarts glued into one file: found and kept-later by open_run (resolve_restarts); a time axis
        # that goes back too often to be restarts is refused here
        _, _, words = resolve_restarts(t, path=path, what=what)
        warnings.extend(words)
        d = d[d > 0]
        if not d.size:
            return warnings
    med = float(np.median(d))
    gaps = np.flatnonzero(d > 1.5 * med)
    if gaps.size:
        i = int(gaps[0])
        warnings.append(
            f"{Path(path).name if path else 'time axis'}: {gaps.size} gap(s) in the time axis; the first "
            f"between {what} {i} (t = {t[i]:g} ps) and {i + 1} (t = {t[i + 1]:g} ps), "
            f"typical spacing {med:g} ps")
    return warnings


def resolve_restarts(time_ps: np.ndarray, *, path: str | Path | None, what: str = "frame",
                     line_numbers: np.ndarray | None = None) -> tuple[np.ndarray | None, tuple[TimeJoin, ...], list[str]]:
    """Restarts glued into one time axis: which rows to keep (the later segment wins, as engines do).

    Row i is kept when its time is below the time of every later row (a suffix minimum), so after a step
    back (or a repeated time) the rows of the earlier segment from the restart time on are dropped.

    Parameters
    ----------
    time_ps : ndarray, shape (n,), finite
    path, what : the file and what a row is ("frame", "row", ...), for the messages
    line_numbers : ndarray, shape (n,), optional
        Line of each row in a text file, for the messages.

    Returns
    -------
    keep : ndarray of int (indices of kept rows, increasing) or None when the time only increases
    joins : the restarts found, each with the time it went back from and to and the rows dropped
    warnings : one line per join (at most five, then a count)

    Raises
    ------
    TimeAxisError
        When the time goes back more often than once per 10 rows (the ``time.restarts`` threshold's
        rule): an unsorted axis, not restarts.
    """
    t = np.asarray(time_ps, dtype=np.float64)
    n = int(t.size)
    d = np.diff(t)
    back = np.flatnonzero(d <= 0)
    if not back.size:
        return None, (), []
    name = Path(path).name if path else "time axis"

    def loc(i: int) -> str:
        return f"line {int(line_numbers[i])}" if line_numbers is not None else f"{what} {i}"

    if back.size > max(1, n // 10):
        i = int(back[0])
        raise TimeAxisError(
            f"time goes back {back.size} times in {n} {what}s (first at {loc(i + 1)}: {t[i + 1]:g} ps after "
            f"{t[i]:g} ps): that is an unsorted time axis, not restarts glued together; it is not sorted "
            "for you", path=path)
    suffix_min = np.minimum.accumulate(t[::-1])[::-1]
    keep_mask = np.ones(n, dtype=bool)
    keep_mask[:-1] = t[:-1] < suffix_min[1:]
    keep = np.flatnonzero(keep_mask)
    joins: list[TimeJoin] = []
    words: list[str] = []
    prev = 0
    for i in back.tolist():
        start = i + 1
        dropped = int(np.count_nonzero(~keep_mask[prev:start]))
        prev = start
        if not keep_mask[start]:
            continue  # this segment was itself replaced by a later one
        j = TimeJoin(time_ps=float(t[start]), back_from_ps=float(t[i]), n_dropped=dropped,
                     index=int(np.searchsorted(keep, start)), where=f"{name}, {loc(start)}")
        joins.append(j)
        if len(words) < 5:
            how = "repeats" if d[i] == 0 else "goes back"
            words.append(f"{name}: time {how} at {loc(start)} ({t[i]:g} ps -> {t[start]:g} ps), a restart "
                         f"glued in: the later segment is kept, {dropped} earlier {what}(s) from {t[start]:g} ps "
                         "on dropped")
    if len(joins) > 5:
        words.append(f"{name}: {len(joins) - 5} more restart(s) glued in, each handled the same way")
    return keep, tuple(joins), words


class ClockedFrames(ChunkedFrames):
    """A frame source that keeps its frames' clock (``time_ps``), which ``open_run`` may replace by another
    of one entry per frame (:meth:`retime`: a table of the run's times, a LAMMPS time step)."""

    _time: np.ndarray

    @property
    def time_ps(self) -> np.ndarray:
        return self._time

    def retime(self, time_ps: np.ndarray) -> None:
        t = np.asarray(time_ps, dtype=np.float64)
        if t.shape != (self.n_frames,):
            raise ValueError(f"time axis of {t.shape[0]} entries for {self.n_frames} frames")
        self._time = t


class KeptFrames(ChunkedFrames):
    """A frame source showing only the kept frames of another (restarts glued into one trajectory).

    ``keep`` (increasing indices of the inner source) comes from :func:`resolve_restarts`; each read goes to
    the inner source in the contiguous stretches of kept frames.
    """

    def __init__(self, inner: FrameSource, keep: np.ndarray) -> None:
        self.inner = inner
        self.keep = np.asarray(keep, dtype=np.int64)
        self.describe_as(inner, int(self.keep.size))

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        want = request.frames
        inner_idx = self.keep[want]
        # stretches where the inner indices advance by exactly the stride
        cut = np.flatnonzero(np.diff(inner_idx) != request.stride) + 1
        bounds = np.concatenate([[0], cut, [want.size]])
        for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist()):
            lo, hi = int(inner_idx[a]), int(inner_idx[b - 1]) + 1
            pos = a
            for ch in self.inner.iter_chunks(**request.keywords(start=lo, stop=hi)):
                ch.start = int(want[pos])
                pos += ch.n_frames
                yield ch

    def read_frame(self, index: int) -> FrameChunk:
        if not -self.n_frames <= index < self.n_frames:
            raise IndexError(f"frame {index} out of range (run has {self.n_frames})")
        index %= self.n_frames
        ch = self.inner.read_frame(int(self.keep[index]))
        ch.start = index
        return ch


# --- boxes ---


def box_vectors_from_lengths_angles(lengths: np.ndarray, angles_deg: np.ndarray) -> np.ndarray:
    """Box edge vectors as rows, shape (n, 3, 3), from lengths (n, 3) and angles (n, 3) in degrees.

    Convention: a along x, b in the xy plane (the usual lower-triangular box matrix).
    """
    lengths = np.asarray(lengths, dtype=np.float64).reshape(-1, 3)
    ang = np.deg2rad(np.asarray(angles_deg, dtype=np.float64).reshape(-1, 3))
    a, b, c = lengths.T
    alpha, beta, gamma = ang.T
    out = np.zeros((lengths.shape[0], 3, 3))
    out[:, 0, 0] = a
    out[:, 1, 0] = b * np.cos(gamma)
    out[:, 1, 1] = b * np.sin(gamma)
    cx = c * np.cos(beta)
    cy = c * (np.cos(alpha) - np.cos(beta) * np.cos(gamma)) / np.sin(gamma)
    out[:, 2, 0] = cx
    out[:, 2, 1] = cy
    out[:, 2, 2] = np.sqrt(np.maximum(c**2 - cx**2 - cy**2, 0.0))
    # Exact zeros for right angles (cos(90 deg) is 6e-17, not 0).
    out[np.abs(out) < 1e-12 * np.max(np.abs(out), initial=1.0)] = 0.0
    return out


def box_matrix(box: np.ndarray, n_frames: int) -> np.ndarray:
    """Normalise a box given as (3,), (3, 3), (F, 3) or (F, 3, 3) to (F, 3, 3) edge vectors as rows."""
    b = np.asarray(box, dtype=np.float64)
    if b.shape == (3,):
        b = np.diag(b)
    if b.shape == (3, 3):
        return np.broadcast_to(b, (n_frames, 3, 3)).copy()
    if b.ndim == 2 and b.shape[1] == 3:
        out = np.zeros((b.shape[0], 3, 3))
        out[:, [0, 1, 2], [0, 1, 2]] = b
        return out
    if b.ndim == 3 and b.shape[1:] == (3, 3):
        return b
    raise ValueError(f"box of shape {b.shape} is not (3,), (3,3), (F,3) or (F,3,3)")


# --- estimated velocities ---


class EstimatedVelocityFrames(ChunkedFrames):
    """Wraps a frame source that has positions only; velocities are central differences.

    v(t_i) = (x(t_{i+1}) - x(t_{i-1})) / (t_{i+1} - t_{i-1}), one-sided at the two ends. Positions
    are unwrapped across periodic boxes by the minimum-image step between neighbouring frames, so a
    wrap into the box does not make a huge velocity.
    """

    def __init__(self, inner: FrameSource, time_ps: np.ndarray) -> None:
        self.inner = inner
        self.time_ps = np.asarray(time_ps, dtype=np.float64)
        self.describe_as(inner, inner.n_frames)
        self.has_velocities = inner.n_frames >= 2
        self.velocities_estimated = True

    @staticmethod
    def _step(a: np.ndarray, b: np.ndarray, box: np.ndarray | None) -> np.ndarray:
        """Displacement b - a (n, N, 3) with the minimum image for orthorhombic/triclinic boxes."""
        d = (b.astype(np.float64) - a.astype(np.float64))
        if box is None:
            return d
        diag = np.diagonal(box, axis1=1, axis2=2)  # (n, 3)
        if not np.any(box - diag[:, :, None] * np.eye(3)):  # rectangular: the cheap minimum image
            lengths = diag[:, None, :]
            return d - lengths * np.round(d / lengths)
        inv = np.linalg.inv(box)  # (n, 3, 3); fractional = d @ inv
        frac = np.einsum("fnj,fjk->fnk", d, inv)
        frac -= np.round(frac)
        return np.einsum("fnk,fkj->fnj", frac, box)

    def _arrays_per_frame(self, velocities: bool, positions: bool) -> int:
        # the neighbours' positions and the velocities beside the positions handed out
        return 2 + int(positions) if velocities and self.has_velocities else int(positions)

    def _read(self, request: FrameRequest) -> Iterator[FrameChunk]:
        if not request.velocities or not self.has_velocities:
            yield from self.inner.iter_chunks(**request.keywords(velocities=False))
            return
        for sel in request.batches():
            lo = max(int(sel[0]) - 1, 0)
            hi = min(int(sel[-1]) + 2, self.n_frames)
            pos_parts, box_parts = [], []
            for ch in self.inner.iter_chunks(chunk_frames=max(hi - lo, 1), start=lo, stop=hi,
                                             atom_indices=request.atoms, velocities=False):
                pos_parts.append(ch.positions_nm)
                box_parts.append(ch.box_nm)
            pos = np.concatenate(pos_parts)
            box = None if any(b is None for b in box_parts) else np.concatenate(box_parts)  # type: ignore[arg-type]
            t = self.time_ps[lo:hi]
            k = sel - lo
            kp = np.minimum(k + 1, hi - lo - 1)
            km = np.maximum(k - 1, 0)
            bsel = None if box is None else box[k]
            disp = self._step(pos[km], pos[kp], bsel)
            dt = (t[kp] - t[km])[:, None, None]
            vel = (disp / dt).astype(np.float32)
            yield FrameChunk(start=int(sel[0]), time_ps=self.time_ps[sel],
                             positions_nm=pos[k] if request.positions else no_positions(sel.size),
                             velocities_nm_per_ps=vel, box_nm=None if box is None else box[k])


def frame_spacing_warning(frames: FrameSource, time_ps: np.ndarray, masses_amu: np.ndarray,
                          *, temperature_K: float | None = None, sample_frames: int = 16) -> str:
    """Warning text for estimated velocities: frame spacing vs the fastest motion seen.

    Compares the largest per-atom displacement between neighbouring frames (from up to
    ``sample_frames`` frames at the start) with the typical thermal speed sqrt(k_B T / m) of the
    lightest atom (Maxwell-Boltzmann, one velocity component; T = ``temperature_K``, else 300 K, said so).
    """
    from phasewake.core.units import KB_KJ_PER_MOL_K

    t = np.asarray(time_ps, dtype=np.float64)
    if t.size < 2:
        return "velocities cannot be estimated from fewer than 2 frames"
    spacing = float(np.median(np.diff(t)))
    n = min(sample_frames, frames.n_frames)
    max_disp = 0.0
    for ch in frames.iter_chunks(chunk_frames=n, start=0, stop=n, velocities=False):
        box = ch.box_nm
        disp = EstimatedVelocityFrames._step(ch.positions_nm[:-1], ch.positions_nm[1:],
                                             None if box is None else box[1:])
        if disp.size:
            max_disp = max(max_disp, float(np.max(np.linalg.norm(disp, axis=-1))))
        break
    temp = 300.0 if temperature_K is None or not np.isfinite(temperature_K) else float(temperature_K)
    temp_text = f"{temp:g} K" + (" (assumed; the temperature is not known)" if temperature_K is None else "")
    m = masses_amu[np.isfinite(masses_amu) & (masses_amu > 0)] if masses_amu.size else masses_amu
    text = (f"velocities are estimated by central differences of positions {spacing:g} ps apart, "
            f"not stored in the files. The largest displacement of an atom between frames is "
            f"{max_disp:.3g} nm ({max_disp / spacing:.3g} nm/ps averaged over the spacing)")
    if m.size:
        v_th = float(np.sqrt(KB_KJ_PER_MOL_K * temp / np.min(m)))  # nm/ps, one component
        travel = v_th * spacing
        text += (f"; the lightest atom's thermal speed sqrt(kT/m) at {temp_text} is {v_th:.3g} nm/ps, "
                 f"i.e. {travel:.3g} nm per frame spacing")
        # rule of thumb (common practice, no published source): a difference quotient follows the motion
        # when an atom moves well under a bond length (~0.1 nm) between frames; 0.02 nm is our line
        if travel > 0.02:
            text += (". Frames are far apart compared with atomic motion: the estimated velocities "
                     "are smoothed and underestimate kinetic energy and temperature")
    return text + "."
