"""The ``calcscout`` command line.

One handler at the top (:func:`main`) turns every :class:`~calcscout.rules.core.errors.CalcError`
into its message and exit status 2 (or its own code), and any other exception
into a short internal-error report: a user never sees a traceback for their
own mistake.
"""

from __future__ import annotations

import errno
import gc
import math
import os
import sys
import traceback

import click

from calcscout.rules.core.errors import CalcError, UsageError
from calcscout.rules.core.spec import Bounds, Calculus, Spec


def _version() -> str:
    # Imported here: importlib.metadata costs tens of milliseconds of every start.
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("calcscout")
    except PackageNotFoundError:  # pragma: no cover - running from a source tree
        return "0.0+source"


def _show_version(ctx: click.Context, param: click.Parameter, value: bool) -> None:
    if not value or ctx.resilient_parsing:
        return
    click.echo(f"calcscout, version {_version()}")
    ctx.exit()


# ---------------------------------------------------------------- shared options


def _positive(name: str, least: int):
    def check(ctx, param, value):
        if value is not None and value < least:
            raise click.BadParameter(f"must be at least {least}, not {value}")
        return value

    return check


def _finite_positive(ctx, param, value):
    # float() takes "inf", "nan" and negative numbers; none is a number of seconds
    if value is not None and not (math.isfinite(value) and value > 0):
        raise click.BadParameter(f"must be a finite positive number of seconds, not {value}")
    return value


size_option = click.option("--size", type=int, default=None, callback=_positive("size", 1),
                           help="Largest term size enumerated (sum over quantified metavariables).")
names_option = click.option("--names", type=int, default=None, callback=_positive("names", 0),
                            help="Most distinct free names in an enumerated term (0: closed terms).")
steps_option = click.option("--steps", type=int, default=None, callback=_positive("steps", 1),
                            help="Longest reduction path explored.")
nodes_option = click.option("--nodes", type=int, default=None, callback=_positive("nodes", 1),
                            help="Most terms in one reduction graph.")


def load(path: str) -> Spec:
    from calcscout.rules.loading.load import load_file

    return load_file(path)


def calculus(spec: Spec, name: str) -> Calculus:
    calc = spec.calculi.get(name)
    if calc is None:
        known = ", ".join(spec.calculi) or "none"
        raise UsageError(f"no calculus {name} in {spec.file} (calculi: {known})")
    return calc


# ---------------------------------------------------------------- the group


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--version", is_flag=True, expose_value=False, is_eager=True,
              callback=_show_version, help="Show the version and exit.")
