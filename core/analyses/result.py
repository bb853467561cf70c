"""What every main analysis result offers besides its fields: plain data and a figure.

:class:`ResultMixin` is a base of the frozen result dataclasses (``AuditResult``, ``CoordinateSeries``,
``PCAResult``, ...). It adds no fields (the cache codec and the results' equality are unchanged):

- :meth:`ResultMixin.to_dict`: the result as JSON-ready values (the one converter every JSON we
  write uses, :func:`phasewake.core.store.jsonable.to_jsonable`);
- :meth:`ResultMixin.figure_specs` / :meth:`ResultMixin.figure`: the figure descriptions drawn from the
  result (``phasewake.core.figures.plots.RESULT_FIGURES``, the table the window and the report use) and
  one of them drawn by matplotlib, so a notebook shows what the window shows and the report prints.

The analyses may not import the figures (the layering contract: figures are built from results, not the
other way round), so how a result becomes figures is handed in once by :func:`use_figures`; the
top-level package ``phasewake`` (``app/api``), which every import of phasewake runs first, does it.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

# (result, **options) -> list of FigureSpec;  (FigureSpec, preset=) -> matplotlib Figure
_figure_specs: Callable[..., list[Any]] | None = None
_render: Callable[..., Any] | None = None


def use_figures(figure_specs: Callable[..., list[Any]], render: Callable[..., Any]) -> None:
    """How results become figures: the FigureSpecs of a result, and a FigureSpec drawn as a matplotlib
    Figure (``plots.figures_for`` and ``export.render_figure``)."""
    global _figure_specs, _render
    _figure_specs, _render = figure_specs, render


class ResultMixin:
    """``to_dict()`` and ``figure()`` for a result dataclass (no fields of its own)."""

    __slots__ = ()

    def to_dict(self) -> dict[str, Any]:
        """Every field as plain JSON-ready values (arrays as lists, NaN as None, paths as text)."""
        from phasewake.core.store.jsonable import to_jsonable

        out = to_jsonable(self)
        assert isinstance(out, dict)
        return out

    def figure_specs(self, **options: Any) -> list[Any]:
        """The figure descriptions (FigureSpec) drawn from this result: what the window's panels and the
        report show."""
        from phasewake.core.errors import AnalysisError

        if _figure_specs is None:
            raise AnalysisError("no figure builders: import phasewake (the package) to draw results")
        return _figure_specs(self, **options)

    def figure(self, which: int | str = 0, *, preset: str = "slide", **options: Any) -> Any:
        """One figure of this result as a matplotlib Figure (no pyplot, no display needed).

        Parameters
        ----------
        which : int or str
            The figure's position in :meth:`figure_specs` or its key (e.g. ``"phase.portrait"``).
        preset : str
            Size and fonts: ``"slide"`` (default), ``"single"`` or ``"double"`` (journal column widths),
            as the window's export offers.
        **options
            Passed to the figure builder (e.g. ``cursor_ps``).

        Returns
        -------
        matplotlib.figure.Figure
        """
        return draw(self, which, preset=preset, **options)


def draw(result: Any, which: int | str = 0, *, preset: str = "slide", **options: Any) -> Any:
    """Figure ``which`` (position or key) of any result the figure builders know, as a matplotlib Figure."""
    from phasewake.core.errors import AnalysisError

    if _figure_specs is None or _render is None:
        raise AnalysisError("no figure builders: import phasewake (the package) to draw results")
    specs = _figure_specs(result, **options)
    keys = [s.key for s in specs]
    name = type(result).__name__
    if isinstance(which, str):
        if which not in keys:
            raise AnalysisError(f"{name} has no figure {which!r}; it has: {', '.join(keys) or 'none'}")
        spec = specs[keys.index(which)]
    elif -len(specs) <= which < len(specs):
        spec = specs[which]
    else:
        raise AnalysisError(f"{name} has {len(specs)} figure(s) ({', '.join(keys) or 'none'}); asked for number {which}")
    return _render(spec, preset=preset)
