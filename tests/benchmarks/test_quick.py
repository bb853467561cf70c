"""The quick mode of the benchmarks runs in `make test`, so the benchmark code cannot rot.

Targets are judged on the full sizes (`make bench`); at quick sizes fixed overheads dominate, so this
test checks only that every case runs and reports a same-run ratio.
"""

import json

import pytest

from tests.benchmarks.harness import run_cases, write_summary


@pytest.mark.bench
@pytest.mark.slow
def test_quick_benchmarks_run(tmp_path):
    results = run_cases([], full=False, workdir=tmp_path)
    errors = {r["name"]: r["error"] for r in results if r.get("error")}
    assert not errors, errors
    for r in results:
        # a time against a same-run baseline, or (memory case) a ratio of two peaks measured in the same run
        assert (r["measured_s"] is not None and r["measured_s"] > 0) or (r["ratio"] is not None and r["ratio"] > 0)
        assert r["peak_rss_mb"] > 0
    out = tmp_path / "summary.json"
    write_summary(results, out, full=False)
    assert json.loads(out.read_text())["mode"] == "quick"
