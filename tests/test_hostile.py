"""Hostile paths and hostile inputs: nothing destroyed, nothing read without bound, no
user mistake reported as a bug.

Every special file here is made inside pytest's temporary folder (FIFOs with
os.mkfifo, symbolic links, folders; a character device with /dev/null's
numbers only as root); the machine's own devices are never written, except
/dev/full, which refuses every write.
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import stat
import subprocess
import sys
from pathlib import Path

import pytest

from calcscout.obligations.commands.cli import main
from calcscout.rules.core.errors import FileError
from calcscout.rules.loading.files import read_bounded

DATA = Path(__file__).parent / "data"
BASICS = DATA / "engine" / "basics.calc"
HOSTILE = DATA / "hostile"


def run(capsys, *args: str) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as info:
        main(list(args))
    out, err = capsys.readouterr()
    return info.value.code, out, err

CLI = "calcscout.obligations.commands.cli"


def run_process(*args: str, timeout: float = 120, **kw) -> subprocess.CompletedProcess:
    """A separate process, for what needs real file descriptors, with a timeout so that a
    hang fails the test instead of stopping the suite."""
    return subprocess.run([sys.executable, "-m", CLI, *args], capture_output=True,
                          text=True, timeout=timeout, **kw)


def rule_file(tmp_path: Path, name: str = "victim.calc") -> Path:
    p = tmp_path / name
    shutil.copyfile(BASICS, p)
    return p


def char_device(tmp_path: Path) -> Path:
    """A character device with /dev/null's numbers, inside tmp_path (root only)."""
    if os.geteuid() != 0:
        pytest.skip("making a device node needs root")
    p = tmp_path / "device"
    try:
        os.mknod(p, stat.S_IFCHR | 0o666, os.makedev(1, 3))
    except OSError as e:
        pytest.skip(f"cannot make a device node here: {e.strerror}")
    return p


# ---------------------------------------------------------------- item 1: what outputs replace


def _outputs(capsys, tmp_path: Path, spec: Path) -> list[tuple[list[str], str]]:
    """Every option that writes a file: (command line with {} for the path, what it is)."""
    report = tmp_path / "saved.json"
    run(capsys, "check", str(spec), "flip_sim", "--json", str(report))
    return [(["check", str(spec), "identity", "--json", "{}"], "report"),
            (["check", str(spec), "identity", "--junit", "{}"], "report"),
            (["reduce", str(spec), "lam", "app(lam(x.x), y)", "--dot", "{}"], "graph"),
            (["explain", str(report), "flip_sim", "--dot", "{}"], "graph")]


@pytest.mark.parametrize("kind", ["fifo", "folder", "device"])
def test_outputs_never_replace_a_fifo_a_folder_or_a_device(capsys, tmp_path, kind) -> None:
    """Family: every writer of a file (check --json/--junit, reduce --dot, explain --dot,
    merge -o, export -o); merge and export are checked in test_merge.py and below."""
    spec = rule_file(tmp_path)
    if kind == "fifo":
        target = tmp_path / "pipe"
        os.mkfifo(target)
        test = stat.S_ISFIFO
        word = "FIFO"
    elif kind == "folder":
        target = tmp_path / "folder"
        target.mkdir()
        test = stat.S_ISDIR
        word = "is a folder"
    else:
        target = char_device(tmp_path)
        test = stat.S_ISCHR
        word = "device"
    for args, _ in _outputs(capsys, tmp_path, spec):
        code, _, err = run(capsys, *[str(target) if a == "{}" else a for a in args])
        assert code == 2, (args, err)
        assert word in err and "Traceback" not in err
        assert test(os.lstat(target).st_mode), f"{args[0]} replaced the {kind}"
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary left


def test_a_symlink_is_followed_to_its_regular_file_and_stays_a_link(capsys, tmp_path) -> None:
    spec = rule_file(tmp_path)
    real = tmp_path / "real.json"
    real.write_text("old\n")
    link = tmp_path / "link.json"
    link.symlink_to(real.name)
    code, _, _ = run(capsys, "check", str(spec), "identity", "--json", str(link))
    assert code == 0
    assert link.is_symlink() and json.loads(real.read_text())["claims"][0]["name"] == "identity"


