"""Block averaging (Flyvbjerg and Petersen, J. Chem. Phys. 91, 461 (1989)) with the plateau level chosen by
the test of Jonsson, Phys. Rev. E 98, 043304 (2018)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phasewake.core.analyses import result
from phasewake.core.analyses.correlation.acf import one_series
from phasewake.core.errors import AnalysisError, TooShortError

# ---------------------------------------------------------------------------------------------------
# Blocking (Flyvbjerg-Petersen 1989) with an automatic plateau (Jonsson 2018)
# ---------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BlockingResult(result.ResultMixin):
    """The blocking curve and the level read as the plateau.

    ``sem[k]`` is the standard error of the mean (in ``unit``) estimated from 2^k-sample blocks,
    ``sem_error[k]`` its own error, sqrt(2/(n_k - 1)) relative.
    """

    block_size: np.ndarray  # shape (L,), samples per block
    n_blocks: np.ndarray  # shape (L,)
    sem: np.ndarray  # shape (L,), unit
    sem_error: np.ndarray  # shape (L,), unit
    plateau_level: int  # index into the arrays
    plateau_sem: float  # unit
    plateau_found: bool
    naive_sem: float  # sem at level 0 (ignores correlation), unit
    statistical_inefficiency: float  # (plateau_sem / naive_sem)^2, samples
    unit: str
    settings: dict[str, Any] = field(default_factory=dict)


def blocking(x: Any, *, min_blocks: int = 16, confidence: float = 0.99, unit: str = "") -> BlockingResult:
    """Flyvbjerg-Petersen block averaging with the plateau found automatically.

    At each level neighbours are averaged in pairs (x'_i = (x_{2i} + x_{2i+1}) / 2, an odd last sample
    dropped); the variance of the mean is c0' / (n' - 1) (Flyvbjerg and Petersen 1989). The plateau is
    the first level j whose remaining levels pass Jonsson's (2018) test: M_j = sum_{k>=j}
    n_k (gamma1_k / sigma2_k)^2 below the chi-square quantile with (levels - j) degrees of freedom,
    gamma1 the lag-1 autocovariance of the blocked series [test from memory of Jonsson, Phys. Rev. E 98,
    043304 (2018)].

    Parameters
    ----------
    x : array_like, shape (N,)
    min_blocks : int
        Levels with fewer blocks are not used.
    confidence : float
        Quantile of the chi-square test.
    unit : str
        Unit of the series.

    Returns
    -------
    BlockingResult
    """
    from scipy.stats import chi2

    a = one_series(x, "blocking")
    if a.size < 2 * min_blocks:
        raise TooShortError("blocking", have=int(a.size), need=2 * min_blocks)
    sizes, nbl, sems, errs, mstat = [], [], [], [], []
    cur = a.copy()
    size = 1
    while cur.size >= min_blocks:
        n = cur.size
        d = cur - cur.mean()
        c0 = float(np.dot(d, d) / n)
        g1 = float(np.dot(d[:-1], d[1:]) / n)
        var_mean = c0 / (n - 1)
        sizes.append(size)
        nbl.append(n)
        sems.append(math.sqrt(var_mean))
        errs.append(math.sqrt(var_mean) * math.sqrt(1.0 / (2.0 * (n - 1))))  # d sqrt(v) = sqrt(v) sqrt(2/(n-1))/2
        mstat.append(n * (g1 / c0) ** 2 if c0 > 0 else 0.0)
        m = (n // 2) * 2
        cur = 0.5 * (cur[0:m:2] + cur[1:m:2])
        size *= 2
    if sems[0] == 0:
        raise AnalysisError("the series has no variance (constant): blocking undefined")
    levels = len(sems)
    tail = np.cumsum(np.array(mstat)[::-1])[::-1]
    found = False
    level = levels - 1
    for j in range(levels):
        if tail[j] < chi2.ppf(confidence, levels - j):
            level, found = j, True
            break
    sem_arr = np.array(sems)
    return BlockingResult(
        block_size=np.array(sizes),
        n_blocks=np.array(nbl),
        sem=sem_arr,
        sem_error=np.array(errs),
        plateau_level=level,
        plateau_sem=float(sem_arr[level]),
        plateau_found=found,
        naive_sem=float(sem_arr[0]),
        statistical_inefficiency=float(max(1.0, (sem_arr[level] / sem_arr[0]) ** 2)),
        unit=unit,
        settings={"min_blocks": min_blocks, "confidence": confidence},
    )
