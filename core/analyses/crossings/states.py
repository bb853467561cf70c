"""States (core sets) and the dividing surface suggested from a coordinate's free-energy profile."""

from __future__ import annotations

import math

import numpy as np

from phasewake.core.analyses.crossings.results import StateSuggestion
from phasewake.core.analyses.verdicts import THRESHOLDS
from phasewake.core.errors import AnalysisError, InputError, TooShortError

_NOMINAL_K = 300.0  # scale of a profile read only in kT (suggest_states): no result depends on it


def stated_states(states: tuple[float, float] | None, surface: float | None, *, option: str = "--states",
                  surface_option: str = "--surface") -> tuple[float, float] | None:
    """Core sets A (q <= a) and B (q >= b) and a dividing surface as the user gave them (``option`` and
    ``surface_option``: how they gave them), checked before any work: finite, A below B, the surface
    strictly between. Returns the cores as two floats (None when not given); InputError otherwise."""
    if surface is not None and not math.isfinite(surface):
        raise InputError(f"{surface_option} {surface:g}: expected a finite number")
    if states is None:
        return None
    a, b = float(states[0]), float(states[1])
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(f"{option} wants two finite numbers A_HI,B_LO, got {a:g},{b:g}")
    if not a < b:
        raise InputError(f"{option} {a:g},{b:g}: core A (q <= {a:g}) must lie below core B (q >= {b:g})")
    if surface is not None and not a < surface < b:
        raise InputError(f"{surface_option} {surface:g} must lie strictly between the cores of {option} "
                         f"({a:g} and {b:g})")
    return a, b


def _refine_top(centres: np.ndarray, f: np.ndarray, counts: np.ndarray, b: int, i: int, j: int) -> float:
    """Vertex of a parabola fitted (count-weighted) to F within 1 kT of the barrier top.

    The highest bin of a sparse top is mostly noise; the fitted vertex is steadier. Falls back to the
    bin centre when the fit is not a maximum inside the fitted window.
    """
    lo = b
    while lo - 1 > i and f[lo - 1] >= f[b] - 1.0:
        lo -= 1
    hi = b
    while hi + 1 < j and f[hi + 1] >= f[b] - 1.0:
        hi += 1
    sel = np.arange(lo, hi + 1)
    sel = sel[np.isfinite(f[sel]) & (counts[sel] > 0)]
    if sel.size < 4:
        return float(centres[b])
    c2, c1, _ = np.polyfit(centres[sel], f[sel], 2, w=np.sqrt(counts[sel]))
    if not c2 < 0:
        return float(centres[b])
    top = -c1 / (2.0 * c2)
    if not centres[lo] <= top <= centres[hi]:
        return float(centres[b])
    return float(top)


def suggest_states(q: np.ndarray, *, unit: str = "", temperature_K: float | None = None,
                   jacobian: str = "none") -> StateSuggestion:
    """Core sets and dividing surface from the free-energy profile F(q) = -kT ln P(q).

    The profile, its minima and barrier tops come from
    :func:`phasewake.core.analyses.landscape.free_energy_profile` (no Jacobian: the states are where q itself
    dwells). Of its barriers the one highest seen from both sides is used; the surface is its top;
    each core reaches from its minimum towards the barrier until F has risen by min(1 kT, half that
    side's barrier). These choices are ours (a heuristic): check them against the profile and adjust.

    Parameters
    ----------
    q : ndarray, shape (n,)
        Samples of the coordinate, pooled over replicas, in time order.
    temperature_K : float, optional
        Only sets the kJ/mol scale of the profile; F in kT does not depend on it.
    jacobian : "none" or "distance"
        Of the profile (see :func:`phasewake.core.analyses.landscape.free_energy_profile`).
    """
    from phasewake.core.analyses.landscape import free_energy_profile

    q = np.asarray(q, dtype=float).ravel()
    fin = np.isfinite(q)
    if not fin.all():  # no full-length copy when every value is finite
        q = q[fin]
    del fin
    if q.size < 50:
        raise TooShortError("suggesting states from a free-energy profile", have=int(q.size), need=50)
    if not float(q.max()) > float(q.min()):
        raise AnalysisError("the coordinate has no spread: cannot suggest states; give them explicitly")
    # F in kT does not depend on the temperature; it only scales the kJ/mol values, which are not kept
    prof = free_energy_profile(q, temperature_K=temperature_K or _NOMINAL_K, unit=unit, min_depth_kT=0.5,
                               jacobian=jacobian)
    kt = prof.kT_kJ_per_mol
    best = None
    for bar in prof.barriers:
        h = min(bar.height_from_left_kJ_per_mol, bar.height_from_right_kJ_per_mol) / kt
        if math.isfinite(h) and (best is None or h > best[0]):
            best = (h, bar)
    need = THRESHOLDS["crossings.barrier"].caution
    if best is None or best[0] < need:
        seen = "no barrier at all" if best is None else f"its highest barrier is {best[0]:.2f} kT"
        raise AnalysisError(
            f"no states defined: the free-energy profile of the coordinate shows no two minima separated by a "
            f"barrier of at least {need:g} kT ({seen}; {THRESHOLDS['crossings.barrier'].source}); crossings there "
            "would count noise. Choose a coordinate with a barrier, or give the states (--states A_HI,B_LO) "
            "and the surface yourself"
        )
    bar = best[1]
    f = np.where(np.isfinite(prof.free_energy_kT), prof.free_energy_kT, np.inf)
    centres, edges = prof.centers, prof.edges
    i = int(np.argmin(np.abs(centres - bar.left_minimum)))
    j = int(np.argmin(np.abs(centres - bar.right_minimum)))
    b = bar.index
    up_a = min(1.0, 0.5 * (f[b] - f[i]))
    up_b = min(1.0, 0.5 * (f[b] - f[j]))
    ka = i + int(np.argmax(f[i:b + 1] >= f[i] + up_a))
    kb = j - int(np.argmax(f[b:j + 1][::-1] >= f[j] + up_b))
    surface = _refine_top(centres, f, prof.counts, b, i, j)
    a_hi = min(float(edges[ka]), surface - 0.25 * (surface - float(centres[i])))
    b_lo = max(float(edges[kb + 1]), surface + 0.25 * (float(centres[j]) - surface))
    return StateSuggestion(
        a_hi=a_hi, b_lo=b_lo, surface=surface, minimum_a=float(centres[i]), minimum_b=float(centres[j]),
        barrier_from_a_kT=float(f[b] - f[i]), barrier_from_b_kT=float(f[b] - f[j]),
        centres=centres, free_energy_kT=prof.free_energy_kT, unit=unit,
        method="free-energy profile -kT ln P(q) (phasewake.core.analyses.landscape); surface at the top of the "
               "barrier highest from both sides; cores where F is within min(1 kT, half the barrier) of "
               "each minimum (our heuristic)",
    )
