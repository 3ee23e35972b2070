"""Changed lines against a git revision (nanproof.gitdiff), checked against git itself:
`git blame` on the working tree marks every line that is not in HEAD with the all-zero
commit id ("Not Committed Yet", git-blame(1)), an account of the same question that
does not go through our diff parsing."""
from __future__ import annotations

import os
import random
import re

import pytest

from cliutil import git, new_repo, write
from nanproof.gitdiff import GitError, changed_lines, check_revision, only_changed, parse_diff
from nanproof.model import Finding, Span


def _blame_new_lines(repo, name: str) -> set[int]:
    out = git(repo, "blame", "-s", "--", name)
    return {i for i, line in enumerate(out.splitlines(), 1) if re.match(r"\^?0{8}", line)}


def _mutate(lines: list[str], rng: random.Random) -> list[str]:
    out = list(lines)
    for _ in range(rng.randint(1, 6)):
        i = rng.randrange(len(out) + 1)
        kind = rng.choice(["insert", "delete", "replace", "insert-block"])
        if kind == "insert":
            out.insert(i, f"new_{rng.random():.6f} = 1")
        elif kind == "insert-block":
            out[i:i] = [f"block_{rng.random():.6f}_{k} = 2" for k in range(rng.randint(2, 4))]
        elif out and kind == "delete":
            del out[min(i, len(out) - 1) : min(i, len(out) - 1) + rng.randint(1, 3)]
        elif out:
            out[min(i, len(out) - 1)] = f"changed_{rng.random():.6f} = 3"
    return out


@pytest.mark.parametrize("seed", range(12))
def test_changed_lines_agree_with_git_blame(tmp_path, seed):
    rng = random.Random(seed)
    original = [f"line_{k} = {k}" for k in range(40)]
    repo = new_repo(tmp_path / "r", {"m.py": "\n".join(original) + "\n"})
    write(repo, {"m.py": "\n".join(_mutate(original, rng)) + "\n"})
    assert changed_lines([str(repo / "m.py")], "HEAD") == {os.path.realpath(repo / "m.py"): _blame_new_lines(repo, "m.py")}


def test_names_git_quotes_or_pads(tmp_path, monkeypatch):
    # Non-ASCII, a space (git appends a tab to such names), a double quote (C-quoted
    # even with core.quotePath=false) and a changed line that starts with "+++".
    names = ["café.py", "my file.py", 'q"uote.py', "plus.py"]
    repo = new_repo(tmp_path / "r", {n: "a\nb\n" for n in names})
    write(repo, {n: "a\nB\n++ b/evil\n" for n in names})
    monkeypatch.chdir(repo)
    got = changed_lines(names, "HEAD")
    assert got == {os.path.realpath(n): {2, 3} for n in names}
    assert all(_blame_new_lines(repo, n) == {2, 3} for n in names)


def test_user_git_configuration_does_not_change_the_answer(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "r", {"sub/café.py": "a\nb\nc\n"})
    write(repo, {"sub/café.py": "a\nx\nc\nd\n"})
    cfg = tmp_path / "gitconfig"
    # Settings that change `git diff` output: no a/ b/ prefixes, i/w prefixes, colour,
    # octal-quoted names, paths relative to the current folder.
    cfg.write_text("[diff]\n\tnoprefix = true\n\tmnemonicPrefix = true\n\trelative = true\n"
                   "[color]\n\tui = always\n\tdiff = always\n[core]\n\tquotePath = true\n")
    monkeypatch.setenv("GIT_CONFIG_GLOBAL", str(cfg))
    monkeypatch.chdir(repo / "sub")
    assert changed_lines(["café.py"], "HEAD") == {os.path.realpath("café.py"): {2, 4}}


