"""``nanproof fix``: apply the safe rewrites, verified, in place or as a diff.

The chain reads top to bottom: ``fix_paths`` scans, hands each file with fixable
findings to ``fix_file``, which reads it, lets ``settle`` rewrite it in memory round by
round (each round checked by ``verify.check_round`` and analysed again), and writes the
result atomically unless only a diff was asked for. A file that fails any check is left
as it was and reported as a problem.
"""
from __future__ import annotations

import os
import stat
import tempfile
import time
from dataclasses import dataclass, field, replace

from .analyse import analyse_source
from .api import scan, scan_source, select_rules
from .config import Config
from .edits import Text, Unsafe, apply, carry_lines, choose, forward, place
from .model import Finding, Problem, ScanResult, Span
from .read import ReadError, Source, decode, encode, read_bytes
from .registry import Rule
from .verify import check_header, check_round

# The README quotes this sentence; the text output prints it once per run that changed
# or diffed anything.
WARNING = (
    "Rewrites change floating-point results in the last bits (and more where the old code "
    "was wrong). Models used in regulated or safety-critical settings need their usual "
    "validation after any fix."
)
# Nested findings take a round each; more than this means rewrites that keep feeding
# each other, and the file is better left alone.
MAX_ROUNDS = 5


@dataclass(frozen=True)
class FileChange:
    """One file the fixes changed: its bytes before and after, the findings fixed."""

    path: str
    before: bytes
    after: bytes
    fixed: tuple[Finding, ...]
    # The fixed text's lines, for showing what is left (the file may not hold them).
    lines: tuple[str, ...] = field(default=(), repr=False)


@dataclass(frozen=True)
class FixResult:
    changes: tuple[FileChange, ...]
    left: ScanResult  # what remains after the fixes (after the diff, with ``--diff``)
    # True when the fixes were applied (to the files, or to the copy of standard input
    # printed); False for ``--diff``.
    written: bool

    @property
    def exit_code(self) -> int:
        return self.left.exit_code


@dataclass(frozen=True)
class Settled:
    """A file's text after the fixes, with what is still reported in it."""

    text: str
    fixed: tuple[Finding, ...]
    findings: tuple[Finding, ...]
    origin: tuple[int | None, ...]  # per line: the original line, or None if written by a fix
    original: str = field(default="", repr=False)


def fix_kinds(config: Config, include_review: bool) -> frozenset[str]:
    return frozenset({"auto", "review"} if include_review or config.include_review else {"auto"})


def fixable(f: Finding, kinds: frozenset[str]) -> bool:
    return f.fix is not None and f.fix.kind in kinds


def fix_paths(paths: list[str], config: Config = Config(), include_review: bool = False, diff_only: bool = False, progress=None) -> FixResult:
    """Scan PATHs like ``api.scan``, apply every fix of the chosen kinds (``auto``, plus
    ``review`` with ``include_review``), and report what is left. With ``diff_only``
    nothing is written; the result's changes carry the bytes a diff shows."""
    started = time.time()
    first = scan(paths, config, progress=progress)
    kinds = fix_kinds(config, include_review)
    rules = select_rules(config)
    todo: dict[str, list[Finding]] = {}
    spelled: dict[str, str] = {}  # one path spelling per file: ./a.py and a.py are one file
    for f in first.findings:
        if fixable(f, kinds):
            path = spelled.setdefault(os.path.realpath(f.path), f.path)
            if replace(f, path=path) not in todo.setdefault(path, []):
                todo[path].append(replace(f, path=path))
    changes, problems, settled = [], [], {}
    for path, findings in todo.items():
        outcome = fix_file(path, findings, rules, kinds, config, started, write=not diff_only)
        if isinstance(outcome, Problem):
            problems.append(outcome)
        else:
            changes.append(outcome[0])
            settled[path] = outcome[1]
    if diff_only:
        left = _left_in_memory(first, settled, config)
    else:
        left = scan(paths, config) if changes else first
    problems = sorted({*left.problems, *problems}, key=lambda p: (p.path, p.message))
    return FixResult(tuple(changes), replace(left, problems=tuple(problems)), not diff_only)