def cli() -> None:
    """Check claims about calculi and translations between them, exhaustively up to bounds.

    FILE is a .calc rule file. Exit status: 0 every claim holds, 1 some claim is
    refuted, 3 none refuted but some inconclusive, 2 the input or the command
    line is wrong or a claim ended in error, 130/143 stopped by SIGINT/SIGTERM,
    70 an internal error (or a worker process that died).
    """


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
def lint(file: str) -> None:
    """Read FILE and its includes and report every problem found at load time."""
    spec = load(file)
    if spec.is_empty():
        click.echo(f"{spec.file}: declares nothing")
        return
    parts = []
    for what, items in (("calculus", spec.calculi), ("translation", spec.translations),
                        ("claim", spec.claims)):
        n = len(items)
        if n:
            plural = {"calculus": "calculi"}.get(what, what + "s")
            parts.append(f"{n} {what if n == 1 else plural}")
    files = len(spec.files)
    extra = f" in {files} files" if files > 1 else ""
    click.echo(f"{spec.file}: ok: {', '.join(parts)}{extra}")


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("sort", metavar="CALC.SORT")
@size_option
@names_option
@click.option("--count", is_flag=True, help="Print only the number of terms (without building them).")
def terms(file: str, sort: str, size: int | None, names: int | None, count: bool) -> None:
    """List the terms of CALC.SORT up to the size bound, smallest first, in abstract form."""
    from calcscout.rules.core.enumerate import count_terms, enumerate_terms
    from calcscout.rules.notation.notation import print_abstract

    spec = load(file)
    if "." not in sort:
        example = next((f"{c.name}.{n}" for c in spec.calculi.values()
                        for n, x in c.sorts.items() if not x.is_context), "CALC.SORT")
        raise UsageError(f"give the sort as CALC.SORT, not {sort!r}",
                         hint=f"for example {example}")
    cname, sname = sort.split(".", 1)
    calc = calculus(spec, cname)
    s = calc.sorts.get(sname)
    if s is None or s.is_context:
        options = ", ".join(n for n, x in calc.sorts.items() if not x.is_context)
        raise UsageError(f"calculus {cname} has no sort {sname} (sorts: {options})")
    b = spec.effective_bounds(Bounds(size=size, names=names))
    assert b.size is not None and b.names is not None
    if count:
        click.echo(count_terms(calc, sname, b.size, b.names))
        return
    out = sys.stdout
    for t in enumerate_terms(calc, sname, b.size, b.names):
        out.write(print_abstract(calc, t) + "\n")


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("function")
@click.argument("term")
@click.argument("args", nargs=-1)
@steps_option
@nodes_option
def translate(file: str, function: str, term: str, args: tuple[str, ...], steps: int | None,
              nodes: int | None) -> None:
    """Apply a translation FUNCTION to TERM (and extra ARGs, for a function that takes them).

    FUNCTION is a translation's name (its entry function) or one of its
    functions. The result is printed in abstract form, then with the target's
    notations where it has any.
    """
    from calcscout.rules.notation.notation import parse_term, print_abstract, print_term
    from calcscout.rules.rewriting.translate import Translator

    spec = load(file)
    options = spec.functions_named(function)
    if not options:
        known = sorted({f for t in spec.translations.values() for f in t.signatures})
        raise UsageError(f"no translation or function {function} in {spec.file}",
                         hint="functions: " + (", ".join(known) or "none"))
    if len(options) > 1:
        raise UsageError(f"the function {function} is defined by several translations "
                         f"({', '.join(t.name for t, _ in options)})",
                         hint="name the translation instead")
    tr, fn = options[0]
    sig = tr.signatures[fn]
    if len(args) != len(sig.params) - 1:
        raise UsageError(f"{fn} takes {len(sig.params)} argument(s): TERM and "
                         f"{len(sig.params) - 1} more; {len(args) + 1} given")
    src, dst = spec.calculi[tr.source], spec.calculi[tr.target]
    t = parse_term(src, term, "<TERM>")
    extra = [parse_term(dst, a, f"<ARG {i + 1}>") for i, a in enumerate(args)]
    translator = Translator(spec, tr, Bounds(steps=steps, nodes=nodes))
    result = translator.apply(fn, t, extra)
    abstract = print_abstract(dst, result)
    click.echo(abstract)
    pretty = print_term(dst, result)
    if pretty != abstract:
        click.echo(pretty)


# ---------------------------------------------------------------- check


def _positive_seconds(ctx, param, value):
    if value is not None and not value > 0:
        raise click.BadParameter(f"must be more than 0 seconds, not {value}")
    return value


def _shard_option(ctx, param, value):
    if value is None:
        return None
    try:
        i, n = (int(x) for x in value.split("/"))
    except ValueError:
        raise click.BadParameter(f"{value!r}: write I/N, for example 2/8") from None
    if n < 1 or not 1 <= i <= n:
        raise click.BadParameter(f"{value}: I counts from 1 to N")
    return (i, n)


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("claims", nargs=-1)
@size_option
@steps_option
@names_option
@nodes_option
@click.option("--engine", type=click.Choice(["enum", "smt", "auto", "proof"]), default="enum",
              show_default=True,
              help="Which engine decides the claims: enum (every term up to the bounds), smt "
                   "(the solver), proof (induction, for all terms), auto (a proof first, then "
                   "the faster bounded engine).")
@click.option("--timeout", type=float, default=None, callback=_finite_positive,
              help="Seconds per solver query (smt); the encoding is built no further once "
              "they have passed.")
@click.option("--json", "json_path", metavar="PATH|-", default=None,
              help="Write the JSON report to PATH (- for standard output).")
@click.option("--junit", "junit_path", metavar="PATH", default=None,
              help="Write a JUnit XML report (one test case per claim).")
@click.option("--jobs", type=int, default=1, callback=_positive("jobs", 1),
              help="Split the enumeration over this many processes (same results).")
@click.option("--shard", callback=_shard_option, default=None, metavar="I/N",
              help="Check only the I-th of N deterministic parts (combine with `merge`).")
@click.option("--all", "collect_all", is_flag=True,
              help="Keep going after the first counterexample (up to 10 per claim).")
