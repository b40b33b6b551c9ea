"""Enumeration and counting of terms (rules/core/enumerate.py).

The counts are checked against published sequences, and the enumeration
against an independent brute-force enumerator written below: every raw term
up to the size, its free names made canonical, filtered by membership.
"""

from __future__ import annotations

import gc
import itertools
import os
import subprocess
import sys
import tracemalloc
from collections import Counter
from pathlib import Path

import conftest
import pytest
import sympy
from conftest import load_spec

from calcscout.rules.core.enumerate import (
    count_by_size,
    count_terms,
    count_tuples,
    enumerate_terms,
    enumerate_tuples,
)
from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import Calculus
from calcscout.rules.core.terms import Name, Node, Term, bound, name, node, sweep

DATA = conftest.DATA / "enum"


def _load(file: str) -> dict[str, Calculus]:
    return load_spec(DATA / file).calculi


@pytest.fixture(scope="module")
def lam() -> Calculus:
    return _load("lambda.calc")["lam"]


@pytest.fixture(scope="module")
def ski() -> Calculus:
    return _load("ski.calc")["ski"]


@pytest.fixture(scope="module")
def refine() -> dict[str, Calculus]:
    return _load("refine.calc")


# ---------------------------------------------------------------- helpers


def gl_size(t: Term) -> int:
    """The size of Grygiel and Lescanne, "Counting and generating lambda terms"
    (J. Funct. Program. 2013): abstractions and applications count 1, variables
    (de Bruijn indices, and here free names) count 0."""
    if isinstance(t, Node):
        return 1 + sum(gl_size(a) for a in t.args)
    return 0


def first_occurrences(t: Term) -> list[str]:
    """Free names in order of first occurrence, left to right (own walk)."""
    seen: list[str] = []

    def walk(s: Term) -> None:
        if isinstance(s, Name):
            if s.name not in seen:
                seen.append(s.name)
        elif isinstance(s, Node):
            for a in s.args:
                walk(a)

    walk(t)
    return seen


def canonical(calc: Calculus, terms: tuple[Term, ...]) -> tuple[Term, ...]:
    """Rename the free names of a tuple by first occurrence, per names sort."""
    mapping: dict[str, str] = {}
    per_sort: Counter[str] = Counter()
    for t in terms:
        for n in first_occurrences(t):
            if n not in mapping:
                ns = calc.names_sort_of(n)
                mapping[n] = calc.names_sorts[ns].canonical_name(per_sort[ns])
                per_sort[ns] += 1
    return tuple(_rename(t, mapping) for t in terms)


def _rename(t: Term, mapping: dict[str, str]) -> Term:
    if isinstance(t, Name):
        return name(mapping[t.name])
    if isinstance(t, Node):
        return node(t.con, [_rename(a, mapping) for a in t.args], t.binders)
    return t


def raw_terms(calc: Calculus, max_size: int, max_names: int) -> dict[int, list[Term]]:
    """Every raw term (any constructor, any index in scope, names from a pool of
    ``max_names`` names per names sort) by size, with no sort in sight."""
    pool = [
        name(ns.canonical_name(j)) for ns in calc.names_sorts.values() for j in range(max_names)
    ]
    memo: dict[tuple[int, int], list[Term]] = {}

    def of(n: int, depth: int) -> list[Term]:
        key = (n, depth)
        if key in memo:
            return memo[key]
        out: list[Term] = []
        if n == 1:
            out += [bound(i) for i in range(depth)] + pool
        for con, shape in calc.shapes.items():
            k = shape.arity
            if k == 0:
                if n == 1:
                    out.append(node(con, ()))
                continue
            for sizes in _compositions(n - 1, k):
                parts = [of(s, depth + b) for s, b in zip(sizes, shape.binders, strict=True)]
                out += [node(con, args, shape.binders) for args in itertools.product(*parts)]
        memo[key] = out
        return out

    return {n: of(n, 0) for n in range(1, max_size + 1)}


def _compositions(n: int, k: int):
    if n < k:
        return
    if k == 1:
        yield (n,)
        return
    for first in range(1, n - k + 2):
        for rest in _compositions(n - first, k - 1):
            yield (first, *rest)


def brute_force(calc: Calculus, sort: str, max_size: int, max_names: int) -> set[Term]:
    g = grammar(calc)
    out = set()
    for terms in raw_terms(calc, max_size, max_names).values():
        for t in terms:
            if len(t.free) <= max_names and g.member(t, sort):
                out.add(canonical(calc, (t,))[0])
    return out


