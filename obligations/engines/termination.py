"""Termination proved, not only searched: orders found by Z3, checked here again.

For a rule set whose right-hand sides use no substitution, the first-order
view (:mod:`calcscout.rules.rewriting.firstorder`: binders dropped, every name one constant,
metavariables as variables, conditions and ``reduce in E`` ignored — each
only removes steps) is proved terminating by the first of, cheapest first:

1. the lexicographic path order (Kamin and Lévy 1980) and the recursive path
   order with status (Dershowitz, "Orderings for term-rewriting systems",
   TCS 1982), the precedence and the status found by Z3;
2. the Knuth-Bendix order (Knuth and Bendix, "Simple word problems in
   universal algebras", 1970), weights and precedence found by Z3;
3. polynomial interpretations over the naturals (Lankford 1979), linear,
   then of degree 2;
4. dependency pairs (Arts and Giesl, "Termination of term rewriting using
   dependency pairs", TCS 2000) with the estimated dependency graph, each of
   its strongly connected components closed by a reduction pair (weakly
   monotone polynomial interpretations, or the lexicographic path order after
   an argument filtering) that orients every rule weakly and the component's
   pairs weakly, at least one strictly; the strictly decreasing pairs are
   removed and what is left of the component is decomposed again (the
   recursive use of the graph: Hirokawa and Middeldorp, "Automating the
   dependency pair method", Inf. Comput. 2005, recalled from memory).

The solver only *proposes* an order.  Every witness is checked here with a
separate implementation of its comparison in plain Python (no solver) — every
rule (and dependency pair) oriented, the admissibility and monotonicity side
conditions — before a verdict uses it; a witness that fails the check is an
internal error, never a verdict.

Not claimed: rules with a substitution on the right (β and friends) and
rules with a context ``E[P]`` on the left; those keep the bounded verdict.
"""

from __future__ import annotations

import os
import re
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

import networkx as nx

from calcscout.obligations.verdict import HOLDS, REFUTED, Verdict
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Calculus
from calcscout.rules.rewriting.firstorder import NAME, App, FSystem, FTerm, Var, subterms, symbols, view


class WitnessRejected(Exception):
    """The solver's witness failed the independent re-check: a bug in calcscout, reported
    as an internal error (exit 70), never as a verdict."""


#: Seconds per solver query when the command line gives no --timeout.
DEFAULT_QUERY_TIMEOUT = 3.0

METHOD_TEXT = {
    "lpo": "the lexicographic path order (Kamin and Lévy 1980)",
    "rpo": "the recursive path order with status (Dershowitz, TCS 1982)",
    "kbo": "the Knuth-Bendix order (Knuth and Bendix 1970)",
    "poly1": "a linear polynomial interpretation over the naturals (Lankford 1979)",
    "poly2": "a polynomial interpretation of degree 2 over the naturals (Lankford 1979)",
    "poly2n2": "a polynomial interpretation of degree 2 over the naturals from 2 on "
               "(Lankford 1979)",
    "lpo-af": "the lexicographic path order after an argument filtering (Arts and Giesl 2000)",
    "dp": "dependency pairs with the estimated dependency graph (Arts and Giesl, TCS 2000)",
    "none": "no rules",
}


@dataclass
class Proof:
    """The outcome of a proof attempt: ``witness`` is set when it succeeded."""

    witness: dict[str, Any] | None = None
    reason: str = ""  # the proof in one line, or why there is none
    claimed: bool = True  # False: the rules are outside what is claimed
    notes: list[str] = field(default_factory=list)
    seconds: dict[str, float] = field(default_factory=dict)  # per method tried

    @property
    def proved(self) -> bool:
        return self.witness is not None


# ---------------------------------------------------------------- the search


