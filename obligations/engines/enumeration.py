"""The enumeration engine: every case of an obligation up to the bounds,
smallest first (LANGUAGE.md §8).

The quantified metavariables are enumerated jointly by increasing total size
(calcscout.rules.core.enumerate.enumerate_tuples), so the first failing case is a smallest
one.  A case that fails is re-checked along an independent path (the printed
terms parsed back, translations recomputed with empty memo tables,
reachability by the rewriting module's own graph builder) before it is
reported; a re-check that disagrees is an internal error, never a verdict.

Work is split for ``--jobs`` and ``--shard`` by the enumeration's own
deterministic sharding; a :class:`Partial` records what one shard saw
(failures and undecided cases by their global index), and :func:`combine`
gives exactly the verdict of an unsharded run.
"""

from __future__ import annotations

import gc
import time
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from calcscout.obligations.claims import Obligation
from calcscout.obligations.engines.evaluate import FAIL, OK, UNDECIDED, Evaluator, Outcome, search
from calcscout.obligations.stopping import poll as poll_stop
from calcscout.obligations.verdict import ERROR, HOLDS, INCONCLUSIVE, REFUTED, Counterexample, Verdict
from calcscout.rules.core.enumerate import enumerate_tuples
from calcscout.rules.core.errors import CalcError
from calcscout.rules.core.spec import Atom, Bounds, Calculus, Implies, Spec
from calcscout.rules.core.terms import Term
from calcscout.rules.notation.notation import parse_term, print_abstract
from calcscout.rules.rewriting.rewrite import (
    iter_reducts,
    paused_gc,
    position_text,
    reaches,
    reduction_graph,
    reducts,
)
from calcscout.rules.rewriting.translate import Undefined

ALL_LIMIT = 10


class InternalError(Exception):
    """A re-check disagreed with the engine: a bug in calcscout."""


@dataclass
class Failure:
    index: int  # global position of the quantified tuple in the enumeration
    counterexample: Counterexample


@dataclass
class Partial:
    """What one shard of an obligation's enumeration found."""

    name: str
    tried: int = 0
    cases: int = 0
    failures: list[Failure] = field(default_factory=list)
    # runs of undecided cases: (first index, bound, count, stride); see _note_undecided
    undecided: list[tuple] = field(default_factory=list)
    premise_cut: int = 0
    seconds: float = 0.0
    # translation -> [[case index, 1 cut by steps | 3 by nodes | 2 undefined], ...], with the
    # fine cases as runs [[first index, 0, count, stride], ...] (see _note_normalize)
    normalize: dict[str, list[list[int]]] = field(default_factory=dict)
    # translation -> the smallest-index case where the group had several normal forms
    several: dict[str, dict[str, Any]] = field(default_factory=dict)
    collect_all: bool = False
    example: Failure | None = None  # the first undecided case, to show the user
    premise: bool = False  # the obligation has a premise (cases are the N it generates)
    # a run-time failure that stopped this shard: {"index", "message", "at", "hint", "case"}
    error: dict[str, Any] | None = None

    def to_json(self) -> dict[str, Any]:
        return {"tried": self.tried, "cases": self.cases,
                "failures": [{"index": f.index, "counterexample": f.counterexample.to_json()}
                             for f in self.failures],
                "undecided": [list(u) for u in self.undecided], "premise_cut": self.premise_cut,
                "seconds": self.seconds, "normalize": self.normalize,
                "several": self.several,
                "collect_all": self.collect_all,
                "example": ({"index": self.example.index,
                             "counterexample": self.example.counterexample.to_json()}
                            if self.example else None),
                "premise": self.premise, "error": self.error}

    @classmethod
    def from_json(cls, name: str, d: dict[str, Any]) -> Partial:
        return cls(name, d["tried"], d["cases"],
                   [Failure(f["index"], Counterexample.from_json(f["counterexample"]))
                    for f in d["failures"]],
                   [tuple(u) for u in d["undecided"]], d["premise_cut"], d["seconds"],
                   d.get("normalize", {}), d.get("several", {}),
                   d.get("collect_all", False),
                   Failure(d["example"]["index"],
                           Counterexample.from_json(d["example"]["counterexample"]))
                   if d.get("example") else None,
                   d.get("premise", False), d.get("error"))


