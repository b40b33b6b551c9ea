"""Reading a solver's model of an exported file back into terms; files that were edited."""

from __future__ import annotations

import os
import re
import subprocess
import sysconfig
from pathlib import Path

import pytest

from calcscout.encoders.model import read_model
from calcscout.encoders.smtlib import export_obligations
from calcscout.obligations.claims import plan
from calcscout.obligations.commands.explain import explain_model
from calcscout.rules.core.errors import UsageError
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"
CPS = DATA / "smt" / "cps.calc"
Z3 = os.path.join(sysconfig.get_path("scripts"), "z3")
needs_z3 = pytest.mark.skipif(not os.path.exists(Z3), reason="no stand-alone z3")


def exported(tmp_path: Path, claim: str, size: int) -> Path:
    spec = load_file(str(CPS))
    c = next(c for c in spec.claims if c.name == claim)
    [p] = export_obligations(spec, c, plan(spec, c).obligations, spec.effective_bounds(Bounds(size=size)),
                             tmp_path)
    return p


def answer(tmp_path: Path, p: Path) -> Path:
    out = tmp_path / (p.stem + ".out")
    out.write_text(subprocess.run([Z3, str(p)], capture_output=True, text=True,
                                  timeout=120).stdout)
    return out


@needs_z3
def test_model_becomes_the_counterexample(tmp_path):
    p = exported(tmp_path, "one", 4)
    text = explain_model(str(answer(tmp_path, p)), str(p))
    assert "model of size 4" in text
    assert "M      = app(lam(" in text and "N      = x" in text
    assert "evidence:" in text


@needs_z3
def test_unsat_answer_says_the_claim_holds(tmp_path):
    p = exported(tmp_path, "back", 4)
    assert "holds within these bounds" in explain_model(str(answer(tmp_path, p)), str(p))


def test_model_values_are_read():
    text = "sat\n(\n  (define-fun t3 () Int\n    (- 1))\n  (define-fun size2 () Bool\n true)\n)"
    path = Path(os.environ.get("TMPDIR", "/tmp")) / "calcscout-model-test.out"
    path.write_text(text)
    assert read_model(str(path)) == ("sat", {"t3": -1, "size2": True})


@needs_z3
def test_edited_header_is_a_clear_error(tmp_path):
    p = exported(tmp_path, "one", 4)
    out = answer(tmp_path, p)
    p.write_text("".join(line for line in p.read_text().splitlines(keepends=True)
                         if "calcscout-obligation" not in line))
    with pytest.raises(UsageError) as e:
        explain_model(str(out), str(p))
    assert "calcscout-obligation" in e.value.render()


@needs_z3
def test_a_model_edited_by_hand_does_not_fit(tmp_path):
    p = exported(tmp_path, "one", 4)
    out = answer(tmp_path, p)
    text, n = re.subn(r"(define-fun t0 \(\) Int\s+)\d+", r"\g<1>999", out.read_text())
    assert n == 1
    out.write_text(text)
    with pytest.raises(UsageError) as e:
        explain_model(str(out), str(p))
    assert "not a model" in e.value.render()


def test_garbage_solver_output_is_a_clear_error(tmp_path):
    p = exported(tmp_path, "one", 3)
    bad = tmp_path / "bad.out"
    bad.write_text("sat\n((define-fun t0 () Int 3)")
    with pytest.raises(UsageError) as e:
        explain_model(str(bad), str(p))
    assert "parenthesis" in e.value.render()
    bad.write_text("hello")
    with pytest.raises(UsageError):
        explain_model(str(bad), str(p))
