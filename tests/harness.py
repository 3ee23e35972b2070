"""Shared harness for proving rewrites numerically: fix a snippet with the real fix
engine (``nanproof.fix.fix_bytes``, limited to one rule), check the result the way the
engine promises (it parses, the rule no longer reports it, a second run changes
nothing), then load the original and the fixed functions side by side."""
from __future__ import annotations

import ast
import textwrap

from nanproof.api import scan_source
from nanproof.config import Config
from nanproof.fix import fix_bytes


def fixed(src: str, rule: str, include_review: bool = False, kind: str | None = None) -> str:
    """Source after ``nanproof fix`` of ``rule``'s findings (``--include-review`` when
    asked). With ``kind``, every finding of the rule must offer a fix of that kind."""
    src = textwrap.dedent(src)
    before = [f for f in scan_source(src).findings if f.rule == rule]
    assert before and any(f.fix is not None for f in before), f"no fix for {rule}"
    assert include_review or any(f.fix is not None and f.fix.kind == "auto" for f in before), f"no auto fix for {rule}"
    if kind is not None:
        assert all(f.fix is not None and f.fix.kind == kind for f in before), before
    config = Config(rules=frozenset({rule}), jobs=1)
    result = fix_bytes(src.encode(), config, include_review=include_review)
    assert not result.left.problems, result.left.problems
    (change,) = result.changes
    out = change.after.decode()
    ast.parse(out)  # every autofix result must re-parse
    assert rule not in [f.rule for f in scan_source(out).findings], out
    assert fix_bytes(out.encode(), config, include_review=include_review).changes == ()  # idempotent
    return out


def load(src: str, name: str):
    namespace: dict = {}
    exec(compile(textwrap.dedent(src), "<snippet>", "exec"), namespace)
    return namespace[name]


def both(src: str, rule: str, name: str, include_review: bool = False):
    """(original function, fixed function)."""
    return load(src, name), load(fixed(src, rule, include_review), name)
