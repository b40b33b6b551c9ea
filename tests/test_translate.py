"""Applying translations: Plotkin's call-by-value CPS translation computed by hand,
auxiliary functions, extra arguments, fresh binders, normalisation, run-time failures."""

from __future__ import annotations

from pathlib import Path

import pytest

from calcscout.rules.core.errors import CalcError
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term
from calcscout.rules.rewriting.translate import TranslationFailure, Translator

DATA = Path(__file__).parent / "data" / "translate"


@pytest.fixture(scope="module")
def spec():
    return load_file(DATA / "plotkin.calc")


def run(spec, tr: str, text: str, fn: str | None = None):
    t = spec.translations[tr]
    term = parse_term(spec.calculi[t.source], text)
    return Translator(spec, t).apply(fn or t.entry, term)


def cps(spec, text: str):
    return parse_term(spec.calculi["cps"], text)


# Plotkin 1975, the call-by-value translation:
#   [x] = \k. k x      [\x. M] = \k. k (\x. [M])      [M N] = \k. [M] (\m. [N] (\n. m n k))
# The expected terms below were worked out by hand from these equations.
HAND = [
    ("x", r"\k. k x"),
    (r"\x. x", r"\k. k (\x. \k. k x)"),
    ("x y", r"\k. (\k. k x) (\m. (\k. k y) (\n. m n k))"),
    (r"(\x. x) y", r"\k. (\k. k (\x. \k. k x)) (\m. (\k. k y) (\n. m n k))"),
    (r"\x. x x", r"\k. k (\x. \k. (\k. k x) (\m. (\k. k x) (\n. m n k)))"),
]


@pytest.mark.parametrize("source, expected", HAND, ids=[h[0] for h in HAND])
def test_plotkin_cbv_cps_by_hand(spec, source: str, expected: str) -> None:
    assert run(spec, "cbv", source) is cps(spec, expected)


@pytest.mark.parametrize("source, expected", HAND, ids=[h[0] for h in HAND])
def test_extra_argument_version_agrees_up_to_administrative_steps(spec, source, expected):
    # cbk passes the continuation down; for a variable or a λ it gives k applied at once
    # where cbv gives an administrative redex; both must reach the same term by beta.
    from calcscout.rules.rewriting.rewrite import join

    got = run(spec, "cbk", source)
    j = join(spec.calculi["cps"], got, cps(spec, expected), 10, 5000)
    assert j.status == "joinable"


def test_fresh_binders_never_capture_free_names(spec) -> None:
    # the source already uses k, m and n as free names: the translation's own binders
    # must not capture them
    got = run(spec, "cbv", "k m")
    assert set(got.free) == {"k", "m"}
    assert got is cps(spec, r"\a. (\b. b k) (\c. (\d. d m) (\e. c e a))")


def test_memo_gives_the_same_object(spec) -> None:
    t = spec.translations["cbv"]
    tr = Translator(spec, t)
    term = parse_term(spec.calculi["lamv"], r"(\x. x x) (\y. y)")
    assert tr.apply("cbv", term) is tr.apply("cbv", term)
    assert Translator(spec, t).apply("cbv", term) is tr.apply("cbv", term)


def test_auxiliary_function_can_be_applied_alone(spec) -> None:
    assert run(spec, "cbv", r"\x. x", fn="val") is cps(spec, r"\x. \k. k x")


def test_then_normalize_applies_the_group(spec) -> None:
    # the normalised translation is the unique normal form, under group admin (eta),
    # of what the equations build
    got = run(spec, "cbv_eta", r"(\x. x) y")
    plain = run(spec, "cbv", r"(\x. x) y")
    from calcscout.rules.rewriting.rewrite import normal_forms, reduction_graph

    g = reduction_graph(spec.calculi["cps"], plain, 20, 5000, "admin")
    assert normal_forms(g) == [got]


def test_a_missing_case_at_run_time_is_a_clear_error(spec) -> None:
    # partial : val -> term, applied to a term outside its sort, has no equation for it
    t = spec.translations["partial"]
    term = parse_term(spec.calculi["lamv"], "x y")
    with pytest.raises(TranslationFailure) as info:
        Translator(spec, t).apply("partial", term)
    assert isinstance(info.value, CalcError)
    assert "no equation of partial matches app(x, y)" in info.value.render()
