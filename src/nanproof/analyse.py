"""One file in, findings out: prefilter, parse, one walk for all rules, then the
decisions that apply to every rule (suppression comments, precedence, order).

``analyse_source`` never raises for a bad file: it returns a ``FileResult`` with a
``Problem``.
"""
from __future__ import annotations

import ast
import bisect
import gc
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Iterable

from .decisions import precedence, silenced, suppressions
from .values.bindings import Path, Ref, Scope, child_blocks, scope_for, statements_with_paths
from .values.summaries import file_links
from .model import Edit, FileResult, Finding, Fix, Problem, Span
from .read import physical_lines
from .registry import Rule

_PY2_HINTS = re.compile(r"^\s*(print\s+[\"'\w]|exec\s+[\"'\w]|except\s+\w+\s*,\s*\w+\s*:)", re.M)


@dataclass
class Hit:
    """What a rule's check yields: the node that completes the pattern and the message."""

    node: ast.AST
    message: str
    fix: Fix | None = None
    suggestion: str | None = None
    covers: tuple[ast.AST, ...] = ()
    severity: str | None = None  # a rule may raise or lower its default per finding


# What a function returning a softmax or a sigmoid must mention (anywhere in a word:
# log_softmax, nn.Sigmoid); tested as substrings first, which costs next to nothing.
LINK_WORDS = ("softmax", "Softmax", "sigmoid", "Sigmoid", "expit", "exp")
_LINK = re.compile(r"softmax|Softmax|sigmoid|Sigmoid|expit|exp\s*\(")


@lru_cache(maxsize=64)
def trigger_regex(triggers: tuple[str, ...]) -> re.Pattern:
    return re.compile(r"\b(?:" + "|".join(f"(?:{t})" for t in sorted(set(triggers))) + ")")


class Analysis:
    """State for analysing one parsed file."""

    def __init__(self, path: str, text: str, tree: ast.Module, project: dict | None) -> None:
        self.path = path
        self.text = text
        self.lines = physical_lines(text)
        self.tree = tree
        self.project = project or {}
        self.module = Scope(tree, None)
        self.module.cache["analysis"] = self
        self.module.cache["walrus"] = ":=" in text
        self.module.cache["scopes"] = {id(tree): self.module}

    def release(self) -> None:
        """Break the reference cycles of scopes, bindings and caches so the file's
        objects are freed at once rather than by the cyclic collector."""
        for scope in self.module.cache.get("scopes", {}).values():
            scope.cache.clear()
            scope._bindings = None
        self.module.cache.clear()

    # -- positions and text ------------------------------------------------------------
    def _col(self, line: int, byte_col: int) -> int:
        if line - 1 >= len(self.lines):
            return byte_col
        text = self.lines[line - 1]
        if text.isascii():
            return byte_col
        return len(text.encode("utf-8")[:byte_col].decode("utf-8", "replace"))

    def span(self, node: ast.AST) -> Span:
        return Span(
            node.lineno,
            self._col(node.lineno, node.col_offset) + 1,
            node.end_lineno,
            self._col(node.end_lineno, node.end_col_offset) + 1,
        )

    def segment(self, node: ast.AST) -> str:
        first, last = node.lineno - 1, node.end_lineno - 1
        if first == last:
            return self.lines[first].encode()[node.col_offset : node.end_col_offset].decode()
        parts = [self.lines[first].encode()[node.col_offset :].decode()]
        parts.extend(self.lines[first + 1 : last])
        parts.append(self.lines[last].encode()[: node.end_col_offset].decode())
        return "".join(parts)


@dataclass
class Context:
    """What a rule's check sees: the node, where it is, and helpers to describe it."""

    analysis: Analysis
    node: ast.AST
    scope: Scope
    path: Path
    stmt: ast.stmt

    def ref(self, node: ast.AST | None = None) -> Ref:
        return Ref(self.node if node is None else node, self.scope, self.path)

    def text(self, node: ast.AST) -> str:
        return self.analysis.segment(node)

    def edit(self, node: ast.AST, text: str) -> Edit:
        return Edit(self.analysis.span(node), text)

    def fix(self, kind: str, edits: list[Edit] | tuple[Edit, ...], at: ast.AST | None = None) -> Fix:
        """A fix made of ``edits``; its displayed replacement is the finding's node
        (``at``, default the current node) with the edits applied, or the edited lines
        when the edits lie elsewhere (a pattern spread over statements)."""
        at = self.node if at is None else at
        span = self.analysis.span(at)
        # whole-line edits (an added import, a deleted statement) are not displayed
        shown = [e for e in edits if not _whole_lines(e)] or list(edits)
        if all(span.contains(e.span) for e in shown):
            text = _apply(self.text(at), shown, span.line, span.column)
        else:
            first = min(e.span.line for e in shown)
            last = max(e.span.end_line for e in shown)
            raw = "".join(self.analysis.lines[first - 1 : last])
            text = _apply(raw, shown, first, 1).strip()
        return Fix(kind, text, tuple(edits))


