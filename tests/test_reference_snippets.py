"""The project's own reference (rules/LANGUAGE.md, obligations/ENGINES.md) stays true:
every ```calc block is a whole rule file that `calcscout lint` accepts, and every file
the reference points to exists."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main

ROOT = Path(__file__).resolve().parents[1]
REFERENCES = [ROOT / "rules" / "LANGUAGE.md", ROOT / "obligations" / "ENGINES.md"]
SNIPPET = re.compile(r"```calc\n(.*?)```", re.S)


def snippets() -> list[tuple[str, str]]:
    out = []
    for ref in REFERENCES:
        text = ref.read_text(encoding="utf-8")
        for m in SNIPPET.finditer(text):
            line = text.count("\n", 0, m.start()) + 1
            out.append((f"{ref.name}:{line}", m.group(1)))
    return out


def test_the_reference_has_examples() -> None:
    assert len(snippets()) >= 6


@pytest.mark.parametrize(("where", "source"), snippets(), ids=[w for w, _ in snippets()])
def test_every_calc_snippet_lints(where: str, source: str, tmp_path, capsys) -> None:
    f = tmp_path / "snippet.calc"
    f.write_text(source, encoding="utf-8")
    with pytest.raises(SystemExit) as info:
        main(["lint", str(f)])
    out, err = capsys.readouterr()
    assert info.value.code == 0, f"{where}: {out}{err}"
    assert "ok:" in out


@pytest.mark.parametrize("ref", REFERENCES, ids=lambda p: p.name)
def test_links_point_inside_the_project(ref: Path) -> None:
    text = ref.read_text(encoding="utf-8")
    for target in re.findall(r"\]\(([^)#]+)\)", text):
        assert (ref.parent / target).resolve().is_file(), f"{ref.name} links to missing {target}"
        assert ROOT in (ref.parent / target).resolve().parents
