"""Applying one round of fixes to source text, and the position bookkeeping around it.

A finding's fix is a list of edits of three shapes:

- an expression: the span of exactly one expression node, replaced by an expression;
- an insertion of whole lines at column 1 (an import, from ``rewrite.import_edit``);
- a deletion of whole lines (column 1 of line L to column 1 of line L2, empty text).

(Text inserted inside a line, such as a keyword argument, is folded into a replacement
of the finding's expression: ``edits_of``.)

Expressions are replaced through libcst, which finds the node whose range is the span
and replaces only that node, keeping the parentheses around it; every other byte of the
module comes back from libcst's own round trip. Whole-line edits are spliced as text:
they sit between statements, where no expression node owns the position, and a
statement-level libcst edit would re-render the blank lines and comments next to it.

Positions inside this module are offsets in code points into the text; lines break at
``\\r\\n``, ``\\r`` and ``\\n`` exactly as Python's tokenizer counts them.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Iterable

from .model import Edit, Finding, Span

_LINE_BREAK = re.compile(r"\r\n|\r|\n")


class Unsafe(Exception):
    """A fix that cannot be applied safely; the message says why in one line."""


class Text:
    """Source text with its line starts: 1-based (line, column) <-> offsets."""

    def __init__(self, text: str) -> None:
        self.text = text
        self.starts = [0] + [m.end() for m in _LINE_BREAK.finditer(text)]

    def offset(self, line: int, column: int) -> int:
        if not 1 <= line <= len(self.starts):
            raise Unsafe(f"an edit points at line {line}, past the end of the file")
        start = self.starts[line - 1]
        end = self.starts[line] if line < len(self.starts) else len(self.text)
        if not 1 <= column <= end - start + 1:
            raise Unsafe(f"an edit points at column {column} of line {line}, past its end")
        return start + column - 1

    def position(self, offset: int) -> tuple[int, int]:
        from bisect import bisect_right

        line = bisect_right(self.starts, offset)
        return line, offset - self.starts[line - 1] + 1

    def span(self, start: int, end: int) -> Span:
        return Span(*self.position(start), *self.position(end))

    def node_offsets(self, node) -> tuple[int, int]:
        """Offsets of an ``ast`` node, whose columns count UTF-8 bytes."""
        return self._ast(node.lineno, node.col_offset), self._ast(node.end_lineno, node.end_col_offset)

    def _ast(self, line: int, byte_col: int) -> int:
        start = self.starts[line - 1]
        end = self.starts[line] if line < len(self.starts) else len(self.text)
        head = self.text[start:end]
        return start + (byte_col if head.isascii() else len(head.encode("utf-8")[:byte_col].decode("utf-8", "replace")))


@dataclass(frozen=True)
class Placed:
    """An edit placed in a text: old region [start, end), its new region after the round."""

    start: int
    end: int
    text: str
    expression: bool
    span: Span  # the edit's own span, as libcst needs it
    new_start: int = 0
    new_end: int = 0


def whole_lines(edit: Edit) -> bool:
    s = edit.span
    return s.column == 1 and s.end_column == 1 and (edit.text == "" or edit.text.endswith("\n"))


def _overlap(a: Edit, b: Edit) -> bool:
    if a == b:  # the same import wanted by two findings is applied once
        return False
    a0, a1 = (a.span.line, a.span.column), (a.span.end_line, a.span.end_column)
    b0, b1 = (b.span.line, b.span.column), (b.span.end_line, b.span.end_column)
    if a0 == a1 and b0 == b1:
        return False  # two insertions at one place both go in, in order
    if a0 == a1:
        return b0 < a0 < b1
    if b0 == b1:
        return a0 < b0 < a1
    return a0 < b1 and b0 < a1


def _insertion(e: Edit) -> bool:
    s = e.span
    return (s.line, s.column) == (s.end_line, s.end_column) and not whole_lines(e)


def edits_of(text: Text, f: Finding) -> tuple[Edit, ...]:
    """The edits to apply for a finding. Text inserted inside a line (a keyword after
    the last argument) belongs to no expression node of its own: such a fix is applied
    as one replacement of the finding's expression, with its edits made in it."""
    edits = f.fix.edits
    inside = sorted((e for e in edits if not whole_lines(e) and f.span.contains(e.span)), key=lambda e: e.span)
    if not any(_insertion(e) for e in inside) or any(_overlap(a, b) for a, b in zip(inside, inside[1:])):
        return edits
    start = text.offset(f.span.line, f.span.column)
    parts, pos = [], start
    for e in inside:
        at = text.offset(e.span.line, e.span.column)
        parts += [text.text[pos:at], e.text]
        pos = text.offset(e.span.end_line, e.span.end_column)
    parts.append(text.text[pos : text.offset(f.span.end_line, f.span.end_column)])
    return (Edit(f.span, "".join(parts)), *(e for e in edits if e not in inside))


