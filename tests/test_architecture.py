"""The folder tree is the architecture: imports are namespaced, go one way, form no circle.

Reads the imports of every module under rules/, obligations/ and encoders/ with
``ast`` (imports inside functions included) and checks the layering that
DEVELOPERS.md describes.  Also keeps the tests honest: a test that imported a
bare ``rules`` (possible from the repository root) would load a second copy of
every module, whose interned terms differ from the first copy's.
"""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx
import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("rules", "obligations", "encoders")


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(["calcscout", *parts])


MODULES = {module_name(p): p for pkg in PACKAGES for p in sorted((ROOT / pkg).rglob("*.py"))}


def imports_of(path: Path) -> list[tuple[int, int, str, tuple[str, ...]]]:
    """(line, level, module, imported names) of every import statement in ``path``."""
    out = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
        if isinstance(node, ast.Import):
            out.extend((node.lineno, 0, a.name, ()) for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            out.append((node.lineno, node.level, node.module or "", tuple(a.name for a in node.names)))
    return out


def import_graph() -> nx.DiGraph:
    """Module -> the project modules it imports (``from P import m`` of a module m counts as m)."""
    g = nx.DiGraph()
    g.add_nodes_from(MODULES)
    for mod, path in MODULES.items():
        for _, _, target, names in imports_of(path):
            if not target.startswith("calcscout."):
                continue
            for t in [f"{target}.{n}" for n in names if f"{target}.{n}" in MODULES] or [target]:
                g.add_edge(mod, t)
    return g


def _bare(level: int, target: str) -> bool:
    return level > 0 or target.split(".")[0] in PACKAGES


def test_every_project_import_is_namespaced():
    bad = [f"{path.relative_to(ROOT)}:{line}: {'.' * level}{target}"
           for path in MODULES.values()
           for line, level, target, _ in imports_of(path) if _bare(level, target)]
    assert bad == []


def test_every_imported_project_module_exists():
    g = import_graph()
    missing = sorted({f"{a} -> {b}" for a, b in g.edges if b not in MODULES})
    assert missing == []


def test_no_import_circle():
    g = import_graph()
    cycles = sorted(" -> ".join(c) for c in nx.simple_cycles(g))
    assert cycles == []


# (importer prefix, prefix it must not import): dependencies go one way only.
LAYERS = [
    ("calcscout.encoders", "calcscout.obligations"),
    ("calcscout.rules", "calcscout.obligations"),
    ("calcscout.rules", "calcscout.encoders"),
    # inside rules/: the term core is the bottom layer; notation sits on it; rewriting
    # on both; critical pairs on rewriting; nothing below reads rule files.
    ("calcscout.rules.core", "calcscout.rules.loading"),
    ("calcscout.rules.core", "calcscout.rules.notation"),
    ("calcscout.rules.core", "calcscout.rules.rewriting"),
    ("calcscout.rules.core", "calcscout.rules.critical_pairs"),
    ("calcscout.rules.notation", "calcscout.rules.loading"),
    ("calcscout.rules.notation", "calcscout.rules.rewriting"),
    ("calcscout.rules.notation", "calcscout.rules.critical_pairs"),
    ("calcscout.rules.rewriting", "calcscout.rules.loading"),
    ("calcscout.rules.rewriting", "calcscout.rules.critical_pairs"),
    ("calcscout.rules.critical_pairs", "calcscout.rules.loading"),
    # inside obligations/: engines and reports never reach up to the command line
    ("calcscout.obligations.engines", "calcscout.obligations.commands"),
    ("calcscout.obligations.engines", "calcscout.obligations.reporting"),
    ("calcscout.obligations.reporting", "calcscout.obligations.commands"),
]


@pytest.mark.parametrize(("importer", "forbidden"), LAYERS, ids=[f"{a}-not-{b}" for a, b in LAYERS])
def test_no_upward_import(importer, forbidden):
    g = import_graph()
    up = sorted(f"{a} -> {b}" for a, b in g.edges
                if (a == importer or a.startswith(importer + "."))
                and (b == forbidden or b.startswith(forbidden + ".")))
    assert up == []


def test_tests_import_only_the_namespaced_modules():
    files = sorted(p for p in (ROOT / "tests").rglob("*.py") if "data" not in p.parts)
    bad = [f"{path.relative_to(ROOT)}:{line}: {'.' * level}{target}"
           for path in files for line, level, target, _ in imports_of(path)
           if level == 0 and target.split(".")[0] in PACKAGES]
    assert bad == []
    assert len(files) > 20  # the walk found the test files


def test_the_checks_see_the_imports():
    """A check over an empty graph would pass whatever the code did."""
    g = import_graph()
    assert len(MODULES) > 40
    assert ("calcscout.obligations.runner", "calcscout.obligations.engines.enumeration") in g.edges
    assert ("calcscout.rules.rewriting.rewrite", "calcscout.rules.core.terms") in g.edges


def test_no_bare_copy_is_loaded():
    """Importing every module by its namespaced name loads no bare ``rules``/``obligations``/
    ``encoders`` module (a second copy whose interned terms would differ); run late in the
    suite, this also sees what every earlier test imported."""
    import importlib
    import sys

    for mod in MODULES:
        importlib.import_module(mod)
    bare = sorted(m for m in sys.modules if m.split(".")[0] in PACKAGES)
    assert bare == []