@click.option("--quiet", is_flag=True, help="List only the claims that do not hold.")
@click.option("--proof", "proof_path", metavar="PATH.md|PATH.tex", default=None,
              help="Write the proofs the engine attempted (engines proof and auto), as "
                   "Markdown or LaTeX.")
@click.option("--culprits", is_flag=True,
              help="Name the rules and equations each counterexample needs (several checks more).")
@click.option("--by-rule", "by_rule", is_flag=True,
              help="Split each `M -> N implies ...` into one part per rule of the premise's step.")
@click.option("--time-limit", type=float, default=None, metavar="SECONDS",
              callback=_positive_seconds,
              help="Stop after this many seconds, as an interrupted run does: claims not "
                   "decided by then are inconclusive.")
def check(file: str, claims: tuple[str, ...], size, steps, names, nodes, engine: str,
          timeout: float | None, json_path: str | None, junit_path: str | None, jobs: int,
          shard, collect_all: bool, quiet: bool, culprits: bool = False,
          by_rule: bool = False, time_limit: float | None = None,
          proof_path: str | None = None) -> None:
    """Check the claims of FILE (all of them, or the CLAIMs named), smallest cases first.

    SIGINT (Ctrl-C) or SIGTERM, or the time limit, stops the run: the report
    keeps the claims decided so far, the others are inconclusive (cut by
    "interrupted"); the exit status is then 130, 143, or as the verdicts say.
    """
    from calcscout.obligations.progress import ProgressLine
    from calcscout.obligations.reporting.report import (
        dumps,
        json_report,
        junit_report,
        text_report,
        use_colour,
        write_atomically,
    )
    from calcscout.obligations.runner import RunOptions, run_claims
    from calcscout.obligations.stopping import RunStopped, StopSignals
    from calcscout.obligations.verdict import exit_code
    from calcscout.obligations.workers import usable_cpus

    if proof_path is not None:
        if not proof_path.endswith((".md", ".tex")):
            raise UsageError(f"--proof {proof_path}: the file name must end in .md or .tex")
        if engine not in ("proof", "auto"):
            raise UsageError("--proof needs --engine proof or --engine auto")
    if (culprits or by_rule) and shard:
        raise UsageError("--culprits and --by-rule take the whole run, not a --shard")
    spec = load(file)
    _check_outputs(spec.files, json_path, junit_path, proof_path)
    sources = _sources(spec) if shard else None  # the contents this run reads, for merge
    chosen = list(spec.claims)
    if claims:
        by_name = {c.name: c for c in spec.claims}
        missing = [c for c in claims if c not in by_name]
        if missing:
            raise UsageError(f"no claim {missing[0]} in {spec.file}",
                             hint="claims: " + (", ".join(by_name) or "none"))
        chosen = [by_name[c] for c in dict.fromkeys(claims)]  # a claim named twice runs once
    cpus = usable_cpus()
    if jobs > cpus:
        click.echo(f"calcscout: --jobs {jobs} is more than the {cpus} CPU(s) this process may "
                   f"use; using {cpus}", err=True)
        jobs = cpus
    progress = ProgressLine()
    stop = StopSignals(time_limit)
    opts = RunOptions(Bounds(size=size, steps=steps, names=names, nodes=nodes), jobs, shard,
                      collect_all, engine, timeout, progress, progress.begin, stop)
    with stop:
        try:
            verdicts, partials = run_claims(spec, chosen, opts)
        except RunStopped as stopped:  # its report: the claims decided, the others inconclusive
            assert stopped.verdicts is not None and stopped.records is not None
            verdicts, partials = stopped.verdicts, stopped.records
        finally:
            progress.clear()
    if (culprits or by_rule) and stop.request is None:
        from calcscout.obligations.analysis.explain_failure import analyse

        verdicts = analyse(spec, verdicts, opts.bounds, culprits, by_rule)
    extra = (_shard_fields(sources, shard, engine, timeout, collect_all, partials) if shard
             else None)
    if stop.request is not None:
        extra = _say_stopped(stop.request, verdicts, extra)
    report = json_report(spec.file, verdicts, extra)
    if json_path is not None:
        write_atomically(json_path, dumps(report), spec.files)
    if junit_path is not None:
        write_atomically(junit_path, junit_report(spec.file, verdicts), spec.files)
    if proof_path is not None:
        from calcscout.obligations.reporting.proofdoc import written_proofs

        write_atomically(proof_path, written_proofs(spec.file, verdicts, proof_path), spec.files)
    if json_path != "-":
        out = sys.stdout
        from calcscout.obligations.analysis.keys import notation_printer

        out.write(text_report(spec.file, verdicts, use_colour(out), quiet, notation_printer(spec)))
    if stop.request is not None and stop.request.status is not None:
        sys.exit(stop.request.status)
    sys.exit(exit_code([v.verdict for v in verdicts if not v.part_of]))


