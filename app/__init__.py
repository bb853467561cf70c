"""phasewake front ends: the command line (``cli``) and the desktop window (``window``)."""
