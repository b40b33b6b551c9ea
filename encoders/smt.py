"""Obligations as bounded solver queries over the node array (:mod:`calcscout.encoders.slots`).

For total size ``n`` the query asks for quantified terms laid out in slots
``0..n-1`` on which the claim fails; the claim's translations are evaluated
over the symbolic terms in Python (:mod:`calcscout.encoders.symeval`), so the query is
a quantifier-free formula over integers.

Which claims (LANGUAGE.md §6, §8):

- ``A == B``, ``A : S``, ``A -> B``, ``A ->= B`` are *decided*: a model is a
  counterexample, ``unsat`` at every size up to the bound means the claim
  holds within it;
- ``A ->* B``, ``A ->+ B``, ``A joins B`` are encoded by what one step
  decides (equal, or one step apart): a model is only a *candidate*, which
  the rewriting engine settles; ``unsat`` still means the claim holds, since
  a case the one-step test accepts is accepted by the real relation too;
- a premise ``M -> N`` or ``M ->= N`` is a symbolic choice of a redex
  position (a slot) and a rule; ``M ->* N`` and ``M ->+ N`` premises are not
  encoded (:class:`~calcscout.rules.core.errors.EncodingError`).
"""

from __future__ import annotations

import z3

from calcscout.encoders.slots import Universe
from calcscout.encoders.symbolic import Store, Sym, evaluate, f_and, f_not, f_or, to_term
from calcscout.encoders.symeval import StepBudget, SymRules, SymTranslator
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Atom, Bounds, Calculus, ECall, EMeta, ESubst, Expr, Implies, Spec

DECIDED = ("==", "->", "->=")
#: Pairs of terms the one-step test of a candidate relation may expand at one size.
STEP_LIMIT = 20_000
CANDIDATE = ("->*", "->+", "joins")


def encodable(spec: Spec, formula) -> tuple[bool, str]:
    """Whether the SMT engine can take ``formula``, and why not."""
    if isinstance(formula, Implies):
        prem = formula.premise
        rel = prem.relation
        if rel is None or rel.kind not in ("->", "->="):
            kind = rel.kind if rel else ":"
            return False, (f"a premise `M {kind} N` is not encoded (the solver would see only "
                           "the reducts within a fixed number of steps); use enumeration")
        if not isinstance(prem.left, EMeta) or not isinstance(prem.right, EMeta):
            return False, "a premise must relate two metavariables"
        ok, why = _calculus_ok(spec, spec.calculi[rel.calculus or prem.left.calculus], True)
        if not ok:
            return ok, why
        atom = formula.conclusion
    elif isinstance(formula, Atom):
        atom = formula
    else:
        return False, f"{type(formula).__name__.lower()} claims are decided by rewriting, not SMT"
    for e in (atom.left, atom.right):
        ok, why = _expr_ok(spec, e)
        if not ok:
            return ok, why
    if atom.relation is not None and atom.relation.kind != "==":
        rel = atom.relation
        calc = spec.calculi[rel.calculus or atom.left.calculus]
        ok, why = _calculus_ok(spec, calc, True)
        if not ok:
            return ok, why
    return True, ""


def _expr_ok(spec: Spec, e: Expr | None) -> tuple[bool, str]:
    if isinstance(e, ESubst):
        return False, "substitutions in claims are left to enumeration"
    if isinstance(e, EMeta) and e.sort in spec.calculi[e.calculus].names_sorts:
        return False, "a metavariable over names is left to enumeration"
    if isinstance(e, ECall):
        tr = spec.translations[e.translation]
        if tr.normalize is not None:
            return False, (f"translation {tr.name} ends with `then normalize {tr.normalize}`; "
                           "it is left to enumeration")
        for a in e.args:
            ok, why = _expr_ok(spec, a)
            if not ok:
                return ok, why
    return True, ""


def _calculus_ok(spec: Spec, calc: Calculus, rules: bool) -> tuple[bool, str]:
    if rules and calc.reduce_in is not None:
        return False, (f"calculus {calc.name} reduces in context {calc.reduce_in}; the SMT "
                       "engine encodes only `reduce anywhere`")
    if rules:
        from calcscout.rules.core.spec import PAbs, PCon, PPlug

        def has_plug(p) -> bool:
            if isinstance(p, PPlug):
                return True
            if isinstance(p, PCon):
                return any(has_plug(a) for a in p.args)
            if isinstance(p, PAbs):
                return has_plug(p.body)
            return False

        for r in calc.rules:
            if has_plug(r.lhs) or has_plug(r.rhs):
                return False, f"rule {r.name} of {calc.name} uses a context; not encoded"
    return True, ""