def check_stream(calc: Calculus, sort: str, max_size: int, max_names: int) -> list[Term]:
    """The properties a user relies on, for one stream; returns it."""
    g = grammar(calc)
    terms = list(enumerate_terms(calc, sort, max_size, max_names))
    assert len(terms) == len(set(terms)), "a term twice"
    sizes = [t.size for t in terms]
    assert sizes == sorted(sizes), "sizes decrease"
    for t in terms:
        assert t.size <= max_size and t.loose == 0
        assert g.member(t, sort), t
        assert len(t.free) <= max_names
        assert canonical(calc, (t,))[0] is t, f"free names not canonical in {t}"
    assert count_terms(calc, sort, max_size, max_names) == len(terms)
    histogram = Counter(sizes)
    assert count_by_size(calc, sort, max_size, max_names) == [
        histogram[n] for n in range(max_size + 1)
    ]
    return terms


# ---------------------------------------------------------------- published counts

# OEIS A220894: closed λ-terms by the size of Grygiel and Lescanne 2013, sizes 0..6
# (recalled from memory; the first values agree with A220895 below through the
# recurrence the paper gives).
A220894 = [0, 1, 3, 14, 82, 579, 4741]
# OEIS A220895: λ-terms with at most one free de Bruijn index, same size, sizes 0..6
# (values as published in OEIS, citing Grygiel and Lescanne, arXiv:1210.2610).
A220895 = [1, 3, 13, 76, 542, 4493, 42131]


def test_closed_lambda_terms_by_grygiel_lescanne_size(lam):
    # A closed term of their size m has m nodes and at most m variables, so at
    # most 2m of our size: size 10 covers their sizes up to 5.
    ours = Counter(gl_size(t) for t in enumerate_terms(lam, "term", 10, 0))
    assert [ours[m] for m in range(6)] == A220894[:6]


def test_lambda_terms_with_one_free_name_by_grygiel_lescanne_size(lam):
    # One free name plays the part of their one free index; a term of their
    # size m has at most 2m + 1 of our size: size 11 covers sizes up to 5.
    ours = Counter(gl_size(t) for t in enumerate_terms(lam, "term", 11, 1))
    assert [ours[m] for m in range(6)] == A220895[:6]


def test_closed_lambda_counts_by_our_size(lam):
    # OEIS A135501 (closed λ-terms, every node and variable of size 1),
    # recalled from memory.
    assert count_by_size(lam, "term", 10, 0) == [0, 0, 1, 2, 4, 13, 42, 139, 506, 1915, 7558]


def test_combinatory_logic_counts_are_catalan_times_powers_of_three(ski):
    # n applications over S, K, I: Catalan(n) * 3^(n+1) terms (OEIS A000108 for
    # the Catalan numbers; sympy.catalan as the reference).
    counts = count_by_size(ski, "term", 61, 0)
    for n in range(31):
        assert counts[2 * n + 1] == sympy.catalan(n) * 3 ** (n + 1)
        assert counts[2 * n] == 0
    enumerated = Counter(t.size for t in enumerate_terms(ski, "term", 9, 2))
    for n in range(5):
        assert enumerated[2 * n + 1] == sympy.catalan(n) * 3 ** (n + 1)


def lambda_counts(max_size: int, free: int) -> list[int]:
    """λ-terms by our size in a context of ``free`` variables, by the usual
    recurrence (a variable, an abstraction, or an application), written out
    independently of the enumerator."""
    memo: dict[tuple[int, int], int] = {}

    def t(n: int, d: int) -> int:
        if n < 1:
            return 0
        if (n, d) not in memo:
            memo[n, d] = (d if n == 1 else 0) + t(n - 1, d + 1) + sum(
                t(i, d) * t(n - 1 - i, d) for i in range(1, n - 1)
            )
        return memo[n, d]

    return [t(n, free) for n in range(max_size + 1)]


def test_counting_is_exact_where_counts_are_in_the_billions(lam, ski):
    closed = count_by_size(lam, "term", 40, 0)
    assert closed == lambda_counts(40, 0)
    assert closed[20] > 10**9
    # at most one free name: the free name plays the part of a variable in scope
    assert count_by_size(lam, "term", 30, 1) == lambda_counts(30, 1)
    assert count_terms(ski, "term", 41, 0) == sum(
        sympy.catalan(n) * 3 ** (n + 1) for n in range(21)
    )


