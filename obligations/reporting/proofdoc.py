"""The written proof: every claim the proof engine attempted, as Markdown or LaTeX.

For each claim: the statement, the method, and every case with its chain of
terms, each link with its justification (equations by function and number,
rules, the hypothesis, lemmas, splits); open cases with their goal and the
reason.  It is the appendix a researcher edits next, not a certificate.  The
LaTeX needs nothing beyond ``amsmath`` and ``amsthm``.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from calcscout.obligations.verdict import Verdict

_TEX = {"\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "_": r"\_", "#": r"\#",
        "%": r"\%", "&": r"\&", "$": r"\$", "^": r"\^{}", "~": r"\~{}"}


def written_proofs(spec_file: str, verdicts: Sequence[Verdict], path: str) -> str:
    attempted = [v for v in verdicts if v.proof is not None]
    if path.endswith(".tex"):
        return _latex(spec_file, attempted)
    return _markdown(spec_file, attempted)


def _status(v: Verdict) -> str:
    p = v.proof or {}
    if p.get("proved") and not v.assumes:
        return "proved for all terms"
    if p.get("proved"):
        return f"proved assuming {', '.join(v.assumes)} (checked up to the bounds only)"
    return f"not proved: {len(p.get('open', []))} open case(s)"


# ---------------------------------------------------------------- Markdown


def _markdown(spec_file: str, verdicts: Sequence[Verdict]) -> str:
    out = [f"# Proofs for `{spec_file}`", "",
           "Written by calcscout's proof engine: each case is a chain of terms, each link "
           "with what justifies it.", ""]
    if not verdicts:
        out.append("No claim was attempted.")
    for v in verdicts:
        p = v.proof or {}
        kind = "Lemma" if v.lemma else "Claim"
        out += [f"## {kind} `{v.name}`", "", f"Statement: `{v.formula}`", "",
                f"Method: {p.get('method')}. Status: {_status(v)}."]
        if p.get("lemmas"):
            out.append(f"Lemmas used: {', '.join(f'`{x}`' for x in p['lemmas'])}.")
        out.append("")
        for i, c in enumerate(p.get("cases", []), 1):
            out.append(f"**Case {i}** ({c['status']}): `{c['case']}`")
            out.append("")
            for s in c.get("steps", []):
                out.append(f"- `{s['term']}` — {s['by']}")
            if c["status"] == "open":
                goal = c.get("goal")
                if goal:
                    out.append(f"- open goal: `{goal['left']}` against `{goal['right']}`")
                out.append(f"- why open: {c.get('why')}"
                           + (f" ({c['detail']})" if c.get("detail") else ""))
                for lem in c.get("candidate_lemmas", []):
                    out.append(f"- a lemma that would close it (holds up to the bounds): "
                               f"`{lem}`")
            out.append("")
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- LaTeX


def tex_text(s: str) -> str:
    """Plain text with every special character escaped (and nothing beyond ASCII)."""
    return "".join(_TEX.get(c, c if c.isascii() else "?") for c in s)


def tex_term(s: str) -> str:
    """A term or formula in math mode, typewriter, spaces kept."""
    body = "".join(_TEX.get(c, r"\ " if c == " " else (c if c.isascii() else "?")) for c in s)
    return rf"$\mathtt{{{body}}}$"


def _latex(spec_file: str, verdicts: Sequence[Verdict]) -> str:
    out = [r"\documentclass{article}", r"\usepackage{amsmath}", r"\usepackage{amsthm}",
           r"\newtheorem{claim}{Claim}", r"\newtheorem{lemma}[claim]{Lemma}",
           r"\begin{document}", rf"\section*{{Proofs for {tex_text(spec_file)}}}"]
    if not verdicts:
        out.append("No claim was attempted.")
    for v in verdicts:
        out.extend(_latex_claim(v))
    out.append(r"\end{document}")
    return "\n".join(out) + "\n"


def _latex_claim(v: Verdict) -> list[str]:
    p: dict[str, Any] = v.proof or {}
    env = "lemma" if v.lemma else "claim"
    out = [rf"\begin{{{env}}}[{tex_text(v.name)}] {tex_term(v.formula)}\end{{{env}}}",
           r"\begin{proof}",
           f"{tex_text(str(p.get('method')))}. Status: {tex_text(_status(v))}."]
    for i, c in enumerate(p.get("cases", []), 1):
        out.append(rf"\paragraph{{Case {i} ({tex_text(c['status'])}).}} {tex_term(c['case'])}")
        if c.get("steps"):
            out.append(r"\begin{itemize}")
            for s in c["steps"]:
                out.append(rf"\item {tex_term(s['term'])} \quad by {tex_text(s['by'])}")
            out.append(r"\end{itemize}")
        if c["status"] == "open":
            goal = c.get("goal")
            if goal:
                out.append(rf"Open goal: {tex_term(goal['left'])} against "
                           rf"{tex_term(goal['right'])}.")
            why = str(c.get("why")) + (f" ({c['detail']})" if c.get("detail") else "")
            out.append(f"Why open: {tex_text(why)}.")
            for lem in c.get("candidate_lemmas", []):
                out.append(rf"A lemma that would close it: {tex_term(lem)}.")
    out.append(r"\end{proof}")
    return out