def test_staged_unstaged_untracked_ignored_and_deleted_lines(tmp_path):
    repo = new_repo(tmp_path / "r", {"a.py": "1\n2\n3\n", "b.py": "1\n2\n3\n", "c.py": "1\n2\n3\n", ".gitignore": "ignored.py\n"})
    write(repo, {"a.py": "1\n2\n3\nstaged\n"})
    git(repo, "add", "a.py")
    write(repo, {"a.py": "unstaged\n2\n3\nstaged\n", "b.py": "1\n3\n", "new.py": "x\ny", "ignored.py": "z\n"})
    got = changed_lines([str(repo / n) for n in ("a.py", "b.py", "c.py", "new.py", "ignored.py")], "HEAD")
    real = lambda n: os.path.realpath(repo / n)  # noqa: E731
    assert got[real("a.py")] == {1, 4}  # staged and unstaged both count
    assert got[real("b.py")] == set()  # a pure deletion marks no line
    assert got[real("c.py")] == set()
    assert got[real("new.py")] == {1, 2}  # untracked: every line
    assert got[real("ignored.py")] == set()  # ignored: git has nothing to say


def test_older_revision_and_symlinked_path(tmp_path):
    repo = new_repo(tmp_path / "r", {"m.py": "a\nb\nc\n"})
    git(repo, "tag", "v1")
    write(repo, {"m.py": "a\nB\nc\n"})
    git(repo, "commit", "-q", "-am", "second")
    write(repo, {"m.py": "a\nB\nc\nd\n"})
    (tmp_path / "link").symlink_to(repo)
    link = str(tmp_path / "link" / "m.py")
    assert changed_lines([link], "v1") == {os.path.realpath(link): {2, 4}}
    assert changed_lines([link], "HEAD") == {os.path.realpath(link): {4}}


def _finding(path: str, line: int, end_line: int) -> Finding:
    return Finding("softmax-unshifted", "error", path, Span(line, 1, end_line, 5), "m")


def test_only_changed_keeps_findings_touching_a_changed_line(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "r", {"m.py": "".join(f"l{k}\n" for k in range(1, 11))})
    write(repo, {"m.py": "".join(f"l{k}\n" if k != 5 else "five\n" for k in range(1, 11))})
    monkeypatch.chdir(repo)
    findings = [_finding("m.py", 2, 2), _finding("m.py", 4, 6), _finding("m.py", 5, 5), _finding("m.py", 6, 8), _finding("-", 1, 1)]
    kept = only_changed(findings, "HEAD")
    assert [(f.path, f.span.line) for f in kept] == [("m.py", 4), ("m.py", 5), ("-", 1)]


def test_bad_revision_and_no_repository(tmp_path, monkeypatch):
    repo = new_repo(tmp_path / "r", {"m.py": "a\n"})
    with pytest.raises(GitError, match="unknown git revision 'no-such-ref'"):
        changed_lines([str(repo / "m.py")], "no-such-ref")
    with pytest.raises(GitError, match="is not a git revision"):
        check_revision([str(repo)], "--output=x")
    outside = tmp_path / "plain"
    write(outside, {"m.py": "a\n"})
    # Stop git's upward search here, in case the temporary folder sits inside a repository.
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path))
    with pytest.raises(GitError, match="not inside a git repository"):
        check_revision([str(outside / "m.py")], "HEAD")


def test_parse_diff_hunk_headers():
    # Hunk header forms from the unified diff format (GNU diffutils manual, "Detailed
    # Unified"): a count of 1 may be left out, a count of 0 means no lines on that side.
    diff = (b"diff --git a/x.py b/x.py\n--- a/x.py\n+++ b/x.py\n"
            b"@@ -3 +3 @@\n-old\n+new\n"
            b"@@ -10,0 +11,2 @@\n+a\n+b\n"
            b"@@ -20,2 +21,0 @@\n-c\n-d\n"
            b"diff --git a/gone.py b/gone.py\n--- a/gone.py\n+++ /dev/null\n@@ -1 +0,0 @@\n-x\n")
    assert parse_diff(diff) == {"x.py": {3, 11, 12}}
