"""The text report: GNU ``path:line:column: severity: message [rule-id]`` lines, the
source line with the span marked, the rewrite, and a closing summary."""
from __future__ import annotations

import io
from collections import Counter

from ..model import Finding, ScanResult
from ..read import ReadError, read_source

_STYLE = {"error": "bold red", "warning": "yellow", "note": "cyan"}


def _source_lines(path: str, cache: dict) -> list[str]:
    if path not in cache:
        try:
            cache[path] = read_source(path).text.splitlines() if path != "-" else []
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


def render(result: ScanResult, color: bool = False, sources: dict | None = None, **_) -> str:
    from rich.console import Console
    from rich.markup import escape

    out = io.StringIO()
    console = Console(file=out, force_terminal=color, no_color=not color, highlight=False, soft_wrap=True, width=200)
    cache: dict = sources if sources is not None else {}
    for f in result.findings:
        head = f"{f.path}:{f.span.line}:{f.span.column}: "
        console.print(
            f"[bold]{escape(head)}[/][{_STYLE.get(f.severity, '')}]{f.severity}[/]: {escape(f.message)} [dim]\\[{f.rule}][/]"
        )
        for line in _excerpt(f, _source_lines(f.path, cache)):
            console.print(escape(line), style="dim" if "^" not in line else "red")
        if f.fix is not None:
            console.print(f"       [green]fix ({f.fix.kind}):[/] {escape(f.fix.replacement)}")
        elif f.suggestion:
            console.print(f"       [green]suggested:[/] {escape(f.suggestion)}")
        console.print()
    for p in result.problems:
        console.print(f"[bold]{escape(p.path)}[/]: [magenta]problem[/]: {escape(p.message)}")
    console.print(_summary(result))
    return out.getvalue()


def _summary(result: ScanResult) -> str:
    per_rule = Counter(f.rule for f in result.findings)
    fixable = sum(1 for f in result.findings if f.fix is not None and f.fix.kind == "auto")
    lines = []
    if per_rule:
        width = max(len(r) for r in per_rule)
        for rule, n in sorted(per_rule.items(), key=lambda kv: (-kv[1], kv[0])):
            lines.append(f"  {rule:<{width}}  {n}")
    files = f"{result.files} file{'s' if result.files != 1 else ''} scanned"
    total = len(result.findings)
    head = f"{total} finding{'s' if total != 1 else ''} in {files}"
    if total:
        head += f" ({fixable} fixable with `nanproof fix`)"
    if result.problems:
        head += f"; {len(result.problems)} file{'s' if len(result.problems) != 1 else ''} could not be analysed"
    return "\n".join([head + (":" if lines else "."), *lines])
