"""The proof engine: claims proved for every term, by induction, or the cases that are not.

Two methods, both over symbolic terms (:mod:`rules.symbolic`):

- **structural induction** on one quantified metavariable ``M`` of an atom: one
  case per shape of ``M``'s sort (a constructor over new metavariables, or a
  name), with the claim itself as hypothesis for every metavariable that
  stands for a proper part of ``M`` (renamed freely: renaming keeps size);
- **induction on the step** ``M -> N`` of a premise claim: one case per rule at
  the root (the rule's sides with new metavariables, side conditions kept as
  facts: a ``fresh`` condition makes the metavariable blind to the name), and
  one per place inside where the calculus reduces (every argument of every
  constructor for ``reduce anywhere``, the context grammar for ``reduce in
  E``), with the claim for the smaller step as hypothesis.

A case is decided by evaluating both sides: translation equations apply where
the shape of their argument decides them, the hypothesis and the proved
lemmas rewrite (``==``) or step (``->*`` and friends), and the calculus's
rules step where they match without looking inside an opaque part.  A case
that depends on an opaque part is split by the shapes of the metavariable
that blocks it (at most ``steps`` nested splits).  Whatever is not closed is
an *open* case, with its goal and the reason.

The engine never refutes: a claim it does not prove is left to the bounded
engines.  A proof that used a lemma which is only checked up to bounds is not
a proof for all terms: the claim then keeps ``"scope": "bounded"`` and says
which lemmas it assumes.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

from calcscout.obligations.claims import Obligation
from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import (
    AltSort,
    Atom,
    Bounds,
    Calculus,
    Claim,
    ECall,
    EMeta,
    ESubst,
    Expr,
    Implies,
    PAbs,
    PCon,
    Relation,
    Spec,
)
from calcscout.rules.core.terms import Bound, Name, Node, Term, close, name, node, substitute
from calcscout.rules.rewriting.match import _context_alts
from calcscout.rules.rewriting.symbolic import (
    OPAQUES,
    Opaque,
    Stuck,
    SymbolicTranslator,
    call_arguments,
    fresh,
    info,
    instantiate_rule,
    membership,
    new_meta,
    note_translation,
    opaques_in,
    replace_meta,
    rewrite_everywhere,
    rewrite_positions,
    shapes,
    show,
    split,
    steps_keep_sorts,
    symbolic_steps,
)

PROVED, OPEN = "proved", "open"
NEEDS_LEMMA, STUCK, SPLIT_LIMIT, SEARCH_CUT = "needs-lemma", "stuck", "split-limit", "search-cut"
REWRITE_ROUNDS = 40
SPLIT_BUDGET = 20  # splits in one induction, in all
PROOF_SECONDS = 2.0  # then the cases not yet tried are left open
SEARCH_SPLITS = 3  # nested splits for a case decided by a search (each split multiplies it)
SEARCH_NODES = 3000  # terms in one search of a proof case (also within `nodes`)


# ---------------------------------------------------------------- results


@dataclass
class ProofStep:
    term: str
    by: str

    def to_json(self) -> dict[str, str]:
        return {"term": self.term, "by": self.by}


@dataclass
class ProofCase:
    case: str
    status: str
    steps: list[ProofStep] = field(default_factory=list)
    goal: tuple[str, str] | None = None
    why: str | None = None
    detail: str | None = None
    candidates: list[str] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"case": self.case, "status": self.status,
                               "steps": [s.to_json() for s in self.steps]}
        if self.status == OPEN:
            out["goal"] = {"left": self.goal[0], "right": self.goal[1]} if self.goal else None
            out["why"] = self.why
            if self.detail:
                out["detail"] = self.detail
            if self.candidates:
                out["candidate_lemmas"] = list(self.candidates)
        return out

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> ProofCase:
        goal = d.get("goal")
        return cls(d["case"], d["status"], [ProofStep(s["term"], s["by"]) for s in d["steps"]],
                   (goal["left"], goal["right"]) if goal else None, d.get("why"),
                   d.get("detail"), list(d.get("candidate_lemmas", [])))


@dataclass
class ProofResult:
    """What the engine made of one obligation."""

    name: str
    formula: str
    proved: bool
    method: str
    cases: list[ProofCase] = field(default_factory=list)
    lemmas: list[str] = field(default_factory=list)  # proved lemmas it used
    assumes: list[str] = field(default_factory=list)  # lemmas it used that are only bounded
    splits: int = 0
    seconds: float = 0.0

    @property
    def open(self) -> list[ProofCase]:
        return [c for c in self.cases if c.status == OPEN]

    @property
    def reason(self) -> str:
        if self.proved:
            return self.method
        return f"{self.method}: {len(self.open)} open case(s)"

    def to_json(self) -> dict[str, Any]:
        return {"method": self.method, "proved": self.proved, "splits": self.splits,
                "lemmas": list(self.lemmas), "assumes": list(self.assumes),
                "cases": [c.to_json() for c in self.cases],
                "open": [c.to_json() for c in self.open]}

    @classmethod
    def from_json(cls, name: str, formula: str, d: dict[str, Any]) -> ProofResult:
        return cls(name, formula, d["proved"], d["method"],
                   [ProofCase.from_json(c) for c in d["cases"]], list(d.get("lemmas", [])),
                   list(d.get("assumes", [])), d.get("splits", 0))


@dataclass
class Fact:
    """A lemma the engine may use: proved for all terms, or only checked up to bounds."""

    claim: Claim
    proved: bool


# ---------------------------------------------------------------- rewriting with facts


@dataclass
class Rewrite:
    """``left REL right`` usable at a place of a term: a lemma, or a hypothesis."""

    left: Expr
    right: Expr
    kind: str  # "==", "->*", "->+", "->", "->="
    label: str
    lemma: str | None = None  # the lemma's name, for the report
    restrict: dict[str, Callable[[Term], bool]] = field(default_factory=dict)
    exact: tuple[Term, Term] | None = None  # a hypothesis on fixed terms: (left, right)


class _Case:
    """The state of one proof case: the quantified metavariables' values and the trail."""

    def __init__(self, env: dict[str, Term], text: str, smaller: set[str]):
        self.env = env
        self.text = text
        self.smaller = smaller  # metavariables below the induction's: the hypothesis covers them
        self.hypothesis: tuple[Atom, EMeta] | None = None  # for a membership claim


