"""Reduction graphs in the DOT language (Graphviz's open format)."""

from __future__ import annotations

import networkx as nx

from calcscout.rules.core.spec import Calculus
from calcscout.rules.notation.notation import print_term
from calcscout.rules.rewriting.rewrite import position_text


def _quote(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def graph_to_dot(calc: Calculus, graph: nx.DiGraph, highlight: set | None = None) -> str:
    """The graph with terms as node labels and ``rule @ position`` on the edges.

    The start term is drawn bold, normal forms with a double border, and the
    ``highlight`` terms (a counterexample's) filled.
    """
    root = graph.graph.get("root")
    ids = {t: f"t{i}" for i, t in enumerate(graph.nodes)}
    state = "complete" if graph.graph.get("complete") else f"cut by {graph.graph.get('cut_by')}"
    lines = ["digraph reductions {", "  rankdir=LR;", "  node [shape=box, fontname=monospace];",
             f"  label={_quote(f'{calc.name}: {graph.number_of_nodes()} terms, {state}')};"]
    for t, data in graph.nodes(data=True):
        attrs = [f"label={_quote(print_term(calc, t))}"]
        if t is root:
            attrs.append("style=bold")
        if data.get("normal"):
            attrs.append("peripheries=2")
        if highlight and t in highlight:
            attrs.append("style=filled, fillcolor=lightgrey")
        lines.append(f"  {ids[t]} [{', '.join(attrs)}];")
    for a, b, data in graph.edges(data=True):
        where = position_text(data.get("position", ()))
        label = _quote(f"{data.get('rule', '')} @ {where}")
        lines.append(f"  {ids[a]} -> {ids[b]} [label={label}];")
    lines.append("}")
    return "\n".join(lines) + "\n"
