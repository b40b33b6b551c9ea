"""Combining the reports of ``check --shard I/N`` runs (``calcscout merge``).

A merged report speaks for one whole run, so merge refuses shards that are
not of one run: each shard report records a hash of the rule file and its
includes, the engine and its timeout, ``--all``, the shard count, and per claim its formula
and bounds; all must agree, every shard must be there once, and the rule file
(named in the reports) must still have the recorded hash.  Reports are files
a user can edit, so every counterexample in them (and every term on which a
normalised translation is said to be undefined) is judged again against the
rule file, by the engines' own re-checks, before anything is merged: a forged
or edited counterexample is refused, never printed as a refutation.
"""

from __future__ import annotations

from typing import Any

from calcscout.obligations.claims import Obligation, plan
from calcscout.obligations.commands.explain import load_report
from calcscout.obligations.engines import confluence, enumeration
from calcscout.obligations.engines.evaluate import FAIL, Evaluator
from calcscout.obligations.reporting.report import json_report, output_target
from calcscout.obligations.runner import finish_claim
from calcscout.obligations.verdict import Counterexample, Verdict
from calcscout.rules.core.errors import CalcError, UsageError
from calcscout.rules.core.spec import Atom, Bounds, Confluent, Implies, Spec, Terminating
from calcscout.rules.loading.files import sources_digest
from calcscout.rules.loading.load import load_file
from calcscout.rules.notation.notation import parse_term
from calcscout.rules.rewriting.translate import Undefined

_MALFORMED = (KeyError, TypeError, ValueError, IndexError, AttributeError)


def merge_reports(paths: list[str], output: str | None = None
                  ) -> tuple[dict[str, Any], list[str]]:
    """The merged report, and the rule files it was judged against (to be kept safe from
    the output, with the reports themselves).  ``output`` is checked as soon as those
    files are known, before any counterexample is judged again."""
    reports = [(p, load_report(p)) for p in paths]
    stopped = next(((p, r["stopped"]) for p, r in reports
                    if isinstance(r, dict) and r.get("stopped")), None)
    if stopped is not None:
        raise UsageError(f"{stopped[0]} is the report of a shard stopped by {stopped[1]} before it "
                         "finished; run that shard again")
    for p, r in reports:
        _check_shape(p, r)
    first_path, first = reports[0]
    for key, what in (("file", "rule files"), ("sources", "rule file contents (their hashes)"),
                      ("engine", "engines"), ("timeout", "solver timeouts"),
                      ("all", "--all settings")):
        values = {str(r.get(key)) for _, r in reports}
        if len(values) != 1:
            raise UsageError(f"the reports are of different {what}: "
                             + ", ".join(sorted(values)),
                             hint="merge combines the shards of one run")
    n = {r["shard"][1] for _, r in reports}
    if len(n) != 1:
        raise UsageError("the reports split the work in different numbers of shards: "
                         + ", ".join(str(x) for x in sorted(n)))
    total = n.pop()
    seen: dict[int, str] = {}
    for p, r in reports:
        i = r["shard"][0]
        if i in seen:
            raise UsageError(f"{p} and {seen[i]} are both shard {i}/{total}")
        seen[i] = p
    missing = [i for i in range(1, total + 1) if i not in seen]
    if missing:
        raise UsageError(f"shard {missing[0]}/{total} is missing; merge needs all {total}")
    names = list(first["records"])
    for p, r in reports[1:]:
        if list(r["records"]) != names:
            raise UsageError(f"{p} checked other claims than {first_path}")
        for claim in names:
            a, b = first["records"][claim], r["records"][claim]
            for key, what in (("formula", "formulas"), ("bounds", "bounds"),
                              ("shorthand", "forms")):
                if a.get(key) != b.get(key):
                    raise UsageError(f"{p} and {first_path} give claim {claim} different "
                                     f"{what}: {b.get(key)} and {a.get(key)}",
                                     hint="merge combines the shards of one run")
            if [o.get("name") for o in a["obligations"]] != [o.get("name")
                                                              for o in b["obligations"]]:
                raise UsageError(f"{p} and {first_path} split claim {claim} differently")
    spec = _rule_file(first["file"], first["sources"])
    if output is not None:
        output_target(output, [*paths, *spec.files])
    for p, r in reports:
        _rejudge_report(spec, p, r)
    verdicts = []
    for claim in names:
        rec = first["records"][claim]
        extra: dict[str, list] = {}
        for _, r in reports[1:]:
            for o in r["records"][claim]["obligations"]:
                if o["kind"] == "relational":
                    extra.setdefault(o["name"], []).extend(o["parts"])
        try:
            verdicts.extend(finish_claim(rec, extra))
        except _MALFORMED as e:
            raise UsageError(f"the records of claim {claim} are not well formed "
                             f"({type(e).__name__}: {e})") from None
    return json_report(first["file"], verdicts), list(spec.files)


