"""One-step reducts and bounded reduction graphs.

:func:`reducts` gives every one-step reduct of a term, with the rule and the
position (argument indices from the root), for ``reduce anywhere`` (the
compatible closure, under binders too: a redex under binders is opened with
fresh names for them, rewritten and closed again) and ``reduce in E`` (only at the hole
of a decomposition of the term through context sort ``E``).

:func:`reduction_graph` explores breadth first, up to ``steps`` steps from
the start and ``nodes`` terms in all, and says whether it saw everything
(``complete``) or which bound cut it (``cut_by``).  The graph is a
``networkx.DiGraph`` whose nodes are interned terms.

>>> from calcscout.rules.core.spec import (Calculus, NamesSort, Sort, Shape, AltNames, AltCon, Arg,
...     Rule, PCon, PAbs, PMeta, PSubst, PName)
>>> from calcscout.rules.core.terms import node, bound, name, debug_str
>>> app = lambda m, n: node("app", (m, n))
>>> lam = lambda body: node("lam", (body,), (1,))
>>> M, N = PMeta("M", "term"), PMeta("N", "term")
>>> lhs = PCon("app", (PCon("lam", (PAbs(("x",), M),)), N))
>>> beta = Rule("beta", lhs, PSubst(M, ((PName("x", "var"), N),)))
>>> calc = Calculus("lam", {"var": NamesSort("var", ("x",))},
...     {"term": Sort("term", ("M", "N"), (AltNames("var"),
...         AltCon("lam", (Arg(("var",), "term"),)), AltCon("app", (Arg((), "term"),) * 2)))},
...     {"lam": Shape("lam", (("var",),)), "app": Shape("app", ((), ()))}, (beta,))
>>> delta = lam(app(bound(0), bound(0)))
>>> [(s.rule, s.where, debug_str(s.result))
...  for s in reducts(calc, app(name("y"), app(delta, delta)))]
[('beta', '1', 'app(y, app(lam(.app(^0, ^0)), lam(.app(^0, ^0))))')]
>>> g = reduction_graph(calc, app(delta, delta), steps=5, nodes=100)
>>> g.graph["complete"], find_cycle(g) == [app(delta, delta)]
(True, True)
"""

from __future__ import annotations

import gc
import weakref
from collections import deque
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field

import networkx as nx

from calcscout.rules.core.errors import FileError
from calcscout.rules.core.spec import Calculus, PAbs, Pattern, PCon, PName, Rule
from calcscout.rules.core.terms import (
    Bound,
    Name,
    Node,
    Term,
    close,
    fresh_name,
    is_internal,
    name,
    node,
    open_body,
)
from calcscout.rules.rewriting.instantiate import build
from calcscout.rules.rewriting.match import binder_sorts, check_conditions, decompositions, match

Graph = nx.DiGraph


def position_text(position: Sequence[int]) -> str:
    """A position as printed: ``root``, or argument indices from the root
    (counting from 0) joined by dots, ``1.0``."""
    return ".".join(str(i) for i in position) if position else "root"


@dataclass(frozen=True)
class Step:
    """One step ``term -> result`` by ``rule`` at ``position``."""

    rule: str
    position: tuple[int, ...]
    result: Term

    @property
    def where(self) -> str:
        return position_text(self.position)


# ---------------------------------------------------------------- one step


