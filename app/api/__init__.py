"""phasewake for notebooks and scripts (installed as the top-level package ``phasewake``)."""
