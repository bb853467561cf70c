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