def prove(calc: Calculus, group: str | None = None, timeout: float | None = None,
          methods: tuple[str, ...] | None = None) -> Proof:
    """Try to prove ``calc`` (its ``group``) terminating for all terms.

    ``methods`` limits the methods tried (``lpo``, ``rpo``, ``kbo``, ``poly1``,
    ``poly2``, ``dp``), for benchmarks and tests.
    """
    from calcscout.encoders.orders import DIRECT_METHODS, LAST_METHODS, Problem, find

    system, why = view(calc, group)
    if system is None:
        return Proof(reason=f"termination proof not claimed: {why}", claimed=False)
    per_query = DEFAULT_QUERY_TIMEOUT if timeout is None else timeout
    proof = Proof()
    if not system.rules:
        proof.witness = _with_rules({"method": "none"}, system)
        proof.reason = "no rules: every term is a normal form"
        return proof
    strict = [(r.lhs, r.rhs) for r in system.rules]

    def accept(w: dict) -> Proof:
        w = _with_rules(w, system)
        _must_check(system, w)
        proof.witness = w
        proof.reason = describe(w, system)
        return proof

    def orders(names: tuple[str, ...]) -> Proof | None:
        for method in names:
            if methods is not None and method not in methods:
                continue
            found = find(Problem(system.signature, strict=strict), method, per_query)
            proof.seconds[method] = found.seconds
            if found.status == "unknown":
                proof.notes.append(f"termination proof: the solver gave up on {method} "
                                   f"({found.reason})")
            if found.witness is not None:
                return accept(found.witness)
        return None

    done = orders(DIRECT_METHODS)
    if done is not None:
        return done
    if methods is None or "dp" in methods:
        start = time.perf_counter()
        w = _dependency_pairs(system, per_query, proof.notes)
        proof.seconds["dp"] = time.perf_counter() - start
        if w is not None:
            return accept(w)
    done = orders(LAST_METHODS)
    if done is not None:
        return done
    tried = [m for m in (*DIRECT_METHODS, "dp", *LAST_METHODS) if methods is None or m in methods]
    proof.reason = f"no termination proof found ({', '.join(tried)})"
    return proof


def _with_rules(w: dict[str, Any], system: FSystem) -> dict[str, Any]:
    return {**w, "rules": {r.name: str(r) for r in system.rules},
            "view": f"first-order: binders dropped, every name is the constant {NAME}"}


def _must_check(system: FSystem, w: dict[str, Any]) -> None:
    problem = check(system, w)
    if problem is not None:
        raise WitnessRejected(f"the solver's termination witness ({w['method']}) does not "
                            f"re-check: {problem}")


# ---------------------------------------------------------------- dependency pairs


def tuple_symbol(f: str) -> str:
    return f + "#"


def defined_symbols(system: FSystem) -> set[str]:
    return {r.lhs.fn for r in system.rules if isinstance(r.lhs, App)}


def dependency_pairs(system: FSystem) -> list[tuple[FTerm, FTerm, str]]:
    """``(l#, u#, rule)`` for every rule ``l -> r`` and subterm ``u`` of ``r`` whose root is
    defined (Arts and Giesl 2000, Def. 3.1), each distinct pair once."""
    d = defined_symbols(system)
    out: list[tuple[FTerm, FTerm, str]] = []
    seen = set()
    for r in system.rules:
        assert isinstance(r.lhs, App)
        for u in subterms(r.rhs):
            if isinstance(u, App) and u.fn in d:
                p = (_mark(r.lhs), _mark(u))
                if p not in seen:
                    seen.add(p)
                    out.append((*p, r.name))
    return out


def _mark(t: App) -> App:
    return App(tuple_symbol(t.fn), t.args)


def _rename(t: FTerm, suffix: str) -> FTerm:
    if isinstance(t, Var):
        return Var(t.name + suffix)
    return App(t.fn, tuple(_rename(a, suffix) for a in t.args))