class _Reducer:
    """The rules of one calculus (and group), indexed by head constructor,
    with a memo table of reducts per term.

    The memo is weakly keyed and holds its results weakly too: a result that
    is its own redex's key (``Ω -> Ω``), or a cycle of them, would otherwise
    pin itself in memory forever.  A dead result means recomputing.
    """

    def __init__(self, calc: Calculus, group: str | None):
        self.calc = calc
        self.group = group
        self.rules = calc.rules_of(group)
        self.by_head: dict[str, list[Rule]] = {}
        self.any_head: list[Rule] = []
        for r in self.rules:
            if isinstance(r.lhs, PCon):
                self.by_head.setdefault(r.lhs.con, []).append(r)
            else:
                self.any_head.append(r)
        self.context = calc.reduce_in
        if self.context is not None:
            s = calc.sorts.get(self.context)
            if s is None or not s.is_context:
                raise ValueError(f"reduce in {self.context}: not a context sort of {calc.name}")
        self._memo: weakref.WeakKeyDictionary[Term, tuple] = weakref.WeakKeyDictionary()
        self._may: weakref.WeakKeyDictionary[Term, bool] = weakref.WeakKeyDictionary()

    # ------------------------------------------------------------ pre-filter

    def may_reduce(self, term: Term) -> bool:
        """False when no subterm of ``term`` has the constructor skeleton of a
        left-hand side: then it has no reduct, whatever the sorts and binders.

        It reads raw bodies (loose indices standing for names), so a normal
        subterm under a binder is skipped without opening it.  A left-hand
        side with a context at its root could match anywhere: it disables the
        filter.
        """
        if self.any_head:
            return True
        if not isinstance(term, Node):
            return False
        got = self._may.get(term)
        if got is None:
            got = any(_skeleton(r.lhs, term) for r in self.by_head.get(term.con, ())) or any(
                self.may_reduce(a) for a in term.args
            )
            self._may[term] = got
        return got

    # ------------------------------------------------------------ memo

    def _get(self, term: Term, env: tuple[str, ...]) -> tuple[Step, ...] | None:
        per_term = self._memo.get(term)
        got = per_term.get(env) if per_term is not None else None
        if got is None:
            return None
        out = []
        for rule, pos, ref in got:
            r = ref()
            if r is None:
                return None
            out.append(Step(rule, pos, r))
        return tuple(out)

    def _put(self, term: Term, env: tuple[str, ...], steps: tuple[Step, ...]) -> None:
        per_term = self._memo.get(term)
        if per_term is None:
            per_term = self._memo[term] = {}
        per_term[env] = tuple((s.rule, s.position, weakref.ref(s.result)) for s in steps)

    # ------------------------------------------------------------ steps

    def reducts(self, term: Term) -> tuple[Step, ...]:
        if term.loose:
            raise ValueError("reducts of a term with loose bound indices")
        if self.context is None:
            try:
                return self._raw(term, (), LAZY_ABOVE)
            except _TooMany:
                return tuple(self._lazy(term, ()))
        return tuple(self.iter_reducts(term))

    def iter_reducts(self, term: Term) -> Iterator[Step]:
        """The steps of :meth:`reducts`, in the same order, built one at a time when
        there are more than :data:`LAZY_ABOVE` of them (so a caller that stops early
        never builds the rest)."""
        if term.loose:
            raise ValueError("reducts of a term with loose bound indices")
        if self.context is None:
            try:
                got = self._raw(term, (), LAZY_ABOVE)
            except _TooMany:
                return self._lazy(term, ())
            return iter(got)
        if not self.may_reduce(term):
            return iter(())
        got = self._get(term, ())
        if got is not None:
            return iter(got)
        return self._lazy_in_context(term)

    def _lazy(self, term: Term, env: tuple[str, ...]) -> Iterator[Step]:
        """The steps of :meth:`_raw` one at a time, for a subterm with too many to keep:
        its arguments' steps come from the memo where they are few, lazily where not."""
        env = env[: term.loose]
        try:
            got = self._raw(term, env, LAZY_ABOVE)
        except _TooMany:
            pass
        else:
            yield from got
            return
        rules = self.candidates(term)
        if rules:
            yield from self._root_steps(term, env, rules)
        assert isinstance(term, Node)  # a name has no more steps than LAZY_ABOVE
        for i, arg in enumerate(term.args):
            if not self.may_reduce(arg):
                continue
            inner = env
            if term.binders[i]:
                bsorts = binder_sorts(self.calc, term.con, i, term.binders[i])
                inner = tuple(reversed(bsorts)) + env
            for s in self._lazy(arg, inner):
                args = term.args[:i] + (s.result,) + term.args[i + 1 :]
                yield Step(s.rule, (i, *s.position), node(term.con, args, term.binders))

    def _lazy_in_context(self, term: Term) -> Iterator[Step]:
        """The steps of :meth:`_in_context` one at a time; kept in the memo when few."""
        out: list[Step] = []
        seen: set[Step] = set()
        for ctx, hole in decompositions(self.calc, self.context, term):
            for r, t in self.at_root(hole):
                step = Step(r, ctx.position, ctx.plug(t))
                if step not in seen:
                    seen.add(step)
                    if len(out) <= LAZY_ABOVE:
                        out.append(step)
                    yield step
        if len(out) <= LAZY_ABOVE:
            self._put(term, (), tuple(out))

    def candidates(self, term: Term) -> list[Rule]:
        """The rules whose left-hand side could match at the root of ``term``."""
        rules = [r for r in self.by_head.get(term.con, ()) if _skeleton(r.lhs, term)] if (
            isinstance(term, Node)
        ) else []
        return rules + self.any_head if self.any_head else rules

    def at_root(self, term: Term, rules: Sequence[Rule] | None = None) -> list[tuple[str, Term]]:
        """Every ``(rule, result)`` of a rule applied at the root of ``term``."""
        if rules is None:
            rules = self.candidates(term)
        out: list[tuple[str, Term]] = []
        for rule in rules:
            for b in match(self.calc, rule.lhs, term):
                if not check_conditions(rule, b):
                    continue
                result = build(self.calc, rule.rhs, b)
                self._check_scope(rule, term, result)
                if (rule.name, result) not in out:
                    out.append((rule.name, result))
        return out

    def _check_scope(self, rule: Rule, term: Term, result: Term) -> None:
        escaped = [n for n in result.free if is_internal(n) and n not in term.free]
        if escaped:
            raise FileError(
                f"rule {rule.name} lets a name bound on its left escape its binder",
                rule.pos,
                hint="use the metavariable under a binder for the name again, in a "
                "substitution for it, or add a condition `x fresh in ...`",
            )

    def _raw(self, term: Term, env: tuple[str, ...], limit: int) -> tuple[Step, ...]:
        """The steps of a subterm that may have loose indices (``env[i]``: the
        names sort of index ``i``), with results in the same raw form; raises
        :class:`_TooMany` when there are more than ``limit`` (then :meth:`_lazy`
        gives them one at a time: a memo entry never holds more than
        :data:`LAZY_ABOVE`).

        Descending does not open binders: only a subterm where a rule may
        apply is opened (its loose indices replaced by fresh names), rewritten
        and closed again, so a step costs the size of its redex, not of the
        whole body around it.  The steps depend only on the sorts of the
        loose indices, which is the memo key beside the subterm.
        """
        if not self.may_reduce(term):
            return ()
        env = env[: term.loose]
        got = self._get(term, env)
        if got is not None:
            if len(got) > limit:
                raise _TooMany
            return got
        out: list[Step] = []
        rules = self.candidates(term)
        if rules:
            out.extend(self._root_steps(term, env, rules))
            if len(out) > limit:
                raise _TooMany
        if isinstance(term, Node):
            for i, arg in enumerate(term.args):
                if not self.may_reduce(arg):
                    continue
                inner = env
                if term.binders[i]:
                    bsorts = binder_sorts(self.calc, term.con, i, term.binders[i])
                    inner = tuple(reversed(bsorts)) + env
                for s in self._raw(arg, inner, limit - len(out)):
                    args = term.args[:i] + (s.result,) + term.args[i + 1 :]
                    out.append(Step(s.rule, (i, *s.position), node(term.con, args, term.binders)))
        steps = tuple(out)
        self._put(term, env, steps)
        return steps

    def _root_steps(self, term: Term, env: tuple[str, ...], rules: Sequence[Rule]) -> list[Step]:
        """The steps at the root of a subterm in raw form (its loose indices opened with
        fresh names of their sorts, the results closed again)."""
        if not term.loose:
            return [Step(r, (), t) for r, t in self.at_root(term, rules)]
        taken = set(term.free)
        names: list[str] = []
        for j in range(term.loose - 1, -1, -1):  # outermost first
            n = fresh_name(taken, base=f"{env[j]}:")
            taken.add(n)
            names.append(n)
        opened = open_body(term, [name(n) for n in names])
        return [Step(r, (), close(t, names)) for r, t in self.at_root(opened, rules)]


