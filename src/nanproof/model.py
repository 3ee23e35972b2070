"""Plain, immutable values that flow through the pipeline.

Every stage hands these on; none of them holds a syntax tree, so a worker process can
return them cheaply (they pickle as tuples of strings and ints).
"""
from __future__ import annotations

from dataclasses import dataclass, field

SEVERITIES = ("error", "warning", "note")
FIX_KINDS = ("auto", "review")


@dataclass(frozen=True, order=True)
class Span:
    """A region of source: 1-based lines, 1-based code-point columns, end exclusive."""

    line: int
    column: int
    end_line: int
    end_column: int

    def contains(self, other: "Span") -> bool:
        return (self.line, self.column) <= (other.line, other.column) and (
            other.end_line,
            other.end_column,
        ) <= (self.end_line, self.end_column)

    def lines(self) -> range:
        return range(self.line, self.end_line + 1)


@dataclass(frozen=True)
class Edit:
    """Replace the source text in ``span`` by ``text``."""

    span: Span
    text: str


@dataclass(frozen=True)
class Fix:
    """A rewrite the tool can apply: ``auto`` (exactly equal in exact arithmetic, no new
    import) or ``review`` (needs a person's look). ``replacement`` is the rewritten
    expression at the finding's span, for display; ``edits`` are what ``fix`` applies."""

    kind: str
    replacement: str
    edits: tuple[Edit, ...]

    def __post_init__(self) -> None:
        if self.kind not in FIX_KINDS:
            raise ValueError(f"unknown fix kind {self.kind!r}")
        if not self.edits:
            raise ValueError("a fix needs at least one edit")


@dataclass(frozen=True)
class Finding:
    rule: str
    severity: str
    path: str
    span: Span
    message: str
    fix: Fix | None = None
    # Suggested code where no safe edit exists (always shown; never applied).
    suggestion: str | None = None
    # Spans of the sub-patterns this finding accounts for; a more general rule's finding
    # inside one of them is dropped ("one finding per problem").
    covers: tuple[Span, ...] = field(default=(), compare=False)
    # First line of the statement holding the finding, for suppression comments.
    statement_line: int = field(default=0, compare=False)

    def sort_key(self) -> tuple:
        return (self.path, self.span.line, self.span.column, self.rule)


@dataclass(frozen=True)
class Problem:
    """A file that could not be analysed, with a one-line reason."""

    path: str
    message: str


@dataclass(frozen=True)
class FileResult:
    path: str
    findings: tuple[Finding, ...] = ()
    problem: Problem | None = None
    # For following values across files (values.summaries.file_links): what this file's
    # functions and classes return (name, "function" | "instance", kind, items, line),
    # the names it imports from non-framework modules, and what its calls to imported
    # functions pass (name, module spec, ((position | keyword, kind), ...), path, line).
    exports: tuple[tuple, ...] = ()
    imports: tuple[str, ...] = ()
    passes: tuple[tuple, ...] = ()


@dataclass(frozen=True)
class ScanResult:
    files: int
    findings: tuple[Finding, ...]
    problems: tuple[Problem, ...]

    @property
    def exit_code(self) -> int:
        if self.problems:
            return 3
        return 1 if self.findings else 0
