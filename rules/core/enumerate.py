"""All terms of a sort by increasing size, each α-class once, and their exact counts.

The enumeration runs over the states of the determinised sort automaton
(:mod:`calcscout.rules.core.sorts`), not over the sorts: the terms of sort ``S`` are the
disjoint union, over the reachable states ``q`` with ``S in q``, of the terms
whose state is ``q``.  So a term is produced once however ambiguous the
grammar is (two alternatives deriving the same term give it one state).

Bound names are de Bruijn indices (:mod:`calcscout.rules.core.terms`), so α-classes are
canonical for them.  Free names are made canonical by first occurrence from
left to right (LANGUAGE.md §4): the recursion threads how many free names of
each names sort were used so far, ``T(class, size, env, used) -> (term,
used_after)``; a free name is either one already used or the next canonical
name of its sort.  Counting is the same recurrence with numbers instead of
terms, so it never builds a term.

Streaming: every level is a generator; only lists of at most
:data:`MEMO_ITEMS` subterms are kept (within a budget of
:data:`MEMO_BUDGET` in all), so memory does not grow with the stream.

Sharding (``shard=(i, n)``) yields the items whose position in the stream is
``i - 1`` modulo ``n``; blocks of the stream that hold no wanted item are
skipped by their count, without building their terms.

>>> from calcscout.rules.core.spec import Arg, AltCon, AltNames, Calculus, NamesSort, Shape, Sort
>>> lam = Calculus("lam", {"var": NamesSort("var", ("x", "y"))},
...     {"term": Sort("term", ("M", "N"), (AltNames("var"),
...         AltCon("lam", (Arg(("var",), "term"),)),
...         AltCon("app", (Arg((), "term"), Arg((), "term")))))},
...     {"lam": Shape("lam", (("var",),)), "app": Shape("app", ((), ()))},
...     (), metas={"x": "var", "y": "var", "M": "term", "N": "term"})
>>> from calcscout.rules.core.terms import debug_str
>>> [debug_str(t) for t in enumerate_terms(lam, "term", 3, 2)]
['x', 'lam(.^0)', 'lam(.x)', 'lam(.lam(.^0))', 'lam(.lam(.^1))', 'lam(.lam(.x))', 'app(x, x)', 'app(x, y)']
>>> count_by_size(lam, "term", 6, 0)
[0, 0, 1, 2, 4, 13, 42]
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Iterable, Iterator, Sequence

from calcscout.rules.core.sorts import EMPTY, Grammar, State, grammar
from calcscout.rules.core.spec import Calculus
from calcscout.rules.core.terms import Term, bound, name, node

#: Lists of at most this many subterms are memoised ...
MEMO_ITEMS = 2048
#: ... up to this many memoised subterms in all, per enumeration.
MEMO_BUDGET = 100_000

Used = tuple[int, ...]  # free names used so far, per names key of the space
Counts = dict[Used, int]  # used_after -> number of terms
Item = tuple[Term, Used]


# ---------------------------------------------------------------- public API


def enumerate_terms(
    calc: Calculus,
    sort: str,
    max_size: int,
    max_names: int,
    min_size: int = 1,
    shard: tuple[int, int] | None = None,
) -> Iterator[Term]:
    """The terms of ``sort`` with ``min_size <= size <= max_size`` and at most
    ``max_names`` distinct free names, each α-class once, smallest first."""
    space = _Space([calc], max_names)
    top = space.slot(calc, sort)
    start, stride = _shard(shard)
    sizes = range(max(min_size, 1), max_size + 1)
    blocks = (
        (top.total(n, space.zero), _size_block(top, n, space.zero)) for n in sizes
    )
    for term, _ in _strided(blocks, start, stride):
        yield term


def count_by_size(calc: Calculus, sort: str, max_size: int, max_names: int) -> list[int]:
    """``out[n]`` is the number of terms of ``sort`` of size ``n`` (``0 <= n <= max_size``)."""
    space = _Space([calc], max_names)
    top = space.slot(calc, sort)
    return [0] + [top.total(n, space.zero) for n in range(1, max_size + 1)]


def count_terms(
    calc: Calculus, sort: str, max_size: int, max_names: int, min_size: int = 1
) -> int:
    """How many terms :func:`enumerate_terms` yields, computed without building them."""
    return sum(count_by_size(calc, sort, max_size, max_names)[max(min_size, 0):])


def enumerate_tuples(
    slots: Sequence[tuple[Calculus, str]],
    max_total_size: int,
    max_names: int,
    min_total_size: int = 1,
    shard: tuple[int, int] | None = None,
) -> Iterator[tuple[Term, ...]]:
    """Tuples of terms, one per ``(calc, sort)`` slot, whose sizes sum to at most
    ``max_total_size``, by increasing total size.

    The tuple is taken up to renaming of its free names as a whole: names are
    canonical jointly, left to right across the tuple, and there are at most
    ``max_names`` distinct names in it.  Names sorts of different calculi with
    the same declared names (``names var x y z`` in both) share their names.
    """
    if not slots:
        if min_total_size <= 0 and _in_shard(0, shard):
            yield ()
        return
    space = _Space([c for c, _ in slots], max_names)
    specs = tuple(space.slot(c, s).spec() for c, s in slots)
    cspecs = _count_specs(specs)
    start, stride = _shard(shard)
    sizes = range(max(min_total_size, len(specs)), max_total_size + 1)
    blocks = (
        (space.seq_total(cspecs, n, space.zero), _tuple_block(space, specs, cspecs, n))
        for n in sizes
    )
    for terms, _ in _strided(blocks, start, stride):
        yield terms


def count_tuples(
    slots: Sequence[tuple[Calculus, str]],
    max_total_size: int,
    max_names: int,
    min_total_size: int = 1,
) -> int:
    """How many tuples :func:`enumerate_tuples` yields, without building them."""
    if not slots:
        return 1 if min_total_size <= 0 else 0
    space = _Space([c for c, _ in slots], max_names)
    cspecs = _count_specs(tuple(space.slot(c, s).spec() for c, s in slots))
    low = max(min_total_size, len(cspecs))
    return sum(space.seq_total(cspecs, n, space.zero) for n in range(low, max_total_size + 1))


# ---------------------------------------------------------------- sharding


def _shard(shard: tuple[int, int] | None) -> tuple[int, int]:
    if shard is None:
        return 0, 1
    i, n = shard
    if n < 1 or not 1 <= i <= n:
        raise ValueError(f"shard {i}/{n}: need 1 <= i <= n")
    return i - 1, n


def _in_shard(index: int, shard: tuple[int, int] | None) -> bool:
    start, stride = _shard(shard)
    return index % stride == start


Block = tuple[int, Callable[[int, int], Iterator]]


def _strided(blocks: Iterable[Block], start: int, stride: int) -> Iterator:
    """The items at positions ``start, start + stride, ...`` of the concatenated
    blocks; a block is (its number of items, a function giving its items from a
    local start with the stride).  Blocks holding no wanted item are not opened."""
    pos = 0
    want = start
    for count, make in blocks:
        if not count:
            continue
        end = pos + count
        if want < end:
            yield from make(want - pos, stride)
            want += stride * (-(-(end - want) // stride))
        pos = end


def _size_block(top: _TupleSlot, n: int, used: Used) -> Callable[[int, int], Iterator]:
    return lambda start, stride: top.enum.gen_strided(top.cls, n, (), top.enum.zero_env,
                                                      used, start, stride)


def _tuple_block(space: _Space, specs: tuple, cspecs: tuple,
                 n: int) -> Callable[[int, int], Iterator]:
    return lambda start, stride: space.prod_strided(specs, cspecs, n, space.zero, start, stride)


# ---------------------------------------------------------------- machinery


class _Space:
    """What the slots of one enumeration share: the free-name counters and memos.

    A names key is the tuple of a names sort's declared names, so that names
    sorts spelt alike in two calculi share their canonical names.
    """

    def __init__(self, calcs: Sequence[Calculus], max_names: int):
        if max_names < 0:
            raise ValueError("max_names is never negative")
        self.max_names = max_names
        keys: dict[tuple[str, ...], int] = {}
        for calc in calcs:
            for ns in calc.names_sorts.values():
                keys.setdefault(_names_key(ns.name, ns.metas), len(keys))
        self.keys = keys
        self.zero: Used = (0,) * len(keys)
        self.enums: dict[int, _Enum] = {}
        self._seq: dict[tuple, Counts] = {}
        self.memo: dict[tuple, list[Item]] = {}
        self.memo_left = MEMO_BUDGET

    def slot(self, calc: Calculus, sort: str) -> _TupleSlot:
        enum = self.enums.get(id(calc))
        if enum is None:
            enum = self.enums[id(calc)] = _Enum(calc, self)
        return _TupleSlot(enum, enum.sort_class(sort))

    # A spec is (enum, class, env, envc): one child to fill; its count spec is
    # (enum, class, envc), since counts do not depend on the order of env.

    def seq_counts(self, cspecs: tuple, n: int, used: Used) -> Counts:
        """Distribution of used_after over the sequences filling ``cspecs`` with
        total size ``n`` (each child at least 1), names threaded left to right."""
        k = len(cspecs)
        if k == 1:
            enum, cls, envc = cspecs[0]
            return enum.counts(cls, n, envc, used)
        key = (cspecs, n, used)
        got = self._seq.get(key)
        if got is not None:
            return got
        out: Counts = {}
        enum, cls, envc = cspecs[0]
        rest = cspecs[1:]
        for s in range(1, n - k + 2):
            for u1, c1 in enum.counts(cls, s, envc, used).items():
                for u2, c2 in self.seq_counts(rest, n - s, u1).items():
                    out[u2] = out.get(u2, 0) + c1 * c2
        self._seq[key] = out
        return out

    def seq_total(self, cspecs: tuple, n: int, used: Used) -> int:
        return sum(self.seq_counts(cspecs, n, used).values())

    def prod(self, specs: tuple, cspecs: tuple, n: int,
             used: Used) -> Iterator[tuple[tuple[Term, ...], Used]]:
        """Every sequence of terms filling ``specs`` with total size ``n``."""
        enum, cls, env, envc = specs[0]
        if len(specs) == 1:
            for t, u in enum.gen(cls, n, env, envc, used):
                yield (t,), u
            return
        rest = specs[1:]
        crest = cspecs[1:]
        k = len(specs)
        for s in range(1, n - k + 2):
            if not enum.total(cls, s, envc, used):
                continue
            if len(rest) == 1:
                renum, rcls, renv, renvc = rest[0]
                for t, u in enum.gen(cls, s, env, envc, used):
                    for t2, u2 in renum.gen(rcls, n - s, renv, renvc, u):
                        yield (t, t2), u2
            else:
                for t, u in enum.gen(cls, s, env, envc, used):
                    if not self.seq_total(crest, n - s, u):
                        continue
                    for more, u2 in self.prod(rest, crest, n - s, u):
                        yield (t, *more), u2

    def prod_strided(
        self, specs: tuple, cspecs: tuple, n: int, used: Used, start: int, stride: int
    ) -> Iterator[tuple[tuple[Term, ...], Used]]:
        """The items of :meth:`prod` at positions ``start, start + stride, ...``."""
        if stride == 1 and start == 0:
            yield from self.prod(specs, cspecs, n, used)
            return
        enum, cls, env, envc = specs[0]
        if len(specs) == 1:
            for t, u in enum.gen_strided(cls, n, env, envc, used, start, stride):
                yield (t,), u
            return
        rest = specs[1:]
        crest = cspecs[1:]

        def firsts(s: int) -> Iterator[Block]:
            for t, u in enum.gen(cls, s, env, envc, used):
                yield self.seq_total(crest, n - s, u), _after(self, t, rest, crest, n - s, u)

        def sizes() -> Iterator[Block]:
            for s in range(1, n - len(specs) + 2):
                block = sum(
                    c * self.seq_total(crest, n - s, u)
                    for u, c in enum.counts(cls, s, envc, used).items()
                )
                yield block, lambda a, b, s=s: _strided(firsts(s), a, b)

        yield from _strided(sizes(), start, stride)


def _after(space: _Space, t: Term, rest: tuple, crest: tuple, n: int, used: Used):
    def make(start: int, stride: int):
        for more, u in space.prod_strided(rest, crest, n, used, start, stride):
            yield (t, *more), u

    return make


def _count_specs(specs: tuple) -> tuple:
    return tuple((e, c, ec) for e, c, _, ec in specs)


def _names_key(ns: str, metas: tuple[str, ...]) -> tuple[str, ...]:
    return metas or (ns,)


class _TupleSlot:
    __slots__ = ("enum", "cls")

    def __init__(self, enum: _Enum, cls: tuple[int, ...]):
        self.enum = enum
        self.cls = cls

    def total(self, n: int, used: Used) -> int:
        return self.enum.total(self.cls, n, self.enum.zero_env, used)

    def spec(self) -> tuple:
        return (self.enum, self.cls, (), self.enum.zero_env)


class _Class:
    """What a set of states (a class) can be built from: its productions.

    ``names``: local names sorts whose names have a state of the class;
    ``nullary``: constants; ``nodes``: (con, binders, children) where each
    child is (class, names sorts its binders add to the environment, innermost
    first)."""

    __slots__ = ("names", "nullary", "nodes")

    def __init__(self, names, nullary, nodes):
        self.names: tuple[int, ...] = names
        self.nullary: tuple[Term, ...] = nullary
        self.nodes: tuple[tuple[str, tuple[int, ...], tuple], ...] = nodes


class _Enum:
    """The recurrences over one calculus's automaton, within a :class:`_Space`.

    A class is a sorted tuple of state ids (a disjoint union of states); an
    environment ``env`` lists the local names sort of each bound index (index
    0 first) and ``envc`` counts them per names sort, which is all a count
    depends on.
    """

    def __init__(self, calc: Calculus, space: _Space):
        self.calc = calc
        self.space = space
        self.g: Grammar = grammar(calc)
        self.states: tuple[State, ...] = self.g.reachable
        self.sid = {q: i for i, q in enumerate(self.states)}
        self.ns_names = tuple(calc.names_sorts)
        self.ns_state = tuple(self.g.names_state.get(ns, EMPTY) for ns in self.ns_names)
        self.gidx = tuple(
            space.keys[_names_key(ns, calc.names_sorts[ns].metas)] for ns in self.ns_names
        )
        self.zero_env: tuple[int, ...] = (0,) * len(self.ns_names)
        self._canon: list[list[Term]] = [[] for _ in self.ns_names]
        self._classes: dict[tuple[int, ...], _Class] = {}
        self._counts: dict[tuple, Counts] = {}
        self._groups = self._position_groups()

    # ------------------------------------------------------------ grammar side

    def sort_class(self, sort: str) -> tuple[int, ...]:
        """The class of a sort's states; a names sort (a claim's ``x`` in ``M[x := V]``)
        is the class ``(-1 - i,)``, whose only terms are names of its ``i``-th names sort."""
        if sort in self.calc.names_sorts:
            return (-1 - self.ns_names.index(sort),)
        if sort not in self.g.sort_names:
            kind = "a context sort" if sort in self.calc.sorts else "not a sort"
            raise ValueError(f"{sort} is {kind} of calculus {self.calc.name}")
        return tuple(self.sid[q] for q in self.g.states_with(sort))

    def _position_groups(self) -> dict[str, list[list[tuple[int, ...]]]]:
        """Per constructor and argument position, the reachable states grouped by
        what the constructor's alternatives can see of them (the argument sorts
        they ask for); the result state depends on nothing else."""
        out: dict[str, list[list[tuple[int, ...]]]] = {}
        for con, shape in self.calc.shapes.items():
            alts = [a for _, a in self.g.alts.get(con, ()) if len(a) == shape.arity]
            if not alts or shape.arity == 0:
                continue
            per_pos = []
            for i in range(shape.arity):
                wanted = {a[i] for a in alts}
                groups: dict[frozenset[str], list[int]] = {}
                for sid, q in enumerate(self.states):
                    seen = q & wanted
                    if seen:
                        groups.setdefault(frozenset(seen), []).append(sid)
                per_pos.append([tuple(v) for v in groups.values()])
            out[con] = per_pos
        return out

    def klass(self, cls: tuple[int, ...]) -> _Class:
        got = self._classes.get(cls)
        if got is not None:
            return got
        if cls and cls[0] < 0:  # the names of one names sort
            got = self._classes[cls] = _Class((-1 - cls[0],), (), ())
            return got
        members = {self.states[i] for i in cls}
        names = tuple(i for i, q in enumerate(self.ns_state) if q and q in members)
        nullary = []
        nodes = []
        local = {ns: i for i, ns in enumerate(self.ns_names)}
        for con, shape in self.calc.shapes.items():
            if con not in self.g.alts:
                continue
            if shape.arity == 0:
                if self.g.delta(con, ()) in members:
                    nullary.append(node(con, ()))
                continue
            per_pos = self._groups.get(con)
            if per_pos is None:
                continue
            # innermost binder first: in x.y.M, y is index 0
            binds = tuple(tuple(local[b] for b in reversed(bs)) for bs in shape.binder_sorts)
            for combo in itertools.product(*per_pos):
                q = self.g.delta(con, tuple(self.states[grp[0]] for grp in combo))
                if q in members:
                    nodes.append((con, shape.binders, tuple(zip(combo, binds, strict=True))))
        got = _Class(names, tuple(nullary), tuple(nodes))
        self._classes[cls] = got
        return got

    def canon(self, li: int, j: int) -> Term:
        names = self._canon[li]
        while len(names) <= j:
            ns = self.calc.names_sorts[self.ns_names[li]]
            names.append(name(ns.canonical_name(len(names))))
        return names[j]

    def _children(self, children: tuple, env: tuple[int, ...], envc: tuple[int, ...]) -> tuple:
        specs = []
        for cls, bind in children:
            if bind:
                c = list(envc)
                for b in bind:
                    c[b] += 1
                specs.append((self, cls, bind + env, tuple(c)))
            else:
                specs.append((self, cls, env, envc))
        specs_t = tuple(specs)
        return specs_t, _count_specs(specs_t)

    # ------------------------------------------------------------ counting

    def counts(self, cls: tuple[int, ...], n: int, envc: tuple[int, ...], used: Used) -> Counts:
        key = (cls, n, envc, used)
        got = self._counts.get(key)
        if got is not None:
            return got
        out: Counts = {}
        k = self.klass(cls)
        if n == 1:
            same = len(k.nullary)
            free_left = self.space.max_names - sum(used)
            for li in k.names:
                g = self.gidx[li]
                same += envc[li] + used[g]
                if free_left > 0:
                    after = used[:g] + (used[g] + 1,) + used[g + 1:]
                    out[after] = out.get(after, 0) + 1
            if same:
                out[used] = out.get(used, 0) + same
        elif n > 1:
            for _, _, children in k.nodes:
                if len(children) > n - 1:
                    continue
                _, cspecs = self._children(children, (), envc)
                for u, c in self.space.seq_counts(cspecs, n - 1, used).items():
                    out[u] = out.get(u, 0) + c
        self._counts[key] = out
        return out

    def total(self, cls: tuple[int, ...], n: int, envc: tuple[int, ...], used: Used) -> int:
        return sum(self.counts(cls, n, envc, used).values())

    # ------------------------------------------------------------ generating

    def gen(self, cls, n: int, env: tuple[int, ...], envc: tuple[int, ...],
            used: Used) -> Iterator[Item]:
        """Every (term, used_after) of class ``cls`` and size ``n``."""
        space = self.space
        key = (self, cls, n, env, used)
        got = space.memo.get(key)
        if got is not None:
            return iter(got)
        total = self.total(cls, n, envc, used)
        if not total:
            return iter(())
        if total <= MEMO_ITEMS and total <= space.memo_left:
            items = list(self._gen(cls, n, env, envc, used))
            space.memo[key] = items
            space.memo_left -= total
            return iter(items)
        return self._gen(cls, n, env, envc, used)

    def _gen(self, cls, n, env, envc, used) -> Iterator[Item]:
        k = self.klass(cls)
        if n == 1:
            free_left = self.space.max_names - sum(used)
            for li in k.names:
                for i, b in enumerate(env):
                    if b == li:
                        yield bound(i), used
                g = self.gidx[li]
                for j in range(used[g]):
                    yield self.canon(li, j), used
                if free_left > 0:
                    yield self.canon(li, used[g]), used[:g] + (used[g] + 1,) + used[g + 1:]
            for t in k.nullary:
                yield t, used
            return
        space = self.space
        for con, binders, children in k.nodes:
            if len(children) > n - 1:
                continue
            specs, cspecs = self._children(children, env, envc)
            if len(specs) == 1:
                _, ccls, cenv, cenvc = specs[0]
                for t, u in self.gen(ccls, n - 1, cenv, cenvc, used):
                    yield node(con, (t,), binders), u
            else:
                for args, u in space.prod(specs, cspecs, n - 1, used):
                    yield node(con, args, binders), u

    def gen_strided(self, cls, n: int, env: tuple[int, ...], envc: tuple[int, ...],
                    used: Used, start: int, stride: int) -> Iterator[Item]:
        """The items of :meth:`gen` at positions ``start, start + stride, ...``."""
        if stride == 1 and start == 0:
            return self.gen(cls, n, env, envc, used)
        got = self.space.memo.get((self, cls, n, env, used))
        if got is not None:
            return itertools.islice(got, start, None, stride)
        if n == 1:
            return itertools.islice(self._gen(cls, n, env, envc, used), start, None, stride)
        return _strided(self._node_blocks(cls, n, env, envc, used), start, stride)

    def _node_blocks(self, cls, n, env, envc, used) -> Iterator[Block]:
        space = self.space
        for con, binders, children in self.klass(cls).nodes:
            if len(children) > n - 1:
                continue
            specs, cspecs = self._children(children, env, envc)
            count = space.seq_total(cspecs, n - 1, used)
            yield count, _wrap(space, con, binders, specs, cspecs, n - 1, used)


def _wrap(space: _Space, con: str, binders: tuple[int, ...], specs: tuple, cspecs: tuple,
          n: int, used: Used):
    def make(start: int, stride: int) -> Iterator[Item]:
        for args, u in space.prod_strided(specs, cspecs, n, used, start, stride):
            yield node(con, args, binders), u

    return make


# ---------------------------------------------------------------- positions


def tuple_position(
    slots: Sequence[tuple[Calculus, str]], terms: Sequence[Term], max_names: int
) -> int:
    """The position (from 0) of ``terms`` among the tuples of its total size, in the order of
    :func:`enumerate_tuples`; computed from counts, without building the tuples before it.

    So a tuple's index in the whole stream is ``count_tuples(slots, n - 1, max_names)`` plus
    this, where ``n`` is its total size.  ``terms`` must be one of the stream's tuples (its
    free names canonical); otherwise :class:`ValueError`.
    """
    if len(terms) != len(slots):
        raise ValueError("one term per slot")
    space = _Space([c for c, _ in slots], max_names)
    specs = tuple(space.slot(c, s).spec() for c, s in slots)
    n = sum(t.size for t in terms)
    before, _ = _seq_before(space, specs, n, space.zero, tuple(terms))
    return sum(before.values())


def _seq_before(space: _Space, specs: tuple, n: int, used: Used,
                terms: tuple[Term, ...]) -> tuple[Counts, Used]:
    """The used_after distribution of the sequences :meth:`_Space.prod` yields before
    ``terms``, and the used_after of ``terms`` itself."""
    enum, cls, env, envc = specs[0]
    first = terms[0]
    if len(specs) == 1:
        if first.size != n:
            raise ValueError("the sizes do not add up")
        return _term_before(enum, cls, n, env, envc, used, first)
    crest = _count_specs(specs[1:])
    out: Counts = {}

    def add(dist: Counts) -> None:
        for u, c in dist.items():
            for u2, c2 in space.seq_counts(crest, n - s, u).items():
                out[u2] = out.get(u2, 0) + c * c2

    for s in range(1, first.size):
        add(enum.counts(cls, s, envc, used))
    s = first.size
    head, u1 = _term_before(enum, cls, s, env, envc, used, first)
    add(head)
    rest, u_end = _seq_before(space, specs[1:], n - s, u1, terms[1:])
    for u, c in rest.items():
        out[u] = out.get(u, 0) + c
    return out, u_end


def _term_before(enum: _Enum, cls: tuple[int, ...], n: int, env: tuple[int, ...],
                 envc: tuple[int, ...], used: Used, t: Term) -> tuple[Counts, Used]:
    """As :func:`_seq_before`, for the terms :meth:`_Enum.gen` yields before ``t``."""
    out: Counts = {}
    if n == 1:
        for item, u in enum._gen(cls, 1, env, envc, used):
            if item is t:
                return out, u
            out[u] = out.get(u, 0) + 1
        raise ValueError(f"{t!r} is not among the terms enumerated here")
    names = tuple(enum.ns_names[i] for i in env)
    for con, binders, children in enum.klass(cls).nodes:
        if len(children) > n - 1:
            continue
        specs, cspecs = enum._children(children, env, envc)
        if (getattr(t, "con", None) == con and t.binders == binders  # type: ignore[attr-defined]
                and all(enum.sid.get(enum.g.state(a, tuple(enum.ns_names[b] for b in bind)
                                                   + names), -1) in group
                        for a, (group, bind) in zip(t.args, children,  # type: ignore[attr-defined]
                                                    strict=True))):
            inner, u = _seq_before(enum.space, specs, n - 1, used,
                                   t.args)  # type: ignore[attr-defined]
            for k, c in inner.items():
                out[k] = out.get(k, 0) + c
            return out, u
        for u, c in enum.space.seq_counts(cspecs, n - 1, used).items():
            out[u] = out.get(u, 0) + c
    raise ValueError(f"{t!r} is not among the terms enumerated here")
