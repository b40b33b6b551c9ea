"""The ``calcscout`` command line.

One handler at the top (:func:`main`) turns every :class:`~rules.errors.CalcError`
into its message and exit status 2 (or its own code), and any other exception
into a short internal-error report: a user never sees a traceback for their
own mistake.
"""

from __future__ import annotations

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
        raise UsageError(f"give the sort as CALC.SORT, not {sort!r}",
                         hint=f"for example {next(iter(spec.calculi), 'lam')}.term")
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
    out = click.get_text_stream("stdout")
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