def test_reports_get_the_usual_mode_not_0600(capsys, tmp_path) -> None:
    """A new report is 0666 less the umask; a replaced one keeps its mode."""
    spec = rule_file(tmp_path)
    old = os.umask(0o022)
    try:
        fresh = tmp_path / "fresh.json"
        assert run(capsys, "check", str(spec), "identity", "--json", str(fresh))[0] == 0
        assert stat.S_IMODE(fresh.stat().st_mode) == 0o644
        kept = tmp_path / "kept.xml"
        kept.write_text("")
        kept.chmod(0o640)
        assert run(capsys, "check", str(spec), "identity", "--junit", str(kept))[0] == 0
        assert stat.S_IMODE(kept.stat().st_mode) == 0o640 and kept.read_text().startswith("<?xml")
    finally:
        os.umask(old)


def test_standard_output_stays_an_output(capsys, tmp_path) -> None:
    spec = rule_file(tmp_path)
    code, out, _ = run(capsys, "check", str(spec), "identity", "--json", "-")
    assert code == 0 and json.loads(out)["claims"][0]["verdict"] == "holds"


# ---------------------------------------------------------------- item 2: outputs that are inputs


def test_an_output_that_is_an_input_is_refused_before_anything_runs(capsys, tmp_path) -> None:
    """Family: the same file under another spelling (./, a symlink, a hard link), an
    included file, reduce --dot, explain --dot onto its report, export -o over the rule
    file, merge -o onto a shard (test_merge.py); each leaves the input byte for byte."""
    spec = rule_file(tmp_path)
    before = spec.read_bytes()
    (tmp_path / "alias.calc").symlink_to(spec.name)
    os.link(spec, tmp_path / "hard.calc")
    spellings = [str(spec), str(tmp_path / "." / spec.name), str(tmp_path / "alias.calc"),
                 str(tmp_path / "hard.calc")]
    for path in spellings:
        for option in ("--json", "--junit"):
            code, _, err = run(capsys, "check", str(spec), "identity", option, path)
            assert code == 2 and "one of the files this run reads" in err, (path, err)
    code, _, err = run(capsys, "reduce", str(spec), "lam", "x", "--dot", str(spec))
    assert code == 2 and "one of the files this run reads" in err
    # an included file
    inc = tmp_path / "top.calc"
    inc.write_text('include "victim.calc"\n')
    code, _, err = run(capsys, "check", str(inc), "identity", "--json", str(spec))
    assert code == 2 and "one of the files this run reads" in err
    # explain --dot onto the report it reads
    report = tmp_path / "r.json"
    run(capsys, "check", str(spec), "flip_sim", "--json", str(report))
    saved = report.read_bytes()
    code, _, err = run(capsys, "explain", str(report), "flip_sim", "--dot", str(report))
    assert code == 2 and "one of the files this run reads" in err
    assert report.read_bytes() == saved
    assert spec.read_bytes() == before


def test_export_does_not_write_over_its_rule_file(capsys, tmp_path) -> None:
    pytest.importorskip("z3")
    folder = tmp_path / "out"
    folder.mkdir()
    spec = folder / "identity.smt2"  # the name export gives the claim's file
    shutil.copyfile(BASICS, spec)
    code, _, err = run(capsys, "export", str(spec), "identity", "-o", str(folder))
    assert code == 2 and "one of the files this run reads" in err
    assert spec.read_bytes() == BASICS.read_bytes()
    # a FIFO where export would put a file, or its temporary: refused, not opened
    for name in ("identity.smt2", "identity.smt2.tmp"):
        other = tmp_path / f"with-{name}"
        other.mkdir()
        os.mkfifo(other / name)
        r = run_process("export", str(BASICS), "identity", "-o", str(other), timeout=120)
        assert r.returncode == 2 and "FIFO" in r.stderr, r.stderr
        assert stat.S_ISFIFO(os.lstat(other / name).st_mode)


# ---------------------------------------------------------------- item 3: missing folders