def _whole_lines(e: Edit) -> bool:
    return e.span.column == 1 and e.span.end_column == 1 and (e.text == "" or e.text.endswith("\n"))


def _apply(text: str, edits, line0: int, col0: int) -> str:
    """Apply edits (spans relative to a text starting at line0:col0), last first."""
    lines = physical_lines(text) or [""]

    def offset(line: int, col: int) -> int:
        i = line - line0
        base = sum(len(x) for x in lines[:i])
        return base + (col - col0 if i == 0 else col - 1)

    for e in sorted(edits, key=lambda e: (e.span.line, e.span.column), reverse=True):
        a, b = offset(e.span.line, e.span.column), offset(e.span.end_line, e.span.end_column)
        text = text[:a] + e.text + text[b:]
        lines = physical_lines(text) or [""]
    return text


# ---------------------------------------------------------------------------------------
# The walk
# ---------------------------------------------------------------------------------------
def _candidate_lines(text: str, regex: re.Pattern) -> set[int]:
    if "\r" in text and text.count("\r\n") != text.count("\r"):
        # old Mac (\r) or mixed line ends: number lines as Python does, the slow way
        starts, pos = [], 0
        for line in physical_lines(text):
            starts.append(pos)
            pos += len(line)
        return {bisect.bisect_right(starts, m.start()) for m in regex.finditer(text)}
    lines: set[int] = set()
    pos = 0
    line = 1
    for m in regex.finditer(text):
        line += text.count("\n", pos, m.start())
        pos = m.start()
        lines.add(line)
    return lines


def _overlaps(node: ast.AST, lines: list[int]) -> bool:
    """Does the statement (with its decorators) span one of the sorted ``lines``?"""
    start = node.lineno
    if getattr(node, "decorator_list", None):
        start = min(d.lineno for d in node.decorator_list)
    i = bisect.bisect_left(lines, start)
    return i < len(lines) and lines[i] <= node.end_lineno


def _region(body: list, lines: list[int]) -> Iterable[ast.stmt]:
    """Top-level statements holding a candidate line (a class is then visited member by
    member in ``_walk``)."""
    return (stmt for stmt in body if _overlaps(stmt, lines))


def _walk(analysis: Analysis, dispatch: dict, lines: list[int], errors: list[str]) -> list[tuple[Rule, Hit, Context]]:
    """Every rule's hits in the candidate statements. A rule that raises loses that node
    only: the error is recorded (the file becomes a problem) and the walk goes on."""
    hits: list[tuple[Rule, Hit, Context]] = []
    module = analysis.module
    stack: list[tuple[ast.AST, Scope, Path, ast.stmt]] = [(s, module, (), s) for s in reversed(list(_region(analysis.tree.body, lines)))]
    while stack:
        node, scope, path, stmt = stack.pop()
        rules = dispatch.get(type(node))
        if rules:
            ctx = Context(analysis, node, scope, path, stmt)
            for r in rules:
                try:
                    hits.extend((r, hit, ctx) for hit in r.check(ctx) or ())
                except RecursionError:
                    raise
                except Exception as e:  # a bug in a rule must not end the run
                    errors.append(f"internal error in rule {r.id} at line {getattr(node, 'lineno', '?')}: {type(e).__name__}: {e}".splitlines()[0])
        children: list[tuple[ast.AST, Scope, Path, ast.stmt]] = []
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            for d in node.decorator_list:
                children.append((d, scope, path, node))
            inner = scope_for(node, scope)
            children.extend((d, scope, path, node) for d in (*node.args.defaults, *node.args.kw_defaults) if d is not None)
            children.extend((s, inner, (), s) for s in node.body)
        elif isinstance(node, ast.Lambda):
            children.append((node.body, scope_for(node, scope), (), stmt))
        elif isinstance(node, ast.ClassDef):
            inner = scope_for(node, scope)
            children.extend((b, scope, path, node) for b in (*node.decorator_list, *node.bases))
            children.extend((s, inner, (), s) for s in node.body if _overlaps(s, lines))
        elif isinstance(node, ast.stmt):
            blocks = {id(b) for b, _ in child_blocks(node, path)}
            for fld, value in ast.iter_fields(node):
                if isinstance(value, ast.AST):
                    children.append((value, scope, path, node))
                elif isinstance(value, list) and id(value) not in blocks and fld != "cases":
                    children.extend((v, scope, path, node) for v in value if isinstance(v, ast.AST))
            for block, bpath in child_blocks(node, path):
                children.extend((s, scope, bpath, s) for s in block)
        else:
            for child in ast.iter_child_nodes(node):
                children.append((child, scope, path, stmt))
        stack.extend(reversed(children))
    return hits


