"""The SMT engine behind ``--engine smt`` and ``--engine auto`` (the glue to encoders/).

No z3 here: the encoders are imported inside the functions, so that the
obligations package knows nothing of the solver (DESIGN.md).

Which engine ``auto`` takes, per obligation (:func:`choose_engine`):

- ``smt`` for an obligation the solver *decides* — a conclusion ``A == B``,
  ``A : S``, ``A -> B`` or ``A ->= B``, alone or under a premise ``M -> N`` /
  ``M ->= N`` — and that it can encode: there the solver reaches sizes far
  beyond enumeration;
- ``enum`` for everything else: ``->*``, ``->+`` and ``joins`` conclusions
  need long reduction paths, which the rewriting engine explores directly
  while the solver would only propose candidates; translations with ``then
  normalize``, contexts (``reduce in E``, ``E[...]`` in rules) and premises
  ``M ->* N`` are not encoded at all; ``confluent`` and ``terminating`` are
  rewriting questions.
"""

from __future__ import annotations

from calcscout.obligations.claims import Obligation
from calcscout.obligations.engines.enumeration import InternalError, Partial, build_counterexample, recheck
from calcscout.obligations.engines.enumeration import _CaseError as CaseError
from calcscout.obligations.engines.enumeration import _decide_tuple as decide_tuple
from calcscout.obligations.engines.evaluate import FAIL, OK, UNDECIDED, Evaluator
from calcscout.obligations.verdict import HOLDS, INCONCLUSIVE, REFUTED, Verdict, set_run_time_error
from calcscout.rules.core.enumerate import count_tuples, tuple_position
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Atom, Bounds, Implies, Spec
from calcscout.rules.notation.notation import print_abstract
from calcscout.rules.rewriting.translate import TranslationFailure

DECIDED_KINDS = ("==", "->", "->=", ":")


def can_encode(spec: Spec, ob: Obligation) -> tuple[bool, str]:
    """Whether the SMT engine can take ``ob``; the reason when it cannot."""
    from calcscout.encoders.smt import encodable

    if ob.normalizes is not None:
        return False, "the normalize(T) part is decided by rewriting"
    ok, why = encodable(spec, ob.formula)
    if not ok:
        return ok, why
    calcs = {m.calculus for m in ob.quantified}
    if len(calcs) > 1:
        return False, "the quantified metavariables range over several calculi"
    if not ob.quantified:
        return False, "no quantified metavariable"
    return True, ""


def conclusion_kind(ob: Obligation) -> str | None:
    f = ob.formula
    atom = f.conclusion if isinstance(f, Implies) else f
    if not isinstance(atom, Atom):
        return None
    return atom.relation.kind if atom.relation is not None else ":"


def choose_engine(ob: Obligation, requested: str, spec: Spec | None = None) -> str:
    """'enum' or 'smt' for ``ob`` (see the module docstring for the rule of ``auto``).

    ``requested`` 'enum' and 'smt' are taken as they are (``run_smt`` then says
    when the obligation cannot be encoded); ``auto`` needs ``spec`` to see
    whether the obligation can be encoded.
    """
    if requested in ("enum", "smt"):
        return requested
    if requested != "auto":
        raise ValueError(f"unknown engine {requested}")
    if conclusion_kind(ob) not in DECIDED_KINDS:
        return "enum"
    if spec is None:
        return "enum"
    ok, _ = can_encode(spec, ob)
    return "smt" if ok else "enum"


