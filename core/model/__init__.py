"""The run model: a Run, its frame sources and the one frame-pass engine."""
