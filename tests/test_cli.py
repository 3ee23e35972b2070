"""The command line against the contract in interface.md: options, exit status (0
clean, 1 findings, 2 the run could not start, 3 a file could not be analysed while the
others were), standard input, --output, NO_COLOR (no-color.org: any value turns
colour off) and --changed-since in a real git repository."""
from __future__ import annotations

import json
import os
import pty
import re
import subprocess
import sys

import pytest

from cliutil import CLEAN, LOGSUMEXP, SOFTMAX, found, git, new_repo, report, run, write
from nanproof.api import analyse_file

# GNU error-message convention (GNU Coding Standards, "Formatting Error Messages"):
# file:line:column: message.
GNU_LINE = re.compile(r"^(?P<path>[^:\n]+):(?P<line>\d+):(?P<col>\d+): (error|warning|note): .+ \[(?P<rule>[a-z0-9-]+)\]$", re.M)


def test_clean_file_exits_0(tmp_path):
    write(tmp_path, {"m.py": CLEAN})
    result = run("scan", str(tmp_path))
    assert result.exit_code == 0, result.output
    assert GNU_LINE.search(result.stdout) is None


def test_findings_exit_1_with_gnu_lines_and_paths_as_given(tmp_path, monkeypatch):
    write(tmp_path, {"pkg/a.py": SOFTMAX, "pkg/b.py": LOGSUMEXP})
    monkeypatch.chdir(tmp_path)
    result = run("scan", "pkg")
    assert result.exit_code == 1
    heads = [(m["path"], int(m["line"]), int(m["col"]), m["rule"]) for m in GNU_LINE.finditer(result.stdout)]
    # `np.exp(z) / ...` starts at column 12 of line 3 in SOFTMAX, `np.log(` at 12 in LOGSUMEXP.
    assert heads == [(os.path.join("pkg", "a.py"), 3, 12, "softmax-unshifted"), (os.path.join("pkg", "b.py"), 3, 12, "logsumexp-unshifted")]


@pytest.mark.parametrize(
    "args, message",
    [
        (["--format", "xml"], "'xml' is not one of"),
        (["--jobs", "0"], "--jobs"),
        (["--no-such-option"], "No such option"),
        (["--rule", "no-such-rule"], "unknown rule id 'no-such-rule'"),
        (["--skip", "no-such-rule"], "unknown rule id 'no-such-rule'"),
    ],
)
def test_bad_options_exit_2(tmp_path, args, message):
    write(tmp_path, {"m.py": SOFTMAX})
    result = run("scan", str(tmp_path), *args)
    assert result.exit_code == 2
    assert message in result.stderr
    assert result.stdout == ""


def test_missing_path_exits_2_and_names_it(tmp_path):
    write(tmp_path, {"m.py": SOFTMAX})
    result = run("scan", str(tmp_path / "m.py"), str(tmp_path / "nope.py"))
    assert result.exit_code == 2
    assert "nope.py" in result.stderr


def test_bad_configuration_exits_2(tmp_path):
    write(tmp_path, {"pyproject.toml": "[tool.nanproof]\nrulez = []\n", "m.py": SOFTMAX})
    assert run("scan", str(tmp_path)).exit_code == 2


# -- exit 3: a file that cannot be analysed is a problem; the others are still analysed ----
BAD_FILES = {
    "syntax.py": (b"def f(:\n", "not valid Python"),
    "python2.py": (b'print "hello"\n', "Python 2"),
    "binary.py": (b"x = 1\x00\x00\x01\n", "binary"),
    # The cookie declares ASCII (PEP 263); the bytes are UTF-8 for an accented letter.
    "declared.py": (b"# -*- coding: ascii -*-\nname = '\xc3\xa9'\n", "cannot decode as ascii"),
}


@pytest.mark.parametrize("name", sorted(BAD_FILES))
def test_unanalysable_file_exits_3_and_others_still_analysed(tmp_path, name):
    data, reason = BAD_FILES[name]
    (tmp_path / name).write_bytes(data)
    write(tmp_path, {"unstable.py": SOFTMAX})
    result = run("scan", str(tmp_path), "--format", "json")
    assert result.exit_code == 3  # findings too, and 3 wins over 1
    doc = report(result)
    assert [(os.path.basename(p["path"]), "\n" in p["message"]) for p in doc["problems"]] == [(name, False)]
    assert reason in doc["problems"][0]["message"]
    assert [(os.path.basename(p), rule) for p, _, rule in found(result)] == [("unstable.py", "softmax-unshifted")]
    assert doc["summary"]["files"] == 2