def unifiable(s: FTerm, t: FTerm) -> bool:
    """Syntactic unification with the occurs check (first-order terms)."""
    subst: dict[str, FTerm] = {}

    def walk(x: FTerm) -> FTerm:
        while isinstance(x, Var) and x.name in subst:
            x = subst[x.name]
        return x

    def occurs(v: str, x: FTerm) -> bool:
        x = walk(x)
        if isinstance(x, Var):
            return x.name == v
        return any(occurs(v, a) for a in x.args)

    stack = [(s, t)]
    while stack:
        a, b = stack.pop()
        a, b = walk(a), walk(b)
        if a == b:
            continue
        if isinstance(a, Var):
            if occurs(a.name, b):
                return False
            subst[a.name] = b
        elif isinstance(b, Var):
            if occurs(b.name, a):
                return False
            subst[b.name] = a
        elif a.fn != b.fn or len(a.args) != len(b.args):
            return False
        else:
            stack.extend(zip(a.args, b.args, strict=True))
    return True


class _Fresh:
    def __init__(self, prefix: str):
        self.prefix = prefix
        self.n = 0

    def __call__(self) -> Var:
        self.n += 1
        return Var(f"{self.prefix}{self.n}")


def ren_cap(t: App, defined: set[str], fresh: _Fresh) -> App:
    """REN(CAP(t)) below the root: every defined-rooted subterm and every variable occurrence
    becomes a fresh variable (Arts and Giesl 2000, Def. 3.4)."""

    def go(x: FTerm) -> FTerm:
        if isinstance(x, Var) or x.fn in defined:
            return fresh()
        return App(x.fn, tuple(go(a) for a in x.args))

    return App(t.fn, tuple(go(a) for a in t.args))


def ren_cap_inverse(u: App, system: FSystem, fresh: _Fresh) -> App:
    """REN(CAP⁻¹(u)) below the root: what a term must look like to have been reached by
    rewriting — every subterm whose root is the root of a right-hand side, and every
    variable, becomes a fresh variable; with a collapsing rule every argument does
    (Middeldorp, "Approximating dependency graphs using tree automata techniques",
    IJCAR 2001; recalled from memory)."""
    roots = {r.rhs.fn for r in system.rules if isinstance(r.rhs, App)}
    collapsing = any(isinstance(r.rhs, Var) for r in system.rules)

    def go(x: FTerm) -> FTerm:
        if collapsing or isinstance(x, Var) or x.fn in roots:
            return fresh()
        return App(x.fn, tuple(go(a) for a in x.args))

    return App(u.fn, tuple(go(a) for a in u.args))


def dependency_graph(system: FSystem, pairs: list[tuple[FTerm, FTerm, str]]) -> nx.DiGraph:
    """The estimated dependency graph: an edge ``i -> j`` unless pair ``i``'s right side
    can be told apart from pair ``j``'s left side — ``REN(CAP(t_i))`` does not unify with
    ``s_j``, or ``t_i`` does not unify with ``REN(CAP⁻¹(s_j))`` (variables renamed apart)."""
    d = defined_symbols(system)
    g = nx.DiGraph()
    g.add_nodes_from(range(len(pairs)))
    for i, (_, t, _) in enumerate(pairs):
        ti = _rename(t, "'i")
        for j, (s, _, _) in enumerate(pairs):
            sj = _rename(s, "'j")
            assert isinstance(ti, App) and isinstance(sj, App)
            if not unifiable(ren_cap(ti, d, _Fresh("'c")), sj):
                continue
            if not unifiable(ti, ren_cap_inverse(sj, system, _Fresh("'d"))):
                continue
            g.add_edge(i, j)
    return g


def _cyclic_components(g: nx.DiGraph, nodes) -> list[list[int]]:
    sub = g.subgraph(nodes)
    out = []
    for comp in nx.strongly_connected_components(sub):
        c = sorted(comp)
        if len(c) > 1 or sub.has_edge(c[0], c[0]):
            out.append(c)
    return sorted(out)


def _pair_signature(system: FSystem) -> dict[str, int]:
    sig = dict(system.signature)
    for f in defined_symbols(system):
        sig[tuple_symbol(f)] = system.signature.get(f, 0)
    return sig


