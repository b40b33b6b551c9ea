"""Exhaustiveness of a translation's equations (rules.exhaustive)."""

from __future__ import annotations

import pytest

from calcscout.rules.core.errors import CalcError
from calcscout.rules.loading.load import load_text

CALC = """
calculus a {
  names var x y
  sort term M N ::= x | lam(x.M) | app(M, N) | pair(x.M, x.N)
}
"""


def _translation(*equations: str) -> str:
    body = "\n".join(f"  {e}" for e in equations)
    return CALC + f"translation tr : a -> a {{\n  tr : term -> term\n{body}\n}}\n"


BASE = ("tr(x) = x", "tr(lam(x.M)) = lam(x.tr(M))", "tr(pair(x.M, y.N)) = pair(x.tr(M), y.tr(N))")


@pytest.mark.parametrize("app, missing", [
    ("tr(app(M, M)) = app(tr(M), tr(M))", "app(M, N)"),
    ("tr(app(x, x)) = x", "app(M, N)"),
    ("tr(app(lam(x.M), M)) = tr(M)", "app(M, N)"),
])
def test_a_non_linear_pattern_covers_nothing(app: str, missing: str) -> None:
    """Issue 8, item 6 (missing-case-nonlinear.calc): a repeated metavariable was taken as
    a wildcard, so lint passed and check stopped.  Family: patterns that match only
    some terms of their shape; checked a repeated metavariable, a repeated free name,
    and a repetition nested under a constructor, and that reusing a binder's name in
    two abstractions (pair(x.M, x.N)) is still linear and covering."""
    with pytest.raises(CalcError) as info:
        load_text(_translation(*BASE, app))
    assert f"no equation for terms of the shape {missing}" in info.value.render()


def test_linear_patterns_still_cover() -> None:
    spec = load_text(_translation(*BASE[:2], "tr(pair(x.M, x.N)) = pair(x.tr(M), x.tr(N))",
                                  "tr(app(M, N)) = app(tr(M), tr(N))",
                                  "tr(app(M, M)) = tr(M)"))
    assert "tr" in spec.translations
