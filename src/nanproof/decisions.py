"""The decisions that apply to every rule (rules.md): suppression comments and "one
finding per problem" precedence between overlapping rules."""
from __future__ import annotations

import io
import re
import tokenize

from .model import Finding
from .registry import Rule

_SUPPRESS = re.compile(r"#\s*nanproof:\s*allow(-file)?(?:\[([^\]]*)\])?")


def suppressions(text: str) -> tuple[dict[int, set[str] | None], set[str] | None]:
    """Line -> rule ids silenced there (None: all), and the file-wide set (None: all)."""
    per_line: dict[int, set[str] | None] = {}
    whole: set[str] | None = set()
    if "nanproof:" not in text:
        return per_line, whole
    try:
        tokens = list(tokenize.generate_tokens(io.StringIO(text).readline))
    except (tokenize.TokenError, SyntaxError, IndentationError):
        return per_line, whole
    for tok in tokens:
        if tok.type != tokenize.COMMENT:
            continue
        m = _SUPPRESS.search(tok.string)
        if not m:
            continue
        ids = None if m.group(2) is None else {x.strip() for x in m.group(2).split(",") if x.strip()}
        if m.group(1):  # allow-file: on a line of its own
            if tok.line.strip().startswith("#"):
                whole = None if ids is None or whole is None else whole | ids
        else:
            line = tok.start[0]
            prev = per_line.get(line, set())
            per_line[line] = None if ids is None or prev is None else prev | ids
    return per_line, whole


def silenced(f: Finding, per_line, whole) -> bool:
    if whole is None or f.rule in whole:
        return True
    for line in {f.statement_line, f.span.line}:
        if line in per_line and (per_line[line] is None or f.rule in per_line[line]):
            return True
    return False


def precedence(findings: list[Finding], rules: dict[str, Rule]) -> list[Finding]:
    kept = []
    for f in findings:
        beaten = False
        for g in findings:
            if g is f or f.rule not in rules[g.rule].overrides:
                continue
            if g.span.contains(f.span) or any(c.contains(f.span) for c in g.covers):
                beaten = True
                break
        if not beaten:
            kept.append(f)
    unique = {}
    for f in kept:
        unique.setdefault((f.rule, f.span), f)
    return list(unique.values())
