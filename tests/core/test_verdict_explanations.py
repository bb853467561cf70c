"""Every verdict kind explains itself: what it is, how it is computed (method and paper),
the threshold and its source, and what to do when it is off. The same text is what the window's
tooltips, the report's captions and `phasewake audit --explain` show.
"""

import importlib
import pkgutil

import pytest

import phasewake.core as core
from phasewake.core.analyses import verdicts


@pytest.fixture(scope="module", autouse=True)
def _import_every_analysis():
    for m in pkgutil.walk_packages(core.__path__, "phasewake.core."):
        importlib.import_module(m.name)


def test_some_kinds_are_registered():
    assert len(verdicts.EXPLANATIONS) >= 10


def test_every_threshold_has_a_source_and_an_explanation():
    for kind, t in verdicts.THRESHOLDS.items():
        assert t.source.strip(), f"{kind}: threshold without a source"
        assert kind in verdicts.EXPLANATIONS, f"{kind}: threshold without an explanation"
        if t.higher_is_worse:
            assert t.caution <= t.problem, kind
        else:
            assert t.caution >= t.problem, kind


def test_every_explanation_is_complete():
    for kind, e in verdicts.EXPLANATIONS.items():
        for field in ("title", "what", "method", "threshold", "advice"):
            text = getattr(e, field)
            assert isinstance(text, str) and len(text.strip()) >= 3, f"{kind}.{field} is empty"


def test_configure_overrides_a_threshold():
    kind = next(iter(verdicts.THRESHOLDS))
    old = verdicts.THRESHOLDS[kind]
    try:
        new = verdicts.configure(kind, caution=old.caution * 0.5 if old.caution else -1.0)
        assert verdicts.THRESHOLDS[kind] is new and new.caution != old.caution
    finally:
        verdicts.THRESHOLDS[kind] = old


def test_audit_explain_prints_the_explanations(capsys):
    from pathlib import Path

    from phasewake.app.cli import main

    sample = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"
    code = main(["audit", str(sample), "--explain"])
    out = capsys.readouterr().out
    assert code in (0, 1)
    shown = [k for k, e in verdicts.EXPLANATIONS.items() if e.title in out]
    assert len(shown) >= 3, out[:2000]
    assert "heuristic" in out.lower()
