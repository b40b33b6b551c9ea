"""The ``calcscout`` command line.

One handler at the top (:func:`main`) turns every :class:`~rules.errors.CalcError`
into its message and exit status 2 (or its own code), and any other exception
into a short internal-error report: a user never sees a traceback for their
own mistake.
"""

from __future__ import annotations

import math
import os
import sys
import traceback
from importlib.metadata import PackageNotFoundError, version

import click

from rules.errors import CalcError, UsageError
from rules.spec import Bounds, Calculus, Spec


def _version() -> str:
    try:
        return version("calcscout")
    except PackageNotFoundError:  # pragma: no cover - running from a source tree
        return "0.0+source"


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
    from rules.parse import load_file

    return load_file(path)


def calculus(spec: Spec, name: str) -> Calculus:
    calc = spec.calculi.get(name)
    if calc is None:
        known = ", ".join(spec.calculi) or "none"
        raise UsageError(f"no calculus {name} in {spec.file} (calculi: {known})")
    return calc


# ---------------------------------------------------------------- the group


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(_version(), "--version", prog_name="calcscout")
def cli() -> None:
    """Check claims about calculi and translations between them, exhaustively up to bounds.

    FILE is a .calc rule file. Exit status: 0 every claim holds, 1 some claim is
    refuted, 3 none refuted but some inconclusive, 2 the input or the command
    line is wrong.
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
    from rules.enumerate import count_terms, enumerate_terms
    from rules.notation import print_abstract

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
    from rules.notation import parse_term, print_abstract, print_term
    from rules.translate import Translator

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


class _ProgressLine:
    """A one-line progress display on standard error, only on a terminal, only after 1 s."""

    def __init__(self) -> None:
        import time

        self.clock = time.monotonic
        self.start = self.clock()
        self.last = 0.0
        self.enabled = sys.stderr.isatty()
        self.shown = False

    def __call__(self, name: str, done: int, total: int) -> None:
        now = self.clock()
        if not self.enabled or now - self.start < 1.0 or now - self.last < 0.1:
            return
        self.last = now
        pct = f"{100 * done // total:3d}%" if total else "    "
        sys.stderr.write(f"\r  checking {name}: {done}/{total} values {pct}\x1b[K")
        sys.stderr.flush()
        self.shown = True

    def clear(self) -> None:
        if self.shown:
            sys.stderr.write("\r\x1b[K")
            sys.stderr.flush()


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
@click.option("--engine", type=click.Choice(["enum", "smt", "auto"]), default="enum",
              show_default=True, help="Which engine decides the claims.")
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
def check(file: str, claims: tuple[str, ...], size, steps, names, nodes, engine: str,
          timeout: float | None, json_path: str | None, junit_path: str | None, jobs: int,
          shard, collect_all: bool, quiet: bool) -> None:
    """Check the claims of FILE (all of them, or the CLAIMs named), smallest cases first."""
    from .report import dumps, json_report, junit_report, text_report, use_colour, write_atomically
    from .runner import RunOptions, run_claims
    from .verdict import exit_code

    spec = load(file)
    chosen = list(spec.claims)
    if claims:
        by_name = {c.name: c for c in spec.claims}
        missing = [c for c in claims if c not in by_name]
        if missing:
            raise UsageError(f"no claim {missing[0]} in {spec.file}",
                             hint="claims: " + (", ".join(by_name) or "none"))
        chosen = [by_name[c] for c in claims]
    progress = _ProgressLine()
    opts = RunOptions(Bounds(size=size, steps=steps, names=names, nodes=nodes), jobs, shard,
                      collect_all, engine, timeout, progress)
    try:
        verdicts, partials = run_claims(spec, chosen, opts)
    finally:
        progress.clear()
    extra = {"shard": list(shard), "records": partials} if shard else None
    report = json_report(spec.file, verdicts, extra)
    if json_path is not None:
        write_atomically(json_path, dumps(report))
    if junit_path is not None:
        write_atomically(junit_path, junit_report(spec.file, verdicts))
    if json_path != "-":
        out = sys.stdout
        out.write(text_report(spec.file, verdicts, use_colour(out), quiet))
    sys.exit(exit_code([v.verdict for v in verdicts if not v.part_of]))


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
    from rules.notation import parse_term, print_abstract, print_term
    from rules.rewrite import find_cycle, normal_forms, reduction_graph
    from rules.sorts import grammar

    from .dot import graph_to_dot
    from .report import dumps, write_atomically

    spec = load(file)
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
    if dot_path:
        write_atomically(dot_path, graph_to_dot(calc, g))
    if json_out is not None:
        write_atomically(json_out, dumps(info))
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
    from rules.critical import pairs_report

    from .report import dumps, write_atomically

    spec = load(file)
    cname, _, group = calc_name.partition(".")
    calc = calculus(spec, cname)
    if group and group not in calc.groups:
        raise UsageError(f"calculus {cname} has no rule group {group}",
                         hint="groups: " + (", ".join(calc.groups) or "none"))
    b = spec.effective_bounds(Bounds(size=size, steps=steps, nodes=nodes))
    report = pairs_report(calc, b, group or None)
    if json_out is not None:
        write_atomically(json_out, dumps(report))
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
    from encoders.smtlib import export_obligations

    spec = load(file)
    claim = next((c for c in spec.claims if c.name == claim_name), None)
    if claim is None:
        raise UsageError(f"no claim {claim_name} in {spec.file}",
                         hint="claims: " + (", ".join(c.name for c in spec.claims) or "none"))
    b = spec.claim_bounds(claim, Bounds(size=size, steps=steps, names=names))
    skipped: list[str] = []
    for path in export_obligations(spec, claim, b, out_dir, skipped):
        click.echo(str(path))
    for why in skipped:
        click.echo(f"not written: {why}", err=True)


# ---------------------------------------------------------------- merge and explain


@cli.command()
@click.argument("reports", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False))
@click.option("-o", "output", required=True, metavar="REPORT", help="Where to write the merged report.")
def merge(reports: tuple[str, ...], output: str) -> None:
    """Combine the JSON reports of `check --shard I/N` runs into the report of one whole run."""
    from .merge import merge_reports
    from .report import dumps, write_atomically

    merged = merge_reports(list(reports))
    write_atomically(output, dumps(merged))
    verdicts = [c["verdict"] for c in merged["claims"] if "part_of" not in c]
    from .verdict import exit_code

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
    from .explain import explain_claim, explain_model

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
    try:
        cli.main(args=argv, prog_name="calcscout", standalone_mode=False)
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
    except Exception:
        click.echo("calcscout: internal error (this is a bug in calcscout, not in your files):",
                   err=True)
        if os.environ.get("CALCSCOUT_DEBUG"):
            traceback.print_exc()
        else:
            etype, value, _ = sys.exc_info()
            click.echo(f"  {etype.__name__}: {value}", err=True)
            click.echo("  set CALCSCOUT_DEBUG=1 for the traceback", err=True)
        sys.exit(70)
    sys.exit(0)


if __name__ == "__main__":  # pragma: no cover
    main()