class Prover:
    """Tries proofs of the obligations of one spec; ``facts`` are the usable lemmas."""

    def __init__(self, spec: Spec, bounds: Bounds, facts: list[Fact] | None = None,
                 check_candidate: Callable[[Claim], bool] | None = None):
        self.spec = spec
        self.bounds = bounds
        self.facts = facts or []
        self.check_candidate = check_candidate
        self.max_splits = bounds.steps or 10
        for tr in spec.translations.values():
            note_translation(tr)
        self._labels: dict[str, int] = {}
        self._used_lemmas: list[str] = []
        self._smaller: set[str] = set()
        self._proxies: dict[tuple[str, str], Node] = {}
        self._deadline = float("inf")

    # ------------------------------------------------------------ entry

    def prove(self, ob: Obligation) -> ProofResult:
        start = time.perf_counter()
        self._deadline = start + PROOF_SECONDS
        f = ob.formula
        if isinstance(f, Atom):
            result = self._structural(ob, f)
        elif isinstance(f, Implies):
            result = self._on_step(ob, f)
        else:
            result = ProofResult(ob.name, ob.text, False,
                                 f"{type(f).__name__.lower()} claims are not proved by induction")
        result.seconds = time.perf_counter() - start
        return result

    # ------------------------------------------------------------ names and labels

    def calc(self, name: str) -> Calculus:
        return self.spec.calculi[name]

    def label(self, calc: Calculus, sort: str) -> str:
        s = calc.sorts.get(sort)
        base = s.metas[0] if s is not None and s.metas else sort
        n = self._labels.get(base, 0) + 1
        self._labels[base] = n
        return f"{base}{n}"

    def show(self, t: Term, calc: Calculus) -> str:
        return show(self.spec.calculi.get, t, calc)

    def split_text(self, label: str, s, calc: Calculus) -> str:
        if s.kind == "other":
            others = ", ".join(self.show(n, calc) for n in s.new)
            return f"{label} is a name" + (f" other than {others}" if others else "")
        return f"{label} = {self.show(s.shape, calc)}"

    def _tracked(self, quantified: tuple[EMeta, ...]) -> tuple[dict[str, Term], list[Name]]:
        """Values for a claim's names metavariables: a new name each, shown as written."""
        env: dict[str, Term] = {}
        names: list[Name] = []
        for m in quantified:
            calc = self.calc(m.calculus)
            if m.sort in calc.names_sorts:
                n = fresh(m.sort, label=m.name)
                env[m.name] = n
                names.append(n)
        return env, names

    def _opaque_for(self, m: EMeta, params: list[Name]) -> Node:
        calc = self.calc(m.calculus)
        return new_meta(calc, m.sort, params, m.name)

    # ------------------------------------------------------------ evaluation

    def value(self, e: Expr, env: dict[str, Term], trail: list[str]) -> Term:
        if isinstance(e, EMeta):
            return env[e.name]
        if isinstance(e, ESubst):
            body = self.value(e.body, env, trail)
            mapping = {}
            for x, v in e.pairs:
                n = env[x.name]
                if not isinstance(n, Name):
                    raise Stuck(f"{x.name} is not a name here")
                mapping[n.name] = self.value(v, env, trail)
            return substitute(body, mapping)
        args = [self.value(a, env, trail) for a in e.args]
        st = SymbolicTranslator(self.spec, self.spec.translations[e.translation])
        out = st.apply(e.fn, args[0], args[1:])
        trail.extend(st.used)
        return out

    def match_expr(self, e: Expr, t: Term, b: dict[str, Term], rw: Rewrite) -> bool:
        """Does ``t`` have the form of ``e`` for every instance (binding ``e``'s metavariables
        in ``b``)?  Only shapes that stand in symbolic terms are recognised: a call of a
        function on an opaque part, a metavariable, a pending substitution."""
        if isinstance(e, EMeta):
            calc = self.calc(e.calculus)
            if e.sort in calc.names_sorts:
                ok = isinstance(t, Name) and calc.names_sort_of(t.name) == e.sort
            else:
                if t.loose:
                    return False
                ok = membership(calc, t, e.sort) is True
            check = rw.restrict.get(e.name)
            if not ok or (check is not None and not check(t)):
                return False
            old = b.get(e.name)
            if old is not None:
                return old is t
            b[e.name] = t
            return True
        o = info(t)
        if o is None or t.loose:
            return False
        if isinstance(e, ECall):
            if o.kind != "call" or o.translation != e.translation or o.fn != e.fn:
                return False
            if not _renaming(t):  # a pending substitution on the call's result, not its argument
                return False
            args = call_arguments(t)  # type: ignore[arg-type]
            return len(args) == len(e.args) and all(
                self.match_expr(a, v, b, rw) for a, v in zip(e.args, args, strict=True))
        assert isinstance(e, ESubst)
        if len(e.pairs) != 1:
            return False
        assert isinstance(t, Node)
        moved = [j for j, a in enumerate(t.args) if not isinstance(a, Name)]
        if len(moved) != 1:
            return False
        j = moved[0]
        q = o.params[j]
        if any(q in a.free for k, a in enumerate(t.args) if k != j):
            return False
        t0 = node(t.con, t.args[:j] + (_name(q),) + t.args[j + 1:])
        x, v = e.pairs[0]
        old = b.get(x.name)
        if old is not None and old is not _name(q):
            return False
        b[x.name] = _name(q)
        return self.match_expr(e.body, t0, b, rw) and self.match_expr(v, t.args[j], b, rw)

    def rewriter(self, rws: list[Rewrite], trail: list[str]) -> Callable[[Term], Term | None]:
        def f(t: Term) -> Term | None:
            if info(t) is None:
                return None
            for rw in rws:
                got = self.apply_rewrite(rw, t, trail)
                if got is not None:
                    trail.append(rw.label)
                    return got
            return None

        return f

    def apply_rewrite(self, rw: Rewrite, t: Term, trail: list[str]) -> Term | None:
        if rw.exact is not None:
            return _renamed(rw.exact, t)
        b: dict[str, Term] = {}
        if not self.match_expr(rw.left, t, b, rw):
            return None
        try:
            out = self.value(rw.right, b, trail)
        except Stuck:
            return None
        if out is t:
            return None
        if rw.lemma and rw.lemma not in self._used_lemmas:
            self._used_lemmas.append(rw.lemma)
        return out

    def normal(self, t: Term, calc: Calculus, rws: list[Rewrite], trail: list[str]) -> Term:
        """``t`` with the ``==`` facts applied until nothing changes (bounded)."""
        eqs = [r for r in rws if r.kind == "=="]
        if not eqs:
            return t
        f = self.rewriter(eqs, trail)
        relevant = _relevant(eqs)
        for _ in range(REWRITE_ROUNDS):
            new = rewrite_everywhere(calc, t, f, relevant)
            if new is t:
                return t
            t = new
        return t

    # ------------------------------------------------------------ facts

    def lemma_rewrites(self, claim_name: str) -> list[Rewrite]:
        out = []
        for fact in self.facts:
            c = fact.claim
            if c.name == claim_name or not isinstance(c.formula, Atom):
                continue
            a = c.formula
            if a.relation is None or a.right is None:
                continue
            if a.relation.kind not in ("==", "->*", "->+", "->", "->="):
                continue
            out.append(Rewrite(a.left, a.right, a.relation.kind, f"lemma {c.name}", c.name))
        return out

    # ------------------------------------------------------------ deciding one case

    @property
    def _rule_lhss(self) -> list:
        return [r.lhs for c in self.spec.calculi.values() for r in c.rules]

    def decide(self, atom: Atom, case: _Case, rws: list[Rewrite]
               ) -> tuple[bool, list[ProofStep], tuple[Term, Term] | None, str | None, str | None]:
        """(proved, steps, goal terms, why, detail) for the atom in this case."""
        trail: list[str] = []
        left_calc = self.calc(atom.left.calculus)
        try:
            left = self.value(atom.left, case.env, trail)
            left_eq = list(trail)
            left = self.normal(left, left_calc, rws, trail)
            steps = [ProofStep(self.show(left, left_calc), _why_text(trail))]
            if atom.relation is None:
                assert atom.member_of is not None
                calc = self.calc(atom.member_of[0])
                if case.hypothesis is not None:
                    left = self._by_hypothesis(left, calc, case, atom.member_of[1], trail)
                    steps = [ProofStep(self.show(left, left_calc), _why_text(trail))]
                if membership(calc, left, atom.member_of[1]) is True:
                    steps.append(ProofStep(f": {atom.member_of[1]}", "the grammar of "
                                           f"{calc.name}"))
                    return True, steps, None, None, None
                return False, steps, (left, left), STUCK, (
                    f"not every instance is shown to be in {atom.member_of[1]}")
            assert atom.right is not None
            rtrail: list[str] = []
            right = self.value(atom.right, case.env, rtrail)
            right = self.normal(right, left_calc, rws, rtrail)
            steps.append(ProofStep(self.show(right, left_calc),
                                   "right side: " + _why_text(rtrail)))
        except Stuck as e:
            return False, [], None, STUCK, str(e)
        del left_eq
        rel = atom.relation
        assert rel is not None
        if rel.kind == "==" or left is right:
            if left is right:
                steps.append(ProofStep("both sides are the same term", "alpha-equivalence"))
                return True, steps, None, None, None
            return False, steps, (left, right), self._why_open(left, right), None
        return self._search(rel, left, right, rws, steps)

    def _by_hypothesis(self, t: Term, calc: Calculus, case: _Case, sort: str,
                       trail: list[str]) -> Term:
        """For a claim ``F(M) : S``: every call ``F(M1)`` on a part of ``M`` is in ``S`` by
        the hypothesis; it is replaced by an opaque term of sort ``S``."""
        assert case.hypothesis is not None
        atom, var = case.hypothesis
        rw = Rewrite(atom.left, atom.left, ":", f"hypothesis on a part of {var.name}",
                     restrict={var.name: lambda u: _renaming_of(u, case.smaller)})

        def f(u: Term) -> Term | None:
            if info(u) is None or u.loose or not self.match_expr(atom.left, u, {}, rw):
                return None
            assert isinstance(u, Node)
            o = OPAQUES[u.con]
            proxy = self._proxies.get((u.con, sort))
            if proxy is None:
                proxy = new_meta(calc, sort, [name(p) for p in o.params],
                                 self.show(u, calc), kind="reduct")
                self._proxies[(u.con, sort)] = proxy
            trail.append(rw.label)
            return node(proxy.con, u.args)

        return rewrite_everywhere(calc, t, f)

    def _why_open(self, left: Term, right: Term) -> str:
        for t in (left, right):
            for s in opaques_in(t):
                o = OPAQUES[s.con]
                if o.kind == "call" and _pending(s):
                    return NEEDS_LEMMA
        return STUCK

    def _search(self, rel: Relation, left: Term, right: Term, rws: list[Rewrite],
                steps: list[ProofStep]):
        calc = self.calc(rel.calculus or "")
        b = self.bounds
        limit_steps, limit_nodes = b.steps or 10, min(b.nodes or 20000, SEARCH_NODES)
        edges = [r for r in rws if r.kind != "=="]
        anywhere = calc.reduce_in is None

        def succ(t: Term) -> Iterator[tuple[Term, str, str]]:
            """(result, kind, justification): kind is 'one', or a fact's relation."""
            for rule, pos, res in symbolic_steps(calc, t, rel.group):
                trail: list[str] = []
                yield self.normal(res, calc, rws, trail), "one", f"rule {rule} at {pos}"
            for rw in edges:
                for pos, res in rewrite_positions(calc, t, anywhere,
                                                  lambda s, rw=rw: self.apply_rewrite(rw, s, [])):
                    trail: list[str] = []
                    yield self.normal(res, calc, rws, trail), rw.kind, f"{rw.label} at {pos}"

        kind = rel.kind
        if kind == "joins":
            a = _bfs(left, succ, limit_steps, limit_nodes)
            z = _bfs(right, succ, limit_steps, limit_nodes)
            common = [t for t in a.parents if t in z.parents]
            if common:
                meet = common[0]
                for t, why in a.path_to(meet):
                    steps.append(ProofStep(self.show(t, calc), why))
                back = z.path_to(meet)
                for t, why in back:
                    steps.append(ProofStep(self.show(t, calc), "from the right side: " + why))
                return True, steps, None, None, None
            cut = a.cut or z.cut
            return False, steps, (left, right), SEARCH_CUT if cut else self._why_open(left, right), (
                "no common reduct found" + (" before a bound cut the search" if cut else ""))
        found = _bfs(left, succ, limit_steps, limit_nodes, goal=right, kind=kind)
        if found.hit is not None:
            for t, why in found.path_to(found.hit):
                steps.append(ProofStep(self.show(t, calc), why))
            return True, steps, None, None, None
        why = SEARCH_CUT if found.cut else self._why_open(left, right)
        return False, steps, (left, right), why, (
            f"{self.show(right, calc)} not reached" + (" before a bound cut the search"
                                                        if found.cut else ""))

    # ------------------------------------------------------------ cases and splits

    def run_case(self, atom: Atom, case: _Case, rws: list[Rewrite], depth: int,
                 counter: list[int]) -> list[ProofCase]:
        if time.perf_counter() > self._deadline:
            return [ProofCase(case.text, OPEN, [], None, SEARCH_CUT,
                              f"not tried: the proof ran past {PROOF_SECONDS:g} s")]
        self._smaller = case.smaller
        proved, steps, goal, why, detail = self.decide(atom, case, rws)
        if proved:
            return [ProofCase(case.text, PROVED, steps)]
        target = None
        if goal is not None and why != NEEDS_LEMMA:
            target = self._split_target(case, goal, relational=atom.relation is not None
                                        and atom.relation.kind not in ("==",))
        limit = self.max_splits if target is None or not _relational(atom) else min(
            self.max_splits, SEARCH_SPLITS)
        if target is not None and depth < limit and counter[0] < SPLIT_BUDGET:
            o = OPAQUES[target.con]
            calc = self.calc(o.calc)
            out: list[ProofCase] = []
            counter[0] += 1
            for s in split(calc, target, lambda sort: self.label(calc, sort)):
                env = {k: replace_meta(v, s.meta, s.shape, o.params) for k, v in case.env.items()}
                smaller = set(case.smaller)
                if target.con in case.smaller:
                    smaller |= {m.con for m in s.new if isinstance(m, Node)}
                text = f"{case.text}, {self.split_text(o.label, s, calc)}"
                out.extend(self.run_case(atom, _Case(env, text, smaller), rws, depth + 1,
                                         counter))
            return out
        if target is not None:
            why = SPLIT_LIMIT
            detail = f"more than {limit} nested splits or {SPLIT_BUDGET} in all"
        calc = self.calc(atom.left.calculus)
        goal_text = (self.show(goal[0], calc), self.show(goal[1], calc)) if goal else None
        c = ProofCase(case.text, OPEN, steps, goal_text, why, detail)
        if why == NEEDS_LEMMA and goal is not None:
            c.candidates = self.candidates(goal)
        return [c]

    def _split_target(self, case: _Case, goal: tuple[Term, Term], relational: bool
                      ) -> Node | None:
        """The metavariable whose split may let an equation go on (the one a blocked call
        waits for) or, for a search, a rule fire (the first metavariable of the goal)."""
        present = {s.con: s for v in case.env.values() for s in opaques_in(v)
                   if OPAQUES[s.con].kind == "meta"}
        for t in goal:
            for s in opaques_in(t):
                o = OPAQUES[s.con]
                if o.kind == "call" and o.blocker in present:
                    return _identity(present[o.blocker])
        if relational:
            calc = self.calc(OPAQUES[next(iter(present))].calc) if present else None
            for t in goal:
                for s in _rule_blocked(t, self._rule_lhss):
                    o = OPAQUES[s.con]
                    cand = s.con if o.kind == "meta" else (o.blocker or _call_meta(s))
                    if cand in present:
                        return _identity(present[cand])
            del calc
        return None

    # ------------------------------------------------------------ candidates

    def candidates(self, goal: tuple[Term, Term]) -> list[str]:
        """Lemmas that would close a stuck call on a pending substitution, each checked by
        the bounded engine first: ``F(M[x := N]) == F(M)[x := G(N)]``."""
        if self.check_candidate is None:
            return []
        out: list[str] = []
        for t in goal:
            for s in opaques_in(t):
                o = OPAQUES[s.con]
                if o.kind != "call":
                    continue
                args = call_arguments(s) if not s.loose and _renaming(s) else ()
                if not args:
                    continue
                arg = args[0]
                a = info(arg)
                if a is None or a.kind != "meta" or not _pending(arg):
                    continue
                for text, claim in self._candidate_claims(o, a, arg):
                    if text not in out and self.check_candidate(claim):
                        out.append(text)
        return out

    def _candidate_claims(self, call: Opaque, meta: Opaque, arg: Node
                          ) -> Iterator[tuple[str, Claim]]:
        tr = self.spec.translations[call.translation]
        src = self.calc(tr.source)
        moved = [j for j, v in enumerate(arg.args) if not isinstance(v, Name)]
        if len(moved) != 1:
            return
        value = arg.args[moved[0]]
        ns = src.names_sort_of(meta.params[moved[0]])
        if ns is None:
            return
        vsort = _sort_of(src, value)
        if vsort is None:
            return
        m_name = _first_meta(src, meta.sort, avoid=())
        x_name = src.names_sorts[ns].metas[0] if src.names_sorts[ns].metas else "x"
        v_name = _first_meta(src, vsort, avoid=(m_name,))
        M = EMeta(m_name, src.name, meta.sort)
        X = EMeta(x_name, src.name, ns)
        V = EMeta(v_name, src.name, vsort)
        fsig = tr.signatures[call.fn]
        if len(fsig.params) != 1:
            return
        fn_text = tr.name if call.fn == tr.entry else call.fn
        left = ECall(tr.name, call.fn, (ESubst(M, ((X, V),)),), tr.target, fsig.result)
        options: list[tuple[str, Expr]] = []
        for g, sig in tr.signatures.items():
            if len(sig.params) == 1 and grammar(src).included(vsort, sig.params[0]) or (
                    len(sig.params) == 1 and sig.params[0] == vsort):
                gtext = tr.name if g == tr.entry else g
                options.append((f"{gtext}({v_name})", ECall(tr.name, g, (V,), tr.target,
                                                            sig.result)))
        if tr.source == tr.target:
            options.append((v_name, V))
        for vtext, vexpr in options:
            right = ESubst(ECall(tr.name, call.fn, (M,), tr.target, fsig.result), ((X, vexpr),))
            text = f"{fn_text}({m_name}[{x_name} := {v_name}]) == {fn_text}({m_name})" \
                   f"[{x_name} := {vtext}]"
            atom = Atom(left, Relation("=="), right)
            yield text, Claim("candidate", atom, (M, X, V), text)

    # ------------------------------------------------------------ structural induction

    def _structural(self, ob: Obligation, atom: Atom) -> ProofResult:
        candidates = [m for m in ob.quantified
                      if m.sort not in self.calc(m.calculus).names_sorts]
        if not candidates:
            return self._no_induction(ob, atom)
        best: ProofResult | None = None
        for var in candidates:
            result = self._structural_on(ob, atom, var)
            if result.proved:
                return result
            if best is None or len(result.open) < len(best.open):
                best = result
        assert best is not None
        return best

    def _no_induction(self, ob: Obligation, atom: Atom) -> ProofResult:
        env, names = self._tracked(ob.quantified)
        case = _Case(env, "every name", set())
        rws = self.lemma_rewrites(ob.claim.name)
        self._used_lemmas = []
        cases = self.run_case(atom, case, rws, 0, [0])
        return self._result(ob, "direct evaluation", cases, 0)

    def _structural_on(self, ob: Obligation, atom: Atom, var: EMeta) -> ProofResult:
        self._labels = {}
        self._used_lemmas = []
        env, names = self._tracked(ob.quantified)
        for m in ob.quantified:
            if m.name not in env:
                env[m.name] = self._opaque_for(m, names)
        root = env[var.name]
        assert isinstance(root, Node)
        rws = self.lemma_rewrites(ob.claim.name)
        if atom.relation is not None and atom.right is not None:
            hyp = Rewrite(atom.left, atom.right, atom.relation.kind,
                          f"hypothesis on a part of {var.name}",
                          restrict={var.name: lambda t: _renaming_of(t, self._smaller)})
            rws = [hyp, *rws]
        calc = self.calc(var.calculus)
        cases: list[ProofCase] = []
        counter = [0]
        for s in split(calc, root, lambda sort: self.label(calc, sort)):
            case_env = {k: replace_meta(v, s.meta, s.shape, OPAQUES[root.con].params)
                        for k, v in env.items()}
            case = _Case(case_env, self.split_text(var.name, s, calc),
                         {m.con for m in s.new if isinstance(m, Node)})
            if atom.relation is None:
                case.hypothesis = (atom, var)
            cases.extend(self.run_case(atom, case, rws, 0, counter))
        method = f"structural induction on {var.name}, {len(cases)} case(s)"
        return self._result(ob, method, cases, counter[0])

    def _result(self, ob: Obligation, method: str, cases: list[ProofCase], splits: int
                ) -> ProofResult:
        proved = bool(cases) and all(c.status == PROVED for c in cases)
        used = list(self._used_lemmas)
        bounded_only = {f.claim.name for f in self.facts if not f.proved}
        return ProofResult(ob.name, ob.text, proved, method, cases,
                           [u for u in used if u not in bounded_only],
                           [u for u in used if u in bounded_only], splits)

    # ------------------------------------------------------------ induction on the step

    def _on_step(self, ob: Obligation, f: Implies) -> ProofResult:
        prem = f.premise
        rel = prem.relation
        assert rel is not None and isinstance(prem.left, EMeta) and isinstance(prem.right, EMeta)
        if rel.kind != "->":
            one = self._one_step(ob, f, Relation("->", rel.calculus, rel.group))
            if not one.proved:
                one.method = f"{one.method} (the one-step case of a `{rel.kind}` premise)"
                return one
            c = f.conclusion
            if not _same_shape(c, prem.left.name, prem.right.name) or c.relation is None or (
                    c.relation.kind not in ("->*", "==")):
                one.proved = False
                one.method = (f"{one.method}; a `{rel.kind}` premise follows from the one-step "
                              "case only for a conclusion F(M) ->* F(N) or F(M) == F(N)")
                return one
            one.method = f"{one.method}, then by transitivity along `{rel.kind}`"
            return one
        return self._one_step(ob, f, rel)

    def _one_step(self, ob: Obligation, f: Implies, rel: Relation) -> ProofResult:
        self._labels = {}
        self._used_lemmas = []
        prem = f.premise
        assert isinstance(prem.left, EMeta) and isinstance(prem.right, EMeta)
        mvar, nvar = prem.left, prem.right
        calc = self.calc(rel.calculus or mvar.calculus)
        env0, names = self._tracked(ob.quantified)
        for m in ob.quantified:
            if m.name not in env0 and m.name != mvar.name:
                env0[m.name] = self._opaque_for(m, names)
        lemmas = self.lemma_rewrites(ob.claim.name)
        conclusion = f.conclusion
        cases: list[ProofCase] = []
        counter = [0]
        roots = 0
        for rule in calc.rules_of(rel.group):
            roots += 1
            try:
                inst = instantiate_rule(calc, rule, names, lambda s: self.label(calc, s))
            except Stuck as e:
                cases.append(ProofCase(f"root step by {rule.name}", OPEN, [], None, STUCK,
                                       str(e)))
                continue
            env = dict(env0)
            env[mvar.name] = inst.lhs
            env[nvar.name] = inst.rhs
            case = _Case(env, f"root step by {rule.name}: {self.show(inst.lhs, calc)} -> "
                              f"{self.show(inst.rhs, calc)}", set())
            cases.extend(self.run_case(conclusion, case, lemmas, 0, counter))
        inside = self._inside_cases(calc, rel, mvar, nvar, env0, names, conclusion, lemmas,
                                    counter)
        cases.extend(inside)
        method = (f"induction on {mvar.name} {rel.kind} {nvar.name}: {roots} root case(s), "
                  f"{len(inside)} inside")
        return self._result(ob, method, cases, counter[0])

    def _inside_cases(self, calc: Calculus, rel: Relation, mvar: EMeta, nvar: EMeta,
                      env0: dict[str, Term], names: list[Name], conclusion: Atom,
                      lemmas: list[Rewrite], counter: list[int]) -> list[ProofCase]:
        keep, why = steps_keep_sorts(calc, rel.group, mvar.sort)
        places = list(self._places(calc, mvar.sort))
        if not places:
            return []
        if not keep:
            return [ProofCase("a step inside a constructor", OPEN, [], None, STUCK,
                              f"steps may leave the grammar ({why}), so the part that "
                              "steps has no known sort")]
        g = grammar(calc)
        out: list[ProofCase] = []
        for con, binders, arg_sorts, i in places:
            params_outer = list(names)
            args_m: list[Term] = []
            args_n: list[Term] = []
            hole_m = hole_n = None
            for j, (bsorts, s) in enumerate(arg_sorts):
                bnames = [fresh(ns) for ns in bsorts]
                if s in calc.names_sorts:
                    value: Term = fresh(s)
                    args_m.append(value)
                    args_n.append(value)
                    continue
                m = new_meta(calc, s, params_outer + bnames, self.label(calc, s))
                if j == i:
                    n = new_meta(calc, s, params_outer + bnames, self.label(calc, s), "reduct")
                    hole_m, hole_n = m, n
                    args_m.append(close(m, [b.name for b in bnames]) if bnames else m)
                    args_n.append(close(n, [b.name for b in bnames]) if bnames else n)
                else:
                    args_m.append(close(m, [b.name for b in bnames]) if bnames else m)
                    args_n.append(args_m[-1])
            tm = node(con, args_m, binders)
            tn = node(con, args_n, binders)
            text = f"a step inside argument {i + 1} of {con}: {self.show(tm, calc)} -> " \
                   f"{self.show(tn, calc)}"
            assert hole_m is not None and hole_n is not None
            hole_sort = arg_sorts[i][1]
            env = dict(env0)
            env[mvar.name] = tm
            env[nvar.name] = tn
            rws = list(lemmas)
            if g.included(hole_sort, mvar.sort):
                henv = dict(env0)
                henv[mvar.name] = hole_m
                henv[nvar.name] = hole_n
                try:
                    hl = self.value(conclusion.left, henv, [])
                    hr = self.value(conclusion.right, henv, []) if conclusion.right else hl
                    hyp = Rewrite(conclusion.left, conclusion.right or conclusion.left,
                                  conclusion.relation.kind if conclusion.relation else ":",
                                  f"hypothesis on {OPAQUES[hole_m.con].label} -> "
                                  f"{OPAQUES[hole_n.con].label}", exact=(hl, hr))
                    rws = [hyp, *rws]
                except Stuck:
                    pass
            case = _Case(env, text, set())
            out.extend(self.run_case(conclusion, case, rws, 0, counter))
        return out

    def _places(self, calc: Calculus, sort: str
                ) -> Iterator[tuple[str, tuple[int, ...], tuple, int]]:
        """(constructor, binders, argument sorts, argument) for every place a step may happen
        inside a term of ``sort``."""
        cons, _ = shapes(calc, sort)
        if calc.reduce_in is None:
            for con, args in cons:
                binders = tuple(len(b) for b, _ in args)
                for i, (_, s) in enumerate(args):
                    if s not in calc.names_sorts:
                        yield con, binders, args, i
            return
        inside = _context_sorts(calc, calc.reduce_in)
        alts = _context_alts(calc, calc.reduce_in)
        by_con = {c: a for c, a in cons}
        for con, hole, hole_sort, args in alts.cons:
            if hole_sort not in inside:
                continue
            shape_args = by_con.get(con)
            if shape_args is None:
                continue
            merged = tuple((b, s if j != hole else shape_args[j][1])
                           for j, (b, s) in enumerate(args))
            yield con, tuple(len(b) for b, _ in merged), merged, hole


