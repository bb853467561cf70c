"""Shared test set-up. Qt must be offscreen before it starts (no display in CI)."""

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("MPLBACKEND", "Agg")
