"""Critical pairs of a calculus, and whether they join.

An overlap puts one rule's left-hand side at a non-metavariable position of
another's (or the same rule's, except at the root) and unifies them
(:mod:`calcscout.rules.critical_pairs.unify`).  Left-hand sides with a plugged context ``E[P]`` are
first unfolded through the context's grammar, up to :data:`CONTEXT_DEPTH`
frames: overlaps that need a deeper context are not found, and reports say so.

The pair's terms are *symbolic*: interned terms (:mod:`calcscout.rules.core.terms`) of an
extended calculus in which each metavariable ``X`` is a constructor ``?X``
whose arguments are the bound names ``X`` may see, an opaque member of the
sorts ``X`` is guaranteed to have.  So the rewriting engine
(:mod:`calcscout.rules.rewriting.rewrite`) computes both sides of a pair, and joins them, on
these terms unchanged.  A substitution pending on a metavariable,
``M[x := N]``, is ``?M(N)``: the explicit substitution ``M⟨x := N⟩`` of
Abadi, Cardelli, Curien and Lévy ("Explicit substitutions", JFP 1991) in
normal form by construction — substitution distributes over constructors and
stops at metavariables, composing with the arguments already there, and the
identity substitution is the plain ``?M(x)``; two closures are equal when
their metavariable and their arguments are.

Joinability is settled two ways:

- *symbolically*: a common reduct of the two symbolic sides, by steps valid
  for every instance, proves the pair joinable for all instances.  For that
  the steps must not depend on what a metavariable stands for: a closure
  ``?M(σ)`` belongs only to the sorts every instance belongs to (which needs
  σ's terms to fit wherever a name may stand), rules with a ``x free in T``
  condition are left out, and so are ``x fresh in T`` conditions on a name
  that is not bound by the rule's left-hand side;
- *by instances*: metavariables replaced by enumerated terms; two concrete
  reducts of a concrete peak whose complete graphs share no term are a
  definite counterexample.
"""

from __future__ import annotations

import dataclasses
import itertools
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field

from calcscout.rules.core.enumerate import enumerate_tuples
from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import (
    AltCon,
    AltNames,
    Arg,
    Bounds,
    Calculus,
    PAbs,
    Pattern,
    PCon,
    PMeta,
    PName,
    PPlug,
    Rule,
    Shape,
    Sort,
    base_meta,
)
from calcscout.rules.core.terms import (
    Bound,
    Name,
    Node,
    Term,
    bound,
    close,
    fresh_name,
    name,
    node,
    open_body,
)
from calcscout.rules.critical_pairs.unify import (
    MetaInfo,
    UBound,
    UMeta,
    UName,
    UNode,
    UTerm,
    from_pattern,
    unify,
)
from calcscout.rules.rewriting.match import _context_alts
from calcscout.rules.rewriting.rewrite import join, reducts, root_reducts

#: Context frames unfolded in a left-hand side ``E[P]`` when looking for overlaps.
CONTEXT_DEPTH = 2
#: Most instances tried per critical pair.
INSTANCE_LIMIT = 3000
#: Most terms one parallel step may reach (the parallel-closed check gives up beyond).
PARALLEL_LIMIT = 5000


# ---------------------------------------------------------------- contexts


@dataclass(frozen=True)
class _Frame:
    con: str
    args: tuple[Pattern | None, ...]
    hole: int
    binders: tuple[str, ...]  # names the hole's argument binds (internal spellings)