# ---------------------------------------------------------------- helpers


def _name(text: str) -> Name:
    return name(text)


def _identity(m: Node) -> Node:
    o = OPAQUES[m.con]
    return node(m.con, tuple(_name(p) for p in o.params))


def _pending(t: Term) -> bool:
    """A call or metavariable with a substitution of a term (not a name) pending."""
    o = info(t)
    if o is None:
        return False
    if o.kind == "call":
        if t.loose or not _renaming(t):
            return False
        return any(_pending(a) for a in call_arguments(t))  # type: ignore[arg-type]
    assert isinstance(t, Node)
    return any(not isinstance(a, Name) for a in t.args)


def _relevant(rws: list[Rewrite]) -> Callable[[Node], bool]:
    """Which opaque nodes one of ``rws`` may rewrite (a cheap filter, before matching)."""
    heads: list[Callable[[Node], bool]] = []
    for rw in rws:
        if rw.exact is not None:
            con = rw.exact[0].con if isinstance(rw.exact[0], Node) else None
            heads.append(lambda t, con=con: t.con == con)
            continue
        e = rw.left
        if isinstance(e, ECall):
            pending = bool(e.args) and isinstance(e.args[0], ESubst)

            def head(t: Node, e=e, pending=pending) -> bool:
                o = OPAQUES[t.con]
                if o.kind != "call" or o.fn != e.fn or o.translation != e.translation:
                    return False
                # F(M[x := V]) applies only where the call's argument has a substitution
                return not pending or _substituted(o.template[0])
            heads.append(head)
        elif isinstance(e, ESubst):
            heads.append(lambda t: any(not isinstance(a, Name | Bound) for a in t.args))
        else:
            return lambda t: True
    return lambda t: any(h(t) for h in heads)


