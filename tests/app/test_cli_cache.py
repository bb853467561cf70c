"""The result cache from the command line: `audit`, `crossings` and `report` run twice on an
unchanged file read the frames once and print the same thing; `--no-cache` neither h5md_reads nor writes it;
`phasewake cache` counts the entries by analysis.

The reference for "the same thing" is the first (computed) run's own output; the numbers themselves are
checked against outside references in test_audit_cli.py, test_crossings_cli.py and the core tests.
"""

import json
import shutil
from pathlib import Path

import pytest

from phasewake.app.cli import main

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"




def _copy(tmp_path, name):
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    shutil.copyfile(SAMPLES / name, data / name)
    return data / name


def _cache_json(capsys):
    capsys.readouterr()
    assert main(["cache", "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_audit_twice_second_run_is_from_the_cache(tmp_path, cache_dir, h5md_reads, capsys):
    path = _copy(tmp_path, "dimer_nve.h5md")
    argv = ["audit", str(path), "--json", "--group", "dimer=0,1"]
    code1 = main(argv)
    out1 = capsys.readouterr().out
    n1 = h5md_reads["n"]
    assert n1 >= 1
    info = _cache_json(capsys)
    assert info["entries"] == 1 and info["by_analysis"] == {"audit": 1}
    code2 = main(argv)
    out2 = capsys.readouterr().out
    assert h5md_reads["n"] == n1  # no frames read the second time
    assert code2 == code1 and out2 == out1 and json.loads(out1)
    # another option is another entry
    main(["audit", str(path), "--json", "--timestep", "2"])
    capsys.readouterr()
    assert h5md_reads["n"] > n1
    assert _cache_json(capsys)["by_analysis"] == {"audit": 2}


def test_cache_command_summary_line(tmp_path, cache_dir, capsys):
    path = _copy(tmp_path, "dimer_nve.h5md")
    main(["audit", str(path), "--json"])
    main(["coords", str(path), "-c", "distance(0, 1)", "-o", str(tmp_path / "q.csv")])
    capsys.readouterr()
    assert main(["cache"]) == 0
    out = capsys.readouterr().out
    assert "2 entries" in out and "(audit 1, coordinates 1)" in out, out
    assert main(["cache", "--clear"]) == 0
    assert "removed 2" in capsys.readouterr().out
    assert _cache_json(capsys)["entries"] == 0


def test_audit_no_cache_writes_nothing_and_reads_nothing(tmp_path, cache_dir, h5md_reads, capsys):
    path = _copy(tmp_path, "dimer_nve.h5md")
    assert main(["audit", str(path), "--json", "--no-cache"]) in (0, 1)
    assert not cache_dir.exists() or not list(cache_dir.glob("*.pwcache"))
    out_plain = capsys.readouterr().out
    main(["audit", str(path), "--json"])  # fills the cache
    capsys.readouterr()
    n = h5md_reads["n"]
    main(["audit", str(path), "--json", "--no-cache"])  # must compute again, not read the entry
    assert h5md_reads["n"] > n
    assert capsys.readouterr().out == out_plain
    assert _cache_json(capsys)["entries"] == 1


def test_crossings_twice_and_no_cache(tmp_path, cache_dir, h5md_reads, capsys):
    path = _copy(tmp_path, "dimer_langevin.h5md")
    argv = ["crossings", str(path), "-c", "distance(0, 1)", "--json"]
    code1 = main(argv)
    out1 = capsys.readouterr().out
    n1 = h5md_reads["n"]
    assert json.loads(out1)["n_transitions"] >= 1
    assert main(argv) == code1
    assert capsys.readouterr().out == out1 and h5md_reads["n"] == n1
    assert _cache_json(capsys)["by_analysis"] == {"crossings": 1}
    main(argv + ["--states", "0.42,0.53"])  # another setting: computed
    assert h5md_reads["n"] > n1
    capsys.readouterr()
    shutil.rmtree(cache_dir)
    assert main(argv + ["--no-cache"]) == code1
    assert capsys.readouterr().out == out1 and not cache_dir.exists()


def test_report_twice_reads_frames_once(tmp_path, cache_dir, h5md_reads, capsys, monkeypatch):
    from phasewake.core.figures import report

    # drawing the pages (matplotlib, ~10 s) is not what is cached: count them instead of drawing them
    monkeypatch.setattr(report, "_write_pdf", lambda target, pages, **kw: len(report._paginate(pages)))
    path = _copy(tmp_path, "dimer_nve.h5md")
    out = tmp_path / "out"
    out.mkdir()
    argv = ["report", str(path), "--coordinate", "distance(0, 1)", "--json"]
    assert main(argv + ["-o", str(out / "a.pdf")]) == 0
    first = json.loads(capsys.readouterr().out)
    n1 = h5md_reads["n"]
    by = _cache_json(capsys)["by_analysis"]
    assert by.get("audit") == 1 and by.get("coordinates") == 1, by
    assert main(argv + ["-o", str(out / "b.pdf")]) == 0
    second = json.loads(capsys.readouterr().out)
    assert h5md_reads["n"] == n1
    for k in ("n_pages", "sections", "skipped", "verdict_levels", "settings"):
        assert second[k] == first[k], k
    assert main(argv + ["-o", str(out / "c.pdf"), "--no-cache"]) == 0
    assert h5md_reads["n"] > n1


@pytest.mark.slow  # measured 0.9 s of CPU
def test_memory_and_pca_twice_second_run_is_from_the_cache(tmp_path, cache_dir, h5md_reads, capsys):
    """`memory` (VACF, MSD, spectrum, Thirumalai-Mountain) and `coords --pca`: the second run h5md_reads no frames,
    prints the same JSON, and `--no-cache` recomputes without writing."""
    path = _copy(tmp_path, "dimer_nve.h5md")
    argv = ["memory", str(path), "--vacf", "--msd", "--spectrum", "--tm", "--json"]
    assert main(argv) == 0
    out1 = capsys.readouterr().out
    n1 = h5md_reads["n"]
    assert main(argv) == 0
    assert capsys.readouterr().out == out1 and h5md_reads["n"] == n1
    # "transport": Green-Kubo and MSD with block errors of time origins, cached beside the VACF
    assert _cache_json(capsys)["by_analysis"] == {"msd": 1, "spectrum": 1, "thirumalai_mountain": 1, "transport": 1,
                                                  "vacf": 1}
    pca = ["coords", str(path), "--pca", "2", "-o", str(tmp_path / "p.csv")]
    assert main(pca) == 0
    n2 = h5md_reads["n"]
    first = (tmp_path / "p.csv").read_text()
    assert main(pca) == 0 and h5md_reads["n"] == n2 and (tmp_path / "p.csv").read_text() == first
    capsys.readouterr()
    assert main([*argv, "--no-cache"]) == 0
    assert capsys.readouterr().out == out1 and h5md_reads["n"] > n2
    assert _cache_json(capsys)["entries"] == 6  # the five above and the PCA