def _context_shapes(calc: Calculus, sort: str, depth: int, fresh) -> list[tuple[_Frame, ...]]:
    """Every context of ``sort`` with at most ``depth`` frames, side arguments
    as fresh metavariables."""
    alts = _context_alts(calc, sort)
    out: list[tuple[_Frame, ...]] = [()] if alts.has_hole else []
    if depth == 0:
        return out
    for con, hole, sub, args in alts.cons:
        alt = _find_alt(calc, con, args)
        for inner in _context_shapes(calc, sub, depth - 1, fresh):
            pats: list[Pattern | None] = []
            hole_binders: tuple[str, ...] = ()
            for j, (bsorts, asort) in enumerate(args):
                a = alt.args[j] if alt is not None else Arg(bsorts, asort)
                names = tuple(fresh(n or "x", binder=True) for n in
                              (a.binder_metas or ("x",) * len(bsorts)))
                if j == hole:
                    pats.append(None)
                    hole_binders = names
                    continue
                m = PMeta(fresh(a.meta or _sort_meta(calc, asort)), asort)
                pats.append(PAbs(names, m) if bsorts else m)
            out.append((_Frame(con, tuple(pats), hole, hole_binders), *inner))
    return out


def _find_alt(calc: Calculus, con: str, args) -> AltCon | None:
    for s in calc.sorts.values():
        for alt in s.alts:
            if isinstance(alt, AltCon) and alt.con == con and \
                    tuple((a.binder_sorts, a.sort) for a in alt.args) == args:
                return alt
    return None


def _sort_meta(calc: Calculus, sort: str) -> str:
    s = calc.sorts.get(sort)
    return s.metas[0] if s is not None and s.metas else sort


def _plug(frames: Sequence[_Frame], p: Pattern) -> Pattern:
    for f in reversed(frames):
        inner = PAbs(f.binders, p) if f.binders else p
        p = PCon(f.con, f.args[: f.hole] + (inner,) + f.args[f.hole + 1 :])
    return p


def _contexts_in(p: Pattern) -> list[PMeta]:
    if isinstance(p, PPlug):
        return [p.context, *_contexts_in(p.arg)]
    if isinstance(p, PAbs):
        return _contexts_in(p.body)
    if isinstance(p, PCon):
        return [c for a in p.args for c in _contexts_in(a)]
    return []


def _replace_plugs(p: Pattern, chosen: dict[str, tuple[_Frame, ...]]) -> Pattern:
    if isinstance(p, PPlug):
        return _plug(chosen[p.context.name], _replace_plugs(p.arg, chosen))
    if isinstance(p, PAbs):
        return PAbs(p.names, _replace_plugs(p.body, chosen))
    if isinstance(p, PCon):
        return PCon(p.con, tuple(_replace_plugs(a, chosen) for a in p.args))
    return p


def _pattern_names(p: Pattern) -> set[str]:
    if isinstance(p, PMeta | PName):
        return {p.name}
    if isinstance(p, PAbs):
        return set(p.names) | _pattern_names(p.body)
    if isinstance(p, PCon):
        return {n for a in p.args for n in _pattern_names(a)}
    if isinstance(p, PPlug):
        return {p.context.name} | _pattern_names(p.arg)
    return set()


def unfold_contexts(calc: Calculus, rule: Rule, depth: int = CONTEXT_DEPTH) -> list[Pattern]:
    """The left-hand side of ``rule`` with every plugged context ``E[P]``
    replaced by each context of at most ``depth`` frames (one pattern when
    there is no context).  A context that occurs twice gets the same frames."""
    ctxs = list(dict.fromkeys(c.name for c in _contexts_in(rule.lhs)))
    if not ctxs:
        return [rule.lhs]
    taken = _pattern_names(rule.lhs)
    counter = itertools.count(1)

    def fresh(base: str, binder: bool = False) -> str:
        stem = base_meta(base)
        while True:
            i = next(counter)
            text = f"#{stem}:{i}" if binder else f"{stem}{i}"
            if text not in taken:
                taken.add(text)
                return text

    sorts = {c.name: c.sort for c in _contexts_in(rule.lhs)}
    choices = [_context_shapes(calc, sorts[c], depth, fresh) for c in ctxs]
    out = []
    for combo in itertools.product(*choices):
        out.append(_replace_plugs(rule.lhs, dict(zip(ctxs, combo, strict=True))))
    return out


# ---------------------------------------------------------------- pairs


