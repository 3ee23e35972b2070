"""The HTML report: one self-contained page for people reading a scan of a whole code
base. No scripts and no network loads: the style sheet is inline and the charts are
SVG drawn here, so the file can be mailed, archived as a CI artifact or opened offline."""
from __future__ import annotations

from datetime import datetime, timezone
from html import escape

from .. import __version__
from ..model import Finding, ScanResult
from .summary import Summary, fold, plural, summarise
from .text import source_lines

CONTEXT = 2  # source lines shown above and below a finding
CHART_ROWS = 12  # bars per chart; the rest are folded into one "other" bar
TOP_FILES = 10
# Severity colours, shared by the chart bars and the style sheet.
_PALETTE = {"error": "#a8321f", "warning": "#a8641a", "note": "#3d5a98"}

_CSS = """
:root{--ink:#1f2430;--muted:#5d6475;--paper:#f6f4ef;--card:#fffdf8;--line:#e2ddd2;
--bar:#2f6f6a;--mark:#ffe3a3;--ok:#2f6f6a}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.5 system-ui,-apple-system,"Segoe UI",sans-serif}
header{background:var(--ink);color:#f6f4ef;padding:28px 40px 24px}
header h1{margin:0;font-size:22px;font-weight:600;letter-spacing:.01em}
header .meta{margin:4px 0 18px;color:#b9bdc8;font-size:13px}
.tiles{display:flex;flex-wrap:wrap;gap:12px}
.tile{background:#2c3342;border-radius:6px;padding:10px 16px;min-width:120px}
.tile b{display:block;font-size:26px;font-weight:600;line-height:1.2}
.tile span{font-size:12px;color:#b9bdc8;text-transform:uppercase;letter-spacing:.06em}
.tile.error b{color:#ff9c8a}.tile.fix b{color:#8fd6c9}
main{padding:8px 40px 40px;max-width:1280px}
h2{font-size:17px;margin:30px 0 10px;border-bottom:2px solid var(--line);padding-bottom:4px}
.charts{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}
.chart{background:var(--card);border:1px solid var(--line);border-radius:6px;padding:12px 16px}
.chart h3{margin:0 0 6px;font-size:14px;color:var(--muted);font-weight:600}
table{border-collapse:collapse;background:var(--card);border:1px solid var(--line)}
th,td{padding:6px 14px;text-align:left;border-bottom:1px solid var(--line);font-size:14px}
th{color:var(--muted);font-weight:600}td.n{text-align:right;font-variant-numeric:tabular-nums}
a{color:var(--bar)}
details.file{margin:10px 0;background:var(--card);border:1px solid var(--line);border-radius:6px}
details.file>summary{cursor:pointer;padding:8px 14px;font-weight:600;font-family:ui-monospace,Menlo,Consolas,monospace;font-size:14px}
.finding{border-top:1px solid var(--line);padding:10px 14px 12px;border-left:4px solid var(--line)}
.finding.error{border-left-color:var(--error)}.finding.warning{border-left-color:var(--warning)}.finding.note{border-left-color:var(--note)}
.fhead{display:flex;flex-wrap:wrap;gap:10px;align-items:baseline;font-size:13px}
.sev{font-weight:700;text-transform:uppercase;font-size:11px;letter-spacing:.08em}
.sev.error{color:var(--error)}.sev.warning{color:var(--warning)}.sev.note{color:var(--note)}
.loc,.rule{font-family:ui-monospace,Menlo,Consolas,monospace}
.rule{background:#ece8de;border-radius:4px;padding:0 6px}
.msg{margin:4px 0 8px}
pre{margin:0;font:13px/1.45 ui-monospace,Menlo,Consolas,monospace;tab-size:4;overflow-x:auto}
pre.src{background:#f1eee6;border-radius:4px;padding:6px 0}
pre.src .row{display:block;padding:0 10px}pre.src .row.hit{background:#fbf3dc}
pre.src .ln{display:inline-block;width:4.5em;color:#9a9384;user-select:none}
mark{background:var(--mark);color:inherit;border-bottom:2px solid var(--warning)}
.rewrite{margin-top:8px}.rewrite .label{font-size:12px;font-weight:600;color:var(--ok)}
.rewrite pre{background:#e7f1ee;border-radius:4px;padding:6px 10px;white-space:pre-wrap;overflow-wrap:anywhere}
.legend{font-size:12px;color:var(--muted);margin:0 0 6px}.legend i{display:inline-block;width:10px;height:10px;border-radius:2px;margin:0 4px 0 10px}
.rewrite .hint{font-size:12px;color:var(--muted)}
.empty{color:var(--muted)}
""" + ":root{" + ";".join(f"--{sev}:{color}" for sev, color in _PALETTE.items()) + "}"


