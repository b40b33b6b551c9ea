"""Finding a well-founded order for a first-order rewriting system with Z3.

An *orientation problem* (:class:`Problem`) asks for an order on the terms of
a signature under which the pairs ``strict`` decrease, the pairs ``weak`` do
not increase, and the pairs ``some_strict`` do not increase and at least one
of them decreases.  With ``monotone`` the order must be a reduction order
(strictly monotone; every rule strict: a termination proof by itself); else a
reduction pair (weakly monotone; a component of the dependency graph).

The orders, each a quantifier-free query whose unknowns are the order's
parameters (Z3 finds them; the comparisons are unfolded in Python over the
problem's terms, so the solver sees no recursion):

- ``lpo``: the lexicographic path order (Kamin and Lévy 1980), precedence;
- ``rpo``: the recursive path order with status (Dershowitz, "Orderings for
  term-rewriting systems", TCS 1982; Kamin and Lévy 1980): per symbol a
  multiset status or a lexicographic one with an argument permutation;
- ``kbo``: the Knuth-Bendix order (Knuth and Bendix 1970): weights,
  a variable weight, precedence, and the admissibility conditions;
- ``poly1``, ``poly2``, ``poly2n2``: polynomial interpretations over the
  naturals (Lankford 1979), linear, then of degree at most 2, then of degree
  at most 2 over the naturals from 2 on (there ``x * y`` is strictly
  monotone); coefficients bounded (:data:`COEFF_BOUND`); a rule decreases
  when ``[l] - [r] - 1``, its variables shifted to the carrier's least
  element, has no negative coefficient (absolute positiveness, common
  practice);
- ``lpo-af`` (reduction pairs only): the lexicographic path order after an
  argument filtering (Arts and Giesl, TCS 2000).

Multiset and lexicographic comparisons use syntactic equality of terms (the
order so obtained is contained in the textbook one, so still well-founded).

Every witness is a plain JSON-able dict; ``calcscout.obligations.engines.termination`` checks
it again with its own implementation of each comparison before any verdict
uses it.
"""

from __future__ import annotations

import itertools
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import z3

from calcscout.rules.rewriting.firstorder import App, FTerm, Var

#: Largest coefficient of a polynomial interpretation (linear, quadratic).
COEFF_BOUND = {"poly1": 6, "poly2": 3}

DIRECT_METHODS = ("lpo", "rpo", "kbo", "poly1", "poly2")
#: Tried after dependency pairs: the costliest query.
LAST_METHODS = ("poly2n2",)
PAIR_METHODS = ("poly1", "lpo-af", "poly2")

Pair = tuple[FTerm, FTerm]


@dataclass
class Problem:
    signature: dict[str, int]
    strict: list[Pair] = field(default_factory=list)
    weak: list[Pair] = field(default_factory=list)
    some_strict: list[Pair] = field(default_factory=list)
    monotone: bool = True


@dataclass
class Found:
    status: str  # 'sat' (witness found), 'unsat' (no such order), 'unknown'
    witness: dict[str, Any] | None = None
    reason: str | None = None  # the solver's reason for unknown
    seconds: float = 0.0


# ---------------------------------------------------------------- formula helpers


def _or(ctx, items) -> Any:
    out = []
    for x in items:
        if x is True:
            return True
        if x is False:
            continue
        out.append(x)
    if not out:
        return False
    return out[0] if len(out) == 1 else z3.Or(out)


def _and(ctx, items) -> Any:
    out = []
    for x in items:
        if x is False:
            return False
        if x is True:
            continue
        out.append(x)
    if not out:
        return True
    return out[0] if len(out) == 1 else z3.And(out)


def _b(ctx, x) -> z3.BoolRef:
    return z3.BoolVal(x, ctx) if isinstance(x, bool) else x


def _val(model, x) -> int:
    return model.eval(x, model_completion=True).as_long()


def _bool(model, x) -> bool:
    if isinstance(x, bool):
        return x
    return z3.is_true(model.eval(x, model_completion=True))


