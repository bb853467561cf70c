"""Velocity autocorrelation, diffusion (Green-Kubo and mean-squared displacement), vibrational spectrum.

Everything streams over frame chunks with bounded memory, and the exact sum over all time origins is
recovered (:class:`BlockCorrelator`). For lag windows up to 256 frames the frame-pair products of the
band of L lags are BLAS matrix products of S origins against the S + L - 1 frames they reach (cost
~ 2 (S + L - 1) flops per value and origin, S ~ L / 3); for longer windows, blocks of B >= L frames
are correlated by FFT with the next block (zero-padded to 2B, so there is no circular wrap-around).
Either way only about 2 (L + S) frames of the used atoms are held between chunks.
The VACF is compute-bound: 20,000 atoms, 2,200 frames and 50 lags are ~17 GFLOP of float32 products,
~0.45 s of one core of the shared test machine, against ~0.1 s to read the velocities from the page
cache.
The spectrum is then the Fourier transform of the averaged, windowed VACF (Wiener-Khinchin).

Methods and papers:

* Green-Kubo: D = (1/d) int_0^T <v(0).v(t)> dt (M. S. Green, J. Chem. Phys. 22, 398 (1954);
  R. Kubo, J. Phys. Soc. Jpn. 12, 570 (1957)); the upper limit T is chosen where the VACF has
  decayed into its own noise and stays there, and is reported.
* Einstein: MSD(t) -> 2 d D t; MSD by the same block correlation of unwrapped positions
  (MSD(k) = <r(t+k)^2> + <r(t)^2> - 2 <r(t).r(t+k)>, the decomposition of V. Calandrini,
  E. Pellegrini, P. Calligari, K. Hinsen, G. R. Kneller, Collection SFN 12, 201 (2011)).
* Finite-size correction: D0 = D_PBC + xi kT / (6 pi eta L), xi = 2.837297 (I.-C. Yeh and
  G. Hummer, J. Phys. Chem. B 108, 15873 (2004)).
* Vibrational density of states from the mass-weighted VACF, normalised to the number of degrees
  of freedom (J. M. Dickey and A. Paskin, Phys. Rev. 188, 1407 (1969); P. H. Berens, D. H. J.
  Mackay, G. M. White, K. R. Wilson, J. Chem. Phys. 79, 2375 (1983)); a Hann lag window against
  leakage (common practice).

Units: velocities nm/ps, masses amu, time ps; amu nm^2/ps^2 = kJ/mol; D in nm^2/ps
(1 nm^2/ps = 1e-6 m^2/s = 1e-2 cm^2/s); wavenumbers cm^-1 (exact c), frequencies THz.

The package: :mod:`~phasewake.core.analyses.velocity.correlator` (the block correlator),
:mod:`~phasewake.core.analyses.velocity.autocorrelation` (the VACF consumer and :func:`vacf`),
:mod:`~phasewake.core.analyses.velocity.transport` (Green-Kubo, MSD, Yeh-Hummer) and
:mod:`~phasewake.core.analyses.velocity.vdos` (the spectrum); the requests are here.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, ClassVar

import numpy as np

from phasewake.core.analyses.request import AnalysisRequest, index_groups, index_tuple
from phasewake.core.analyses.velocity.autocorrelation import (
    DEFAULT_BUFFER_BYTES,
    VACFConsumer,
    VACFResult,
    straddling_sums,
    vacf,
    vacf_from_velocities,
    vacf_result,
)
from phasewake.core.analyses.velocity.correlator import GRAM_MAX_LAG, BlockCorrelator
from phasewake.core.analyses.velocity.transport import (
    NM2_PER_PS_TO_CM2_PER_S,
    YEH_HUMMER_XI,
    GreenKuboResult,
    MSDConsumer,
    MSDResult,
    TransportResult,
    decay_frames,
    green_kubo,
    msd,
    msd_from_positions,
    transport,
    yeh_hummer_correction_nm2_per_ps,
)
from phasewake.core.analyses.velocity.vdos import (
    DEFAULT_SPECTRUM_LAG_PS,
    PS_PER_S,
    SPEED_OF_LIGHT_CM_PER_S,
    Peak,
    VDOSResult,
    judge_peaks,
    nyquist_cm1,
    spectrum_from_vacf,
    spectrum_lag_ps,
    vdos_from_vacf,
    vdos_from_velocities,
    vibrational_spectrum,
    wavenumber_cm1_from_thz,
)

if TYPE_CHECKING:
    from phasewake.core.model.run import Run
    from phasewake.core.progress import Work

__all__ = [
    "DEFAULT_BUFFER_BYTES", "DEFAULT_SPECTRUM_LAG_PS", "GRAM_MAX_LAG", "NM2_PER_PS_TO_CM2_PER_S", "PS_PER_S",
    "SPEED_OF_LIGHT_CM_PER_S", "YEH_HUMMER_XI", "BlockCorrelator", "GreenKuboResult", "MSDConsumer", "MSDResult",
    "MSDRequest", "Peak", "SpectrumRequest", "TransportRequest", "TransportResult", "VACFConsumer", "VACFRequest", "VACFResult", "VDOSResult",
    "decay_frames", "green_kubo", "judge_peaks", "msd", "msd_from_positions", "nyquist_cm1", "spectrum_from_vacf",
    "spectrum_lag_ps", "straddling_sums", "transport", "vacf", "vacf_from_velocities", "vacf_result",
    "vdos_from_vacf", "vdos_from_velocities", "vibrational_spectrum", "wavenumber_cm1_from_thz",
    "yeh_hummer_correction_nm2_per_ps",
]


def _whole(run: Run, start: int, stop: int | None, stride: int) -> bool:
    """Whether the frames asked for are every frame of ``run`` (what a shared pass reads)."""
    return start == 0 and stride == 1 and (stop is None or stop >= run.n_frames)


@dataclass(frozen=True)
class VACFRequest(AnalysisRequest):
    """The velocity autocorrelation with every setting a user can give (those of :func:`vacf`).

    Examples
    --------
    >>> from phasewake.core.analyses.velocity import VACFRequest
    >>> VACFRequest(max_lag_ps=0.5, groups={"ions": [3, 1]}).groups
    {'ions': (3, 1)}
    """

    name: ClassVar[str] = "vacf"
    label: ClassVar[str] = "velocity autocorrelation"

    groups: Mapping[str, Sequence[int]] | None = field(default=None, hash=False)
    mass_weighted: bool = False
    max_lag_ps: float | None = None
    start: int = 0
    stop: int | None = None
    stride: int = 1
    max_buffer_bytes: int = DEFAULT_BUFFER_BYTES

    def __post_init__(self) -> None:
        object.__setattr__(self, "groups", index_groups(self.groups))

    def work(self, run: Run) -> Work[VACFResult]:
        return (yield from vacf(run, **self.settings()))

    def consumer(self, run: Run) -> VACFConsumer | None:
        """The VACF of every frame in a shared pass (None for a part of the frames or a stride)."""
        if not _whole(run, self.start, self.stop, self.stride):
            return None
        return VACFConsumer(run, **self.settings())


@dataclass(frozen=True)
class SpectrumRequest(AnalysisRequest):
    """The vibrational spectrum (VDOS) with every setting a user can give (those of
    :func:`vibrational_spectrum`).

    Examples
    --------
    >>> from phasewake.core.analyses.velocity import SpectrumRequest
    >>> SpectrumRequest(atom_indices=[0, 1]).atom_indices
    (0, 1)
    """

    name: ClassVar[str] = "spectrum"
    label: ClassVar[str] = "vibrational spectrum"

    atom_indices: Sequence[int] | None = field(default=None, hash=False)
    window: str = "hann"
    max_lag_ps: float | None = None
    n_dof: float | None = None
    peak_prominence: float = 0.05
    start: int = 0
    stop: int | None = None
    stride: int = 1
    max_buffer_bytes: int = DEFAULT_BUFFER_BYTES

    def __post_init__(self) -> None:
        object.__setattr__(self, "atom_indices", index_tuple(self.atom_indices))

    def work(self, run: Run) -> Work[VDOSResult]:
        return (yield from vibrational_spectrum(run, **self.settings()))

    def consumer(self, run: Run) -> VACFConsumer | None:
        """The mass-weighted VACF of the atoms over every frame, for a shared pass (None otherwise)."""
        if not _whole(run, self.start, self.stop, self.stride):
            return None
        idx = np.arange(run.n_atoms) if self.atom_indices is None else np.asarray(self.atom_indices)
        return VACFConsumer(run, groups={"atoms": idx}, mass_weighted=True,
                            max_lag_ps=spectrum_lag_ps(run, self.max_lag_ps, self.start, self.stop, self.stride),
                            max_buffer_bytes=self.max_buffer_bytes)

    def after_pass(self, run: Run, finished: VACFResult) -> Work[VDOSResult]:
        idx = np.arange(run.n_atoms) if self.atom_indices is None else np.asarray(self.atom_indices)
        return spectrum_from_vacf(run, finished, idx, window=self.window, n_dof=self.n_dof,
                                  peak_prominence=self.peak_prominence)
        yield  # pragma: no cover - makes this a generator


@dataclass(frozen=True)
class MSDRequest(AnalysisRequest):
    """The mean-squared displacement and Einstein diffusion with every setting a user can give (those of
    :func:`msd`).

    Examples
    --------
    >>> from phasewake.core.analyses.velocity import MSDRequest
    >>> MSDRequest(groups={"ions": [0, 1]}, fit_range_ps=(1, 5)).fit_range_ps
    (1.0, 5.0)
    """

    name: ClassVar[str] = "msd"
    label: ClassVar[str] = "mean-squared displacement"

    groups: Mapping[str, Sequence[int]] | None = field(default=None, hash=False)
    max_lag_ps: float | None = None
    fit_range_ps: tuple[float, float] | None = None
    start: int = 0
    stop: int | None = None
    stride: int = 1
    max_buffer_bytes: int = DEFAULT_BUFFER_BYTES
    dimensions: int = 3

    def __post_init__(self) -> None:
        object.__setattr__(self, "groups", index_groups(self.groups))
        if self.fit_range_ps is not None:
            object.__setattr__(self, "fit_range_ps", tuple(float(x) for x in self.fit_range_ps))

    def work(self, run: Run) -> Work[MSDResult]:
        return (yield from msd(run, **self.settings()))


@dataclass(frozen=True)
class TransportRequest(AnalysisRequest):
    """Green-Kubo and Einstein diffusion with block errors and their comparison (the settings of
    :func:`transport`). ``vacf_result``, a VACF of the same run already computed, is handed over to save
    its pass; it is not a setting (it does not change the result: ``compare=False``) and is left out of
    the key.
    """

    name: ClassVar[str] = "transport"
    label: ClassVar[str] = "Green-Kubo and MSD with block errors"

    groups: Mapping[str, Sequence[int]] | None = field(default=None, hash=False)
    limit_ps: float | None = None
    max_lag_ps: float | None = None
    fit_range_ps: tuple[float, float] | None = None
    start: int = 0
    stop: int | None = None
    n_blocks: int = 5
    with_msd: bool = True
    vacf_result: VACFResult | None = field(default=None, compare=False, hash=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "groups", index_groups(self.groups))
        if self.fit_range_ps is not None:
            object.__setattr__(self, "fit_range_ps", tuple(float(x) for x in self.fit_range_ps))

    def work(self, run: Run) -> Work[TransportResult]:
        return (yield from transport(run, **self.settings(), vacf_result=self.vacf_result))
