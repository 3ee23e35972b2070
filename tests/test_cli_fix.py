"""``nanproof fix`` on the command line: exit status as for scan (0 nothing left, 1
findings left, 2 the run could not start, 3 a file could not be fixed or analysed), the
warning printed once, ``--diff`` output that ``git apply`` and ``patch -p1`` accept,
standard input, ``--changed-since`` and ``--include-review``."""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from cliutil import CLEAN, GIT_ENV, LOGSUMEXP, SOFTMAX, git, new_repo, run, write
from fixdoubles import rewriting, rules  # noqa: F401  (rules is a fixture)
from nanproof.fix import WARNING

FIXED_SOFTMAX = SOFTMAX.replace("np.exp(z)", "np.exp(z - np.max(z))")
FIXED_LOGSUMEXP = LOGSUMEXP.replace("np.log(np.sum(np.exp(x)))", "np.logaddexp.reduce(x, axis=None)")


def test_fix_rewrites_in_place_warns_once_and_exits_0(tmp_path):
    write(tmp_path, {"a.py": SOFTMAX, "b.py": LOGSUMEXP, "c.py": CLEAN})
    result = run("fix", str(tmp_path))
    assert result.exit_code == 0, result.output
    assert (tmp_path / "a.py").read_text() == FIXED_SOFTMAX
    assert (tmp_path / "b.py").read_text() == FIXED_LOGSUMEXP
    assert (tmp_path / "c.py").read_text() == CLEAN
    assert result.stdout.count(WARNING) == 1
    assert f"fixed {tmp_path / 'a.py'}: 1 finding (softmax-unshifted 1)" in result.stdout
    again = run("fix", str(tmp_path))
    assert again.exit_code == 0 and WARNING not in again.output


def test_nothing_to_fix_prints_no_warning(tmp_path):
    write(tmp_path, {"c.py": CLEAN})
    result = run("fix", str(tmp_path))
    assert result.exit_code == 0 and WARNING not in result.output


def test_findings_left_exit_1_and_include_review_applies_them(tmp_path, rules):
    rules("frob-review", rewriting(lambda a: f"unfrob({a})", kind="review"), kind="review")
    write(tmp_path, {"m.py": "y = frob(x)\n"})
    left = run("fix", "--rule", "frob-review", "--jobs", "1", str(tmp_path / "m.py"))
    assert left.exit_code == 1 and "[frob-review]" in left.stdout and WARNING not in left.stdout
    assert (tmp_path / "m.py").read_text() == "y = frob(x)\n"
    done = run("fix", "--include-review", "--rule", "frob-review", "--jobs", "1", str(tmp_path / "m.py"))
    assert done.exit_code == 0 and (tmp_path / "m.py").read_text() == "y = unfrob(x)\n"


def test_unsafe_rewrite_exits_3_with_the_problem_and_still_fixes_other_files(tmp_path, rules):
    rules("frob-sum", rewriting(lambda a: f"{a} + 1"))
    write(tmp_path, {"bad.py": "y = 2 * frob(x)\n", "good.py": "y = [frob(x)]\n"})
    result = run("fix", "--rule", "frob-sum", "--jobs", "1", "--format", "json", str(tmp_path))
    assert result.exit_code == 3
    doc = json.loads(result.stdout)
    assert [p["path"] for p in doc["problems"]] == [str(tmp_path / "bad.py")]
    assert "not fixed, left unchanged" in doc["problems"][0]["message"]
    assert (tmp_path / "good.py").read_text() == "y = [x + 1]\n"
    assert WARNING in result.stderr  # the JSON on standard output stays JSON


@pytest.mark.parametrize("args", [("--rule", "no-such-rule"), ("missing.py",), ("--diff", "--jobs", "0")])
def test_a_run_that_cannot_start_exits_2(tmp_path, monkeypatch, args):
    monkeypatch.chdir(tmp_path)
    write(tmp_path, {"a.py": SOFTMAX})
    assert run("fix", *args).exit_code == 2
    assert (tmp_path / "a.py").read_text() == SOFTMAX


