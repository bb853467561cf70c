"""Can the desktop window start here? Asked in a child process, because Qt aborts the whole process
(no exception to catch) when its platform plugin cannot load, e.g. a Linux desktop without one of the
X11 (xcb) libraries that Qt 6.5+ needs.

When the X11 plugin fails, the message names the libraries that are really missing on this machine:
each one the plugin needs is looked up (``ldconfig -p``, then ``ctypes.util.find_library``), instead
of repeating Qt's own hint, which names libxcb-cursor0 whatever is missing.
"""

from __future__ import annotations

import ctypes.util
import os
import subprocess
import sys
from collections.abc import Callable, Iterable

_PROBE = (
    "import sys\n"
    "from PySide6 import QtWidgets\n"
    "app = QtWidgets.QApplication(sys.argv[:1])\n"
    "print(app.platformName())\n"
)

# The X11 libraries Qt 6's xcb platform plugin loads (library name for find_library -> Debian/Ubuntu
# package): what ldd lists for the xcb plugin of PySide6 6.11 (libqxcb.so and libQt6XcbQpa.so.6)
# beyond the libraries every desktop has.
XCB_LIBRARIES: dict[str, str] = {
    "xcb": "libxcb1",
    "xcb-cursor": "libxcb-cursor0",
    "xcb-icccm": "libxcb-icccm4",
    "xcb-image": "libxcb-image0",
    "xcb-keysyms": "libxcb-keysyms1",
    "xcb-randr": "libxcb-randr0",
    "xcb-render": "libxcb-render0",
    "xcb-render-util": "libxcb-render-util0",
    "xcb-shape": "libxcb-shape0",
    "xcb-shm": "libxcb-shm0",
    "xcb-sync": "libxcb-sync1",
    "xcb-util": "libxcb-util1",
    "xcb-xfixes": "libxcb-xfixes0",
    "xcb-xkb": "libxcb-xkb1",
    "xkbcommon": "libxkbcommon0",
    "xkbcommon-x11": "libxkbcommon-x11-0",
}


def _ldconfig_names() -> set[str] | None:
    """Shared-library names the dynamic loader knows (``ldconfig -p``), or None when it cannot say."""
    for exe in ("ldconfig", "/sbin/ldconfig", "/usr/sbin/ldconfig"):
        try:
            out = subprocess.run([exe, "-p"], capture_output=True, text=True, timeout=10)
        except (OSError, subprocess.TimeoutExpired):
            continue
        if out.returncode == 0 and out.stdout:
            names = set()
            for line in out.stdout.splitlines()[1:]:
                name = line.strip().split(" ", 1)[0]
                if name.startswith("lib") and ".so" in name:
                    names.add(name.split(".so", 1)[0][3:])  # "libxcb-icccm.so.4" -> "xcb-icccm"
            return names
    return None


def missing_libraries(names: Iterable[str] = XCB_LIBRARIES, *,
                      known: set[str] | None = None,
                      find: Callable[[str], str | None] = ctypes.util.find_library) -> list[str]:
    """Those of ``names`` (find_library names, e.g. "xcb-icccm") this machine does not have.

    known : the loader's library names (``ldconfig -p``); looked up when None. A name absent from it is
    checked again with ``find`` (which also searches LD_LIBRARY_PATH-like places on some systems).
    """
    if known is None:
        known = _ldconfig_names() or set()
    return [n for n in names if n not in known and not find(n)]


def xcb_problem(text: str, *, missing: list[str] | None = None) -> str | None:
    """One line naming the missing X11 libraries, when Qt's error ``text`` is about the xcb plugin."""
    if "xcb" not in text:
        return None
    if missing is None:
        missing = missing_libraries()
    if not missing:
        return ("Qt cannot use this X11 display (its xcb plugin did not load, although the X11 libraries it "
                "needs are installed); try QT_QPA_PLATFORM=wayland, or QT_DEBUG_PLUGINS=1 to see why")
    packages = [XCB_LIBRARIES.get(n, f"lib{n}") for n in missing]
    libs = ", ".join(f"lib{n}" for n in missing)
    return (f"Qt cannot use this X11 display: {'this system library is' if len(missing) == 1 else 'these system libraries are'}"
            f" missing: {libs} (Debian/Ubuntu: sudo apt install {' '.join(packages)})")


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
    if "ModuleNotFoundError" in text:
        return "PySide6 (Qt) is not installed in this environment"
    xcb = xcb_problem(text)
    if xcb is not None:
        return xcb
    lines = [ln.strip() for ln in text.splitlines() if ln.strip() and not ln.startswith("Available platform")]
    return "Qt cannot start here: " + (lines[0] if lines else f"exit code {out.returncode}")
