"""The audit's frame part: one pass over the velocities (and, for constraint inference, the positions).

:class:`AuditFramesConsumer` is a frame consumer (``prepare`` / ``update`` / ``finish``, the protocol of
:mod:`phasewake.core.model.framepass`) that reduces the frames to an :class:`AuditFrames`: kinetic energy
per frame of all atoms and of every group, the centre-of-mass kinetic energy, rigid-pair statistics for
constraint inference, the velocity power spectrum and speed samples. ``audit_run`` drives it through
``run_pass``; a shared pass (:meth:`phasewake.core.analyses.audit.AuditRequest.consumer`) can feed it next
to other analyses and hand its result to ``audit_run(run, frames=...)``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses import motion_spectrum as ms
from phasewake.core.analyses import temperature as tm
from phasewake.core.analyses.correlation import one_blas_thread
from phasewake.core.analyses.ensemble import is_thermostatted
from phasewake.core.analyses.molecule_motion import MoleculeMomenta, molecule_labels
from phasewake.core.errors import AnalysisError, MissingDataError
from phasewake.core.model.feeding import check_next
from phasewake.core.model.framepass import run_pass
from phasewake.core.model.run import FrameChunk, Run
from phasewake.core.progress import Progress, Work, result_of


@dataclass(frozen=True)
class AuditFrames:
    """What the audit takes from the frames: the result of :class:`AuditFramesConsumer`.

    Per-frame arrays have shape (n,) (n frames of the pass); ``group_kinetic_kJ_per_mol`` (n, G) with
    columns in the order of ``group_names``. ``spectrum_frequency_per_ps`` / ``spectrum_power``: the
    mass-weighted velocity power spectrum of all atoms (Welch; None when not computed, see
    ``spectrum_note``), ``group_spectra`` the power per atom group at the same frequencies.
    ``speeds_nm_per_ps``: species -> (frames kept, atoms kept) speeds, every ``speed_frame_stride``-th
    frame (canonical runs only).
    """

    time_ps: np.ndarray
    kinetic_kJ_per_mol: np.ndarray
    com_kinetic_kJ_per_mol: np.ndarray | None  # None when not asked for (``want_com=False``)
    group_names: tuple[str, ...]
    group_kinetic_kJ_per_mol: np.ndarray
    inference: tm.ConstraintInference | None
    spectrum_frequency_per_ps: np.ndarray | None
    spectrum_power: np.ndarray | None
    group_spectra: dict[str, np.ndarray]
    spectrum_note: str
    speeds_nm_per_ps: dict[str, np.ndarray]
    speed_frame_stride: int
    settings: dict[str, Any] = field(default_factory=dict)
    # the molecules' translational kinetic energy and the whole kinetic energy on every
    # ``speed_frame_stride``-th frame (None without molecules: no topology, or single atoms only)
    translation_kJ_per_mol: np.ndarray | None = None
    translation_total_kJ_per_mol: np.ndarray | None = None
    n_molecules: int = 0


def reads_velocities(run: Run) -> bool:
    """Whether the audit reads the run's velocities: it has them and every atom's mass is known (0 for a
    virtual site)."""
    m = run.masses_amu
    return bool(run.has_velocities and run.n_atoms and np.all(np.isfinite(m)) and np.all(m >= 0) and np.any(m > 0))


def needs_com(run: Run, thermostatted: bool) -> bool:
    """Whether the audit decides the removed centre-of-mass motion from the frames (see ``audit_run``)."""
    return thermostatted and run.metadata.com_motion_removed is None


def audit_groups(run: Run, *, n_constraints: int | None = None,
                 groups: Mapping[str, Sequence[int] | np.ndarray] | None = None) -> dict[str, np.ndarray]:
    """The equipartition groups the audit uses: residue names (and elements when nothing is constrained,
    by ``n_constraints`` or the metadata), plus the user's ``groups``."""
    declared = n_constraints if n_constraints is not None else run.metadata.n_constraints
    species = run.metadata.extra.get("species")
    base = tm.default_groups(run.topology, run.n_atoms, by_element=(declared is None or declared == 0),
                             masses_amu=run.masses_amu,
                             species=species if isinstance(species, list | tuple) else None)
    return {**base, **{k: np.asarray(v, dtype=np.int64) for k, v in (groups or {}).items()}}



