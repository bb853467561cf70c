"""Sessions: the whole window state in a small JSON file of our own.

Format (``"format": "phasewake-session"``, ``"version": 1``), UTF-8 JSON::

    {
      "format": "phasewake-session",
      "version": 1,
      "runs": [                                  # in the order of the Runs list
        {"paths": ["/abs/run.h5md"],             # files of the run, absolute
         "relative_paths": ["run.h5md"],         # the same, relative to the session file's folder
         "topology": null,                       # topology file or null
         "settings": {"timestep_fs": null, "n_constraints": null, "temperature_K": null,
                      "ensemble": null, "thermostat": null, "units_style": null}}   # RunSettings.FIELDS;
                                                 # a key missing from an older session reads as null
      ],
      "current_run": 0,                          # index into runs, -1 for none
      "cursor_frame": 120,                       # frame index of the cursor in the current run
      "time_window_ps": [2.0, 40.0],             # analysis window, or null for the whole run
      "coordinate": "distance(0, 1)",            # coordinate specification of the panels
      "panel": "Energy",                         # the panel on top
      "choices": {"Phase space.figure": "..."}   # per-panel choices (figure shown, trail, states...)
    }

Files are written atomically (temporary file beside the target, then rename), so a crash never
leaves half a session. Reading checks the format name and version and raises
:class:`~phasewake.core.errors.SessionError` naming the file otherwise. Runs built in memory (no
files) cannot be saved and are listed in ``SessionState.skipped``.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from phasewake.core.errors import SessionError
from phasewake.core.store.jsonable import to_jsonable

FORMAT = "phasewake-session"
VERSION = 1
SUFFIX = ".pwsession"


@dataclass(frozen=True)
class RunRecord:
    paths: tuple[str, ...]
    topology: str | None = None
    settings: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class SessionState:
    runs: tuple[RunRecord, ...] = ()
    current_run: int = -1
    cursor_frame: int = 0
    time_window_ps: tuple[float, float] | None = None
    coordinate: str = ""
    panel: str = ""
    choices: dict[str, Any] = field(default_factory=dict)
    skipped: tuple[str, ...] = ()  # names of runs that had no files and were not saved


def to_json(state: SessionState, session_path: str | Path) -> str:
    folder = Path(session_path).resolve().parent
    runs = []
    for r in state.runs:
        abs_paths = [str(Path(p).resolve()) for p in r.paths]
        rel = []
        for p in abs_paths:
            try:
                rel.append(os.path.relpath(p, folder))
            except ValueError:  # another drive (Windows)
                rel.append(p)
        runs.append({
            "paths": abs_paths,
            "relative_paths": rel,
            "topology": None if r.topology is None else str(Path(r.topology).resolve()),
            "settings": dict(r.settings),
        })
    doc = {
        "format": FORMAT,
        "version": VERSION,
        "runs": runs,
        "current_run": int(state.current_run),
        "cursor_frame": int(state.cursor_frame),
        "time_window_ps": None if state.time_window_ps is None else [float(v) for v in state.time_window_ps],
        "coordinate": state.coordinate,
        "panel": state.panel,
        "choices": to_jsonable(state.choices),
    }
    return json.dumps(doc, indent=2, allow_nan=False) + "\n"


def save(state: SessionState, path: str | Path) -> Path:
    """Write the session to ``path`` atomically; returns the path written."""
    from phasewake.core.store.atomic import write_text

    path = Path(path)
    write_text(path, to_json(state, path))
    return path


def _pick_path(abs_path: str, rel_path: str | None, folder: Path) -> str:
    """The absolute path if it exists, else the relative one (a session moved with its data)."""
    if Path(abs_path).exists() or rel_path is None:
        return abs_path
    candidate = (folder / rel_path).resolve()
    return str(candidate) if candidate.exists() else abs_path


def load(path: str | Path) -> SessionState:
    """Read a session file; SessionError (naming the file) when it is not one of ours."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise SessionError("session file not found", path=path) from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise SessionError(f"cannot read session file ({exc})", path=path) from exc
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise SessionError(f"not a JSON session file (line {exc.lineno}: {exc.msg})", path=path) from exc
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise SessionError(f"not a phasewake session (expected \"format\": \"{FORMAT}\")", path=path)
    if doc.get("version") != VERSION:
        raise SessionError(f"session version {doc.get('version')!r} is not supported (this build reads "
                           f"version {VERSION})", path=path)
    folder = path.resolve().parent
    try:
        runs = []
        for r in doc.get("runs", []):
            rels = r.get("relative_paths") or [None] * len(r["paths"])
            paths = tuple(_pick_path(str(a), None if b is None else str(b), folder)
                          for a, b in zip(r["paths"], rels))
            runs.append(RunRecord(paths=paths, topology=r.get("topology"),
                                  settings=dict(r.get("settings") or {})))
        window = doc.get("time_window_ps")
        return SessionState(
            runs=tuple(runs),
            current_run=int(doc.get("current_run", -1 if not runs else 0)),
            cursor_frame=int(doc.get("cursor_frame", 0)),
            time_window_ps=None if window is None else (float(window[0]), float(window[1])),
            coordinate=str(doc.get("coordinate", "")),
            panel=str(doc.get("panel", "")),
            choices=dict(doc.get("choices") or {}),
        )
    except (KeyError, TypeError, ValueError, IndexError, AttributeError, OverflowError) as exc:
        raise SessionError(f"malformed session ({type(exc).__name__}: {exc})", path=path) from exc