def _rule_blocked(t: Term, lhss: list) -> list[Node]:
    """Opaque nodes standing where a rule's left side needs a constructor: splitting the
    metavariable behind one may let the rule fire (``app(cps(M), k)`` is a redex only once
    ``cps(M)`` shows its abstraction)."""
    out: list[Node] = []

    def go(s: Term) -> None:
        if not isinstance(s, Node) or info(s) is not None:
            return
        for lhs in lhss:
            if isinstance(lhs, PCon) and lhs.con == s.con and len(lhs.args) == len(s.args):
                for pa, a in zip(lhs.args, s.args, strict=True):
                    body = pa.body if isinstance(pa, PAbs) else pa
                    if isinstance(body, PCon) and info(a) is not None and a not in out:
                        out.append(a)  # type: ignore[arg-type]
        for a in s.args:
            go(a)

    go(t)
    return out


def _call_meta(t: Node) -> str | None:
    """The metavariable a call waits for when it was made on one."""
    o = OPAQUES[t.con]
    if o.kind == "call" and o.template:
        a = info(o.template[0])
        if a is not None and a.kind == "meta":
            return o.template[0].con  # type: ignore[union-attr]
    return None


def _relational(atom: Atom) -> bool:
    return atom.relation is not None and atom.relation.kind != "=="


