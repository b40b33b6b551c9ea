"""``calcscout explain``: a claim's evidence again, from a saved JSON report."""

from __future__ import annotations

import json

from calcscout.obligations.reporting.report import evidence_lines, output_target, write_atomically
from calcscout.obligations.verdict import Verdict
from calcscout.rules.core.errors import UsageError
from calcscout.rules.loading.files import MAX_REPORT_BYTES, read_text


def load_report(path: str) -> dict:
    """A saved JSON report: a regular file of bounded size (rules.files), valid JSON of
    reasonable depth and numbers, with a list of claims."""
    text = read_text(path, limit=MAX_REPORT_BYTES, what="report")
    try:
        data = json.loads(text)
    except json.JSONDecodeError as e:
        raise UsageError(f"{path} is not a JSON report ({e.msg} at line {e.lineno})") from None
    except RecursionError:
        raise UsageError(f"{path} is not a calcscout report (its JSON is nested too deep)"
                         ) from None
    except ValueError:  # an integer of more digits than Python converts
        raise UsageError(f"{path} is not a calcscout report (it has a number too long to "
                         "read)") from None
    if not isinstance(data, dict) or not isinstance(data.get("claims"), list):
        raise UsageError(f"{path} is not a calcscout report")
    return data


def explain_claim(path: str, claim: str, dot_path: str | None = None) -> str:
    if dot_path is not None:
        output_target(dot_path, [path], "graph")
    data = load_report(path)
    try:
        entries = {c["name"]: c for c in data["claims"]}
    except (TypeError, KeyError):
        raise UsageError(f"{path} is not a calcscout report (a claim without a name)") from None
    if claim not in entries:
        raise UsageError(f"no claim {claim} in {path}",
                         hint="claims: " + ", ".join(map(str, entries)))
    why = entry_problem(entries[claim])
    if why is not None:
        raise UsageError(f"{path}: the entry of claim {claim} is not well formed ({why})",
                         hint="was the report edited? run check again to get a new one")
    v = Verdict.from_json(entries[claim])
    lines = evidence_lines(v)
    if v.verdict == "holds":
        lines.insert(1, f"  {v.tried} case(s) tried, none failed"
                     + (f"; proved for all terms ({v.reason})" if v.scope == "all" else ""))
    if dot_path is not None:
        graph = write_counterexample_graph(data.get("file"), v, dot_path, path)
        lines.append(f"  graph written to {graph}")
    return "\n".join(lines)


_VERDICTS = ("holds", "refuted", "inconclusive", "error")


def entry_problem(entry) -> str | None:
    """Why a claim's entry of a report cannot be shown (it was edited by hand, or is of
    another program), or None: the fields and types that printing and drawing rely on."""
    def opt_str(x) -> bool:
        return x is None or isinstance(x, str)

    def count(x) -> bool:
        return type(x) is int and x >= 0

    if not isinstance(entry, dict):
        return "not an object"
    if entry.get("verdict") not in _VERDICTS:
        return f"verdict {entry.get('verdict')!r}"
    for key in ("file", "formula", "scope", "engine", "reason", "warning", "cut_by", "part_of"):
        if not opt_str(entry.get(key)):
            return f"{key} is not text"
    b = entry.get("bounds", {})
    if not isinstance(b, dict) or not all(
            b.get(k) is None or (count(b[k]) and (k != "nodes" or b[k] >= 1))
            for k in ("size", "steps", "names", "nodes")):
        return "bounds are not counts"
    if not all(count(entry.get(k, 0)) for k in ("tried", "undecided")):
        return "tried or undecided is not a count"
    if type(entry.get("seconds", 0.0)) not in (int, float):
        return "seconds is not a number"
    notes = entry.get("notes", [])
    if not isinstance(notes, list) or not all(isinstance(n, str) for n in notes):
        return "notes are not a list of text"
    more = entry.get("counterexamples", [])
    if not isinstance(more, list):
        return "counterexamples is not a list"
    for ce in [entry.get("counterexample"), entry.get("undecided_example"), *more]:
        if ce is None:
            continue
        if not isinstance(ce, dict) or not count(ce.get("size")) or not opt_str(
                ce.get("evidence")):
            return "a counterexample without a size or evidence"
        terms = ce.get("terms")
        if not isinstance(terms, dict) or not terms or not all(
                isinstance(t, str) or (isinstance(t, list) and all(isinstance(x, str) for x in t))
                for t in terms.values()):
            return "a counterexample's terms are not terms"
        details = ce.get("details", {})
        if not isinstance(details, dict) or not isinstance(details.get("graph", {}), dict):
            return "a counterexample's details are not well formed"
        if not opt_str(details.get("graph", {}).get("root")):
            return "a counterexample's graph root is not text"
    return None


def write_counterexample_graph(spec_file, v: Verdict, dot_path: str,
                               report_path: str | None = None) -> str:
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
    if not isinstance(spec_file, str) or not spec_file:
        raise UsageError(f"{report_path or 'the report'} names no rule file to draw from")
    spec = load_file(spec_file)
    inputs = [*([report_path] if report_path else []), *spec.files]
    output_target(dot_path, inputs, "graph")
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
        root, group = ce.terms.get("term"), f.group
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
    if not isinstance(root, str):
        raise UsageError(f"claim {v.name}: the counterexample in the report has no term to draw "
                         "the graph from", hint="was the report edited? run check again")
    term = parse_term(calc, root, "<report>")
    g = reduction_graph(calc, term, b.steps or 10, b.nodes or 20000, group)
    highlight = set()
    for val in ce.terms.values():
        if isinstance(val, str):
            try:
                highlight.add(parse_term(calc, val, "<report>"))
            except Exception:  # a term of another calculus: not in this graph
                pass
    write_atomically(dot_path, graph_to_dot(calc, g, highlight), inputs)
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