def _dependency_pairs(system: FSystem, timeout: float, notes: list[str]) -> dict | None:
    from calcscout.encoders.orders import PAIR_METHODS, Problem, find

    pairs = dependency_pairs(system)
    g = dependency_graph(system, pairs)
    sig = _pair_signature(system)
    rules = [(r.lhs, r.rhs) for r in system.rules]
    components: list[dict[str, Any]] = []
    todo = _cyclic_components(g, g.nodes)
    while todo:
        comp = todo.pop(0)
        for method in PAIR_METHODS:
            problem = Problem(sig, weak=rules, some_strict=[pairs[i][:2] for i in comp],
                              monotone=False)
            found = find(problem, method, timeout)
            if found.status == "unknown":
                notes.append(f"termination proof: the solver gave up on {method} for the "
                             f"dependency pairs {comp} ({found.reason})")
            if found.witness is not None:
                w = dict(found.witness)
                strict = [comp[i] for i in w.pop("strict")]
                components.append({"pairs": comp, "strict": strict, "order": w})
                todo.extend(_cyclic_components(g, [i for i in comp if i not in strict]))
                break
        else:
            return None
    return {"method": "dp",
            "pairs": [f"{s} -> {t}" for s, t, _ in pairs],
            "graph": sorted([list(e) for e in g.edges]),
            "components": components}


# ---------------------------------------------------------------- the independent check


def check(system: FSystem, w: dict[str, Any]) -> str | None:
    """None when the witness ``w`` proves ``system`` terminating, else what fails.

    Each comparison is implemented here again, without the solver."""
    method = w.get("method")
    rules = [(r.lhs, r.rhs, r.name) for r in system.rules]
    if method == "none":
        return None if not rules else "rules left with no order"
    if method == "dp":
        return _check_dp(system, w)
    gt, _, side = _comparison(system.signature, w, monotone=True)
    if side is not None:
        return side
    for lhs, rhs, name in rules:
        if not gt(lhs, rhs):
            return f"rule {name}: {lhs} > {rhs} does not hold"
    return None


def _comparison(sig: dict[str, int], w: dict[str, Any], monotone: bool
                ) -> tuple[Callable, Callable, str | None]:
    """``(gt, ge, problem)``: the order the witness describes, and a broken side condition."""
    m = w.get("method")
    if m in ("lpo", "rpo"):
        gt = _path_order(w["precedence"], w.get("status", {}))
        return gt, lambda s, t: s == t or gt(s, t), None
    if m == "kbo":
        gt = _kbo(sig, w)
        return gt, lambda s, t: s == t or gt(s, t), _kbo_admissible(sig, w)
    if m in ("poly1", "poly2", "poly2n2"):
        interp, least = w["interpretation"], w.get("least", 0)
        problem = _poly_side(sig, interp, monotone, least)
        return (lambda s, t: _poly_cmp(interp, least, s, t, True),
                lambda s, t: _poly_cmp(interp, least, s, t, False), problem)
    if m == "lpo-af":
        if monotone:
            return (lambda s, t: False), (lambda s, t: False), "an argument filtering is no " \
                "reduction order"
        filt = w["filter"]
        plain = _path_order(w["precedence"], {})

        def gt(s, t):
            return plain(_filter(filt, s), _filter(filt, t))

        def ge(s, t):
            a, b = _filter(filt, s), _filter(filt, t)
            return a == b or plain(a, b)

        return gt, ge, None
    return (lambda s, t: False), (lambda s, t: False), f"unknown method {m}"


def _prec_gt(prec: dict[str, int], f: str, g: str) -> bool:
    return f in prec and g in prec and prec[f] > prec[g]