def _substituted(t: Term) -> bool:
    """An opaque node with a term (not a name) pending for one of its parameters."""
    return info(t) is not None and any(not isinstance(a, Name | Bound)
                                       for a in t.args)  # type: ignore[union-attr]


def _renaming(t: Term) -> bool:
    """An opaque node whose arguments are distinct names: a renaming, which commutes with
    translations (their equations cannot tell one name from another)."""
    args = t.args  # type: ignore[union-attr]
    return all(isinstance(a, Name) for a in args) and len(set(args)) == len(args)


def _renaming_of(t: Term, smaller: set[str]) -> bool:
    """``t`` is a metavariable below the induction's, its parameters renamed to names."""
    o = info(t)
    return (o is not None and o.kind == "meta" and t.con in smaller  # type: ignore[union-attr]
            and all(isinstance(a, Name) for a in t.args))  # type: ignore[union-attr]


def _renamed(exact: tuple[Term, Term], t: Term) -> Term | None:
    """The hypothesis ``left REL right`` at ``t``, when ``t`` is ``left`` with its names
    renamed (``left`` an opaque node)."""
    left, right = exact
    if not isinstance(t, Node) or not isinstance(left, Node) or t.con != left.con:
        return None
    if not all(isinstance(a, Name) for a in t.args) or not all(
            isinstance(a, Name) for a in left.args):
        return None
    mapping = {a.name: b for a, b in zip(left.args, t.args, strict=True)  # type: ignore
               if a is not b}
    return substitute(right, mapping) if mapping else right


