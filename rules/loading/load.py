"""Loading a rule file: includes, then calculi, translations and claims resolved
into :mod:`calcscout.rules.core.spec` objects, with every load-time check of LANGUAGE.md.

Problems are collected, not raised one by one, so that a file with several
mistakes gets them all in one run; :func:`load_file` raises one FileError
holding them.
"""

from __future__ import annotations

import gc
import os
from pathlib import Path

from calcscout.rules.core.errors import FileError
from calcscout.rules.core.spec import (
    AltCon,
    AltHole,
    AltNames,
    AltSort,
    Arg,
    Calculus,
    NamesSort,
    Notation,
    Pos,
    Shape,
    Sort,
    Spec,
    base_meta,
)
from calcscout.rules.loading import syntax
from calcscout.rules.loading.claims import check_needs, resolve_claims
from calcscout.rules.loading.diagnostics import Diagnostics
from calcscout.rules.loading.patterns import PatternResolver
from calcscout.rules.loading.syntax import RawCalculus, RawFile, RawTranslation
from calcscout.rules.loading.translations import build_translations


def load_file(path: str | os.PathLike) -> Spec:
    """Read a rule file and its includes, check everything, return the Spec."""
    return Loader().load(Path(path))


def load_text(text: str, file: str = "<text>") -> Spec:
    """Like :func:`load_file` for text in memory (includes resolve from the cwd)."""
    return Loader().load(Path(file), text=text)


class Loader(Diagnostics):
    def __init__(self) -> None:
        super().__init__()
        self.files: list[RawFile] = []
        self.seen: set[Path] = set()
        self.top: Path | None = None

    # ------------------------------------------------------------ files

    def shown(self, path: Path) -> str:
        """How a file is named in messages: relative to the working folder when it can be."""
        try:
            return os.path.relpath(path)
        except ValueError:
            return str(path)

    def load(self, path: Path, text: str | None = None) -> Spec:
        # Loading allocates many small objects and frees few: the cyclic collector
        # would walk them over and over (two thirds of the time for 100,000 rules).
        collecting = gc.isenabled()
        gc.disable()
        try:
            self.top = path
            self.read(path, [], text=text)
            self.fail_if_problems()
            spec = self.resolve()
            self.fail_if_problems()
            return spec
        finally:
            if collecting:
                gc.enable()

    def read(self, path: Path, stack: list[Path], text: str | None = None,
             where: Pos | None = None) -> None:
        try:
            real = path.resolve()
        except (OSError, RuntimeError):  # a loop of symbolic links: the read below says so
            real = Path(os.path.abspath(path))
        if real in stack:
            names = [p.name for p in stack[stack.index(real):]] + [real.name]
            self.error("include cycle: " + " -> ".join(names), where,
                       hint="remove one of the includes; each file is read once")
            return
        if real in self.seen:
            return
        self.seen.add(real)
        shown = self.shown(path)
        try:
            if text is None:
                text = syntax.read_text_file(path, shown)
            raw = syntax.parse_text(text, shown)
        except FileError as e:
            for p in e.problems:
                if p.pos is None and where is not None:
                    p.message = f"{p.message} (included here)"
                    p.pos = where
                self.problems.append(p)
            return
        self.files.append(raw)
        for inc, pos in raw.includes:
            self.read(path.parent / inc, [*stack, real], where=Pos(pos.file, pos.line, 1))

    # ------------------------------------------------------------ resolution

    def resolve(self) -> Spec:
        raw_calcs: dict[str, RawCalculus] = {}
        raw_trs: dict[str, RawTranslation] = {}
        for f in self.files:
            for c in f.calculi:
                if c.name in raw_calcs:
                    self.error(f"calculus {c.name} is declared twice (first at "
                               f"{raw_calcs[c.name].pos})", c.pos)
                    continue
                raw_calcs[c.name] = c
            for t in f.translations:
                if t.name in raw_trs:
                    self.error(f"translation {t.name} is declared twice (first at "
                               f"{raw_trs[t.name].pos})", t.pos)
                    continue
                raw_trs[t.name] = t
        calculi: dict[str, Calculus] = {}
        for name in raw_calcs:
            self.build_calculus(name, raw_calcs, calculi, [])
        if self.problems:
            return Spec(str(self.top), calculi, {}, ())
        translations = build_translations(raw_trs, calculi, self)
        top_file = self.files[0]
        for f in self.files:
            for pos in f.bounds_lines[1:]:
                self.error(f"a second bounds line (the first is at {f.bounds_lines[0]})", pos,
                           hint="put every bound of the file on one bounds line")
        bounds = self.bounds(top_file.bounds)
        broken = set(raw_trs) - set(translations)  # their errors are reported already
        claims = resolve_claims([c for f in self.files for c in f.claims], calculi,
                                translations, self, broken)
        check_needs(claims, [f.path for f in self.files], self)
        names = {c.name for c in claims}
        if len(names) != len(claims):
            seen: set[str] = set()
            for c in claims:
                if c.name in seen:
                    self.error(f"claim {c.name} is declared twice", c.pos)
                seen.add(c.name)
        file_bounds = {f.path: self.bounds(f.bounds) for f in self.files[1:]}
        file_bounds[top_file.path] = bounds
        return Spec(self.shown(self.top) if self.top else "", calculi, translations,
                    tuple(claims), bounds, tuple(f.path for f in self.files), file_bounds)

    # ------------------------------------------------------------ calculi

    def build_calculus(self, name: str, raws: dict[str, RawCalculus],
                       done: dict[str, Calculus], stack: list[str]) -> Calculus | None:
        if name in done:
            return done[name]
        raw = raws[name]
        base: Calculus | None = None
        if raw.extends is not None:
            if raw.extends in stack or raw.extends == name:
                self.error("calculus extension cycle: " + " -> ".join([*stack, name, raw.extends]),
                           raw.extends_pos)
                return None
            if raw.extends not in raws:
                self.error(f"calculus {name} extends {raw.extends}, which is not declared",
                           raw.extends_pos, hint=self.suggest(raw.extends, raws))
                return None
            base = self.build_calculus(raw.extends, raws, done, [*stack, name])
            if base is None:
                return None
        calc = CalculusBuilder(raw, base, self).build()
        if calc is not None:
            done[name] = calc
        return calc


