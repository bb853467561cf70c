"""Kinetic energy and temperature per frame, of all atoms and of atom groups: the frame consumer of the
group temperatures (beside ``temperature.py``, whose kernels it uses).

K = sum_i m_i |v_i|^2 / 2 and T = 2 K / (N_dof k_B), as :func:`phasewake.core.analyses.temperature.kinetic_energy`
and :func:`~phasewake.core.analyses.temperature.kinetic_temperature`; equipartition per group by
:func:`~phasewake.core.analyses.temperature.group_temperatures`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses import temperature as tm
from phasewake.core.errors import AnalysisError, MissingDataError

if TYPE_CHECKING:
    from phasewake.core.model.run import FrameChunk, Run


@dataclass(frozen=True)
class GroupKinetics:
    """Kinetic energy and temperature per frame, of all atoms and of groups, with equipartition per group.

    time_ps : (n,) ps; kinetic_kJ_per_mol, com_kinetic_kJ_per_mol : (n,) kJ/mol; temperature_K : (n,) K
    group_kinetic_kJ_per_mol : (n, G) kJ/mol, columns in the order of ``group_names``
    groups : per-group temperatures with errors (``temperature.group_temperatures``)
    settings : n_com, n_constraints, group sizes, start, stop
    """

    time_ps: np.ndarray
    kinetic_kJ_per_mol: np.ndarray
    com_kinetic_kJ_per_mol: np.ndarray
    temperature_K: np.ndarray
    n_dof: int
    group_names: tuple[str, ...]
    group_kinetic_kJ_per_mol: np.ndarray
    group_dof: tuple[float, ...]
    groups: tuple[tm.GroupTemperature, ...]
    velocities_estimated: bool
    settings: dict[str, Any] = field(default_factory=dict)


class GroupTemperatureConsumer:
    """Kinetic temperature of all atoms and of atom groups, frame by frame (needs velocities).

    Parameters
    ----------
    run : Run
    groups : mapping name -> atom indices, optional
        Default: ``temperature.default_groups`` (by residue name; by element too when nothing is
        constrained), as the audit chooses them.
    n_com : int
        Centre-of-mass degrees of freedom removed (default 3).
    n_constraints : int, optional
        Default: the run's metadata, else 0. Constraints are shared between groups in proportion to atom
        counts (no rigid-pair inference here: the audit infers them from positions).
    significance_z : float
        Passed to ``group_temperatures``.

    Kinetic energies are those of ``temperature.kinetic_energy`` (squared speeds per atom in float32, sums
    over atoms in float64, all groups in one product); the temperature is T = 2 K / (N_dof k_B). Groups
    may overlap each other (an atom listed twice in one group counts once). Every value is per frame, so
    ``merge`` appends the later frames and the merged result equals the serial one exactly.
    """

    needs_positions = False
    needs_velocities = True

    def __init__(self, run: Run, *, groups: Mapping[str, Sequence[int] | np.ndarray] | None = None,
                 n_com: int = 3, n_constraints: int | None = None, significance_z: float = 3.0) -> None:
        self.path = run.paths[0] if run.paths else None
        if run.frames is None or not run.frames.has_velocities:
            raise MissingDataError("the run holds no velocities (and none can be estimated)", path=self.path)
        self.velocities_estimated = bool(getattr(run.frames, "velocities_estimated", False))
        n_con = n_constraints if n_constraints is not None else (run.metadata.n_constraints or 0)
        self.n_constraints = int(n_con)
        self.n_com = int(n_com)
        self.significance_z = float(significance_z)
        if groups is None:
            groups = tm.default_groups(run.topology, run.n_atoms, by_element=(self.n_constraints == 0))
        self.group_atoms = {k: np.asarray(v, dtype=np.int64) for k, v in groups.items()}
        self.atoms: np.ndarray | None = None
        self.n_atoms = run.n_massive  # the atoms with degrees of freedom (virtual sites have none)
        self._masses = np.asarray(run.masses_amu, dtype=np.float64)
        self._kin: list[np.ndarray] = []
        self._com: list[np.ndarray] = []
        self._gk: list[np.ndarray] = []
        self._time: list[np.ndarray] = []
        self._range = (0, 0)
        w = np.zeros((run.n_atoms, 1 + len(self.group_atoms)))
        w[:, 0] = 0.5 * self._masses
        for j, idx in enumerate(self.group_atoms.values()):
            w[idx, 1 + j] = 0.5 * self._masses[idx]
        self._weights = w
        self._m32 = self._masses.astype(np.float32)
        self._mtot = float(self._masses.sum())

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        if columns is not None:
            raise AnalysisError("the temperature needs every atom's velocity")
        self._range = (start, stop)

    def update(self, chunk: FrameChunk) -> None:
        v = chunk.velocities_nm_per_ps
        if v is None:
            raise MissingDataError("velocities are missing in a chunk of frames", path=self.path)
        self._time.append(np.asarray(chunk.time_ps, dtype=np.float64))
        # K = sum_i m_i |v_i|^2 / 2 as temperature.kinetic_energy, for all atoms and every group at once:
        # |v_i|^2 per atom in float32 (3 terms), the mass-weighted sums over atoms in float64 (one product)
        v = np.asarray(v, dtype=np.float32)
        v2 = np.einsum("fai,fai->fa", v, v).astype(np.float64)
        both = v2 @ self._weights  # (k, 1 + G)
        self._kin.append(both[:, 0])
        self._gk.append(both[:, 1:])
        p = np.matmul(self._m32, v).astype(np.float64)  # (k, 3) total momentum
        self._com.append(np.einsum("fi,fi->f", p, p) / (2.0 * self._mtot))

    def merge(self, later: GroupTemperatureConsumer) -> None:
        from phasewake.core.model.feeding import check_next

        check_next(self._range, later._range, "group temperatures")
        if list(later.group_atoms) != list(self.group_atoms) or later.n_com != self.n_com:
            raise AnalysisError("group temperatures: only consumers of the same settings can be merged")
        self._kin += later._kin
        self._com += later._com
        self._gk += later._gk
        self._time += later._time
        self._range = (self._range[0], later._range[1])

    def finish(self) -> GroupKinetics:
        start, stop = self._range
        kin = np.concatenate(self._kin) if self._kin else np.zeros(0)
        com = np.concatenate(self._com) if self._com else np.zeros(0)
        names = tuple(self.group_atoms)
        gk = np.concatenate(self._gk) if self._gk else np.zeros((0, len(names)))
        n_dof = tm.degrees_of_freedom(self.n_atoms, n_constraints=self.n_constraints, n_com=self.n_com)
        t_all = tm.kinetic_temperature(kin, n_dof)
        gdof = tm.group_degrees_of_freedom(self.group_atoms, self._masses, n_com=self.n_com,
                                           n_constraints=self.n_constraints)
        gt = tm.group_temperatures(gk, [gdof[k] for k in names], list(names),
                                   [int(self.group_atoms[k].size) for k in names], t_all,
                                   significance_z=self.significance_z) if names and kin.size else ()
        return GroupKinetics(
            time_ps=np.concatenate(self._time) if self._time else np.zeros(0), kinetic_kJ_per_mol=kin,
            com_kinetic_kJ_per_mol=com, temperature_K=t_all, n_dof=int(n_dof), group_names=names,
            group_kinetic_kJ_per_mol=gk, group_dof=tuple(float(gdof[k]) for k in names), groups=tuple(gt),
            velocities_estimated=self.velocities_estimated,
            settings={"n_com": self.n_com, "n_constraints": self.n_constraints,
                      "groups": {k: int(v.size) for k, v in self.group_atoms.items()},
                      "significance_z": self.significance_z, "start": start, "stop": stop},
        )