@dataclass(frozen=True)
class CriticalPair:
    """``left <- peak -> right``: ``outer`` at the root gives ``left``,
    ``inner`` at ``position`` gives ``right``."""

    outer: str
    inner: str
    position: tuple[int, ...]
    peak: Term
    left: Term
    right: Term
    system: Overlaps = field(compare=False, repr=False)

    @property
    def rules(self) -> tuple[str, str]:
        return (self.outer, self.inner)

    @property
    def where(self) -> str:
        return ".".join(str(i) for i in self.position) if self.position else "root"

    def show(self, term: Term) -> str:
        return self.system.show(term)


@dataclass
class Joinability:
    """How a critical pair fared: ``status`` "joinable" | "not-joinable" |
    "unknown", ``how`` "symbolic" | "instances".

    ``common`` is a common reduct (symbolic or of ``instance``); for an
    instance that does not join, ``instance`` is ``(peak, left, right)``
    concretely; ``cut_by`` the bound that cut a search; ``tried`` how many
    instances were tried.
    """

    status: str
    how: str
    common: Term | None = None
    instance: tuple[Term, Term, Term] | None = None
    cut_by: str | None = None
    tried: int = 0


class Overlaps:
    """The critical pairs of one calculus (and group), with the extended
    calculi their symbolic terms live in."""

    def __init__(self, calc: Calculus, group: str | None = None,
                 context_depth: int = CONTEXT_DEPTH):
        self.calc = calc
        self.group = group
        self.context_depth = context_depth
        self.rules = calc.rules_of(group)
        self.uses_contexts = any(_contexts_in(r.lhs) for r in self.rules)
        self.table: dict[str, MetaInfo] = {}  # constructor ?X -> the metavariable
        self.names_table: dict[str, MetaInfo] = {}  # internal name -> names metavariable
        raw = self._overlaps()
        self.full = self._extend(self.rules)
        self.sound_rules = tuple(r for r in self.rules if _sound(r))
        self.sound = self._extend(self.sound_rules) if len(self.sound_rules) < len(self.rules) \
            else self.full
        self.pairs: list[CriticalPair] = []
        self.dropped = 0
        seen: set = set()
        for r1, r2, path, peak in raw:
            steps = reducts(self.full, peak)
            lefts = [s.result for s in steps if s.rule == r1.name and s.position == ()]
            rights = [s.result for s in steps if s.rule == r2.name and s.position == path]
            if not lefts or not rights:
                # Not a peak after all: a condition fails, or (reduce in E) the
                # inner position is not a hole of the evaluation contexts.
                self.dropped += 1
            for left in dict.fromkeys(lefts):
                for right in dict.fromkeys(rights):
                    key = (r1.name, r2.name, path, peak, left, right)
                    if key not in seen:
                        seen.add(key)
                        self.pairs.append(CriticalPair(r1.name, r2.name, path, peak, left,
                                                       right, self))

    # ------------------------------------------------------------ overlaps

    def _overlaps(self) -> list[tuple[Rule, Rule, tuple[int, ...], Term]]:
        calc = self.calc
        variants = [(r, v) for r in self.rules for v in unfold_contexts(calc, r, self.context_depth)]
        out = []
        for r1, v1 in variants:
            c1 = from_pattern(calc, v1, r1)
            for path, binders in _positions(calc, v1):
                sub = _at(c1.term, path)
                env = tuple(ns for ns, _ in reversed(binders))
                for r2, v2 in variants:
                    if r1 is r2 and not path:
                        continue  # a rule overlaps itself at the root trivially
                    apart = _apart(v2, set(c1.metas))
                    c2 = from_pattern(calc, v2, r2, outer=binders, rename=apart)
                    metas = {**c1.metas, **c2.metas}
                    for u in unify(calc, sub, c2.term, metas, env):
                        for peak_u, metas_u in _split_names(u.apply(c1.term), u.metas):
                            out.append((r1, r2, path, self._symbolic(peak_u, metas_u)))
        return out

    def _symbolic(self, t: UTerm, metas: dict[str, MetaInfo]) -> Term:
        """A term with metavariables as a term of the extended calculus."""
        k = len(self.table) + len(self.names_table)
        cons: dict[str, str] = {}

        def go(u: UTerm) -> Term:
            if isinstance(u, UName):
                return name(u.name)
            if isinstance(u, UBound):
                return bound(u.index)
            if isinstance(u, UMeta):
                info = metas[u.name]
                if info.kind == "names":
                    text = cons.get(u.name)
                    if text is None:
                        text = f"#{info.sort}:{u.name}@{k}"
                        cons[u.name] = text
                        self.names_table[text] = info
                    return name(text)
                con = cons.get(u.name)
                if con is None:
                    con = f"?{u.name}@{k}"
                    cons[u.name] = con
                    self.table[con] = info
                return node(con, [bound(a) for a in u.args])
            assert isinstance(u, UNode)
            return node(u.con, [go(a) for a in u.args], u.binders)

        return go(t)

    def _extend(self, rules: Sequence[Rule]) -> Calculus:
        """The calculus with every metavariable an opaque constructor of the
        sorts all its instances belong to."""
        calc = self.calc
        sorts = dict(calc.sorts)
        shapes = dict(calc.shapes)
        extra: dict[str, list[AltCon]] = {}
        for con, info in self.table.items():
            args = tuple(Arg((), self._arg_sort(ns, sorts)) for ns in info.scope)
            shapes[con] = Shape(con, tuple(() for _ in info.scope))
            sure = frozenset.intersection(*info.states) if info.states else frozenset()
            for s in sure:
                extra.setdefault(s, []).append(AltCon(con, args))
        for s, alts in extra.items():
            sorts[s] = dataclasses.replace(sorts[s], alts=sorts[s].alts + tuple(alts))
        return dataclasses.replace(calc, sorts=sorts, shapes=shapes, rules=tuple(rules))

    def _arg_sort(self, ns: str, sorts: dict[str, Sort]) -> str:
        """A sort whose members may stand wherever a name of ``ns`` stands:
        substituting them keeps every sort (the substitution lemma of the
        automaton, whose transitions are monotone)."""
        g = grammar(self.calc)
        want = g.names_state.get(ns, frozenset())
        for s in self.calc.sorts.values():
            if s.is_context or s.name not in g.supers:
                continue
            if any(isinstance(a, AltNames) and a.names_sort == ns for a in s.alts) \
                    and want <= g.supers[s.name]:
                return s.name
        own = f"#{ns}"
        if own not in sorts:
            sorts[own] = Sort(own, (), (AltNames(ns),))
        return own

    # ------------------------------------------------------------ printing

    def show(self, term: Term) -> str:
        """``term`` in abstract form, metavariables by name, a pending
        substitution as ``M[x := N]``."""
        free_shown = {}
        for n in term.free:
            info = self.names_table.get(n)
            free_shown[n] = info.name if info is not None else n
        used = set(free_shown.values())

        def preferred(body: Term, index: int) -> str | None:
            # The name a metavariable's rule gave this binder, if one sees it.
            stack = [(body, 0)]
            while stack:
                t, d = stack.pop()
                if not isinstance(t, Node):
                    continue
                info = self.table.get(t.con)
                if info is not None:
                    for p, a in enumerate(t.args):
                        if isinstance(a, Bound) and a.index == index + d and info.scope_names[p]:
                            return info.scope_names[p]
                stack.extend((a, d + k) for a, k in zip(t.args, t.binders, strict=True))
            return None

        def choose(con: str, i: int, j: int, env: list[str], body: Term, k: int) -> str:
            want = preferred(body, k - 1 - j)
            if want is not None and want not in used and want not in env:
                return want
            shape = self.full.shapes.get(con)
            ns = None
            if shape is not None and i < shape.arity and j < len(shape.binder_sorts[i]):
                ns = self.calc.names_sorts.get(shape.binder_sorts[i][j])
            k = 0
            while True:
                cand = ns.canonical_name(k) if ns is not None and ns.metas else \
                    (f"x{k}" if k else "x")
                if cand not in used and cand not in env:
                    return cand
                k += 1

        def go(t: Term, env: list[str]) -> str:
            if isinstance(t, Name):
                return free_shown.get(t.name, t.name)
            if isinstance(t, Bound):
                return env[-1 - t.index]
            assert isinstance(t, Node)
            info = self.table.get(t.con)
            if info is not None:
                subs = []
                for j, a in enumerate(t.args):
                    shown = go(a, env)
                    if isinstance(a, Bound) and shown == info.scope_names[j]:
                        continue
                    subs.append(f"{info.scope_names[j] or '_'} := {shown}")
                return f"{info.name}[{', '.join(subs)}]" if subs else info.name
            if not t.args:
                return t.con
            parts = []
            for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
                names: list[str] = []
                for j in range(k):
                    names.append(choose(t.con, i, j, env + names, a, k))
                parts.append("".join(f"{n}." for n in names) + go(a, env + names))
            return f"{t.con}({', '.join(parts)})"

        return go(term, [])

    # ------------------------------------------------------------ joinability

    def symbolic_ok(self, pair: CriticalPair) -> bool:
        """Whether a symbolic common reduct proves the pair for all instances:
        a names metavariable is a distinct name symbolically, which a
        condition could tell from another name an instance identifies it with."""
        has_names = any(n in self.names_table for t in (pair.left, pair.right) for n in t.free)
        return not (has_names and any(r.conditions for r in self.sound_rules))

    def joinability(self, pair: CriticalPair, bounds: Bounds) -> Joinability:
        steps, nodes = bounds.steps or 10, bounds.nodes or 20000
        cut = None
        if pair.left is pair.right:
            return Joinability("joinable", "symbolic", common=pair.left)
        if self.symbolic_ok(pair):
            j = join(self.sound, pair.left, pair.right, steps, nodes)
            if j.status == "joinable":
                return Joinability("joinable", "symbolic", common=j.common)
            cut = j.cut_by
        tried = 0
        for inst_peak in self.instances(pair, bounds):
            tried += 1
            found = concrete_sides(self.calc, pair, inst_peak, self.group)
            for left, right in found:
                j = join(self.calc, left, right, steps, nodes, self.group)
                if j.status == "not-joinable":
                    return Joinability("not-joinable", "instances", instance=(inst_peak, left, right),
                                       tried=tried)
                if j.status == "unknown":
                    cut = cut or j.cut_by
        return Joinability("unknown", "instances", cut_by=cut, tried=tried)

    def instances(self, pair: CriticalPair, bounds: Bounds, limit: int = INSTANCE_LIMIT
                  ) -> Iterator[Term]:
        """Concrete peaks: the pair's metavariables replaced by enumerated
        terms (total size at most ``bounds.size``), smallest first."""
        cons = [c for c in _cons_in(pair.peak) if c in self.table]
        name_metas = [n for n in pair.peak.free if n in self.names_table]
        g = grammar(self.calc)
        calc = self.calc
        size = bounds.size or 6
        budget = (bounds.names if bounds.names is not None else 1)
        arity = sum(self.table[c].arity for c in cons)
        slots = [(calc, self.table[c].sort) for c in cons]
        name_choices = []
        for n in name_metas:
            ns = calc.names_sorts.get(self.names_table[n].sort)
            k = max(budget, 1)
            name_choices.append([ns.canonical_name(i) if ns is not None else f"x{i}"
                                 for i in range(k)])
        count = 0
        seen: set[Term] = set()
        for values in enumerate_tuples(slots, max(size, len(slots)), budget + arity,
                                       min_total_size=0 if not slots else 1):
            per_meta = []
            for c, v in zip(cons, values, strict=True):
                info = self.table[c]
                bodies = []
                for body in _scope_bodies(calc, info, v):
                    if g.state(body, tuple(reversed(info.scope))) in info.states:
                        bodies.append(body)
                per_meta.append(bodies)
            for bodies in itertools.product(*per_meta):
                for names in itertools.product(*name_choices):
                    inst = _instantiate(pair.peak, dict(zip(cons, bodies, strict=True)),
                                        {n: name(v) for n, v in zip(name_metas, names,
                                                                    strict=True)})
                    if inst in seen:
                        continue
                    seen.add(inst)
                    yield inst
                    count += 1
                    if count >= limit:
                        return

    def parallel_closed(self, pair: CriticalPair) -> bool:
        """``right`` reaches ``left`` in one parallel step (the inner side to
        the outer one, as in Huet 1980), by steps valid for every instance."""
        if pair.left is pair.right:
            return True
        if not self.symbolic_ok(pair):
            return False
        reach = parallel_reducts(self.sound, pair.right)
        return reach is not None and pair.left in reach