def fix_bytes(data: bytes, config: Config = Config(), include_review: bool = False, diff_only: bool = False, path: str = "-") -> FixResult:
    """Fix one file's bytes (standard input) in memory; ``changes`` holds the result
    when anything changed. Nothing is read from or written to disk."""
    try:
        source = decode(path, data)
    except ReadError as e:
        return FixResult((), ScanResult(1, (), (Problem(path, str(e)),)), not diff_only)
    first = scan_source(source.text, path, config)
    if first.problem is not None:
        return FixResult((), ScanResult(1, (), (first.problem,)), not diff_only)
    kinds = fix_kinds(config, include_review)
    findings = [f for f in first.findings if fixable(f, kinds)]
    if not findings:
        return FixResult((), ScanResult(1, first.findings, ()), not diff_only)
    try:
        done, after = fix_source(source, findings, select_rules(config), kinds, False)
    except Unsafe as e:
        problem = Problem(path, f"not fixed, left unchanged: {e}")
        return FixResult((), ScanResult(1, first.findings, (problem,)), not diff_only)
    change = FileChange(path, data, after, done.fixed, _lines(done.text))
    return FixResult((change,), ScanResult(1, done.findings, ()), not diff_only)


def fix_file(path: str, findings: list[Finding], rules: list[Rule], kinds, config: Config, started: float, write: bool):
    """Read, fix in memory, verify, and (with ``write``) replace one file.
    Returns (FileChange, Settled), or a Problem when the file is left as it was."""
    try:
        data = read_bytes(path)
        source = decode(path, data)
        # Modified since the scan began (a future timestamp from an unpacked archive or
        # a skewed clock is not a modification): the findings may point elsewhere now.
        if started <= os.stat(path).st_mtime <= time.time():
            raise Unsafe("the file changed on disk after the scan began; run again")
        done, after = fix_source(source, findings, rules, kinds, bool(config.changed_since))
        if write:
            write_atomic(path, data, after)
    except ReadError as e:
        return Problem(path, str(e))
    except Unsafe as e:
        return Problem(path, f"not fixed, left unchanged: {e}")
    except OSError as e:
        return Problem(path, f"not fixed, left unchanged: {e.strerror or e}")
    return FileChange(path, data, after, done.fixed, _lines(done.text)), done


def fix_source(source: Source, findings: list[Finding], rules: list[Rule], kinds, near_fixes_only: bool) -> tuple[Settled, bytes]:
    """The fixed text and the bytes to write, checked to read back as the same text in
    the same encoding. Raises Unsafe, for a bug of ours too: it must cost one file, not
    the run."""
    try:
        done = settle(source, findings, rules, kinds, near_fixes_only)
        data = encode(source, done.text)
        again = decode(source.path, data)
    except Unsafe:
        raise
    except UnicodeEncodeError:
        raise Unsafe(f"the rewrite holds characters the file's encoding ({source.encoding}) cannot store") from None
    except ReadError:
        again = None
    except Exception as e:
        raise Unsafe(f"internal error {type(e).__name__}: {e}".splitlines()[0]) from e
    if again is None or again.text != done.text or again.encoding != source.encoding:
        raise Unsafe(f"the rewritten file would no longer read back as {source.encoding}")
    return done, data


def settle(source: Source, findings: list[Finding], rules: list[Rule], kinds, near_fixes_only: bool) -> Settled:
    """Apply the fixes round by round until the analysis offers none. Each round applies
    the fixes whose edits do not overlap, passes ``verify.check_round``, is analysed
    again, and must no longer report what it fixed. Nested findings are met again in the
    next round. ``near_fixes_only`` (for ``--changed-since``): after the first round,
    only findings that touch lines a fix wrote are taken up.

    The loop ends only when an analysis of the current text offers no fix to apply, which
    is what a second run would see first: so a second run changes nothing (idempotence).
    Raises Unsafe."""
    text, fixed = Text(source.text), []
    origin: list[int | None] = list(range(1, len(text.starts) + 1))
    todo = list(findings)
    for _ in range(MAX_ROUNDS):
        pairs = choose(todo, text)
        chosen = [f for f, _ in pairs]
        placed = place(text, [edits for _, edits in pairs], source.newline)
        new = Text(apply(text.text, placed))
        check_round(source.path, text, new, placed)
        check_header(text, new)
        result = analyse_source(new.text, source.path, rules)
        if result.problem is not None:
            raise Unsafe(f"the result cannot be analysed: {result.problem.message}")
        _check_gone(chosen, placed, text, new, result.findings)
        origin = carry_lines(origin, text, new, placed)
        text, fixed = new, fixed + chosen
        ours = {n + 1 for n, o in enumerate(origin) if o is None}
        todo = [f for f in result.findings if fixable(f, kinds) and (not near_fixes_only or not ours.isdisjoint(f.span.lines()))]
        if not todo:
            return Settled(text.text, tuple(fixed), result.findings, tuple(origin), source.text)
    raise Unsafe(f"the rewrites did not settle after {MAX_ROUNDS} rounds (each round's result was flagged again)")