def _why_text(trail: list[str]) -> str:
    if not trail:
        return "as written"
    eqs = [t for t in trail if not t.startswith(("lemma", "hypothesis"))]
    facts = [t for t in trail if t.startswith(("lemma", "hypothesis"))]
    parts = []
    if eqs:
        seen = list(dict.fromkeys(eqs))
        parts.append("equation" + ("s " if len(seen) > 1 else " ") + ", ".join(seen))
    for fct in dict.fromkeys(facts):
        parts.append(fct)
    return "; ".join(parts)


def _sort_of(calc: Calculus, t: Term) -> str | None:
    o = info(t)
    if o is not None and o.calc == calc.name:
        return o.sort
    g = grammar(calc)
    q = g.state(t)
    for s in calc.sorts:
        if s in q and all(s2 == s or s2 not in q or not g.included(s2, s) for s2 in q):
            return s
    return next(iter(q), None)


def _first_meta(calc: Calculus, sort: str, avoid: tuple[str, ...]) -> str:
    s = calc.sorts.get(sort)
    for m in (s.metas if s else ()):
        if m not in avoid:
            return m
    base = s.metas[0] if s and s.metas else "M"
    i = 1
    while f"{base}{i}" in avoid:
        i += 1
    return f"{base}{i}"


def _context_sorts(calc: Calculus, sort: str) -> set[str]:
    seen = {sort}
    todo = [sort]
    while todo:
        s = todo.pop()
        for alt in calc.sorts[s].alts:
            if isinstance(alt, AltSort) and alt.sort in calc.sorts and \
                    calc.sorts[alt.sort].is_context and alt.sort not in seen:
                seen.add(alt.sort)
                todo.append(alt.sort)
    return seen


