"""The library API: everything the command line does, callable from Python.

>>> from nanproof.api import scan_source
>>> [f.rule for f in scan_source("import numpy as np\\np.log(np.sum(np.exp(x)))\\n").findings]
['logsumexp-unshifted']
"""
from __future__ import annotations

import os
import sys
from typing import Callable, Iterable

from .analyse import analyse_source
from .values.summaries import project_table, relevant
from .config import Config
from .discover import discover
from .model import FileResult, Problem, ScanResult
from .read import ReadError, read_source
from .registry import Rule, all_rules

Progress = Callable[[int, int], None]  # (files done, files in all)
MAX_ROUNDS = 3  # passes after the first that follow values across files


def select_rules(config: Config) -> list[Rule]:
    enabled = config.enabled()
    return [r for r in all_rules() if r.id in enabled]


def scan_source(text: str, path: str = "<string>", config: Config = Config(), project: dict | None = None) -> FileResult:
    """Analyse source text (no file is read)."""
    return analyse_source(text, path, select_rules(config), project)


def analyse_file(path: str, rule_ids: tuple[str, ...], project: dict | None = None) -> FileResult:
    try:
        source = read_source(path)
    except ReadError as e:
        return FileResult(path, problem=Problem(path, str(e)))
    enabled = set(rule_ids)
    rules = [r for r in all_rules() if r.id in enabled]
    return analyse_source(source.text, path, rules, project)


def _worker_init() -> None:
    sys.setrecursionlimit(max(sys.getrecursionlimit(), 20000))


def _analyse_chunk(args) -> list[FileResult]:
    paths, rule_ids, project = args
    return [analyse_file(p, rule_ids, project) for p in paths]


def _run(paths: list[str], rule_ids: tuple[str, ...], project: dict | None, jobs: int, progress: Progress | None, done0: int, total: int) -> list[FileResult]:
    results: list[FileResult] = []
    if jobs <= 1 or len(paths) < 4 or "-" in paths:
        for i, p in enumerate(paths):
            results.append(analyse_file(p, rule_ids, project))
            if progress:
                progress(done0 + i + 1, total)
        return results
    from concurrent.futures import ProcessPoolExecutor  # not imported for one-file runs

    size = max(1, min(32, len(paths) // (jobs * 8) or 1))
    chunks = [paths[i : i + size] for i in range(0, len(paths), size)]
    with ProcessPoolExecutor(max_workers=jobs, initializer=_worker_init) as pool:
        for chunk_result in pool.map(_analyse_chunk, [(c, rule_ids, project) for c in chunks]):
            results.extend(chunk_result)
            if progress:
                progress(done0 + len(results), total)
    return results


def scan(paths: list[str], config: Config = Config(), progress: Progress | None = None) -> ScanResult:
    """Discover, read and analyse PATHs; results sorted by path, line, column, rule.
    Raises ``gitdiff.GitError`` (a ConfigError) before any analysis when
    ``config.changed_since`` names a revision git does not know."""
    if config.changed_since:
        from .gitdiff import check_revision

        check_revision(paths or ["."], config.changed_since)
    files, problems = discover(paths or ["."], config.exclude)
    rule_ids = tuple(sorted(config.enabled()))
    jobs = config.jobs or os.cpu_count() or 1
    results = _run(files, rule_ids, None, jobs, progress, 0, len(files))
    # Further passes for files that use what another scanned file defines (a helper or
    # class it imports, a function of its own that others call), until nothing changes.
    seen: list = [None] * len(results)
    for _ in range(MAX_ROUNDS):
        table = project_table(results)
        slices = [relevant(table, r) for r in results]
        again = [i for i, sl in enumerate(slices) if sl and sl != seen[i]]
        if not again:
            break
        redone = _run([files[i] for i in again], rule_ids, table, jobs, None, 0, len(again))
        for i, r in zip(again, redone):
            results[i], seen[i] = r, slices[i]
    findings = [f for r in results for f in r.findings]
    problems.extend(r.problem for r in results if r.problem is not None)
    if config.changed_since:
        from .gitdiff import only_changed

        findings = only_changed(findings, config.changed_since)
    findings.sort(key=lambda f: f.sort_key())
    problems.sort(key=lambda p: p.path)
    return ScanResult(len(files), tuple(findings), tuple(problems))
