"""Can the desktop window start here? Asked in a child process, because Qt aborts the whole process
(no exception to catch) when its platform plugin cannot load, e.g. a Linux desktop without the
libxcb-cursor0 library that Qt 6.5+ needs for X11.
"""

from __future__ import annotations

import os
import subprocess
import sys

_PROBE = (
    "import sys\n"
    "from PySide6 import QtWidgets\n"
    "app = QtWidgets.QApplication(sys.argv[:1])\n"
    "print(app.platformName())\n"
)


def qt_start_problem(timeout_s: float = 60.0) -> str | None:
    """None when a QApplication can start with this environment, else one line saying why not."""
    if os.environ.get("QT_QPA_PLATFORM", "").lower() in ("offscreen", "minimal"):
        return None  # these platforms need no display libraries
    try:
        out = subprocess.run([sys.executable, "-c", _PROBE], capture_output=True, text=True,
                             timeout=timeout_s, env=os.environ.copy())
    except subprocess.TimeoutExpired:
        return f"Qt did not start within {timeout_s:.0f} s"
    except OSError as exc:
        return f"could not test whether Qt starts ({exc})"
    if out.returncode == 0:
        return None
    text = out.stderr
    if "xcb-cursor0" in text:
        return ("Qt cannot use this X11 display: the system library libxcb-cursor0 is missing "
                "(Debian/Ubuntu: sudo apt install libxcb-cursor0)")
    if "ModuleNotFoundError" in text:
        return "PySide6 (Qt) is not installed in this environment"
    lines = [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.startswith("Available platform")]
    return "Qt cannot start here: " + (lines[0] if lines else f"exit code {out.returncode}")
