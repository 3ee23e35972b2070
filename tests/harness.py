"""Shared harness for proving rewrites numerically: fix a snippet the way `nanproof fix`
does (edits of the reported findings, applied from the last to the first), then load
the original and the fixed functions side by side."""
from __future__ import annotations

import ast
import textwrap

from nanproof.api import scan_source


def splice(src: str, edits) -> str:
    lines = src.splitlines(keepends=True)
    starts = [0]
    for line in lines:
        starts.append(starts[-1] + len(line))

    def off(line: int, col: int) -> int:
        return starts[line - 1] + col - 1

    seen = set()
    for e in sorted(edits, key=lambda e: (e.span.line, e.span.column, e.span.end_line, e.span.end_column), reverse=True):
        if e in seen:
            continue
        seen.add(e)
        a, b = off(e.span.line, e.span.column), off(e.span.end_line, e.span.end_column)
        src = src[:a] + e.text + src[b:]
    return src


def fixed(src: str, rule: str, include_review: bool = False) -> str:
    """Source after applying the fixes of ``rule``; asserts there was one to apply."""
    src = textwrap.dedent(src)
    fs = [f for f in scan_source(src).findings if f.rule == rule and f.fix is not None]
    assert fs, f"no fix for {rule}"
    if not include_review:
        fs = [f for f in fs if f.fix.kind == "auto"]
        assert fs, f"no auto fix for {rule}"
    out = splice(src, [e for f in fs for e in f.fix.edits])
    ast.parse(out)  # every autofix result must re-parse
    assert rule not in [f.rule for f in scan_source(out).findings], out
    return out


def load(src: str, name: str):
    namespace: dict = {}
    exec(compile(textwrap.dedent(src), "<snippet>", "exec"), namespace)
    return namespace[name]
