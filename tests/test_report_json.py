"""The JSON report has exactly the shape of the interface contract (interface.md,
"JSON report"), checked with a JSON Schema written from that section."""
import json
import os

import pytest

from nanproof.api import scan
from nanproof.config import Config
from nanproof.report.json import render

jsonschema = pytest.importorskip("jsonschema")

_SPAN = {"line": {"type": "integer", "minimum": 1}, "column": {"type": "integer", "minimum": 1},
         "end_line": {"type": "integer", "minimum": 1}, "end_column": {"type": "integer", "minimum": 1}}
SCHEMA = {
    "type": "object",
    "required": ["tool", "findings", "problems", "summary"],
    "additionalProperties": False,
    "properties": {
        "tool": {"type": "object", "required": ["name", "version"], "properties": {"name": {"const": "nanproof"}, "version": {"type": "string"}}},
        "findings": {"type": "array", "items": {
            "type": "object",
            "required": ["rule", "severity", "path", *_SPAN, "message", "fix"],
            "properties": {
                "rule": {"type": "string", "pattern": "^[a-z0-9]+(-[a-z0-9]+)*$"},
                "severity": {"enum": ["error", "warning", "note"]},
                "path": {"type": "string"},
                **_SPAN,
                "message": {"type": "string", "minLength": 1},
                "fix": {"oneOf": [{"type": "null"}, {
                    "type": "object", "required": ["kind", "replacement", "edits"], "additionalProperties": False,
                    "properties": {"kind": {"enum": ["auto", "review"]}, "replacement": {"type": "string"},
                                   "edits": {"type": "array", "minItems": 1, "items": {
                                       "type": "object", "required": [*_SPAN, "text"], "additionalProperties": False,
                                       "properties": {**_SPAN, "text": {"type": "string"}}}}}}]},
                "suggestion": {"type": "string"},
            },
            "additionalProperties": False,
        }},
        "problems": {"type": "array", "items": {"type": "object", "required": ["path", "message"], "additionalProperties": False,
                                                 "properties": {"path": {"type": "string"}, "message": {"type": "string"}}}},
        "summary": {"type": "object", "required": ["files", "findings", "problems"], "additionalProperties": False,
                    "properties": {k: {"type": "integer", "minimum": 0} for k in ("files", "findings", "problems")}},
    },
}


def test_demo_scan_report_matches_the_contract_and_is_sorted():
    root = os.path.join(os.path.dirname(__file__), "..", "fixtures", "auklet_survey")
    rel = os.path.relpath(root)
    result = scan([rel], Config(jobs=1))
    doc = json.loads(render(result))
    jsonschema.validate(doc, SCHEMA)
    keys = [(f["path"], f["line"], f["column"], f["rule"]) for f in doc["findings"]]
    assert keys == sorted(keys) and len(keys) >= 10
    assert all(f["path"].startswith(rel) for f in doc["findings"])  # paths as given: relative stays relative
    assert doc["summary"] == {"files": result.files, "findings": len(doc["findings"]), "problems": 0}
    assert {f["fix"]["kind"] for f in doc["findings"] if f["fix"]} == {"auto", "review"}


def test_problems_appear_in_the_report_with_the_path_as_given(tmp_path):
    (tmp_path / "bad.py").write_text("def f(:\n")
    doc = json.loads(render(scan([str(tmp_path)], Config(jobs=1))))
    jsonschema.validate(doc, SCHEMA)
    assert [p["path"] for p in doc["problems"]] == [str(tmp_path / "bad.py")]
    assert doc["summary"]["problems"] == 1
