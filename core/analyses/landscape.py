"""Densities, free-energy profiles and Poincaré surfaces of section of coordinate series.

* Histograms: automatic bin widths by the Freedman-Diaconis rule (Freedman and Diaconis, Z.
  Wahrscheinlichkeitstheorie verw. Gebiete 57, 453 (1981)), h = 2 IQR n^(-1/3), clipped to a
  sensible number of bins. 2D histograms count with ``np.bincount`` on precomputed bin indices.
* Free energy F(q) = -kT ln P(q) + C, shifted so the lowest bin is 0. ``jacobian="distance"`` uses
  -kT ln[P(r) / (4 pi r^2)], the free energy of a distance in 3D without the volume-element term.
* Errors from blocks: the series is cut into ``n_blocks`` contiguous blocks; the spread of the block
  histograms estimates the error of P in each bin, which includes the effect of correlation when the
  blocks are longer than the correlation time (Flyvbjerg and Petersen, J. Chem. Phys. 91, 461
  (1989), for the idea of block averages). The error of F and of barrier heights follows by the delta
  method (the block estimate of var(P_a/P_a - P_b/P_b) for a difference F_a - F_b).
* Minima are local minima over a few neighbouring bins; a minimum separated from a deeper one by a
  barrier lower than ``min_depth_kT`` (default 1 kT, common practice) is merged into it. Barrier tops
  are the highest points between consecutive minima.
* Poincaré section: (q2, p2) each time q1 crosses a value in a chosen direction, interpolated
  linearly between the two frames around the crossing.

These are descriptions of the sampled data; whether a profile is converged is the user's judgement
(see core.verdicts.HEURISTIC_NOTE).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses.request import AnalysisRequest
from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError, TooShortError
from phasewake.core.progress import Progress, Work
from phasewake.core.units import KB_KJ_PER_MOL_K

if TYPE_CHECKING:
    from phasewake.core.model.run import Run


def auto_bins(values: np.ndarray, *, min_bins: int = 10, max_bins: int = 200,
              value_range: tuple[float, float] | None = None) -> np.ndarray:
    """Bin edges by the Freedman-Diaconis rule, with between ``min_bins`` and ``max_bins`` bins."""
    v = _finite(values)
    if v.size < 2:
        raise TooShortError("a histogram", have=int(v.size), need=2)
    lo, hi = (float(v.min()), float(v.max())) if value_range is None else (float(value_range[0]), float(value_range[1]))
    if hi <= lo:
        hi = lo + (abs(lo) * 1e-6 or 1e-6)
        lo = lo - (hi - lo)
    q75, q25 = np.percentile(v, [75, 25])
    iqr = q75 - q25
    if iqr > 0:
        width = 2.0 * iqr * v.size ** (-1.0 / 3.0)
        nb = int(np.ceil((hi - lo) / width))
    else:
        nb = min_bins
    nb = int(np.clip(nb, min_bins, max_bins))
    return np.linspace(lo, hi, nb + 1)


def _edges(values: np.ndarray, bins: int | np.ndarray | None, value_range: tuple[float, float] | None,
           max_bins: int) -> np.ndarray:
    if bins is None:
        return auto_bins(values, value_range=value_range, max_bins=max_bins)
    if np.ndim(bins) == 0:
        v = _finite(values)
        lo, hi = (float(v.min()), float(v.max())) if value_range is None else value_range
        return np.linspace(lo, hi, int(bins) + 1)  # type: ignore[arg-type]
    e = np.asarray(bins, dtype=np.float64)
    if e.ndim != 1 or e.size < 2 or np.any(np.diff(e) <= 0):
        raise AnalysisError("bin edges must be increasing")
    return e


def _free_energy(density: np.ndarray, kt: float) -> np.ndarray:
    """F = -kT ln(density) (kJ/mol) shifted to a minimum of 0; NaN where the density is 0 (no samples)."""
    with np.errstate(divide="ignore"):
        f = -kt * np.log(density)
    f[~np.isfinite(f)] = np.nan
    if np.all(np.isnan(f)):
        raise AnalysisError("no samples inside the histogram range")
    return f - np.nanmin(f)


def _finite(values: np.ndarray) -> np.ndarray:
    """The finite values, as float64; no copy when they all are (a series of 1e8 samples is 0.8 GB)."""
    v = np.asarray(values, dtype=np.float64).ravel()
    return v if np.isfinite(v).all() else v[np.isfinite(v)]


_COUNT_CHUNK = 1 << 20  # samples binned at a time: the bin indices of a chunk, not of the whole series


def _block_counts(values: np.ndarray, edges: np.ndarray, n_blocks: int) -> tuple[np.ndarray, int]:
    """Counts per bin in each of ``n_blocks`` contiguous blocks of the series, shape (n_blocks, n_bins), and
    the number of samples outside the edges (or not finite); chunk by chunk, so no index array of the whole
    series is made (the blocks are those of :func:`_block_probabilities`)."""
    v = np.asarray(values, dtype=np.float64)
    n_bins = edges.size - 1
    bounds = np.linspace(0, v.size, n_blocks + 1).astype(int)
    out = np.zeros((n_blocks, n_bins), np.int64)
    outside = 0
    for b in range(n_blocks):
        for s in range(int(bounds[b]), int(bounds[b + 1]), _COUNT_CHUNK):
            i = _bin_index(v[s:min(s + _COUNT_CHUNK, int(bounds[b + 1]))], edges)
            inside = i[i >= 0]
            outside += i.size - inside.size
            out[b] += np.bincount(inside, minlength=n_bins)
    return out, outside


def _bin_index(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Bin of each value (the last edge is inside the last bin); -1 outside."""
    i = np.searchsorted(edges, values, side="right") - 1
    i[values == edges[-1]] = edges.size - 2
    i[(values < edges[0]) | (values > edges[-1]) | ~np.isfinite(values)] = -1
    return i


