"""Obligations as plain SMT-LIB 2.6 files, one per obligation (``calcscout export``).

A file is the whole bounded query of one obligation in ``QF_LIA``: the node
array up to the size bound, one literal ``sizeN`` per size whose truth says
that the claim fails on terms of total size ``N``, and the assertion that
one of them holds.  Any solver reads it; :func:`calcscout.encoders.model.explain_model`
turns the solver's model back into the counterexample's terms, reading the
``; calcscout-...`` lines of the header to rebuild the encoding.
"""

from __future__ import annotations

import os
import re
from collections.abc import Sequence
from pathlib import Path

import z3

from calcscout.encoders.smt import Encoding, encodable
from calcscout.encoders.symbolic import Budget
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Bounds, Claim, Spec

HEADER_KEYS = ("spec", "claim", "obligation", "bounds", "mode")


def obligation_query(spec: Spec, ob, bounds: Bounds, ctx: z3.Context, upto: int | None = None
                     ) -> tuple[Encoding, list, list, list]:
    """The encoding of ``ob`` up to ``upto`` (the size bound): its facts, size literals and
    per-size symbolic values."""
    enc = Encoding(spec, ob.formula, ob.quantified, bounds, ctx)
    assert bounds.size is not None
    facts: list = []
    lits: list = []
    envs: list = []
    last = bounds.size if upto is None else upto
    for k in range(last):
        f, assume, env = enc.query(k)
        facts.extend(f)
        if env is None or k + 1 < len(ob.quantified):
            continue
        lit = z3.Bool(f"size{k + 1}", ctx)
        facts.append(z3.Implies(lit, z3.And([z3.BoolVal(a, ctx) if isinstance(a, bool) else a
                                             for a in assume])))
        lits.append(lit)
        envs.append((k + 1, env))
    return enc, facts, lits, envs


def export_obligations(spec: Spec, claim: Claim, obligations: Sequence, bounds: Bounds,
                       out_dir: str | os.PathLike, skipped: list[str] | None = None
                       ) -> list[Path]:
    """Write one ``.smt2`` file per encodable obligation of ``claim`` into ``out_dir``.

    ``obligations`` are the claim's obligations as the caller planned them (the
    claim's own, then its parts; ``normalize(T)`` parts are not encoded).
    ``bounds`` are the effective bounds (size and names matter). Raises
    :class:`~calcscout.rules.core.errors.EncodingError` when no obligation of the claim can be encoded.
    An obligation whose encoding grows past its budget is not written; ``skipped`` gets
    the reason.
    """
    obs = [o for o in obligations if o.normalizes is None]
    out = Path(out_dir)
    written: list[Path] = []
    reasons: list[str] = []
    todo = []
    for ob in obs:
        ok, why = encodable(spec, ob.formula)
        if ok and len({m.calculus for m in ob.quantified}) == 1:
            todo.append(ob)
        else:
            reasons.append(f"{ob.name}: {why or 'several calculi'}")
    if not todo:
        raise EncodingError(f"claim {claim.name} has no obligation the SMT engine can encode: "
                            + "; ".join(reasons), claim.pos)
    out.mkdir(parents=True, exist_ok=True)
    for ob in todo:
        ctx = z3.Context()
        try:
            enc, facts, lits, _ = obligation_query(spec, ob, bounds, ctx)
        except Budget as e:
            if skipped is not None:
                skipped.append(f"{ob.name}: the encoding grew past its budget ({e.args[0]} "
                               "symbolic terms and memo entries); give a smaller --size")
            continue
        s = z3.Solver(ctx=ctx)
        s.add(facts)
        s.add(z3.Or(lits) if lits else z3.BoolVal(False, ctx))
        body = s.to_smt2()
        body = re.sub(r"\(check-sat\)\s*$", "", body.rstrip())
        text = _header(spec, ob, bounds, enc.mode) + body + "\n(check-sat)\n(get-model)\n"
        path = out / f"{_safe(ob.name)}.smt2"
        tmp = path.with_suffix(".smt2.tmp")
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
        written.append(path)
    return written


def _header(spec: Spec, ob, bounds: Bounds, mode: str) -> str:
    n = bounds.size
    meaning = ("sat: a counterexample of total size at most {n} exists; the true literal "
               "sizeK with the smallest K gives its size" if mode == "decide" else
               "sat: a CANDIDATE counterexample of size at most {n} (the reduction is checked "
               "one step deep); the rewriting engine must settle it")
    lines = [
        f"calcscout export of {ob.name}: {ob.text}",
        f"bounds: size {bounds.size}, names {bounds.names} (sizes are sums over "
        + ", ".join(m.name for m in ob.quantified) + ")",
        meaning.format(n=n),
        f"unsat: no counterexample up to size {n}: the claim holds within these bounds",
        "to turn a model into terms: calcscout explain --model SOLVER_OUTPUT THIS_FILE",
        "(slot m of the postorder node array: tm tag, sm state, stm start, q/c children, "
        "rm binder of a bound name)",
        f"calcscout-spec: {os.path.abspath(spec.file)}",
        f"calcscout-claim: {ob.claim.name}",
        f"calcscout-obligation: {ob.name}",
        "calcscout-bounds: " + " ".join(f"{k}={v}" for k, v in bounds.as_dict().items()),
        f"calcscout-mode: {mode}",
    ]
    return "".join(f"; {line}\n" for line in lines) + "(set-option :produce-models true)\n" \
        "(set-logic QF_LIA)\n"


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name)


def read_header(path: str | os.PathLike) -> dict[str, str]:
    """The ``; calcscout-KEY: value`` lines of an exported file."""
    from calcscout.rules.loading.files import read_text  # regular files only, of bounded size

    out: dict[str, str] = {}
    for line in read_text(path, what="exported .smt2 file").splitlines(keepends=True):
        if not line.startswith(";"):
            if line.strip() and not line.startswith("("):
                break
            continue
        m = re.match(r";\s*calcscout-(\w+):\s*(.*)$", line.rstrip("\n"))
        if m:
            out[m.group(1)] = m.group(2).strip()
    return out
