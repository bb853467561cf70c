"""Words for the window: what the core says for the command line, said for a window user.

The core's messages name command-line options ("give --timestep FS"); in the window the same advice
must say where to click. :func:`for_window` rewrites them, after
:func:`phasewake.core.figures.plots.plain_words` (no module paths, "±", σ_E).
"""

from __future__ import annotations

import re

from phasewake.core.figures.plots import plain_words

# option -> what to do in the window instead
WINDOW_ADVICE: dict[str, str] = {
    "--top": "open the trajectory together with its topology file: File \u25b8 Open run files\u2026, select both",
    "--timestep": "set the Time step in the run's settings under the Runs list and press Apply",
    "--constraints": "set the Constraints in the run's settings under the Runs list and press Apply",
    "--temperature": "set the Target temperature in the run's settings under the Runs list and press Apply",
    "--ensemble": "set the Ensemble in the run's settings under the Runs list and press Apply",
    "--thermostat": "set the Thermostat in the run's settings under the Runs list and press Apply",
}
_OPTION = r"(--(?:top|timestep|constraints|temperature|ensemble|thermostat))(?:[ =](?:FILE|FS|N|K|PS|NAME))?"


def for_window(text: str) -> str:
    """``text`` with command-line advice turned into window instructions, in plain words."""
    if not text:
        return text
    text = plain_words(text)

    def advice(m: re.Match[str]) -> str:
        return WINDOW_ADVICE[m.group(1)]

    text = re.sub(r"\buser \(" + _OPTION + r"\)", "you (the run's settings)", text)
    text = re.sub(r"\bgive (?:one )?\(" + _OPTION + r"(?:: [^)]*)?\)", advice, text)
    text = re.sub(r"\bgive " + _OPTION, advice, text)
    text = re.sub(r"\bGive " + _OPTION, lambda m: advice(m)[:1].upper() + advice(m)[1:], text)
    text = re.sub(_OPTION, advice, text)
    return text