def _say_stopped(request, verdicts, extra: dict | None) -> dict | None:
    """Say on standard error that the run was stopped; mark a report it left incomplete
    (``"stopped"``: ``merge`` refuses a shard that did not do all its work)."""
    from calcscout.obligations.stopping import INTERRUPTED

    left = sum(1 for v in verdicts if v.cut_by == INTERRUPTED and not v.part_of)
    click.echo(f"calcscout: stopped by {request.cause}; "
               + (f"{left} claim(s) not decided are reported inconclusive" if left
                  else "every claim was decided"), err=True)
    return {**(extra or {}), "stopped": request.cause} if left else extra


def _check_outputs(inputs, *paths: str | None) -> None:
    """Refuse, before anything is computed, output paths that cannot or must not be written
    (folders, devices, FIFOs, missing folders, the files read) or that are given twice."""
    from calcscout.obligations.reporting.report import output_target

    seen: dict[str, str] = {}
    for p in paths:
        if p is None:
            continue
        real = output_target(p, inputs)
        if real != "-" and real in seen:
            raise UsageError(f"{p} is given for two outputs (also as {seen[real]}); each "
                             "report needs its own file")
        seen[real] = p


def _sources(spec: Spec) -> str:
    from calcscout.rules.loading.files import sources_digest

    return sources_digest(spec.files)


def _shard_fields(sources, shard, engine: str, timeout, collect_all: bool, partials) -> dict:
    """What a shard report records so that ``merge`` can tell shards of one run
    (the same rule file contents, claims, bounds, engine, shard count) from others."""
    return {"shard": list(shard), "sources": sources, "engine": engine, "timeout": timeout,
            "all": collect_all, "records": partials}


# ---------------------------------------------------------------- latex


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("items", nargs=-1)
@click.option("-o", "output", required=True, metavar="PATH.tex", help="Where to write the document.")
@size_option
@steps_option
@names_option
@nodes_option
@click.option("--culprits", is_flag=True,
              help="Add under each counterexample the rules and equations it needs (as check).")
def latex(file: str, items: tuple[str, ...], output: str, size, steps, names, nodes,
          culprits: bool) -> None:
    """Write a LaTeX document: grammars, rules, equations, and the claims' counterexamples.

    An ITEM names a calculus, translation or claim to include (none: everything);
    the claims included are checked as `check` would.
    """
    from calcscout.obligations.reporting.latex import latex_document
    from calcscout.obligations.reporting.report import write_atomically
    from calcscout.obligations.runner import RunOptions, run_claims

    spec = load(file)
    _check_outputs(spec.files, output)
    calculi, translations, claims = list(spec.calculi), list(spec.translations), list(spec.claims)
    if items:
        by_claim = {c.name: c for c in spec.claims}
        for it in items:
            if it not in spec.calculi and it not in spec.translations and it not in by_claim:
                known = ", ".join([*spec.calculi, *spec.translations, *by_claim]) or "none"
                raise UsageError(f"no calculus, translation or claim {it} in {spec.file}",
                                 hint=f"items: {known}")
        calculi = [c for c in calculi if c in items]
        translations = [t for t in translations if t in items]
        claims = [c for c in claims if c.name in items]
    opts = RunOptions(Bounds(size=size, steps=steps, names=names, nodes=nodes))
    verdicts, _ = run_claims(spec, claims, opts) if claims else ([], {})
    if culprits:
        from calcscout.obligations.analysis.explain_failure import analyse

        verdicts = analyse(spec, verdicts, opts.bounds, True, False)
    write_atomically(output, latex_document(spec, calculi, translations, verdicts), spec.files)
    click.echo(f"wrote {output}: {len(calculi)} calculi, {len(translations)} translation(s), "
               f"{len(claims)} claim(s)")


# ---------------------------------------------------------------- reduce


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("calc_name", metavar="CALC")
@click.argument("term")
@steps_option
@nodes_option
@click.option("--dot", "dot_path", metavar="PATH", default=None,
              help="Write the reduction graph in the DOT language.")