def _tile(value, label: str, cls: str = "") -> str:
    return f'<div class="tile {cls}"><b>{escape(str(value))}</b><span>{escape(label)}</span></div>'


def _header(s: Summary, root: str) -> str:
    when = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    sev = dict(s.per_severity)
    share = f" \u00b7 {round(100 * s.auto_fixable / s.findings)}%" if s.findings else ""
    tiles = [
        _tile(s.files, "files scanned"),
        _tile(s.findings, f"findings in {plural(s.files_with_findings, 'file')}"),
        _tile(sev.get("error", 0), "errors", "error"),
        _tile(s.auto_fixable, f"auto-fixable{share}", "fix"),
        _tile(s.review_fixable, "fixes to review"),
        _tile(s.problems, "files not analysed", "error" if s.problems else ""),
    ]
    return (
        f"<header><h1>Numerical stability scan of {escape(root)}</h1>"
        f'<p class="meta">nanproof {escape(__version__)} &middot; {escape(when)}</p>'
        f'<div class="tiles">{"".join(tiles)}</div></header>'
    )


def _fit(label: str, chars: int) -> str:
    """LABEL cut in the middle to CHARS characters: both ends of a path say the most."""
    if len(label) <= chars:
        return label
    head = (chars - 1) // 2
    return label[:head] + "\u2026" + label[len(label) - (chars - 1 - head) :]


def _bar_chart(title: str, rows, colors: dict[str, str], noun: str, legend: str = "") -> str:
    """A horizontal bar chart: label, bar scaled to the largest count, the count; rows
    past CHART_ROWS are summed in a line below rather than drawn as one long bar."""
    if not rows:
        return ""
    rows, rest, rest_n = fold(rows, CHART_ROWS)
    label_w = min(260, 12 + 7 * max(len(k) for k, _ in rows))
    fits = (label_w - 12) // 7  # characters of a 12px monospace label that fit
    bar_w, row_h = 240, 24
    top = max(n for _, n in rows)
    parts = [f'<svg width="{label_w + bar_w + 50}" height="{row_h * len(rows) + 6}" role="img" aria-label="{escape(title)}">']
    for i, (key, n) in enumerate(rows):
        y = i * row_h + 3
        w = max(2, round(bar_w * n / top))
        parts.append(
            f"<g><title>{escape(key)}: {n}</title>"
            f'<text x="{label_w - 8}" y="{y + 16}" text-anchor="end" font-size="12" font-family="ui-monospace,Menlo,Consolas,monospace" fill="#1f2430">{escape(_fit(key, fits))}</text>'
            f'<rect x="{label_w}" y="{y + 3}" width="{w}" height="{row_h - 8}" rx="3" fill="{colors.get(key, "#2f6f6a")}"/>'
            f'<text x="{label_w + w + 6}" y="{y + 16}" font-size="12" fill="#5d6475">{n}</text></g>'
        )
    parts.append("</svg>")
    if rest:
        parts.append(f'<p class="legend">and {plural(rest, "other " + noun)} with {plural(rest_n, "finding")}</p>')
    return f'<div class="chart"><h3>{escape(title)}</h3>{legend}{"".join(parts)}</div>'


def _charts(result: ScanResult, s: Summary) -> str:
    if not s.findings:
        return ""
    # A rule's bar takes the colour of its severity (one severity per rule).
    colors = {f.rule: _PALETTE.get(f.severity, "#2f6f6a") for f in result.findings}
    shown = [sev for sev in _PALETTE if sev in dict(s.per_severity)]
    legend = '<p class="legend">' + "".join(f'<i style="background:{_PALETTE[sev]}"></i>{sev}' for sev in shown) + "</p>"
    by_rule = _bar_chart("Findings per rule", s.per_rule, colors, "rule", legend)
    # Folder labels below the common root, which the page title already names.
    folders = [(k[len(s.root) :] if s.root and k.startswith(s.root) else k, n) for k, n in s.per_folder]
    by_folder = _bar_chart("Findings per top-level folder", [(k or "(top level)", n) for k, n in folders], {}, "folder")
    return f'<h2>Where the findings are</h2><div class="charts">{by_rule}{by_folder}</div>'


def _top_files(result: ScanResult, s: Summary, anchors: dict[str, str]) -> str:
    if not s.top_files:
        return ""
    auto = {}
    for f in result.findings:
        auto[f.path] = auto.get(f.path, 0) + (f.fix is not None and f.fix.kind == "auto")
    rows = "".join(
        f'<tr><td class="loc"><a href="#{anchors[path]}">{escape(path)}</a></td><td class="n">{n}</td><td class="n">{auto[path]}</td></tr>'
        for path, n in s.top_files
    )
    head = "<tr><th>file</th><th>findings</th><th>auto-fixable</th></tr>"
    return f"<h2>Files with the most findings</h2><table>{head}{rows}</table>"