class _Encoding:
    """One method's unknowns for one problem: ``gt(s, t)`` and ``ge(s, t)``
    as formulas, side constraints, and the decoding of a model."""

    def __init__(self, ctx: z3.Context, problem: Problem, tag: str):
        self.ctx = ctx
        self.p = problem
        self.tag = tag
        self.side: list = []

    def var(self, kind: str, *parts) -> str:
        return "_".join([self.tag, kind, *(str(x) for x in parts)])

    def gt(self, s: FTerm, t: FTerm):
        raise NotImplementedError

    def ge(self, s: FTerm, t: FTerm):
        if s == t:
            return True
        return self.gt(s, t)

    def decode(self, model) -> dict[str, Any]:
        raise NotImplementedError

    def formula(self) -> tuple[z3.BoolRef, list]:
        """The whole constraint, and per ``some_strict`` pair its strictness literal."""
        c = self.ctx
        parts = list(self.side)
        parts += [_b(c, self.gt(s, t)) for s, t in self.p.strict]
        parts += [_b(c, self.ge(s, t)) for s, t in self.p.weak]
        marks = []
        for s, t in self.p.some_strict:
            parts.append(_b(c, self.ge(s, t)))
            marks.append(_b(c, self.gt(s, t)))
        if self.p.some_strict:
            parts.append(_b(c, _or(c, marks)))
        return _b(c, _and(c, parts)), marks


def _precedence(enc: _Encoding) -> dict[str, z3.ArithRef]:
    return {f: z3.Int(enc.var("prec", _safe(f)), enc.ctx) for f in sorted(enc.p.signature)}


def _ranks(model, prec: dict[str, Any]) -> dict[str, int]:
    """The model's precedence extended to a total one (ties broken by name): every
    order used here only gains comparisons when its precedence grows, so the extension
    orients whatever the model's precedence does; it reads as one chain."""
    order = sorted(prec, key=lambda f: (_val(model, prec[f]), f))
    return {f: i for i, f in enumerate(order)}


def _safe(f: str) -> str:
    return f.replace("#", "T") if f.endswith("#") else f.replace("#", "N")


# ---------------------------------------------------------------- path orders


class _PathOrder(_Encoding):
    """``lpo`` (lexicographic status, arguments left to right) or ``rpo``
    (per-symbol multiset or lexicographic status with a permutation)."""

    def __init__(self, ctx, problem, tag, with_status: bool):
        super().__init__(ctx, problem, tag)
        self.with_status = with_status
        self.prec = _precedence(self)
        self.memo: dict[tuple, Any] = {}
        self.lex: dict[str, Any] = {}
        self.pos: dict[str, list] = {}
        if with_status:
            for f, n in sorted(problem.signature.items()):
                if n >= 2:
                    self.lex[f] = z3.Bool(self.var("lex", _safe(f)), ctx)
                    ps = [z3.Int(self.var("pos", _safe(f), i), ctx) for i in range(n)]
                    self.pos[f] = ps
                    self.side += [z3.And(0 <= q, q < n) for q in ps] + [z3.Distinct(ps)]

    def gt(self, s, t):
        if isinstance(s, Var) or s == t:
            return False
        key = (s, t)
        if key in self.memo:
            return self.memo[key]
        c = self.ctx
        parts = []
        for si in s.args:
            if si == t:
                self.memo[key] = True
                return True
            parts.append(self.gt(si, t))
        if isinstance(t, App):
            below = [self.gt(s, tj) for tj in t.args]
            if t.fn != s.fn:
                parts.append(_and(c, [self.prec[s.fn] > self.prec[t.fn], *below]))
            elif not self.with_status or s.fn not in self.lex:
                parts.append(_and(c, [self._lex_plain(s, t), *below]))
            else:
                lex = _and(c, [self._lex_perm(s, t), *below])
                mul = self._mul(s, t)
                parts.append(_or(c, [_and(c, [self.lex[s.fn], lex]),
                                     _and(c, [z3.Not(self.lex[s.fn]), mul])]))
        out = _or(c, parts)
        self.memo[key] = out
        return out

    def _lex_plain(self, s: App, t: App):
        for a, b in zip(s.args, t.args, strict=True):
            if a != b:
                return self.gt(a, b)
        return False

    def _lex_perm(self, s: App, t: App):
        c = self.ctx
        pos = self.pos[s.fn]
        diff = [i for i, (a, b) in enumerate(zip(s.args, t.args, strict=True)) if a != b]
        return _or(c, [_and(c, [self.gt(s.args[i], t.args[i]),
                                *[z3.Not(pos[j] < pos[i]) for j in diff if j != i]])
                       for i in diff])

    def _mul(self, s: App, t: App):
        c = self.ctx
        left, right = Counter(s.args), Counter(t.args)
        xs = list((left - right).elements())
        ys = list((right - left).elements())
        if not xs:
            return False
        return _and(c, [_or(c, [self.gt(x, y) for x in xs]) for y in ys])

    def decode(self, model) -> dict[str, Any]:
        w: dict[str, Any] = {"precedence": _ranks(model, self.prec)}
        if self.with_status:
            status: dict[str, Any] = {}
            for f in self.lex:
                if _bool(model, self.lex[f]):
                    order = sorted(range(len(self.pos[f])), key=lambda i: _val(model, self.pos[f][i]))
                    status[f] = [i + 1 for i in order]
                else:
                    status[f] = "mul"
            w["status"] = status
        return w


