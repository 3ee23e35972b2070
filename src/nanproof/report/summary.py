"""Counts shared by the reports meant for people (text and HTML): findings per rule,
per top-level folder, the files with the most findings, and how many can be fixed."""
from __future__ import annotations

import os
import posixpath
from collections import Counter
from dataclasses import dataclass

from ..model import ScanResult

TOP_FILES = 5


@dataclass(frozen=True)
class Summary:
    # The folder the findings and problems lie in ("legacy/"), "" for several roots.
    root: str
    files: int
    findings: int
    problems: int
    # (key, count) pairs, most findings first, ties by key.
    per_rule: tuple[tuple[str, int], ...]
    per_severity: tuple[tuple[str, int], ...]
    per_folder: tuple[tuple[str, int], ...]
    top_files: tuple[tuple[str, int], ...]
    # Findings with an ``auto`` fix (applied by ``nanproof fix``), with a ``review``
    # fix (applied with ``--include-review``), and with neither.
    auto_fixable: int
    review_fixable: int
    not_fixable: int
    files_with_findings: int


def _ranked(counter: Counter) -> tuple[tuple[str, int], ...]:
    return tuple(sorted(counter.items(), key=lambda kv: (-kv[1], kv[0])))


def _parts(path: str) -> list[str]:
    """Path components whatever the platform's separator; ``.`` dropped; an absolute
    path starts with an empty component, so it never matches a relative one."""
    parts = posixpath.normpath(path.replace(os.sep, "/")).split("/")
    return parts[:1] + [p for p in parts[1:] if p] if parts[0] == "" else [p for p in parts if p != "."]


def common_root(paths: list[str]) -> list[str]:
    """The folder all PATHs lie in, as components: the root the run was given when it
    was one folder, or the empty list for several roots or paths of their own."""
    dirs = [_parts(p)[:-1] for p in paths]
    if not dirs:
        return []
    root = dirs[0]
    for d in dirs[1:]:
        n = 0
        while n < min(len(root), len(d)) and root[n] == d[n]:
            n += 1
        root = root[:n]
    return root


def _label(folder: list[str]) -> str:
    return "/".join(folder) + "/" if folder else "./"


def folder_of(path: str, root: list[str]) -> str:
    """The top-level folder of PATH below ROOT, labelled with its full prefix so the
    label means the same whatever ROOT was (``legacy/io/``); files directly in ROOT
    are grouped as ``legacy/ (top level)``, which does not read as a total."""
    below = _parts(path)[len(root) : -1]
    return _label(root + below[:1]) if below else _label(root) + " (top level)"


def summarise(result: ScanResult, top: int = TOP_FILES) -> Summary:
    findings = result.findings
    paths = [f.path for f in findings] + [p.path for p in result.problems]
    root = common_root(paths)
    kinds = Counter(f.fix.kind if f.fix is not None else None for f in findings)
    per_file = Counter(f.path for f in findings)
    return Summary(
        root=_label(root) if root else "",
        files=result.files,
        findings=len(findings),
        problems=len(result.problems),
        per_rule=_ranked(Counter(f.rule for f in findings)),
        per_severity=_ranked(Counter(f.severity for f in findings)),
        per_folder=_ranked(Counter(folder_of(f.path, root) for f in findings)),
        top_files=_ranked(per_file)[:top],
        auto_fixable=kinds["auto"],
        review_fixable=kinds["review"],
        not_fixable=kinds[None],
        files_with_findings=len(per_file),
    )


def fold(rows, keep: int) -> tuple[list[tuple[str, int]], int, int]:
    """The first KEEP rows, and how many rows and findings are left over."""
    rest = rows[keep:]
    return list(rows[:keep]), len(rest), sum(n for _, n in rest)


def plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"
