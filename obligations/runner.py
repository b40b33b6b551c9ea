"""Running the claims of a spec: plans, engines, jobs and shards, verdicts in order.

For each claim the report has the claim's own entry, then its parts (the
parts of a shorthand, the ``normalize(T)`` part of every normalised
translation it uses).  A shorthand's own verdict is the worst of its parts.

Each obligation first becomes a *record* (a plain dict: what the engine saw,
by shard); :func:`finish_claim` turns a claim's records into verdicts.  A
``--shard`` run saves the records in its JSON report, and ``merge`` calls the
same :func:`finish_claim` on the records of all shards, so a merged report has
the verdicts of an unsharded run.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from contextlib import nullcontext
from dataclasses import dataclass, field
from typing import Any

from calcscout.obligations.claims import Obligation, plan
from calcscout.obligations.engines import enumeration
from calcscout.obligations.progress import CaseCount, count_cases
from calcscout.obligations.stopping import INTERRUPTED, RunStopped, StopSignals
from calcscout.obligations.verdict import ERROR, HOLDS, INCONCLUSIVE, REFUTED, Verdict, worst
from calcscout.obligations.workers import WorkerLost
from calcscout.rules.core.errors import CalcError, EncodingError, UsageError
from calcscout.rules.core.spec import Bounds, Claim, Spec, Terminating


@dataclass
class RunOptions:
    bounds: Bounds = field(default_factory=Bounds)  # from the command line
    jobs: int = 1
    shard: tuple[int, int] | None = None
    collect_all: bool = False
    engine: str = "enum"
    timeout: float | None = None
    progress: Callable[[str, int, int], None] | None = None  # (claim, done, total)
    cases: Callable[[str, CaseCount], None] | None = None  # an obligation starts: its cases
    stop: StopSignals | None = None  # signals and the time limit, in `check`
    book: Any = None  # the proof engine's results and lemmas (engines proof and auto)


def claim_bounds(spec: Spec, claim: Claim, opts: RunOptions) -> Bounds:
    return spec.claim_bounds(claim, opts.bounds)


def run_claims(spec: Spec, claims: list[Claim], opts: RunOptions
               ) -> tuple[list[Verdict], dict[str, Any]]:
    """Verdicts for every claim and part, in report order, and every claim's records.

    A stop request (``opts.stop``) raises :class:`RunStopped` carrying the
    report so far: the claims decided keep their verdicts, the others are
    inconclusive, cut by ``interrupted``.
    """
    decided: list[tuple[Any, list[Verdict]]] = []  # appended in one step per claim
    if opts.engine in ("proof", "auto") and opts.book is None:
        from calcscout.obligations.engines.lemmas import ProofBook

        opts.book = ProofBook(spec, opts.bounds)
    try:
        for claim in claims:
            with opts.stop.armed() if opts.stop else nullcontext():
                try:
                    rec = claim_records(spec, claim, opts)
                except (UsageError, EncodingError, WorkerLost):
                    raise  # the command line asked for what cannot be done, or a worker died
                except CalcError as e:
                    # a run-time failure outside the cases (the enumeration makes its own,
                    # with the case): this claim's error verdict, and the run goes on
                    rec = _error_record(spec, claim, opts, e)
                verdicts = finish_claim(rec)
            decided.append((rec, verdicts))
    except RunStopped as stop:
        done = list(decided)
        stop.verdicts = [v for _, vs in done for v in vs]
        for claim in claims[len(done):]:
            stop.verdicts.extend(unfinished_verdicts(spec, claim, opts, stop.reason))
        stop.records = {rec["claim"]: rec for rec, _ in done}
        raise
    return [v for _, vs in decided for v in vs], {rec["claim"]: rec for rec, _ in decided}


def unfinished_verdicts(spec: Spec, claim: Claim, opts: RunOptions, reason: str) -> list[Verdict]:
    """The entries of a claim a stop left undecided: the same entries as a finished claim
    (its own, then its parts), each inconclusive, cut by ``interrupted``."""
    b = claim_bounds(spec, claim, opts)
    p = plan(spec, claim)
    own = ([p.head] if p.head else []) + list(p.parts)
    out = [Verdict(ob.name, claim.file, ob.text, INCONCLUSIVE, b, reason=reason,
                   cut_by=INTERRUPTED) for ob in own]
    if p.head is None:
        out.insert(0, Verdict(claim.name, claim.file, claim.text, INCONCLUSIVE, b, reason=reason,
                              cut_by=INTERRUPTED))
    for v in out[1:]:
        v.part_of = claim.name
    return out


def claim_records(spec: Spec, claim: Claim, opts: RunOptions) -> dict[str, Any]:
    b = claim_bounds(spec, claim, opts)
    p = plan(spec, claim)
    obs: list[dict[str, Any]] = []
    own = ([p.head] if p.head else []) + list(p.parts)
    for ob in own:
        base = {"name": ob.name, "file": claim.file, "formula": ob.text,
                "head": ob is p.head}
        start = time.perf_counter()
        proof = None
        if opts.engine in ("proof", "auto") and ob.normalizes is None and (
                enumeration.is_relational(ob)):
            result = opts.book.result(claim, ob)
            proof = result.to_json()
            if result.proved and not (result.assumes and opts.engine == "auto"):
                obs.append({**base, "kind": "fixed",
                            "verdict": _proof_verdict(ob, claim, b, result).to_json()})
                continue
            if opts.engine == "proof":
                obs.append({**base, "kind": "fixed",
                            "verdict": _proof_verdict(ob, claim, b, result).to_json()})
                continue
            base["induction"] = proof
        if ob.normalizes is not None and opts.engine == "proof":
            v = Verdict(ob.name, claim.file, ob.text, INCONCLUSIVE, b, engine="proof",
                        reason="the proof engine does not run `then normalize`; "
                               "use --engine auto or enum")
            obs.append({**base, "kind": "fixed", "verdict": v.to_json()})
        elif ob.normalizes is not None:
            tr = spec.translations[ob.normalizes]
            from calcscout.obligations.engines.confluence import confluence_theorem
            from calcscout.obligations.engines.termination import normalize_proof

            obs.append({**base, "kind": "normalize", "translation": tr.name,
                        "group": tr.normalize, "proof": normalize_proof(
                            spec.calculi[tr.target], tr.normalize, opts.timeout,
                            confluence_theorem)})
        elif isinstance(ob.formula, Terminating) and opts.engine == "proof":
            v = _termination_proof(spec, ob, claim, b, opts.timeout)
            v.seconds = time.perf_counter() - start
            obs.append({**base, "kind": "fixed", "verdict": v.to_json()})
        elif not enumeration.is_relational(ob) and opts.engine == "proof":
            raise EncodingError(f"claim {claim.name}: {ob.text} is not proved by induction; "
                                "confluence is the rewriting engine's (its theorems)",
                                claim.pos, hint="use --engine enum or auto for confluent claims")
        elif enumeration.is_relational(ob) and _engine(spec, ob, opts) == "smt":
            from calcscout.obligations.engines.smt import run_smt

            v = run_smt(spec, ob, b, opts.timeout)
            v.seconds = time.perf_counter() - start
            obs.append({**base, "kind": "fixed", "verdict": v.to_json(),
                        "empty": _empty_sorts(spec, ob, b)})
        elif enumeration.is_relational(ob):
            parts = _run_relational(spec, ob, b, opts)
            obs.append({**base, "kind": "relational", "parts": [x.to_json() for x in parts],
                        "empty": _empty_sorts(spec, ob, b)})
        else:
            if opts.engine == "smt":
                raise EncodingError(f"claim {claim.name}: {ob.text} is a rewriting question the "
                                    "SMT engine does not take", claim.pos,
                                    hint="use --engine enum or auto for confluent and terminating")
            v = _run_rewriting(spec, ob, b, opts)
            v.seconds = time.perf_counter() - start
            obs.append({**base, "kind": "fixed", "verdict": v.to_json()})
    return {"claim": claim.name, "file": claim.file, "formula": claim.text,
            "bounds": b.as_dict(), "shorthand": p.head is None, "obligations": obs,
            "shard": list(opts.shard) if opts.shard else None, "lemma": claim.lemma}


def _termination_proof(spec: Spec, ob: Obligation, claim: Claim, b: Bounds,
                       timeout: float | None) -> Verdict:
    """``terminating C`` under ``--engine proof``: the orders of the termination prover
    only, no bounded search; when no proof is found, the verdict says why."""
    from calcscout.obligations.engines.termination import prove as prove_termination

    f = ob.formula
    assert isinstance(f, Terminating)
    proof = prove_termination(spec.calculi[f.calculus], f.group, timeout)
    if proof.proved:
        return Verdict(ob.name, claim.file, ob.text, HOLDS, b, scope="all", reason=proof.reason,
                       engine="proof", notes=proof.notes, witness=proof.witness)
    return Verdict(ob.name, claim.file, ob.text, INCONCLUSIVE, b, engine="proof",
                   reason=f"not proved: {proof.reason}", notes=proof.notes)


def _proof_verdict(ob: Obligation, claim: Claim, b: Bounds, result) -> Verdict:
    """The verdict of the proof engine alone: proved for all terms, proved assuming lemmas
    checked only up to bounds, or open cases (inconclusive; it never refutes)."""
    if result.proved and not result.assumes:
        verdict, scope = HOLDS, "all"
        reason = result.method
    elif result.proved:
        verdict, scope = HOLDS, "bounded"
        reason = (f"{result.method}, assuming {', '.join(result.assumes)} (checked up to the "
                  "bounds only)")
    else:
        verdict, scope = INCONCLUSIVE, "bounded"
        reason = f"not proved: {result.reason}"
    v = Verdict(ob.name, claim.file, ob.text, verdict, b, scope=scope, reason=reason,
                seconds=result.seconds, engine="proof", proof=result.to_json(),
                lemmas=list(result.lemmas), assumes=list(result.assumes))
    v.tried = len(result.cases)
    return v


def _empty_sorts(spec: Spec, ob: Obligation, b: Bounds) -> list[str]:
    """The quantified sorts with no term at all within the bounds (``M in lam.term``), for
    the warning on a claim that holds without a single case."""
    from calcscout.rules.core.enumerate import count_terms

    assert b.size is not None and b.names is not None
    return [f"{m.name} in {m.calculus}.{m.sort}" for m in ob.quantified
            if count_terms(spec.calculi[m.calculus], m.sort, b.size, b.names) == 0]


def _error_record(spec: Spec, claim: Claim, opts: RunOptions, e: CalcError) -> dict[str, Any]:
    """The record of a claim that a run-time failure stopped before any case could be named."""
    problem = e.problems[0]
    pos = problem.pos or claim.pos
    b = claim_bounds(spec, claim, opts)
    v = Verdict(claim.name, claim.file, claim.text, ERROR, b, reason=problem.message)
    v.error = {"message": problem.message,
               "at": str(pos) if pos is not None and pos.line > 0 else None,
               "hint": problem.hint, "case": None}
    ob = {"name": claim.name, "file": claim.file, "formula": claim.text, "head": True,
          "kind": "fixed", "verdict": v.to_json()}
    return {"claim": claim.name, "file": claim.file, "formula": claim.text,
            "bounds": b.as_dict(), "shorthand": False, "obligations": [ob],
            "shard": list(opts.shard) if opts.shard else None}


def _engine(spec: Spec, ob: Obligation, opts: RunOptions) -> str:
    """The engine for one relational obligation: enumeration unless smt or auto says otherwise
    (the rule of auto is in obligations/engines/smt.py)."""
    if opts.engine == "enum":
        return "enum"
    from calcscout.obligations.engines.smt import choose_engine

    return choose_engine(ob, opts.engine, spec)


def finish_claim(rec: dict[str, Any], extra_parts: dict[str, list] | None = None
                 ) -> list[Verdict]:
    """The verdicts of one claim from its records; ``extra_parts`` adds other shards'
    partials (by obligation name), as ``merge`` does."""
    b = Bounds(**rec["bounds"])
    head_v: Verdict | None = None
    parts_v: list[Verdict] = []
    relational: list[enumeration.Partial] = []
    for o in rec["obligations"]:
        if o["kind"] != "relational":
            continue
        raw = list(o["parts"]) + list((extra_parts or {}).get(o["name"], []))
        relational.extend(enumeration.Partial.from_json(o["name"], x) for x in raw)
    for o in rec["obligations"]:
        if o["kind"] == "relational":
            parts = [x for x in relational if x.name == o["name"]]
            v = enumeration.combine(o["name"], o["file"], o["formula"], b, parts)
        elif o["kind"] == "normalize":
            cutoffs = {}
            for name in {x.name for x in relational}:
                mine = [x for x in relational if x.name == name]
                cutoffs[name] = enumeration.first_failure(mine, any(x.collect_all for x in mine))
            v = enumeration.normalize_verdict(o["name"], o["file"], o["formula"], o["translation"],
                                              o["group"], b, relational, cutoffs,
                                              proof=o.get("proof"))
        else:
            v = Verdict.from_json(o["verdict"])
        if o.get("induction") is not None and v.proof is None:
            v.proof = o["induction"]
        if "empty" in o and v.verdict == HOLDS and v.scope != "all" and v.tried == 0:
            # vacuous: "holds" must not read as if anything had been tried
            empty = o["empty"]
            why = (f"{', '.join(empty)} {'has' if len(empty) == 1 else 'have'} no term"
                   if empty else "the quantified metavariables have no values together")
            v.warning = f"no case at all: {why} up to size {b.size} with {b.names} free name(s)"
        if o["head"]:
            v.lemma = bool(rec.get("lemma"))
            head_v = v
        else:
            v.part_of = rec["claim"]
            parts_v.append(v)
    if head_v is not None:
        _refuted_by_part(head_v, parts_v, relational)
    if head_v is None:
        head_v = Verdict(rec["claim"], rec["file"], rec["formula"],
                         worst([v.verdict for v in parts_v]), b,
                         seconds=sum(v.seconds for v in parts_v))
        head_v.tried = sum(v.tried for v in parts_v)
        head_v.undecided = sum(v.undecided for v in parts_v)
        bad = [v for v in parts_v if v.verdict == head_v.verdict and v.verdict != HOLDS]
        if bad:
            head_v.reason = (f"part {bad[0].name} is {bad[0].verdict}" if bad[0].verdict != ERROR
                             else f"part {bad[0].name} ended in an error")
            head_v.cut_by = bad[0].cut_by
        engines = {v.engine for v in parts_v}
        if len(engines) == 1:
            head_v.engine = engines.pop()
        if parts_v and all(v.scope == "all" for v in parts_v):
            head_v.scope = "all"
            head_v.reason = "every part is proved for all terms"
    return [head_v, *parts_v]


def _refuted_by_part(head: Verdict, parts: list[Verdict],
                     relational: list[enumeration.Partial]) -> None:
    """A claim whose own cases hold or are undecided is refuted by a refuted part (its
    ``normalize(T)`` part), as a shorthand is by its parts; ``tried`` is then the position of
    the part's counterexample, and only the undecided cases before it count."""
    if head.verdict not in (HOLDS, INCONCLUSIVE):
        return
    bad = next((v for v in parts if v.verdict == REFUTED), None)
    if bad is None:
        return
    head.verdict = REFUTED
    head.reason = f"part {bad.name} is refuted"
    head.tried = bad.tried
    mine = [u for p in relational if p.name == head.name for u in p.undecided]
    head.undecided, head.cut_by = enumeration.undecided_tally(mine, bad.tried - 1)
    head.undecided_example = None