Progress = Callable[[int], None]


def run_shard(spec: Spec, ob: Obligation, bounds: Bounds, shard: tuple[int, int] | None = None,
              collect_all: bool = False, progress: Progress | None = None) -> Partial:
    """Enumerate this shard's cases of a relational obligation (Atom or Implies)."""
    start = time.perf_counter()
    f = ob.formula
    assert isinstance(f, Atom | Implies)
    ev = Evaluator(spec, bounds)
    slots = [(spec.calculi[m.calculus], m.sort) for m in ob.quantified]
    assert bounds.size is not None and bounds.names is not None
    part = Partial(ob.name, collect_all=collect_all, premise=isinstance(f, Implies))
    i0, n = (shard[0] - 1, shard[1]) if shard else (0, 1)
    stream = enumerate_tuples(slots, bounds.size, bounds.names, shard=shard)
    with paused_gc():
        _run_cases(spec, ob, bounds, ev, f, stream, i0, n, part, collect_all, progress)
    part.seconds = time.perf_counter() - start
    return part


def _run_cases(spec: Spec, ob: Obligation, bounds: Bounds, ev: Evaluator, f: Atom | Implies,
               stream, i0: int, n: int, part: Partial, collect_all: bool,
               progress: Progress | None) -> None:
    """Decide the stream's cases in order, stopping at the first failure unless collecting."""
    for k, values in enumerate(stream):
        if k % 512 == 511:
            gc.collect(0)  # the young generation only: cheap, and frees any short cycles
        if k % 64 == 63:
            poll_stop()  # a stop request the signal handler could not raise here
        index = i0 + k * n
        env = {m.name: v for m, v in zip(ob.quantified, values, strict=True)}
        part.tried += 1
        if progress is not None and part.tried % 64 == 0:
            progress(part.tried)
        ev.case_norm = {}
        try:
            outcome, case_env, step, seen = _decide_tuple(ev, f, env, part)
        except _CaseError as e:
            part.error = _error_record(spec, ob, bounds, index, e)
            break
        for trn, (code, undefined) in ev.case_norm.items():
            _note_normalize(part.normalize.setdefault(trn, []), index, code, n)
            if code == 2 and trn not in part.several:
                part.several[trn] = _several_example(spec, trn, index, undefined, bounds)
        if outcome.status == UNDECIDED:
            _note_undecided(part.undecided, index, outcome.cut_by or "steps", n)
            if part.example is None:
                part.example = Failure(index, build_counterexample(spec, ob, ev, case_env, seen,
                                                                   outcome, step))
        elif outcome.status == FAIL:
            ce = build_counterexample(spec, ob, ev, case_env, seen, outcome, step)
            recheck(spec, ob, bounds, case_env, ce)
            part.failures.append(Failure(index, ce))
            if not collect_all or len(part.failures) >= ALL_LIMIT:
                break


class _CaseError(Exception):
    """A run-time failure (a :class:`CalcError`) while one case was decided, with the case."""

    def __init__(self, error: CalcError, case: dict[str, Term]):
        super().__init__(str(error))
        self.error = error
        self.case = case


def _note_undecided(entries: list[tuple], index: int, bound: str, stride: int) -> None:
    """Record an undecided case: consecutive cases of this shard cut by the same bound make
    one run ``(first index, bound, count, stride)``, so that the record does not grow with
    the number of cases."""
    last = entries[-1] if entries else None
    if (last is not None and len(last) == 4 and last[1] == bound
            and last[0] + last[2] * stride == index):
        entries[-1] = (last[0], bound, last[2] + 1, stride)
    else:
        entries.append((index, bound, 1, stride))


