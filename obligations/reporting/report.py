"""Reports: the terminal report, the JSON report (LANGUAGE.md §9), JUnit XML.

Files are written atomically (a temporary file in the same folder, then a
rename), so a run that fails part-way leaves no half-written report behind;
only a regular file or a new path is ever written (see :func:`output_target`).
"""

from __future__ import annotations

import errno
import json
import os
import stat
import sys
import tempfile
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape, quoteattr

from calcscout.obligations.verdict import HOLDS, INCONCLUSIVE, REFUTED, Verdict
from calcscout.rules.core.errors import UsageError
from calcscout.rules.loading.files import file_kind, identity

COLOURS = {HOLDS: "32", REFUTED: "31;1", INCONCLUSIVE: "33", "error": "35"}


def use_colour(stream) -> bool:
    if os.environ.get("NO_COLOR") is not None:
        return False
    return hasattr(stream, "isatty") and stream.isatty()


def _paint(text: str, code: str, colour: bool) -> str:
    return f"\x1b[{code}m{text}\x1b[0m" if colour else text


# ---------------------------------------------------------------- terminal


def text_report(spec_file: str, verdicts: Sequence[Verdict], colour: bool = False,
                quiet: bool = False, show: ShowTerm | None = None) -> str:
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
                    or v.error is not None
                    or v.part_of is not None or not _has_parts(v, verdicts))]
    details += [v for v in verdicts if v not in details and v.proof
                and not v.proof.get("proved")]
    for v in details:
        lines.append("")
        lines.extend(evidence_lines(v, colour, show))
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
        return f"proved for all terms ({v.reason})  [{v.engine}]  {secs}"
    if v.engine == "proof" and v.verdict == HOLDS:
        return f"{v.reason}  [proof]  {secs}"
    if v.verdict == HOLDS and v.engine == "smt" and not v.warning:
        # the solver covers every term at once: the count is the space, not cases tried
        return (f"for all {v.tried} terms up to size {v.bounds.size}, names {v.bounds.names} "
                f"(solver)  [{v.engine}]  {secs}")
    if v.verdict == HOLDS and v.vacuous and not (v.warning and v.tried == 0):
        return (f"vacuously: {v.reason or 'the premise generated no case'} ({v.tried} value(s) "
                f"up to {_bounds_text(v)})  [{v.engine}]  {secs}")
    if v.verdict == HOLDS:
        warn = f"  warning: {v.warning}" if v.warning else ""
        return f"{v.tried} case(s) up to {_bounds_text(v)}  [{v.engine}]  {secs}{warn}"
    if v.verdict == REFUTED and v.counterexample is None:
        return f"{v.reason or 'a part is refuted'}  {secs}"
    if v.verdict == REFUTED:
        ce = v.counterexample
        size = f"counterexample of size {ce.size}" if ce and ce.size else "counterexample"
        return f"{size} after {v.tried} case(s)  [{v.engine}]  {secs}"
    if v.verdict == INCONCLUSIVE:
        why = v.reason or f"{v.undecided} case(s) cut by {v.cut_by}"
        return f"{why}  [{v.engine}]  {secs}"
    if v.error is not None:
        case = v.error.get("case")
        where = f" on a case of size {case['size']}" if case and case.get("size") else ""
        return f"{v.error['message']}{where} after {v.tried} case(s)  [{v.engine}]  {secs}"
    return v.reason or ""


# (verdict, counterexample key, abstract form) -> the term with notations, or None
ShowTerm = Callable[[Verdict, str, str], str | None]


def evidence_lines(v: Verdict, colour: bool = False, show: ShowTerm | None = None) -> list[str]:
    """A claim's evidence as the terminal shows it (also used by ``explain``); ``show``
    adds under a term its form with notations, where that differs."""
    head = _paint(f"{v.verdict}: {v.name}", COLOURS.get(v.verdict, "0"), colour)
    out = [f"{head}  ({v.file})"]
    out.append(f"  formula:  {v.formula}")
    out.append(f"  bounds:   {_bounds_text(v)}")
    if v.error is not None:
        out.extend(_error_lines(v.error))
    elif v.reason and v.verdict != REFUTED:
        out.append(f"  why:      {v.reason}")
    if v.warning:
        out.append(f"  warning:  {v.warning}")
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
                pretty = show(v, k, val) if show is not None else None
                if pretty is not None and pretty != val:
                    out.append(f"    {'':<{keyw}}   {pretty}")
        if ce.evidence:
            out.append(f"  evidence: {ce.evidence}")
        graph = ce.details.get("graph") if ce.details else None
        if graph:
            state = "complete" if graph.get("complete") else f"cut by {graph.get('cut_by')}"
            out.append(f"  graph:    {graph.get('nodes')} term(s) from {graph.get('root')}, {state}")
        culprits = ce.details.get("culprits") if ce.details else None
        if culprits:  # check --culprits (obligations/analysis/culprits.py)
            out.append(f"  used:     {', '.join(culprits['used']) or 'no rule, no equation'}")
            if culprits.get("at_redex"):
                out.append(f"  at redex: {', '.join(culprits['at_redex'])}")
            if "minimal" in culprits:
                out.append("  minimal:  " + (", ".join(culprits["minimal"]) or
                                             "no rule (the failure lies in the translations)"))
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
    out.extend(proof_lines(v))
    return out


