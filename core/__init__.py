"""phasewake analysis core: readers, the Run model and analyses. Never imports Qt."""

__version__ = "0.1.0"