def run_smt(spec: Spec, ob: Obligation, bounds: Bounds, timeout: float | None = None,
            budget: int = 4_000_000) -> Verdict:
    """Decide one relational obligation with the solver, size by size up to ``bounds.size``.

    Raises :class:`~calcscout.rules.core.errors.EncodingError` where the obligation cannot be
    encoded, and :class:`~calcscout.obligations.engines.enumeration.InternalError` where a model of a
    decided claim does not re-check (a bug, never a verdict).
    """
    from calcscout.encoders.z3run import ModelMismatch, solve

    ok, why = can_encode(spec, ob)
    if not ok:
        raise EncodingError(f"{ob.name}: cannot be given to the SMT engine: {why}",
                            ob.claim.pos, hint="use --engine enum or --engine auto")
    f = ob.formula
    judge = _Judge(spec, ob, bounds)
    try:
        res = solve(spec, f, ob.quantified, bounds, judge, timeout, budget)
    except ModelMismatch as e:
        raise InternalError(str(e)) from None
    v = Verdict(ob.name, ob.claim.file, ob.text, HOLDS, bounds, engine="smt",
                seconds=res.seconds)
    slots = [(spec.calculi[m.calculus], m.sort) for m in ob.quantified]
    assert bounds.names is not None
    if res.status == "refuted":
        assert res.terms is not None
        v.verdict = REFUTED
        v.counterexample = judge.counterexample(res.terms)
        # its index in the enumeration, as the enumeration engine counts it
        v.tried = (count_tuples(slots, res.size - 1, bounds.names) + 1
                   + tuple_position(slots, [res.terms[m.name] for m in ob.quantified],
                                    bounds.names))
        v.notes.append(f"smt: no counterexample below size {res.size}; "
                       f"{res.queries} solver quer{'y' if res.queries == 1 else 'ies'}")
    elif res.status == "error":
        assert judge.failure is not None and res.terms is not None
        env, err = judge.failure
        case = {m.name: print_abstract(spec.calculi[m.calculus], env[m.name])
                for m in ob.quantified}
        set_run_time_error(v, err.problems[0].message, case,
                           sum(env[m.name].size for m in ob.quantified))
        v.tried = count_tuples(slots, res.size - 1, bounds.names) + 1 + tuple_position(
            slots, [env[m.name] for m in ob.quantified], bounds.names)
    elif res.status == "holds":
        # JSON `tried` is the number of terms (tuples) the unsat answers cover, the number
        # the enumeration would try; the note says they were covered, not tried one by one
        v.tried = count_tuples(slots, res.proved_upto, bounds.names)
        v.notes.append(f"smt: unsat at every size up to {res.proved_upto} "
                       f"({res.queries} solver quer{'y' if res.queries == 1 else 'ies'}"
                       + (f", {res.candidates} candidate(s) re-checked" if res.candidates
                          else "") + ")")
        v.notes.append(f"smt: the solver's unsat answers cover all {v.tried} terms up to "
                       f"size {res.proved_upto}, not tried one by one")
    else:
        v.verdict = INCONCLUSIVE
        v.reason = res.reason
        v.undecided = res.undecided
        v.cut_by = "steps" if res.undecided else ("timeout" if res.reason and
                                                  "timeout" in res.reason else None)
        v.tried = count_tuples(slots, res.proved_upto, bounds.names)
    if res.candidates:
        v.notes.append(f"smt: {res.candidates} candidate(s) re-checked by rewriting, "
                       f"{res.undecided} undecided")
    v.notes.extend(f"smt: {n}" for n in res.notes)
    return v


def case_judge(spec: Spec, ob: Obligation, bounds: Bounds) -> _Judge:
    """The rewriting engine's decision of the cases a solver finds for ``ob``
    (``explain --model`` hands it to the encoders, which may not import it)."""
    return _Judge(spec, ob, bounds)


class _Judge:
    """The rewriting engine's decision of one case found by the solver."""

    def __init__(self, spec: Spec, ob: Obligation, bounds: Bounds):
        self.spec = spec
        self.ob = ob
        self.bounds = bounds
        self.last: tuple | None = None
        self.failure: tuple[dict, TranslationFailure] | None = None

    def __call__(self, terms: dict) -> str:
        """The case decided as the enumeration engine decides it (for a premise: its
        generated ``N`` in order, the first failing one), so that both engines report the
        same counterexample; the model's own ``N`` is not needed."""
        ev = Evaluator(self.spec, self.bounds)
        ev.case_norm = {}
        env = {m.name: terms[m.name] for m in self.ob.quantified}
        try:
            o, case, step, seen = decide_tuple(ev, self.ob.formula, env,
                                               Partial(self.ob.name))
        except TranslationFailure as e:
            self.failure = (env, e)
            return "error"
        except CaseError as e:  # the enumeration engine's wrapper of a run-time failure
            if not isinstance(e.error, TranslationFailure):
                raise e.error from None
            self.failure = (env, e.error)
            return "error"
        self.last = (ev, case, seen, o, step)
        return _status(o.status)

    def counterexample(self, terms: dict):
        assert self.last is not None
        ev, env, seen, o, step = self.last
        ce = build_counterexample(self.spec, self.ob, ev, env, seen, o, step)
        recheck(self.spec, self.ob, self.bounds, env, ce)
        return ce


def _status(s: str) -> str:
    return {FAIL: "fail", OK: "ok", UNDECIDED: "undecided"}[s]