# ---------------------------------------------------------------- Knuth-Bendix


class _KBO(_Encoding):
    def __init__(self, ctx, problem, tag):
        super().__init__(ctx, problem, tag)
        self.prec = _precedence(self)
        sig = problem.signature
        self.w = {f: z3.Int(self.var("w", _safe(f)), ctx) for f in sorted(sig)}
        self.w0 = z3.Int(self.var("w0"), ctx)
        self.side.append(self.w0 >= 1)
        for f, n in sorted(sig.items()):
            self.side.append(self.w[f] >= 0)
            if n == 0:
                self.side.append(self.w[f] >= self.w0)
            if n == 1:  # admissibility: a unary symbol of weight 0 is above all others
                others = [self.prec[f] > self.prec[g] for g in sig if g != f]
                if others:
                    self.side.append(z3.Implies(self.w[f] == 0, z3.And(others)))
        self.memo: dict[tuple, Any] = {}
        self.weights: dict[FTerm, Any] = {}

    def weight(self, t: FTerm):
        got = self.weights.get(t)
        if got is None:
            if isinstance(t, Var):
                got = self.w0
            else:
                got = z3.Sum([self.w[t.fn], *[self.weight(a) for a in t.args]]) if t.args \
                    else self.w[t.fn]
            self.weights[t] = got
        return got

    def gt(self, s, t):
        if isinstance(s, Var) or s == t:
            return False
        key = (s, t)
        if key in self.memo:
            return self.memo[key]
        c = self.ctx
        vs, vt = Counter(_vars(s)), Counter(_vars(t))
        if any(vs[x] < k for x, k in vt.items()):
            self.memo[key] = False
            return False
        ws, wt = self.weight(s), self.weight(t)
        if isinstance(t, Var):
            tie = _unary_chain(s, t)
        elif s.fn != t.fn:
            tie = self.prec[s.fn] > self.prec[t.fn]
        else:
            tie = False
            for a, b in zip(s.args, t.args, strict=True):
                if a != b:
                    tie = self.gt(a, b)
                    break
        out = _or(c, [ws > wt, _and(c, [ws == wt, tie])])
        self.memo[key] = out
        return out

    def decode(self, model) -> dict[str, Any]:
        return {"weights": {f: _val(model, v) for f, v in self.w.items()},
                "variable_weight": _val(model, self.w0),
                "precedence": _ranks(model, self.prec)}


def _vars(t: FTerm) -> list[str]:
    if isinstance(t, Var):
        return [t.name]
    return [v for a in t.args for v in _vars(a)]


def _unary_chain(s: FTerm, x: Var) -> bool:
    """``s`` is ``f(f(...f(x)))`` for one unary symbol ``f``, at least once."""
    if not isinstance(s, App) or len(s.args) != 1:
        return False
    f = s.fn
    t: FTerm = s
    while isinstance(t, App):
        if t.fn != f or len(t.args) != 1:
            return False
        t = t.args[0]
    return t == x


# ---------------------------------------------------------------- polynomials


Monomial = tuple[tuple[str, int], ...]  # sorted (variable, exponent) pairs