def _sound(rule: Rule) -> bool:
    """Whether the rule's steps on symbolic terms hold for every instance:
    no ``free in`` condition, and ``fresh in`` only for names its left-hand
    side binds (those are never a free name of an instance)."""
    binders = _binder_names(rule.lhs)
    return all(c.kind == "fresh" and c.name.name in binders for c in rule.conditions)


def _binder_names(p: Pattern) -> set[str]:
    if isinstance(p, PAbs):
        return set(p.names) | _binder_names(p.body)
    if isinstance(p, PCon):
        return {n for a in p.args for n in _binder_names(a)}
    if isinstance(p, PPlug):
        return _binder_names(p.arg)
    return set()


def _positions(calc: Calculus, p: Pattern, path=(), binders=()):
    """The constructor positions of a (context-free) pattern, with the
    binders above each as (names sort, name as written), outermost first."""
    if not isinstance(p, PCon):
        return
    yield path, binders
    shape = calc.shapes.get(p.con)
    for i, a in enumerate(p.args):
        if isinstance(a, PAbs):
            sorts = shape.binder_sorts[i] if shape is not None else ("",) * len(a.names)
            shown = tuple(n[1:].split(":", 1)[0] if n.startswith("#") else n for n in a.names)
            yield from _positions(calc, a.body, (*path, i),
                                  binders + tuple(zip(sorts, shown, strict=True)))
        else:
            yield from _positions(calc, a, (*path, i), binders)


