"""Building replacement code in the file's own style: its aliases (``np``, ``F``,
``jnp``, ``tf``), its axis keyword, parentheses only where precedence needs them, and
import lines placed with the file's other imports."""
from __future__ import annotations

import ast

from .values.bindings import Ref
from .model import Edit, Span
from .values.names import OpCall

# Python precedence of expression nodes: higher binds tighter.
_ATOMS = (ast.Name, ast.Attribute, ast.Subscript, ast.Call, ast.Constant, ast.List, ast.Tuple, ast.Dict, ast.Set)


def atomic(node: ast.AST) -> bool:
    return isinstance(node, _ATOMS)


def paren(text: str, node: ast.AST) -> str:
    """Text safe to use as a method receiver or a factor."""
    return text if atomic(node) or (text.startswith("(") and text.endswith(")")) else f"({text})"


def operand(text: str, node: ast.AST) -> str:
    """Text safe as the left operand of ``-`` (arithmetic is; lambdas, conditionals and
    comparisons are not)."""
    if isinstance(node, (ast.BinOp, ast.UnaryOp)) or atomic(node):
        return text
    return f"({text})"


def simple(node: ast.AST, depth: int = 0) -> bool:
    """Free of calls and side effects, so it may be written twice in a rewrite."""
    if depth > 8:
        return False
    if isinstance(node, (ast.Name, ast.Constant)):
        return True
    if isinstance(node, ast.Attribute):
        return simple(node.value, depth + 1)
    if isinstance(node, ast.Subscript):
        return simple(node.value, depth + 1) and all(simple(n, depth + 1) for n in ast.walk(node.slice) if isinstance(n, ast.expr) and n is not node.slice) and not any(isinstance(n, ast.Call) for n in ast.walk(node.slice))
    if isinstance(node, ast.BinOp):
        return simple(node.left, depth + 1) and simple(node.right, depth + 1)
    if isinstance(node, ast.UnaryOp):
        return simple(node.operand, depth + 1)
    if isinstance(node, (ast.Tuple, ast.Slice)):
        return all(simple(n, depth + 1) for n in ast.iter_child_nodes(node) if isinstance(n, ast.expr))
    return False


def func_prefix(oc: OpCall, text_of) -> str | None:
    """``np`` for ``np.exp(...)``, ``tf.math`` for ``tf.math.log(...)``: the module text
    the call was written with, or None for a from-import or a method."""
    f = oc.call.func
    if oc.is_method or not isinstance(f, ast.Attribute):
        return None
    return text_of(f.value)


def module_alias(ref: Ref, *modules: str) -> str | None:
    """A name in the file bound to one of ``modules`` (``import numpy as np`` -> ``np``),
    visible from ``ref``'s scope."""
    from .values.names import _import_target

    wanted = set(modules)
    scope = ref.scope
    while scope is not None:
        for name, bindings in scope.bindings().items():
            if len(bindings) == 1 and bindings[0].kind == "import":
                if _import_target(bindings[0]) in wanted:
                    return name
        scope = scope.parent
    return None


def import_edit(tree: ast.Module, line_text: str) -> Edit:
    """Insert an import line after the last top-level import (or after the docstring and
    ``__future__`` imports when there is none). Identical edits are applied once."""
    after = 0
    for i, stmt in enumerate(tree.body):
        if isinstance(stmt, (ast.Import, ast.ImportFrom)):
            after = stmt.end_lineno
        elif i == 0 and isinstance(stmt, ast.Expr) and isinstance(stmt.value, ast.Constant) and isinstance(stmt.value.value, str):
            after = stmt.end_lineno
        elif not isinstance(stmt, (ast.Import, ast.ImportFrom)):
            if after or i > 0:
                break
    if not after and tree.body:
        # no import and no docstring: above the first statement, below what precedes it
        # (a shebang, a coding declaration, a licence comment)
        first = tree.body[0]
        after = min([first.lineno, *(d.lineno for d in getattr(first, "decorator_list", ()))]) - 1
    return Edit(Span(after + 1, 1, after + 1, 1), line_text + "\n")


def axis_kwargs(torch_style: bool, axis_text: str | None, keepdims: bool) -> str:
    if axis_text is None:
        return ""
    name, keep = ("dim", "keepdim") if torch_style else ("axis", "keepdims")
    return f", {name}={axis_text}" + (f", {keep}=True" if keepdims else "")


def add_keyword(call_text: str, keyword: str) -> str | None:
    """``f(a, b)`` -> ``f(a, b, keyword)``; None when the call text holds a comment."""
    if "#" in call_text or not call_text.endswith(")"):
        return None
    inner = call_text[:-1].rstrip()
    if inner.endswith(","):
        inner = inner[:-1]
    sep = "" if inner.endswith("(") else ", "
    return f"{inner}{sep}{keyword})"


# Submodules a bare ``import PACKAGE`` always loads, so ``torch.nn.functional.softplus``
# works after ``import torch`` alone (checked in sys.modules with torch 2.13; for jax and
# tensorflow from memory of their package ``__init__``). ``scipy`` is absent on purpose:
# ``import scipy`` alone leaves ``scipy.special`` unloaded (checked with scipy 1.x).
_LOADED_WITH = {
    "torch": ("torch.nn", "torch.nn.functional", "torch.special"),
    "jax": ("jax.nn", "jax.numpy"),
    "tensorflow": ("tensorflow.math", "tensorflow.nn"),
}


def reachable(ref: Ref, qual: str) -> str | None:
    """Code naming the function ``qual`` (``scipy.special.expit``) through the file's own
    imports, as seen from ``ref``: ``expit``, ``sp.expit``, ``scipy.special.expit``; None
    when no import makes it available."""
    from .values.names import _import_target

    module, name = qual.rsplit(".", 1)
    scope = ref.scope
    while scope is not None:
        for bound, bindings in scope.bindings().items():
            b = bindings[0]
            if len(bindings) != 1 or b.kind != "import" or ref.scope.lookup(bound, ref.pos, ref.path) is not b:
                continue
            target = _import_target(b)
            if target == qual:
                return bound
            loaded = {target, *_LOADED_WITH.get(target, ())}
            if isinstance(b.stmt, ast.Import) and not b.value.asname:  # import a.b.c
                parts = b.value.name.split(".")
                loaded.update(".".join(parts[: i + 1]) for i in range(len(parts)))
            if module in loaded:
                return f"{bound}{module[len(target):]}.{name}"
        scope = scope.parent
    return None
