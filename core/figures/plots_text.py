"""Words and numbers shared by the figure builders: plain-words captions, numbers with units, line styles."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from phasewake.core.figures.spec import (
    Axis,
    FigureSpec,
    PlotSpec,
    Style,
    series_style,
)

TIME = Axis("Time", "ps")
GREY = "#777777"


def indexed_style(i: int, *, marker: bool = False, width: float = 1.5) -> Style:
    st = series_style(i, marker=marker)
    return Style(colour=st.colour, dash=st.dash, width=width, marker=st.marker, marker_size=st.marker_size)


def fmt_number(v: float | None, unit: str = "", digits: int = 3) -> str:
    if v is None or not np.isfinite(v):
        return "n/a"
    text = f"{v:.{digits}g}"
    return f"{text} {unit}".strip()


# analysis settings a caption may mention, in words: name -> (phrase, unit)
_SETTING_WORDS: dict[str, tuple[str, str]] = {
    "n_atoms": ("{} atoms", ""),
    "temperature_K": ("temperature", "K"),
    "significance_z": ("significance threshold", "standard errors"),
    "timestep_ps": ("time step", "ps"),
    "n_constraints": ("{} constraints", ""),
    "n_dof": ("{} degrees of freedom", ""),
    "block_frames": ("block length", "frames"),
    "n_blocks": ("{} blocks", ""),
    "segment_frames": ("segment length", "frames"),
}


def _setting_phrase(name: str, value: str) -> str:
    phrase, unit = _SETTING_WORDS[name]
    return (phrase.format(value) if "{}" in phrase else f"{phrase} {value}") + (f" {unit}" if unit else "")


def settings_text(settings: Mapping[str, Any] | None) -> str:
    """Settings a caption mentions, as plain words ("temperature 122.3 K, significance threshold 3
    standard errors"), never ``name = value`` pairs; settings without a phrase are left out."""
    if not settings:
        return ""
    parts = []
    for k, v in settings.items():
        if v is None or isinstance(v, np.ndarray | list | tuple | dict | Mapping) or k not in _SETTING_WORDS:
            continue
        parts.append(_setting_phrase(k, f"{v:.4g}" if isinstance(v, float) else str(v)))
    return ", ".join(parts)


def _plain_number(v: float, decimals: int) -> str:
    return f"{v:.{max(0, decimals)}f}"


def _fix_plus_minus(m: Any) -> str:
    """"-545 ± 1.9e+02" -> "-545 ± 190": the error in plain digits and the value to the same decimal place."""
    value, err = float(m.group(1)), float(m.group(2))
    if not (1e-4 <= abs(err) < 1e6) or not np.isfinite(value):
        return m.group(0)
    decimals = 1 - int(np.floor(np.log10(abs(err))))
    return f"{_plain_number(value, decimals)} ± {_plain_number(round(err, decimals), decimals)}"


def plain_words(text: str) -> str:
    """Text for a reader, not a programmer: no module paths, "±" for "+-", σ_E for sigma_E, an error in
    plain digits beside its value, settings named in words rather than ``name = value``."""
    import re

    if not text:
        return text
    text = re.sub(r"phasewake\.(?:core|app)\.(?:[A-Za-z_]+\.)*([A-Za-z_]+)", lambda m: m.group(1).replace("_", " "), text)
    text = text.replace("+/-", "±").replace("+-", "±").replace(" <= ", " ≤ ").replace(" >= ", " ≥ ")
    text = re.sub(r"\b(cm|ps|ns|fs|nm)\^-1\b", r"\1⁻¹", text)
    text = re.sub(r"\b([AB])->([AB])\b", r"\1→\2", text)
    text = text.replace(" x sqrt(g)", " × √g").replace("sqrt(g)", "√g")
    text = re.sub(r"\bsigma_([A-Za-z]+)\b", r"σ_\1", text)
    text = re.sub(r"(-?\d+(?:\.\d+)?(?:[eE][+-]?\d+)?) ± (\d+(?:\.\d+)?[eE][+-]?\d+)", _fix_plus_minus, text)

    def setting(m: Any) -> str:
        v = m.group(2)
        try:
            v = f"{float(v):.4g}"
        except ValueError:
            pass
        return _setting_phrase(m.group(1), v)

    names = "|".join(sorted(_SETTING_WORDS, key=len, reverse=True))
    text = re.sub(rf"\b({names}) = ([-+0-9.eE]+)", setting, text)
    return text


def notes_text(notes: Sequence[str]) -> str:
    """Notes as sentences appended to a caption."""
    out = ""
    for n in notes:
        n = n.strip()
        if n:
            out += " " + n[:1].upper() + n[1:] + ("" if n.endswith((".", "!", "?")) else ".")
    return out




def empty_figure(key: str, title: str, why: str) -> FigureSpec:
    return FigureSpec(key=key, title=title,
                      plots=(PlotSpec(title=title, x=Axis(""), y=Axis(""), items=(), legend=False, note=why),),
                      caption=why)


PER_PS_TO_PER_CM = 1.0 / 0.0299792458  # 1 ps⁻¹ in cm⁻¹: 1/(c in cm/ps), c exact (SI)


def spectrum_limits(w: np.ndarray, y: np.ndarray, highest: float | None, *,
                     weight: float = 0.995) -> tuple[float, float] | None:
    """An x range for a spectrum: up to the highest significant peak plus a margin (or, with none, to
    where ``weight`` of the spectral weight lies), never beyond the data. None when that is the whole."""
    if w.size < 2:
        return None
    top = float(w[-1])
    if highest is not None and np.isfinite(highest) and highest > 0:
        edge = highest
    else:
        yy = np.clip(np.nan_to_num(np.asarray(y, float)), 0.0, None)
        c = np.cumsum(yy)
        if c[-1] <= 0:
            return None
        edge = float(w[min(int(np.searchsorted(c, weight * c[-1])), w.size - 1)])
    cut = min(top, 1.3 * edge + 200.0)
    return None if cut >= 0.95 * top else (float(min(0.0, w[0])), cut)