class Encoding:
    """One obligation's queries, size by size, in one z3 context."""

    def __init__(self, spec: Spec, formula, quantified: tuple[EMeta, ...], bounds: Bounds,
                 ctx: z3.Context, budget: int = 4_000_000):
        ok, why = encodable(spec, formula)
        if not ok:
            raise EncodingError(why)
        assert bounds.size is not None and bounds.names is not None
        self.spec = spec
        self.formula = formula
        self.quantified = quantified
        self.bounds = bounds
        self.ctx = ctx
        self.store = Store(budget)
        calcs = {m.calculus for m in quantified}
        if len(calcs) != 1:
            raise EncodingError("the quantified metavariables range over several calculi; the "
                                "SMT engine encodes one calculus at a time")
        self.calc = spec.calculi[calcs.pop()]
        self.universe = Universe(self.store, self.calc, bounds.size, bounds.names, ctx)
        self.translators: dict[str, SymTranslator] = {}
        self.rulesets: dict[tuple[str, str | None], SymRules] = {}
        atom = formula.conclusion if isinstance(formula, Implies) else formula
        kind = atom.relation.kind if atom.relation is not None else ":"
        self.mode = "candidate" if kind in CANDIDATE else "decide"
        self.premise = formula.premise if isinstance(formula, Implies) else None
        self._roots: dict[int, tuple] = {}
        self.calls: list[Sym] = []  # the values of the calls :meth:`value` made
        self.current = 0  # the size being encoded
        self.step_dropped: list[int] = []  # sizes whose one-step test was left out
        if self.premise is not None:
            rel = self.premise.relation
            self.prem_rules = self.rules(rel.calculus or self.premise.left.calculus, rel.group)
            self.pos = z3.Int("pos", ctx)
            self.rl = z3.Int("rl", ctx)
            self._red: dict[tuple, tuple] = {}

    # ------------------------------------------------------------ parts

    def translator(self, name: str) -> SymTranslator:
        t = self.translators.get(name)
        if t is None:
            t = self.translators[name] = SymTranslator(self.store, self.spec,
                                                       self.spec.translations[name])
        return t

    def rules(self, calc: str, group: str | None) -> SymRules:
        key = (calc, group)
        r = self.rulesets.get(key)
        if r is None:
            r = self.rulesets[key] = SymRules(self.store, self.spec.calculi[calc], group)
        return r

    def value(self, e: Expr, env: dict[str, Sym]) -> Sym:
        if isinstance(e, EMeta):
            return env[e.name]
        args = [self.value(a, env) for a in e.args]
        out = self.translator(e.translation).apply(e.fn, args[0], args[1:])
        self.calls.append(out)
        return out

    def faulty(self, atom: Atom, env: dict[str, Sym]):
        """Where a translation of the atom fails at run time (no equation matches, or a
        bound name escapes): the rewriting engine stops there with an error, so such a case
        counts as one the claim does not pass (it is re-judged, and reported as an error)."""
        self.calls = []
        self.value(atom.left, env)
        if atom.right is not None:
            self.value(atom.right, env)
        return f_or(self.store.faulty(v) for v in self.calls)

    def holds(self, atom: Atom, env: dict[str, Sym]):
        """The atom as a formula (for a candidate relation: what one step decides)."""
        s = self.store
        left = self.value(atom.left, env)
        if atom.member_of is not None:
            cname, sort = atom.member_of
            return s.member(left, sort, self.spec.calculi[cname])
        assert atom.right is not None and atom.relation is not None
        right = self.value(atom.right, env)
        rel = atom.relation
        if rel.kind == "==":
            return s.eq(left, right)
        rules = self.rules(rel.calculus or atom.left.calculus, rel.group)
        if rel.kind == "->":
            return rules.step(left, right)
        if rel.kind == "->=":
            return f_or([s.eq(left, right), rules.step(left, right)])
        # a candidate relation: the one-step test only spares the rewriting engine some
        # candidates, so where it grows past its limit it is left out (equality alone
        # still accepts only cases the real relation accepts)
        rules.work, rules.limit = 0, STEP_LIMIT
        try:
            if rel.kind == "->*":
                return f_or([s.eq(left, right), rules.step(left, right)])
            if rel.kind == "->+":
                return rules.step(left, right)
            return f_or([s.eq(left, right), rules.step(left, right), rules.step(right, left)])
        except StepBudget:
            self.step_dropped.append(self.current)
            return False if rel.kind == "->+" else s.eq(left, right)
        finally:
            rules.limit = None

    # ------------------------------------------------------------ queries

    def query(self, k: int) -> tuple[list, list, dict[str, Sym] | None]:
        """For total size ``k + 1``: constraints to assert for good, what the size's
        assumption literal implies (the claim fails there), and the symbolic values."""
        u = self.universe
        self.current = k + 1
        facts = u.add_slots(k)
        roots, assume = u.tuple_roots(k, [m.sort for m in self.quantified])
        if roots is None:
            return facts, [], None
        env = {m.name: r for m, r in zip(self.quantified, roots, strict=True)}
        if self.premise is None:
            fails = f_or([f_not(self.holds(self.formula, env)),
                          self.faulty(self.formula, env)])
        else:
            mname = self.premise.left.name
            nname = self.premise.right.name  # type: ignore[union-attr]
            n, valid = self.reduct(env[mname], k)
            env[nname] = n
            atom = self.formula.conclusion
            fails = f_and([valid, f_or([f_not(self.holds(atom, env)),
                                        self.faulty(atom, env)])])
        self.store.check_budget()
        self._roots[k] = (env,)
        return facts, [*assume, fails], env

    def reduct(self, m_sym: Sym, k: int) -> tuple[Sym, object]:
        """The symbolic one-step reduct of the root at slot ``k`` (position ``pos``,
        rule ``rl``), and the formula saying that step exists."""
        assert self.premise is not None
        u = self.universe
        rels = self.premise.relation
        nrules = len(self.prem_rules.rules)
        lo = -1 if rels.kind == "->=" else 0
        bounds = [self.pos >= lo, self.pos <= k, self.rl >= 0, self.rl < max(nrules, 1)]
        guards, branches, valids = [], [], []
        for x in range(len(u.states)):
            if m_sym is None:
                break
            t, v = self._red_term(k, x)
            if t is None:
                continue
            g = u.state_var(k) == x
            guards.append(g)
            branches.append(t)
            valids.append(f_and([g, v]))
        n = self.store.choice(guards, branches)
        valid = f_or(valids)
        if rels.kind == "->=":
            zero = self.pos == -1
            n = self.store.choice([zero, f_not(zero)], [m_sym, n])
            valid = f_or([zero, valid])
        return n, f_and([*bounds, valid])

    def _red_term(self, m: int, q: int) -> tuple[Sym | None, object]:
        key = ("R", m, q)
        got = self._red.get(key)
        if got is not None:
            return got
        u = self.universe
        s = self.store
        rules = self.prem_rules
        guards, branches, valids = [], [], []
        for p in u.feasible(m):
            if p.state != q:
                continue
            tp = u._prod_term(m, p)
            if tp is None:
                continue
            og, ob, ov = [], [], []
            rg, rb, rv = [], [], []
            for i, rule in enumerate(rules.rules):
                v, res = rules.root_step(rule, tp)
                if v is False:
                    continue
                rg.append(self.rl == i)
                rb.append(res)
                rv.append(f_and([self.rl == i, v]))
            if rb:
                og.append(self.pos == m)
                ob.append(s.choice(rg, rb))
                ov.append(f_and([self.pos == m, f_or(rv)]))
            for a in range(p.arity):
                i = p.arity - 1 - a
                inside = z3.And(u.ptr(m, i + 1) + 1 <= self.pos, self.pos <= u.ptr(m, i))
                rc, vc = self._red_child(m, i, p.groups[a])
                if rc is None:
                    continue
                assert hasattr(tp, "args")
                args = list(tp.args)  # type: ignore[attr-defined]
                args[a] = rc
                og.append(inside)
                ob.append(s.node(p.con, args, tp.bnames))  # type: ignore[attr-defined]
                ov.append(f_and([inside, vc]))
            if not ob:
                continue
            g = u.tag(m) == p.pid
            guards.append(g)
            branches.append(s.choice(og, ob))
            valids.append(f_and([g, f_or(ov)]))
        out = (s.choice(guards, branches) if branches else None, f_or(valids))
        self._red[key] = out
        return out

    def _red_child(self, m: int, i: int, group: tuple[int, ...]) -> tuple[Sym | None, object]:
        key = ("RC", m, i, group)
        got = self._red.get(key)
        if got is not None:
            return got
        u = self.universe
        guards, branches, valids = [], [], []
        for x in group:
            if i == 0:
                t, v = self._red_term(m - 1, x)
            else:
                pg, pb, pv = [], [], []
                for j in range(m - 1):
                    tj, vj = self._red_term(j, x)
                    if tj is None:
                        continue
                    g = u.ptr(m, i) == j
                    pg.append(g)
                    pb.append(tj)
                    pv.append(f_and([g, vj]))
                t = self.store.choice(pg, pb) if pb else None
                v = f_or(pv)
            if t is None:
                continue
            g = u.cstate(m, i) == x
            guards.append(g)
            branches.append(t)
            valids.append(f_and([g, v]))
        out = (self.store.choice(guards, branches) if branches else None, f_or(valids))
        self._red[key] = out
        return out

    # ------------------------------------------------------------ models

    def decode(self, model: z3.ModelRef, env: dict[str, Sym]) -> dict:
        """The concrete terms of a model: quantified metavariables, then the premise's N."""
        memo: dict = {}
        return {name: to_term(evaluate(sym, model, memo)) for name, sym in env.items()}
