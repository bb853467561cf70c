"""Sample runs of our own scenario, regenerated exactly by make_samples.py."""
