"""What several test files share: where the fixtures are, loading a spec from a
rule file, parsing an object term, running claims, and the command
line through click's ``CliRunner``.

The plain helpers are imported by name (``from conftest import load_calc``):
tests use them at collection time too (``parametrize``, module constants),
where fixtures cannot go.  Everything imports calcscout by its namespaced
modules only (tests/test_architecture.py checks it).
"""

from __future__ import annotations

from functools import cache
from pathlib import Path

import pytest
from click.testing import CliRunner, Result

from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.spec import Bounds, Calculus, Spec
from calcscout.rules.core.terms import Term
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "tests" / "data"
LIBRARY = ROOT / "rules" / "library"
DEMO = ROOT / "rules" / "demo"


@cache
def load_spec(file: str | Path) -> Spec:
    """The spec of a rule file: a ``Path`` as given; a bare file name from
    rules/library/ when it is there, else from tests/data/; a name with a folder
    (``"rewrite/lam.calc"``) from tests/data/."""
    if isinstance(file, Path):
        return load_file(file)
    if "/" not in file and (LIBRARY / file).exists():
        return load_file(LIBRARY / file)
    return load_file(DATA / file)


def load_calc(file: str | Path, name: str) -> Calculus:
    """One calculus of :func:`load_spec` (``file``)."""
    return load_spec(file).calculi[name]


def term(calc: Calculus, text: str) -> Term:
    """An object term written in ``calc``'s notation."""
    return parse_term(calc, text)


def verdicts_of(spec: Spec, claims: list[str] | None = None, bounds: Bounds | None = None,
                **options) -> dict[str, Verdict]:
    """The verdicts of ``spec``'s claims (or of the ``claims`` named), by name, parts included."""
    chosen = [c for c in spec.claims if claims is None or c.name in claims]
    assert claims is None or len(chosen) == len(claims), f"no claim among {claims}"
    out, _ = run_claims(spec, chosen, RunOptions(bounds=bounds or Bounds(), **options))
    return {v.name: v for v in out}


@pytest.fixture
def cli_runner() -> CliRunner:
    return CliRunner()


@pytest.fixture
def invoke(cli_runner: CliRunner):
    """Run ``calcscout ARGS...`` in-process; the click ``Result`` (exit code, output)."""
    from calcscout.obligations.commands.cli import cli

    def run(*args: str) -> Result:
        return cli_runner.invoke(cli, [str(a) for a in args])

    return run
