"""The examples in the modules' docstrings run, and give what they say.

Each module is imported by its namespaced name (``calcscout.rules.core.terms``),
never by its path: ``pytest --doctest-modules`` would import ``rules/core/terms.py``
as a second module ``rules.core.terms``, whose interned terms are not those of
the first copy.
"""

from __future__ import annotations

import doctest
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _modules() -> list[str]:
    out = []
    for pkg in ("rules", "obligations", "encoders"):
        for path in sorted((ROOT / pkg).rglob("*.py")):
            parts = list(path.relative_to(ROOT).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts.pop()
            if ">>>" in path.read_text(encoding="utf-8"):
                out.append(".".join(["calcscout", *parts]))
    return out


MODULES = _modules()


@pytest.mark.parametrize("module", MODULES)
def test_doctests(module):
    mod = importlib.import_module(module)
    tests = [t for t in doctest.DocTestFinder().find(mod) if t.examples]
    assert tests, f"{module} mentions >>> but no doctest was found in it"
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS)
    for t in tests:
        runner.run(t)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {module}"


def test_every_doctest_is_collected():
    """56 examples in 10 modules when this test was written; more are welcome, fewer means
    the search above lost some."""
    total = 0
    for module in MODULES:
        mod = importlib.import_module(module)
        total += sum(len(t.examples) for t in doctest.DocTestFinder().find(mod))
    assert len(MODULES) >= 10 and total >= 56