def _at(t: UTerm, path: Sequence[int]) -> UTerm:
    for i in path:
        assert isinstance(t, UNode)
        t = t.args[i]
    return t


def _apart(p: Pattern, taken: set[str]) -> dict[str, str]:
    """New names for the metavariables of ``p`` that clash with ``taken``: primes."""
    out = {}
    for m in sorted(_pattern_names(p)):
        new = m
        while new in taken:
            new += "'"
        out[m] = new
    return out


def _split_names(t: UTerm, metas: dict[str, MetaInfo]):
    """A names metavariable that may see bound names is one of them or a free
    name: one case each, so that the symbolic terms cover every instance."""
    open_names = []
    for m in dict.fromkeys(_umetas(t)):
        info = metas[m.name]
        if info.kind == "names" and m.args:
            open_names.append(m.name)
    if not open_names:
        yield t, metas
        return
    x = open_names[0]
    info = metas[x]
    # The free-name case: the metavariable sees no bound name.
    yield from _split_names(_replace_meta(t, x, None), metas)
    for j, ns in enumerate(info.scope):
        if ns == info.sort:
            yield from _split_names(_replace_meta(t, x, j), metas)


def _umetas(t: UTerm):
    if isinstance(t, UMeta):
        yield t
    elif isinstance(t, UNode):
        for a in t.args:
            yield from _umetas(a)