def _path_order(prec: dict[str, int], status: dict[str, Any]) -> Callable[[FTerm, FTerm], bool]:
    """Dershowitz's recursive path order with status, syntactic equality; a symbol without
    status is compared lexicographically left to right (so no status at all is the LPO)."""

    @cache
    def gt(s: FTerm, t: FTerm) -> bool:
        if isinstance(s, Var) or s == t:
            return False
        if any(a == t or gt(a, t) for a in s.args):
            return True
        if isinstance(t, Var):
            return False
        if s.fn != t.fn:
            return _prec_gt(prec, s.fn, t.fn) and all(gt(s, b) for b in t.args)
        st = status.get(s.fn)
        if st == "mul":
            left, right = Counter(s.args), Counter(t.args)
            xs, ys = left - right, right - left
            return bool(xs) and all(any(gt(x, y) for x in xs) for y in ys)
        order = list(range(len(s.args))) if st is None else [i - 1 for i in st]
        if sorted(order) != list(range(len(s.args))):
            return False
        for i in order:
            if s.args[i] != t.args[i]:
                return gt(s.args[i], t.args[i]) and all(gt(s, b) for b in t.args)
        return False

    return gt


def _var_count(t: FTerm) -> Counter:
    if isinstance(t, Var):
        return Counter([t.name])
    out: Counter = Counter()
    for a in t.args:
        out.update(_var_count(a))
    return out


def _kbo_admissible(sig: dict[str, int], w: dict[str, Any]) -> str | None:
    ws, w0, prec = w["weights"], w["variable_weight"], w["precedence"]
    if w0 < 1:
        return "variable weight below 1"
    for f, n in sig.items():
        wf = ws.get(f)
        if wf is None or wf < 0:
            return f"symbol {f} has no weight"
        if n == 0 and wf < w0:
            return f"constant {f} weighs less than a variable"
        if n == 1 and wf == 0 and not all(_prec_gt(prec, f, g) for g in sig if g != f):
            return f"unary symbol {f} of weight 0 is not above every other symbol"
    return None


def _kbo(sig: dict[str, int], w: dict[str, Any]) -> Callable[[FTerm, FTerm], bool]:
    ws, w0, prec = w["weights"], w["variable_weight"], w["precedence"]

    def weight(t: FTerm) -> int:
        if isinstance(t, Var):
            return w0
        return ws.get(t.fn, 0) + sum(weight(a) for a in t.args)

    @cache
    def gt(s: FTerm, t: FTerm) -> bool:
        if isinstance(s, Var) or s == t:
            return False
        cs, ct = _var_count(s), _var_count(t)
        if any(cs[x] < k for x, k in ct.items()):
            return False
        a, b = weight(s), weight(t)
        if a != b:
            return a > b
        if isinstance(t, Var):
            f, x = s.fn, s
            while isinstance(x, App) and x.fn == f and len(x.args) == 1:
                x = x.args[0]
            return x == t
        if s.fn != t.fn:
            return _prec_gt(prec, s.fn, t.fn)
        for u, v in zip(s.args, t.args, strict=True):
            if u != v:
                return gt(u, v)
        return False

    return gt


Poly = dict[tuple[tuple[str, int], ...], int]


def _poly_of(interp: dict[str, list], least: int, t: FTerm) -> Poly:
    """``[t]`` with each variable ``x`` written ``y + least`` (``y`` ranging over the
    naturals), so that a polynomial with no negative coefficient is at least 0."""
    if isinstance(t, Var):
        return {((t.name, 1),): 1, (): least} if least else {((t.name, 1),): 1}
    args = [_poly_of(interp, least, a) for a in t.args]
    out: Poly = {}
    for coef, exps in interp.get(t.fn, []):
        part: Poly = {(): coef}
        for a, k in zip(args, exps, strict=True):
            for _ in range(k):
                part = _poly_times(part, a)
        for m, c in part.items():
            out[m] = out.get(m, 0) + c
    return out


def _poly_times(a: Poly, b: Poly) -> Poly:
    out: Poly = {}
    for ma, ca in a.items():
        for mb, cb in b.items():
            e: dict[str, int] = dict(ma)
            for v, k in mb:
                e[v] = e.get(v, 0) + k
            m = tuple(sorted(e.items()))
            out[m] = out.get(m, 0) + ca * cb
    return out


