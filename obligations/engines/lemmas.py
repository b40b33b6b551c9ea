"""Which lemmas a proof may use, and the proof engine's results for one run.

A claim's proof may use every lemma declared before it (file order, an
included file before the file that includes it) that is proved for all terms.
A lemma the claim names with ``needs`` but that is only checked up to bounds
may be used too; the claim is then not proved for all terms, and says which
lemmas it assumes.  Results are memoised: each obligation is tried once a run.
"""

from __future__ import annotations

from calcscout.obligations.claims import Obligation, plan
from calcscout.obligations.engines import enumeration
from calcscout.obligations.engines.proof import Fact, ProofResult, Prover
from calcscout.obligations.verdict import HOLDS
from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Bounds, Claim, Spec


class ProofBook:
    def __init__(self, spec: Spec, command_line: Bounds):
        self.spec = spec
        self.command_line = command_line
        self._results: dict[str, ProofResult] = {}
        self._bounded: dict[str, bool] = {}
        rank = {f: i for i, f in enumerate(reversed(spec.files))}
        self._order = {c.name: (rank.get(c.file, len(rank)), c.pos.line, c.pos.column)
                       for c in spec.claims}

    def bounds(self, claim: Claim) -> Bounds:
        return self.spec.claim_bounds(claim, self.command_line)

    def before(self, claim: Claim) -> list[Claim]:
        mine = self._order.get(claim.name, (1 << 30, 0, 0))
        return sorted((c for c in self.spec.claims if c.lemma and c.name != claim.name
                       and self._order[c.name] < mine), key=lambda c: self._order[c.name])

    def facts_for(self, claim: Claim) -> list[Fact]:
        out = []
        for lem in self.before(claim):
            if self.result(lem).proved and not self.result(lem).assumes:
                out.append(Fact(lem, True))
            elif lem.name in claim.needs and self.holds_bounded(lem):
                out.append(Fact(lem, False))
        return out

    def result(self, claim: Claim, ob: Obligation | None = None) -> ProofResult:
        ob = ob or plan(self.spec, claim).head
        key = ob.name if ob is not None else claim.name
        got = self._results.get(key)
        if got is not None:
            return got
        if ob is None:  # a shorthand: its parts are tried one by one
            got = ProofResult(claim.name, claim.text, False, "a shorthand is proved part by part")
        else:
            prover = Prover(self.spec, self.bounds(claim), self.facts_for(claim),
                            check_candidate=self.candidate_holds)
            got = prover.prove(ob)
        self._results[key] = got
        return got

    def holds_bounded(self, claim: Claim) -> bool:
        """The claim's head obligation holds up to its bounds (by enumeration)."""
        got = self._bounded.get(claim.name)
        if got is None:
            ob = plan(self.spec, claim).head
            got = ob is not None and self._enumerate(ob, self.bounds(claim))
            self._bounded[claim.name] = got
        return got

    def candidate_holds(self, claim: Claim) -> bool:
        b = self.spec.effective_bounds(self.command_line)
        ob = plan(self.spec, claim).head
        return ob is not None and self._enumerate(ob, b)

    def _enumerate(self, ob: Obligation, b: Bounds) -> bool:
        if not enumeration.is_relational(ob):
            return False
        try:
            part = enumeration.run_shard(self.spec, ob, b)
        except CalcError:  # a run-time failure of the translation: not a usable lemma
            return False
        v = enumeration.combine(ob.name, ob.claim.file, ob.text, b, [part])
        return v.verdict == HOLDS