def _run_relational(spec: Spec, ob: Obligation, b: Bounds, opts: RunOptions
                    ) -> list[enumeration.Partial]:
    progress = None
    if opts.progress is not None or opts.cases is not None:
        slots = [(spec.calculi[m.calculus], m.sort) for m in ob.quantified]
        assert b.size is not None and b.names is not None
        cases = count_cases(slots, b.size, b.names, opts.shard[1] if opts.shard else 1)
        if opts.cases is not None:
            opts.cases(ob.name, cases)
        if opts.progress is not None:
            def progress(done: int, _name=ob.name, _total=cases.total) -> None:
                opts.progress(_name, done, _total)  # type: ignore[misc]

    if opts.jobs <= 1:
        return [enumeration.run_shard(spec, ob, b, opts.shard, opts.collect_all, progress)]
    from calcscout.obligations.workers import run_shards, usable_cpus

    jobs = min(opts.jobs, usable_cpus())  # more processes than CPUs only cost forks and memory
    if jobs <= 1:
        return [enumeration.run_shard(spec, ob, b, opts.shard, opts.collect_all, progress)]
    return run_shards(spec, ob, b, _subshards(opts.shard, jobs), opts.collect_all, progress)


def _subshards(shard: tuple[int, int] | None, jobs: int) -> list[tuple[int, int]]:
    """Shard i/n split among ``jobs`` processes: shards of the same stream with stride n*jobs."""
    i, n = shard if shard else (1, 1)
    return [(i + j * n, n * jobs) for j in range(jobs)]


def _run_rewriting(spec: Spec, ob: Obligation, b: Bounds, opts: RunOptions) -> Verdict:
    from calcscout.rules.core.spec import Confluent

    try:
        from calcscout.obligations.engines import confluence
    except ImportError:  # the rewriting decisions are a module of their own
        return Verdict(ob.name, ob.claim.file, ob.text, INCONCLUSIVE, b,
                       reason="confluent and terminating are not decided in this build")
    if isinstance(ob.formula, Confluent):
        return confluence.decide_confluent(spec, ob, b)
    return confluence.decide_terminating(spec, ob, b, timeout=opts.timeout)