def undecided_tally(entries, below: int | None = None) -> tuple[int, str | None]:
    """How many undecided cases have an index below ``below`` (all when None), and the bound
    that cut most of them (on a tie, the one that cut the earliest case).  An entry is a run
    ``(first index, bound, count, stride)`` or a single ``(index, bound)``."""
    per: dict[str, list[int]] = {}  # bound -> [count, first index]
    for e in entries:
        start, bound = e[0], e[1]
        count, stride = (e[2], e[3]) if len(e) == 4 else (1, 1)
        if below is not None:
            count = min(count, max(0, -(-(below - start) // stride)))
        if count:
            c = per.setdefault(bound, [0, start])
            c[0] += count
            c[1] = min(c[1], start)
    total = sum(c[0] for c in per.values())
    main = min(per, key=lambda b: (-per[b][0], per[b][1])) if per else None
    return total, main


def _note_normalize(entries: list[list[int]], index: int, code: int, stride: int) -> None:
    """Record a case's normalisation outcome.  The cases where it was fine (code 0, nearly
    all) are kept as runs ``[first index, 0, count, stride]`` of consecutive cases of this
    shard, so that the record does not grow with the number of cases; the others as
    ``[index, code]``."""
    if code == 0:
        last = entries[-1] if entries else None
        if last is not None and len(last) == 4 and last[0] + last[2] * stride == index:
            last[2] += 1
        else:
            entries.append([index, 0, 1, stride])
    else:
        entries.append([index, code])


def _decide_tuple(ev: Evaluator, f, env: dict[str, Term], part: Partial):
    """The outcome of the cases of one quantified tuple (several, for a premise)."""
    if isinstance(f, Atom):
        part.cases += 1
        seen: dict = {}
        try:
            return ev.decide(f, env, seen), env, None, seen
        except CalcError as e:
            raise _CaseError(e, env) from e
    undecided: tuple | None = None
    m = env[f.premise.left.name]
    nname = f.premise.right.name  # type: ignore[union-attr]
    case = env
    try:
        for value, rule, pos in ev.generated(f.premise, m):
            part.cases += 1
            case = dict(env)
            case[nname] = value
            seen = {}
            o = ev.decide(f.conclusion, case, seen)
            if o.status == FAIL:
                return o, case, (rule, pos), seen
            if o.status == UNDECIDED and undecided is None:
                undecided = (o, case, (rule, pos), seen)
            case = env  # an error in generating the next N belongs to M alone
    except CalcError as e:
        raise _CaseError(e, case) from e
    if ev.premise_cut:
        part.premise_cut += 1
    if undecided is not None:
        return undecided
    return Outcome(OK), env, None, {}


def error_record(spec: Spec, ob: Obligation, bounds: Bounds, index: int, error: CalcError,
                 case: dict[str, Term]) -> dict[str, Any]:
    """What the report says of a run-time failure met on ``case`` (the quantified
    metavariables' values, and a premise's N where one was generated): the message, where in
    the rule file, the hint and the case, as the ``error`` field of the verdict (plus
    ``index``, the case's position).  The case is decided again with empty memo tables
    first, and must fail the same way (else InternalError).  The solver engine uses it too,
    so that both engines report a run-time failure alike."""
    return _error_record(spec, ob, bounds, index, _CaseError(error, case))


def _error_record(spec: Spec, ob: Obligation, bounds: Bounds, index: int,
                  e: _CaseError) -> dict[str, Any]:
    calcs = {m.name: m.calculus for m in ob.quantified}
    f = ob.formula
    if isinstance(f, Implies):
        calcs[f.premise.right.name] = f.premise.left.calculus  # type: ignore[union-attr]
    terms = {k: print_abstract(spec.calculi[calcs[k]], v) for k, v in e.case.items()}
    size = sum(e.case[m.name].size for m in ob.quantified)
    problem = e.error.problems[0]
    pos = problem.pos or ob.claim.pos  # a missing case has no equation to point at
    again = Evaluator(spec, bounds)
    try:
        if isinstance(f, Implies) and len(e.case) > len(ob.quantified):
            again.decide(f.conclusion, dict(e.case), {})
        else:
            _decide_tuple(again, f, dict(e.case), Partial(ob.name))
    except (CalcError, _CaseError) as x:
        err = x.error if isinstance(x, _CaseError) else x
        if err.problems[0].message != problem.message:
            raise InternalError(f"re-check: the error of {ob.name} changed to "
                                f"{err.problems[0].message}") from None
    else:
        raise InternalError(f"re-check: the error of {ob.name} did not happen again") from None
    return {"index": index, "message": problem.message,
            "at": str(pos) if pos is not None and pos.line > 0 else None,
            "hint": problem.hint, "case": {"size": size, "terms": terms}}


def _several_example(spec: Spec, trn: str, index: int, u: Undefined | None,
                     bounds: Bounds) -> dict[str, Any]:
    tr = spec.translations[trn]
    calc = spec.calculi[tr.target]
    assert u is not None
    _recheck_normal_forms(calc, tr.normalize, u, bounds)
    return {"index": index, "term": print_abstract(calc, u.built),
            "normal_forms": [print_abstract(calc, t) for t in u.normal_forms[:4]],
            "size": u.built.size, "cycles": u.cut_by == "cycle"}


def _recheck_normal_forms(calc: Calculus, group: str | None, u: Undefined, bounds: Bounds) -> None:
    """Before a normalisation is reported undefined: each normal form it names is one, is
    distinct, and is reached from the built term by the early-exit search (not the graph
    builder that found it)."""
    assert bounds.steps is not None and bounds.nodes is not None
    if u.reason == "several-normal-forms":
        ok = len(set(u.normal_forms)) >= 2 and all(
            not reducts(calc, t, group) and
            search(calc, u.built, t, bounds.steps, bounds.nodes, group).found
            for t in u.normal_forms[:4])
    else:  # a complete graph without a normal form: no reachable term is normal
        r = search(calc, u.built, u.built, bounds.steps, bounds.nodes, group, plus=True)
        ok = r.complete and not r.normal_forms
    if not ok:
        raise InternalError(f"re-check: the normalisation of {u.built!r} is not undefined")


# ---------------------------------------------------------------- counterexamples


def build_counterexample(spec: Spec, ob: Obligation, ev: Evaluator, env: dict[str, Term],
                         seen: dict, outcome: Outcome, step) -> Counterexample:
    terms: dict[str, Any] = {}
    size = 0
    for m in ob.quantified:
        terms[m.name] = print_abstract(spec.calculi[m.calculus], env[m.name])
        size += env[m.name].size
    f = ob.formula
    details = dict(outcome.details)
    evidence = outcome.evidence
    if isinstance(f, Implies):
        nname = f.premise.right.name  # type: ignore[union-attr]
        calc = spec.calculi[f.premise.left.calculus]
        terms[nname] = print_abstract(calc, env[nname])
        rule, pos = step
        rel = f.premise.relation
        assert rel is not None
        if rule:
            where = position_text(pos)
            details["premise_step"] = {"rule": rule, "position": where}
            evidence = (f"{f.premise.left.name} {rel.kind} {nname} (first step by rule {rule} at "
                        f"position {where}); " + evidence)
    for key, (calc_name, value) in seen.items():
        if key in terms:
            continue
        calc = spec.calculi[calc_name]
        if isinstance(value, Undefined):
            why = ("several normal forms" if value.reason == "several-normal-forms"
                   else f"no normal form within the bound on {value.cut_by}")
            terms[key] = f"undefined: {print_abstract(calc, value.built)} has {why}"
        else:
            terms[key] = print_abstract(calc, value)
    return Counterexample(size, terms, evidence, details)


def recheck(spec: Spec, ob: Obligation, bounds: Bounds, env: dict[str, Term],
            ce: Counterexample) -> None:
    """Decide the failing case again along an independent path; raise InternalError if it
    does not fail there too."""
    fresh_env: dict[str, Term] = {}
    f = ob.formula
    names = [m.name for m in ob.quantified]
    calcs = {m.name: m.calculus for m in ob.quantified}
    if isinstance(f, Implies):
        names.append(f.premise.right.name)  # type: ignore[union-attr]
        calcs[f.premise.right.name] = f.premise.left.calculus  # type: ignore[union-attr]
    for n in names:
        calc = spec.calculi[calcs[n]]
        t = parse_term(calc, ce.terms[n], "<counterexample>")
        if t is not env[n]:
            raise InternalError(f"counterexample {n} = {ce.terms[n]} does not read back as the "
                                "term that failed")
        fresh_env[n] = t
    ev = Evaluator(spec, bounds)
    if isinstance(f, Implies):
        m = fresh_env[f.premise.left.name]
        n = fresh_env[f.premise.right.name]  # type: ignore[union-attr]
        rel = f.premise.relation
        assert rel is not None and bounds.steps is not None and bounds.nodes is not None
        calc = spec.calculi[rel.calculus or f.premise.left.calculus]
        if rel.kind in ("->", "->="):
            ok = (rel.kind == "->=" and m is n) or any(
                s.result is n for s in iter_reducts(calc, m, rel.group))
        else:
            ok = search(calc, m, n, bounds.steps, bounds.nodes, rel.group,
                        plus=rel.kind == "->+").found
        if not ok:
            raise InternalError("re-check: the premise's N is not generated by M")
        atom = f.conclusion
    else:
        atom = f
    if isinstance(atom, Atom) and atom.relation is not None and atom.relation.kind in ("->*", "->+"):
        # independent reachability: the full graph, not the early-exit search
        left = ev.value(atom.left, fresh_env, {})
        right = ev.value(atom.right, fresh_env, {})  # type: ignore[arg-type]
        calc = spec.calculi[atom.relation.calculus or atom.left.calculus]
        assert bounds.steps is not None and bounds.nodes is not None
        g = reduction_graph(calc, left, bounds.steps, bounds.nodes, atom.relation.group)
        if not g.graph["complete"]:
            raise InternalError("re-check: the graph of a definite failure is not complete")
        if atom.relation.kind == "->+" and left is right:
            fails = not any(g.has_edge(x, left) for x in g)  # no cycle back to the start
        else:
            fails = reaches(g, right) is None
        if not fails:
            raise InternalError("re-check: the target is reachable after all")
        return
    outcome = ev.decide(atom, fresh_env, {})
    if outcome.status != FAIL:
        raise InternalError(f"re-check of counterexample for {ob.name} gave {outcome.status}")


# ---------------------------------------------------------------- combining


def combine(name: str, file: str, text: str, bounds: Bounds, parts: list[Partial],
            engine: str = "enum") -> Verdict:
    """The verdict of the whole enumeration from its shards' partials."""
    failures = sorted((f for p in parts for f in p.failures), key=lambda f: f.index)
    undecided = [u for p in parts for u in p.undecided]
    seconds = max((p.seconds for p in parts), default=0.0)
    v = Verdict(name, file, text, HOLDS, bounds, engine=engine, seconds=seconds)
    premise_cut = sum(p.premise_cut for p in parts)
    error = min((p.error for p in parts if p.error is not None), key=lambda e: e["index"],
                default=None)
    if error is not None:
        # a single run stops at the error: what other shards saw after it does not count
        failures = [f for f in failures if f.index < error["index"]]
        if not failures or _collect_all(parts):
            v.verdict = ERROR
            v.tried = error["index"] + 1
            v.error = {k: error[k] for k in ("message", "at", "hint", "case")}
            v.reason = error["message"]
            v.undecided, v.cut_by = undecided_tally(undecided, error["index"])
            v.more = [f.counterexample for f in failures[:ALL_LIMIT]]
            return v
    if failures:
        first = failures[0]
        v.verdict = REFUTED
        v.counterexample = first.counterexample
        v.tried = first.index + 1
        collected = failures[:ALL_LIMIT]
        if _collect_all(parts) and len(collected) > 1:
            v.more = [f.counterexample for f in collected]
            v.tried = sum(p.tried for p in parts)
            v.undecided, v.cut_by = undecided_tally(undecided)  # no error here: it returned
        else:
            v.undecided, v.cut_by = undecided_tally(undecided, first.index)
    else:
        v.tried = sum(p.tried for p in parts)
        v.undecided, v.cut_by = undecided_tally(undecided)
        if v.undecided:
            v.verdict = INCONCLUSIVE
            if v.cut_by == "normalize":
                v.reason = (f"{v.undecided} of {v.tried} case(s) need a normalised "
                            "translation where it is undefined (see its normalize part)")
            else:
                v.reason = (f"{v.undecided} of {v.tried} case(s) were cut by the bound on "
                            f"{v.cut_by} before they could be settled")
            examples = [p.example for p in parts if p.example is not None]
            if examples:
                v.undecided_example = min(examples, key=lambda f: f.index).counterexample
    if v.verdict == HOLDS and parts and all(p.premise for p in parts) and \
            sum(p.cases for p in parts) == 0:
        v.vacuous = True
        v.reason = "no term within the bounds has a step"
    if premise_cut:
        v.notes.append(f"the premise's reduction graph was cut for {premise_cut} value(s); the "
                       "claim was checked only for the N it generated")
    return v


def _collect_all(parts: list[Partial]) -> bool:
    return any(p.collect_all for p in parts)


def normalize_verdict(name: str, file: str, text: str, trn: str, group: str, bounds: Bounds,
                      parts: list[Partial], cutoffs: dict[str, int | None],
                      engine: str = "enum", proof: dict[str, Any] | None = None) -> Verdict:
    """The ``normalize(T)`` part: the group ended with one normal form on every term it met.

    Only the cases each obligation's own verdict rests on count (up to its first
    counterexample, ``cutoffs``), so that every split of the work gives the same part.
    """
    met = several = 0
    cuts: Counter[str] = Counter()
    example = None
    for p in parts:
        limit = cutoffs.get(p.name)
        for entry in p.normalize.get(trn, []):
            index, code = entry[0], entry[1]
            if len(entry) == 4:  # a run of cases where the group was fine
                count, stride = entry[2], entry[3]
                if limit is not None:
                    count = min(count, max(0, (limit - index) // stride + 1))
                met += count
                continue
            if limit is not None and index > limit:
                continue
            met += 1
            if code in (1, 3):
                cuts["steps" if code == 1 else "nodes"] += 1
            elif code == 2:
                several += 1
        ex = p.several.get(trn)
        if ex is not None and (limit is None or ex["index"] <= limit):
            if example is None or (ex["index"], ex["size"]) < (example["index"], example["size"]):
                example = ex
    v = Verdict(name, file, text, HOLDS, bounds, tried=met, engine=engine)
    if several and example is not None:
        v.verdict = REFUTED
        v.tried = example["index"] + 1  # as for every refuted claim: the case's position
        if example.get("cycles"):
            evidence = (f"group {group} has no normal form from {example['term']}: its reduction "
                        "graph is complete and every path cycles")
        else:
            evidence = (f"group {group} reaches several normal forms from {example['term']}: "
                        f"{', '.join(example['normal_forms'])}")
        v.counterexample = Counterexample(
            example["size"], {"term": example["term"], "normal_forms": example["normal_forms"]},
            evidence)
    elif cuts:
        v.verdict = INCONCLUSIVE
        v.undecided = sum(cuts.values())
        v.cut_by = cuts.most_common(1)[0][0]
        v.reason = (f"{v.undecided} of {met} case(s) met a term with no normal form under "
                    f"{group} within the bound on {v.cut_by}")
    if proof is not None:  # the group proved terminating and confluent, or why not
        from calcscout.obligations.engines.termination import with_normalize_proof

        v = with_normalize_proof(v, proof)
    return v


def first_failure(parts: list[Partial], collect_all: bool) -> int | None:
    """The index an obligation's verdict stops at (its first counterexample), if any."""
    errors = [p.error["index"] for p in parts if p.error is not None]
    if collect_all:
        return min(errors) if errors else None
    indices = [f.index for p in parts for f in p.failures] + errors
    return min(indices) if indices else None


def is_relational(ob: Obligation) -> bool:
    return isinstance(ob.formula, Atom | Implies)