def test_a_report_in_a_missing_folder_is_refused_and_no_folder_is_made(capsys, tmp_path) -> None:
    """Family: --json, --junit, reduce --dot, merge -o all go through one check; export -o
    creates its own folder but not the folders above it."""
    spec = rule_file(tmp_path)
    for option in ("--json", "--junit"):
        code, _, err = run(capsys, "check", str(spec), "identity", option,
                           str(tmp_path / "no" / "such" / "r.json"))
        assert code == 2 and "does not exist" in err
    assert not (tmp_path / "no").exists()
    code, _, err = run(capsys, "check", str(spec), "identity", "--json", str(tmp_path / "no") + "/")
    assert code == 2 and "names a folder" in err and not (tmp_path / "no").exists()
    pytest.importorskip("z3")
    code, _, err = run(capsys, "export", str(spec), "identity", "-o", str(tmp_path / "a" / "b"))
    assert code == 2 and "does not exist" in err and not (tmp_path / "a").exists()
    code, out, _ = run(capsys, "export", str(spec), "identity", "-o", str(tmp_path / "made"))
    assert code == 0 and (tmp_path / "made" / "identity.smt2").is_file()


# ---------------------------------------------------------------- item 9: bounded reads


def test_reads_are_of_regular_files_only_and_bounded(capsys, tmp_path) -> None:
    """Family: every reader goes through rules.loading.files.read_bounded: rule files and includes,
    merge's reports, explain's report, explain --model's solver output and .smt2 header,
    and the rule file an edited header names."""
    code, _, err = run(capsys, "lint", str(HOSTILE / "include-device.calc"))
    assert code == 2 and "is a device" in err and "include-device.calc:2:1" in err
    pipe = tmp_path / "pipe"
    os.mkfifo(pipe)
    top = tmp_path / "top.calc"
    top.write_text('include "pipe"\n')
    # separate processes with a timeout: a regression would hang on the FIFO
    for args in (["lint", str(top)], ["merge", str(pipe), "-o", str(tmp_path / "m.json")],
                 ["explain", str(pipe), "c"], ["explain", "--model", str(pipe), str(pipe)],
                 ["merge", "/dev/zero", "-o", str(tmp_path / "m.json")]):
        r = run_process(*args, timeout=60)
        assert r.returncode == 2, (args, r.stderr)
        assert "regular files" in r.stderr and "Traceback" not in r.stderr
    big = tmp_path / "big"
    big.write_bytes(b"x" * 101)
    with pytest.raises(FileError, match="larger than"):
        read_bounded(big, limit=100)
    assert read_bounded(big, limit=101) == b"x" * 101


def test_an_edited_model_header_cannot_name_a_device(capsys, tmp_path) -> None:
    pytest.importorskip("z3")
    spec = rule_file(tmp_path)
    folder = tmp_path / "out"
    assert run(capsys, "export", str(spec), "identity", "-o", str(folder))[0] == 0
    smt2 = folder / "identity.smt2"
    text = smt2.read_text()
    edited = "\n".join("; calcscout-spec: /dev/zero" if line.startswith("; calcscout-spec:")
                       else line for line in text.splitlines())
    smt2.write_text(edited + "\n")
    answer = tmp_path / "answer.txt"
    answer.write_text("sat\n(model (define-fun x () Int 1))\n")
    r = run_process("explain", "--model", str(answer), str(smt2), timeout=60)
    assert r.returncode == 2 and "is a device" in r.stderr


# ---------------------------------------------------------------- item 13: user errors, not bugs