def _replace_meta(t: UTerm, x: str, j: int | None) -> UTerm:
    if isinstance(t, UMeta) and t.name == x:
        return UMeta(x, ()) if j is None else UBound(t.args[j])
    if isinstance(t, UNode):
        return UNode(t.con, tuple(_replace_meta(a, x, j) for a in t.args), t.binders)
    return t


def _cons_in(t: Term) -> list[str]:
    out: dict[str, None] = {}
    stack = [t]
    while stack:
        s = stack.pop()
        if isinstance(s, Node):
            if s.con.startswith("?"):
                out.setdefault(s.con, None)
            stack.extend(reversed(s.args))
    return sorted(out, key=lambda c: _first_index(t, c))


def _first_index(t: Term, con: str) -> int:
    from calcscout.rules.core.terms import subterms

    for i, (_, s) in enumerate(subterms(t)):
        if isinstance(s, Node) and s.con == con:
            return i
    return 0


def _scope_bodies(calc: Calculus, info: MetaInfo, v: Term) -> Iterator[Term]:
    """Bodies for a metavariable from one enumerated term: each free name of
    ``v`` either stays free or is one of the bound names the metavariable sees."""
    k = info.arity
    if k == 0:
        yield v
        return
    frees = list(v.free)
    options = []
    for n in frees:
        ns = calc.names_sort_of(n)
        options.append([None] + [j for j in range(k) if info.scope[j] == ns])
    for choice in itertools.product(*options):
        picked = [c for c in choice if c is not None]
        if len(picked) != len(set(picked)):
            continue
        at = {j: n for n, j in zip(frees, choice, strict=True) if j is not None}
        taken = set(v.free)
        names = []
        for j in range(k):
            if j in at:
                names.append(at[j])
            else:
                d = fresh_name(taken)
                taken.add(d)
                names.append(d)
        yield close(v, names)