def proof_lines(v: Verdict) -> list[str]:
    """The open cases of a proof attempt, smallest first, each with its goal and reason."""
    if not v.proof or v.proof.get("proved"):
        return []
    opens = v.proof.get("open", [])
    out = [f"  proof:    {v.proof.get('method')}: {len(opens)} open case(s)"]
    for c in sorted(opens, key=lambda c: len(c["case"]))[:10]:
        out.append(f"    case {c['case']}")
        goal = c.get("goal")
        if goal:
            out.append(f"      goal:  {goal['left']}")
            out.append(f"         vs  {goal['right']}")
        why = c.get("why") + (f" ({c['detail']})" if c.get("detail") else "")
        out.append(f"      why:   {why}")
        for lem in c.get("candidate_lemmas", []):
            out.append(f"      try:   lemma L: {lem}")
    return out


def _error_lines(error: dict[str, Any]) -> list[str]:
    """A run-time failure: the message, where in the rule file, the case that met it."""
    out = [f"  error:    {error['message']}"]
    if error.get("at"):
        out.append(f"  at:       {error['at']}")
    case = error.get("case")
    if case:
        out.append("  case" + (f" (size {case['size']}):" if case.get("size") else ":"))
        keyw = max((len(k) for k in case["terms"]), default=1)
        for k, val in case["terms"].items():
            out.append(f"    {k:<{keyw}} = {val}")
    if error.get("hint"):
        out.append(f"  hint:     {error['hint']}")
    return out


# ---------------------------------------------------------------- JSON


def json_report(spec_file: str, verdicts: Sequence[Verdict], extra: dict | None = None
                ) -> dict[str, Any]:
    out: dict[str, Any] = {"file": spec_file, "claims": [v.to_json() for v in verdicts]}
    if extra:
        out.update(extra)
    return out


def output_target(path: str, inputs: Iterable[str | os.PathLike] = (),
                  what: str = "report") -> str:
    """Where a report for ``path`` is written, or a UsageError (exit 2) saying why not.

    ``-`` is standard output. Otherwise the path must name a regular file (a
    symbolic link is followed to one) or a new file in an existing folder; a
    folder, a device, a FIFO or a socket is refused, and so is any of the
    files the run reads (``inputs``), compared by device and inode, not by
    spelling. Called before anything is computed, and again just before
    writing.
    """
    if path == "-":
        return path
    if path == "":
        raise UsageError(f"an empty path names no {what} file", hint="give a file name, or - "
                         "for standard output where the option takes it")
    try:
        real = os.path.realpath(path, strict=False)
    except (OSError, ValueError) as e:
        raise UsageError(f"cannot write {path}: {e}") from None
    try:
        st = os.stat(path)
    except FileNotFoundError:
        st = None
    except OSError as e:
        why = "a loop of symbolic links" if e.errno == errno.ELOOP else e.strerror
        raise UsageError(f"cannot write {path}: {why}") from None
    if st is not None:
        if stat.S_ISDIR(st.st_mode):
            raise UsageError(f"{path} is a folder; the {what} needs a file name",
                             hint=f"for example {os.path.join(path, 'report.json')}")
        if not stat.S_ISREG(st.st_mode):
            raise UsageError(f"{path} is {file_kind(st.st_mode)}; calcscout writes a {what} only "
                             "to a regular file or a new path")
        mine = (st.st_dev, st.st_ino)
        for f in inputs:
            if identity(f) == mine:
                same = "" if os.fspath(f) == path else f" (the file {os.fspath(f)})"
                raise UsageError(f"{path} is one of the files this run reads{same}; "
                                 f"writing the {what} there would destroy it",
                                 hint="give another output path")
        return real
    if path.endswith(("/", os.sep)):  # a folder was meant, and it does not exist
        raise UsageError(f"{path} names a folder, and there is none; the {what} needs a "
                         "file name")
    folder = os.path.dirname(real) or "."
    if not os.path.isdir(folder):
        raise UsageError(f"cannot write {path}: the folder {os.path.dirname(path) or folder} "
                         "does not exist", hint="create it first; calcscout does not create "
                         "folders for reports")
    return real


def write_atomically(path: str, text: str, inputs: Iterable[str | os.PathLike] = ()) -> None:
    """Write ``text`` to ``path`` (``-``: standard output) whole or not at all.

    A regular file is replaced by a rename of a temporary file in the same
    folder (symbolic links are followed, so the link stays a link); the new
    file keeps the mode of the file it replaces, or gets the usual mode
    (0666 less the umask) when it is new.
    """
    if path == "-":
        try:
            sys.stdout.write(text)
            sys.stdout.flush()
        except BrokenPipeError:
            raise
        except OSError as e:
            raise UsageError(f"cannot write to standard output: {e.strerror}") from None
        return
    target = Path(output_target(path, inputs))
    try:
        mode = stat.S_IMODE(os.stat(target).st_mode)
    except FileNotFoundError:
        mode = 0o666 & ~_umask()
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", dir=target.parent)
    except OSError as e:
        raise UsageError(f"cannot write {path}: {e.strerror}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fchmod(f.fileno(), mode)
        os.replace(tmp, target)
    except BaseException as e:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(e, OSError) and not isinstance(e, BrokenPipeError):
            raise UsageError(f"cannot write {path}: {e.strerror}") from None
        raise


def _umask() -> int:
    """The process's umask (read by setting it and setting it back: a one-thread CLI)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


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
            lines.append(f"      <system-out>{body}</system-out>")  # open cases, undecided ones
            lines.append("    </testcase>")
        else:
            lines.append(f"    <testcase {attrs}>")
            lines.append(f"      <error message={quoteattr(v.reason or 'error')}>{body}</error>")
            lines.append("    </testcase>")
    lines.append("  </testsuite>")
    lines.append("</testsuites>")
    return "\n".join(lines) + "\n"