def _skeleton(p: Pattern, t: Term) -> bool:
    """``t`` has the constructors of pattern ``p`` (metavariables and contexts
    match anything, a names metavariable any name)."""
    if isinstance(p, PCon):
        if not isinstance(t, Node) or t.con != p.con or len(t.args) != len(p.args):
            return False
        return all(
            _skeleton(a.body if isinstance(a, PAbs) else a, b)
            for a, b in zip(p.args, t.args, strict=True)
        )
    if isinstance(p, PName):
        return isinstance(t, Name | Bound)
    return True


#: A term with more one-step reducts than this has them built one at a time, as a graph
#: takes them, and no memo entry keeps more (a term whose reducts double with its depth
#: would otherwise fill memory long before the bound on nodes stops its graph).
LAZY_ABOVE = 1024


class _TooMany(Exception):
    """A subterm has more steps than the caller's limit."""


_reducers: dict[tuple[int, str | None], _Reducer] = {}


def _reducer(calc: Calculus, group: str | None) -> _Reducer:
    key = (id(calc), group)
    got = _reducers.get(key)
    if got is None or got.calc is not calc:
        got = _Reducer(calc, group)
        _reducers[key] = got
    return got


def reducts(calc: Calculus, term: Term, group: str | None = None) -> tuple[Step, ...]:
    """Every one-step reduct of ``term`` (locally closed) under the rules of
    ``group`` (all rules when None), each ``(rule, position, result)`` once,
    outermost positions first, rules in declaration order."""
    return _reducer(calc, group).reducts(term)