def test_standard_input_is_fixed_to_standard_output(tmp_path):
    result = run("fix", "-", input=SOFTMAX)
    assert result.exit_code == 0
    assert result.stdout == FIXED_SOFTMAX and WARNING in result.stderr
    assert "fixed standard input: 1 finding (softmax-unshifted 1)" in result.stderr
    unchanged = run("fix", "-", input=CLEAN)
    assert unchanged.exit_code == 0 and unchanged.stdout == CLEAN
    assert run("fix", "-", str(tmp_path)).exit_code == 2


# ---------------------------------------------------------------------------------------
# --diff: a patch on standard output that standard tools apply
# ---------------------------------------------------------------------------------------
# Files whose bytes test the patch: CRLF line ends, no final newline, ISO 8859-1 text
# under a PEP 263 coding cookie, a BOM, nested folders, spaces in names.
PATCHED = {
    "pkg/soft.py": SOFTMAX.encode(),
    "pkg/crlf.py": SOFTMAX.replace("\n", "\r\n").encode(),
    "pkg/noeol.py": LOGSUMEXP.rstrip("\n").encode(),
    "pkg/sub/latin.py": b"# -*- coding: latin-1 -*-\n# caf\xe9\n" + SOFTMAX.encode(),
    "pkg/bom.py": b"\xef\xbb\xbf" + LOGSUMEXP.encode(),
    "pkg/with space/a b.py": SOFTMAX.encode(),
    "pkg/clean.py": CLEAN.encode(),
}


def _tree(root: Path, files: dict[str, bytes]) -> None:
    for name, data in files.items():
        (root / name).parent.mkdir(parents=True, exist_ok=True)
        (root / name).write_bytes(data)


def _diff_in(root: Path, monkeypatch) -> bytes:
    monkeypatch.chdir(root)
    result = run("fix", "--diff", "pkg")
    assert result.exit_code == 0, result.output
    assert {name: (root / name).read_bytes() for name in PATCHED} == PATCHED, "--diff writes nothing"
    assert result.stderr.count(WARNING) == 1
    return result.stdout_bytes


def _expected_after_fix(tmp_path: Path) -> dict[str, bytes]:
    """What ``nanproof fix`` writes in place, the reference for the patched trees."""
    _tree(tmp_path / "inplace", PATCHED)
    assert run("fix", str(tmp_path / "inplace" / "pkg")).exit_code == 0
    return {name: (tmp_path / "inplace" / name).read_bytes() for name in PATCHED}


def test_diff_applies_with_git_apply(tmp_path, monkeypatch):
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    repo = tmp_path / "repo"
    repo.mkdir()  # not cliutil.new_repo: these files are bytes, not UTF-8 text
    git(repo, "init", "-q")
    _tree(repo, PATCHED)
    git(repo, "add", "--", *PATCHED)
    git(repo, "commit", "-q", "-m", "first")
    patch = _diff_in(repo, monkeypatch)
    changed = {n.encode() for n in PATCHED if n != "pkg/clean.py"}
    assert set(re.findall(rb"^\+\+\+ b/(.+?)\t?$", patch, re.M)) == changed
    (tmp_path / "fix.patch").write_bytes(patch)
    done = subprocess.run(["git", "apply", "--check", str(tmp_path / "fix.patch")], cwd=repo, env=GIT_ENV, capture_output=True)
    assert done.returncode == 0, done.stderr
    git(repo, "apply", str(tmp_path / "fix.patch"))
    assert {n: (repo / n).read_bytes() for n in PATCHED} == _expected_after_fix(tmp_path)