# ---------------------------------------------------------------- properties


STREAMS = [
    ("lambda.calc", "lam", "term", 7, 0),
    ("lambda.calc", "lam", "term", 6, 1),
    ("lambda.calc", "lam", "term", 6, 3),
    ("ski.calc", "ski", "term", 7, 1),
    ("refine.calc", "arith", "term", 5, 1),
    ("refine.calc", "arith", "answer", 6, 1),
    ("refine.calc", "arith", "nf", 6, 2),
    ("refine.calc", "arith", "neutral", 6, 2),
    ("refine.calc", "ambiguous", "term", 6, 2),
    ("refine.calc", "ambiguous", "val", 6, 2),
    ("refine.calc", "store", "term", 5, 2),
    ("refine.calc", "store", "label", 3, 3),
]


@pytest.mark.parametrize(
    ("file", "calc", "sort", "size", "names"),
    STREAMS,
    ids=[f"{c}.{s}-size{n}-names{k}" for _, c, s, n, k in STREAMS],
)
def test_stream_agrees_with_brute_force(file, calc, sort, size, names):
    calculus = _load(file)[calc]
    terms = check_stream(calculus, sort, size, names)
    assert set(terms) == brute_force(calculus, sort, size, names)


def test_ambiguous_grammar_gives_each_term_once(refine):
    amb = refine["ambiguous"]
    terms = check_stream(amb, "term", 5, 1)
    x = name("x")
    identity = node("lam", (bound(0),), (1,))
    # x is a term through V and directly; app(x, x) through app(M, N) and app(V, W)
    assert terms.count(x) == 1
    assert terms.count(node("app", (x, x))) == 1
    assert terms.count(identity) == 1


def test_refinement_sorts_are_subsets(refine):
    arith = refine["arith"]
    everything = set(enumerate_terms(arith, "term", 6, 1))
    for sort in ("answer", "nf", "neutral"):
        part = set(enumerate_terms(arith, sort, 6, 1))
        assert part and part < everything
    answers = set(enumerate_terms(arith, "answer", 6, 1))
    assert all(t.con in ("num", "lam") for t in answers)
    assert node("num", (node("zero"),)) in answers


def test_two_names_sorts_are_canonical_separately(refine):
    store = refine["store"]
    terms = set(enumerate_terms(store, "term", 4, 2))
    ref_l = node("ref", (name("l"),))
    # one location name and one variable: each is its sort's first name
    assert node("app", (name("x"), ref_l)) in terms
    assert node("app", (name("y"), ref_l)) not in terms
    assert node("app", (name("x"), node("ref", (name("m"),)))) not in terms
    # a bound location: new(l. ref(l))
    assert node("new", (node("ref", (bound(0),)),), (1,)) in terms
    # a bound location is not a term variable
    assert node("new", (bound(0),), (1,)) not in terms
    # names counts the total over both names sorts
    assert all(len(t.free) <= 2 for t in terms)
    assert node("app", (node("app", (name("x"), name("y"))), ref_l)) not in set(
        enumerate_terms(store, "term", 6, 2)
    )


def test_min_size_and_empty_bounds(lam):
    assert [t.size for t in enumerate_terms(lam, "term", 4, 0, min_size=4)] == [4] * 4
    assert list(enumerate_terms(lam, "term", 0, 3)) == []
    assert count_terms(lam, "term", 5, 0, min_size=3) == 2 + 4 + 13
    assert count_by_size(lam, "term", 0, 0) == [0]


def test_order_is_the_same_from_run_to_run():
    script = (
        "from calcscout.rules.loading.load import load_file\n"
        "from calcscout.rules.core.enumerate import enumerate_terms\n"
        "from calcscout.rules.core.terms import debug_str\n"
        f"c = load_file({str(DATA / 'refine.calc')!r}).calculi['arith']\n"
        "print(' '.join(debug_str(t) for t in enumerate_terms(c, 'term', 5, 2)))\n"
    )
    root = Path(__file__).parent.parent
    outs = []
    for seed in ("1", "2"):
        env = {**os.environ, "PYTHONHASHSEED": seed}
        run = subprocess.run([sys.executable, "-c", script], cwd=root, env=env,
                             capture_output=True, text=True, check=True)
        outs.append(run.stdout)
    assert outs[0] == outs[1] and outs[0].strip()