def _not_python3(path: str, text: str, err: SyntaxError) -> Problem:
    where = f" (line {err.lineno})" if err.lineno else ""
    hint = "; looks like Python 2 code" if _PY2_HINTS.search(text) else ""
    return Problem(path, f"not valid Python 3: {err.msg}{where}{hint}")


def parse(path: str, text: str) -> ast.Module | Problem:
    # A syntax tree is many small objects and no cycles: the cyclic collector has nothing
    # to find in it, but with other trees alive it would run often and cost more than
    # the parse itself (measured 2-3x on the standard library).
    collecting = gc.isenabled()
    gc.disable()
    try:
        return ast.parse(text, filename=path)
    except SyntaxError as e:
        return _not_python3(path, text, e)
    except (ValueError, MemoryError, RecursionError) as e:
        return Problem(path, f"cannot parse: {type(e).__name__}: {e}".splitlines()[0])
    finally:
        if collecting:
            gc.enable()


def _imports_project(tree: ast.Module) -> bool:
    """Imports a name from a module that is not a framework: its calls may hand values to
    a function of another scanned file, whose parameter joins need to see them."""
    from .values.names import framework_of

    return any(isinstance(s, ast.ImportFrom) and (s.level or not framework_of(s.module or "")) for s in tree.body)


def analyse_source(text: str, path: str, rules: list[Rule], project: dict | None = None) -> FileResult:
    """Analyse one file's text with the given rules."""
    tree = parse(path, text)
    if isinstance(tree, Problem):
        return FileResult(path, problem=tree)
    regex = trigger_regex(tuple(t for r in rules for t in r.triggers))
    lines = _candidate_lines(text, regex) if rules else set()
    # Helpers that return a softmax or sigmoid matter to other files whatever rules run.
    link_lines = _candidate_lines(text, _LINK) if any(w in text for w in LINK_WORDS) else set()
    if not lines and not link_lines and not _imports_project(tree):
        return FileResult(path)
    analysis = Analysis(path, text, tree, project)
    dispatch: dict[type, list[Rule]] = {}
    for r in rules:
        for t in r.nodes:
            dispatch.setdefault(t, []).append(r)
    errors: list[str] = []
    try:
        hits = _walk(analysis, dispatch, sorted(lines), errors)
        findings = [_finding(analysis, r, h, c) for r, h, c in hits]
        exports, imports, passes = file_links(analysis, sorted(link_lines | lines))
    except RecursionError:
        return FileResult(path, problem=Problem(path, "expression nesting too deep to analyse"))
    except Exception as e:  # outside any one rule: the file cannot be analysed
        return FileResult(path, problem=Problem(path, f"internal error: {type(e).__name__}: {e}".splitlines()[0]))
    finally:
        analysis.release()
    problem = Problem(path, errors[0] + (f" (and {len(errors) - 1} more)" if len(errors) > 1 else "")) if errors else None
    by_id = {r.id: r for r in rules}
    per_line, whole = suppressions(text)
    findings = [f for f in precedence(findings, by_id) if not silenced(f, per_line, whole)]
    findings.sort(key=Finding.sort_key)
    return FileResult(path, tuple(findings), problem=problem, exports=exports, imports=imports, passes=passes)


def _finding(analysis: Analysis, rule: Rule, hit: Hit, ctx: Context) -> Finding:
    return Finding(
        rule=rule.id,
        severity=hit.severity or rule.severity,
        path=analysis.path,
        span=analysis.span(hit.node),
        message=hit.message,
        fix=hit.fix,
        suggestion=hit.suggestion,
        covers=tuple(analysis.span(n) for n in hit.covers),
        statement_line=getattr(ctx.stmt, "lineno", 0),
    )
