"""The HTML report: complete, escaped, self-contained, and rendered by a real browser."""
from __future__ import annotations

import shutil
import struct
import subprocess
import zlib
from html.parser import HTMLParser

import pytest
from reportutil import constructed, scan_legacy

from nanproof.model import Edit, Finding, Fix, ScanResult, Span
from nanproof.report import html as html_report

# HTML Living Standard, "void elements": they have no end tag.
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}
# Attributes through which a page loads or links to a resource.
URL_ATTRS = {"src", "href", "xlink:href", "srcset", "action", "poster", "data", "background"}


class Page(HTMLParser):
    """Tags, attributes and text of a page, with a check that every element that is
    opened is closed in order (html.parser itself accepts anything)."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.classes: list[str] = []
        self.errors: list[str] = []
        self.tags: list[tuple[str, dict]] = []
        self.texts: list[str] = []
        self.marks: list[str] = []
        self.tiles: dict[str, str] = {}  # header tile label -> value
        self._value = ""
        self.feed(text)
        self.close()

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID:
            self.stack.append(tag)
            self.classes.append(dict(attrs).get("class") or "")

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()
            self.classes.pop()

    def handle_data(self, data):
        self.texts.append(data)
        if self.stack and self.stack[-1] == "mark":
            self.marks.append(data)
        if len(self.classes) > 1 and self.classes[-2].startswith("tile"):
            if self.stack[-1] == "b":
                self._value = data
            else:
                self.tiles[data] = self._value

    @property
    def text(self) -> str:
        return "".join(self.texts)


@pytest.fixture
def legacy(tmp_path, monkeypatch):
    return scan_legacy(tmp_path, monkeypatch)


def test_page_is_balanced_and_names_every_finding(legacy):
    assert legacy.findings
    page = Page(html_report.render(legacy))
    assert page.errors == [] and page.stack == []
    for f in legacy.findings:
        assert f"{f.path}:{f.span.line}:{f.span.column}" in page.text
    rules_shown = [t for t in page.texts if t in {f.rule for f in legacy.findings}]
    assert sorted(set(rules_shown)) == sorted({f.rule for f in legacy.findings})


def test_every_finding_has_its_own_block_with_rule_and_location(legacy):
    page = Page(html_report.render(legacy))
    blocks = [a for tag, a in page.tags if tag == "div" and a.get("class", "").startswith("finding ")]
    assert len(blocks) == len(legacy.findings)


def test_marked_text_is_the_flagged_span(legacy, tmp_path):
    page = Page(html_report.render(legacy))
    expected = []
    for f in legacy.findings:
        line = (tmp_path / f.path).read_text().splitlines()[f.span.line - 1]
        expected.append(line[f.span.column - 1 : f.span.end_column - 1])
    assert page.marks == expected


def test_no_external_resources_or_scripts(legacy):
    text = html_report.render(legacy)
    page = Page(text)
    for tag, attrs in page.tags:
        assert tag not in {"script", "link", "iframe", "object", "embed", "img"}, tag
        for name, value in attrs.items():
            if name in URL_ATTRS:
                assert value.startswith("#"), f"<{tag} {name}={value!r}>"
    style = "".join(t for t in page.texts if "{" in t)
    assert "@import" not in style and "url(" not in style


def test_header_counts_and_fixable(legacy):
    page = Page(html_report.render(legacy))
    auto = sum(1 for f in legacy.findings if f.fix is not None and f.fix.kind == "auto")
    share = round(100 * auto / len(legacy.findings))
    assert page.tiles["files scanned"] == str(legacy.files)
    assert page.tiles[f"auto-fixable \u00b7 {share}%"] == str(auto)
    assert page.tiles["files not analysed"] == "1" and "legacy/broken.py" in page.text


def test_charts_have_one_bar_per_rule_and_per_folder(legacy):
    page = Page(html_report.render(legacy))
    svgs = [a for tag, a in page.tags if tag == "svg"]
    assert [s["aria-label"] for s in svgs] == ["Findings per rule", "Findings per top-level folder"]
    rects = [a for tag, a in page.tags if tag == "rect"]
    rules = {f.rule for f in legacy.findings}
    folders = {f.path.split("/")[1] for f in legacy.findings}  # legacy/<folder>/...
    assert len(rects) == len(rules) + len(folders)


def test_long_tails_are_summed_below_the_chart_not_drawn_as_a_bar():
    # 15 folders with 15, 14, ..., 1 findings: 12 bars, then 3 folders with 3+2+1.
    findings = tuple(
        Finding("softmax-unshifted", "error", f"repo/f{k:02d}/m{i}.py", Span(1, 1, 1, 2), "m")
        for k in range(1, 16) for i in range(16 - k)
    )
    page = Page(html_report.render(ScanResult(120, findings, ())))
    bars = [a for tag, a in page.tags if tag == "rect"]
    assert len(bars) == 1 + html_report.CHART_ROWS  # one rule, twelve folders
    assert "and 3 other folders with 6 findings" in page.text
    # Bar labels are relative to the scanned root, which the page title names.
    assert "f01/" in page.texts and "repo/f01/" not in page.texts


def test_text_is_escaped():
    nasty = ScanResult(1, (Finding("softmax-unshifted", "error", "a<b>.py", Span(1, 1, 1, 2), "<script>alert('x')</script> & co", suggestion="x < y"),), ())
    text = html_report.render(nasty)
    page = Page(text)
    assert not any(tag == "script" for tag, _ in page.tags)
    assert "<script>alert" not in text and "&lt;script&gt;alert" in text
    assert "a<b>.py:1:1" in page.text and "x < y" in page.text


def test_review_fix_and_suggestion_are_shown_with_their_kind():
    page = Page(html_report.render(constructed("rule-a", "rule-b")))
    assert "proposed rewrite (review)" in page.text and "torch.log_softmax(z, dim=-1)" in page.text
    assert "suggestion" in page.text and "use logsumexp" in page.text
    # The sources do not exist here: the report says so instead of failing.
    assert "(source not available)" in page.text


def test_rewrite_away_from_the_flagged_line_names_its_line():
    edit = Edit(Span(13, 9, 13, 23), "np.exp(s - s.max())")
    away = Finding("softmax-unshifted", "error", "m.py", Span(14, 9, 14, 30), "m", fix=Fix("auto", "e = np.exp(s - s.max())", (edit,)))
    here = Finding("softmax-unshifted", "error", "m.py", Span(20, 9, 20, 30), "m", fix=Fix("auto", "x", (Edit(Span(20, 9, 20, 12), "y"),)))
    page = Page(html_report.render(ScanResult(1, (away, here), ())))
    labels = [t for t in page.texts if t.startswith("proposed rewrite")]
    assert labels == ["proposed rewrite (auto) on line 13", "proposed rewrite (auto)"]


def test_empty_scan_renders():
    page = Page(html_report.render(ScanResult(4, (), ())))
    assert page.errors == [] and "No findings." in page.text


def _png_size(data: bytes) -> tuple[int, int]:
    # PNG specification (W3C, 2003), sections 5.2-5.3 and 11.2.2: 8-byte signature,
    # then the IHDR chunk whose data starts with width and height as big-endian uint32.
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def _idat(data: bytes) -> bytes:
    out, pos = b"", 8
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos : pos + 4])
        if data[pos + 4 : pos + 8] == b"IDAT":
            out += data[pos + 8 : pos + 8 + length]
        pos += 12 + length
    return zlib.decompress(out)


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("chromium") is None, reason="no chromium binary installed")
def test_headless_chromium_renders_the_report(legacy, tmp_path):
    page = tmp_path / "report.html"
    page.write_text(html_report.render(legacy), encoding="utf-8")
    shot = tmp_path / "shot.png"
    cmd = [
        shutil.which("chromium"), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1200,2000", page.as_uri(),
    ]
    subprocess.run(cmd, capture_output=True, timeout=120)
    data = shot.read_bytes()
    assert _png_size(data) == (1200, 2000)
    # A blank page decodes to rows of nearly one byte value; a rendered report to many.
    assert len(set(_idat(data))) > 64