def test_diff_applies_with_patch_p1(tmp_path, monkeypatch):
    if shutil.which("patch") is None:
        pytest.skip("patch is not installed")
    tree = tmp_path / "tree"
    _tree(tree, PATCHED)
    patch = _diff_in(tree, monkeypatch)
    done = subprocess.run(["patch", "-p1", "--forward", "--batch"], input=patch, cwd=tree, capture_output=True)
    assert done.returncode == 0, done.stdout + done.stderr
    assert {n: (tree / n).read_bytes() for n in PATCHED} == _expected_after_fix(tmp_path)


HELPER = "import numpy as np\n\n\ndef soft(z):\n    e = np.exp(z - np.max(z))\n    return e / np.sum(e)\n"
# Line 10's finding needs the helper of the other file; the import the fix inserts above
# it moves it to line 11.
USER = "import numpy as np\n\nfrom .helpers import soft\n\ny = frob(1)\n\n\ndef logp(x):\n    # log of a softmax\n    return np.log(soft(x))\n"


def test_diff_reports_what_writing_leaves_including_cross_file_findings(tmp_path, monkeypatch, rules):
    rules("frob-import", rewriting(lambda a: f"unfrob({a})", kind="review", with_import="from frobkit import unfrob"))
    write(tmp_path, {"pkg/__init__.py": "", "pkg/helpers.py": HELPER, "pkg/main.py": USER})
    monkeypatch.chdir(tmp_path)
    # softmax-unshifted too: its trigger (exp) has the helper file analysed at all.
    rules_ = ("--rule", "frob-import", "--rule", "log-of-softmax", "--rule", "softmax-unshifted")
    args = ("--include-review", *rules_, "--jobs", "1", "--format", "json")
    preview = run("fix", "--diff", *args, "--output", "left.json", "pkg")
    written = run("fix", *args, "pkg")
    assert preview.exit_code == written.exit_code == 1
    assert "from frobkit import unfrob\n" in (tmp_path / "pkg" / "main.py").read_text()

    def located(doc):
        return [(f["path"], f["line"], f["column"], f["end_line"], f["end_column"], f["rule"]) for f in doc["findings"]]

    after = located(json.loads(written.stdout))
    assert after == [(os.path.join("pkg", "main.py"), 11, 12, 11, 27, "log-of-softmax")]
    assert located(json.loads((tmp_path / "left.json").read_text())) == after


# ---------------------------------------------------------------------------------------
# --changed-since: only what changed is fixed
# ---------------------------------------------------------------------------------------
def test_changed_since_fixes_only_changed_lines(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "repo", {"m.py": SOFTMAX})
    monkeypatch.chdir(repo)
    (repo / "m.py").write_text(SOFTMAX + "\n\n" + LOGSUMEXP.replace("import numpy as np\n", ""))
    preview = run("fix", "--diff", "--changed-since", "HEAD", "m.py")
    assert preview.exit_code == 0, preview.output
    assert re.findall(rb"^[-+] .*$", preview.stdout_bytes, re.M) == [
        b"-    return np.log(np.sum(np.exp(x)))",
        b"+    return np.logaddexp.reduce(x, axis=None)",
    ]
    result = run("fix", "--changed-since", "HEAD", "m.py")
    assert result.exit_code == 0, result.output
    text = (repo / "m.py").read_text()
    assert "np.exp(z) / np.sum(np.exp(z))" in text, "the committed softmax is not touched"
    assert "np.logaddexp.reduce(x, axis=None)" in text and "np.log(np.sum" not in text
    # The scan agrees: nothing changed since HEAD is left, the old softmax still is.
    assert run("scan", "--changed-since", "HEAD", "m.py").exit_code == 0
    assert run("scan", "m.py").exit_code == 1


def test_readme_quotes_the_warning():
    """The README and the tool say the same sentence (the README may wrap and bold it)."""
    readme = Path(__file__).resolve().parents[1] / "README.md"
    text = " ".join(readme.read_text(encoding="utf-8").replace("**", "").split())
    assert WARNING in text
