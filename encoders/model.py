"""Reading a solver's answer to an exported ``.smt2`` file back into terms.

The exported file says (in its ``; calcscout-...`` header) which rule file,
obligation and bounds it encodes; the encoding is rebuilt from them, the
model's values are asserted in it, and the symbolic terms are evaluated in
the resulting model.  A model that does not satisfy the rebuilt encoding (a
file edited by hand, a model of another file) is said to be one.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence

import z3

from calcscout.encoders.smtlib import obligation_query, read_header
from calcscout.encoders.symbolic import evaluate, to_term
from calcscout.rules.core.errors import CalcError, UsageError
from calcscout.rules.core.spec import Bounds, Claim, Spec
from calcscout.rules.loading.files import read_text


def parse_sexprs(text: str, where: str) -> list:
    """S-expressions of ``text`` as nested lists of atoms (strings)."""
    tokens = re.findall(r'\(|\)|"(?:[^"]|"")*"|\|[^|]*\||[^\s()]+', text)
    stack: list[list] = [[]]
    for tok in tokens:
        if tok == "(":
            stack.append([])
        elif tok == ")":
            if len(stack) == 1:
                raise UsageError(f"{where}: unbalanced ')' in the solver's output")
            done = stack.pop()
            stack[-1].append(done)
        else:
            stack[-1].append(tok)
    if len(stack) != 1:
        raise UsageError(f"{where}: the solver's output ends inside a parenthesis")
    return stack[0]


def read_model(path: str) -> tuple[str, dict[str, int | bool]]:
    """The solver's answer (``sat``, ``unsat``, ``unknown``) and its model's values."""
    text = read_text(path, what="solver output")
    items = parse_sexprs(text, path)
    answer = next((x for x in items if isinstance(x, str)), None)
    if answer not in ("sat", "unsat", "unknown"):
        raise UsageError(f"{path} does not start with a solver's answer (sat, unsat or unknown)")
    values: dict[str, int | bool] = {}

    todo = list(reversed(items))  # a loop, not recursion: the output may be nested deep
    while todo:
        x = todo.pop()
        if isinstance(x, list):
            if len(x) == 5 and x[0] == "define-fun" and x[2] == []:
                values[x[1].strip("|")] = _value(x[4], x[3], path)
                continue
            todo.extend(reversed(x))
    return answer, values


def _value(v, sort, path: str) -> int | bool:
    if sort == "Bool" and v in ("true", "false"):
        return v == "true"
    if sort == "Int":
        digits = v if isinstance(v, str) else (v[1] if isinstance(v, list) and len(v) == 2
                                               and v[0] == "-" and isinstance(v[1], str) else "")
        if len(digits) > 1000:  # no model of a bounded encoding needs such a number
            raise UsageError(f"{path}: a model value of {len(digits)} digits")
        if isinstance(v, str) and re.fullmatch(r"\d+", v):
            return int(v)
        if isinstance(v, list) and len(v) == 2 and v[0] == "-" and re.fullmatch(r"\d+", v[1]):
            return -int(v[1])
    raise UsageError(f"{path}: a model value {v!r} of sort {sort!r} that calcscout cannot read")


def explain_model(solver_output_path: str, smt2_path: str,
                  obligations_of: Callable[[Spec, Claim], Sequence], judge_for: Callable) -> str:
    """The counterexample a solver's model of an exported file stands for, as text.

    The obligations layer passes in what the encoders may not import:
    ``obligations_of(spec, claim)`` gives a claim's obligations (its own, then its
    parts), ``judge_for(spec, obligation, bounds)`` the rewriting engine's
    decision of one case (called on the terms; ``.counterexample(terms)`` for a
    failing one).
    """
    from calcscout.rules.loading.load import load_file
    from calcscout.rules.notation.notation import print_abstract

    try:
        header = read_header(smt2_path)
    except OSError as e:
        raise UsageError(f"cannot read {smt2_path}: {e.strerror}") from None
    except UnicodeDecodeError:
        raise UsageError(f"{smt2_path} is not a text file written by calcscout export") from None
    missing = [k for k in ("spec", "claim", "obligation", "bounds") if k not in header]
    if missing:
        raise UsageError(f"{smt2_path} was not written by calcscout export, or its header was "
                         f"edited: no calcscout-{missing[0]} line")
    try:
        raw = dict(kv.split("=", 1) for kv in header["bounds"].split())
        bounds = Bounds(**{k: (None if v == "None" else int(v)) for k, v in raw.items()})
    except (ValueError, TypeError):
        raise UsageError(f"{smt2_path}: cannot read its calcscout-bounds line "
                         f"{header['bounds']!r}") from None
    answer, values = read_model(solver_output_path)
    if answer == "unsat":
        return (f"the solver answered unsat for {header['obligation']}: no counterexample up "
                f"to size {bounds.size}; the claim holds within these bounds")
    if answer == "unknown":
        return f"the solver answered unknown for {header['obligation']}: nothing is decided"
    spec = load_file(header["spec"])
    claim = next((c for c in spec.claims if c.name == header["claim"]), None)
    if claim is None:
        raise UsageError(f"{header['spec']} has no claim {header['claim']} any more")
    ob = next((o for o in obligations_of(spec, claim) if o.name == header["obligation"]), None)
    if ob is None:
        raise UsageError(f"claim {claim.name} has no part {header['obligation']} any more")
    sizes = sorted(int(k[4:]) for k, v in values.items() if re.fullmatch(r"size\d+", k) and v)
    if not sizes:
        raise UsageError(f"{solver_output_path}: the model sets no literal sizeN true; it is not "
                         f"a model of {smt2_path}")
    n = sizes[0]
    ctx = z3.Context()
    try:
        enc, facts, lits, envs = obligation_query(spec, ob, bounds, ctx, upto=n)
    except CalcError:
        raise
    env = dict(envs).get(n)
    if env is None:
        raise UsageError(f"{smt2_path}: there is no size {n} in this encoding")
    s = z3.Solver(ctx=ctx)
    s.add(facts)
    s.add(z3.Bool(f"size{n}", ctx))
    known = {str(d): d for d in _declared(facts, ctx)}
    for name, v in values.items():
        d = known.get(name)
        if d is None:
            continue
        s.add(d == (z3.BoolVal(v, ctx) if isinstance(v, bool) else z3.IntVal(v, ctx)))
    if s.check() != z3.sat:
        raise UsageError(f"{solver_output_path} is not a model of the query calcscout builds for "
                         f"{ob.name}: was {smt2_path} edited, or is this the answer to another "
                         "file?")
    model = s.model()
    memo: dict = {}
    terms = {k: to_term(evaluate(sym, model, memo)) for k, sym in env.items()}
    judge = judge_for(spec, ob, spec.effective_bounds(bounds))
    verdict = judge(terms)
    lines = [f"{ob.name}: {ob.text}", f"model of size {n}:"]
    if verdict == "fail":
        ce = judge.counterexample(terms)
        width = max(len(k) for k in ce.terms)
        lines += [f"  {k.ljust(width)} = {v}" for k, v in ce.terms.items()]
        lines.append(f"  evidence: {ce.evidence}")
    else:
        for k, t in terms.items():
            calc = spec.calculi[next(m.calculus for m in ob.quantified)]
            lines.append(f"  {k} = {print_abstract(calc, t)}")
        lines.append("  the rewriting engine does not fail this case ("
                     + ("a candidate it settled" if verdict == "ok" else "undecided within "
                        "the bounds") + ")")
    return "\n".join(lines)


def _declared(facts: list, ctx: z3.Context) -> list:
    """The uninterpreted constants of ``facts``."""
    seen: dict[int, z3.ExprRef] = {}
    todo = list(facts)
    visited: set[int] = set()
    while todo:
        e = todo.pop()
        i = e.get_id()
        if i in visited:
            continue
        visited.add(i)
        if z3.is_const(e) and e.decl().kind() == z3.Z3_OP_UNINTERPRETED:
            seen[i] = e
        else:
            todo.extend(e.children())
    return list(seen.values())
