#!/usr/bin/env bash
# Install the desktop entry and icon for the current user (XDG), after `pipx install phasewake`
# (or `pip install --user`). Needs the `phasewake-window` launcher on PATH.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
data="${XDG_DATA_HOME:-$HOME/.local/share}"
install -Dm644 "$here/phasewake.desktop" "$data/applications/phasewake.desktop"
install -Dm644 "$here/phasewake.svg" "$data/icons/hicolor/scalable/apps/phasewake.svg"
command -v update-desktop-database >/dev/null && update-desktop-database "$data/applications" || true
echo "installed: $data/applications/phasewake.desktop"