def iter_reducts(calc: Calculus, term: Term, group: str | None = None) -> Iterator[Step]:
    """The steps of :func:`reducts`, in the same order; where there are many, each is built
    only when the iteration reaches it (stop early to build fewer)."""
    return _reducer(calc, group).iter_reducts(term)


def root_reducts(calc: Calculus, term: Term, group: str | None = None) -> tuple[Step, ...]:
    """The steps at the root of ``term`` only (whatever the ``reduce`` line)."""
    return tuple(Step(r, (), t) for r, t in _reducer(calc, group).at_root(term))


# ---------------------------------------------------------------- graphs


class _Ball:
    """A breadth-first reduction graph that grows one layer at a time.

    Every node gets ``depth`` (its distance from the start) and, once its
    reducts are known, ``expanded``; a node with no reducts is ``normal``.
    A node at depth ``steps`` is expanded only to find its normality and its
    edges to nodes already in the graph; a reduct beyond is what cuts the
    graph by ``steps``.  Adding a node beyond ``nodes`` stops the graph at
    once (``cut_by`` "nodes"), so that a graph that would outgrow memory is
    never built.
    """

    def __init__(self, calc: Calculus, root: Term, steps: int, nodes: int, group: str | None):
        if steps < 0 or nodes < 1:
            raise ValueError("steps must be at least 0 and nodes at least 1")
        self.reducer = _reducer(calc, group)
        self.steps = steps
        self.nodes = nodes
        g = nx.DiGraph(root=root, complete=True, cut_by=None, steps=steps, nodes=nodes,
                       calculus=calc.name, group=group)
        g.add_node(root, depth=0, expanded=False, normal=False)
        self.graph = g
        self.parent: dict[Term, Term | None] = {root: None}
        self.layer: list[Term] = [root]
        self.depth = 0
        self.done = False

    def _cut(self, why: str) -> None:
        g = self.graph.graph
        g["complete"] = False
        if g["cut_by"] is None:
            g["cut_by"] = why

    def grow(self) -> list[Term]:
        """Expand the current layer; return the nodes it added (the next layer)."""
        if self.done:
            return []
        g = self.graph
        added: list[Term] = []
        for t in self.layer:
            data = g.nodes[t]
            data["expanded"] = True
            normal = True
            # one step at a time: once the graph is full no further reduct is built
            for s in self.reducer.iter_reducts(t):
                normal = False
                r = s.result
                if r not in g:
                    if self.depth >= self.steps:
                        self._cut("steps")
                        data["cut"] = True
                        continue
                    if g.number_of_nodes() >= self.nodes:
                        self._cut("nodes")
                        data["cut"] = True
                        self.done = True
                        self.layer = []
                        return added
                    g.add_node(r, depth=self.depth + 1, expanded=False, normal=False)
                    self.parent[r] = t
                    added.append(r)
                edge = g.get_edge_data(t, r)
                if edge is None:
                    g.add_edge(t, r, rule=s.rule, position=s.position, steps=[(s.rule, s.position)])
                else:
                    edge["steps"].append((s.rule, s.position))
            data["normal"] = normal
        self.layer = added
        self.depth += 1
        if not added:
            self.done = True
        return added

    def path_to(self, target: Term) -> list[Term]:
        path = [target]
        while (up := self.parent[path[-1]]) is not None:
            path.append(up)
        return path[::-1]


def reduction_graph(
    calc: Calculus, term: Term, steps: int, nodes: int, group: str | None = None
) -> Graph:
    """The terms reachable from ``term`` in at most ``steps`` steps, at most
    ``nodes`` of them, breadth first.

    ``graph.graph`` holds ``root``, ``complete`` (every reduct of every node
    is in the graph) and ``cut_by`` (None, "steps" or "nodes"); every edge
    holds the ``rule`` and ``position`` of a step (``steps``: all of them,
    when several steps lead from one term to the same reduct).
    """
    ball = _Ball(calc, term, steps, nodes, group)
    while not ball.done:
        ball.grow()
    return ball.graph


