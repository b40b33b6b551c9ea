"""A run-time failure in one claim is that claim's `error` verdict, with the message and the
smallest case that met it; the other claims keep their verdicts, every report is written,
and the exit status is 2 at the end."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main
from calcscout.obligations.runner import RunOptions, run_claims
from calcscout.rules.loading.load import load_file

DATA = Path(__file__).parent / "data" / "engine"
DROPPED = str(DATA / "dropped-binder.calc")
ESCAPE = "translation t: the equation at line 13 lets a bound name of app(lam(y.y), x) escape"


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err


def test_a_dropped_binder_is_the_claims_error_and_the_run_goes_on(capsys, tmp_path) -> None:
    """t(app(lam(x.M), N)) = t(M) used to stop the whole run with exit 2 and no report.

    Family: run-time failures of a claim.  Checked: a bound name escaping a translation
    equation (here), a missing equation met at run time (runtime-failure.calc, below), the
    failure met by a premise's N, by a conclusion, by the parts of a shorthand (the head's
    verdict is the worst, error), a refutation found before the failure (it stands), --jobs,
    --shard and merge (below), and the text, JSON and JUnit reports."""
    js, xml = tmp_path / "r.json", tmp_path / "r.xml"
    code, out, err = run(capsys, "check", DROPPED, "--json", str(js), "--junit", str(xml))
    assert code == 2 and err == ""
    claims = {c["name"]: c for c in json.loads(js.read_text())["claims"]}
    verdicts = {k: c["verdict"] for k, c in claims.items()}
    assert verdicts == {"before": "holds", "image": "error", "sim": "error",
                        "refuted_first": "refuted", "gc": "error", "gc.mono(F)": "error",
                        "gc.mono(G)": "holds", "gc.unit": "error", "gc.counit": "error",
                        "after": "holds"}
    e = claims["image"]["error"]
    assert e["message"].startswith(ESCAPE)
    assert e["at"].endswith("dropped-binder.calc:13:3") and e["hint"]
    # the smallest term that meets the equation with its binder's name in M
    assert e["case"] == {"size": 4, "terms": {"M": "app(lam(y.y), x)"}}
    assert claims["image"]["tried"] == 18 and claims["image"]["counterexample"] is None
    assert claims["sim"]["error"]["case"]["terms"] == {"M": "app(lam(y.y), x)", "N": "x"}
    assert claims["gc.counit"]["error"]["case"]["terms"] == {"N": "app(lam(y.y), x)"}
    assert claims["refuted_first"]["counterexample"]["terms"]["M"] == "x"
    assert "error" not in claims["before"]
    # text: the verdict line, then the message, where, the case and the hint
    assert "  error        image          " + ESCAPE in out
    assert "  case (size 4):\n    M = app(lam(y.y), x)\n  hint:" in out
    assert "summary: 2 hold, 1 refuted, 3 error" in out
    cases = {c.get("name"): c for c in ET.parse(xml).getroot().iter("testcase")}
    assert cases["image"].find("error").get("message").startswith(ESCAPE)
    assert cases["before"].find("error") is None and cases["refuted_first"].find("failure") is not None


def test_jobs_and_shards_give_the_same_error(capsys, tmp_path) -> None:
    spec = load_file(DROPPED)
    one, _ = run_claims(spec, list(spec.claims), RunOptions(jobs=1))
    two, _ = run_claims(spec, list(spec.claims), RunOptions(jobs=2))
    stable = [_stable(v.to_json()) for v in one]
    assert stable == [_stable(v.to_json()) for v in two]
    whole = tmp_path / "whole.json"
    run(capsys, "check", DROPPED, "--json", str(whole))
    parts = []
    for i in (1, 2, 3):
        p = tmp_path / f"part{i}.json"
        run(capsys, "check", DROPPED, "--shard", f"{i}/3", "--json", str(p))
        parts.append(str(p))
    merged = tmp_path / "merged.json"
    code, _, _ = run(capsys, "merge", *parts, "-o", str(merged))
    assert code == 2
    got = [_stable(c) for c in json.loads(merged.read_text())["claims"]]
    assert got == [_stable(c) for c in json.loads(whole.read_text())["claims"]]


def test_a_missing_case_met_by_a_premises_n_is_an_error_verdict(capsys, tmp_path) -> None:
    js = tmp_path / "r.json"
    code, out, _ = run(capsys, "check", str(DATA / "runtime-failure.calc"), "--json", str(js))
    assert code == 2
    (c,) = json.loads(js.read_text())["claims"]
    assert c["verdict"] == "error"
    assert c["error"]["message"].startswith("translation only_val: no equation of only_val "
                                            "matches app(")
    assert set(c["error"]["case"]["terms"]) == {"V", "N"}
    assert "error        breaks" in out


def _stable(d: dict) -> dict:
    d = dict(d)
    d.pop("seconds", None)
    return d
