"""`phasewake demo` with no display: one line, then the summary, audit, figures and report on disk.

Outside references: json parses the summaries, Pillow reads the PNGs, pypdf parses the PDFs.
"""

import json

import pytest

from phasewake.app.cli import main
from phasewake.app.commands import demo


def test_display_detection():
    assert not demo.display_available({}, "linux")
    assert demo.display_available({"DISPLAY": ":0"}, "linux")
    assert demo.display_available({"WAYLAND_DISPLAY": "wayland-0"}, "linux")
    assert not demo.display_available({"DISPLAY": ":0", "QT_QPA_PLATFORM": "offscreen"}, "linux")
    assert demo.display_available({}, "darwin")
    assert demo.display_available({}, "win32")


def test_finds_the_bundled_sample_run():
    path = demo.sample_run_path()
    assert path.name == "dimer_nve.h5md" and path.is_file()


@pytest.mark.slow
def test_headless_demo_writes_everything(tmp_path, monkeypatch, capsys):
    from PIL import Image
    from pypdf import PdfReader

    monkeypatch.delenv("DISPLAY", raising=False)
    monkeypatch.delenv("WAYLAND_DISPLAY", raising=False)
    monkeypatch.setattr("sys.platform", "linux")
    out = tmp_path / "demo-output"
    code = main(["demo", "--output", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    lines = captured.out.strip().splitlines()
    assert len(lines) == 1  # one line: no display, and where the files go
    assert "no display" in lines[0] and str(out) in lines[0]
    summary = json.loads((out / "summary.json").read_text())
    assert summary["n_atoms"] > 2 and summary["velocities"] == "stored"
    assert "dimer" in (out / "summary.txt").read_text()
    audit = json.loads((out / "audit.json").read_text())
    assert audit["verdicts"] and all(v["level"] in ("ok", "caution", "problem", "info") for v in audit["verdicts"])
    assert "heuristics" in (out / "audit.txt").read_text()
    pngs = sorted((out / "figures").glob("*.png"))
    pdfs = sorted((out / "figures").glob("*.pdf"))
    assert len(pngs) >= 3 and len(pdfs) == len(pngs)
    for p in pngs:
        with Image.open(p) as im:
            assert im.size == (round(25.4 / 2.54 * 150), round(14.2875 / 2.54 * 150))  # slide preset at 150 dpi
    for p in pdfs:
        assert len(PdfReader(p).pages) == 1
    assert len(PdfReader(out / "run-report.pdf").pages) >= 8