def test_user_mistakes_are_exit_2_with_a_message_never_70(capsys, tmp_path) -> None:
    """Family: each kind of hostile input the issue lists (symlink loop, empty path,
    folder, deep JSON, a 5000-digit number, random bytes to explain --model, a solver
    output nested deep or with a 5000-digit value); merge's malformed reports are in
    test_merge.py."""
    spec = rule_file(tmp_path)
    (tmp_path / "a.calc").symlink_to("b.calc")
    (tmp_path / "b.calc").symlink_to("a.calc")
    top = tmp_path / "loop.calc"
    top.write_text('include "a.calc"\n')
    deep = tmp_path / "deep.json"
    deep.write_text("[" * 100_000 + "]" * 100_000)
    number = tmp_path / "number.json"
    number.write_text('{"claims": [], "n": ' + "9" * 5000 + "}")
    noise = tmp_path / "noise.bin"
    noise.write_bytes(bytes((i * 7919 + 13) % 256 for i in range(4096)))
    nested = tmp_path / "nested.txt"
    nested.write_text("sat " + "(" * 100_000 + ")" * 100_000)
    huge = tmp_path / "huge.txt"
    huge.write_text("sat (model (define-fun x () Int " + "9" * 5000 + "))")
    cases = [
        (["lint", str(top)], "symbolic links"),
        (["check", str(spec), "identity", "--json", ""], "empty path"),
        (["check", str(spec), "identity", "--json", str(tmp_path)], "is a folder"),
        (["explain", str(deep), "c"], "nested too deep"),
        (["merge", str(deep), "-o", str(tmp_path / "m.json")], "nested too deep"),
        (["explain", str(number), "c"], "number too long"),
        (["explain", "--model", str(noise), str(noise)], "not UTF-8"),
    ]
    if importlib.util.find_spec("z3") is not None:
        folder = tmp_path / "out"
        assert run(capsys, "export", str(spec), "identity", "-o", str(folder))[0] == 0
        smt2 = str(folder / "identity.smt2")
        cases += [(["explain", "--model", str(nested), smt2], "not a model"),
                  (["explain", "--model", str(huge), smt2], "5000 digits")]
    for args, words in cases:
        code, _, err = run(capsys, *args)
        assert code == 2, (args, err)
        assert words in err and "internal error" not in err, (args, err)


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="no /dev/full here")
def test_standard_output_on_a_full_device_is_exit_2() -> None:
    """Family: the JSON report on standard output, and the terminal report (the other
    writer of standard output) both end in exit 2 with a message."""
    for extra in (["--json", "-"], []):
        with open("/dev/full", "w") as full:
            r = subprocess.run([sys.executable, "-m", CLI, "check", str(BASICS),
                                "identity", *extra], stdout=full, stderr=subprocess.PIPE,
                               text=True, timeout=120)
        assert r.returncode == 2, r.stderr
        assert "cannot write to standard output" in r.stderr and "Traceback" not in r.stderr


def test_no_edit_of_a_saved_report_makes_explain_fail_as_a_bug(capsys, tmp_path) -> None:
    """Family: every field of a claim's entry (down to its counterexample's terms and
    graph), made null or a list of numbers, given to explain with and without --dot:
    it explains or refuses with exit 2, never exit 70. Merge's sweep is in test_merge.py."""
    spec = rule_file(tmp_path)
    report = tmp_path / "r.json"
    run(capsys, "check", str(spec), "flip_sim", "--json", str(report))
    base = json.loads(report.read_text())

    def paths(x, pre=()):
        yield pre
        items = x.items() if isinstance(x, dict) else enumerate(x) if isinstance(x, list) else ()
        for k, v in items:
            yield from paths(v, (*pre, k))

    edited = tmp_path / "edited.json"
    tried = 0
    for path in list(paths(base["claims"][0]))[1:]:
        for value in (None, [1, 2]):
            data = json.loads(report.read_text())
            d = data["claims"][0]
            for k in path[:-1]:
                d = d[k]
            d[path[-1]] = value
            edited.write_text(json.dumps(data))
            for extra in ([], ["--dot", str(tmp_path / "g.dot")]):
                code, _, err = run(capsys, "explain", str(edited), "flip_sim", *extra)
                tried += 1
                assert code in (0, 2) and "internal error" not in err, (path, value, err)
    assert tried > 50


def test_one_file_for_two_outputs_is_refused(capsys, tmp_path) -> None:
    """Family: two options of one run naming the same file (--json and --junit, reduce's
    --dot and --json), under any spelling; the file is left as it was."""
    spec = rule_file(tmp_path)
    target = tmp_path / "both"
    target.write_text("kept\n")
    (tmp_path / "alias").symlink_to("both")
    for args in (["check", str(spec), "identity", "--json", str(target), "--junit",
                  str(tmp_path / "alias")],
                 ["reduce", str(spec), "lam", "x", "--dot", str(target), "--json", str(target)]):
        code, _, err = run(capsys, *args)
        assert code == 2 and "given for two outputs" in err, err
    assert target.read_text() == "kept\n"