def normal_forms(graph: Graph) -> list[Term]:
    """The terms of the graph that have no reduct, in breadth-first order.

    A node the exploration did not expand (cut off by a bound) is not one,
    even when it has no edge out.
    """
    return [t for t, d in graph.nodes(data=True) if d.get("normal")]


def find_cycle(graph: Graph) -> list[Term] | None:
    """A reduction cycle ``[t0, ..., tk]`` (with ``tk -> t0``), or None.

    Iterative depth-first search with three colours: an edge to a node still
    on the stack closes a cycle (a self-loop is a cycle of one term).  The
    tests check it against networkx's strongly connected components.
    """
    on_stack: dict[Term, int] = {}
    finished: set[Term] = set()
    for start in graph:
        if start in finished:
            continue
        path: list[Term] = [start]
        on_stack[start] = 0
        iters = [iter(graph.successors(start))]
        while iters:
            nxt = next(iters[-1], None)
            if nxt is None:
                done = path.pop()
                del on_stack[done]
                finished.add(done)
                iters.pop()
                continue
            if nxt in on_stack:
                return path[on_stack[nxt] :]
            if nxt in finished:
                continue
            on_stack[nxt] = len(path)
            path.append(nxt)
            iters.append(iter(graph.successors(nxt)))
    return None


def reaches(graph: Graph, target: Term) -> list[Term] | None:
    """A shortest path ``[root, ..., target]`` in the graph, or None."""
    root = graph.graph["root"]
    if target not in graph:
        return None
    parent: dict[Term, Term | None] = {root: None}
    todo = deque([root])
    while todo:
        t = todo.popleft()
        if t is target:
            path = [t]
            while (up := parent[path[-1]]) is not None:
                path.append(up)
            return path[::-1]
        for s in graph.successors(t):
            if s not in parent:
                parent[s] = t
                todo.append(s)
    return None


def path_steps(graph: Graph, path: Sequence[Term]) -> list[Step]:
    """The steps along a path of the graph (the first step of each edge)."""
    out = []
    for a, b in zip(path, path[1:], strict=False):
        e = graph.edges[a, b]
        out.append(Step(e["rule"], e["position"], b))
    return out


# ---------------------------------------------------------------- joinability


@dataclass
class Join:
    """The outcome of :func:`join`.

    ``status`` is "joinable" (with ``common`` and both paths to it),
    "not-joinable" (both graphs complete and disjoint) or "unknown" (a bound
    cut a graph first; ``cut_by`` says which).
    """

    status: str
    common: Term | None = None
    left_path: list[Term] = field(default_factory=list)
    right_path: list[Term] = field(default_factory=list)
    cut_by: str | None = None
    left: Graph | None = None
    right: Graph | None = None

    @property
    def joinable(self) -> bool | None:
        return {"joinable": True, "not-joinable": False}.get(self.status)


def join(
    calc: Calculus, a: Term, b: Term, steps: int, nodes: int, group: str | None = None
) -> Join:
    """Whether ``a`` and ``b`` have a common reduct: grow both reduction
    graphs a layer at a time in alternation and stop at the first common term."""
    left = _Ball(calc, a, steps, nodes, group)
    right = _Ball(calc, b, steps, nodes, group)

    def found(t: Term) -> Join:
        return Join("joinable", t, left.path_to(t), right.path_to(t), None,
                    left.graph, right.graph)

    if a is b:
        return found(a)
    while not (left.done and right.done):
        for t in left.grow():
            if t in right.graph:
                return found(t)
        for t in right.grow():
            if t in left.graph:
                return found(t)
    lg, rg = left.graph.graph, right.graph.graph
    if lg["complete"] and rg["complete"]:
        return Join("not-joinable", left=left.graph, right=right.graph)
    return Join("unknown", cut_by=lg["cut_by"] or rg["cut_by"], left=left.graph,
                right=right.graph)


@contextmanager
def paused_gc() -> Iterator[None]:
    """Pause Python's cyclic garbage collector while graphs are explored.

    Exploring allocates many small objects that all stay alive (terms, memo
    entries, graph dicts), so the collector's full passes rescan an ever larger
    heap for nothing: on a 120,000-term graph they took more than half the time
    (tests/bench/bench_confluence.py).  Reference counting still frees what
    dies (terms form no cycles); cycles wait until the collector resumes.
    """
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()
