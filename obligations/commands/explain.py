"""``calcscout explain``: a claim's evidence again, from a saved JSON report."""

from __future__ import annotations

import json

from calcscout.obligations.reporting.report import evidence_lines, write_atomically
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.errors import UsageError


def load_report(path: str) -> dict:
    try:
        with open(path, encoding="utf-8") as f:
            data = json.load(f)
    except json.JSONDecodeError as e:
        raise UsageError(f"{path} is not a JSON report ({e.msg} at line {e.lineno})") from None
    except OSError as e:
        raise UsageError(f"cannot read {path}: {e.strerror}") from None
    except UnicodeDecodeError as e:
        raise UsageError(f"{path} is not UTF-8 text (a bad byte at offset {e.start})") from None
    if not isinstance(data, dict) or not isinstance(data.get("claims"), list):
        raise UsageError(f"{path} is not a calcscout report")
    return data


def explain_claim(path: str, claim: str, dot_path: str | None = None) -> str:
    data = load_report(path)
    entries = {c["name"]: c for c in data["claims"]}
    if claim not in entries:
        raise UsageError(f"no claim {claim} in {path}",
                         hint="claims: " + ", ".join(entries))
    v = Verdict.from_json(entries[claim])
    lines = evidence_lines(v)
    if v.verdict == "holds":
        lines.insert(1, f"  {v.tried} case(s) tried, none failed"
                     + (f"; proved for all terms ({v.reason})" if v.scope == "all" else ""))
    if dot_path is not None:
        lines.append(f"  graph written to {write_counterexample_graph(data['file'], v, dot_path)}")
    return "\n".join(lines)


def write_counterexample_graph(spec_file: str, v: Verdict, dot_path: str) -> str:
    """Rebuild the reduction graph the evidence speaks of and write it in DOT."""
    from calcscout.obligations.claims import plan
    from calcscout.obligations.reporting.dot import graph_to_dot
    from calcscout.rules.core.spec import Atom, Confluent, Implies, Terminating
    from calcscout.rules.loading.load import load_file
    from calcscout.rules.notation.notation import parse_term
    from calcscout.rules.rewriting.rewrite import reduction_graph

    ce = v.counterexample
    if ce is None:
        raise UsageError(f"claim {v.name} has no counterexample to draw")
    spec = load_file(spec_file)
    base = v.part_of or v.name
    claim = next((c for c in spec.claims if c.name == base), None)
    if claim is None:
        raise UsageError(f"{spec_file} no longer has a claim {base}")
    p = plan(spec, claim)
    ob = next((o for o in ([p.head] if p.head else []) + list(p.parts) if o.name == v.name), None)
    if ob is None:
        raise UsageError(f"{spec_file} no longer has {v.name}")
    f = ob.formula
    b = v.bounds
    if isinstance(f, Confluent | Terminating):
        calc = spec.calculi[f.calculus]
        root, group = ce.terms["term"], f.group
    else:
        atom = f.conclusion if isinstance(f, Implies) else f
        assert isinstance(atom, Atom)
        if atom.relation is None or atom.relation.kind == "==":
            raise UsageError(f"claim {v.name} is not about reduction; there is no graph to draw")
        key = (ce.details.get("graph") or {}).get("root")
        if key is None or key not in ce.terms:
            key = next(iter(ce.terms))
        calc = spec.calculi[atom.relation.calculus or atom.left.calculus]
        root, group = ce.terms[key], atom.relation.group
    term = parse_term(calc, root, "<report>")
    g = reduction_graph(calc, term, b.steps or 10, b.nodes or 20000, group)
    highlight = set()
    for val in ce.terms.values():
        if isinstance(val, str):
            try:
                highlight.add(parse_term(calc, val, "<report>"))
            except Exception:  # a term of another calculus: not in this graph
                pass
    write_atomically(dot_path, graph_to_dot(calc, g, highlight))
    return dot_path


def explain_model(model_path: str, smt2_path: str) -> str:
    try:
        from calcscout.encoders.model import explain_model as run
    except ImportError:
        raise UsageError("explain --model needs the SMT engine, which this build does not "
                         "include yet") from None
    from calcscout.obligations.claims import plan
    from calcscout.obligations.engines.smt import case_judge

    return run(model_path, smt2_path, lambda spec, claim: plan(spec, claim).obligations, case_judge)