def test_file_that_cannot_be_opened_exits_3(tmp_path):
    # A link to nothing cannot be opened even by root, unlike a file without read
    # permission (see the next test).
    write(tmp_path, {"unstable.py": SOFTMAX})
    (tmp_path / "dangling.py").symlink_to(tmp_path / "gone.py")
    result = run("scan", str(tmp_path), "--format", "json")
    assert result.exit_code == 3
    assert [os.path.basename(p["path"]) for p in report(result)["problems"]] == ["dangling.py"]
    assert "cannot read" in report(result)["problems"][0]["message"]
    assert len(found(result)) == 1


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="root reads files without read permission")
def test_file_without_read_permission_exits_3(tmp_path):
    write(tmp_path, {"unstable.py": SOFTMAX, "secret.py": CLEAN})
    (tmp_path / "secret.py").chmod(0)
    try:
        result = run("scan", str(tmp_path), "--format", "json")
    finally:
        (tmp_path / "secret.py").chmod(0o644)
    assert result.exit_code == 3
    assert "Permission denied" in report(result)["problems"][0]["message"]


def test_folder_where_a_file_is_read(tmp_path):
    # A folder named like a module is walked, never read as a file ...
    write(tmp_path, {"odd.py/inner.py": SOFTMAX})
    result = run("scan", str(tmp_path), "--format", "json")
    assert result.exit_code == 1 and report(result)["problems"] == []
    # ... and reading one directly is a one-line problem, not a crash.
    problem = analyse_file(str(tmp_path / "odd.py"), ("softmax-unshifted",)).problem
    assert problem is not None and "folder" in problem.message


# -- standard input, --output, colour ----------------------------------------------------
def test_standard_input(tmp_path):
    result = run("scan", "-", "--format", "json", input=SOFTMAX)
    assert result.exit_code == 1
    assert found(result) == [("-", 3, "softmax-unshifted")]
    assert run("scan", "-", input=CLEAN).exit_code == 0


def test_output_file(tmp_path):
    write(tmp_path, {"m.py": LOGSUMEXP})
    out = tmp_path / "report.json"
    result = run("scan", str(tmp_path / "m.py"), "--format", "json", "--output", str(out))
    assert result.exit_code == 1
    assert result.stdout == ""
    assert [f["rule"] for f in json.loads(out.read_text())["findings"]] == ["logsumexp-unshifted"]


def test_jobs_do_not_change_the_report(tmp_path):
    write(tmp_path, {f"m{i}.py": SOFTMAX if i % 2 else LOGSUMEXP for i in range(8)})
    one = run("scan", str(tmp_path), "--format", "json", "--jobs", "1")
    two = run("scan", str(tmp_path), "--format", "json", "--jobs", "2")
    assert one.exit_code == two.exit_code == 1
    assert report(one) == report(two) and len(found(one)) == 8


def _on_terminal(args: list[str], env: dict) -> bytes:
    """Run ``python -m nanproof ARGS`` with standard output on a pseudo-terminal."""
    leader, follower = pty.openpty()
    proc = subprocess.Popen([sys.executable, "-m", "nanproof", *args], stdout=follower, stderr=subprocess.DEVNULL, env=env)
    os.close(follower)
    chunks = []
    while True:
        try:
            chunk = os.read(leader, 4096)
        except OSError:  # EIO: the child closed the terminal
            break
        if not chunk:
            break
        chunks.append(chunk)
    proc.wait(timeout=60)
    os.close(leader)
    return b"".join(chunks)


@pytest.mark.slow
@pytest.mark.skipif(sys.platform == "win32", reason="pseudo-terminals are POSIX")
def test_colour_on_a_terminal_unless_no_color(tmp_path):
    write(tmp_path, {"m.py": SOFTMAX})
    env = {k: v for k, v in os.environ.items() if k != "NO_COLOR"}
    env["TERM"] = "xterm-256color"
    coloured = _on_terminal(["scan", str(tmp_path / "m.py")], env)
    plain = _on_terminal(["scan", str(tmp_path / "m.py")], {**env, "NO_COLOR": "1"})
    assert b"softmax-unshifted" in coloured and b"softmax-unshifted" in plain
    assert b"\x1b[" in coloured  # ANSI escape (ECMA-48 CSI)
    assert b"\x1b[" not in plain


