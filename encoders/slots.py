"""The size-bounded node array: every term of a sort up to size N as solver variables.

Slot ``m`` holds one node of a term laid out in postorder: its tag (a
*production*: a constructor with the automaton states allowed for its
arguments, a free name, a bound name, a constant), its automaton state, the
first slot of its subtree (``start``) and pointers to its children, counted
from the right: the last child is slot ``m - 1``, the one before it ends just
before the last one's subtree starts, and so on.  A term rooted at slot ``k``
whose subtree starts at slot 0 has exactly ``k + 1`` nodes, so asking about
size ``k + 1`` is one more slot and one assumption literal (SMT-NOTES.md: the
incremental node array).

Each slot's term is typed by the automaton's states (Comon et al., TATA
ch. 1): ``term(m, q)`` is slot ``m``'s term where its state is ``q``, a
choice over the productions of ``q``; an argument is a choice first over the
allowed states, then over the slot that holds it.  So the sort of every
branch is known without the solver, and matching on sorts splits only on
states, which keeps a translation's first-match order static on well-sorted
input.

Names: a free name is the i-th canonical name of its names sort, with the
canonicity of enumeration (first occurrences left to right, which postorder
keeps); a bound name points at the slot and position of its binder, which
must be an ancestor whose binding argument contains the leaf.  Binders are
named after their slot (``#var:s7.0.0``), so the encoded terms are in the
named world of :mod:`calcscout.encoders.symbolic`.
"""

from __future__ import annotations

from dataclasses import dataclass

import z3

from calcscout.encoders.symbolic import Store, Sym
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.sorts import grammar
from calcscout.rules.core.spec import Calculus


@dataclass(frozen=True)
class Prod:
    pid: int
    state: int
    kind: str  # 'free', 'bound', 'const', 'node'
    con: str = ""
    groups: tuple[tuple[int, ...], ...] = ()  # per argument: the state ids it may have
    bsorts: tuple[tuple[str, ...], ...] = ()  # per argument: names sorts it binds
    ns: str = ""
    index: int = 0

    @property
    def arity(self) -> int:
        return len(self.groups)