@click.option("--json", "json_out", metavar="-", default=None,
              help="Print the graph's summary as JSON (give -).")
def reduce(file: str, calc_name: str, term: str, steps, nodes, dot_path, json_out) -> None:
    """Explore the reduction graph of TERM in calculus CALC within the bounds."""
    from calcscout.obligations.reporting.dot import graph_to_dot
    from calcscout.obligations.reporting.report import dumps, write_atomically
    from calcscout.rules.core.sorts import grammar
    from calcscout.rules.notation.notation import parse_term, print_abstract, print_term
    from calcscout.rules.rewriting.rewrite import find_cycle, normal_forms, reduction_graph

    spec = load(file)
    _check_outputs(spec.files, dot_path, json_out)
    calc = calculus(spec, calc_name)
    t = parse_term(calc, term, "<TERM>")
    if not grammar(calc).state(t):
        sorts = ", ".join(n for n, s in calc.sorts.items() if not s.is_context)
        raise UsageError(f"{print_abstract(calc, t)} is not a term of calculus {calc.name} "
                         f"(it belongs to none of its sorts: {sorts})")
    b = spec.effective_bounds(Bounds(steps=steps, nodes=nodes))
    g = reduction_graph(calc, t, b.steps, b.nodes)
    nfs = normal_forms(g)
    cycle = find_cycle(g)
    info = {"term": print_abstract(calc, t), "nodes": g.number_of_nodes(),
            "edges": g.number_of_edges(), "complete": bool(g.graph["complete"]),
            "cut_by": g.graph["cut_by"], "normal_forms": [print_abstract(calc, n) for n in nfs],
            "cycles": cycle is not None}
    if dot_path is not None:
        write_atomically(dot_path, graph_to_dot(calc, g), spec.files)
    if json_out is not None:
        write_atomically(json_out, dumps(info), spec.files)
        return
    state = "complete" if info["complete"] else f"cut by the bound on {info['cut_by']}"
    click.echo(f"{print_term(calc, t)}: {info['nodes']} term(s), {info['edges']} step(s), {state}")
    if nfs:
        click.echo(f"normal form{'s' if len(nfs) != 1 else ''}:")
        for n in nfs:
            click.echo(f"  {print_term(calc, n)}")
    else:
        click.echo("no normal form" + ("" if info["complete"] else " found within the bounds"))
    if cycle is not None:
        click.echo("reduction cycle: " + " -> ".join(print_term(calc, c) for c in cycle)
                   + f" -> {print_term(calc, cycle[0])}")


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("calc_name", metavar="CALC")
@size_option
@steps_option
@nodes_option
@click.option("--json", "json_out", metavar="-", default=None,
              help="Print the pairs as JSON (give -).")
def pairs(file: str, calc_name: str, size, steps, nodes, json_out) -> None:
    """List the critical pairs of CALC (CALC.GROUP for one rule group) and whether they join.

    A pair is settled symbolically (for all instances) or by instances of its
    metavariables up to --size; the output says which.
    """
    from calcscout.obligations.progress import ProgressLine
    from calcscout.obligations.reporting.report import dumps, write_atomically
    from calcscout.rules.critical_pairs.critical import pairs_report

    spec = load(file)
    _check_outputs(spec.files, json_out)
    cname, _, group = calc_name.partition(".")
    calc = calculus(spec, cname)
    if group and group not in calc.groups:
        raise UsageError(f"calculus {cname} has no rule group {group}",
                         hint="groups: " + (", ".join(calc.groups) or "none"))
    b = spec.effective_bounds(Bounds(size=size, steps=steps, nodes=nodes))
    progress = ProgressLine()
    try:
        report = pairs_report(calc, b, group or None, progress)
    finally:
        progress.clear()
    if json_out is not None:
        write_atomically(json_out, dumps(report), spec.files)
        return
    ps = report["pairs"]
    depth = report.get("context_depth")
    where = f" (contexts unfolded to depth {depth})" if depth is not None else ""
    click.echo(f"{cname}{'.' + group if group else ''}: {len(ps)} critical pair(s){where}")
    for i, p in enumerate(ps, 1):
        how = f"{p['status']} ({p['how']})" if p.get("how") else p["status"]
        click.echo(f"  {i}. {p['rules'][0]} / {p['rules'][1]} at {p['position']}: {how}")
        click.echo(f"     peak  {p['peak']}")
        click.echo(f"     left  {p['left']}")
        click.echo(f"     right {p['right']}")
        if "common" in p:
            click.echo(f"     both reach {p['common']}")
        if "instance" in p and p["status"] == "not-joinable":
            inst = p["instance"]
            click.echo(f"     instance {inst['peak']} -> {inst['left']} / {inst['right']}")
        elif p["status"] == "unknown" and "instances_tried" in p:
            cut = f", cut by {p['cut_by']}" if p.get("cut_by") else ""
            click.echo(f"     {p['instances_tried']} instance(s) tried, none refutes{cut}")
            if "stopped" in p:
                click.echo(f"     {p['stopped']}")


