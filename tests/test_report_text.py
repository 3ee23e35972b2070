"""The text report's closing summary, and the counts it shares with the HTML report."""
from __future__ import annotations

from reportutil import scan_legacy

from nanproof.model import Edit, Finding, Fix, ScanResult, Span
from nanproof.report import text as text_report
from nanproof.report.summary import common_root, folder_of, summarise


def _finding(path: str, rule: str = "softmax-unshifted", fix: str | None = "auto") -> Finding:
    span = Span(2, 5, 2, 9)
    made = Fix(fix, "new", (Edit(span, "new"),)) if fix else None
    return Finding(rule, "error", path, span, "message", fix=made)


def _summary_lines(result: ScanResult) -> list[str]:
    out = text_report.render(result, sources={})
    head = next(i for i, line in enumerate(out.splitlines()) if " scanned" in line)
    return out.splitlines()[head:]


def test_one_file_run_keeps_a_short_summary():
    result = ScanResult(1, (_finding("train.py"),), ())
    assert _summary_lines(result) == [
        "1 finding in 1 file scanned (1 fixable with `nanproof fix`):",
        "  softmax-unshifted  1",
    ]


def test_clean_run_is_one_line():
    assert _summary_lines(ScanResult(3, (), ())) == ["0 findings in 3 files scanned."]


def test_legacy_scan_counts_per_folder_top_files_and_fixable(tmp_path, monkeypatch):
    result = scan_legacy(tmp_path, monkeypatch)
    lines = _summary_lines(result)
    # Counted here independently of the report, from the findings themselves.
    per_folder = {}
    for f in result.findings:
        folder = "/".join(f.path.split("/")[:2]) + "/"
        per_folder[folder] = per_folder.get(folder, 0) + 1
    assert len(per_folder) == 2
    start = lines.index("  by folder:")
    shown = dict(line.split() for line in lines[start + 1 : start + 3])
    assert {k: int(v) for k, v in shown.items()} == per_folder
    auto = sum(1 for f in result.findings if f.fix is not None and f.fix.kind == "auto")
    assert f"({auto} fixable with `nanproof fix`)" in lines[0]
    assert "1 file could not be analysed" in lines[0]
    assert "  files with most findings:" in lines


def test_top_files_lists_five_and_counts_the_rest():
    counts = {"a/x.py": 4, "a/y.py": 3, "b/z.py": 3, "b/w.py": 2, "c/v.py": 2, "c/u.py": 1, "d/t.py": 1}
    findings = tuple(_finding(p) for p, n in counts.items() for _ in range(n))
    lines = _summary_lines(ScanResult(9, findings, ()))
    start = lines.index("  files with most findings:")
    # Most findings first, ties by path.
    assert [line.split() for line in lines[start + 1 : start + 6]] == [
        ["a/x.py", "4"], ["a/y.py", "3"], ["b/z.py", "3"], ["b/w.py", "2"], ["c/v.py", "2"],
    ]
    assert lines[start + 6] == "    ... and 2 more files"


def test_many_folders_are_cut_at_ten():
    findings = tuple(_finding(f"repo/f{k:02d}/m{i}.py") for k in range(13) for i in range(13 - k))
    lines = _summary_lines(ScanResult(100, findings, ()))
    start = lines.index("  by folder:")
    assert lines[start + 1].split() == ["repo/f00/", "13"]
    assert lines[start + text_report.FOLDERS + 1] == "    ... and 3 more folders"


def test_review_fixes_and_unfixable_findings_are_counted_apart():
    findings = (_finding("a/x.py"), _finding("a/y.py", fix="review"), _finding("b/z.py", fix=None))
    s = summarise(ScanResult(3, findings, ()))
    assert (s.auto_fixable, s.review_fixable, s.not_fixable) == (1, 1, 1)
    head = _summary_lines(ScanResult(3, findings, ()))[0]
    assert "1 fixable with `nanproof fix`, 1 more with `--include-review`" in head


def test_top_level_folder_is_taken_below_the_common_root():
    paths = ["legacy/io/a.py", "legacy/train/deep/b.py", "legacy/c.py"]
    root = common_root(paths)
    assert root == ["legacy"]
    assert [folder_of(p, root) for p in paths] == ["legacy/io/", "legacy/train/", "legacy/ (top level)"]


def test_folders_of_several_roots_and_absolute_paths_stay_apart():
    assert common_root(["src/a.py", "tests/b.py"]) == []
    assert folder_of("src/pkg/a.py", []) == "src/"
    root = common_root(["/abs/x/a.py", "/abs/y/b.py"])
    assert folder_of("/abs/x/a.py", root) == "/abs/x/"
    # "./" and doubled separators name the same folder.
    assert folder_of("./src//a.py", []) == folder_of("src/a.py", []) == "src/"


def test_excerpt_line_numbers_survive_form_feeds(tmp_path):
    # Python's tokenizer treats a form feed as white space, not as a line break
    # (Python Language Reference, 2.1.9); str.splitlines would split there.
    path = tmp_path / "ff.py"
    path.write_text("x = 1\n\x0c\ny = 2\nz = 3\n", encoding="utf-8")
    f = Finding("softmax-unshifted", "error", str(path), Span(4, 1, 4, 6), "m")
    out = text_report.render(ScanResult(1, (f,), ()), sources={})
    assert "     4 | z = 3" in out