def _marked(text: str, start: int | None, end: int | None) -> str:
    """TEXT escaped, with code points [start, end) (0-based) inside <mark>."""
    if start is None:
        return escape(text)
    return escape(text[:start]) + "<mark>" + escape(text[start:end]) + "</mark>" + escape(text[end:])


def _excerpt(f: Finding, lines: list[str]) -> str:
    s = f.span
    if not (0 < s.line <= len(lines)):
        return '<p class="empty">(source not available)</p>'
    rows = []
    for n in range(max(1, s.line - CONTEXT), min(len(lines), s.end_line + CONTEXT) + 1):
        text = lines[n - 1]
        start = end = None
        if s.line <= n <= s.end_line:
            start = s.column - 1 if n == s.line else 0
            end = s.end_column - 1 if n == s.end_line else len(text)
        hit = " hit" if start is not None else ""
        rows.append(f'<span class="row{hit}"><span class="ln">{n}</span>{_marked(text, start, end)}</span>')
    return f'<pre class="src">{"".join(rows)}</pre>'


def _rewrite(f: Finding) -> str:
    if f.fix is not None:
        hint = {
            "auto": "applied by <code>nanproof fix</code>; equal in exact arithmetic",
            "review": "applied by <code>nanproof fix --include-review</code>; may change results, check it",
        }[f.fix.kind]
        label, code = f"proposed rewrite ({escape(f.fix.kind)})", f.fix.replacement
        # The rewrite may edit where the value was built, not the flagged line.
        if not any(f.span.contains(e.span) for e in f.fix.edits):
            label += " on line " + ", ".join(str(n) for n in sorted({e.span.line for e in f.fix.edits}))
    elif f.suggestion:
        label, code, hint = "suggestion", f.suggestion, "not applied automatically"
    else:
        return ""
    return (
        f'<div class="rewrite"><span class="label">{label}</span> <span class="hint">{hint}</span>'
        f"<pre>{escape(code)}</pre></div>"
    )


def _finding(f: Finding, lines: list[str]) -> str:
    loc = f"{f.path}:{f.span.line}:{f.span.column}"
    sev = escape(f.severity)
    return (
        f'<div class="finding {sev}"><div class="fhead"><span class="sev {sev}">{sev}</span>'
        f'<span class="loc">{escape(loc)}</span><span class="rule">{escape(f.rule)}</span></div>'
        f'<p class="msg">{escape(f.message)}</p>{_excerpt(f, lines)}{_rewrite(f)}</div>'
    )


def _findings(result: ScanResult, anchors: dict[str, str], sources: dict) -> str:
    if not result.findings:
        return '<h2>Findings</h2><p class="empty">No findings.</p>'
    by_file: dict[str, list[Finding]] = {}
    for f in result.findings:
        by_file.setdefault(f.path, []).append(f)
    # Open every file on a small report; on a large one the reader picks from the list.
    opened = " open" if len(result.findings) <= 200 else ""
    blocks = []
    for path, found in by_file.items():
        lines = source_lines(path, sources)
        body = "".join(_finding(f, lines) for f in found)
        blocks.append(
            f'<details class="file" id="{anchors[path]}"{opened}><summary>{escape(path)} '
            f"&middot; {plural(len(found), 'finding')}</summary>{body}</details>"
        )
    return "<h2>Findings</h2>" + "".join(blocks)


def _problems(result: ScanResult) -> str:
    if not result.problems:
        return ""
    rows = "".join(f'<tr><td class="loc">{escape(p.path)}</td><td>{escape(p.message)}</td></tr>' for p in result.problems)
    return f"<h2>Files that could not be analysed</h2><table><tr><th>file</th><th>reason</th></tr>{rows}</table>"


def render(result: ScanResult, sources: dict | None = None, **_) -> str:
    s = summarise(result, top=TOP_FILES)
    root = s.root or "the given paths"
    anchors = {path: f"file-{i}" for i, path in enumerate(dict.fromkeys(f.path for f in result.findings))}
    body = "".join((
        _header(s, root),
        "<main>",
        _charts(result, s),
        _top_files(result, s, anchors),
        _problems(result),
        _findings(result, anchors, sources if sources is not None else {}),
        "</main>",
    ))
    title = f"nanproof: {plural(s.findings, 'finding')} in {root}"
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{escape(title)}</title><style>{_CSS}</style></head><body>{body}</body></html>\n"
    )
