"""What ``calcscout pairs`` prints: each overlap once, binders with names of
their own sort, errors of a base calculus once."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main
from calcscout.rules.core.spec import Bounds, Calculus
from calcscout.rules.critical_pairs.critical import overlaps, pairs_report
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"
LIBRARY = Path(__file__).parent.parent / "rules" / "library"
BOUNDS = Bounds(size=4, steps=10, names=1, nodes=2000)
BINDER = re.compile(r"(\w+)\((\w+'?)\.")


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err


def binders_of_the_wrong_sort(c: Calculus, text: str) -> list[str]:
    """``con(n.`` where ``con``'s first argument binds a names sort that ``n`` is not of."""
    bad = []
    for con, n in BINDER.findall(text):
        shape = c.shapes.get(con)
        if shape is None or not shape.binder_sorts or not shape.binder_sorts[0]:
            continue
        if c.names_sort_of(n) != shape.binder_sorts[0][0]:
            bad.append(f"{con}({n}.")
    return bad


def library_calculi():
    out = []
    for f in sorted(LIBRARY.glob("*.calc")):
        spec = load_file(f)
        for name, c in spec.calculi.items():
            if len(c.names_sorts) > 1:
                out.append(pytest.param(c, id=f"{f.stem}:{name}"))
    return out


def test_a_binder_is_printed_with_a_name_of_its_sort():
    """eta_k over beta: klam binds a continuation name; the reduct is klam(k.P1[x := k]),
    not klam(x.P1).  Family: any printed binder whose name comes from a metavariable's
    scope; checked: the peak, both sides and the common reduct of every pair (next
    test, every library calculus with more than one names sort)."""
    c = load_file(DATA / "critical" / "printing.calc").calculi["twosorts"]
    (p,) = pairs_report(c, BOUNDS)["pairs"]
    assert p["right"] == "klam(k.P1[x := k])"
    assert p["peak"] == "klam(k.app(lam(x.P1), k))"


@pytest.mark.parametrize("c", library_calculi())
def test_every_printed_pair_binds_names_of_the_right_sort(c):
    for p in pairs_report(c, BOUNDS)["pairs"]:
        for key in ("peak", "left", "right", "common"):
            if key in p:
                assert binders_of_the_wrong_sort(c, p[key]) == [], (p["rules"], key, p[key])


def test_a_root_overlap_is_listed_once():
    """f(a, M) and f(M, a) overlap at the root: one overlap, not two mirror images.
    Family: pairs listed more than once; checked: root overlaps of two rules (once),
    a rule with itself at the root (never a pair), and that the theorem's check still
    sees both orders (Huet's criterion needs both for an overlay)."""
    c = load_file(DATA / "critical" / "printing.calc").calculi["mirror"]
    report = pairs_report(c, BOUNDS)
    assert [(p["rules"], p["position"]) for p in report["pairs"]] == \
        [(["fa_left", "fa_right"], "root")]
    assert len(overlaps(c).pairs) == 2  # both orders, for the parallel-closed check


def test_an_error_in_a_base_calculus_is_printed_once(capsys):
    """Family: a problem found again for each calculus that extends the one it is in;
    checked with pairs, lint and check on the same file."""
    f = str(DATA / "critical" / "base-error.calc")
    for args in (("pairs", f, "ext1"), ("lint", f), ("check", f)):
        code, out, err = run(capsys, *args)
        assert code == 2
        assert err.count("unknown identifier Q") == 1, args
        assert "base-error.calc:4:14" in err