def _pmul(a: dict, b: dict) -> dict:
    out: dict = {}
    for ma, ca in a.items():
        for mb, cb in b.items():
            e = Counter(dict(ma))
            e.update(dict(mb))
            m = tuple(sorted(e.items()))
            prod = _times(ca, cb)
            if isinstance(prod, int) and prod == 0:
                continue
            out[m] = prod if m not in out else out[m] + prod
    return out


def _times(x, y):
    if isinstance(x, int) and isinstance(y, int):
        return x * y
    if isinstance(x, int):
        return 0 if x == 0 else (y if x == 1 else x * y)
    if isinstance(y, int):
        return 0 if y == 0 else (x if y == 1 else x * y)
    return x * y


def template_monomials(arity: int, degree: int) -> list[tuple[int, ...]]:
    """Exponent vectors of total degree at most ``degree`` over ``arity`` arguments."""
    out = [e for e in itertools.product(range(degree + 1), repeat=arity) if sum(e) <= degree]
    return sorted(out, key=lambda e: (sum(e), [-x for x in e]))


class _Poly(_Encoding):
    def __init__(self, ctx, problem, tag, degree: int, least: int = 0):
        super().__init__(ctx, problem, tag)
        self.degree = degree
        self.least = least
        bound = COEFF_BOUND["poly1" if degree == 1 else "poly2"]
        self.coef: dict[str, dict[tuple[int, ...], Any]] = {}
        for f, n in sorted(problem.signature.items()):
            cs = {}
            for e in template_monomials(n, degree):
                v = z3.Int(self.var("c", _safe(f), *e), ctx)
                self.side += [v >= 0, v <= bound]
                cs[e] = v
            self.coef[f] = cs
            if problem.monotone:  # strictly monotone in every argument
                for i in range(n):
                    self.side.append(z3.Or([v >= 1 for e, v in cs.items() if _strict_in(e, i, least)]))
            # the carrier {least, least + 1, ...} is closed under [f]
            if least:
                self.side.append(z3.Sum([v * least ** sum(e) for e, v in cs.items()]) >= least)
        self.polys: dict[FTerm, dict] = {}
        self.memo: dict[tuple, Any] = {}

    def poly(self, t: FTerm) -> dict:
        got = self.polys.get(t)
        if got is not None:
            return got
        if isinstance(t, Var):  # x = y + least, y a natural
            got = {((t.name, 1),): 1}
            if self.least:
                got[()] = self.least
        else:
            args = [self.poly(a) for a in t.args]
            got = {}
            for e, cvar in self.coef[t.fn].items():
                term: dict = {(): cvar}
                for a, k in zip(args, e, strict=True):
                    for _ in range(k):
                        term = _pmul(term, a)
                for m, cm in term.items():
                    got[m] = cm if m not in got else got[m] + cm
        self.polys[t] = got
        return got

    def _compare(self, s, t, strict: bool):
        c = self.ctx
        ps, pt = self.poly(s), self.poly(t)
        parts = []
        for m in set(ps) | set(pt):
            a, b = ps.get(m, 0), pt.get(m, 0)
            if m == () and strict:
                parts.append(_ge(a, _plus1(b)))
            else:
                parts.append(_ge(a, b))
        if strict and () not in ps and () not in pt:
            return False
        return _and(c, parts)

    def gt(self, s, t):
        key = (s, t, True)
        if key not in self.memo:
            self.memo[key] = self._compare(s, t, True)
        return self.memo[key]

    def ge(self, s, t):
        key = (s, t, False)
        if key not in self.memo:
            self.memo[key] = self._compare(s, t, False)
        return self.memo[key]

    def decode(self, model) -> dict[str, Any]:
        interp = {}
        for f, cs in self.coef.items():
            interp[f] = [[_val(model, v), list(e)] for e, v in cs.items() if _val(model, v)]
        return {"degree": self.degree, "least": self.least, "interpretation": interp}


def _strict_in(e: tuple[int, ...], i: int, least: int) -> bool:
    """A monomial with a positive coefficient makes the polynomial strictly increase in
    argument ``i``: it is ``x_i`` itself, or (over a carrier that excludes 0) any
    monomial that mentions ``x_i``."""
    if least == 0:
        return e[i] == 1 and sum(e) == 1
    return e[i] >= 1


