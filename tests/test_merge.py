"""``calcscout merge``: only the shards of one run are merged, and every counterexample
in them is judged again against the rule file before it is reported."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main

DATA = Path(__file__).parent / "data"
BASICS = DATA / "engine" / "basics.calc"
CLAIMS = ("identity", "flip_sim", "flip_same")


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err


@pytest.fixture()
def shards(capsys, tmp_path, monkeypatch) -> tuple[Path, list[Path]]:
    """The rule file (copied, so that a test may change it) and its two shard reports,
    made in tmp_path as the working folder (reports name the rule file relative to it)."""
    monkeypatch.chdir(tmp_path)
    shutil.copyfile(BASICS, tmp_path / "basics.calc")
    out = []
    for i in (1, 2):
        p = tmp_path / f"s{i}.json"
        code, _, err = run(capsys, "check", "basics.calc", *CLAIMS, "--shard", f"{i}/2",
                           "--json", str(p))
        assert code == 1, err
        out.append(p)
    return tmp_path / "basics.calc", out


def _edit(path: Path, change) -> Path:
    data = json.loads(path.read_text())
    change(data)
    edited = path.with_name("edited-" + path.name)
    edited.write_text(json.dumps(data))
    return edited


def _merge(capsys, *reports: Path, out: str = "merged.json") -> tuple[int, str]:
    code, _, err = run(capsys, "merge", *map(str, reports), "-o", out)
    return code, err


def test_shards_of_one_run_merge(capsys, shards) -> None:
    _, (s1, s2) = shards
    code, err = _merge(capsys, s1, s2)
    assert code == 1, err
    merged = json.loads(Path("merged.json").read_text())
    verdicts = {c["name"]: c["verdict"] for c in merged["claims"]}
    assert verdicts == {"identity": "holds", "flip_sim": "refuted", "flip_same": "refuted"}


def test_shards_of_different_runs_are_refused(capsys, shards, tmp_path) -> None:
    """Family: everything that makes two shard reports parts of different runs (rule file
    contents, claims, bounds, engine, --all, shard count, a repeated or missing shard)."""
    spec, (s1, s2) = shards
    other = []
    for args in (["--size", "4"], ["--all"], ["--engine", "auto"], ["--timeout", "7"]):
        p = tmp_path / f"other{len(other)}.json"
        run(capsys, "check", "basics.calc", *CLAIMS, "--shard", "2/2", "--json", str(p), *args)
        other.append(p)
    p = tmp_path / "fewer.json"
    run(capsys, "check", "basics.calc", "identity", "--shard", "2/2", "--json", str(p))
    other.append(p)
    p = tmp_path / "three.json"
    run(capsys, "check", "basics.calc", *CLAIMS, "--shard", "2/3", "--json", str(p))
    other.append(p)
    expected = ["different bounds", "different --all", "different engines",
                "different solver timeouts", "other claims",
                "different numbers of shards"]
    for p, words in zip(other, expected, strict=True):
        code, err = _merge(capsys, s1, p)
        assert code == 2 and words in err, (p, err)
    code, err = _merge(capsys, s1, s1)
    assert code == 2 and "both shard 1/2" in err
    code, err = _merge(capsys, s1)
    assert code == 2 and "shard 2/2 is missing" in err
    # the rule file changed since, or is gone: the counterexamples cannot be judged
    spec.write_text(spec.read_text() + "\n# edited\n")
    code, err = _merge(capsys, s1, s2)
    assert code == 2 and "has changed since the shards were checked" in err
    spec.unlink()
    code, err = _merge(capsys, s1, s2)
    assert code == 2 and "cannot be loaded again" in err
    assert not Path("merged.json").exists()


def test_a_shard_with_another_hash_is_refused(capsys, shards) -> None:
    _, (s1, s2) = shards
    forged = _edit(s2, lambda d: d.update(sources="sha256:" + "0" * 64))
    code, err = _merge(capsys, s1, forged)
    assert code == 2 and "different rule file contents" in err


def _failure_of(data: dict, claim: str) -> dict:
    for o in data["records"][claim]["obligations"]:
        for part in o.get("parts", []):
            if part["failures"]:
                return part["failures"][0]["counterexample"]
    raise AssertionError(f"no failure of {claim} in this shard")


def _shard_with_failure(shards, claim: str) -> tuple[Path, Path]:
    """(the shard that holds claim's counterexample, the other one)."""
    _, (s1, s2) = shards
    for a, b in ((s1, s2), (s2, s1)):
        try:
            _failure_of(json.loads(a.read_text()), claim)
            return a, b
        except AssertionError:
            continue
    raise AssertionError(f"no shard refutes {claim}")


def test_forged_counterexamples_are_refused(capsys, shards) -> None:
    """Family: every way to forge a counterexample by hand (terms that do not fail, terms
    that do not parse, a term missing, a true failure with false evidence or size, a
    failure added to a claim that holds); each is refused with exit 2, never reported."""
    has, other = _shard_with_failure(shards, "flip_sim")

    def set_terms(terms: dict):
        def change(d):
            ce = _failure_of(d, "flip_sim")
            ce["terms"] = terms
            ce["evidence"] = "forged"
        return change

    def set_field(key, value):
        def change(d):
            _failure_of(d, "flip_sim")[key] = value
        return change

    def add_to_identity(d):
        o = d["records"]["identity"]["obligations"][0]
        o["parts"][0]["failures"] = [{"index": 0, "counterexample": {
            "size": 1, "terms": {"M": "x", "dup(M)": "x"}, "evidence": "forged"}}]

    forgeries = [
        (set_terms({"M": "x", "N": "x"}), "premise's N is not generated"),
        (set_terms({"M": "app(((", "N": "x"}), "does not read back"),
        (set_terms({"M": "app(lam(y.x), x)"}), "not well formed"),
        (set_field("evidence", "forged evidence"), "does not give this failure"),
        (set_field("size", 1), "does not give this failure"),
        (add_to_identity, "claim identity"),
    ]
    for change, words in forgeries:
        forged = _edit(has, change)
        code, err = _merge(capsys, forged, other)
        assert code == 2, err
        assert "is not one" in err and words in err, err
        assert not Path("merged.json").exists()


def test_malformed_shard_reports_are_user_errors(capsys, shards) -> None:
    """Family: the report fields merge relies on, missing, null or of the wrong type."""
    _, (s1, s2) = shards
    edits = [
        (lambda d: d.pop("records"), "records are missing"),
        (lambda d: d.update(records=None), "records are missing"),
        (lambda d: d.update(shard="1/2"), "shard field"),
        (lambda d: d.update(shard=[1]), "shard field"),
        (lambda d: d.update(shard=[3, 2]), "shard field"),
        (lambda d: d.pop("shard"), "no shard field"),
        (lambda d: d["records"]["identity"].update(bounds=None), "not well formed"),
        (lambda d: d["records"]["identity"]["obligations"][0].update(parts=[{}]),
         "not well formed"),
        (lambda d: d.pop("sources"), "no hash"),
    ]
    for change, words in edits:
        code, err = _merge(capsys, _edit(s1, change), s2)
        assert code == 2 and words in err, err
        assert "internal error" not in err


def test_merge_never_writes_over_its_inputs(capsys, shards, tmp_path) -> None:
    """Family: -o onto a shard report, onto the rule file, onto a FIFO or a folder."""
    import os
    import stat

    spec, (s1, s2) = shards
    saved = {p: p.read_bytes() for p in (spec, s1, s2)}
    os.mkfifo(tmp_path / "pipe")
    for out, words in ((str(s1), "one of the files"), (str(spec), "one of the files"),
                       ("pipe", "FIFO"), (str(tmp_path), "is a folder")):
        code, err = _merge(capsys, s1, s2, out=out)
        assert code == 2 and words in err, err
    assert {p: p.read_bytes() for p in saved} == saved
    assert stat.S_ISFIFO(os.lstat(tmp_path / "pipe").st_mode)


def test_counterexamples_survive_the_round_trip(capsys, shards) -> None:
    """The counterexamples merge re-judges are the engine's own: the merged report equals
    the shards' union (an honest run is never refused)."""
    _, (s1, s2) = shards
    assert _merge(capsys, s1, s2)[0] == 1
    merged = json.loads(Path("merged.json").read_text())
    entry = next(c for c in merged["claims"] if c["name"] == "flip_sim")
    found = []
    for s in (s1, s2):
        try:
            found.append(_failure_of(json.loads(s.read_text()), "flip_sim"))
        except AssertionError:
            pass
    assert entry["verdict"] == "refuted" and entry["counterexample"] in found


def test_no_edit_of_a_shard_report_is_an_internal_error(capsys, shards) -> None:
    """Family: every field of a shard report (top level and one claim's record, down to
    its counterexample), made null or a string in turn; merge either merges or
    refuses with exit 2, never exit 70. (A field that merge cannot verify without running
    the shard again, such as a count, may still merge: the counterexamples are judged.)"""
    _, (s1, s2) = shards
    has, other = _shard_with_failure(shards, "flip_sim")
    base = json.loads(has.read_text())
    base["records"] = {"flip_sim": base["records"]["flip_sim"]}
    trimmed = has.with_name("trimmed.json")
    trimmed.write_text(json.dumps(base))
    rest = json.loads(other.read_text())
    rest["records"] = {"flip_sim": rest["records"]["flip_sim"]}
    other_trimmed = other.with_name("other-trimmed.json")
    other_trimmed.write_text(json.dumps(rest))

    def paths(x, pre=()):
        yield pre
        items = x.items() if isinstance(x, dict) else enumerate(x) if isinstance(x, list) else ()
        for k, v in items:
            yield from paths(v, (*pre, k))

    tried = 0
    for i, path in enumerate(list(paths(base))[1:]):
        value = None if i % 2 else "x"  # alternately, to keep the test short

        def change(d, path=path, value=value):
            for k in path[:-1]:
                d = d[k]
            d[path[-1]] = value
        code, err = _merge(capsys, _edit(trimmed, change), other_trimmed)
        tried += 1
        assert code in (0, 1, 2, 3), (path, value, err)
        assert "internal error" not in err, (path, value, err)
    assert tried > 50


def test_a_forged_undefined_normalisation_is_refused(capsys, tmp_path, monkeypatch) -> None:
    """Family: the other evidence a shard carries besides counterexamples, a normalised
    translation undefined on a term (its normal forms, the term, "every path cycles"):
    each edit is refused; the honest shards merge."""
    monkeypatch.chdir(tmp_path)
    shutil.copyfile(BASICS, tmp_path / "basics.calc")
    parts = []
    for i in (1, 2):
        p = tmp_path / f"n{i}.json"
        run(capsys, "check", "basics.calc", "forked", "--shard", f"{i}/2", "--json", str(p))
        parts.append(p)
    assert _merge(capsys, *parts)[0] == 1  # its normalize part is refuted, so forked is too
    Path("merged.json").unlink()

    def example(d):
        for part in d["records"]["forked"]["obligations"][0]["parts"]:
            if part["several"]:
                return part["several"]["into_fork"]
        raise AssertionError("no shard met several normal forms")

    has = next(p for p in parts if json.loads(p.read_text())["records"]["forked"]
               ["obligations"][0]["parts"][0]["several"])
    other = next(p for p in parts if p != has)
    for key, value in (("normal_forms", ["a", "a"]), ("term", "c"), ("cycles", True),
                       ("size", 7), ("normal_forms", ["a", "b("])):
        forged = _edit(has, lambda d, key=key, value=value: example(d).update({key: value}))
        code, err = _merge(capsys, forged, other)
        assert code == 2 and "undefined on a term, and it is not" in err, (key, err)
        assert not Path("merged.json").exists()
