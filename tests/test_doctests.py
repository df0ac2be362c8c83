"""Run the docstring examples of every public module, so they cannot drift from the code.

Public means no path component starting with an underscore (``_loops``,
``_config`` and ``__main__`` are left out; the last would run the command
line). Modules are found on disk, so a new module is covered as soon as it
exists; each is its own test case.
"""

from __future__ import annotations

import doctest
import importlib
import io
from pathlib import Path

import pytest

import longwave

ROOT = Path(longwave.__file__).parent


def public_modules() -> list[str]:
    names = []
    for path in sorted(ROOT.rglob("*.py")):
        parts = path.relative_to(ROOT).with_suffix("").parts
        if any(part.startswith("_") and part != "__init__" for part in parts):
            continue
        if parts[-1] == "__init__":
            parts = parts[:-1]
        names.append(".".join(("longwave",) + parts))
    return names


# Core modules whose examples are part of their documentation (STYLE.md, habit 6):
# they must keep at least one example, not just pass with none.
MUST_HAVE_EXAMPLES = [
    "longwave.series", "longwave.params", "longwave.model", "longwave.kernels.matern",
    "longwave.methods", "longwave.methods.exact", "longwave.methods.kalman",
    "longwave.simulate",
]


def run_examples(name: str) -> doctest.TestResults:
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    report = io.StringIO()
    for test in finder.find(module, name):
        if test.filename and Path(test.filename).resolve().is_relative_to(ROOT.resolve()):
            runner.run(test, out=report.write)
    results = doctest.TestResults(runner.failures, runner.tries)
    assert results.failed == 0, f"docstring examples of {name} fail:\n{report.getvalue()}"
    return results


def test_module_list_is_complete():
    names = public_modules()
    assert "longwave" in names and "longwave.series" in names
    assert not any(part.startswith("_") for name in names for part in name.split("."))
    assert set(MUST_HAVE_EXAMPLES) <= set(names)


@pytest.mark.parametrize("name", public_modules())
def test_docstring_examples_run(name):
    run_examples(name)


@pytest.mark.parametrize("name", MUST_HAVE_EXAMPLES)
def test_core_modules_keep_their_examples(name):
    assert run_examples(name).attempted > 0
