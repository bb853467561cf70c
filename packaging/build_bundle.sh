#!/usr/bin/env bash
# Build a standalone folder bundle with PyInstaller (a well-kept freezing tool from PyPI), then smoke-test it.
# Usage: make bundle   (not run in CI: it takes a few minutes and ~400 MB of disk)
set -euo pipefail
cd "$(dirname "$0")/.."
BIN=.venv/bin
$BIN/python -m pip install --quiet "pyinstaller==6.22.3"
start=$(date +%s)
$BIN/pyinstaller --noconfirm --clean --log-level WARN \
  --name phasewake --distpath dist/bundle --workpath build/bundle --specpath build/bundle \
  --collect-data phasewake.sample_data --collect-submodules phasewake \
  --collect-all mdtraj --hidden-import scipy.special._cdflib \
  packaging/bundle_entry.py
echo "bundle built in $(( $(date +%s) - start )) s: dist/bundle/phasewake/"
# Smoke test of the frozen program, offscreen, no display needed.
export QT_QPA_PLATFORM=offscreen
dist/bundle/phasewake/phasewake --version
dist/bundle/phasewake/phasewake describe sample_data/dimer_nve.h5md >/dev/null
echo "bundle smoke test passed"