def _poly_cmp(interp: dict[str, list], least: int, s: FTerm, t: FTerm, strict: bool) -> bool:
    """``[s] > [t]`` (or ``>=``) for every assignment of the carrier, by comparing
    coefficients: ``[s] - [t] (- 1)`` has no negative coefficient."""
    a, b = _poly_of(interp, least, s), _poly_of(interp, least, t)
    for m in set(a) | set(b):
        need = b.get(m, 0) + (1 if strict and m == () else 0)
        if a.get(m, 0) < need:
            return False
    return not strict or a.get((), 0) >= b.get((), 0) + 1


def _poly_side(sig: dict[str, int], interp: dict[str, list], monotone: bool, least: int
               ) -> str | None:
    """Every ``[f]`` maps the carrier ``{least, least + 1, ...}`` into itself, and (for a
    reduction order) increases strictly with each argument."""
    if least < 0:
        return "a carrier below 0"
    for f, n in sig.items():
        entries = interp.get(f, [])
        for coef, exps in entries:
            if coef < 0 or len(exps) != n or any(k < 0 for k in exps):
                return f"symbol {f}: a monomial is not over the naturals"
        if sum(c * least ** sum(e) for c, e in entries) < least:
            return f"symbol {f} leaves the carrier"
        if monotone:
            for i in range(n):
                # x_i alone, or over a carrier without 0 any monomial with x_i in it
                if not any(c >= 1 and e[i] >= 1 and (least >= 1 or sum(e) == 1)
                           for c, e in entries):
                    return f"symbol {f} is not strictly monotone in argument {i + 1}"
    return None


def _filter(filt: dict[str, Any], t: FTerm) -> FTerm:
    if isinstance(t, Var):
        return t
    f = filt.get(t.fn)
    if isinstance(f, int):
        return _filter(filt, t.args[f - 1])
    keep = range(1, len(t.args) + 1) if f is None else f
    return App(t.fn, tuple(_filter(filt, t.args[i - 1]) for i in keep))


def _check_dp(system: FSystem, w: dict[str, Any]) -> str | None:
    pairs = dependency_pairs(system)
    if [f"{s} -> {t}" for s, t, _ in pairs] != w["pairs"]:
        return "the dependency pairs differ"
    g = dependency_graph(system, pairs)
    sig = _pair_signature(system)
    by_set = {frozenset(c["pairs"]): c for c in w["components"]}
    todo = _cyclic_components(g, g.nodes)
    used = 0
    while todo:
        comp = todo.pop(0)
        c = by_set.get(frozenset(comp))
        if c is None:
            return f"the component {comp} of the dependency graph has no order"
        used += 1
        strict = set(c["strict"])
        if not strict or not strict <= set(comp):
            return f"component {comp}: no pair of it decreases strictly"
        gt, ge, side = _comparison(sig, c["order"], monotone=False)
        if side is not None:
            return f"component {comp}: {side}"
        for r in system.rules:
            if not ge(r.lhs, r.rhs):
                return f"component {comp}: rule {r.name} is not weakly decreasing"
        for i in comp:
            s, t, _ = pairs[i]
            if not (gt(s, t) if i in strict else ge(s, t)):
                return f"component {comp}: pair {s} -> {t} is not decreasing"
        todo.extend(_cyclic_components(g, [i for i in comp if i not in strict]))
    if used != len(w["components"]):
        return "the witness lists components the graph does not have"
    return None


# ---------------------------------------------------------------- the witness in words


def _precedence_text(prec: dict[str, int], keep: set[str]) -> str:
    levels: dict[int, list[str]] = {}
    for f, v in prec.items():
        if f in keep:
            levels.setdefault(v, []).append(f)
    return " > ".join(", ".join(sorted(levels[v])) for v in sorted(levels, reverse=True))