def _check_shape(path: str, r: dict[str, Any]) -> None:
    """The fields merge relies on, with their types: a report edited by hand, or of another
    version, is refused with what is wrong, not met as a crash half-way."""
    def bad(why: str) -> UsageError:
        return UsageError(f"{path} is not the report of a --shard run: {why}",
                          hint="merge combines the JSON reports of check --shard I/N runs")

    shard = r.get("shard")
    if shard is None:
        raise bad("it has no shard field")
    if (not isinstance(shard, list) or len(shard) != 2
            or not all(type(x) is int for x in shard) or not 1 <= shard[0] <= shard[1]):
        raise bad(f"its shard field is {shard!r}, not [I, N] with 1 <= I <= N")
    if not isinstance(r.get("file"), str) or not r["file"]:
        raise bad("it names no rule file")
    if not isinstance(r.get("sources"), str):
        raise bad("it has no hash of the rule file's contents (a report of an older version?)")
    if r.get("engine") not in ("enum", "smt", "auto") or not isinstance(r.get("all"), bool):
        raise bad("its engine or --all field is missing or wrong")
    if r.get("timeout") is not None and type(r["timeout"]) not in (int, float):
        raise bad(f"its timeout field is {r['timeout']!r}, not a number of seconds")
    records = r.get("records")
    if not isinstance(records, dict):
        raise bad("its records are missing")
    for claim, rec in records.items():
        if not isinstance(rec, dict) or not isinstance(rec.get("obligations"), list):
            raise bad(f"the record of claim {claim} is not well formed")
        try:
            Bounds(**rec["bounds"])
            for o in rec["obligations"]:
                if not isinstance(o.get("name"), str) or not isinstance(o.get("head"), bool):
                    raise ValueError("an obligation without a name or a head flag")
                if o["kind"] == "relational":
                    for x in o["parts"]:
                        enumeration.Partial.from_json(o["name"], x)
                        if not all(isinstance(x.get(k, {}), dict) for k in ("several",
                                                                             "normalize")):
                            raise ValueError("several or normalize is not an object")
                elif o["kind"] == "fixed":
                    Verdict.from_json(o["verdict"])
                elif o["kind"] != "normalize":
                    raise ValueError(f"kind {o['kind']!r}")
        except _MALFORMED as e:
            raise bad(f"the record of claim {claim} is not well formed "
                      f"({type(e).__name__}: {e})") from None


def _rule_file(file: str, digest: str) -> Spec:
    """The rule file the shards checked, refused if it is gone or is not what they read."""
    try:
        spec = load_file(file)
    except CalcError as e:
        raise UsageError(f"the shards' rule file {file} cannot be loaded again, so their "
                         f"counterexamples cannot be checked: {e}",
                         hint="run merge in the folder where check ran, with the same files"
                         ) from None
    now = sources_digest(spec.files)
    if now != digest:
        raise UsageError(f"the rule file {file} (or a file it includes) has changed since the "
                         "shards were checked", hint="check the shards again")
    return spec


def _rejudge_report(spec: Spec, path: str, r: dict[str, Any]) -> None:
    by_name = {c.name: c for c in spec.claims}
    for claim, rec in r["records"].items():
        if claim not in by_name:
            raise UsageError(f"{path}: the rule file has no claim {claim}")
        p = plan(spec, by_name[claim])
        obs = {o.name: o for o in ([p.head] if p.head else []) + list(p.parts)}
        bounds = Bounds(**rec["bounds"])
        for o in rec["obligations"]:
            ob = obs.get(o["name"])
            if ob is None:
                raise UsageError(f"{path}: claim {claim} has no part {o['name']} in the rule file")
            exact = o["kind"] == "relational"  # built by this engine: rebuilt the same
            if exact:
                partials = [enumeration.Partial.from_json(o["name"], x) for x in o["parts"]]
                ces = [f.counterexample for x in partials for f in x.failures]
                for x in partials:
                    for trn, ex in x.several.items():
                        _rejudge_several(spec, trn, ex, bounds, f"{path}: claim {o['name']}")
            elif o["kind"] == "fixed":
                v = Verdict.from_json(o["verdict"])
                ces = v.more or ([v.counterexample] if v.counterexample else [])
            else:
                ces = []
            for ce in ces:
                _rejudge(spec, ob, bounds, ce, exact, f"{path}: claim {o['name']}")