@pytest.mark.slow
def test_real_process(tmp_path):
    write(tmp_path, {"m.py": SOFTMAX})
    done = subprocess.run([sys.executable, "-m", "nanproof", "scan", "m.py"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 1, done.stderr
    assert [m["rule"] for m in GNU_LINE.finditer(done.stdout)] == ["softmax-unshifted"]
    assert GNU_LINE.search(done.stdout)["path"] == "m.py"
    assert "\x1b[" not in done.stdout  # not a terminal: no colour
    missing = subprocess.run([sys.executable, "-m", "nanproof", "scan", "nope.py"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert missing.returncode == 2 and "nope.py" in missing.stderr


# -- --changed-since -----------------------------------------------------------------------
def test_changed_since_reports_only_new_lines(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "repo", {"model.py": SOFTMAX, "old.py": SOFTMAX})
    # New code below the old unstable function, and a file git does not track yet.
    write(repo, {"model.py": SOFTMAX + LOGSUMEXP.replace("import numpy as np\n", ""), "fresh.py": SOFTMAX})
    monkeypatch.chdir(repo)
    everything = run("scan", ".", "--format", "json")
    assert len(found(everything)) == 4
    result = run("scan", ".", "--format", "json", "--changed-since", "HEAD")
    assert result.exit_code == 1
    assert [(os.path.normpath(p), line, rule) for p, line, rule in found(result)] == [
        ("fresh.py", 3, "softmax-unshifted"),
        ("model.py", 5, "logsumexp-unshifted"),
    ]


def test_changed_since_committed_history_and_deletions(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "repo", {"model.py": SOFTMAX + "\n# a comment\n"})
    git(repo, "tag", "base")
    write(repo, {"model.py": SOFTMAX + LOGSUMEXP.replace("import numpy as np\n", "")})
    git(repo, "commit", "-q", "-am", "add g")
    monkeypatch.chdir(tmp_path)  # paths given from outside the repository
    assert found(run("scan", "repo", "--format", "json", "--changed-since", "base")) == [
        (os.path.join("repo", "model.py"), 5, "logsumexp-unshifted")
    ]
    # Against HEAD nothing changed; then delete the new function: a pure deletion.
    assert run("scan", "repo", "--changed-since", "HEAD").exit_code == 0
    write(repo, {"model.py": SOFTMAX})
    assert run("scan", "repo", "--changed-since", "HEAD").exit_code == 0


def test_changed_since_bad_revision_or_no_repository_exits_2(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "repo", {"clean.py": CLEAN})
    # Nothing would be found, and still the bad revision is an error rather than exit 0.
    result = run("scan", str(repo), "--changed-since", "no-such-ref")
    assert result.exit_code == 2 and "unknown git revision 'no-such-ref'" in result.stderr
    plain = tmp_path / "plain"
    write(plain, {"m.py": SOFTMAX})
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path))
    result = run("scan", str(plain), "--changed-since", "HEAD")
    assert result.exit_code == 2 and "not inside a git repository" in result.stderr


def test_a_one_file_hook_run_imports_neither_libcst_nor_rich_nor_a_process_pool(tmp_path):
    # the pre-commit case: start-up cost is what the user waits for on every commit
    import subprocess
    import sys

    f = tmp_path / "m.py"
    f.write_text("import numpy as np\ndef f(z):\n    return np.exp(z) / np.sum(np.exp(z))\n")
    probe = (
        "import sys\nfrom nanproof.cli import main\nsys.argv = ['nanproof', 'scan', sys.argv[1]]\n"
        "try:\n    main()\nexcept SystemExit as e:\n    code = e.code\n"
        "heavy = sorted({m.split('.')[0] for m in sys.modules if m.split('.')[0] in ('libcst', 'rich', 'multiprocessing', 'concurrent')})\n"
        "print('HEAVY', heavy, code, file=sys.stderr)\n"
    )
    done = subprocess.run([sys.executable, "-c", probe, str(f)], capture_output=True, text=True, timeout=60)
    assert "softmax-unshifted" in done.stdout
    assert "HEAVY [] 1" in done.stderr