def _plus1(b):
    return b + 1


def _ge(a, b):
    if isinstance(a, int) and isinstance(b, int):
        return a >= b
    if isinstance(b, int) and b == 0:
        return True  # every coefficient is a natural number
    return a >= b


# ---------------------------------------------------------------- filtered LPO


class _FilteredLPO(_Encoding):
    """The lexicographic path order on argument-filtered terms: symbol ``f``
    either collapses to one argument or keeps a subset of its arguments."""

    def __init__(self, ctx, problem, tag):
        super().__init__(ctx, problem, tag)
        self.prec = _precedence(self)
        self.keep: dict[str, list] = {}
        self.coll: dict[str, Any] = {}
        for f, n in sorted(problem.signature.items()):
            if n == 0:
                continue
            ks = [z3.Bool(self.var("keep", _safe(f), i), ctx) for i in range(n)]
            cl = z3.Bool(self.var("collapse", _safe(f)), ctx)
            self.keep[f], self.coll[f] = ks, cl
            # collapsing keeps exactly one argument (plain clauses: they export as SMT-LIB)
            one = [z3.Or(ks)] + [z3.Not(z3.And(a, b)) for a, b in itertools.combinations(ks, 2)]
            self.side.append(z3.Implies(cl, z3.And(one)))
        self.memo: dict[tuple, Any] = {}

    def _collapsed(self, f: str):
        return self.coll.get(f, False)

    def _if(self, cond, a, b):
        c = self.ctx
        if cond is False:
            return b
        if cond is True:
            return a
        if a is b or (isinstance(a, bool) and isinstance(b, bool) and a == b):
            return a
        return z3.If(cond, _b(c, a), _b(c, b))

    def eq(self, s, t):
        if s == t:
            return True
        key = ("eq", s, t)
        if key in self.memo:
            return self.memo[key]
        c = self.ctx
        if isinstance(s, Var) and isinstance(t, Var):
            out: Any = False
        elif isinstance(s, Var):
            out = self._if(self._collapsed(t.fn), self._through(t, lambda tj: self.eq(s, tj)),
                           False)
        else:
            if isinstance(t, Var):
                rest: Any = False
            else:
                same = False
                if s.fn == t.fn:
                    ks = self.keep.get(s.fn, [])
                    same = _and(c, [z3.Implies(k, _b(c, self.eq(a, b)))
                                    for k, a, b in zip(ks, s.args, t.args, strict=True)])
                rest = self._if(self._collapsed(t.fn),
                                self._through(t, lambda tj: self.eq(s, tj)), same)
            out = self._if(self._collapsed(s.fn), self._through(s, lambda si: self.eq(si, t)),
                           rest)
        self.memo[key] = out
        return out

    def _through(self, s: App, f: Callable):
        """What ``f`` says of the argument ``s`` collapses to."""
        c = self.ctx
        if s.fn not in self.keep:
            return False
        return _or(c, [_and(c, [k, f(a)]) for k, a in zip(self.keep[s.fn], s.args, strict=True)])

    def ge(self, s, t):
        return _or(self.ctx, [self.eq(s, t), self.gt(s, t)])

    def gt(self, s, t):
        if isinstance(s, Var) or s == t:
            return False
        key = ("gt", s, t)
        if key in self.memo:
            return self.memo[key]
        c = self.ctx
        ks = self.keep.get(s.fn, [])
        down = _or(c, [_and(c, [k, self.ge(a, t)]) for k, a in zip(ks, s.args, strict=True)])
        if isinstance(t, Var):
            plain: Any = down
        else:
            kt = self.keep.get(t.fn, [])
            below = [z3.Implies(k, _b(c, self.gt(s, b))) for k, b in zip(kt, t.args, strict=True)]
            if s.fn != t.fn:
                head = _and(c, [self.prec[s.fn] > self.prec[t.fn], *below])
            else:
                lex = []
                for i, (a, b) in enumerate(zip(s.args, t.args, strict=True)):
                    if a == b:
                        continue
                    before = [z3.Implies(ks[j], _b(c, self.eq(s.args[j], t.args[j])))
                              for j in range(i) if s.args[j] != t.args[j]]
                    lex.append(_and(c, [ks[i], self.gt(a, b), *before]))
                head = _and(c, [_or(c, lex), *below])
            nonc = _or(c, [down, head])
            plain = self._if(self._collapsed(t.fn), self._through(t, lambda tj: self.gt(s, tj)),
                             nonc)
        out = self._if(self._collapsed(s.fn), self._through(s, lambda si: self.gt(si, t)), plain)
        self.memo[key] = out
        return out

    def decode(self, model) -> dict[str, Any]:
        filt: dict[str, Any] = {}
        for f, ks in self.keep.items():
            kept = [i + 1 for i, k in enumerate(ks) if _bool(model, k)]
            filt[f] = kept[0] if _bool(model, self.coll[f]) else kept
        return {"filter": filt, "precedence": _ranks(model, self.prec)}


