"""``check --by-rule``: a premise claim ``M -> N implies ...`` split by the premise's rule.

Part ``CLAIM.by(RULE)`` is the claim with its premise's step restricted to
that one rule (each rule of the premise's calculus, or of its group when the
premise names one); the conclusion is unchanged.  The parts partition the
claim's cases, so the claim holds within the bounds exactly when every part
does, and the refuted parts name the rules whose steps the claim does not
survive.  The restriction is a group of one rule added to a copy of the
calculus (``by(RULE)``, a name no rule file can write), which leaves every
other use of the calculus as it was.
"""

from __future__ import annotations

import dataclasses

from calcscout.obligations.claims import Obligation
from calcscout.obligations.engines import enumeration
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.spec import Bounds, Implies, Spec


def splits(ob: Obligation) -> bool:
    """Whether ``ob`` has a one-step premise (``M -> N implies ...``) to split."""
    f = ob.formula
    return isinstance(f, Implies) and f.premise.relation is not None \
        and f.premise.relation.kind == "->" and f.premise.relation.calculus is not None


def by_rule(spec: Spec, ob: Obligation, bounds: Bounds) -> list[Verdict]:
    """One verdict per rule of the premise's step, each ``part_of`` the obligation."""
    f = ob.formula
    assert isinstance(f, Implies) and splits(ob)
    rel = f.premise.relation
    assert rel is not None and rel.calculus is not None
    calc = spec.calculi[rel.calculus]
    tagged = tuple(dataclasses.replace(r, groups=(*r.groups, f"by({r.name})"))
                   for r in calc.rules)
    spec2 = dataclasses.replace(spec, calculi={**spec.calculi,
                                               calc.name: dataclasses.replace(calc, rules=tagged)})
    out = []
    for r in calc.rules_of(rel.group):
        group = f"by({r.name})"
        premise = dataclasses.replace(f.premise, relation=dataclasses.replace(rel, group=group))
        name = f"{ob.name}.by({r.name})"
        text = f"{ob.text}  (premise by rule {r.name} only)"
        part = dataclasses.replace(ob, name=name, formula=Implies(premise, f.conclusion, f.pos),
                                   text=text)
        run = enumeration.run_shard(spec2, part, bounds)
        v = enumeration.combine(name, ob.claim.file, text, bounds, [run])
        v.part_of = ob.name
        out.append(v)
    return out