def can_infer(run: Run) -> bool:
    """Constraints can be inferred from pair distances: a topology, frames, and positions precise enough
    (a frame source may say its positions are lossy, e.g. XTC's 0.001 nm)."""
    if run.topology is None or run.frames is None:
        return False
    return not bool(getattr(run.frames, "positions_lossy", False))  # said only by sources whose format is lossy



def align_by_time(t_frames: np.ndarray, t_table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices (frame_idx, table_idx) of rows present in both, matched by time."""
    if t_frames.size == 0 or t_table.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    spacing = np.median(np.diff(t_frames)) if t_frames.size > 1 else 1.0
    tol = 1e-6 * max(abs(float(spacing)), 1e-12) + 1e-9
    order = np.argsort(t_table, kind="stable")
    tt = t_table[order]
    pos = np.clip(np.searchsorted(tt, t_frames), 0, tt.size - 1)
    prev = np.clip(pos - 1, 0, tt.size - 1)
    best = np.where(np.abs(tt[prev] - t_frames) < np.abs(tt[pos] - t_frames), prev, pos)
    ok = np.abs(tt[best] - t_frames) <= tol
    return np.nonzero(ok)[0], order[best[ok]]



class AuditFramesConsumer:
    """The audit's frame pass as a chunk reduction (``prepare`` / ``update`` / ``finish``).

    Kinetic energy per frame of all atoms and of every group, the centre-of-mass kinetic energy, the
    rigid-pair statistics for constraint inference (positions of the first 500 frames), the streaming
    velocity power spectrum (:class:`~phasewake.core.analyses.motion_spectrum.VelocitySpectrumAccumulator`) and speed
    samples for the Maxwell-Boltzmann test. It follows the ``FrameConsumer`` protocol of
    :mod:`phasewake.core.model.framepass`, so one frame pass can feed the audit together with other analyses;
    :func:`audit_run` drives this same consumer through ``framepass.run_pass``.

    Parameters
    ----------
    run : Run
    groups : mapping name -> atom indices
        Equipartition groups (:func:`audit_groups` gives the audit's choice).
    infer : bool
        Collect rigid-pair distances (needs positions and a topology).
    want_speeds : bool
        Keep speed samples (the audit does for thermostatted runs).
    want_com : bool
        Sum the total momentum per frame for the centre-of-mass kinetic energy (the audit needs it only
        for thermostatted runs whose files do not say whether that motion was removed).
    segment_frames : int
        Frames per spectrum segment (at most half the frames of the pass).
    max_segments : int or None
        At most this many spectrum segments, from the start of the pass.

    Per chunk the work goes in sub-blocks of 8 frames, which stay in cache while they are squared,
    multiplied with the kinetic-energy weights (one float32 product for all atoms and every group:
    relative error ~1e-6), summed into the total momentum (when ``want_com``) and gathered for the
    spectrum: one memory pass over the chunk instead of four.
    """

    atoms: np.ndarray | None = None
    needs_velocities = True
    SUB_FRAMES = 8  # frames per sub-block (8 x 3 n_atoms float32: ~2 MB for 20,000 atoms)

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray], infer: bool,
                 want_speeds: bool, want_com: bool = True, segment_frames: int = 256,
                 max_segments: int | None = 64) -> None:
        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)",
                                   path=run.paths[0] if run.paths else None)
        # what is needed of the run, kept as arrays (the consumer pickles: a worker sends it back)
        self._path = run.paths[0] if run.paths else None
        self._n_pass = int(run.n_frames)  # the audit's pass is over every frame of the run
        self._time_all = np.asarray(run.time_ps)
        self._n_atoms = int(run.n_atoms)
        self._masses = np.asarray(run.masses_amu)
        self.groups = {k: np.asarray(v, dtype=np.int64) for k, v in groups.items()}
        self.want_speeds = bool(want_speeds)
        self.want_com = bool(want_com)
        self.segment_frames = int(segment_frames)
        self.max_segments = max_segments
        self._spec_groups = ms.spectrum_groups(run.topology, run.masses_amu) if self._n_pass >= 32 else None
        labels = molecule_labels(run.topology, run.n_atoms)
        n_mol = 0 if labels is None else int(labels.max()) + 1
        self._molecules = MoleculeMomenta(labels, run.masses_amu) if labels is not None and 2 <= n_mol < run.n_atoms \
            else None
        self._species = tm.species_of(run.topology, run.masses_amu) if self.want_speeds else {}
        self.rigid: tm.RigidPairAccumulator | None = None
        if infer and run.topology is not None:
            pairs = tm.candidate_pairs(run.topology, exclude=run.virtual_sites)
            if pairs.size:
                self.rigid = tm.RigidPairAccumulator(pairs, run.n_atoms)
        # positions only for the constraint inference: velocity-only reads are half the I/O
        self.needs_positions = self.rigid is not None
        m = np.asarray(run.masses_amu, dtype=np.float64)
        self._m32 = m.astype(np.float32)
        self._m_total = float(m.sum())
        names = list(self.groups)
        w = np.zeros((run.n_atoms, 1 + len(names)))
        w[:, 0] = 0.5 * m
        for j, nm in enumerate(names):
            w[self.groups[nm], 1 + j] = 0.5 * m[self.groups[nm]]
        self._w3 = np.repeat(w, 3, axis=0).astype(np.float32)  # (3 n_atoms, 1 + G): W3[3i + c, j] = m_i / 2
        self._range = (0, 0)
        self._pos = 0

    @classmethod
    def for_run(cls, run: Run, *, n_constraints: int | None = None,
                groups: Mapping[str, Sequence[int] | np.ndarray] | None = None, segment_frames: int = 256,
                max_spectrum_segments: int | None = 64, temperature_K: float | None = None) -> AuditFramesConsumer:
        """The consumer with the choices :func:`audit_run` makes for the same arguments."""
        thermostatted, _ = is_thermostatted(run, temperature_K)
        return cls(run, groups=audit_groups(run, n_constraints=n_constraints, groups=groups),
                   infer=can_infer(run), want_speeds=thermostatted,
                   want_com=needs_com(run, thermostatted),
                   segment_frames=segment_frames, max_segments=max_spectrum_segments)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        """Frames [start, stop) of the pass over every frame; a later range of a pass cut into ranges
        keeps its frames in the pass's frame numbering (speed samples, spectrum segments, the first frames
        of the constraint inference), so :meth:`merge` gives what one serial pass gives."""
        if columns is not None:
            raise AnalysisError("the audit needs every atom's velocity")
        n = int(stop - start)
        self._range = (int(start), int(stop))
        self._pos = 0
        self._kin = np.empty(n)
        self._com = np.empty(n)
        self._gk = np.empty((n, len(self.groups)))
        self._times = np.empty(n)
        if self.rigid is not None and start > 0:  # only the pass's first frames are used
            self.rigid = tm.RigidPairAccumulator(self.rigid.pairs, self._n_atoms,
                                                 max_frames=max(0, self.rigid.max_frames - int(start)))
        self._prepare_spectrum(int(start))
        n_all = self._n_pass
        self.stride = max(1, n_all // 200)
        self.speed_atoms = {sp: idx[: max(1, 100_000 // max(1, n_all // self.stride))][:2000]
                            for sp, idx in self._species.items()}
        self.speed_store: dict[str, list[np.ndarray]] = {sp: [] for sp in self._species}
        self._trans: list[np.ndarray] = []  # K_trans on the sampled frames
        self._trans_total: list[np.ndarray] = []  # K on the same frames
        self._sq = np.empty((self.SUB_FRAMES, 3 * self._n_atoms), np.float32)  # reused (fresh pages are slow)
        self._sel = (np.empty((chunk_frames, self.spec.atoms.size, 3), np.float32)
                     if self.spec is not None and self.spec.atoms is not None else None)

    def _prepare_spectrum(self, start: int) -> None:
        """The spectrum accumulator; segments are cut from the pass's first frame, so a range that starts
        inside a segment keeps those first frames (``_head``) for :meth:`merge`."""
        self.spectrum_note = ""
        self.spec: ms.VelocitySpectrumAccumulator | None = None
        self.spec_names: list[str] = []
        self._head: list[np.ndarray] = []
        self._head_needed = 0
        n = self._n_pass
        t = self._time_all[:n]
        if not (n >= 32 and t.size == n and self._spec_groups is not None):
            self.spectrum_note = f"too few frames for a velocity spectrum ({n} < 32)"
            return
        dt = np.diff(t)
        h = float(np.median(dt))
        if not (h > 0 and np.allclose(dt, h, rtol=1e-3, atol=1e-9)):
            self.spectrum_note = "frame spacing is not uniform: no velocity spectrum"
            return
        seg = int(min(self.segment_frames, n // 2))
        labels, self.spec_names = self._spec_groups
        head = (-start) % seg  # frames before this range's first segment boundary
        first = (start + head) // seg  # the pass's index of this range's first whole segment
        most = None if self.max_segments is None else max(0, self.max_segments - first)
        self.spec = ms.VelocitySpectrumAccumulator(self._masses, h, segment_frames=seg,
                                                   labels=labels if len(self.spec_names) > 1 else None,
                                                   max_segments=most)
        if head and (self.max_segments is None or start // seg < self.max_segments):
            self._head_needed = head

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_sq"] = state["_sel"] = None  # work buffers, made again by prepare
        return state

    def update(self, chunk: FrameChunk) -> None:
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("velocities are missing in a chunk of frames", path=self._path)
        with one_blas_thread():
            self._update(chunk, np.ascontiguousarray(v, dtype=np.float32))

    def _update(self, chunk: FrameChunk, v: np.ndarray) -> None:
        k = v.shape[0]
        pos = self._pos
        n_atoms = v.shape[1]
        vf = v.reshape(k, 3 * n_atoms)
        both = np.empty((k, self._w3.shape[1]), np.float32)
        p = np.empty((k, 3), np.float32)
        spec = self.spec if self.spec is not None and (not self.spec.full or self._head_needed) else None
        idx = None if spec is None else spec.atoms
        sel = self._sel
        if sel is not None and sel.shape[0] < k:
            sel = self._sel = np.empty((k,) + sel.shape[1:], np.float32)
        fb = self.SUB_FRAMES
        for f0 in range(0, k, fb):
            f1 = min(k, f0 + fb)
            vb = vf[f0:f1]
            sq = np.multiply(vb, vb, out=self._sq[: f1 - f0])  # squared components, in cache
            np.matmul(sq, self._w3, out=both[f0:f1])  # kinetic energy of all atoms, then of every group
            if self.want_com:
                p[f0:f1] = np.matmul(self._m32, v[f0:f1])  # total momentum
            if spec is not None and sel is not None and idx is not None:
                np.take(v[f0:f1], idx, axis=1, out=sel[f0:f1])
        self._kin[pos:pos + k] = both[:, 0]
        if self.want_com:
            p64 = p.astype(np.float64)
            self._com[pos:pos + k] = np.einsum("fi,fi->f", p64, p64) / (2.0 * self._m_total)
        if self.groups:
            self._gk[pos:pos + k] = both[:, 1:]
        self._times[pos:pos + k] = chunk.time_ps
        if self.rigid is not None and not self.rigid.full:
            self.rigid.update(chunk.positions_nm, chunk.box_nm)
        if spec is not None:
            self._feed_spectrum(spec, v if idx is None or sel is None else sel[:k])
        if self.speed_atoms or self._molecules is not None:
            keep = np.nonzero(np.arange(self._range[0] + pos, self._range[0] + pos + k) % self.stride == 0)[0]
            if keep.size:
                vk = v[keep]
                if self._molecules is not None:
                    self._trans.append(self._molecules.kinetic(vk))
                    self._trans_total.append(both[keep, 0].astype(np.float64))
                if self.speed_atoms:
                    sp_all = np.sqrt((vk * vk).sum(axis=2))
                    for sp, ia in self.speed_atoms.items():
                        self.speed_store[sp].append(sp_all[:, ia])
        self._pos = pos + k

    def _feed_spectrum(self, spec: ms.VelocitySpectrumAccumulator, v: np.ndarray) -> None:
        h = min(self._head_needed, v.shape[0])
        if h:  # frames of a segment that began in the range before this one: kept for merge
            self._head.append(np.array(v[:h], copy=True))
            self._head_needed -= h
        if h < v.shape[0]:
            spec.update_selected(v[h:] if h else v)

    def merge(self, later: AuditFramesConsumer) -> None:
        """Fold in the consumer of the frames right after these (same settings): afterwards this one covers
        both ranges and :meth:`finish` gives the serial pass's result (per-frame values exactly; the
        spectrum and the pair statistics to floating-point rounding of their sums)."""
        check_next(self._range, later._range, "audit frames")
        if list(later.groups) != list(self.groups) or later.segment_frames != self.segment_frames:
            raise AnalysisError("audit frames: only consumers of the same settings can be merged")
        pos, lp = self._pos, later._pos
        self._kin = np.concatenate([self._kin[:pos], later._kin[:lp]])
        self._com = np.concatenate([self._com[:pos], later._com[:lp]])
        self._gk = np.concatenate([self._gk[:pos], later._gk[:lp]])
        self._times = np.concatenate([self._times[:pos], later._times[:lp]])
        self._pos = pos + lp
        self._range = (self._range[0], later._range[1])
        if self.rigid is not None and later.rigid is not None:
            self.rigid.merge(later.rigid)
        if self.spec is not None and later.spec is not None:
            if later._head:
                self.spec.update_selected(np.concatenate(later._head))  # completes the segment across the cut
            self.spec.merge(later.spec)
        for sp, got in later.speed_store.items():
            self.speed_store[sp].extend(got)
        self._trans.extend(later._trans)
        self._trans_total.extend(later._trans_total)

    def finish(self) -> AuditFrames:
        pos = self._pos
        freq = power = None
        group_spectra: dict[str, np.ndarray] = {}
        note = self.spectrum_note
        if self.spec is not None:
            if self.spec.n_segments:
                freq, power = self.spec.finish()
                if self.spec.labels is not None:
                    group_spectra = dict(zip(self.spec_names, self.spec.finish_groups(), strict=True))
            else:
                note = "too few frames for one spectrum segment"
        start, stop = self._range
        return AuditFrames(
            time_ps=self._times[:pos], kinetic_kJ_per_mol=self._kin[:pos],
            com_kinetic_kJ_per_mol=self._com[:pos] if self.want_com else None,
            group_names=tuple(self.groups), group_kinetic_kJ_per_mol=self._gk[:pos],
            inference=None if self.rigid is None else self.rigid.finish(),
            spectrum_frequency_per_ps=freq, spectrum_power=power, group_spectra=group_spectra, spectrum_note=note,
            speeds_nm_per_ps={sp: (np.concatenate(v_) if v_ else np.zeros((0, 0), np.float32))
                              for sp, v_ in self.speed_store.items()},
            speed_frame_stride=self.stride,
            translation_kJ_per_mol=np.concatenate(self._trans) if self._trans else None,
            translation_total_kJ_per_mol=np.concatenate(self._trans_total) if self._trans_total else None,
            n_molecules=0 if self._molecules is None else self._molecules.n_molecules,
            settings={"groups": {k: int(v.size) for k, v in self.groups.items()},
                      "infer": self.rigid is not None, "want_speeds": self.want_speeds, "want_com": self.want_com,
                      "segment_frames": self.segment_frames, "max_segments": self.max_segments,
                      "start": start, "stop": stop},
        )


def frame_pass(run: Run, consumer: AuditFramesConsumer, *, done0: float, total: float) -> Work[AuditFrames]:
    """Drive the consumer through the one-pass engine (``framepass.run_pass``), progress on the audit's scale."""
    work = run_pass(run, {"audit": consumer})
    try:
        while True:
            p = next(work)
            yield Progress(min(done0 + p.done, total), total, "velocities")
    except StopIteration as stop:
        return stop.value["audit"]  # type: ignore[no-any-return]