def _same_shape(c: Atom, m: str, n: str) -> bool:
    """``c`` is ``e[m] REL e[n]`` for one expression ``e``."""
    if c.right is None:
        return False

    def same(a: Expr, b: Expr) -> bool:
        if isinstance(a, EMeta) and isinstance(b, EMeta):
            return a.name == b.name or (a.name == m and b.name == n)
        if isinstance(a, ECall) and isinstance(b, ECall):
            return (a.translation == b.translation and a.fn == b.fn
                    and all(same(x, y) for x, y in zip(a.args, b.args, strict=True)))
        return False

    return same(c.left, c.right) and _mentions(c.left, m)


def _mentions(e: Expr, m: str) -> bool:
    if isinstance(e, EMeta):
        return e.name == m
    if isinstance(e, ESubst):
        return _mentions(e.body, m) or any(_mentions(v, m) for _, v in e.pairs)
    return any(_mentions(a, m) for a in e.args)


@dataclass
class _Search:
    parents: dict[Term, tuple[Term | None, str]]
    hit: Term | None = None
    cut: bool = False

    def path_to(self, t: Term) -> list[tuple[Term, str]]:
        out = []
        while True:
            parent, why = self.parents[t]
            if parent is None:
                break
            out.append((t, why))
            t = parent
        return list(reversed(out))


