"""The ``check --culprits`` and ``--by-rule`` passes over a run's verdicts."""

from __future__ import annotations

from collections.abc import Sequence

from calcscout.obligations.analysis import by_rule as split
from calcscout.obligations.analysis.culprits import annotate
from calcscout.obligations.analysis.keys import obligations_by_name
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.spec import Bounds, Spec


def analyse(spec: Spec, verdicts: Sequence[Verdict], command_line: Bounds, culprits: bool,
            by_rule: bool) -> list[Verdict]:
    """The verdicts with culprits added to their counterexamples and, after each claim or part
    with a one-step premise, its ``.by(RULE)`` parts."""
    obligations = obligations_by_name(spec)
    out: list[Verdict] = []
    for v in verdicts:
        out.append(v)
        ob = obligations.get(v.name)
        if by_rule and ob is not None and split.splits(ob):
            out.extend(split.by_rule(spec, ob, spec.claim_bounds(ob.claim, command_line)))
    if culprits:
        annotate(spec, out, obligations, command_line)
    return out