# ---------------------------------------------------------------- driving the solver


def _encoding(ctx, problem: Problem, method: str, tag: str) -> _Encoding:
    if method == "lpo":
        return _PathOrder(ctx, problem, tag, with_status=False)
    if method == "rpo":
        return _PathOrder(ctx, problem, tag, with_status=True)
    if method == "kbo":
        if not problem.monotone:
            raise ValueError("kbo is taken as a reduction order only")
        return _KBO(ctx, problem, tag)
    if method == "poly1":
        return _Poly(ctx, problem, tag, 1)
    if method == "poly2":
        return _Poly(ctx, problem, tag, 2)
    if method == "poly2n2":
        return _Poly(ctx, problem, tag, 2, least=2)
    if method == "lpo-af":
        if problem.monotone:
            raise ValueError("lpo-af is a reduction pair, not a reduction order")
        return _FilteredLPO(ctx, problem, tag)
    raise ValueError(f"unknown order {method}")


def find(problem: Problem, method: str, timeout: float | None = None) -> Found:
    """Ask Z3 for an order of kind ``method`` solving ``problem``."""
    start = time.perf_counter()
    ctx = z3.Context()
    enc = _encoding(ctx, problem, method, method.replace("-", ""))
    phi, marks = enc.formula()
    solver = z3.Solver(ctx=ctx)
    if timeout is not None:
        solver.set(timeout=max(1, int(timeout * 1000)))
    solver.add(phi)
    r = solver.check()
    secs = time.perf_counter() - start
    if r == z3.sat:
        m = solver.model()
        w = {"method": method, **enc.decode(m)}
        if problem.some_strict:
            w["strict"] = [i for i, x in enumerate(marks) if _bool(m, x)]
        return Found("sat", w, seconds=secs)
    if r == z3.unsat:
        return Found("unsat", seconds=secs)
    return Found("unknown", reason=solver.reason_unknown(), seconds=secs)


def smt2(problems: list[tuple[str, list[tuple[str, Problem]]]], header: str) -> str:
    """One SMT-LIB 2.6 script: for each alternative ``(label, [(method, problem), ...])`` a
    Boolean ``use_LABEL`` that implies every listed problem solved by its method; the script
    asserts that some alternative holds, so ``sat`` means an order exists."""
    ctx = z3.Context()
    solver = z3.Solver(ctx=ctx)
    uses = []
    for i, (label, parts) in enumerate(problems):
        use = z3.Bool(f"use_{label}", ctx)
        uses.append(use)
        conj = []
        for j, (method, problem) in enumerate(parts):
            tag = f"a{i}p{j}{method.replace('-', '')}"
            phi, _ = _encoding(ctx, problem, method, tag).formula()
            conj.append(phi)
        solver.add(z3.Implies(use, z3.And(conj) if conj else z3.BoolVal(True, ctx)))
    solver.add(z3.Or(uses) if uses else z3.BoolVal(False, ctx))
    body = solver.to_smt2().rstrip()
    if body.endswith("(check-sat)"):
        body = body[: -len("(check-sat)")].rstrip()
    return (header + "(set-option :produce-models true)\n(set-logic QF_NIA)\n" + body
            + "\n(check-sat)\n(get-model)\n")