def _rejudge(spec: Spec, ob: Obligation, bounds: Bounds, ce: Counterexample, exact: bool,
             where: str) -> None:
    """Judge one reported counterexample again; a UsageError unless it fails as reported."""
    f = ob.formula
    try:
        if isinstance(f, Confluent | Terminating):
            ok = _rejudge_rewriting(spec, f, bounds, ce)
        elif isinstance(f, Atom | Implies):
            ok = _rejudge_relational(spec, ob, bounds, ce, exact)
        else:  # no counterexample form of its own: nothing here is re-checked by merge
            ok = True
    except enumeration.InternalError as e:
        ok, why = False, str(e)
    except CalcError as e:
        ok, why = False, f"a term does not read back ({e.problems[0].message})"
    except _MALFORMED as e:
        ok, why = False, f"it is not well formed ({type(e).__name__}: {e})"
    else:
        why = "judged again from its terms, the rule file does not give this failure and evidence"
    if not ok:
        raise UsageError(f"{where}: the counterexample in the report is not one ({why})",
                         hint="the report was edited, or is not of this rule file; "
                         "run the shard again")


def _rejudge_several(spec: Spec, trn: str, ex: dict[str, Any], bounds: Bounds,
                     where: str) -> None:
    """A normalised translation said to be undefined on a term (several normal forms, or
    none because every path cycles), checked again by the engine's own re-check."""
    why = "judged again, the group does not do what the report says"
    try:
        tr = spec.translations[trn]
        calc = spec.calculi[tr.target]
        built = parse_term(calc, ex["term"], "<report>")
        nfs = tuple(parse_term(calc, t, "<report>") for t in ex["normal_forms"])
        cycles = ex.get("cycles") is True
        u = Undefined("no-normal-form" if cycles else "several-normal-forms", built, nfs,
                      "cycle" if cycles else None)
        ok = ex["size"] == built.size and (cycles or len(nfs) >= 2)
        if ok:
            enumeration._recheck_normal_forms(calc, tr.normalize, u, bounds)
    except enumeration.InternalError:
        ok = False
    except CalcError as e:
        ok, why = False, f"a term does not read back ({e.problems[0].message})"
    except _MALFORMED as e:
        ok, why = False, f"it is not well formed ({type(e).__name__}: {e})"
    if not ok:
        raise UsageError(f"{where}: the report says the translation {trn} is undefined on a "
                         f"term, and it is not ({why})",
                         hint="the report was edited, or is not of this rule file; "
                         "run the shard again")


def _rejudge_relational(spec: Spec, ob: Obligation, bounds: Bounds, ce: Counterexample,
                        exact: bool) -> bool:
    """The enumeration engine's re-check (enumeration.recheck); then, for a counterexample the
    enumeration engine built (``exact``), the one built again from its terms must be the one
    reported, evidence and all."""
    f = ob.formula
    names = [m.name for m in ob.quantified]
    calcs = {m.name: m.calculus for m in ob.quantified}
    if isinstance(f, Implies):
        names.append(f.premise.right.name)  # type: ignore[union-attr]
        calcs[f.premise.right.name] = f.premise.left.calculus  # type: ignore[union-attr]
    env = {n: parse_term(spec.calculi[calcs[n]], ce.terms[n], "<counterexample>")
           for n in names}
    enumeration.recheck(spec, ob, bounds, env, ce)
    if not exact:
        return True
    ev = Evaluator(spec, bounds)
    if isinstance(f, Atom):
        seen: dict = {}
        outcome = ev.decide(f, env, seen)
        step = None
    else:
        m, n = env[f.premise.left.name], env[f.premise.right.name]  # type: ignore[union-attr]
        step = next(((rule, pos) for value, rule, pos in ev.generated(f.premise, m)
                     if value is n), None)
        seen = {}
        outcome = ev.decide(f.conclusion, env, seen)
        if step is None:
            return False
    if outcome.status != FAIL:
        return False
    again = enumeration.build_counterexample(spec, ob, ev, env, seen, outcome, step)
    return again.to_json() == ce.to_json()


def _rejudge_rewriting(spec: Spec, f: Confluent | Terminating, bounds: Bounds,
                       ce: Counterexample) -> bool:
    """A fork that never joins, or a reduction cycle, checked again by the re-checks the
    rewriting decisions use themselves."""
    calc = spec.calculi[f.calculus]
    b = confluence._bounds(bounds)
    t = parse_term(calc, ce.terms["term"], "<counterexample>")
    if isinstance(f, Terminating):
        cycle = [parse_term(calc, x, "<counterexample>") for x in ce.terms["cycle"]]
        return bool(cycle) and confluence._recheck_cycle(calc, f.group, t, cycle, b)
    a = parse_term(calc, ce.terms["left"], "<counterexample>")
    c = parse_term(calc, ce.terms["right"], "<counterexample>")
    return (confluence._recheck_fork(calc, f.group, t, a, c, b)
            or confluence._recheck_peak(calc, f.group, t, a, c, b))
