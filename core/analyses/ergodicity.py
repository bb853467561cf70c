"""Thirumalai-Mountain fluctuation metric Omega(t) of per-particle time averages: an effectively ergodic run
decays as Omega(t)/Omega(0) ~ 1/(D t); a non-ergodic one plateaus (D. Thirumalai, R. D. Mountain and
T. R. Kirkpatrick, Phys. Rev. A 39, 3563 (1989); R. D. Mountain and D. Thirumalai, J. Phys. Chem. 93,
6975 (1989)). A heuristic (see :data:`phasewake.core.analyses.verdicts.HEURISTIC_NOTE`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses import verdicts
from phasewake.core.analyses.request import AnalysisRequest, index_tuple
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.progress import Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

verdicts.register(
    verdicts.Threshold(
        kind="sampling.tm_slope", caution=-0.7, problem=-0.3, unit="log-log slope",
        source="common practice (the Thirumalai-Mountain metric decays with slope -1 when effectively ergodic)",
        description="late-time log-log slope of the Thirumalai-Mountain metric",
    ),
    verdicts.Explanation(
        title="Thirumalai-Mountain metric",
        what="Spread between the time averages of equivalent particles (their energies, kinetic energies or "
        "a chosen coordinate). In an effectively ergodic run every particle sees the same average and the "
        "spread falls as 1/(D t).",
        method="Omega(t) = mean_j (eps_j(t) - <eps(t)>)^2 of running time averages (Thirumalai, Mountain "
        "and Kirkpatrick, Phys. Rev. A 39, 3563 (1989)); slope of log Omega against log t at late times "
        "and a fit of Omega(0)/Omega(t) = D t + b.",
        threshold="caution when the late slope is flatter than -0.7, problem when flatter than -0.3 "
        "(common practice; ergodic decay has slope -1).",
        advice="A plateau means particles do not exchange their environments on the time scale of the run "
        "(a glassy or trapped system, or particles that are not equivalent). Check that the particles "
        "compared are equivalent; run longer.",
    ),
)


# ---------------------------------------------------------------------------------------------------
# Thirumalai-Mountain
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class TMResult:
    """Thirumalai-Mountain metric over time.

    omega : (T,) Omega(t) in ``unit``^2; ratio : (T,) Omega(t)/Omega(0) with Omega(0) the
    instantaneous spread between particles averaged over frames.
    """

    time_ps: np.ndarray
    omega: np.ndarray
    omega0: float
    ratio: np.ndarray
    d_per_ps: float  # fitted D of Omega(0)/Omega(t) = D t + b over the fit range
    late_slope: float  # d log Omega / d log t over the fit range
    plateau: bool  # late slope flatter than the caution threshold
    fit_range_ps: tuple[float, float]
    n_particles: int
    unit: str
    quantity: str
    settings: dict[str, Any] = field(default_factory=dict)


class TMAccumulator:
    """Streaming Thirumalai-Mountain metric: feed (n, N) per-particle values chunk by chunk."""

    def __init__(self) -> None:
        self._sum: np.ndarray | None = None
        self._count = 0
        self._omega: list[np.ndarray] = []
        self._inst_sum = 0.0

    def update(self, values: np.ndarray) -> None:
        e = np.asarray(values, dtype=np.float64)
        if e.ndim != 2:
            raise AnalysisError("per-particle values must have shape (n_frames, n_particles)")
        if self._sum is None:
            self._sum = np.zeros(e.shape[1])
        cs = self._sum + np.cumsum(e, axis=0)
        counts = self._count + np.arange(1, e.shape[0] + 1)
        avg = cs / counts[:, None]
        self._omega.append(avg.var(axis=1))
        self._inst_sum += float(e.var(axis=1).sum())
        self._sum = cs[-1]
        self._count += e.shape[0]

    def finish(self, *, dt_ps: float, fit_range_ps: tuple[float, float] | None = None, unit: str = "",
               quantity: str = "", n_particles: int = 0) -> TMResult:
        if self._count < 8:
            raise TooShortError("the Thirumalai-Mountain metric", have=self._count, need=8)
        omega = np.concatenate(self._omega)
        omega0 = self._inst_sum / self._count
        if not omega0 > 0:
            raise AnalysisError("the particles' values do not differ: the Thirumalai-Mountain metric is undefined")
        t = (np.arange(omega.size) + 1) * dt_ps  # the average over the first k frames covers k dt
        lo, hi = fit_range_ps if fit_range_ps is not None else (0.1 * t[-1], t[-1])
        sel = (t >= lo) & (t <= hi) & (omega > 0)
        if sel.sum() < 3:
            raise AnalysisError("the Thirumalai-Mountain fit range holds fewer than three points")
        ratio = omega / omega0
        inv = 1.0 / ratio[sel]
        d, b = np.polyfit(t[sel], inv, 1)
        slope = float(np.polyfit(np.log(t[sel]), np.log(omega[sel]), 1)[0])
        thr = verdicts.THRESHOLDS["sampling.tm_slope"]
        return TMResult(time_ps=t, omega=omega, omega0=omega0, ratio=ratio, d_per_ps=float(d),
                        late_slope=slope, plateau=slope > thr.caution, fit_range_ps=(float(lo), float(hi)),
                        n_particles=n_particles, unit=unit, quantity=quantity,
                        settings={"fit_range_ps": fit_range_ps})


def thirumalai_mountain(values: np.ndarray, *, dt_ps: float, fit_range_ps: tuple[float, float] | None = None,
                        unit: str = "", quantity: str = "per-particle values") -> TMResult:
    """Thirumalai-Mountain metric of per-particle series.

    Parameters
    ----------
    values : ndarray, shape (T, N)
        One series per particle (energy in kJ/mol, or any per-particle quantity in ``unit``).
    dt_ps : float
        Frame spacing (ps).
    fit_range_ps : (float, float), optional
        Range for the late-time fits; default the last 90% of the run.

    Returns
    -------
    TMResult
        ``d_per_ps`` is D_e in Omega(0)/Omega(t) = D_e t; for independent stationary series with
        statistical inefficiency g, D_e = 1 / (g dt).
    """
    e = np.asarray(values, dtype=np.float64)
    if e.ndim != 2 or e.shape[1] < 2:
        raise AnalysisError("the Thirumalai-Mountain metric needs values of shape (n_frames, n_particles >= 2)")
    acc = TMAccumulator()
    for i in range(0, e.shape[0], 65536):
        acc.update(e[i : i + 65536])
    return acc.finish(dt_ps=dt_ps, fit_range_ps=fit_range_ps, unit=unit, quantity=quantity, n_particles=e.shape[1])


def thirumalai_mountain_kinetic(run: Run, *, atom_indices: Sequence[int] | np.ndarray | None = None,
                                fit_range_ps: tuple[float, float] | None = None,
                                start: int = 0, stop: int | None = None, stride: int = 1) -> Work[TMResult]:
    """TM metric of per-atom kinetic energies (1/2 m v^2, kJ/mol) of a run, streamed.

    Use atoms that are equivalent (one species); the metric compares their time averages.
    """
    if run.frames is None or not run.frames.has_velocities:
        raise MissingDataError("the Thirumalai-Mountain metric of kinetic energies needs velocities",
                               path=run.paths[0] if run.paths else None)
    idx = np.arange(run.n_atoms) if atom_indices is None else np.asarray(atom_indices, dtype=np.int64)
    if idx.size < 2:
        raise AnalysisError("the Thirumalai-Mountain metric needs at least two atoms")
    t = np.asarray(run.time_ps)[start:stop:stride]
    if t.size < 2:
        raise TooShortError("the Thirumalai-Mountain metric", have=int(t.size), need=8)
    dt = float(np.median(np.diff(t)))
    from phasewake.core.model.framepass import run_one

    consumer = KineticEnergySeries(run, idx, start=start)
    acc = yield from run_one(run, consumer, label="Thirumalai-Mountain metric", start=start, stop=stop,
                             stride=stride)
    return acc.finish(dt_ps=dt, fit_range_ps=fit_range_ps, unit="kJ/mol", quantity="kinetic energy per atom",
                      n_particles=int(idx.size))


class KineticEnergySeries:
    """Per-atom kinetic energies 1/2 m v^2 (kJ/mol) of every frame fed into a :class:`TMAccumulator`: the
    frame consumer (``core/model/framepass.py``) of :func:`thirumalai_mountain_kinetic`, whose pass starts at
    frame ``start``.

    ``merge(later)`` folds in a consumer fed the frames right after this one's. The running time averages of
    a later range need the sums per atom of every frame before it, which that range's worker does not have:
    a part fed frames after ``start`` therefore holds its per-atom energies (frames x atoms, float64) and
    the part from ``start`` feeds them to its accumulator when it merges them, chunk by chunk in frame order,
    as the serial pass does.
    """

    needs_positions = False
    needs_velocities = True

    def __init__(self, run: Run, atoms: np.ndarray, *, start: int = 0) -> None:
        self.path = run.paths[0] if run.paths else None
        self.want = np.asarray(atoms, dtype=np.int64)
        self.atoms: np.ndarray | None = np.unique(self.want)
        self.masses = np.asarray(run.masses_amu, float)[self.want]
        self._local = self.want
        self.acc = TMAccumulator()
        self.first = int(start)
        self._range = (self.first, self.first)
        self._held: list[np.ndarray] | None = None  # a later part's per-atom energies, fed in at the merge

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        from phasewake.core.model.feeding import local_columns

        self._local = local_columns(columns, self.want)
        self._range = (int(start), int(stop))
        self._held = [] if start > self.first else None

    def update(self, chunk: Any) -> None:
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("the frames came without velocities", path=self.path)
        v = np.asarray(v, dtype=np.float64)[:, self._local]
        energies = 0.5 * self.masses[None, :] * np.einsum("fnc,fnc->fn", v, v)
        if self._held is not None:
            self._held.append(energies)
        else:
            self.acc.update(energies)

    def merge(self, later: KineticEnergySeries) -> None:
        from phasewake.core.model.feeding import check_next

        check_next(self._range, later._range, "Thirumalai-Mountain metric")
        if later._held is None:
            raise AnalysisError(f"Thirumalai-Mountain metric: the part from frame {later._range[0]} is the first "
                                "of the pass and cannot be merged into another")
        if self._held is not None:
            self._held.extend(later._held)
        else:
            for energies in later._held:
                self.acc.update(energies)
        self._range = (self._range[0], later._range[1])

    def finish(self) -> TMAccumulator:
        if self._held is not None:
            raise AnalysisError(f"Thirumalai-Mountain metric: the frames from {self._range[0]} were not merged "
                                f"into the part from frame {self.first}")
        return self.acc


def judge_tm(result: TMResult) -> verdicts.Verdict:
    return verdicts.judge(
        "sampling.tm_slope", result.late_slope, title="Thirumalai-Mountain metric", unit="log-log slope",
        message=f"The spread between time averages of {result.n_particles} particles ({result.quantity}) falls "
        f"with late log-log slope {result.late_slope:.2f} (ergodic decay: -1). " + verdicts.HEURISTIC_NOTE,
        advice=verdicts.EXPLANATIONS["sampling.tm_slope"].advice,
        details={"d_per_ps": result.d_per_ps},
    )


@dataclass(frozen=True)
class ThirumalaiMountainRequest(AnalysisRequest):
    """The Thirumalai-Mountain metric of per-atom kinetic energies (:func:`thirumalai_mountain_kinetic`) of
    ``atom_indices`` (None: every atom; use equivalent atoms) over frames [start, stop)."""

    name: ClassVar[str] = "thirumalai_mountain"
    label: ClassVar[str] = "Thirumalai-Mountain metric"

    atom_indices: tuple[int, ...] | None = None
    fit_range_ps: tuple[float, float] | None = None
    start: int = 0
    stop: int | None = None
    stride: int = 1

    def __post_init__(self) -> None:
        object.__setattr__(self, "atom_indices", index_tuple(self.atom_indices))

    def work(self, run: Run) -> Work[TMResult]:
        return (yield from thirumalai_mountain_kinetic(
            run, atom_indices=self.atom_indices, fit_range_ps=self.fit_range_ps,
            start=self.start, stop=self.stop, stride=self.stride))
