"""Instantiating a right-hand side under a binding found by :mod:`calcscout.rules.rewriting.match`.

Everything matching opened is closed again here: an abstraction ``x.P``
whose ``x`` the left-hand side bound closes over the name ``x`` was bound to,
plugging into a context closes the context's binders over the names that
opened them, and a substitution ``P[x := Q]`` replaces the name ``x`` stands
for.  A binder name the left-hand side did not bind is fresh.

>>> from calcscout.rules.core.spec import Calculus, NamesSort, Shape, PCon, PAbs, PName, PMeta
>>> from calcscout.rules.core.terms import name, debug_str
>>> calc = Calculus("c", {"var": NamesSort("var", ("x",))}, {},
...                 {"lam": Shape("lam", (("var",),)), "app": Shape("app", ((), ()))}, ())
>>> rhs = PCon("lam", (PAbs(("k",), PCon("app", (PName("k", "var"), PMeta("M", "term")))),))
>>> debug_str(build(calc, rhs, {"M": name("y")}))
'lam(.app(^0, y))'
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from calcscout.rules.core.spec import Calculus, PAbs, Pattern, PCall, PCon, PMeta, PName, PPlug, PSubst
from calcscout.rules.core.terms import Name, Term, close, fresh_name, name, node, substitute
from calcscout.rules.rewriting.match import Binding, Context, binding_names

Call = Callable[[str, Sequence[Term]], Term]


def build(calc: Calculus, pattern: Pattern, binding: Binding, call: Call | None = None) -> Term:
    """The term ``pattern`` stands for under ``binding``.

    ``calc`` gives the constructors' shapes (for a translation, the target
    calculus).  ``call(fn, args)`` evaluates a translation function's call.
    """
    return _Builder(calc, binding, call).build(pattern, dict(binding))


class _Builder:
    __slots__ = ("calc", "call", "taken", "_binding")

    def __init__(self, calc: Calculus, binding: Binding, call: Call | None):
        self.calc = calc
        self.call = call
        self._binding = binding
        self.taken: set[str] | None = None  # computed on the first fresh binder

    def _fresh(self, names_sort: str) -> Name:
        if self.taken is None:
            self.taken = binding_names(self._binding)
        n = fresh_name(self.taken, base=f"{names_sort}:")
        # Kept taken for the rest of the build: nested fresh binders stay apart.
        self.taken.add(n)
        return name(n)

    def build(self, p: Pattern, b: dict) -> Term:
        if isinstance(p, PMeta):
            v = b.get(p.name)
            if v is None:
                raise ValueError(f"metavariable {p.name} is not bound")
            if isinstance(v, Context):
                raise ValueError(f"context {p.name} used without a hole")
            return v
        if isinstance(p, PName):
            v = b.get(p.name)
            if not isinstance(v, Name):
                raise ValueError(f"name {p.name} is not bound")
            return v
        if isinstance(p, PCon):
            return self._con(p, b)
        if isinstance(p, PPlug):
            ctx = b.get(p.context.name)
            if not isinstance(ctx, Context):
                raise ValueError(f"{p.context.name} is not a bound context")
            return ctx.plug(self.build(p.arg, b))
        if isinstance(p, PSubst):
            body = self.build(p.body, b)
            mapping: dict[str, Term] = {}
            for x, q in p.pairs:
                v = b.get(x.name)
                if not isinstance(v, Name):
                    raise ValueError(f"substitution for {x.name}, which is not a bound name")
                mapping[v.name] = self.build(q, b)
            # Bound names are indices and every opened name is fresh, so this
            # simultaneous substitution of names can capture nothing.
            return substitute(body, mapping)
        if isinstance(p, PCall):
            if self.call is None:
                raise ValueError(f"call of {p.fn} where no function is available")
            return self.call(p.fn, [self.build(a, b) for a in p.args])
        if isinstance(p, PAbs):
            raise ValueError("an abstraction stands only as a constructor argument")
        raise TypeError(f"not a pattern: {p!r}")

    def _con(self, p: PCon, b: dict) -> Term:
        shape = self.calc.shapes.get(p.con)
        if shape is not None and shape.arity != len(p.args):
            raise ValueError(f"{p.con} takes {shape.arity} arguments, not {len(p.args)}")
        args: list[Term] = []
        binders: list[int] = []
        shape_binders = shape.binders if shape is not None else None
        for i, a in enumerate(p.args):
            want = shape_binders[i] if shape_binders is not None else None
            if not isinstance(a, PAbs):
                if want:
                    raise ValueError(f"argument {i + 1} of {p.con} binds {want} names")
                args.append(self.build(a, b))
                binders.append(0)
                continue
            k = len(a.names)
            if want is not None and want != k:
                raise ValueError(f"argument {i + 1} of {p.con} binds {want} names, not {k}")
            sorts = shape.binder_sorts[i] if shape is not None else ("",) * k
            inner = dict(b)
            names: list[str] = []
            for n, ns in zip(a.names, sorts, strict=True):
                v = b.get(n)
                if not isinstance(v, Name):
                    v = self._fresh(ns)
                    inner[n] = v
                names.append(v.name)
            args.append(close(self.build(a.body, inner), names))
            binders.append(k)
        return node(p.con, args, binders)
