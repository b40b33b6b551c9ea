"""Reports: the terminal report, the JSON report (LANGUAGE.md §9), JUnit XML.

Files are written atomically (a temporary file in the same folder, then a
rename), so a run that fails part-way leaves no half-written report behind.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
from collections.abc import Sequence
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape, quoteattr

from .verdict import HOLDS, INCONCLUSIVE, REFUTED, Verdict

COLOURS = {HOLDS: "32", REFUTED: "31;1", INCONCLUSIVE: "33", "error": "35"}


def use_colour(stream) -> bool:
    if os.environ.get("NO_COLOR") is not None:
        return False
    return hasattr(stream, "isatty") and stream.isatty()


def _paint(text: str, code: str, colour: bool) -> str:
    return f"\x1b[{code}m{text}\x1b[0m" if colour else text


# ---------------------------------------------------------------- terminal


def text_report(spec_file: str, verdicts: Sequence[Verdict], colour: bool = False,
                quiet: bool = False) -> str:
    lines: list[str] = []
    width = max((len(v.name) for v in verdicts), default=4)
    width = min(max(width, 4), 40)
    lines.append(f"calcscout check {spec_file}: {len([v for v in verdicts if not v.part_of])} "
                 "claim(s)")
    for v in verdicts:
        if quiet and v.verdict == HOLDS:
            continue
        indent = "    " if v.part_of else "  "
        label = _paint(f"{v.verdict:<12}", COLOURS.get(v.verdict, "0"), colour)
        lines.append(f"{indent}{label} {v.name:<{width}}  {_summary(v)}")
    # a shorthand's own entry has no evidence of its own: its parts carry it
    details = [v for v in verdicts if v.verdict in (REFUTED, INCONCLUSIVE, "error")
               and (v.counterexample is not None or v.undecided_example is not None
                    or v.part_of is not None or not _has_parts(v, verdicts))]
    for v in details:
        lines.append("")
        lines.extend(evidence_lines(v, colour))
    counts = {k: sum(1 for v in verdicts if v.verdict == k and not v.part_of)
              for k in (HOLDS, REFUTED, INCONCLUSIVE, "error")}
    summary = ", ".join(f"{n} {word}" for word, n in
                        (("hold", counts[HOLDS]), ("refuted", counts[REFUTED]),
                         ("inconclusive", counts[INCONCLUSIVE]), ("error", counts["error"])) if n)
    lines.append("")
    lines.append(f"summary: {summary or 'no claims'}")
    return "\n".join(lines) + "\n"


def _has_parts(v: Verdict, verdicts: Sequence[Verdict]) -> bool:
    return any(p.part_of == v.name for p in verdicts)


def _bounds_text(v: Verdict) -> str:
    b = v.bounds
    return f"size {b.size}, names {b.names}, steps {b.steps}, nodes {b.nodes}"


def _summary(v: Verdict) -> str:
    secs = f"{v.seconds:.2f}s"
    if v.scope == "all" and v.verdict == HOLDS:
        return f"proved for all terms ({v.reason})  {secs}"
    if v.verdict == HOLDS and v.engine == "smt":
        # the solver covers every term at once: the count is the space, not cases tried
        return (f"for all {v.tried} terms up to size {v.bounds.size}, names {v.bounds.names} "
                f"(solver)  [{v.engine}]  {secs}")
    if v.verdict == HOLDS:
        return f"{v.tried} case(s) up to {_bounds_text(v)}  [{v.engine}]  {secs}"
    if v.verdict == REFUTED and v.counterexample is None:
        return f"{v.reason or 'a part is refuted'}  {secs}"
    if v.verdict == REFUTED:
        ce = v.counterexample
        size = f"counterexample of size {ce.size}" if ce and ce.size else "counterexample"
        return f"{size} after {v.tried} case(s)  [{v.engine}]  {secs}"
    if v.verdict == INCONCLUSIVE:
        why = v.reason or f"{v.undecided} case(s) cut by {v.cut_by}"
        return f"{why}  [{v.engine}]  {secs}"
    return v.reason or ""


def evidence_lines(v: Verdict, colour: bool = False) -> list[str]:
    """A claim's evidence as the terminal shows it (also used by ``explain``)."""
    head = _paint(f"{v.verdict}: {v.name}", COLOURS.get(v.verdict, "0"), colour)
    out = [f"{head}  ({v.file})"]
    out.append(f"  formula:  {v.formula}")
    out.append(f"  bounds:   {_bounds_text(v)}")
    if v.reason and v.verdict != REFUTED:
        out.append(f"  why:      {v.reason}")
    ces = v.more or ([v.counterexample] if v.counterexample else [])
    for i, ce in enumerate(ces):
        title = "smallest counterexample" if i == 0 else f"counterexample {i + 1}"
        out.append(f"  {title}" + (f" (size {ce.size}):" if ce.size else ":"))
        keyw = max((len(k) for k in ce.terms), default=1)
        for k, val in ce.terms.items():
            if isinstance(val, list):
                out.append(f"    {k:<{keyw}} = " + (" -> ".join(val) if k == "cycle"
                                                      else ", ".join(val)))
            else:
                out.append(f"    {k:<{keyw}} = {val}")
        if ce.evidence:
            out.append(f"  evidence: {ce.evidence}")
        graph = ce.details.get("graph") if ce.details else None
        if graph:
            state = "complete" if graph.get("complete") else f"cut by {graph.get('cut_by')}"
            out.append(f"  graph:    {graph.get('nodes')} term(s) from {graph.get('root')}, {state}")
    ex = v.undecided_example
    if ex is not None:
        out.append("  smallest undecided case" + (f" (size {ex.size}):" if ex.size else ":"))
        keyw = max((len(k) for k in ex.terms), default=1)
        for k, val in ex.terms.items():
            out.append(f"    {k:<{keyw}} = {val}")
        if ex.evidence:
            out.append(f"  undecided: {ex.evidence}")
    for n in v.notes:
        out.append(f"  note:     {n}")
    return out