@dataclass(frozen=True)
class Histogram1D:
    """edges (n_bins+1,), centers (n_bins,), counts (n_bins,), density (n_bins,) per unit of q."""

    edges: np.ndarray
    centers: np.ndarray
    counts: np.ndarray
    density: np.ndarray
    unit: str
    n_samples: int
    n_outside: int
    bins_rule: str


def histogram_1d(values: np.ndarray, *, bins: int | np.ndarray | None = None,
                 value_range: tuple[float, float] | None = None, unit: str = "", max_bins: int = 200) -> Histogram1D:
    """Histogram of one coordinate with automatic (Freedman-Diaconis) bins by default."""
    v = np.asarray(values, dtype=np.float64)
    edges = _edges(v, bins, value_range, max_bins)
    by_block, outside = _block_counts(v, edges, 1)
    return _histogram(edges, by_block.sum(axis=0), unit=unit, n_samples=int(v.size), n_outside=outside,
                      bins_rule="freedman-diaconis" if bins is None else "given")


def _histogram(edges: np.ndarray, counts: np.ndarray, *, unit: str, n_samples: int, n_outside: int,
               bins_rule: str) -> Histogram1D:
    counts = np.asarray(counts, dtype=np.float64)
    total = counts.sum()
    density = counts / (total * np.diff(edges)) if total > 0 else np.zeros_like(counts)
    return Histogram1D(edges=edges, centers=0.5 * (edges[1:] + edges[:-1]), counts=counts, density=density,
                       unit=unit, n_samples=n_samples, n_outside=n_outside, bins_rule=bins_rule)


@dataclass(frozen=True)
class Histogram2D:
    """x_edges (nx+1,), y_edges (ny+1,), counts and density of shape (nx, ny)."""

    x_edges: np.ndarray
    y_edges: np.ndarray
    counts: np.ndarray
    density: np.ndarray
    x_unit: str
    y_unit: str
    n_samples: int