def poly_text(f: str, n: int, entries: list) -> str:
    xs = [f"x{i + 1}" for i in range(n)]
    parts = []
    for coef, exps in sorted(entries, key=lambda e: (-sum(e[1]), [-k for k in e[1]])):
        mono = "*".join(x if k == 1 else f"{x}^{k}" for x, k in zip(xs, exps, strict=True) if k)
        if not mono:
            parts.append(str(coef))
        else:
            parts.append(mono if coef == 1 else f"{coef}*{mono}")
    head = f"[{f}]" + (f"({', '.join(xs)})" if n else "")
    return f"{head} = {' + '.join(parts) or '0'}"


def _order_text(w: dict[str, Any], sig: dict[str, int], keep: set[str]) -> str:
    m = w["method"]
    text = METHOD_TEXT[m]
    if m in ("lpo", "rpo", "lpo-af", "kbo") and ">" in _precedence_text(w["precedence"], keep):
        text += f", precedence {_precedence_text(w['precedence'], keep)}"
    if m == "rpo":
        st = [f"{f}: {'multiset' if s == 'mul' else 'lex ' + ','.join(map(str, s))}"
              for f, s in sorted(w["status"].items()) if f in keep]
        if st:
            text += f", status {'; '.join(st)}"
    if m == "kbo":
        text += (", weights " + ", ".join(f"{f}={w['weights'][f]}" for f in sorted(keep))
                 + f", variables {w['variable_weight']}")
    if m in ("poly1", "poly2", "poly2n2"):
        text += ": " + "; ".join(poly_text(f, sig[f], w["interpretation"].get(f, []))
                                 for f in sorted(keep))
    if m == "lpo-af":
        fs = []
        for f in sorted(keep):
            x = w["filter"].get(f)
            if isinstance(x, int):
                fs.append(f"{f} -> argument {x}")
            elif x is not None and len(x) != sig[f]:
                fs.append(f"{f} keeps {list(x)}")
        if fs:
            text += f", filtering {'; '.join(fs)}"
    return text


def describe(w: dict[str, Any], system: FSystem) -> str:
    """The proof in one line: the method and its witness."""
    keep = set().union(*(symbols(r.lhs) | symbols(r.rhs) for r in system.rules)) \
        if system.rules else set()
    if w["method"] == "none":
        return "no rules"
    if w["method"] != "dp":
        return (f"terminating by {_order_text(w, system.signature, keep)}; every rule "
                "re-checked")
    sig = _pair_signature(system)
    keep_dp = keep | {tuple_symbol(f) for f in defined_symbols(system)}
    comps = w["components"]
    head = (f"terminating by {METHOD_TEXT['dp']}: {len(w['pairs'])} pair(s), "
            f"{len(comps)} component step(s)")
    steps = [f"pairs {c['pairs']} ({', '.join(str(i) for i in c['strict'])} strictly) by "
             f"{_order_text(c['order'], sig, keep_dp)}" for c in comps]
    return head + ("; " + "; ".join(steps) if steps else "; the graph has no cycle") + \
        "; every rule and pair re-checked"


# ---------------------------------------------------------------- normalize(F)


@lru_cache(maxsize=64)  # a calculus is equal only to itself: one entry per loaded group
def normalize_proof(calc: Calculus, group: str | None, timeout: float | None,
                    confluence_theorem: Callable) -> dict[str, Any]:
    """For a ``then normalize GROUP`` translation: when the group is proved terminating and
    ``confluence_theorem`` (the confluence engine's, passed in so that this module does not
    import it) proves it confluent, every term has exactly one normal form — the part
    ``normalize(F)`` holds for all terms.  ``{"reason": ..., "witness": ...}``, or
    ``{"why_not": ...}``."""
    p = prove(calc, group, timeout)
    if not p.proved:
        return {"why_not": p.reason}
    conf, why = confluence_theorem(calc, group)
    if conf is None:
        return {"why_not": f"group {group} proved terminating, but no confluence theorem "
                           f"applies ({why})"}
    return {"reason": f"group {group}: {p.reason}; and confluent: {conf}; so every term has "
                      "exactly one normal form", "witness": p.witness}


