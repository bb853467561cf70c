"""Results drawn as figures: the front end hands core's results the figure builders (core/analyses may
not import core/figures), with the heavy imports deferred to the first figure."""

from __future__ import annotations

from typing import Any


def _figure_specs(result: Any, **options: Any) -> list[Any]:
    from phasewake.core.figures.plots import figures_for

    return figures_for(result, **options)


def _render(spec: Any, *, preset: str = "slide") -> Any:
    from phasewake.core.figures.export import render_figure

    return render_figure(spec, preset=preset)


def install() -> None:
    """Give :class:`phasewake.core.analyses.result.ResultMixin` its figures (``result.figure()``)."""
    from phasewake.core.analyses.result import use_figures

    use_figures(_figure_specs, _render)


def figure(result: Any, which: int | str = 0, *, preset: str = "slide", **options: Any) -> Any:
    """A figure of a result (or of a run's energy table) as a matplotlib Figure, drawn from the same figure
    description as the window's panel and the report's page.

    Parameters
    ----------
    result : a result of phasewake's analyses, or ``run.energies``
    which : int or str
        The figure's position among the result's figures, or its key (``"phase.portrait"``, ...).
    preset : {"slide", "single", "double"}
        Size and fonts (a slide, or a journal column of one or two widths).
    **options
        Passed to the figure builder.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import phasewake as pw
    >>> run = pw.open(pw.sample_path("dimer_langevin_r2.h5md"))
    >>> fig = pw.figure(run.energies, "energy.series")
    >>> fig.axes[0].get_xlabel()
    'Time (ps)'
    """
    from phasewake.core.analyses.result import draw

    return draw(result, which, preset=preset, **options)