# ---------------------------------------------------------------- JSON


def json_report(spec_file: str, verdicts: Sequence[Verdict], extra: dict | None = None
                ) -> dict[str, Any]:
    out: dict[str, Any] = {"file": spec_file, "claims": [v.to_json() for v in verdicts]}
    if extra:
        out.update(extra)
    return out


def write_atomically(path: str, text: str) -> None:
    if path == "-":
        sys.stdout.write(text)
        sys.stdout.flush()
        return
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", dir=target.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def dumps(data: Any) -> str:
    return json.dumps(data, indent=2, ensure_ascii=False) + "\n"


# ---------------------------------------------------------------- JUnit


def junit_report(spec_file: str, verdicts: Sequence[Verdict]) -> str:
    """One test case per claim and part: refuted is a failure, inconclusive is skipped."""
    failures = sum(1 for v in verdicts if v.verdict == REFUTED)
    skipped = sum(1 for v in verdicts if v.verdict == INCONCLUSIVE)
    errors = sum(1 for v in verdicts if v.verdict == "error")
    total = sum(v.seconds for v in verdicts if not v.part_of)
    lines = ['<?xml version="1.0" encoding="UTF-8"?>',
             f'<testsuites tests="{len(verdicts)}" failures="{failures}" errors="{errors}" '
             f'skipped="{skipped}" time="{total:.3f}">',
             f'  <testsuite name={quoteattr(spec_file)} tests="{len(verdicts)}" '
             f'failures="{failures}" errors="{errors}" skipped="{skipped}" time="{total:.3f}">']
    for v in verdicts:
        attrs = (f'name={quoteattr(v.name)} classname={quoteattr(v.file or spec_file)} '
                 f'time="{v.seconds:.3f}"')
        body = escape("\n".join(evidence_lines(v)))
        if v.verdict == HOLDS:
            lines.append(f"    <testcase {attrs}>")
            lines.append(f"      <system-out>{escape(_summary(v))}</system-out>")
            lines.append("    </testcase>")
        elif v.verdict == REFUTED:
            msg = v.counterexample.evidence if v.counterexample else "refuted"
            lines.append(f"    <testcase {attrs}>")
            lines.append(f"      <failure message={quoteattr(msg[:500])} type=\"refuted\">{body}"
                         "</failure>")
            lines.append("    </testcase>")
        elif v.verdict == INCONCLUSIVE:
            lines.append(f"    <testcase {attrs}>")
            lines.append(f"      <skipped message={quoteattr(v.reason or 'inconclusive')}/>")
            lines.append("    </testcase>")
        else:
            lines.append(f"    <testcase {attrs}>")
            lines.append(f"      <error message={quoteattr(v.reason or 'error')}>{body}</error>")
            lines.append("    </testcase>")
    lines.append("  </testsuite>")
    lines.append("</testsuites>")
    return "\n".join(lines) + "\n"