def _shift(t: Term, d: int, cutoff: int = 0) -> Term:
    if d == 0 or t.loose <= cutoff:
        return t
    if isinstance(t, Bound):
        return bound(t.index + d) if t.index >= cutoff else t
    assert isinstance(t, Node)
    return node(t.con, [_shift(a, d, cutoff + k) for a, k in zip(t.args, t.binders, strict=True)],
                t.binders)


def _open_with(body: Term, args: Sequence[Term], depth: int = 0) -> Term:
    """``body``'s loose indices replaced by ``args`` (the last is index 0);
    the arguments may have loose indices of their own."""
    k = len(args)
    if body.loose <= depth:
        return body
    if isinstance(body, Bound):
        m = body.index - depth
        if m < 0:
            return body
        if m < k:
            return _shift(args[k - 1 - m], depth)
        return bound(body.index - k)
    assert isinstance(body, Node)
    return node(body.con, [_open_with(a, args, depth + b)
                           for a, b in zip(body.args, body.binders, strict=True)], body.binders)


def _instantiate(t: Term, bodies: dict[str, Term], names: dict[str, Term]) -> Term:
    if isinstance(t, Name):
        return names.get(t.name, t)
    if isinstance(t, Bound):
        return t
    assert isinstance(t, Node)
    args = [_instantiate(a, bodies, names) for a in t.args]
    body = bodies.get(t.con)
    if body is not None:
        return _open_with(body, args)
    return node(t.con, args, t.binders)


def concrete_sides(calc: Calculus, pair: CriticalPair, peak: Term, group: str | None
                   ) -> list[tuple[Term, Term]]:
    """The pair's two steps on a concrete peak (none if it is not a peak there)."""
    steps = reducts(calc, peak, group)
    lefts = [s.result for s in steps if s.rule == pair.outer and s.position == ()]
    rights = [s.result for s in steps if s.rule == pair.inner and s.position == pair.position]
    return [(a, b) for a in dict.fromkeys(lefts) for b in dict.fromkeys(rights)]