@cli.command()
@click.argument("file", type=click.Path(dir_okay=False))
@click.argument("claim_name", metavar="CLAIM")
@size_option
@steps_option
@names_option
@click.option("-o", "out_dir", required=True, metavar="DIR", help="Folder for the .smt2 files.")
def export(file: str, claim_name: str, size, steps, names, out_dir: str) -> None:
    """Write one SMT-LIB 2.6 file per obligation of CLAIM, for any solver.

    Each file's header says what sat and unsat mean for the claim; a solver's
    model is turned back into the counterexample's terms by
    `calcscout explain --model SOLVER_OUTPUT FILE.smt2`.
    """
    from calcscout.encoders.smtlib import export_obligations
    from calcscout.obligations.claims import plan

    spec = load(file)
    claim = next((c for c in spec.claims if c.name == claim_name), None)
    if claim is None:
        raise UsageError(f"no claim {claim_name} in {spec.file}",
                         hint="claims: " + (", ".join(c.name for c in spec.claims) or "none"))
    from calcscout.rules.core.spec import Terminating

    if isinstance(claim.formula, Terminating):  # the order-finding query (sat: terminating)
        from calcscout.obligations.engines.termination import export_claim

        _check_export_folder(out_dir, spec, claim)
        click.echo(str(export_claim(spec, claim, out_dir)))
        return
    _check_export_folder(out_dir, spec, claim)
    b = spec.claim_bounds(claim, Bounds(size=size, steps=steps, names=names))
    skipped: list[str] = []
    for path in export_obligations(spec, claim, plan(spec, claim).obligations, b, out_dir, skipped):
        click.echo(str(path))
    for why in skipped:
        click.echo(f"not written: {why}", err=True)


def _check_export_folder(out_dir: str, spec: Spec, claim) -> None:
    """``export -o DIR`` creates DIR itself when it is missing, but not DIR's missing
    parents; a file it would write must be a regular file or new, and none of the rule files."""
    from calcscout.encoders.smtlib import _safe
    from calcscout.obligations.claims import plan
    from calcscout.obligations.reporting.report import output_target

    if out_dir == "":
        raise UsageError("an empty path names no folder for the .smt2 files")
    if os.path.lexists(out_dir) and not os.path.isdir(out_dir):
        raise UsageError(f"{out_dir} is not a folder; export -o needs a folder for its .smt2 files")
    if not os.path.isdir(out_dir):
        parent = os.path.dirname(os.path.abspath(out_dir))
        if not os.path.isdir(parent):
            raise UsageError(f"cannot create {out_dir}: the folder {parent} does not exist",
                             hint="export -o creates its own folder, not the folders above it")
        return
    p = plan(spec, claim)
    for ob in ([p.head] if p.head else []) + list(p.parts):
        for suffix in (".smt2", ".smt2.tmp"):  # the file and its temporary, renamed over it
            output_target(os.path.join(out_dir, _safe(ob.name) + suffix), spec.files,
                          "SMT-LIB file")


# ---------------------------------------------------------------- merge and explain


@cli.command()
@click.argument("reports", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "output", required=True, metavar="REPORT", help="Where to write the merged report.")
def merge(reports: tuple[str, ...], output: str) -> None:
    """Combine the JSON reports of `check --shard I/N` runs into the report of one whole run."""
    from calcscout.obligations.commands.merge import merge_reports
    from calcscout.obligations.reporting.report import dumps, output_target, write_atomically

    output_target(output, reports)
    merged, inputs = merge_reports(list(reports), output)
    write_atomically(output, dumps(merged), [*reports, *inputs])
    verdicts = [c["verdict"] for c in merged["claims"] if "part_of" not in c]
    from calcscout.obligations.verdict import exit_code

    click.echo(f"merged {len(reports)} report(s) into {output}: "
               + ", ".join(f"{c['name']} {c['verdict']}" for c in merged["claims"]
                           if "part_of" not in c))
    sys.exit(exit_code(verdicts))


