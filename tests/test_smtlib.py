"""Exported SMT-LIB files: plain SMT-LIB 2.6, and the stand-alone solver agrees with
the in-process one."""

from __future__ import annotations

import os
import subprocess
import sysconfig
from pathlib import Path

import pytest

from calcscout.encoders.smtlib import export_obligations, read_header
from calcscout.obligations.claims import plan
from calcscout.obligations.engines.smt import run_smt
from calcscout.rules.core.errors import EncodingError
from calcscout.rules.core.spec import Bounds
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data"
CPS = DATA / "smt" / "cps.calc"
Z3 = os.path.join(sysconfig.get_path("scripts"), "z3")


def export(path: Path, claim: str, size: int, out: Path) -> list[Path]:
    spec = load_file(str(path))
    c = next(c for c in spec.claims if c.name == claim)
    return export_obligations(spec, c, plan(spec, c).obligations, spec.effective_bounds(Bounds(size=size)),
                              out)


def solve_file(p: Path) -> str:
    return subprocess.run([Z3, str(p)], capture_output=True, text=True, timeout=120).stdout


def test_file_is_plain_smtlib_with_a_header(tmp_path):
    [p] = export(CPS, "back", 4, tmp_path)
    text = p.read_text()
    assert p.name == "back.smt2"
    assert "(set-logic QF_LIA)" in text and text.rstrip().endswith("(check-sat)\n(get-model)")
    assert "; unsat: no counterexample up to size 4" in text
    assert "define-fun-rec" not in text and "(_ " not in text
    h = read_header(p)
    assert h["obligation"] == "back" and h["spec"] == str(CPS.resolve())


@pytest.mark.skipif(not os.path.exists(Z3), reason="the z3 wheel's stand-alone solver is missing")
@pytest.mark.parametrize(("claim", "size"), [("back", 5), ("not_image", 3), ("one", 5)])
def test_standalone_solver_agrees_with_in_process(tmp_path, claim, size):
    spec = load_file(str(CPS))
    c = next(c for c in spec.claims if c.name == claim)
    v = run_smt(spec, plan(spec, c).head, spec.effective_bounds(Bounds(size=size)))
    [p] = export(CPS, claim, size, tmp_path)
    answer = solve_file(p).split()[0]
    assert answer == ("unsat" if v.verdict == "holds" else "sat")


def test_shorthand_gives_one_file_per_encodable_part(tmp_path):
    spec = load_file(str(DATA / "conformance" / "every-construct.calc"))
    c = next(c for c in spec.claims if c.name == "iso")
    paths = export_obligations(spec, c, plan(spec, c).obligations, spec.effective_bounds(Bounds(size=3)),
                               tmp_path)
    assert sorted(p.name for p in paths) == ["iso.exact_counit.smt2", "iso.exact_unit.smt2",
                                             "iso.mono_F_.smt2", "iso.mono_G_.smt2"]


def test_claim_with_nothing_encodable_is_an_encoding_error(tmp_path):
    with pytest.raises(EncodingError) as e:
        export(DATA / "conformance" / "every-construct.calc", "image", 3, tmp_path)
    assert "normalize" in e.value.render()
