#!/usr/bin/env bash
# Build a standalone folder bundle with PyInstaller (a well-kept freezing tool from PyPI), then smoke-test it.
# Usage: make bundle   (not run in CI: about 4 minutes on 2 cores and ~450 MB of disk, measured 2026-12-02)
set -euo pipefail
cd "$(dirname "$0")/.."
BIN=.venv/bin
$BIN/python -m pip install --quiet "pyinstaller==6.22.3"
start=$(date +%s)
# The development install is editable (core/ and app/ are mapped onto phasewake.core / phasewake.app by an
# import hook), which PyInstaller cannot follow: install a plain copy of the package into a staging folder
# and freeze from there.
rm -rf build/bundle/site
$BIN/python -m pip install --quiet --no-deps --target build/bundle/site .
# PYTHONPATH puts the plain copy ahead of the editable install's import hook in PyInstaller's own helpers
PYTHONPATH="$PWD/build/bundle/site" $BIN/pyinstaller --noconfirm --clean --log-level WARN \
  --name phasewake --distpath dist/bundle --workpath build/bundle --specpath build/bundle \
  --paths build/bundle/site \
  --collect-data phasewake.sample_data --collect-submodules phasewake \
  --collect-submodules phasewake.app.commands --collect-submodules phasewake.app.window \
  --collect-all mdtraj \
  packaging/bundle_entry.py
echo "bundle built in $(( $(date +%s) - start )) s: dist/bundle/phasewake/"
# Smoke test of the frozen program, offscreen, no display needed.
export QT_QPA_PLATFORM=offscreen
dist/bundle/phasewake/phasewake --version
dist/bundle/phasewake/phasewake describe sample_data/dimer_nve.h5md >/dev/null
dist/bundle/phasewake/phasewake open --smoke-test sample_data/dimer_nve.h5md
echo "bundle smoke test passed"