def test_unknown_and_context_sorts_are_refused(lam, refine):
    with pytest.raises(ValueError, match="not a sort"):
        list(enumerate_terms(lam, "nosuch", 3, 0))
    with pytest.raises(ValueError, match="context sort"):
        count_terms(refine["ambiguous"], "E", 3, 0)
    with pytest.raises(ValueError, match="shard"):
        list(enumerate_terms(lam, "term", 3, 0, shard=(0, 2)))


# ---------------------------------------------------------------- tuples


def test_pairs_agree_with_brute_force(lam):
    max_total, max_names = 6, 2
    g = grammar(lam)
    pairs = list(enumerate_tuples([(lam, "term"), (lam, "term")], max_total, max_names))
    assert count_tuples([(lam, "term"), (lam, "term")], max_total, max_names) == len(pairs)
    assert len(pairs) == len(set(pairs))
    totals = [a.size + b.size for a, b in pairs]
    assert totals == sorted(totals)
    raw = raw_terms(lam, max_total - 1, max_names)
    members = [t for ts in raw.values() for t in ts if g.member(t, "term")]
    expected = set()
    for a in members:
        for b in members:
            if a.size + b.size <= max_total:
                names = set(a.free) | set(b.free)
                if len(names) <= max_names:
                    expected.add(canonical(lam, (a, b)))
    assert set(pairs) == expected
    # names are canonical jointly: (x, y) and (y, x) are one pair up to renaming
    assert (name("x"), name("y")) in expected
    assert (name("y"), name("x")) not in set(pairs)


def test_tuples_across_calculi_share_names_spelt_alike(lam, refine, ski):
    arith = refine["arith"]
    slots = [(lam, "term"), (arith, "answer"), (ski, "term")]
    tuples = list(enumerate_tuples(slots, 7, 1))
    assert count_tuples(slots, 7, 1) == len(tuples) > 0
    # lam and arith both declare `names var x y z`: one name x shared
    got = {(a, b) for a, b, _ in tuples}
    xlam = node("lam", (name("x"),), (1,))
    assert (name("x"), xlam) in got
    assert all(len(set(a.free) | set(b.free)) <= 1 for a, b, _ in tuples)


def test_tuple_min_total_size_and_empty_slots(lam):
    slots = [(lam, "term"), (lam, "term")]
    big = list(enumerate_tuples(slots, 5, 1, min_total_size=5))
    assert big and all(a.size + b.size == 5 for a, b in big)
    assert list(enumerate_tuples([], 3, 1, min_total_size=0)) == [()]
    assert count_tuples([], 3, 1) == 0


# ---------------------------------------------------------------- shards


@pytest.mark.parametrize("n", [1, 2, 3, 7])
def test_shards_split_the_stream(lam, n):
    whole = list(enumerate_terms(lam, "term", 8, 1))
    shards = [list(enumerate_terms(lam, "term", 8, 1, shard=(i, n))) for i in range(1, n + 1)]
    for i, part in enumerate(shards):
        assert part == whole[i::n]
    assert sorted(map(id, itertools.chain(*shards))) == sorted(map(id, whole))


@pytest.mark.parametrize("n", [2, 5])
def test_shards_split_refinement_and_tuple_streams(refine, n):
    arith = refine["arith"]
    whole = list(enumerate_terms(arith, "nf", 7, 2))
    for i in range(1, n + 1):
        assert list(enumerate_terms(arith, "nf", 7, 2, shard=(i, n))) == whole[i - 1 :: n]
    slots = [(arith, "term"), (arith, "answer")]
    pairs = list(enumerate_tuples(slots, 6, 2))
    for i in range(1, n + 1):
        assert list(enumerate_tuples(slots, 6, 2, shard=(i, n))) == pairs[i - 1 :: n]


# ---------------------------------------------------------------- memory


def test_stream_memory_does_not_hold_the_terms(lam):
    # start from an intern table with only the live terms of earlier tests in it (it is
    # swept of dead terms as it grows, not at once: what earlier tests left would count)
    gc.collect()
    sweep()
    tracemalloc.start()
    produced = 0
    for _ in enumerate_terms(lam, "term", 11, 0):
        produced += 1
    streaming_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    tracemalloc.start()
    held = list(enumerate_terms(lam, "term", 11, 0))
    holding = tracemalloc.get_traced_memory()[0]
    tracemalloc.stop()
    assert produced == len(held) == count_terms(lam, "term", 11, 0) > 40_000
    del held
    assert streaming_peak < holding / 4