def _bfs(start: Term, succ, steps: int, nodes: int, goal: Term | None = None,
         kind: str = "->*") -> _Search:
    """Breadth-first over terms (interned, so interleavings of the same steps meet).  For
    ``->+`` a state also records whether a step was taken; ``->`` and ``->=`` look at one
    edge only.  ``goal`` None: explore (for joins)."""
    out = _Search({start: (None, "")})
    if kind in ("->", "->="):
        if kind == "->=" and start is goal:
            out.hit = start
            return out
        for res, how, why in succ(start):
            if res is goal and how in ("one", "->"):
                out.parents[res] = (start, why)
                out.hit = res
                return out
        return out
    need_step = kind == "->+"
    init = (start, not need_step)
    parents: dict[tuple[Term, bool], tuple[tuple[Term, bool] | None, str]] = {init: (None, "")}
    depth = {init: 0}
    queue = deque([init])
    if goal is not None and init == (goal, True):
        out.hit = start
        return out
    while queue:
        state = queue.popleft()
        if depth[state] >= steps:
            out.cut = True
            continue
        t, stepped = state
        for res, how, why in succ(t):
            new = (res, stepped or how in ("one", "->", "->+"))
            if new in parents:
                continue
            if len(parents) >= nodes:
                out.cut = True
                return out
            parents[new] = (state, why)
            depth[new] = depth[state] + 1
            if res not in out.parents:
                out.parents[res] = (t, why)
            if goal is not None and res is goal and new[1]:
                chain: dict[Term, tuple[Term | None, str]] = {start: (None, "")}
                path = []
                cur: tuple[Term, bool] | None = new
                while cur is not None and parents[cur][0] is not None:
                    prev, w = parents[cur]
                    path.append((cur[0], w))
                    cur = prev
                prev_t = start
                for tt, w in reversed(path):
                    chain[tt] = (prev_t, w)
                    prev_t = tt
                out.parents = chain
                out.hit = res
                return out
            queue.append(new)
    return out
