"""Figures: FigureSpec, builders from results, matplotlib export and the report."""