def with_normalize_proof(v: Verdict, proof: dict[str, Any]) -> Verdict:
    """The ``normalize(F)`` part ``v`` of the bounded run, under :func:`normalize_proof`:
    proved for all terms when the proof exists (a bounded refutation would contradict it:
    an internal error); otherwise ``v`` with a note saying why there is no proof."""
    if "reason" not in proof:
        v.notes.append(f"normalize not proved for all terms: {proof.get('why_not')}")
        return v
    if v.verdict == REFUTED:
        raise WitnessRejected(f"{v.name}: several normal forms found, but {proof['reason']}")
    if v.undecided:
        v.notes.append(f"{v.undecided} case(s) needed more than the bound on {v.cut_by} to "
                       "reach their normal form (it exists: see the proof)")
    v.verdict, v.scope, v.reason, v.witness = HOLDS, "all", proof["reason"], proof["witness"]
    v.undecided, v.cut_by = 0, None
    return v


def export_terminating(calc: Calculus, group: str | None, header: str) -> str:
    """The order-finding query of ``terminating C`` as one SMT-LIB 2.6 script: ``sat`` when
    one of the orders exists — a path order, the Knuth-Bendix order, a polynomial
    interpretation, or dependency pairs whose every cyclic component of the estimated graph
    has a reduction pair with all its pairs strictly decreasing (the one-shot form).
    Raises ValueError when the rules are outside the first-order view."""
    from calcscout.encoders.orders import DIRECT_METHODS, LAST_METHODS, Problem, smt2

    system, why = view(calc, group)
    if system is None:
        raise ValueError(why)
    strict = [(r.lhs, r.rhs) for r in system.rules]
    alts = [(m, [(m, Problem(system.signature, strict=strict))])
            for m in (*DIRECT_METHODS, *LAST_METHODS)]
    pairs = dependency_pairs(system)
    g = dependency_graph(system, pairs)
    sig = _pair_signature(system)
    comps = _cyclic_components(g, g.nodes)
    for m in ("poly1", "lpo-af"):
        alts.append((f"dp_{m.replace('-', '')}",
                     [(m, Problem(sig, weak=strict, strict=[pairs[i][:2] for i in c],
                                  monotone=False)) for c in comps]))
    return smt2(alts, header)


def export_claim(spec, claim, out_dir) -> Path:
    """``calcscout export`` of a ``terminating C`` claim: ``DIR/NAME.smt2``, the
    order-finding query of :func:`export_terminating` with a header saying what the
    answers mean.  A rule set outside the first-order view is an
    :class:`~calcscout.rules.core.errors.EncodingError`."""
    f = claim.formula
    calc = spec.calculi[f.calculus]
    system, why = view(calc, f.group)
    if system is None:
        raise EncodingError(f"claim {claim.name}: no order-finding query: {why}", claim.pos)
    lines = [f"calcscout export of {claim.name}: {claim.text}",
             "the order-finding query for the rules below (first-order view: binders dropped, "
             f"every name the constant {NAME}, metavariables as variables)",
             *[f"  {r.name}: {r}" for r in system.rules],
             "sat: an order exists under which every rule decreases (the true use_* literal says "
             "which kind): the rules terminate on all terms",
             "unsat: no order of these kinds (coefficients bounded) exists; the rules may still "
             "terminate (or not): calcscout check decides with its bounded search",
             f"calcscout-spec: {os.path.abspath(spec.file)}",
             f"calcscout-claim: {claim.name}",
             "calcscout-mode: terminating"]
    header = "".join(f"; {line}\n" for line in lines)
    text = export_terminating(calc, f.group, header)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    path = out / (re.sub(r"[^A-Za-z0-9_.-]+", "_", claim.name) + ".smt2")
    tmp = path.with_suffix(".smt2.tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)
    return path