def histogram_2d(x: np.ndarray, y: np.ndarray, *, bins: int | tuple[int, int] | None = None,
                 value_range: tuple[tuple[float, float], tuple[float, float]] | None = None,
                 x_unit: str = "", y_unit: str = "", max_bins: int = 100) -> Histogram2D:
    """2D histogram via bincount on precomputed bins; automatic bins per axis (capped at ``max_bins``)."""
    xv = np.asarray(x, dtype=np.float64)
    yv = np.asarray(y, dtype=np.float64)
    if xv.shape != yv.shape:
        raise AnalysisError("x and y must have the same length")
    bx = by = None
    if bins is not None:
        bx, by = (bins, bins) if isinstance(bins, int | np.integer) else bins  # type: ignore[misc]
    ex = _edges(xv, bx, None if value_range is None else value_range[0], max_bins)
    ey = _edges(yv, by, None if value_range is None else value_range[1], max_bins)
    ix, iy = _bin_index(xv, ex), _bin_index(yv, ey)
    ok = (ix >= 0) & (iy >= 0)
    nx, ny = ex.size - 1, ey.size - 1
    counts = np.bincount(ix[ok] * ny + iy[ok], minlength=nx * ny).reshape(nx, ny).astype(np.float64)
    area = np.outer(np.diff(ex), np.diff(ey))
    total = counts.sum()
    density = counts / (total * area) if total > 0 else np.zeros_like(counts)
    return Histogram2D(x_edges=ex, y_edges=ey, counts=counts, density=density, x_unit=x_unit, y_unit=y_unit,
                       n_samples=int(xv.size))


@dataclass(frozen=True)
class Extremum:
    position: float
    index: int
    free_energy_kJ_per_mol: float
    error_kJ_per_mol: float


@dataclass(frozen=True)
class Barrier:
    """The highest point between two neighbouring minima, with its height seen from each side."""

    position: float
    index: int
    left_minimum: float
    right_minimum: float
    height_from_left_kJ_per_mol: float
    height_from_right_kJ_per_mol: float
    error_from_left_kJ_per_mol: float
    error_from_right_kJ_per_mol: float


@dataclass(frozen=True)
class FreeEnergyProfile(ResultMixin):
    """F(q) = -kT ln P(q) (+ Jacobian term), lowest bin at 0; NaN in empty bins.

    centers, edges in ``unit``; free_energy_kJ_per_mol and error_kJ_per_mol per bin.
    """

    edges: np.ndarray
    centers: np.ndarray
    free_energy_kJ_per_mol: np.ndarray
    error_kJ_per_mol: np.ndarray
    counts: np.ndarray
    minima: tuple[Extremum, ...]
    barriers: tuple[Barrier, ...]
    unit: str
    kT_kJ_per_mol: float
    temperature_K: float
    jacobian: str
    n_blocks: int
    min_depth_kT: float
    n_samples: int

    @property
    def free_energy_kT(self) -> np.ndarray:
        return self.free_energy_kJ_per_mol / self.kT_kJ_per_mol


def _block_probabilities(idx: np.ndarray, n_bins: int, n_blocks: int) -> np.ndarray:
    """(n_blocks, n_bins) probability per bin in each contiguous block (outside samples dropped)."""
    n = idx.size
    bounds = np.linspace(0, n, n_blocks + 1).astype(int)
    out = np.zeros((n_blocks, n_bins))
    for b in range(n_blocks):
        part = idx[bounds[b] : bounds[b + 1]]
        part = part[part >= 0]
        if part.size:
            out[b] = np.bincount(part, minlength=n_bins) / part.size
    return out


def _delta_error(pb: np.ndarray, p: np.ndarray, a: int, b: int | None, kt: float) -> float:
    """Block (delta-method) error of F_a - F_b (or of F_a alone when b is None), kJ/mol."""
    nb = pb.shape[0]
    if p[a] <= 0 or (b is not None and p[b] <= 0):
        return float("inf")
    r = pb[:, a] / p[a]
    if b is not None:
        r = r - pb[:, b] / p[b]
    return float(kt * np.std(r, ddof=1) / np.sqrt(nb))


def _find_minima(f: np.ndarray, window: int) -> list[int]:
    out: list[int] = []
    n = f.size
    for i in range(n):
        if not np.isfinite(f[i]):
            continue
        lo, hi = max(0, i - window), min(n, i + window + 1)
        nb = f[lo:hi]
        nb = nb[np.isfinite(nb)]
        if f[i] <= nb.min():
            if out and i - out[-1] <= window and f[out[-1]] == f[i]:
                continue  # a flat bottom: keep the first
            out.append(i)
    return out


