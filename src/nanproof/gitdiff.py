"""Which lines differ from a git revision, for ``--changed-since REF``.

The comparison is the working tree against REF, so staged and unstaged edits both
count; files git does not track (and does not ignore) count as wholly changed. A
hunk that only deletes lines marks nothing: there is no new code to report on.

API (used by ``scan`` through ``only_changed`` and by ``fix``):

``changed_lines(paths, ref) -> dict[str, set[int]]``
    For each file in ``paths`` (as given), keyed by its ``os.path.realpath``: the set of
    1-based line numbers added or changed since ``ref``; every line of the file when
    git does not track it; an empty set when it is unchanged.

``only_changed(findings, ref) -> list[Finding]``
    The findings whose span touches a changed line. Findings on standard input
    (path ``-``) are all kept: git knows nothing about that text.

``check_revision(paths, ref)``
    Fails early when a path is outside git or ``ref`` is unknown there.

All three raise ``GitError`` (a ``ConfigError``, so the command line exits with status
2) when a path is not inside a git work tree, ``ref`` names no commit there, or git
cannot run. The scanned files may live in several repositories; each is asked once
per call, and nothing is cached between calls (``fix`` edits files in between).
"""
from __future__ import annotations

import os
import re
import subprocess
from typing import Iterable

from .config import ConfigError
from .model import Finding

_HUNK = re.compile(rb"^@@ -\d+(?:,(\d+))? \+(\d+)(?:,(\d+))? @@")
# Fixed options so user configuration (external diff drivers, textconv, colours,
# custom or missing a/ b/ prefixes, quoted non-ASCII paths) cannot change the output.
_DIFF = ("diff", "-U0", "--no-ext-diff", "--no-textconv", "--no-color", "--find-renames",
         "--src-prefix=a/", "--dst-prefix=b/")


class GitError(ConfigError):
    """git cannot say what changed: no repository, unknown revision, git missing."""


def _git(root: str, *args: str) -> bytes:
    cmd = ["git", "-C", root, "-c", "core.quotePath=false", *args]
    try:
        done = subprocess.run(cmd, capture_output=True, check=False)
    except OSError as e:  # git is not installed
        raise GitError(f"--changed-since needs git: {e.strerror or e}") from None
    if done.returncode != 0:
        reason = done.stderr.decode("utf-8", "replace").strip().splitlines()
        raise GitError(f"git {args[0]} failed in {root}: {reason[-1] if reason else done.returncode}")
    return done.stdout


def repo_root(folder: str) -> str:
    """The top folder of the git work tree holding ``folder``."""
    try:
        out = _git(folder, "rev-parse", "--show-toplevel")
    except GitError:
        raise GitError(f"--changed-since: {folder} is not inside a git repository") from None
    return os.path.realpath(os.fsdecode(out.rstrip(b"\n")))


def _commit(root: str, ref: str) -> str:
    # A REF starting with "-" would be read by git as an option.
    if not ref or ref.startswith("-"):
        raise GitError(f"--changed-since: {ref!r} is not a git revision")
    try:
        out = _git(root, "rev-parse", "--verify", "--quiet", f"{ref}^{{commit}}")
    except GitError:
        raise GitError(f"--changed-since: unknown git revision {ref!r} in {root}") from None
    return out.decode("ascii").strip()


def _folder(path: str) -> str:
    real = os.path.realpath(path)
    return real if os.path.isdir(real) else os.path.dirname(real)


def check_revision(paths: Iterable[str], ref: str) -> None:
    """Raise GitError unless every path is in a git work tree where ``ref`` is a commit."""
    for folder in {_folder(p) for p in paths if p != "-"}:
        _commit(repo_root(folder), ref)


def _unquote(name: bytes) -> bytes:
    """A path as git prints it: C-style quoted when it holds quotes, backslashes or
    control characters (non-ASCII stays raw under core.quotePath=false)."""
    if not name.startswith(b'"'):
        return name.rstrip(b"\t")  # git appends a tab to names that contain a space
    body = name[1 : name.rindex(b'"')]
    simple = {b"n": b"\n", b"t": b"\t", b'"': b'"', b"\\": b"\\", b"a": b"\a", b"b": b"\b", b"f": b"\f", b"r": b"\r", b"v": b"\v"}
    return re.sub(rb"\\([0-7]{3}|.)", lambda m: bytes([int(m[1], 8)]) if len(m[1]) == 3 else simple.get(m[1], m[1]), body)


def parse_diff(diff: bytes) -> dict[str, set[int]]:
    """Repository-relative path -> new-side line numbers added or changed, from the
    output of ``git diff -U0``. Hunk bodies are skipped by count, so a changed line
    that itself begins with ``+++`` is not mistaken for a file header."""
    changed: dict[str, set[int]] = {}
    current: set[int] | None = None
    skip = 0  # body lines of the current hunk still to pass over
    for line in diff.split(b"\n"):
        if skip and line[:1] in (b"+", b"-", b" "):
            skip -= 1
            continue
        if line.startswith(b"+++ "):
            name = _unquote(line[4:])
            current = None if name == b"/dev/null" else changed.setdefault(os.fsdecode(name[2:]), set())
        elif (m := _HUNK.match(line)) and current is not None:
            old = int(m[1]) if m[1] is not None else 1
            start, new = int(m[2]), int(m[3]) if m[3] is not None else 1
            current.update(range(start, start + new))  # new == 0: pure deletion, no lines
            skip = old + new
    return changed


def _repo_changes(root: str, ref: str) -> tuple[dict[str, set[int]], frozenset[str]]:
    """(realpath -> changed lines, realpaths of untracked files) for one repository.
    Not cached: ``fix`` edits files between two questions."""
    diff = parse_diff(_git(root, *_DIFF, _commit(root, ref), "--"))
    untracked = _git(root, "ls-files", "--others", "--exclude-standard", "-z").split(b"\0")
    lines = {os.path.realpath(os.path.join(root, rel)): n for rel, n in diff.items()}
    new = frozenset(os.path.realpath(os.path.join(root, os.fsdecode(u))) for u in untracked if u)
    return lines, new


def _all_lines(path: str) -> set[int]:
    try:
        with open(path, "rb") as fh:
            count = fh.read().count(b"\n") + 1  # + 1: a last line without a newline
    except OSError:
        count = 0  # the scan reports the unreadable file; nothing to mark
    return set(range(1, count + 1))


def changed_lines(paths: Iterable[str], ref: str) -> dict[str, set[int]]:
    """For each file path: realpath -> line numbers added or changed since ``ref``
    (all of them for a file git does not track). See the module docstring."""
    out: dict[str, set[int]] = {}
    roots: dict[str, str] = {}  # folder -> repository top folder
    repos: dict[str, tuple[dict[str, set[int]], frozenset[str]]] = {}
    for path in paths:
        real, folder = os.path.realpath(path), _folder(path)
        if folder not in roots:
            roots[folder] = repo_root(folder)
        root = roots[folder]
        if root not in repos:
            repos[root] = _repo_changes(root, ref)
        lines, new = repos[root]
        out[real] = _all_lines(real) if real in new else set(lines.get(real, ()))
    return out


def only_changed(findings: Iterable[Finding], ref: str) -> list[Finding]:
    """The findings whose span touches a line added or changed since ``ref``."""
    findings = list(findings)
    changed = changed_lines({f.path for f in findings if f.path != "-"}, ref)
    return [
        f for f in findings
        if f.path == "-" or not changed[os.path.realpath(f.path)].isdisjoint(f.span.lines())
    ]
