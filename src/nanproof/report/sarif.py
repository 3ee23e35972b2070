"""The SARIF 2.1.0 report (OASIS standard): one run, every rule in ``tool.driver.rules``,
one result per finding with its rewrite as a ``fix``, and the files that could not be
analysed as tool execution notifications."""
from __future__ import annotations

import json
import os
from pathlib import Path
from urllib.parse import quote

from .. import __version__
from ..model import Finding, Problem, ScanResult, Span
from ..registry import Rule, all_rules

SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
# Relative artifact URIs are resolved against this base, which the run maps to the
# folder it ran in; code-scanning services map it to the checkout instead.
BASE_ID = "SRCROOT"
_FIX_WORDS = {
    "auto": "Stable rewrite (auto: equal in exact arithmetic, applied by `nanproof fix`)",
    "review": "Stable rewrite (review: may change results, check it; applied by `nanproof fix --include-review`)",
}


def _artifact(path: str, cwd: Path) -> dict:
    """A relative URI with forward slashes where the path lies below ``cwd``; an
    absolute ``file:`` URI otherwise."""
    if path == "-":
        # No file to point at; the description says where the text came from.
        return {"uri": "-", "description": {"text": "standard input"}}
    p = Path(path)
    if p.is_absolute():
        try:
            p = p.relative_to(cwd)
        except ValueError:
            return {"uri": p.as_uri()}
    rel = p.as_posix()  # Path("./x") already drops the "./"
    return {"uri": quote(rel, safe="/-._~"), "uriBaseId": BASE_ID}


def _region(s: Span) -> dict:
    # Same convention on both sides: 1-based, endColumn exclusive, code points.
    return {"startLine": s.line, "startColumn": s.column, "endLine": s.end_line, "endColumn": s.end_column}


def _first_paragraph(markdown: str) -> str:
    for block in markdown.split("\n\n"):
        block = block.strip()
        if block and not block.startswith(("#", "```", "|", "-", "*")):
            return " ".join(block.split())
    return ""


def _rule(r: Rule) -> dict:
    page = r.page()
    return {
        "id": r.id,
        "shortDescription": {"text": r.summary},
        "fullDescription": {"text": _first_paragraph(page) or r.summary},
        "help": {"text": page, "markdown": page},
        "defaultConfiguration": {"level": r.severity},
        "properties": {"family": r.family, "fix": r.fix or "suggestion", "tags": ["numerical-stability", r.family]},
    }


def _fix(f: Finding, artifact: dict) -> dict:
    replacements = [{"deletedRegion": _region(e.span), "insertedContent": {"text": e.text}} for e in f.fix.edits]
    return {
        "description": {"text": f"{_FIX_WORDS[f.fix.kind]}: {f.fix.replacement}"},
        "artifactChanges": [{"artifactLocation": artifact, "replacements": replacements}],
    }


def _result(f: Finding, index: dict[str, int], cwd: Path) -> dict:
    artifact = _artifact(f.path, cwd)
    out: dict = {"ruleId": f.rule}
    if f.rule in index:
        out["ruleIndex"] = index[f.rule]
    out["level"] = f.severity
    out["message"] = {"text": f.message}
    out["locations"] = [{"physicalLocation": {"artifactLocation": artifact, "region": _region(f.span)}}]
    if f.fix is not None:
        out["fixes"] = [_fix(f, artifact)]
    elif f.suggestion:
        out["properties"] = {"suggestion": f.suggestion}
    return out


def _notification(p: Problem, cwd: Path) -> dict:
    where = {"physicalLocation": {"artifactLocation": _artifact(p.path, cwd)}}
    return {"level": "error", "message": {"text": f"{p.path}: {p.message}"}, "locations": [where]}


def render(result: ScanResult, **_) -> str:
    cwd = Path(os.getcwd())
    rules = all_rules()
    index = {r.id: i for i, r in enumerate(rules)}
    invocation = {
        "executionSuccessful": not result.problems,
        "exitCode": result.exit_code,
        "toolExecutionNotifications": [_notification(p, cwd) for p in result.problems],
    }
    run = {
        "tool": {"driver": {"name": "nanproof", "version": __version__, "rules": [_rule(r) for r in rules]}},
        "invocations": [invocation],
        # SARIF 3.14.27: required when results point into text files; our columns
        # count Unicode code points (Python str indices).
        "columnKind": "unicodeCodePoints",
        "originalUriBaseIds": {BASE_ID: {"uri": cwd.as_uri().rstrip("/") + "/"}},
        "results": [_result(f, index, cwd) for f in result.findings],
    }
    doc = {"$schema": SCHEMA_URI, "version": "2.1.0", "runs": [run]}
    return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"