def choose(findings: Iterable[Finding], text: Text) -> list[tuple[Finding, tuple[Edit, ...]]]:
    """The fixes of one round, with their edits: outermost first (a rewrite of the
    whole usually accounts for the parts), then in reading order; a fix any of whose
    edits overlaps an edit already chosen waits for the next round, when the file has
    been analysed again."""
    order = sorted(findings, key=lambda f: (f.span.line, f.span.column, -f.span.end_line, -f.span.end_column, f.rule))
    chosen: list[tuple[Finding, tuple[Edit, ...]]] = []
    taken: list[Edit] = []
    for f in order:
        edits = edits_of(text, f)
        if any(_overlap(e, t) for e in edits for t in taken):
            continue
        chosen.append((f, edits))
        taken.extend(edits)
    return chosen


def place(text: Text, edit_lists: Iterable[tuple[Edit, ...]], newline: str) -> list[Placed]:
    """Offsets of every edit, once each, sorted; replacement text in the file's newline
    style (a CRLF file stays CRLF)."""
    seen: dict[Edit, None] = {}
    for edits in edit_lists:
        for e in edits:
            seen.setdefault(e)
    placed = []
    for e in seen:
        body = e.text.replace("\r\n", "\n").replace("\n", newline)
        start = text.offset(e.span.line, e.span.column)
        end = text.offset(e.span.end_line, e.span.end_column)
        if end < start:
            raise Unsafe(f"an edit at line {e.span.line} ends before it starts")
        placed.append(Placed(start, end, body, not whole_lines(e), e.span))
    placed.sort(key=lambda p: (p.start, p.end))
    for a, b in zip(placed, placed[1:]):
        if b.start < a.end or (a.start == a.end == b.start == b.end and a.expression):
            raise Unsafe(f"two edits overlap at line {b.span.line}")
    # New regions: each edit moves by what the edits before it added or removed.
    out, delta = [], 0
    for p in placed:
        new_start = p.start + delta
        out.append(Placed(p.start, p.end, p.text, p.expression, p.span, new_start, new_start + len(p.text)))
        delta += len(p.text) - (p.end - p.start)
    return out


def apply(text: str, placed: list[Placed]) -> str:
    """The text after the round: expressions through libcst, then whole lines spliced."""
    exprs = [p for p in placed if p.expression]
    out = _replace_expressions(text, exprs) if exprs else text
    expected = _splice(text, exprs)
    if out != expected:
        # libcst round-trips unchanged code byte for byte; if that ever fails, the
        # formatting promise is broken, so stop rather than write something else.
        raise Unsafe("the expression rewrite changed text outside the edited spans")
    shift, lines = 0, []
    for p in placed:
        if p.expression:
            shift += len(p.text) - (p.end - p.start)
        else:
            lines.append(Placed(p.start + shift, p.end + shift, p.text, False, p.span))
    return _splice(out, lines)


