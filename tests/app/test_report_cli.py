"""`phasewake report`: writes the PDF (and HTML) of the sample run, leaves inputs unchanged, and
refuses bad input with exit 2 and one line.

Outside references: pypdf parses the PDF; hashlib checks the input bytes did not change.
"""

import hashlib
from pathlib import Path

import pytest

from phasewake.app.cli import main

SAMPLE = Path(__file__).resolve().parents[2] / "sample_data" / "dimer_nve.h5md"


def _sha(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.mark.slow
def test_report_of_the_sample_run(sample_report):
    """The sample run's report, built once per session by the ``sample_report`` fixture (tests/conftest.py):
    ``phasewake report COPY -o OUT --coordinate 'distance(0, 1)'``."""
    from pypdf import PdfReader

    code, out, src, before = sample_report.code, sample_report.pdf, sample_report.src, sample_report.before
    captured = sample_report
    assert code == 0, captured.err
    assert captured.err == ""
    assert _sha(src) == before  # input untouched
    assert sorted(p.name for p in src.parent.iterdir()) == [SAMPLE.name]  # nothing written beside it
    reader = PdfReader(out)
    text = " ".join(pg.extract_text() for pg in reader.pages).replace("\n", " ")
    for title in ("Run and verdicts", "Energy conservation", "Kinetic temperature", "Coordinate and phase portrait",
                  "Time correlations", "Sampling", "Barrier crossings"):
        assert title in text
    assert "Verdict" in text and "heuristics" in text
    assert not out.with_suffix(".html").exists()  # HTML only when asked (tested in tests/core/test_report.py)
    assert f"wrote {out}" in captured.out


@pytest.mark.parametrize("argv, words", [
    (["report", "/nonexistent/run.h5md", "-o", "{tmp}/r.pdf"], "run.h5md"),
    (["report", str(SAMPLE), "-o", "{tmp}/r.png"], ".pdf"),
    (["report", str(SAMPLE), "-o", str(SAMPLE.with_suffix(".pdf")), "--states", "0.4"], "--states"),
])
def test_bad_input_exits_2_with_one_line(tmp_path, capsys, argv, words):
    argv = [a.replace("{tmp}", str(tmp_path)) for a in argv]
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1
    assert words in err
    assert "Traceback" not in err


def test_report_refuses_to_overwrite_an_input(tmp_path, capsys):
    src = tmp_path / "run.pdf"  # an input that happens to end in .pdf
    src.write_bytes(b"%PDF-1.4 not really")
    before = _sha(src)
    code = main(["report", str(src), "-o", str(src)])
    assert code == 2
    assert "overwrite" in capsys.readouterr().err
    assert _sha(src) == before
