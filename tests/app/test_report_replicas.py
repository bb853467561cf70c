"""`phasewake report --replicas`: the report of a replica ensemble holds the per-replica table of
`phasewake crossings --replicas` (the same CrossingsRequest), row for row.

The replica runs are made here by the sample-data generator (sample_data/make_samples.py: BAOAB
Langevin dynamics of the double-well dimer in a WCA bath), short and few, so that each replica has its
own transitions, mean and drift. The report's HTML is parsed with the standard library's HTMLParser
and the PDF with pypdf.
"""

from __future__ import annotations

import json
import math
from html.parser import HTMLParser
from pathlib import Path

import pytest

from phasewake.app.cli import main

COORD = "distance(0, 1)"


@pytest.fixture(scope="module")
def replica_files(tmp_path_factory) -> list[str]:
    """Three short Langevin replicas of the sample scenario (about 3 s of integration)."""
    from phasewake.core.progress import drive
    from sample_data.make_samples import Plan, Scenario, simulate, write_samples

    plan = Plan(equilibration_steps=100, nve_frames=2, bigstep_frames=2, langevin_frames=200, n_replicas=2,
                replica_equilibration_steps=300, replica_record_every=14, replica_frames=200)
    out = tmp_path_factory.mktemp("replicas")
    write_samples(out, drive(simulate(Scenario(), plan)))
    return [str(out / f"dimer_langevin{s}.h5md") for s in ("", "_r2", "_r3")]


class _Sections(HTMLParser):
    """Each <h2> section of the report's HTML with the rows of its table (cells as text)."""

    def __init__(self) -> None:
        super().__init__()
        self.sections: dict[str, list[list[str]]] = {}
        self._title: str | None = None
        self._in: str | None = None
        self._text = ""

    def handle_starttag(self, tag, attrs):
        if tag in ("h2", "td", "th"):
            self._in, self._text = tag, ""
        elif tag == "tr" and self._title is not None:
            self.sections[self._title].append([])

    def handle_endtag(self, tag):
        if tag == "h2":
            self._title = self._text.strip()
            self.sections[self._title] = []
        elif tag in ("td", "th") and self._title is not None:
            self.sections[self._title][-1].append(self._text.strip())
        if tag == self._in:
            self._in = None

    def handle_data(self, data):
        if self._in:
            self._text += data


def _number(cell: str) -> float:
    return math.nan if cell == "–" else float(cell)


def _same_4_digits(cell: str, value: float | None) -> bool:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return cell == "–"
    return _number(cell) == float(f"{value:.4g}")


@pytest.mark.slow
def test_report_table_equals_the_crossings_commands_rows(replica_files, tmp_path, capsys, cache_dir, h5md_reads):
    pdf = tmp_path / "ensemble.pdf"
    rc = main(["report", *replica_files, "--replicas", "--coordinate", COORD, "-o", str(pdf), "--html", "--json"])
    written = json.loads(capsys.readouterr().out)
    assert rc == 0
    # the same CrossingsRequest: the command finds the report's result in the cache and reads no frame
    reads = h5md_reads["n"]
    rc = main(["crossings", *replica_files, "--replicas", "-c", COORD, "--json"])
    crossings = json.loads(capsys.readouterr().out)
    assert rc in (0, 1) and h5md_reads["n"] == reads
    rows = crossings["replicas"]
    assert len(rows) == 3 and sum(r["transitions_ab"] + r["transitions_ba"] for r in rows) > 0
    rc = main(["crossings", *replica_files, "--replicas", "-c", COORD, "--json", "--no-cache"])
    assert json.loads(capsys.readouterr().out) == crossings  # and computed afresh, the same rows
    assert h5md_reads["n"] > reads  # (afresh, the command does read the frames: the counter sees it)
    assert written["settings"]["replicas"] == [Path(f).stem for f in replica_files]
    parser = _Sections()
    parser.feed(pdf.with_suffix(".html").read_text(encoding="utf-8"))
    table = parser.sections["Barrier crossings: per replica"]
    header, body = table[0], table[1:]
    assert header == ["Replica", "Length (ps)", "A→B", "B→A", "In A (ps)", "In B (ps)", "k(A→B) (1/ps)",
                      "k(B→A) (1/ps)", "Mean q (nm)", "Share of spread (R̂)",
                      "Drift (nm/ns)"]
    assert len(body) == len(rows)
    for cells, r in zip(body, rows, strict=True):
        assert cells[0] == r["name"]
        assert (int(cells[2]), int(cells[3])) == (r["transitions_ab"], r["transitions_ba"])
        for cell, key in zip(cells[1:], ("time_ps", None, None, "time_in_a_ps", "time_in_b_ps", "rate_ab_per_ps",
                                         "rate_ba_per_ps", "mean", None, "drift_per_ns")):
            if key is not None:
                assert _same_4_digits(cell, r[key]), (key, cell, r[key])
        assert cells[9] == f"{100 * r['between_share']:.0f}%"
    # the pooled table on the page before is the command's too: its transitions are the rows' sums
    pooled = dict(parser.sections["Barrier crossings"][1:])
    n_ab = sum(r["transitions_ab"] for r in rows)
    assert pooled["Rate A→B"].startswith("< ") if n_ab == 0 else f"{n_ab} transitions in" in pooled["Rate A→B"]
    assert crossings["rate_ab"]["n_transitions"] == n_ab
    # and the PDF carries the same page
    from pypdf import PdfReader

    text = " ".join(p.extract_text() for p in PdfReader(pdf).pages)
    assert "Barrier crossings: per replica" in text and "Replica ensemble: 3 runs" in text
    # pw.report of the same runs builds the same requests: the same per-replica table, no frame read
    import phasewake as pw

    api_pdf = tmp_path / "api.pdf"
    reads = h5md_reads["n"]
    done = pw.report([pw.open(f) for f in replica_files], api_pdf, coordinate=COORD, html=True)
    assert done.path == api_pdf and h5md_reads["n"] == reads
    api = _Sections()
    api.feed(api_pdf.with_suffix(".html").read_text(encoding="utf-8"))
    assert api.sections["Barrier crossings: per replica"] == table


@pytest.mark.slow
def test_report_of_one_run_has_no_per_replica_page(sample_report):
    from pypdf import PdfReader

    assert sample_report.code == 0
    text = " ".join(p.extract_text() for p in PdfReader(sample_report.pdf).pages)
    assert "Barrier crossings" in text
    assert "per replica" not in text and "Replica ensemble" not in text
