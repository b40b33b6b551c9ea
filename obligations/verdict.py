"""Verdicts, counterexamples and their evidence (LANGUAGE.md §8, §9).

A :class:`Verdict` is what one claim (or one part of a shorthand) ends in.
Its :meth:`Verdict.to_json` gives the entry of the JSON report with a stable
field order; :func:`worst` combines the parts of a shorthand.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from calcscout.rules.core.spec import Bounds

HOLDS = "holds"
REFUTED = "refuted"
INCONCLUSIVE = "inconclusive"
ERROR = "error"

_RANK = {HOLDS: 0, INCONCLUSIVE: 1, REFUTED: 2, ERROR: 3}

EXIT_CODES = {HOLDS: 0, REFUTED: 1, INCONCLUSIVE: 3, ERROR: 2}


@dataclass
class Counterexample:
    """The smallest failing case: the quantified metavariables' values, then the
    generated ones, then every translated term of the claim (abstract form)."""

    size: int
    terms: dict[str, Any]
    evidence: str
    details: dict[str, Any] = field(default_factory=dict)

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {"size": self.size, "terms": dict(self.terms),
                               "evidence": self.evidence}
        if self.details:
            out["details"] = self.details
        return out

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> Counterexample:
        return cls(data["size"], dict(data["terms"]), data.get("evidence", ""),
                   dict(data.get("details", {})))


@dataclass
class Verdict:
    name: str
    file: str
    formula: str
    verdict: str
    bounds: Bounds
    scope: str = "bounded"
    reason: str | None = None
    tried: int = 0
    undecided: int = 0
    cut_by: str | None = None
    seconds: float = 0.0
    engine: str = "enum"
    counterexample: Counterexample | None = None
    more: list[Counterexample] = field(default_factory=list)  # with --all
    notes: list[str] = field(default_factory=list)
    part_of: str | None = None
    undecided_example: Counterexample | None = None  # the smallest undecided case
    lemma: bool = False  # the claim is a `lemma`
    proof: dict[str, Any] | None = None  # what the proof engine made of it (cases, open goals)
    lemmas: list[str] = field(default_factory=list)  # proved lemmas its proof used
    assumes: list[str] = field(default_factory=list)  # lemmas used that are only bounded
    warning: str | None = None  # e.g. "holds" with no case at all: an empty sort
    witness: dict[str, Any] | None = None  # a proof's certificate (a termination order)
    # holds because a premise generated no case at all (no term within the bounds has a step)
    vacuous: bool = False
    # the error verdict's run-time failure: {"message", "at", "hint", "case": {"size", "terms"}}
    error: dict[str, Any] | None = None

    def to_json(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "name": self.name,
            "file": self.file,
            "formula": self.formula,
            "verdict": self.verdict,
            "scope": self.scope,
            "bounds": self.bounds.as_dict(),
            "tried": self.tried,
            "undecided": self.undecided,
            "cut_by": self.cut_by,
            "seconds": round(self.seconds, 3),
            "engine": self.engine,
            "counterexample": self.counterexample.to_json() if self.counterexample else None,
        }
        if self.error is not None:
            out["error"] = dict(self.error)
        if self.vacuous:
            out["vacuous"] = True
        if self.reason is not None:
            out["reason"] = self.reason
        if self.warning is not None:
            out["warning"] = self.warning
        if self.more:
            out["counterexamples"] = [c.to_json() for c in self.more]
        if self.undecided_example is not None:
            out["undecided_example"] = self.undecided_example.to_json()
        if self.notes:
            out["notes"] = list(self.notes)
        if self.part_of is not None:
            out["part_of"] = self.part_of
        if self.lemma:
            out["lemma"] = True
        if self.lemmas:
            out["lemmas"] = list(self.lemmas)
        if self.assumes:
            out["assumes"] = list(self.assumes)
        if self.proof is not None:
            out["proof"] = self.proof
        if self.witness is not None:
            out["witness"] = self.witness
        return out

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> Verdict:
        b = data.get("bounds") or {}
        ce = data.get("counterexample")
        return cls(
            name=data["name"], file=data.get("file", ""), formula=data.get("formula", ""),
            verdict=data["verdict"], bounds=Bounds(**{k: b.get(k) for k in
                                                     ("size", "steps", "names", "nodes")}),
            scope=data.get("scope", "bounded"), reason=data.get("reason"),
            tried=data.get("tried", 0), undecided=data.get("undecided", 0),
            cut_by=data.get("cut_by"), seconds=data.get("seconds", 0.0),
            engine=data.get("engine", "enum"),
            counterexample=Counterexample.from_json(ce) if ce else None,
            more=[Counterexample.from_json(c) for c in data.get("counterexamples", [])],
            notes=list(data.get("notes", [])), part_of=data.get("part_of"),
            undecided_example=(Counterexample.from_json(data["undecided_example"])
                               if data.get("undecided_example") else None),
            lemma=bool(data.get("lemma", False)), proof=data.get("proof"),
            lemmas=list(data.get("lemmas", [])), assumes=list(data.get("assumes", [])),
            warning=data.get("warning"),
            witness=data.get("witness"),
            vacuous=bool(data.get("vacuous", False)),
            error=dict(data["error"]) if data.get("error") else None,
        )


def set_run_time_error(v: Verdict, message: str, case: dict[str, str], size: int) -> None:
    """Make ``v`` the ``error`` verdict of a claim on whose case ``case`` (metavariable ->
    abstract form, of total size ``size``) a translation failed at run time: ``reason`` is
    the failure with the case, and the case is kept as the counterexample, whose evidence
    repeats the failure."""
    shown = ", ".join(f"{k} = {t}" for k, t in case.items())
    v.verdict = ERROR
    v.reason = f"{message} (on the case {shown})"
    v.counterexample = Counterexample(size, dict(case), message)
    v.cut_by = None


def worst(verdicts: list[str]) -> str:
    """A shorthand's verdict: the worst of its parts (refuted over inconclusive over holds)."""
    if not verdicts:
        return HOLDS
    return max(verdicts, key=lambda v: _RANK[v])


def exit_code(verdicts: list[str]) -> int:
    """0 all hold, 1 some refuted, 3 none refuted but some inconclusive, 2 an error."""
    if ERROR in verdicts:
        return 2
    if REFUTED in verdicts:
        return 1
    if INCONCLUSIVE in verdicts:
        return 3
    return 0