class Universe:
    """The slots of the terms of one calculus, up to ``max_size`` nodes in all."""

    def __init__(self, store: Store, calc: Calculus, max_size: int, max_names: int,
                 ctx: z3.Context, prefix: str = ""):
        self.store = store
        self.calc = calc
        self.N = max_size
        self.K = max_names
        self.ctx = ctx
        self.p = prefix
        g = self.g = grammar(calc)
        self.states = g.reachable
        self.sid = {q: i for i, q in enumerate(self.states)}
        self.prods: list[Prod] = []
        self._combo_index: dict[str, dict[tuple, int]] = {}
        self._build_prods()
        self.A = max((p.arity for p in self.prods), default=0)
        self.J = max((len(b) for p in self.prods for b in p.bsorts), default=0)
        self.binding = [(p, a, j, ns) for p in self.prods if p.kind == "node"
                        for a, bs in enumerate(p.bsorts) for j, ns in enumerate(bs)]
        self._vars: dict[tuple, z3.ArithRef] = {}
        self._terms: dict[tuple, Sym | None] = {}
        self.added = 0  # slots whose constraints are asserted

    # ------------------------------------------------------------ grammar

    def _build_prods(self) -> None:
        g = self.g
        calc = self.calc
        binds_ns = {ns for sh in calc.shapes.values() for bs in sh.binder_sorts for ns in bs}
        for q, i in self.sid.items():
            for ns in calc.names_sorts:
                if g.names_state.get(ns) == q:
                    for j in range(self.K):
                        self._add(Prod(0, i, "free", ns=ns, index=j))
                    if ns in binds_ns:
                        self._add(Prod(0, i, "bound", ns=ns))
        for con, shape in calc.shapes.items():
            if con not in g.alts:
                continue
            if shape.arity == 0:
                q = g.delta(con, ())
                if q:
                    self._add(Prod(0, self.sid[q], "const", con))
                continue
            alts = [a for _, a in g.alts[con] if len(a) == shape.arity]
            per_pos = []
            for i in range(shape.arity):
                wanted = {a[i] for a in alts}
                groups: dict[frozenset, list[int]] = {}
                for q, sid in self.sid.items():
                    seen = q & wanted
                    if seen:
                        groups.setdefault(frozenset(seen), []).append(sid)
                per_pos.append([tuple(v) for v in groups.values()])
            import itertools

            self._combo_index[con] = {c: i for i, c in enumerate(itertools.product(*per_pos))}
            for combo in itertools.product(*per_pos):
                q = g.delta(con, tuple(self.states[grp[0]] for grp in combo))
                if q:
                    self._add(Prod(0, self.sid[q], "node", con, tuple(combo), shape.binder_sorts))

    def order_key(self, p: Prod) -> tuple:
        """Where the terms made by ``p`` come in the enumeration's order, among the
        productions a slot of one size may take (calcscout.rules.core.enumerate: at size 1 per names
        sort its bound names then its free names, then the constants; above, the
        constructors in declaration order, each with its argument states' groups in
        product order).  A bound name's place among the others is its binder's
        (:meth:`ref_key`)."""
        names = list(self.calc.names_sorts)
        cons = list(self.calc.shapes)
        if p.kind == "bound":
            return (names.index(p.ns), 0, 0)
        if p.kind == "free":
            return (names.index(p.ns), 1, p.index)
        if p.kind == "const":
            return (len(names), 2, cons.index(p.con))
        return (cons.index(p.con), self._combo_index[p.con][p.groups])

    def ref_key(self, code: int) -> tuple[int, int]:
        """The enumeration's order of bound names, innermost binder first: the nearest
        enclosing slot first (postorder puts nearer ancestors at lower slots), and within
        one argument the last of its binders first."""
        r, rest = divmod(code, max(self.A, 1) * max(self.J, 1))
        return (r, -(rest % max(self.J, 1)))

    def ref_codes(self, m: int, ns: str) -> list[int]:
        """The codes a bound name of ``ns`` at slot ``m`` may point at."""
        return sorted({self.code(r, a, j) for r in range(m + 1, self.N)
                       for _p, a, j, bns in self.binding if bns == ns})

    def _add(self, p: Prod) -> None:
        self.prods.append(Prod(len(self.prods), p.state, p.kind, p.con, p.groups, p.bsorts,
                               p.ns, p.index))

    # ------------------------------------------------------------ variables

    def var(self, kind: str, m: int, i: int | str = "") -> z3.ArithRef:
        key = (kind, m, i)
        v = self._vars.get(key)
        if v is None:
            suffix = f"_{i}" if i != "" else ""
            v = self._vars[key] = z3.Int(f"{self.p}{kind}{m}{suffix}", self.ctx)
        return v

    def tag(self, m: int):
        return self.var("t", m)

    def state_var(self, m: int):
        return self.var("s", m)

    def start(self, m: int):
        return self.var("st", m)

    def ptr(self, m: int, i: int):
        return self.var("q", m, i)

    def cstate(self, m: int, i: int):
        return self.var("c", m, i)

    def ref(self, m: int):
        return self.var("r", m)

    def used(self, m: int, ns: str):
        if m < 0:
            return z3.IntVal(0, self.ctx)
        return self.var("u", m, ns)

    def code(self, r: int, a: int, j: int) -> int:
        return (r * max(self.A, 1) + a) * max(self.J, 1) + j

    def code_limit(self, slots: int) -> int:
        return slots * max(self.A, 1) * max(self.J, 1)

    def binder_name(self, ns: str, r: int, a: int, j: int) -> str:
        return f"#{ns}:s{r}.{a}.{j}"

    # ------------------------------------------------------------ constraints

    def feasible(self, m: int) -> list[Prod]:
        return [p for p in self.prods if p.arity <= m and (p.kind != "bound" or m + 1 < self.N)]

    def slot_constraints(self, m: int) -> list:
        """What every slot ``m`` satisfies, whatever term it belongs to."""
        if m >= self.N:
            raise EncodingError(f"slot {m} beyond the encoding's size {self.N}")
        t, s, st, ref = self.tag(m), self.state_var(m), self.start(m), self.ref(m)
        out = []
        feas = self.feasible(m)
        if not feas:
            raise EncodingError(f"calculus {self.calc.name} has no term of size 1 to start from")
        out.append(z3.Or([t == p.pid for p in feas]))
        names_sorts = [ns for ns in self.calc.names_sorts]
        free = [p for p in feas if p.kind == "free"]
        for p in feas:
            body = [s == p.state]
            if p.arity == 0:
                body.append(st == m)
            else:
                r = p.arity
                body += [self.ptr(m, r - 1) >= 0, st == self.ptr(m, r) + 1]
                for a in range(r):
                    i = r - 1 - a
                    body.append(z3.Or([self.cstate(m, i) == x for x in p.groups[a]]))
            if p.kind == "free":
                prev = self.used(m - 1, p.ns)
                body += [prev >= p.index, self.used(m, p.ns) == z3.If(prev > p.index, prev,
                                                                      p.index + 1)]
                body += [self.used(m, ns) == self.used(m - 1, ns) for ns in names_sorts
                         if ns != p.ns]
            if p.kind == "bound":
                body.append(self._ref_valid(m, p.ns))
            else:
                body.append(ref == -1)
            out.append(z3.Implies(t == p.pid, z3.And(body)))
        if names_sorts:
            keep = z3.And([self.used(m, ns) == self.used(m - 1, ns) for ns in names_sorts])
            out.append(z3.Or([t == p.pid for p in free] + [keep]) if free else keep)
            out.append(z3.Sum([self.used(m, ns) for ns in names_sorts]) <= self.K)
        if self.A:
            out.append(self.ptr(m, 0) == m - 1)
            for i in range(self.A):
                qi = self.ptr(m, i)
                for j in range(m):
                    out.append(z3.Implies(qi == j, z3.And(self.ptr(m, i + 1) == self.start(j) - 1,
                                                          self.cstate(m, i) == self.state_var(j))))
                out.append(z3.Implies(qi < 0, self.ptr(m, i + 1) == -1))
        return out

    def _ref_valid(self, m: int, ns: str):
        options = []
        for r in range(m + 1, self.N):
            by_code: dict[int, list] = {}
            for p, a, j, bns in self.binding:
                if bns != ns:
                    continue
                i = p.arity - 1 - a
                cond = z3.And(self.tag(r) == p.pid, self.ptr(r, i + 1) + 1 <= m,
                              m <= self.ptr(r, i))
                by_code.setdefault(self.code(r, a, j), []).append(cond)
            for c, conds in by_code.items():
                options.append(z3.And(self.ref(m) == c, z3.Or(conds)))
        return z3.Or(options) if options else z3.BoolVal(False, self.ctx)

    def add_slots(self, upto: int) -> list:
        """The constraints of the slots not yet added, up to slot ``upto``."""
        out = []
        while self.added <= upto:
            self.store.check_budget()
            out.extend(self.slot_constraints(self.added))
            self.added += 1
        return out

    # ------------------------------------------------------------ terms

    def term(self, m: int, q: int) -> Sym | None:
        """Slot ``m``'s term where its state is ``q`` (None: no such term fits there)."""
        key = ("T", m, q)
        if key in self._terms:
            return self._terms[key]
        st = self.store
        guards, branches = [], []
        t = self.tag(m)
        for p in self.feasible(m):
            if p.state != q:
                continue
            b = self._prod_term(m, p)
            if b is not None:
                guards.append(t == p.pid)
                branches.append(b)
        out = st.choice(guards, branches) if branches else None
        self._terms[key] = out
        return out

    def _prod_term(self, m: int, p: Prod) -> Sym | None:
        st = self.store
        if p.kind == "free":
            return st.leaf(self.calc.names_sorts[p.ns].canonical_name(p.index))
        if p.kind == "const":
            return st.node(p.con, ())
        if p.kind == "bound":
            guards, branches = [], []
            for r in range(m + 1, self.N):
                seen = set()
                for _p, a, j, bns in self.binding:
                    c = self.code(r, a, j)
                    if bns == p.ns and c not in seen:
                        seen.add(c)
                        guards.append(self.ref(m) == c)
                        branches.append(st.leaf(self.binder_name(bns, r, a, j)))
            return st.choice(guards, branches) if branches else None
        args = []
        for a in range(p.arity):
            c = self.child(m, p.arity - 1 - a, p.groups[a])
            if c is None:
                return None
            args.append(c)
        bnames = [tuple(self.binder_name(ns, m, a, j) for j, ns in enumerate(bs))
                  for a, bs in enumerate(p.bsorts)]
        return st.node(p.con, args, bnames)

    def child(self, m: int, i: int, group: tuple[int, ...]) -> Sym | None:
        """The ``i``-th child of slot ``m`` from the right, of a state in ``group``."""
        key = ("C", m, i, group)
        if key in self._terms:
            return self._terms[key]
        guards, branches = [], []
        for x in group:
            b = self.term(m - 1, x) if i == 0 else self.at_pointer(m, i, x)
            if b is not None:
                guards.append(self.cstate(m, i) == x)
                branches.append(b)
        out = self.store.choice(guards, branches) if branches else None
        self._terms[key] = out
        return out

    def at_pointer(self, m: int, i: int, x: int) -> Sym | None:
        key = ("P", m, i, x)
        if key in self._terms:
            return self._terms[key]
        guards, branches = [], []
        for j in range(m - 1):
            b = self.term(j, x)
            if b is not None:
                guards.append(self.ptr(m, i) == j)
                branches.append(b)
        out = self.store.choice(guards, branches) if branches else None
        self._terms[key] = out
        return out

    def root(self, k: int, sort: str) -> tuple[Sym | None, list]:
        """The term of ``sort`` rooted at slot ``k`` and what it assumes (besides its extent)."""
        states = [self.sid[q] for q in self.g.states_with(sort)]
        guards, branches = [], []
        for x in states:
            b = self.term(k, x)
            if b is not None:
                guards.append(self.state_var(k) == x)
                branches.append(b)
        if not branches:
            return None, []
        return self.store.choice(guards, branches), [z3.Or(guards)]

    def closed(self, k: int) -> list:
        """Every bound name of slots ``0..k`` points at a binder among them."""
        lim = self.code_limit(k + 1)
        if not any(p.kind == "bound" for p in self.prods):
            return []
        return [self.ref(m) < lim for m in range(k + 1)]

    def tuple_roots(self, k: int, sorts: list[str]) -> tuple[list[Sym] | None, list]:
        """Terms of ``sorts`` laid out one after the other in slots ``0..k``."""
        if len(sorts) == 1:
            r, assume = self.root(k, sorts[0])
            if r is None:
                return None, []
            return [r], [*assume, self.start(k) == 0, *self.closed(k)]
        n = len(sorts)
        roots: list[Sym | None] = [None] * n
        assume = list(self.closed(k))
        vs = [self.var("v", k, i) for i in range(n)]
        assume.append(vs[0] == k)
        for i in range(n):
            sort = sorts[n - 1 - i]
            guards, branches = [], []
            for j in range(k + 1):
                r, a = self.root(j, sort)
                if r is None:
                    continue
                nxt = (vs[i + 1] == self.start(j) - 1) if i + 1 < n else (self.start(j) == 0)
                assume.append(z3.Implies(vs[i] == j, z3.And(*a, nxt)))
                guards.append(vs[i] == j)
                branches.append(r)
            if not branches:
                return None, []
            assume.append(z3.Or(guards))
            roots[n - 1 - i] = self.store.choice(guards, branches)
        return roots, assume  # type: ignore[return-value]

    def assignment(self, model: z3.ModelRef, k: int) -> list:
        """The values that fix slots ``0..k`` (used to block one term)."""
        out = []
        for m in range(k + 1):
            for v in (self.tag(m), self.ref(m)):
                out.append(v == model.eval(v, model_completion=True))
        return out

    def root_vars(self, k: int, count: int) -> list:
        """The slots of the roots of the ``count`` terms laid out in slots ``0..k``, left to
        right (as :meth:`tuple_roots` places them); the last one is slot ``k``."""
        if count == 1:
            return [z3.IntVal(k, self.ctx)]
        return [self.var("v", k, count - 1 - j) for j in range(count)]
