"""The text report: GNU ``path:line:column: severity: message [rule-id]`` lines, the
source line with the span marked, the rewrite, and a closing summary."""
from __future__ import annotations

import io

from ..model import Finding, ScanResult
from ..read import ReadError, physical_lines, read_source
from .summary import Summary, fold, plural, summarise

_STYLE = {"error": "bold red", "warning": "yellow", "note": "cyan"}
FOLDERS = 10  # folder lines in the summary; the rest are counted in one line


def source_lines(path: str, cache: dict) -> list[str]:
    """The lines of PATH as analysed (empty when it cannot be read again), cached."""
    if path not in cache:
        try:
            text = read_source(path).text if path != "-" else ""
            cache[path] = [line.rstrip("\r\n") for line in physical_lines(text)]
        except (ReadError, OSError):
            cache[path] = []
    return cache[path]


def _excerpt(f: Finding, lines: list[str]) -> list[str]:
    if not (0 < f.span.line <= len(lines)):
        return []
    text = lines[f.span.line - 1].expandtabs(1)
    start = f.span.column - 1
    end = f.span.end_column - 1 if f.span.end_line == f.span.line else len(text)
    gutter = f"{f.span.line:>6} | "
    return [gutter + text, " " * 6 + " | " + " " * start + "^" * max(1, end - start)]


def _report_lines(result: ScanResult, cache: dict):
    """Each line of the report as (text, rich style) segments."""
    for f in result.findings:
        yield [(f"{f.path}:{f.span.line}:{f.span.column}: ", "bold"), (f.severity, _STYLE.get(f.severity, "")),
               (f": {f.message} ", ""), (f"[{f.rule}]", "dim")]
        for line in _excerpt(f, source_lines(f.path, cache)):
            yield [(line, "red" if "^" in line else "dim")]
        if f.fix is not None:
            yield [("       ", ""), (f"fix ({f.fix.kind}):", "green"), (f" {f.fix.replacement}", "")]
        elif f.suggestion:
            yield [("       ", ""), ("suggested:", "green"), (f" {f.suggestion}", "")]
        yield []
    for p in result.problems:
        yield [(p.path, "bold"), (": ", ""), ("problem", "magenta"), (f": {p.message}", "")]
    for line in _summary(result).split("\n"):
        yield [(line, "")]


def render(result: ScanResult, color: bool = False, sources: dict | None = None, **_) -> str:
    lines = list(_report_lines(result, sources if sources is not None else {}))
    if not color:  # plain text needs no rich (its import costs ~35 ms per hook run)
        return "".join("".join(text for text, _ in segments) + "\n" for segments in lines)
    from rich.console import Console
    from rich.text import Text

    out = io.StringIO()
    console = Console(file=out, force_terminal=True, highlight=False, soft_wrap=True, width=200)
    for segments in lines:
        console.print(Text.assemble(*segments))
    return out.getvalue()


def _table(title: str | None, rows, indent: str = "  ") -> list[str]:
    if not rows:
        return []
    width = max(len(key) for key, _ in rows)
    lines = [f"{indent}{key:<{width}}  {n}" for key, n in rows]
    return ([f"  {title}:"] if title else []) + lines


def _more(rest: int, noun: str) -> list[str]:
    return [f"    ... and {plural(rest, 'more ' + noun)}"] if rest > 0 else []


def _headline(s: Summary) -> str:
    head = f"{plural(s.findings, 'finding')} in {plural(s.files, 'file')} scanned"
    if s.findings:
        head += f" ({s.auto_fixable} fixable with `nanproof fix`"
        if s.review_fixable:
            head += f", {s.review_fixable} more with `--include-review`"
        head += ")"
    if s.problems:
        head += f"; {plural(s.problems, 'file')} could not be analysed"
    return head


def _summary(result: ScanResult) -> str:
    """One or two lines when the findings are in one file (a pre-commit run); for a
    scan with findings spread over files, also per folder and the files with most."""
    s = summarise(result)
    if s.files_with_findings <= 1:
        lines = _table(None, s.per_rule)
    else:
        lines = _table("by rule", s.per_rule, "    ")
        if len(s.per_folder) > 1:
            folders, rest, _ = fold(s.per_folder, FOLDERS)
            lines += _table("by folder", folders, "    ") + _more(rest, "folder")
        lines += _table("files with most findings", s.top_files, "    ")
        lines += _more(s.files_with_findings - len(s.top_files), "file")
    return "\n".join([_headline(s) + (":" if lines else "."), *lines])
