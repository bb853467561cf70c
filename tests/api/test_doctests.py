"""The Examples sections of the Python API's docstrings run as written, on the bundled sample runs."""

import doctest

import pytest

import phasewake
from phasewake import _analyses, _figures, _runs

MODULES = [phasewake, _runs, _analyses, _figures]
SLOW = {"phasewake._analyses.report"}  # writes a 13-page PDF: ~9 s of CPU


def _examples():
    finder = doctest.DocTestFinder(exclude_empty=True)
    found = [t for m in MODULES for t in finder.find(m, m.__name__) if t.examples]
    return [pytest.param(t, id=t.name, marks=[pytest.mark.slow] if t.name in SLOW else []) for t in found]


@pytest.mark.parametrize("test", _examples())
def test_docstring_example_runs(test, cache_dir):
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.attempted and result.failed == 0, f"{result.failed} of {result.attempted} examples of {test.name} failed"


def test_every_public_function_has_a_runnable_example():
    names = {t.values[0].name for t in _examples()}
    for name in phasewake.__all__:
        obj = getattr(phasewake, name)
        if callable(obj) and not isinstance(obj, type):
            doc = obj.__doc__ or ""
            assert "Examples\n    --------" in doc and ">>> " in doc, f"pw.{name} has no Examples section"
            assert f"{obj.__module__}.{obj.__name__}" in names