class RigidPairsConsumer:
    """Rigid-pair distance statistics of the first frames, from positions only: the constraint inference of a
    run whose velocities the audit does not read (the consumer protocol of :mod:`phasewake.core.model.framepass`)."""

    atoms: np.ndarray | None = None
    needs_positions = True
    needs_velocities = False

    def __init__(self, pairs: np.ndarray, n_atoms: int) -> None:
        self.acc = tm.RigidPairAccumulator(pairs, n_atoms)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        if columns is not None:
            raise AnalysisError("the constraint inference needs every atom's position")

    def update(self, chunk: FrameChunk) -> None:
        self.acc.update(chunk.positions_nm, chunk.box_nm)  # ignores frames once it holds enough

    def finish(self) -> tm.ConstraintInference:
        return self.acc.finish()


def infer_constraints_only(run: Run) -> tm.ConstraintInference | None:
    """Constraints inferred from the first frames' positions (None without a topology, frames or candidate pairs)."""
    if run.topology is None or run.frames is None:
        return None
    pairs = tm.candidate_pairs(run.topology, exclude=run.virtual_sites)
    if not pairs.size:
        return None
    consumer = RigidPairsConsumer(pairs, run.n_atoms)
    if not run.n_frames:
        return consumer.finish()
    got = result_of(run_pass(run, {"rigid": consumer}, stop=consumer.acc.max_frames, workers=1))
    return got["rigid"]  # type: ignore[no-any-return]