@cli.command()
@click.argument("report", required=False, type=click.Path(dir_okay=False))
@click.argument("claim", required=False)
@click.option("--dot", "dot_path", metavar="PATH", default=None,
              help="Write the counterexample's reduction graph in DOT.")
@click.option("--model", "model_path", metavar="SOLVER_OUTPUT", default=None,
              help="Read a solver's model for an exported SMT2_FILE (given as REPORT).")
def explain(report: str | None, claim: str | None, dot_path: str | None,
            model_path: str | None) -> None:
    """Print one claim's evidence again from a saved JSON REPORT.

    With --model SOLVER_OUTPUT, REPORT is an .smt2 file written by `export` and
    the model is turned back into the counterexample's terms.
    """
    from calcscout.obligations.commands.explain import explain_claim, explain_model

    if model_path is not None:
        if report is None:
            raise UsageError("explain --model SOLVER_OUTPUT needs the SMT2_FILE it answers")
        click.echo(explain_model(model_path, report))
        return
    if report is None or claim is None:
        raise UsageError("explain REPORT CLAIM: give the saved JSON report and a claim name")
    click.echo(explain_claim(report, claim, dot_path))


# ---------------------------------------------------------------- entry point


def main(argv: list[str] | None = None) -> None:
    """The console script: run the group, map user errors to exit 2 and bugs to exit 70."""
    # Interned terms never form reference cycles, yet every one is a tracked
    # container: with the default thresholds the cycle collector ran through
    # the whole heap about once per 700 terms and cost a third of enumeration.
    gc.set_threshold(50_000, 20, 20)
    try:
        cli.main(args=argv, prog_name="calcscout", standalone_mode=False)
        _flush_stdout()
    except SystemExit as e:
        if e.code in (0, 1, 3):  # a verdict's status: its output must have reached stdout
            _flush_stdout()
        raise
    except CalcError as e:
        click.echo(e.render(), err=True)
        sys.exit(e.exit_code)
    except click.exceptions.Abort:
        click.echo("interrupted", err=True)
        sys.exit(130)
    except click.ClickException as e:
        e.show()
        sys.exit(2)
    except BrokenPipeError:
        sys.stderr.close()
        sys.exit(0)
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(130)
    except OSError as e:
        if e.errno not in _ENVIRONMENT_ERRORS:
            _internal_error()
        # the machine refused a write (a full disk, standard output on a full device):
        # not a bug, and nothing to do with a traceback
        _drop_stdout()
        where = e.filename if e.filename else "to standard output"
        click.echo(f"error: cannot write {where}: {e.strerror}", err=True)
        sys.exit(2)
    except Exception:
        _internal_error()
    sys.exit(0)


_ENVIRONMENT_ERRORS = {errno.ENOSPC, errno.EDQUOT, errno.EFBIG, errno.EIO, errno.EROFS}


def _flush_stdout() -> None:
    """Flush standard output now, so that a write it refuses is reported as such."""
    try:
        sys.stdout.flush()
    except BrokenPipeError:  # the reader went away: nothing more to say to it
        _drop_stdout()
    except OSError as e:
        if e.errno not in _ENVIRONMENT_ERRORS:
            raise
        _drop_stdout()
        click.echo(f"error: cannot write to standard output: {e.strerror}", err=True)
        sys.exit(2)


def _drop_stdout() -> None:
    """Point standard output at the null device, so that the interpreter's last flush of
    what could not be written does not fail again at exit."""
    try:
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, sys.stdout.fileno())
        os.close(null)
    except (OSError, ValueError, AttributeError):
        pass


def _internal_error() -> None:
    """Report the exception being handled as a bug: exit 70; the traceback only when
    CALCSCOUT_DEBUG is set to something other than empty or 0."""
    click.echo("calcscout: internal error (this is a bug in calcscout, not in your files):",
               err=True)
    if os.environ.get("CALCSCOUT_DEBUG", "").strip() not in ("", "0"):
        traceback.print_exc()
    else:
        etype, value, _ = sys.exc_info()
        click.echo(f"  {etype.__name__}: {value}", err=True)
        click.echo("  set CALCSCOUT_DEBUG=1 for the traceback", err=True)
    sys.exit(70)


if __name__ == "__main__":  # pragma: no cover
    main()