def parallel_reducts(calc: Calculus, term: Term, limit: int = PARALLEL_LIMIT) -> set[Term] | None:
    """Every term one parallel step from ``term`` (``term`` itself included):
    a set of disjoint redexes contracted at once.  None beyond ``limit``."""
    memo: dict[Term, set[Term]] = {}

    def go(t: Term) -> set[Term]:
        got = memo.get(t)
        if got is not None:
            return got
        out = {t} | {s.result for s in root_reducts(calc, t)}
        if isinstance(t, Node) and t.args:
            per_arg = []
            for i, (a, k) in enumerate(zip(t.args, t.binders, strict=True)):
                if not k:
                    per_arg.append(go(a))
                    continue
                shape = calc.shapes.get(t.con)
                sorts = shape.binder_sorts[i] if shape is not None else ("",) * k
                taken = set(t.free)
                opened = []
                for ns in sorts:
                    n = fresh_name(taken, base=f"{ns}:")
                    taken.add(n)
                    opened.append(n)
                inner = go(open_body(a, [name(n) for n in opened]))
                per_arg.append({close(r, opened) for r in inner})
            total = 1
            for s in per_arg:
                total *= len(s)
            if total > limit:
                raise _TooMany
            for combo in itertools.product(*per_arg):
                out.add(node(t.con, combo, t.binders))
        if len(out) > limit:
            raise _TooMany
        memo[t] = out
        return out

    try:
        return go(term)
    except _TooMany:
        return None


class _TooMany(Exception):
    pass


# ---------------------------------------------------------------- entry points


_cache: dict[tuple[int, str | None, int], tuple[Calculus, Overlaps]] = {}


def overlaps(calc: Calculus, group: str | None = None, context_depth: int = CONTEXT_DEPTH
             ) -> Overlaps:
    key = (id(calc), group, context_depth)
    got = _cache.get(key)
    if got is not None and got[0] is calc:
        return got[1]
    ov = Overlaps(calc, group, context_depth)
    _cache[key] = (calc, ov)
    return ov


def critical_pairs(calc: Calculus, group: str | None = None) -> list[CriticalPair]:
    """Every critical pair of ``calc``'s rules (of ``group``): each rule's
    left-hand side at each constructor position of each left-hand side, the
    root overlap of a rule with itself excluded.

    >>> from calcscout.rules.loading.load import load_text
    >>> spec = load_text('''calculus c { sort t M N ::= a | b | f(M)
    ...   rule r1: f(a) -> b
    ...   rule r2: a -> b }''')
    >>> [(p.rules, p.where, p.show(p.left), p.show(p.right)) for p in critical_pairs(spec.calculi["c"])]
    [(('r1', 'r2'), '0', 'b', 'f(b)')]
    """
    return overlaps(calc, group).pairs


def pairs_report(calc: Calculus, bounds: Bounds, group: str | None = None) -> dict:
    """``calcscout pairs`` output (LANGUAGE.md §9), with the context depth
    and the bounds used."""
    ov = overlaps(calc, group)
    out = []
    for p in ov.pairs:
        j = ov.joinability(p, bounds)
        entry = {"rules": list(p.rules), "position": p.where, "peak": p.show(p.peak),
                 "left": p.show(p.left), "right": p.show(p.right), "status": j.status,
                 "how": j.how}
        if j.common is not None and j.how == "symbolic":
            entry["common"] = p.show(j.common)
        if j.instance is not None:
            from calcscout.rules.notation.notation import print_abstract

            entry["instance"] = {k: print_abstract(calc, t)
                                 for k, t in zip(("peak", "left", "right"), j.instance,
                                                 strict=True)}
        if j.how == "instances":
            entry["instances_tried"] = j.tried
        if j.cut_by:
            entry["cut_by"] = j.cut_by
        out.append(entry)
    report = {"calculus": calc.name, "pairs": out, "bounds": bounds.as_dict()}
    if group is not None:
        report["group"] = group
    if ov.uses_contexts:
        report["context_depth"] = ov.context_depth
    return report