def _top_between(f: np.ndarray, a: int, b: int) -> int:
    seg = f[a : b + 1]
    seg = np.where(np.isfinite(seg), seg, np.inf)  # an empty bin is an infinite barrier
    return a + int(np.argmax(seg))


def _minima_and_barriers(f: np.ndarray, centers: np.ndarray, err: np.ndarray, pb: np.ndarray, p: np.ndarray,
                         kt: float, min_depth: float) -> tuple[tuple[Extremum, ...], tuple[Barrier, ...]]:
    """Local minima of F (neighbours closer than ``min_depth`` kJ/mol in barrier merged into the lower) and the
    barrier top between each pair, with block errors."""
    mins = _find_minima(f, max(1, centers.size // 25))
    changed = True
    while changed and len(mins) > 1:
        changed = False
        for k in range(len(mins) - 1):
            a, b = mins[k], mins[k + 1]
            t = _top_between(f, a, b)
            ft = f[t] if np.isfinite(f[t]) else np.inf
            if ft - max(f[a], f[b]) < min_depth:
                mins.pop(k + 1 if f[b] >= f[a] else k)
                changed = True
                break
    minima = tuple(Extremum(float(centers[i]), int(i), float(f[i]), float(err[i])) for i in mins)
    barriers = []
    for k in range(len(mins) - 1):
        a, b = mins[k], mins[k + 1]
        t = _top_between(f, a, b)
        ft = float(f[t]) if np.isfinite(f[t]) else float("inf")
        barriers.append(Barrier(
            position=float(centers[t]), index=int(t), left_minimum=float(centers[a]),
            right_minimum=float(centers[b]), height_from_left_kJ_per_mol=ft - float(f[a]),
            height_from_right_kJ_per_mol=ft - float(f[b]),
            error_from_left_kJ_per_mol=_delta_error(pb, p, t, a, kt),
            error_from_right_kJ_per_mol=_delta_error(pb, p, t, b, kt),
        ))
    return minima, tuple(barriers)


def free_energy_profile(
    values: np.ndarray,
    *,
    temperature_K: float,
    bins: int | np.ndarray | None = None,
    value_range: tuple[float, float] | None = None,
    n_blocks: int = 10,
    jacobian: str = "none",
    unit: str = "",
    min_depth_kT: float = 1.0,
    max_bins: int = 200,
) -> FreeEnergyProfile:
    """Free-energy profile of a coordinate series with block errors, minima and barrier tops.

    Parameters
    ----------
    values : (n_frames,) coordinate values in time order (blocks are contiguous in time)
    temperature_K : K; kT = k_B T in kJ/mol
    bins, value_range : as :func:`histogram_1d` (Freedman-Diaconis bins by default)
    n_blocks : number of contiguous blocks for the errors (>= 2)
    jacobian : "none", or "distance" for -kT ln[P(r)/(4 pi r^2)] (a distance in 3D)
    min_depth_kT : minima separated by a lower barrier than this (in kT) are merged
    """
    v = np.asarray(values, dtype=np.float64)
    if jacobian not in ("none", "distance"):
        raise AnalysisError(f"unknown jacobian {jacobian!r}: use 'none' or 'distance'")
    if n_blocks < 2:
        raise AnalysisError("n_blocks must be at least 2")
    if v.size < 2 * n_blocks:
        raise TooShortError("a free-energy profile", have=int(v.size), need=2 * n_blocks)
    if temperature_K is None or not temperature_K > 0:
        raise AnalysisError("a free-energy profile needs a temperature above 0 K")
    kt = KB_KJ_PER_MOL_K * float(temperature_K)
    edges = _edges(v, bins, value_range, max_bins)
    by_block, outside = _block_counts(v, edges, n_blocks)  # one chunked pass: the histogram and its blocks
    hist = _histogram(edges, by_block.sum(axis=0), unit=unit, n_samples=int(v.size), n_outside=outside,
                      bins_rule="freedman-diaconis" if bins is None else "given")
    centers = hist.centers
    nbins = centers.size
    dens = hist.density.copy()
    if jacobian == "distance":
        if np.any(centers <= 0):
            raise AnalysisError("the distance Jacobian needs positive values")
        dens = dens / (4.0 * np.pi * centers**2)
    f = _free_energy(dens, kt)
    in_block = by_block.sum(axis=1, keepdims=True)
    pb = np.divide(by_block, in_block, out=np.zeros((n_blocks, nbins)), where=in_block > 0)
    p = hist.counts / max(hist.counts.sum(), 1.0)
    err = np.array([_delta_error(pb, p, i, None, kt) if p[i] > 0 else np.nan for i in range(nbins)])

    minima, barriers = _minima_and_barriers(f, centers, err, pb, p, kt, float(min_depth_kT) * kt)
    return FreeEnergyProfile(
        edges=edges, centers=centers, free_energy_kJ_per_mol=f, error_kJ_per_mol=err, counts=hist.counts,
        minima=minima, barriers=barriers, unit=unit, kT_kJ_per_mol=kt, temperature_K=float(temperature_K),
        jacobian=jacobian, n_blocks=int(n_blocks), min_depth_kT=float(min_depth_kT), n_samples=int(v.size),
    )


@dataclass(frozen=True)
class FreeEnergySurface:
    """F(x, y) = -kT ln P(x, y), lowest bin at 0, NaN where empty; shape (nx, ny)."""

    x_edges: np.ndarray
    y_edges: np.ndarray
    free_energy_kJ_per_mol: np.ndarray
    error_kJ_per_mol: np.ndarray
    counts: np.ndarray
    minima: tuple[tuple[float, float, float], ...]  # (x, y, F in kJ/mol)
    x_unit: str
    y_unit: str
    kT_kJ_per_mol: float
    temperature_K: float
    n_blocks: int


def free_energy_surface(
    x: np.ndarray, y: np.ndarray, *, temperature_K: float, bins: int | tuple[int, int] | None = None,
    value_range: tuple[tuple[float, float], tuple[float, float]] | None = None, n_blocks: int = 10,
    x_unit: str = "", y_unit: str = "", max_bins: int = 100,
) -> FreeEnergySurface:
    """2D free-energy surface with block errors; minima are bins lower than their 8 neighbours."""
    if temperature_K is None or not temperature_K > 0:
        raise AnalysisError("a free-energy surface needs a temperature above 0 K")
    kt = KB_KJ_PER_MOL_K * float(temperature_K)
    h = histogram_2d(x, y, bins=bins, value_range=value_range, x_unit=x_unit, y_unit=y_unit, max_bins=max_bins)
    f = _free_energy(h.density, kt)
    nx, ny = f.shape
    ix = _bin_index(np.asarray(x, dtype=np.float64), h.x_edges)
    iy = _bin_index(np.asarray(y, dtype=np.float64), h.y_edges)
    flat = np.where((ix >= 0) & (iy >= 0), ix * ny + iy, -1)
    pb = _block_probabilities(flat, nx * ny, n_blocks)
    p = (h.counts / max(h.counts.sum(), 1.0)).reshape(-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        err = kt * np.std(pb / p, axis=0, ddof=1) / np.sqrt(n_blocks)
    err = np.where(p > 0, err, np.nan).reshape(nx, ny)
    padded = np.pad(np.where(np.isfinite(f), f, np.inf), 1, constant_values=np.inf)
    is_min = np.isfinite(f)
    for dx in (-1, 0, 1):
        for dy in (-1, 0, 1):
            if dx == 0 and dy == 0:
                continue
            nb = padded[1 + dx : 1 + dx + nx, 1 + dy : 1 + dy + ny]
            is_min &= np.where(np.isfinite(f), f, np.inf) <= nb
    cx = 0.5 * (h.x_edges[1:] + h.x_edges[:-1])
    cy = 0.5 * (h.y_edges[1:] + h.y_edges[:-1])
    mins = tuple(sorted(((float(cx[i]), float(cy[j]), float(f[i, j])) for i, j in zip(*np.nonzero(is_min), strict=True)),
                        key=lambda t: t[2]))
    return FreeEnergySurface(x_edges=h.x_edges, y_edges=h.y_edges, free_energy_kJ_per_mol=f, error_kJ_per_mol=err,
                             counts=h.counts, minima=mins, x_unit=x_unit, y_unit=y_unit, kT_kJ_per_mol=kt,
                             temperature_K=float(temperature_K), n_blocks=int(n_blocks))


@dataclass(frozen=True)
class PoincareSection:
    """Points (q2, p2) where q1 crossed ``value`` in ``direction``; times of the crossings in ps."""

    q2: np.ndarray
    p2: np.ndarray
    time_ps: np.ndarray
    value: float
    direction: str
    q2_unit: str
    p2_unit: str

    @property
    def n_points(self) -> int:
        return int(self.q2.shape[0])


def poincare_section(
    q1: np.ndarray, q2: np.ndarray, p2: np.ndarray, time_ps: np.ndarray, *, value: float = 0.0,
    direction: str = "up", q2_unit: str = "", p2_unit: str = "",
) -> PoincareSection:
    """Surface of section: (q2, p2) each time q1 crosses ``value``, interpolated between frames.

    direction : "up" (q1 increasing through the value, i.e. p1 > 0), "down", or "both".
    Linear interpolation in the fraction s = (value - q1_i) / (q1_{i+1} - q1_i) of the frame step.
    """
    a = np.asarray(q1, dtype=np.float64) - float(value)
    b, c, t = (np.asarray(z, dtype=np.float64) for z in (q2, p2, time_ps))
    if not (a.shape == b.shape == c.shape == t.shape):
        raise AnalysisError("q1, q2, p2 and time must have the same length")
    if direction not in ("up", "down", "both"):
        raise AnalysisError(f"direction must be 'up', 'down' or 'both', not {direction!r}")
    up = (a[:-1] < 0) & (a[1:] >= 0)
    down = (a[:-1] > 0) & (a[1:] <= 0)
    sel = up if direction == "up" else down if direction == "down" else (up | down)
    i = np.nonzero(sel)[0]
    s = -a[i] / (a[i + 1] - a[i])
    return PoincareSection(
        q2=b[i] + s * (b[i + 1] - b[i]), p2=c[i] + s * (c[i + 1] - c[i]), time_ps=t[i] + s * (t[i + 1] - t[i]),
        value=float(value), direction=direction, q2_unit=q2_unit, p2_unit=p2_unit,
    )


def poincare_from_series(q1_series: Any, q2_series: Any, *, value: float = 0.0, direction: str = "up") -> PoincareSection:
    """Surface of section from two :class:`~phasewake.core.analyses.coordinates.CoordinateSeries` of one run.

    Records (q2, p2) when q1 crosses ``value``; p2 is q2's conjugate momentum (its velocity when the
    run gives no effective mass).
    """
    p2 = q2_series.momentum if q2_series.momentum is not None else q2_series.velocity
    if p2 is None:
        raise AnalysisError(f"{q2_series.spec} has no momentum or velocity for a surface of section")
    unit = q2_series.momentum_unit if q2_series.momentum is not None else q2_series.velocity_unit
    if q1_series.values.shape != q2_series.values.shape:
        raise AnalysisError("the two coordinates must cover the same frames")
    return poincare_section(q1_series.values, q2_series.values, p2, q1_series.time_ps, value=value,
                            direction=direction, q2_unit=q2_series.unit, p2_unit=unit)


DISTANCE_FUNCTIONS = ("distance", "com_distance")  # coordinates that are a distance in 3D


def jacobian_of(spec: str) -> str:
    """The Jacobian of a coordinate's profile from its parsed specification: ``"distance"`` (4 pi r^2)
    for a distance between two points in 3D, ``"none"`` for the others (angles, dihedrals, rmsd, pc)."""
    from phasewake.core.analyses.coordspec import parse

    return "distance" if parse(spec).function in DISTANCE_FUNCTIONS else "none"


def free_energy_of_series(series: Any, *, temperature_K: float, jacobian: str = "auto", n_blocks: int = 10,
                          bins: int | np.ndarray | None = None, min_depth_kT: float = 1.0) -> FreeEnergyProfile:
    """Free-energy profile of a CoordinateSeries. ``jacobian="auto"`` applies the distance Jacobian
    -kT ln[P(r)/4 pi r^2] to ``distance`` and ``com_distance`` coordinates and none to the others."""
    if jacobian == "auto":
        jacobian = jacobian_of(series.spec)
    return free_energy_profile(series.values, temperature_K=temperature_K, jacobian=jacobian, n_blocks=n_blocks,
                               bins=bins, unit=series.unit, min_depth_kT=min_depth_kT)


# ---------------------------------------------------------------------------------------------------
# The temperature of a run and the request of every front end
# ---------------------------------------------------------------------------------------------------

UNKNOWN_TEMPERATURE = ("the temperature is unknown (no thermostat target in the files and no temperature column); "
                       "state it: --temperature on the command line, the thermostat temperature in the window's "
                       "Runs list")


def run_temperature(run: Run) -> tuple[float | None, str]:
    """The temperature (K) of ``run`` for kT, and where it comes from; ``(None, why)`` when unknown.

    The run's own statement first (the thermostat target from its files, or a temperature stated when it
    was opened), else the mean kinetic temperature of its energy table. Never a guess: with neither, the
    temperature is unknown and whatever needs kT says so.
    """
    if run.metadata.temperature_K:
        return float(run.metadata.temperature_K), "thermostat target of the run"
    if run.energies is not None:
        s = run.energies.by_role("temperature")
        if s is not None:
            v = np.asarray(s.values, dtype=float)
            if np.isfinite(v).any():
                return float(np.nanmean(v)), "mean kinetic temperature in the energy table"
    return None, UNKNOWN_TEMPERATURE


JACOBIANS = ("none", "auto")


def resolve_jacobian(jacobian: str, coordinate: str) -> str:
    """``"none"``, or for ``"auto"`` the Jacobian of the parsed specification (:func:`jacobian_of`)."""
    if jacobian not in JACOBIANS:
        raise AnalysisError(f"unknown jacobian {jacobian!r}: use one of {', '.join(JACOBIANS)}")
    return jacobian_of(coordinate) if jacobian == "auto" else "none"


@dataclass(frozen=True)
class LandscapeRequest(AnalysisRequest):
    """The free-energy profile -kT ln P(q) of ``coordinate`` over frames [start, stop): one request for the
    command line, the window and the report.

    Decided here: the temperature (``temperature_K`` when given, else :func:`run_temperature`; unknown is
    an error that says how to state it, never a guess) and the Jacobian: ``"none"`` by default, the same
    profile the crossings analysis suggests its states from (:class:`phasewake.core.analyses.crossings.
    CrossingsRequest`), so the barriers of both agree; ``"auto"`` applies 4 pi r^2 to a distance (from the
    parsed specification).
    """

    name: ClassVar[str] = "landscape"
    label: ClassVar[str] = "free-energy profile"

    coordinate: str
    jacobian: str = "none"
    temperature_K: float | None = None
    bins: int | None = None
    n_blocks: int = 10
    min_depth_kT: float = 1.0
    start: int = 0
    stop: int | None = None

    def work(self, run: Run) -> Work[FreeEnergyProfile]:
        from phasewake.core.analyses.coordinates import compute_coordinates

        jacobian = resolve_jacobian(self.jacobian, self.coordinate)
        temp = self.temperature_K if self.temperature_K is not None else run_temperature(run)[0]
        if temp is None:
            raise AnalysisError(f"no free-energy profile: {UNKNOWN_TEMPERATURE}")
        series = yield from compute_coordinates(run, [self.coordinate], start=self.start, stop=self.stop)
        s = series[0]
        v = np.asarray(s.values, dtype=float)
        yield Progress(1, 1, "free-energy profile")
        return free_energy_profile(v[np.isfinite(v)], temperature_K=float(temp), bins=self.bins,
                                   n_blocks=self.n_blocks, jacobian=jacobian, unit=s.unit,
                                   min_depth_kT=self.min_depth_kT)