def _check_gone(chosen, placed, old: Text, new: Text, after: tuple[Finding, ...]) -> None:
    """The rule that asked for a rewrite must not flag the rewritten code."""
    reported = {(f.rule, f.span) for f in after}
    for f in chosen:
        start = forward(placed, old.offset(f.span.line, f.span.column))
        end = forward(placed, old.offset(f.span.end_line, f.span.end_column), end=True)
        if (f.rule, new.span(start, end)) in reported:
            raise Unsafe(f"{f.rule} still flags the rewritten code at line {f.span.line}")


def _left_in_memory(first: ScanResult, settled: dict[str, Settled], config: Config) -> ScanResult:
    """What a diff would leave: the scan's findings in unchanged files; in a changed one,
    its final analysis (restricted to the lines a fix wrote and the changed lines, with
    ``--changed-since``) plus what only the scan's cross-file pass saw, on lines no fix
    touched."""
    findings = [f for f in first.findings if f.path not in settled]
    rules = select_rules(config)
    for path, done in settled.items():
        keep = done.findings
        if config.changed_since:
            from .gitdiff import changed_lines

            changed = changed_lines([path], config.changed_since)[os.path.realpath(path)]
            allowed = {n + 1 for n, o in enumerate(done.origin) if o is None or o in changed}
            keep = tuple(f for f in keep if not allowed.isdisjoint(f.span.lines()))
        findings.extend(keep)
        findings.extend(_cross_file([f for f in first.findings if f.path == path], done, rules))
    findings.sort(key=Finding.sort_key)
    return replace(first, findings=tuple(findings))


def _cross_file(scanned: list[Finding], done: Settled, rules: list[Rule]) -> list[Finding]:
    """The scan's findings in a file that the file alone does not show (they follow a
    helper defined in another scanned file), moved to their lines in the fixed text;
    those on lines a fix rewrote are dropped with the code they were about."""
    alone = {(f.rule, f.span) for f in analyse_source(done.original, scanned[0].path, rules).findings} if scanned else set()
    new_line = {o: n + 1 for n, o in enumerate(done.origin) if o is not None}
    out = []
    for f in scanned:
        s = f.span
        lines = [new_line.get(n) for n in s.lines()]
        if f in done.fixed or (f.rule, s) in alone or None in lines or lines != list(range(lines[0], lines[0] + len(lines))):
            continue
        out.append(replace(f, span=Span(lines[0], s.column, lines[-1], s.end_column)))
    return out


def _lines(text: str) -> tuple[str, ...]:
    lines = Text(text)
    return tuple(text[a:b].rstrip("\r\n") for a, b in zip(lines.starts, [*lines.starts[1:], len(text)]))


# ---------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------
def write_atomic(path: str, before: bytes, after: bytes) -> None:
    """Replace the file's content by ``after``: a temporary file in the same folder,
    renamed over the original, so a reader never sees half a file. Keeps the mode bits.
    Refuses a read-only file (without touching its permissions) and a file whose bytes
    are no longer ``before`` (someone edited it meanwhile). Raises Unsafe."""
    target = os.path.realpath(path)  # through a symbolic link, never replacing the link
    st = os.stat(target)
    # Mode bits as well as access(): a superuser may write anything, but a file marked
    # read-only was marked so on purpose.
    if not os.access(target, os.W_OK) or not st.st_mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH):
        raise Unsafe("the file is read-only")
    if st.st_nlink > 1:  # a rename gives this name a new file and leaves the others old
        raise Unsafe("the file has other hard links, which replacing it would split")
    folder, name = os.path.split(target)
    try:
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{name}.", suffix=".nanproof-tmp")
    except OSError as e:
        raise Unsafe(f"cannot write in {folder or '.'}: {e.strerror or e}") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(after)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, stat.S_IMODE(st.st_mode))
        try:  # the owner stays (a superuser fixing someone's file); others may not chown
            os.chown(tmp, st.st_uid, st.st_gid)
        except OSError:
            pass
        if _current(target) != before:
            raise Unsafe("the file changed on disk while it was being fixed; run again")
        os.replace(tmp, target)
    except OSError as e:
        raise Unsafe(f"cannot write: {e.strerror or e}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _current(path: str) -> bytes | None:
    try:
        with open(path, "rb") as fh:
            return fh.read()
    except OSError:
        return None