class CalculusBuilder:
    """Turns one raw calculus block (over its base, if it extends one) into a Calculus."""

    def __init__(self, raw: RawCalculus, base: Calculus | None, loader: Loader):
        self.raw = raw
        self.base = base
        self.loader = loader
        self.names_sorts: dict[str, NamesSort] = dict(base.names_sorts) if base else {}
        self.metas: dict[str, str] = dict(base.metas) if base else {}
        self.sort_metas: dict[str, list[str]] = (
            {s.name: list(s.metas) for s in base.sorts.values()} if base else {})
        self.alts: dict[str, list] = (
            {s.name: list(s.alts) for s in base.sorts.values()} if base else {})
        self.is_context: dict[str, bool] = (
            {s.name: s.is_context for s in base.sorts.values()} if base else {})
        self.sort_pos: dict[str, Pos] = {s.name: s.pos for s in base.sorts.values()} if base else {}
        self.shapes: dict[str, Shape] = dict(base.shapes) if base else {}
        self.shape_pos: dict[str, Pos] = {}

    def error(self, message: str, pos: Pos | None, hint: str | None = None) -> None:
        self.loader.error(message, pos, hint)

    def declare_meta(self, meta: str, owner: str, pos: Pos) -> None:
        prev = self.metas.get(meta)
        if prev is not None and prev != owner:
            self.error(f"metavariable {meta} already ranges over {prev}; it cannot also "
                       f"range over {owner}", pos)
            return
        self.metas[meta] = owner

    def build(self) -> Calculus | None:
        raw = self.raw
        before = len(self.loader.problems)
        for ns, metas, pos in raw.names:
            if ns in self.sort_metas:
                self.error(f"{ns} is already a sort; a names sort needs its own name", pos)
                continue
            old = self.names_sorts.get(ns)
            if old is not None and self.base is None:
                self.error(f"names sort {ns} is declared twice", pos)
                continue
            if not metas and old is None:
                self.error(f"names sort {ns} lists no names",
                           pos, hint=f"names {ns} x y z  declares x, y, z as its names")
                continue
            allm = tuple(dict.fromkeys([*(old.metas if old else ()), *metas]))
            self.names_sorts[ns] = NamesSort(ns, allm, pos)
            for m in metas:
                self.declare_meta(m, ns, pos)
        own_sorts: set[str] = set()
        for decl in raw.sorts:
            if decl.name in self.names_sorts:
                self.error(f"{decl.name} is already a names sort", decl.pos)
                continue
            existing = decl.name in self.sort_metas
            if existing and (decl.name in own_sorts or self.base is None
                             or decl.name not in self.base.sorts):
                self.error(f"sort {decl.name} is declared twice", decl.pos,
                           hint="list all alternatives in one declaration")
                continue
            if existing and self.is_context[decl.name] != decl.is_context:
                kind = "context" if self.is_context[decl.name] else "sort"
                self.error(f"{decl.name} is a {kind} in the calculus extended", decl.pos)
                continue
            own_sorts.add(decl.name)
            metas = decl.metas or ([] if existing else [decl.name])
            self.sort_metas.setdefault(decl.name, [])
            for m in metas:
                if m not in self.sort_metas[decl.name]:
                    self.sort_metas[decl.name].append(m)
                self.declare_meta(m, decl.name, decl.pos)
            self.alts.setdefault(decl.name, [])
            self.is_context[decl.name] = decl.is_context
            self.sort_pos.setdefault(decl.name, decl.pos)
        # Alternatives are resolved once every metavariable of the block is known.
        for decl in raw.sorts:
            if decl.name not in own_sorts:
                continue
            for alt in decl.alts:
                resolved = self.alternative(decl, alt)
                if resolved is not None:
                    self.alts[decl.name].append(resolved)
        for decl in raw.sorts:
            if decl.name in own_sorts and decl.is_context:
                self.check_context(decl)
        sorts = {
            n: Sort(n, tuple(self.sort_metas[n]), tuple(self.alts[n]), self.is_context[n],
                    self.sort_pos.get(n, raw.pos))
            for n in self.sort_metas
        }
        reduce_in = self.base.reduce_in if self.base else None
        if raw.reduce is not None:
            target, pos = raw.reduce
            if target is not None:
                sort = sorts.get(target) or sorts.get(self.metas.get(target, ""), None)
                if sort is None:
                    self.error(f"reduce in {target}: {target} is not a sort of calculus "
                               f"{raw.name}", pos)
                elif not sort.is_context:
                    self.error(f"reduce in {target}: {target} is a sort, not a context sort",
                               pos, hint="declare it with `context " + target + " ::= [] | ...`")
                else:
                    target = sort.name
            reduce_in = target
        calc = Calculus(raw.name, self.names_sorts, sorts, self.shapes, (), reduce_in,
                        self.metas, raw.extends, raw.pos)
        rules = list(self.base.rules) if self.base else []
        # A set of the names, so that a file of many rules is checked in linear time.
        dropped: set[str] = set()
        for name, pos in raw.drops:
            if self.base is None:
                self.error(f"drop rule {name}: calculus {raw.name} extends nothing", pos)
            elif not any(r.name == name for r in self.base.rules):
                self.error(f"drop rule {name}: {self.base.name} has no rule {name}", pos,
                           hint=Loader.suggest(name, [r.name for r in rules]))
            dropped.add(name)
        if dropped:
            rules = [r for r in rules if r.name not in dropped]
        taken = {r.name for r in rules}
        resolver = PatternResolver(calc, self.loader)
        for rr in raw.rules:
            if rr.name in taken:
                self.error(f"rule {rr.name} is declared twice in calculus {raw.name}", rr.pos,
                           hint="in an extension, `drop rule NAME` first to replace a rule")
                continue
            taken.add(rr.name)
            rule = resolver.rule(rr)
            if rule is not None:
                rules.append(rule)
        if len(self.loader.problems) > before:
            return None
        from dataclasses import replace

        calc = replace(calc, rules=tuple(rules))
        from calcscout.rules.notation.notation import notation_problems

        for message, pos, hint in notation_problems(calc, self.base):
            self.error(message, pos, hint)
        if len(self.loader.problems) > before:
            return None
        resolver.calc = calc
        resolver.check_sorts_of_rules(calc)
        return calc

    # ------------------------------------------------------------ alternatives

    def meta_owner(self, text: str) -> str | None:
        return self.metas.get(text) or self.metas.get(base_meta(text))

    def alternative(self, decl, alt):
        if alt.kind == "hole":
            if not decl.is_context:
                self.error("the hole [] belongs in a context declaration", alt.pos,
                           hint=f"write `context {decl.name} ::= [] | ...`")
                return None
            return AltHole(alt.pos)
        if alt.kind == "ident":
            owner = self.meta_owner(alt.name)
            if owner is not None and alt.notation is None:
                if owner in self.names_sorts:
                    if decl.is_context:
                        self.error("a name cannot be a context alternative", alt.pos)
                        return None
                    return AltNames(owner, alt.pos)
                if self.is_context.get(owner, False) != decl.is_context:
                    what = "a context" if self.is_context.get(owner) else "a sort"
                    self.error(f"{alt.name} is {what}; it cannot be an alternative of "
                               f"{decl.name}", alt.pos)
                    return None
                return AltSort(owner, alt.pos)
            if owner is not None and alt.notation is not None:
                self.error(f"{alt.name} is a metavariable; only a constructor alternative "
                           "takes a notation", alt.notation.pos)
                return None
            # a nullary constructor
            return self.constructor(decl, alt)
        return self.constructor(decl, alt)

    def constructor(self, decl, alt) -> AltCon | None:
        if alt.name in self.names_sorts or alt.name in self.sort_metas:
            self.error(f"{alt.name} names a sort; it cannot be a constructor", alt.pos)
            return None
        args: list[Arg] = []
        binder_sorts: list[tuple[str, ...]] = []
        ok = True
        for binders, meta, mpos in alt.args:
            bsorts = []
            for b, bpos in binders:
                owner = self.meta_owner(b)
                if owner not in self.names_sorts:
                    self.error(f"{b} is not a names metavariable, so {b}. cannot bind it", bpos,
                               hint="declare it with `names SORT " + b + " ...`")
                    ok = False
                    continue
                bsorts.append(owner)
            owner = self.meta_owner(meta)
            if owner is None:
                self.error(f"unknown metavariable {meta} in the alternative {alt.name}", mpos,
                           hint=Loader.suggest(meta, self.metas))
                ok = False
                continue
            if owner in self.names_sorts:
                self.error(f"{meta} is a name; a constructor argument is a sort's metavariable",
                           mpos, hint="put the names sort among the sort's alternatives instead")
                ok = False
                continue
            args.append(Arg(tuple(bsorts), owner, tuple(b for b, _ in binders), meta))
            binder_sorts.append(tuple(bsorts))
        if not ok:
            return None
        shape = Shape(alt.name, tuple(binder_sorts))
        known = self.shapes.get(alt.name)
        if known is None:
            self.shapes[alt.name] = shape
            self.shape_pos[alt.name] = alt.pos
        elif known.binders != shape.binders:
            self.error(f"constructor {alt.name} used with another shape "
                       f"({describe_shape(known)} declared, {describe_shape(shape, noun=False)} given)",
                       alt.pos)
            return None
        notation = self.notation(alt, args) if alt.notation else None
        return AltCon(alt.name, tuple(args), notation, alt.pos)

    def notation(self, alt, args: list[Arg]) -> Notation | None:
        from calcscout.rules.notation.notation import (
            MAX_NOTATION_TOKENS,
            notation_tokens,
            unbalanced_bracket,
        )

        raw = alt.notation
        try:
            tokens = notation_tokens(raw.text)
        except ValueError:
            self.error(f"cannot read the notation {raw.text!r}", raw.pos)
            return None
        own = [m for a in args for m in (*a.binder_metas, a.meta)]
        placeholders = [t for t in tokens if t in own]
        for m in own:
            n = placeholders.count(m)
            if n != 1:
                self.error(f"the notation {raw.text!r} must use {m} exactly once (it uses it "
                           f"{n} times)", raw.pos)
                return None
        if not tokens:
            self.error("an empty notation", raw.pos)
            return None
        if len(tokens) > MAX_NOTATION_TOKENS:
            self.error(f"the notation has {len(tokens)} tokens; a notation may have at most "
                       f"{MAX_NOTATION_TOKENS}", raw.pos,
                       hint="a long notation makes the term parser slow to build; "
                            "shorten it or leave the constructor in abstract form")
            return None
        literals = [t for t in tokens if t not in own]
        unbalanced = unbalanced_bracket(literals)
        if unbalanced is not None:
            self.error(f'the notation "{raw.text}" does not balance its brackets '
                       f"({unbalanced})", raw.pos,
                       hint="a term written with it could not be read back; "
                            "close every (, [ and { inside the notation")
            return None
        if "`" in "".join(literals):
            self.error(f'the notation "{raw.text}" uses the backquote, which is kept for '
                       "writing a name that spells a constructor or a literal", raw.pos)
            return None
        assoc = raw.assoc
        if assoc is not None and assoc not in ("left", "right", "nonassoc"):
            self.error(f"unknown associativity {assoc!r}", raw.assoc_pos,
                       hint="use left, right or nonassoc, then a precedence 0-100")
            return None
        if raw.prec is not None and not 0 <= raw.prec <= 100:
            self.error(f"precedence {raw.prec} is outside 0-100", raw.assoc_pos)
            return None
        if raw.typeset is not None:
            from calcscout.rules.notation.typeset import typeset_problems

            for message, column in typeset_problems(raw.typeset, own):
                at = raw.typeset_pos
                assert at is not None
                self.error(message, Pos(at.file, at.line, at.column + column))
                return None
        return Notation(raw.text, tokens, tuple(placeholders), assoc, raw.prec, raw.pos,
                        raw.typeset)

    def check_context(self, decl) -> None:
        for alt in self.alts[decl.name]:
            if isinstance(alt, AltCon):
                holes = [a for a in alt.args if self.is_context.get(a.sort, False)]
                if len(holes) != 1:
                    self.error(
                        f"the context alternative {alt.con}(...) must have exactly one argument "
                        f"that is a context metavariable (it has {len(holes)})", alt.pos)


def describe_shape(shape: Shape, noun: bool = True) -> str:
    """``two arguments (argument 1 binds 1)``; without the noun (``one``), for the shape given."""
    words = ["no" if noun else "none", "one", "two", "three", "four", "five", "six"]
    n = shape.arity
    text = words[n] if n < len(words) else str(n)
    if noun:
        text += f" argument{'s' if n != 1 else ''}"
    binds = [f"argument {i + 1} binds {k}" for i, k in enumerate(shape.binders) if k]
    return text + (" (" + ", ".join(binds) + ")" if binds else "")
