"""The Examples sections of the Python API's docstrings run as written, on the bundled sample runs."""

import doctest

import pytest

import phasewake
from phasewake import _analyses, _figures, _runs

MODULES = [phasewake, _runs, _analyses, _figures]


@pytest.mark.parametrize("module", MODULES, ids=lambda m: m.__name__)
def test_docstring_examples_run(module, cache_dir):
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    tests = [t for t in finder.find(module, module.__name__) if t.examples]
    assert tests, f"{module.__name__} has no examples"
    for t in tests:
        runner.run(t)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {module.__name__} (see above)"


def test_every_public_function_has_a_runnable_example():
    for name in phasewake.__all__:
        obj = getattr(phasewake, name)
        if callable(obj) and not isinstance(obj, type):
            doc = obj.__doc__ or ""
            assert "Examples\n    --------" in doc and ">>> " in doc, f"pw.{name} has no Examples section"
