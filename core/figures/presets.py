"""Sizes and type sizes of a figure for where it is shown (a slide, a journal column, a page width), as
matplotlib settings; and :class:`ExportError`, the error of every figure output.

Presets:

* ``slide``: 16:9, 25.4 cm x 14.29 cm (10 in x 5.625 in), large fonts for a projector;
* ``single``: one journal column, 8.5 cm wide;
* ``double``: a full page width, 17 cm wide.

Text stays text in vector files (``svg.fonttype = "none"``, ``pdf.fonttype = 42``), so axis labels
with their units can be searched.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from phasewake.core.errors import PhasewakeError

if TYPE_CHECKING:
    pass

CM_PER_INCH = 2.54


class ExportError(PhasewakeError):
    """A figure, table or report cannot be written (bad format, unwritable folder, ...)."""


@dataclass(frozen=True)
class Preset:
    """Size and type sizes of an exported figure.

    ``height_cm`` is the height of one row of plots (``fixed_height`` False) or of the whole figure
    (``fixed_height`` True, e.g. a slide keeps 16:9 whatever the number of plots).
    """

    name: str
    width_cm: float
    height_cm: float
    font_pt: float  # axis labels and legend
    tick_pt: float
    title_pt: float
    line_scale: float  # multiplies Style.width
    fixed_height: bool = False
    max_height_cm: float = 22.0
    description: str = ""


# Type sizes: journals ask for about 7-9 pt at final size in a column figure (common practice); a
# projected slide needs about 14 pt and up to be read from the back of a room (common practice).
PRESETS: dict[str, Preset] = {
    "slide": Preset("slide", 25.4, 14.2875, 15.0, 13.0, 17.0, 1.6, fixed_height=True,
                    description="16:9 slide, 25.4 cm x 14.29 cm"),
    "single": Preset("single", 8.5, 6.4, 8.0, 7.0, 8.5, 0.8,
                     description="one journal column, 8.5 cm wide"),
    "double": Preset("double", 17.0, 8.0, 9.0, 8.0, 10.0, 1.0,
                     description="full page width, 17 cm wide"),
}


def rc_params(preset: Preset) -> dict[str, Any]:
    """matplotlib settings for a preset: type sizes, light background, text kept as text."""
    return {
        "font.size": preset.font_pt,
        "axes.labelsize": preset.font_pt,
        "axes.titlesize": preset.title_pt,
        "figure.titlesize": preset.title_pt + 1,
        "xtick.labelsize": preset.tick_pt,
        "ytick.labelsize": preset.tick_pt,
        "legend.fontsize": preset.tick_pt,
        "legend.framealpha": 0.9,
        "legend.title_fontsize": preset.tick_pt,
        "font.family": "sans-serif",
        "font.sans-serif": ["DejaVu Sans"],  # ships with matplotlib: same look on every machine
        "mathtext.default": "regular",
        "axes.unicode_minus": True,
        "figure.facecolor": "white",
        "axes.facecolor": "white",
        "savefig.facecolor": "white",
        "axes.edgecolor": "#333333",
        "axes.grid": True,
        "grid.color": "#d9d9d9",
        "grid.linewidth": 0.5 * preset.line_scale,
        "axes.linewidth": 0.8 * preset.line_scale,
        "xtick.major.width": 0.8 * preset.line_scale,
        "ytick.major.width": 0.8 * preset.line_scale,
        "lines.linewidth": 1.5 * preset.line_scale,
        "svg.fonttype": "none",
        "pdf.fonttype": 42,
        "ps.fonttype": 42,
        "svg.hashsalt": "phasewake",  # stable element ids: the same figure gives the same SVG
        "path.simplify": True,
        "agg.path.chunksize": 20_000,
    }


def preset_rc(preset: str | Preset) -> Any:
    """``matplotlib.rc_context`` with the settings of ``preset``."""
    import matplotlib

    rc: Any = rc_params(get_preset(preset))
    return matplotlib.rc_context(rc)


def get_preset(preset: str | Preset) -> Preset:
    if isinstance(preset, Preset):
        return preset
    try:
        return PRESETS[preset]
    except KeyError:
        raise ExportError(f"unknown figure preset {preset!r}; choose one of {', '.join(PRESETS)}") from None
