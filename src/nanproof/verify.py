"""The safety net of ``nanproof fix``: what one round of rewrites must pass before its
result is kept.

1. The new text parses and compiles (``compile`` also runs the checks ``ast.parse``
   leaves out, such as ``return`` outside a function).
2. Each rewritten expression parses, in place, to exactly the replacement expression:
   a rewrite that needed parentheses in its context fails here.
3. Everything else is the same program: the syntax trees of old and new text, with the
   rewritten expressions masked by one placeholder each and the statements inside
   inserted or deleted lines left out, dump identically.

The checks that need the analysis (the rewritten code is no longer flagged, a second
run changes nothing) live in ``fix``.
"""
from __future__ import annotations

import ast
import re
import warnings

from .edits import Placed, Text, Unsafe

# PEP 263: a coding declaration is honoured only on line 1 or 2; a shebang only on line 1.
_COOKIE = re.compile(r"^[ \t\f]*#.*?coding[:=][ \t]*[-\w.]+")


def check_round(path: str, old: Text, new: Text, placed: list[Placed]) -> None:
    """Raise Unsafe unless the round's new text is the old program with exactly the
    placed edits made."""
    new_tree = _parse(path, new.text, "the result")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the file's own SyntaxWarnings are not ours
            compile(new_tree, path, "exec", dont_inherit=True)
    except (SyntaxError, ValueError) as e:
        raise Unsafe(f"the result does not compile: {getattr(e, 'msg', e)}") from None
    old_tree = _parse(path, old.text, "the original")
    exprs = [p for p in placed if p.expression]
    old_at = _expressions(old_tree, old, {(p.start, p.end) for p in exprs})
    intended = {id(p): _intended(p) for p in exprs}
    new_at = _expressions(new_tree, new, {_new_offsets(p, intended[id(p)]) for p in exprs})
    old_swap, new_swap = {}, {}
    for i, p in enumerate(exprs):
        where = f"{p.span.line}:{p.span.column}"
        before = old_at.get((p.start, p.end))
        if before is None:
            raise Unsafe(f"the edit at {where} does not cover exactly one expression")
        after = new_at.get(_new_offsets(p, intended[id(p)]))
        if after is None or ast.dump(after) != ast.dump(intended[id(p)]):
            raise Unsafe(f"the rewrite at {where} does not read as intended in its place (parentheses needed?)")
        old_swap[id(before)] = new_swap[id(after)] = f"__nanproof_edit_{i}__"
    lines = [p for p in placed if not p.expression]
    old_drop = _statements_within(old_tree, old, [(p.start, p.end) for p in lines])
    new_drop = _statements_within(new_tree, new, [(p.new_start, p.new_end) for p in lines])
    try:
        same = _dump(old_tree, old_swap, old_drop) == _dump(new_tree, new_swap, new_drop)
    except RecursionError:
        raise Unsafe("the code is nested too deeply to verify the rewrite") from None
    if not same:
        raise Unsafe("the rewrite would change code outside the edited expressions")


def check_header(old: Text, new: Text) -> None:
    """A shebang or coding declaration at the top must stay where it works: an import
    inserted above it would silence it (and change how the file decodes)."""
    first = [old.text[a:b] for a, b in zip(old.starts[:2], [*old.starts[1:3], len(old.text)][:2])]
    keep = 0
    if first and (first[0].startswith("#!") or _COOKIE.match(first[0])):
        keep = 1
    if len(first) > 1 and _COOKIE.match(first[1]):
        keep = 2
    if not new.text.startswith("".join(first[:keep])):
        raise Unsafe("the rewrite would move the shebang or coding declaration off the top lines")


def _parse(path: str, text: str, what: str) -> ast.Module:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return ast.parse(text, filename=path)
    except SyntaxError as e:
        raise Unsafe(f"{what} is not valid Python: {e.msg} (line {e.lineno})") from None
    except (ValueError, MemoryError, RecursionError) as e:
        raise Unsafe(f"{what} cannot be parsed: {type(e).__name__}") from None


def _intended(p: Placed) -> ast.expr:
    try:
        return ast.parse(p.text, mode="eval").body
    except SyntaxError:
        raise Unsafe(f"the rewrite for line {p.span.line} is not an expression: {p.text!r}") from None


def _new_offsets(p: Placed, body: ast.expr) -> tuple[int, int]:
    # The replacement may carry its own parentheses; the node sits inside them.
    start, end = Text(p.text).node_offsets(body)
    return p.new_start + start, p.new_start + end


def _expressions(tree: ast.Module, text: Text, wanted: set[tuple[int, int]]) -> dict:
    """(start, end) offsets -> the outermost expression node there, for wanted offsets."""
    lines = {text.position(start)[0] for start, _ in wanted}
    found: dict = {}
    for node in ast.walk(tree):  # breadth first: an outer node comes before inner ones
        if isinstance(node, ast.expr) and node.lineno in lines:
            key = text.node_offsets(node)
            if key in wanted:
                found.setdefault(key, node)
    return found


def _statements_within(tree: ast.Module, text: Text, regions: list[tuple[int, int]]) -> set[int]:
    if not regions:
        return set()
    ids = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.stmt):
            first = min([node, *getattr(node, "decorator_list", [])], key=lambda n: n.lineno)
            start = text.node_offsets(first)[0]
            end = text.node_offsets(node)[1]
            if any(a <= start and end <= b for a, b in regions):
                ids.add(id(node))
    return ids


class _Mask(ast.NodeTransformer):
    def __init__(self, swap: dict[int, str], drop: set[int]) -> None:
        self.swap, self.drop = swap, drop

    def visit(self, node):
        if id(node) in self.drop:
            return None
        if id(node) in self.swap:
            return ast.Name(id=self.swap[id(node)], ctx=ast.Load())
        return self.generic_visit(node)


def _dump(tree: ast.Module, swap: dict[int, str], drop: set[int]) -> str:
    return ast.dump(_Mask(swap, drop).visit(tree))