def _splice(text: str, placed: list[Placed]) -> str:
    parts, pos = [], 0
    for p in placed:  # sorted, not overlapping
        parts.append(text[pos : p.start])
        parts.append(p.text)
        pos = p.end
    parts.append(text[pos:])
    return "".join(parts)


def _replace_expressions(text: str, exprs: list[Placed]) -> str:
    import libcst as cst  # lazily: libcst costs ~0.2 s at import (measurements.md)
    from libcst.metadata import MetadataWrapper, PositionProvider

    try:
        module = cst.parse_module(text)
    except (cst.ParserSyntaxError, RecursionError) as e:
        raise Unsafe(f"libcst cannot parse the file: {str(e).splitlines()[0]}") from None
    wanted = {}
    for p in exprs:
        try:
            wanted[p.span] = cst.parse_expression(p.text)
        except cst.ParserSyntaxError:
            raise Unsafe(f"the rewrite for line {p.span.line} is not an expression: {p.text!r}") from None
    try:
        wrapper = MetadataWrapper(module, unsafe_skip_copy=True)
        replacer = _replacer(wrapper.resolve(PositionProvider), wanted)
        out = wrapper.module.visit(replacer)
    except RecursionError:  # libcst recurses per nesting level (measurements.md)
        raise Unsafe("the code is nested too deeply for libcst to rewrite") from None
    missing = sorted(set(wanted) - replacer.done)
    if missing:
        s = missing[0]
        raise Unsafe(f"the edit at {s.line}:{s.column} does not cover exactly one expression")
    return out.code


def _replacer(ranges, wanted):
    """A transformer (its base class needs libcst, hence built here)."""
    import libcst as cst

    class Replace(cst.CSTTransformer):
        """Replace the outermost expression node whose range is a wanted span."""

        def __init__(self) -> None:
            super().__init__()
            self.done: set[Span] = set()
            self.chosen: dict[int, object] = {}

        def on_visit(self, node) -> bool:
            r = ranges.get(node) if isinstance(node, cst.BaseExpression) else None
            if r is None:
                return True
            # libcst: 1-based lines, 0-based code-point columns, end exclusive.
            key = Span(r.start.line, r.start.column + 1, r.end.line, r.end.column + 1)
            if key in wanted and key not in self.done:
                self.done.add(key)
                self.chosen[id(node)] = wanted[key]
                return False
            return True

        def on_leave(self, original, updated):
            new = self.chosen.get(id(original))
            if new is None:
                return updated
            # The parentheses around the old node stay where they were.
            return new.with_changes(lpar=[*original.lpar, *new.lpar], rpar=[*new.rpar, *original.rpar])

    return Replace()


# ---------------------------------------------------------------------------------------
# Where things went: mapping positions through a round
# ---------------------------------------------------------------------------------------
def forward(placed: list[Placed], offset: int, end: bool = False) -> int:
    """Where an old position lies after the round. A position inside an edited region
    moves to that region's new start (or end, for the end of a span)."""
    delta = 0
    for p in placed:
        if p.start < offset < p.end:
            return p.new_end if end else p.new_start
        if p.end < offset or (p.end == offset and (p.start < p.end or not end)):
            delta = p.new_end - p.end
    return offset + delta


def carry_lines(origin: list[int | None], old: Text, new: Text, placed: list[Placed]) -> list[int | None]:
    """For each line of the new text, the line of the original file it still is, or
    None where the fixes wrote it."""
    out: list[int | None] = []
    for n, start in enumerate(new.starts):
        end = new.starts[n + 1] if n + 1 < len(new.starts) else len(new.text)
        if any(p.new_start < max(end, start + 1) and start < p.new_end for p in placed):
            out.append(None)
            continue
        delta = sum(len(p.text) - (p.end - p.start) for p in placed if p.new_end <= start)
        line, _ = old.position(start - delta)
        out.append(origin[line - 1] if line - 1 < len(origin) else None)
    return out
