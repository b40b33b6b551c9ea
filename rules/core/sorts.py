"""Sorts as a bottom-up tree automaton, determinised by the subset construction.

The state of a term is the set of (non-context) sorts it belongs to, computed
from its constructor and its children's states (Comon et al., *Tree Automata
Techniques and Applications*, ch. 1).  A name has the state of its names sort;
a bound name the state of the names sort its binder was declared with.  So

- membership ``t : S`` is ``S in state(t)``, memoised per interned term;
- the reachable states partition the terms, which is what lets enumeration
  produce each term once however ambiguous the grammar is;
- inclusion of sorts is exact over the reachable states: ``A ⊆ B`` iff every
  reachable state that contains ``A`` contains ``B``.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterable
from functools import cached_property

from calcscout.rules.core.spec import AltCon, AltNames, AltSort, Calculus
from calcscout.rules.core.terms import Bound, Name, Node, Term

State = frozenset[str]
EMPTY: State = frozenset()

#: Opaque nodes of symbolic terms (:mod:`rules.symbolic`): constructor -> (calculus, sort,
#: names sort of each parameter).  An opaque node stands for an unknown term of its sort
#: whose parameters have been replaced by the node's arguments.
OPAQUE_SORTS: dict[str, tuple[str, str, tuple[str, ...]]] = {}


class Grammar:
    """The automaton of one calculus's (non-context) sorts."""

    def __init__(self, calc: Calculus):
        self.calc = calc
        sorts = [s for s in calc.sorts.values() if not s.is_context]
        self.sort_names = tuple(s.name for s in sorts)
        # supers[S]: S itself and every sort that includes S through subsort alternatives
        includes: dict[str, set[str]] = {s.name: set() for s in sorts}
        for s in sorts:
            for alt in s.alts:
                if isinstance(alt, AltSort) and alt.sort in includes:
                    includes[alt.sort].add(s.name)
        self.supers: dict[str, frozenset[str]] = {}
        for s in sorts:
            seen = {s.name}
            todo = [s.name]
            while todo:
                for up in includes[todo.pop()]:
                    if up not in seen:
                        seen.add(up)
                        todo.append(up)
            self.supers[s.name] = frozenset(seen)
        names_states: dict[str, set[str]] = {ns: set() for ns in calc.names_sorts}
        # con -> list of (owning sort, argument sorts, binder sorts per argument)
        self.alts: dict[str, list[tuple[str, tuple[str, ...]]]] = {}
        for s in sorts:
            for alt in s.alts:
                if isinstance(alt, AltNames):
                    names_states.setdefault(alt.names_sort, set()).update(self.supers[s.name])
                elif isinstance(alt, AltCon):
                    self.alts.setdefault(alt.con, []).append(
                        (s.name, tuple(a.sort for a in alt.args))
                    )
        self.names_state: dict[str, State] = {
            ns: frozenset(v) for ns, v in names_states.items()
        }
        self._delta: dict[tuple, State] = {}

    # ------------------------------------------------------------ transitions

    def delta(self, con: str, children: tuple[State, ...]) -> State:
        key = (con, children)
        got = self._delta.get(key)
        if got is not None:
            return got
        out: set[str] = set()
        for owner, arg_sorts in self.alts.get(con, ()):
            if len(arg_sorts) == len(children) and all(
                a in q for a, q in zip(arg_sorts, children, strict=True)
            ):
                out |= self.supers[owner]
        result = frozenset(out)
        self._delta[key] = result
        return result

    def name_state(self, text: str) -> State:
        ns = self.calc.names_sort_of(text)
        return self.names_state.get(ns, EMPTY) if ns else EMPTY

    def state(self, term: Term, env: tuple[str, ...] = ()) -> State:
        """The sorts ``term`` belongs to; ``env[i]`` is the names sort of index i."""
        if isinstance(term, Name):
            return self.name_state(term.name)
        if isinstance(term, Bound):
            if term.index < len(env):
                return self.names_state.get(env[term.index], EMPTY)
            return EMPTY
        assert isinstance(term, Node)
        key = (self, env[: term.loose]) if term.loose else self
        per_term = term.states
        if per_term is None:
            per_term = term.states = {}
        got = per_term.get(key)
        if got is not None:
            return got
        shape = self.calc.shapes.get(term.con)
        if shape is None and term.con in OPAQUE_SORTS:
            result = self._opaque_state(term, env)
        elif shape is None or shape.binders != term.binders:
            result = EMPTY
        else:
            children = []
            for arg, bsorts in zip(term.args, shape.binder_sorts, strict=True):
                inner = tuple(reversed(bsorts)) + env if bsorts else env
                children.append(self.state(arg, inner))
            result = self.delta(term.con, tuple(children))
        per_term[key] = result
        return result

    def _opaque_state(self, term: Node, env: tuple[str, ...]) -> State:
        """The sorts every instance of an opaque node belongs to (an under-approximation).

        An instance of sort ``S`` belongs to every sort of every state containing ``S``.
        Replacing its parameter names by the arguments keeps that when each argument has
        at least the sorts of a name of the parameter's names sort (the state of a node
        grows with its children's states), and not otherwise: then nothing is known.
        """
        calc, sort, params = OPAQUE_SORTS[term.con]
        if calc != self.calc.name or sort not in self.supers:
            return EMPTY
        args = [(self.names_state.get(ns, EMPTY), self.state(arg, env))
                for arg, ns in zip(term.args, params, strict=True)]
        # a derivation of the instance in sort s uses only the sorts s depends on: where a
        # name stood at one of those, the argument must stand too
        return frozenset(s for s in self.sorts_including((sort,))
                         if all(need & self.depends[s] <= got for need, got in args))

    @cached_property
    def depends(self) -> dict[str, frozenset[str]]:
        """The sorts a derivation of a term of each sort may use (its own included)."""
        direct: dict[str, set[str]] = {s: {s} for s in self.sort_names}
        for s in self.sort_names:
            for alt in self.calc.sorts[s].alts:
                if isinstance(alt, AltSort) and alt.sort in direct:
                    direct[s].add(alt.sort)
                elif isinstance(alt, AltCon):
                    direct[s].update(a.sort for a in alt.args if a.sort in direct)
        out: dict[str, frozenset[str]] = {}
        for s in self.sort_names:
            seen = set(direct[s])
            todo = list(seen)
            while todo:
                for t in direct[todo.pop()]:
                    if t not in seen:
                        seen.add(t)
                        todo.append(t)
            out[s] = frozenset(seen)
        return out

    def member(self, term: Term, sort: str, env: tuple[str, ...] = ()) -> bool:
        return sort in self.state(term, env)

    # ------------------------------------------------------------ reachability

    @cached_property
    def reachable(self) -> tuple[State, ...]:
        """Every non-empty state some term has, in a fixed order."""
        found: dict[State, None] = {}
        for q in self.names_state.values():
            if q:
                found.setdefault(q, None)
        arities = {}
        for con, shape in self.calc.shapes.items():
            if con in self.alts:
                arities[con] = shape.arity
        changed = True
        while changed:
            changed = False
            current = list(found)
            for con, k in arities.items():
                for children in itertools.product(current, repeat=k):
                    q = self.delta(con, tuple(children))
                    if q and q not in found:
                        found[q] = None
                        changed = True
        return tuple(sorted(found, key=lambda q: (len(q), sorted(q))))

    def states_with(self, sort: str) -> tuple[State, ...]:
        return tuple(q for q in self.reachable if sort in q)

    def is_empty(self, sort: str) -> bool:
        return not self.states_with(sort)

    def included(self, small: str, big: str) -> bool:
        """Every term of ``small`` is a term of ``big`` (exact, over reachable states)."""
        return small == big or all(big in q for q in self.states_with(small))

    def overlap(self, a: str, b: str) -> bool:
        return any(b in q for q in self.states_with(a))

    def sorts_including(self, sorts: Iterable[str]) -> frozenset[str]:
        """The sorts guaranteed to contain every member of all of ``sorts``' intersection."""
        sorts = list(sorts)
        states = [q for q in self.reachable if all(s in q for s in sorts)]
        if not states:
            return frozenset(sorts)
        return frozenset.intersection(*states)

    # ------------------------------------------------------------ replacement

    def frames(self) -> list[tuple[str, int, tuple[State, ...]]]:
        """Every one-constructor context with its hole at argument ``i`` and
        reachable states for the other arguments: ``(con, i, others)``."""
        got = self.__dict__.get("_frames")
        if got is None:
            got = []
            for con, shape in self.calc.shapes.items():
                if con not in self.alts:
                    continue
                k = shape.arity
                for i in range(k):
                    for others in itertools.product(self.reachable, repeat=k - 1):
                        got.append((con, i, others))
            self.__dict__["_frames"] = got
        return got

    def replacement_loss(self, old: State, new: State) -> list[tuple[str, int]] | None:
        """Whether a subterm of state ``old`` may be replaced by one of state
        ``new`` in every context without leaving the grammar: None if so,
        else a context (frames ``(con, hole)``, innermost first) in which the
        term with ``old`` has sorts and the term with ``new`` has none.

        The only thing a context observes is the state, so this is
        reachability in the product of the automaton with itself, from
        ``(old, new)`` to a pair ``(q, EMPTY)`` with ``q`` non-empty; pairs with
        ``q <= q'`` are never searched further (transitions are monotone).
        """
        if not old:
            return None
        start = (old, new)
        parent: dict[tuple[State, State], tuple] = {start: None}
        todo = [start]
        while todo:
            nxt = []
            for pair in todo:
                q, q2 = pair
                if q and not q2:
                    path = []
                    while parent[pair] is not None:
                        pair, frame = parent[pair]
                        path.append(frame)
                    return path[::-1] or []
                if q <= q2:
                    continue
                for con, i, others in self.frames():
                    a = self.delta(con, others[:i] + (q,) + others[i:])
                    if not a:
                        continue
                    b = self.delta(con, others[:i] + (q2,) + others[i:])
                    succ = (a, b)
                    if succ not in parent:
                        parent[succ] = (pair, (con, i))
                        nxt.append(succ)
            todo = nxt
        return None


_grammars: dict[int, Grammar] = {}


def grammar(calc: Calculus) -> Grammar:
    """The automaton of ``calc``, built once per calculus object."""
    g = _grammars.get(id(calc))
    if g is None or g.calc is not calc:
        g = Grammar(calc)
        _grammars[id(calc)] = g
    return g
