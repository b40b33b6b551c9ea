"""calcscout.rules.core.enumerate.tuple_position: a tuple's place in the enumeration, from counts alone.

The solver engine reports ``tried`` for a counterexample it found as the enumeration would
(the count of all smaller sizes plus this position, plus one), so the position must be the
index the stream gives.  Checked against the stream itself on calculi with binders,
refinement sorts (several automaton states), several quantified slots and free names.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from calcscout.rules.core.enumerate import count_tuples, enumerate_tuples, tuple_position
from calcscout.rules.core.terms import name
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"


@pytest.mark.parametrize(("path", "slots", "size"), [
    ("smt/cps.calc", [("lamv", "term")], 7),
    ("smt/cps.calc", [("lamv", "val"), ("lamv", "term")], 6),
    ("smt/cps.calc", [("cpsv", "comp")], 9),
    ("smt/ties.calc", [("c", "term"), ("c", "term")], 5),
])
@pytest.mark.parametrize("names", [0, 1, 2])
def test_position_is_the_index_in_the_stream(path, slots, size, names):
    spec = load_file(str(DATA / path))
    cs = [(spec.calculi[c], s) for c, s in slots]
    seen = 0
    for i, terms in enumerate(enumerate_tuples(cs, size, names)):
        n = sum(t.size for t in terms)
        assert count_tuples(cs, n - 1, names) + tuple_position(cs, terms, names) == i
        seen += 1
    assert seen == count_tuples(cs, size, names)


def test_a_tuple_outside_the_enumeration_is_refused():
    spec = load_file(str(DATA / "smt" / "cps.calc"))
    cs = [(spec.calculi["lamv"], "term")]
    with pytest.raises(ValueError):
        tuple_position(cs, [name("y")], 1)  # not canonical: the first free name is x
