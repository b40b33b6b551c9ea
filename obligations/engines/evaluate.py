"""Deciding one case of a claim: the values of its expressions, and its atoms
by identity, one-step reducts, bounded graph search and grammar membership
(LANGUAGE.md §8).

An :class:`Outcome` is ``ok``, ``fail`` (definitely, whatever the bounds) or
``undecided`` (a bound cut the search first), with the evidence a researcher
needs: the graph's size, whether it was complete, its normal forms, and a
diagnosis.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import Atom, Bounds, Calculus, EMeta, ESubst, Expr, Relation, Spec
from calcscout.rules.core.terms import Name, Node, Term, name, open_body, substitute
from calcscout.rules.notation.notation import print_abstract, print_abstract_at
from calcscout.rules.rewriting.rewrite import iter_reducts, join, position_text, reduction_graph
from calcscout.rules.rewriting.translate import Translator, Undefined

OK = "ok"
FAIL = "fail"
UNDECIDED = "undecided"


@dataclass
class Outcome:
    status: str
    cut_by: str | None = None
    evidence: str = ""
    details: dict[str, Any] = field(default_factory=dict)


@dataclass
class Reach:
    """A bounded breadth-first search from ``source`` for ``target``."""

    found: bool
    path: list[tuple[Term, str, tuple[int, ...]]]  # (term, rule into it, position)
    explored: int
    complete: bool
    cut_by: str | None
    normal_forms: list[Term]


def search(calc: Calculus, source: Term, target: Term, steps: int, nodes: int,
           group: str | None = None, plus: bool = False) -> Reach:
    """Is ``target`` reachable from ``source`` (by at least one step when ``plus``)?

    Stops at the first sight of the target; otherwise explores everything
    within ``steps`` and ``nodes`` and says whether that was all.  A term that
    would go beyond ``nodes`` stops the search at once, cut by "nodes".
    """
    parent: dict[Term, tuple[Term | None, str, tuple[int, ...]]] = {source: (None, "", ())}
    depth = {source: 0}
    todo: deque[Term] = deque([source])
    complete = True
    cut_by: str | None = None
    normal: list[Term] = []
    if not plus and source is target:
        return Reach(True, [(source, "", ())], 1, True, None, [])
    while todo:
        t = todo.popleft()
        if depth[t] >= steps:
            # As the graph builder does (rules/rewriting/rewrite.py): a reduct already in the graph is
            # an edge, not a cut; only a term beyond the bound cuts.  Breadth first, every term
            # within ``steps`` is already in ``parent`` here.
            has_step = False
            for s in iter_reducts(calc, t, group):
                has_step = True
                if s.result in parent:
                    if s.result is target:  # a cycle back to the source, for ->+
                        return _found(parent, t, s, len(parent), complete, cut_by, normal)
                    continue
                complete = False
                cut_by = cut_by or "steps"
                break
            if not has_step:
                normal.append(t)
            continue
        has_step = False
        for s in iter_reducts(calc, t, group):
            has_step = True
            r = s.result
            if r is target:
                return _found(parent, t, s, len(parent), complete, cut_by, normal)
            if r in parent:
                continue
            if len(parent) >= nodes:
                # the graph is full: stop at once, as the graph builder does, building no
                # further reduct (a term's reducts can be far more than the bound on nodes)
                return Reach(False, [], len(parent), False, "nodes", normal)
            parent[r] = (t, s.rule, s.position)
            depth[r] = depth[t] + 1
            todo.append(r)
        if not has_step:
            normal.append(t)
    return Reach(False, [], len(parent), complete, cut_by, normal)


def _found(parent: dict, t: Term, s, explored: int, complete: bool, cut_by: str | None,
           normal: list[Term]) -> Reach:
    """The path to ``s.result`` through ``t``, read back along ``parent``."""
    path = [(s.result, s.rule, s.position)]
    cur: Term | None = t
    while cur is not None:
        up, rule, pos = parent[cur]
        path.append((cur, rule, pos))
        cur = up
    return Reach(True, path[::-1], explored, complete, cut_by, normal)


def first_difference(calc: Calculus, a: Term, b: Term) -> tuple[tuple[int, ...], Term, Term]:
    """The smallest differing subterms of two terms and their position.

    Descends while the two terms agree but for one argument; a binder on the
    way is opened with the same new name on both sides, so the subterms print.
    """
    pos: list[int] = []
    while True:
        if (isinstance(a, Node) and isinstance(b, Node) and a.con == b.con
                and a.binders == b.binders and len(a.args) == len(b.args)):
            diff = [i for i, (x, y) in enumerate(zip(a.args, b.args, strict=True)) if x is not y]
            if len(diff) == 1:
                i = diff[0]
                pos.append(i)
                x, y = a.args[i], b.args[i]
                k = a.binders[i]
                if k:
                    sorts = calc.shapes[a.con].binder_sorts[i]
                    taken = set(a.free) | set(b.free)
                    names = []
                    for ns in sorts:
                        decl = calc.names_sorts[ns]
                        j = 0
                        while decl.canonical_name(j) in taken:
                            j += 1
                        taken.add(decl.canonical_name(j))
                        names.append(name(decl.canonical_name(j)))
                    x, y = open_body(x, names), open_body(y, names)
                a, b = x, y
                continue
        return tuple(pos), a, b


Seen = dict[str, tuple[str, "Term | Undefined"]]  # call as written -> (calculus, value)


class Evaluator:
    """Evaluates the expressions and atoms of one claim's cases.

    One translator per translation, shared across cases, so translations are
    memoised per interned term; a new Evaluator starts with empty memo tables
    (the re-check of a counterexample uses one).
    """

    def __init__(self, spec: Spec, bounds: Bounds):
        self.spec = spec
        self.bounds = bounds
        self.translators: dict[str, Translator] = {}
        # per case: translation -> worst normalisation outcome (0 fine, 1 cut by steps,
        # 3 cut by nodes, 2 definitely undefined: several normal forms, or none at all in a
        # complete graph), and the Undefined behind it; reset by the engine before each case
        self.case_norm: dict[str, tuple[int, Undefined | None]] = {}
        self._texts: dict[int, str] = {}  # id of an expression of the claim -> its text

    def translator(self, name: str) -> Translator:
        t = self.translators.get(name)
        if t is None:
            t = Translator(self.spec, self.spec.translations[name], self.bounds)
            self.translators[name] = t
        return t

    def text(self, e: Expr) -> str:
        """``cps(M)``: an expression as the claim writes it (asked once per call and case)."""
        got = self._texts.get(id(e))
        if got is None:
            if isinstance(e, EMeta):
                got = e.name
            elif isinstance(e, ESubst):
                pairs = ", ".join(f"{x.name} := {self.text(v)}" for x, v in e.pairs)
                got = f"{self.text(e.body)}[{pairs}]"
            else:
                tr = self.spec.translations[e.translation]
                fn = e.translation if e.fn == tr.entry else e.fn
                got = f"{fn}({', '.join(self.text(a) for a in e.args)})"
            self._texts[id(e)] = got
        return got

    def value(self, e: Expr, env: dict[str, Term], seen: Seen) -> Term | Undefined:
        """The value of ``e``; every call's value is also recorded in ``seen``, by its text,
        with the calculus it is a term of."""
        if isinstance(e, EMeta):
            return env[e.name]
        if isinstance(e, ESubst):
            return self.substituted(e, env, seen)
        args = []
        for a in e.args:
            v = self.value(a, env, seen)
            if isinstance(v, Undefined):
                return v
            args.append(v)
        tr = self.translator(e.translation)
        v = tr.apply_or_undefined(e.fn, args[0], args[1:])
        if tr.tr.normalize is not None:
            code = 0
            if isinstance(v, Undefined):
                definite = v.reason == "several-normal-forms" or v.cut_by == "cycle"
                code = 2 if definite else (3 if v.cut_by == "nodes" else 1)
            old = self.case_norm.get(tr.tr.name)
            if old is None or (code == 2) > (old[0] == 2) or (old[0] == 0 and code):
                self.case_norm[tr.tr.name] = (code, v if isinstance(v, Undefined) else None)
        seen[self.text(e)] = (e.calculus, v)
        return v

    def substituted(self, e: ESubst, env: dict[str, Term], seen: Seen) -> Term | Undefined:
        """``A[x := B]``: capture-avoiding substitution of the values for the names."""
        body = self.value(e.body, env, seen)
        if isinstance(body, Undefined):
            return body
        mapping: dict[str, Term] = {}
        for x, v in e.pairs:
            value = self.value(v, env, seen)
            if isinstance(value, Undefined):
                return value
            n = env[x.name]
            assert isinstance(n, Name)
            mapping[n.name] = value
        out = substitute(body, mapping)
        seen[self.text(e)] = (e.calculus, out)
        return out

    def calc(self, name: str) -> Calculus:
        return self.spec.calculi[name]

    # ------------------------------------------------------------ atoms

    def decide(self, atom: Atom, env: dict[str, Term], seen: Seen) -> Outcome:
        left = self.value(atom.left, env, seen)
        if isinstance(left, Undefined):
            return self._undefined(atom.left, left)
        if atom.member_of is not None:
            cname, sort = atom.member_of
            calc = self.calc(cname)
            if grammar(calc).member(left, sort):
                return Outcome(OK)
            return Outcome(FAIL, evidence=f"{self.text(atom.left)} = "
                           f"{print_abstract(calc, left)} is not a term of sort {sort} of {cname}",
                           details=self._membership_details(calc, left, sort))
        assert atom.right is not None and atom.relation is not None
        right = self.value(atom.right, env, seen)
        if isinstance(right, Undefined):
            return self._undefined(atom.right, right)
        return self.relate(atom, left, right)

    def _undefined(self, e: Expr, u: Undefined) -> Outcome:
        why = ("several normal forms" if u.reason == "several-normal-forms"
               else f"no normal form within the bound on {u.cut_by}")
        return Outcome(UNDECIDED, "normalize", f"{self.text(e)} is undefined here ({why})")

    def relate(self, atom: Atom, left: Term, right: Term) -> Outcome:
        rel = atom.relation
        assert rel is not None
        b = self.bounds
        assert b.steps is not None and b.nodes is not None
        calc_name = rel.calculus or atom.left.calculus
        lt, rt = self.text(atom.left), self.text(atom.right) if atom.right else ""
        if rel.kind == "==":
            if left is right:
                return Outcome(OK)
            calc = self.calc(atom.left.calculus)
            pos, _, _ = first_difference(calc, left, right)
            # each subterm with the bound names its whole term is printed with
            a, c = print_abstract_at(calc, left, pos), print_abstract_at(calc, right, pos)
            return Outcome(FAIL, evidence=(
                f"{lt} and {rt} differ at position {position_text(pos)}: {a} versus {c}"),
                details={"position": position_text(pos), "left_subterm": a, "right_subterm": c})
        calc = self.calc(calc_name)
        if rel.kind in ("->", "->="):
            if rel.kind == "->=" and left is right:
                return Outcome(OK)
            count = 0
            first: list[Term] = []
            for s in iter_reducts(calc, left, rel.group):  # one at a time: there may be many
                if s.result is right:
                    return Outcome(OK)
                count += 1
                if count <= 5:
                    first.append(s.result)
            shown = [print_abstract(calc, t) for t in first]
            return Outcome(FAIL, evidence=(
                f"{rt} is not a one-step reduct of {lt}" + (f" (it has {count}: "
                + ", ".join(shown) + (", ..." if count > 5 else "") + ")" if count
                else " (it has none: a normal form)")),
                details={"reducts": shown, **self._join_details(calc, left, right, rel)})
        if rel.kind in ("->*", "->+"):
            r = search(calc, left, right, b.steps, b.nodes, rel.group, plus=rel.kind == "->+")
            if r.found:
                return Outcome(OK)
            details: dict[str, Any] = {
                "graph": {"root": lt, "nodes": r.explored, "complete": r.complete,
                          "cut_by": r.cut_by,
                          "normal_forms": [print_abstract(calc, t) for t in r.normal_forms[:5]]}}
            if not r.complete:
                return Outcome(UNDECIDED, r.cut_by,
                               f"{rt} not reached from {lt} within {b.__dict__[r.cut_by]} "
                               f"{r.cut_by}", details)
            details.update(self._join_details(calc, left, right, rel))
            nfs = details["graph"]["normal_forms"]
            ev = (f"{rt} is not reachable from {lt}: the reduction graph of {lt} is complete with "
                  f"{r.explored} term{'s' if r.explored != 1 else ''}"
                  + (f", normal form{'s' if len(nfs) != 1 else ''} " + ", ".join(nfs) if nfs
                     else ", no normal form"))
            ev += "; " + details["diagnosis"]
            return Outcome(FAIL, evidence=ev, details=details)
        if rel.kind == "joins":
            j = join(calc, left, right, b.steps, b.nodes, rel.group)
            if j.status == "joinable":
                return Outcome(OK)
            if j.status == "unknown":
                return Outcome(UNDECIDED, j.cut_by,
                               f"{lt} and {rt} did not meet before the bound on {j.cut_by}")
            return Outcome(FAIL, evidence=(
                f"{lt} and {rt} have no common reduct: both reduction graphs are complete "
                f"({len(j.left)} and {len(j.right)} terms) and disjoint"),
                details={"left_graph": len(j.left), "right_graph": len(j.right)})
        raise AssertionError(f"unknown relation {rel.kind}")

    def _join_details(self, calc: Calculus, left: Term, right: Term, rel: Relation) -> dict:
        """The diagnosis for a failed reduction claim: do the two sides still join?"""
        b = self.bounds
        assert b.steps is not None and b.nodes is not None
        if left is right:
            return {"diagnosis": "the two sides are the same term, and ->+ needs at least one "
                                 "step (no reduction cycle leads back to it)", "joins": True}
        j = join(calc, left, right, b.steps, b.nodes, rel.group)
        if j.status == "joinable":
            assert j.common is not None
            back = search(calc, right, left, b.steps, b.nodes, rel.group)
            if back.found:
                d = "the reduction goes the other way: the right side reduces to the left"
            else:
                d = (f"the two sides still join at {print_abstract(calc, j.common)}: the claim "
                     "holds up to conversion, not as stated")
            return {"diagnosis": d, "joins": True, "common": print_abstract(calc, j.common)}
        if j.status == "not-joinable":
            return {"diagnosis": "the two sides do not even join (no common reduct)",
                    "joins": False}
        return {"diagnosis": f"whether the two sides join is unknown (the bound on {j.cut_by} "
                             "cut the search)", "joins": None}

    def _membership_details(self, calc: Calculus, t: Term, sort: str) -> dict:
        """The sorts the term does belong to (its state in the sort automaton)."""
        g = grammar(calc)
        state = sorted(g.state(t))
        return {"sorts_of_term": state}

    # ------------------------------------------------------------ premises

    def generated(self, premise: Atom, m: Term) -> Iterator[tuple[Term, str, tuple[int, ...]]]:
        """The values of a premise's N from M, in breadth-first order, with the step into each;
        ``self.premise_cut`` says afterwards whether the premise's graph was cut."""
        rel = premise.relation
        assert rel is not None
        calc = self.calc(rel.calculus or premise.left.calculus)
        self.premise_cut = None
        if rel.kind in ("->", "->="):
            if rel.kind == "->=":
                yield m, "", ()
            for s in iter_reducts(calc, m, rel.group):
                yield s.result, s.rule, s.position
            return
        b = self.bounds
        assert b.steps is not None and b.nodes is not None
        g = reduction_graph(calc, m, b.steps, b.nodes, rel.group)
        self.premise_cut = g.graph["cut_by"]
        for n in g.nodes:  # insertion order: breadth first
            into = list(g.in_edges(n, data=True))
            if n is m and rel.kind == "->*":
                yield m, "", ()
            elif into:  # for ->+, M itself only where a cycle leads back to it
                _, _, e = min(into, key=lambda x: g.nodes[x[0]]["depth"])
                yield n, e["rule"], e["position"]
