"""The JSON report of interface.md."""
from __future__ import annotations

import json

from .. import __version__
from ..model import Finding, ScanResult


def _span(s) -> dict:
    return {"line": s.line, "column": s.column, "end_line": s.end_line, "end_column": s.end_column}


def finding_dict(f: Finding) -> dict:
    fix = None
    if f.fix is not None:
        fix = {
            "kind": f.fix.kind,
            "replacement": f.fix.replacement,
            "edits": [{**_span(e.span), "text": e.text} for e in f.fix.edits],
        }
    out = {"rule": f.rule, "severity": f.severity, "path": f.path, **_span(f.span), "message": f.message, "fix": fix}
    if f.suggestion is not None:
        out["suggestion"] = f.suggestion
    return out


def render(result: ScanResult, **_) -> str:
    doc = {
        "tool": {"name": "nanproof", "version": __version__},
        "findings": [finding_dict(f) for f in result.findings],
        "problems": [{"path": p.path, "message": p.message} for p in result.problems],
        "summary": {"files": result.files, "findings": len(result.findings), "problems": len(result.problems)},
    }
    return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"
