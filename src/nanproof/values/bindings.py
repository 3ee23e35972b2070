"""Scopes and reaching assignments: how a name used at one place got its value.

The analysis follows simple data flow inside a function (or the module body): plain and
augmented assignments, tuple unpacking, walrus. A name resolves to the last binding
before its use. When that binding sits in a branch or loop that does not also hold the
use, the value is *ambiguous*: rules treat an ambiguous value as "cannot tell" and stay
quiet (precision before recall).

Bindings are built lazily, the first time a scope is asked, so functions without a
candidate pattern cost nothing.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass
from typing import Iterator

Pos = tuple[int, int]
Path = tuple[tuple[int, int], ...]  # (id of the branching statement, which block) pairs

SCOPE_NODES = (ast.Module, ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda, ast.ClassDef)
_BLOCK_FIELDS = ("body", "orelse", "finalbody", "handlers")


@dataclass(frozen=True, eq=False)
class Binding:
    name: str
    pos: Pos  # the binding is visible to uses strictly after this position
    kind: str  # assign | aug | param | loop | import | def | class | other
    value: ast.AST | None  # assigned expression (the whole value for "aug")
    stmt: ast.AST | None
    path: Path
    op: ast.operator | None = None  # for "aug": the operator
    target: ast.AST | None = None  # the Name node that is bound
    owner: "Scope | None" = None  # the scope holding the binding (set when added)
    unpack: "tuple[ast.expr, int] | None" = None  # ``a, b = f()``: (the whole value, this index)


class Ambiguous:
    """Marker: more than one assignment may reach this use."""

    def __repr__(self) -> str:
        return "AMBIGUOUS"


AMBIGUOUS = Ambiguous()


@dataclass(frozen=True, eq=False)
class Ref:
    """An expression node together with where it lives (its scope and block path)."""

    node: ast.AST
    scope: "Scope"
    path: Path = ()

    @property
    def pos(self) -> Pos:
        return (getattr(self.node, "lineno", 0), getattr(self.node, "col_offset", 0))

    def child(self, node: ast.AST) -> "Ref":
        return Ref(node, self.scope, self.path)


def _is_prefix(a: Path, b: Path) -> bool:
    return len(a) <= len(b) and b[: len(a)] == a


def _end(node: ast.AST) -> Pos:
    return (node.end_lineno or 0, node.end_col_offset or 0)


class Scope:
    def __init__(self, node: ast.AST, parent: "Scope | None") -> None:
        self.node = node
        self.parent = parent
        self._bindings: dict[str, list[Binding]] | None = None
        self._globals: set[str] = set()
        self.cache: dict = {}  # per-scope memo for facts (keyed by id of node and question)

    @property
    def module(self) -> "Scope":
        s = self
        while s.parent is not None:
            s = s.parent
        return s

    @property
    def is_function(self) -> bool:
        return isinstance(self.node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda))

    # -- building -----------------------------------------------------------------
    def bindings(self) -> dict[str, list[Binding]]:
        if self._bindings is None:
            self._bindings = {}
            node = self.node
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda)):
                a = node.args
                for arg in (*a.posonlyargs, *a.args, *a.kwonlyargs, a.vararg, a.kwarg):
                    if arg is not None:
                        self._add(Binding(arg.arg, (0, 0), "param", None, None, (), target=arg))
                if isinstance(node, ast.Lambda):
                    return self._bindings
            for stmt in node.body:
                self._stmt(stmt, ())
            for lst in self._bindings.values():
                lst.sort(key=lambda b: b.pos)
        return self._bindings

    def _add(self, b: Binding) -> None:
        object.__setattr__(b, "owner", self)
        self._bindings.setdefault(b.name, []).append(b)  # type: ignore[union-attr]

    def _targets(self, target, value, stmt, path, kind="assign", pos=None) -> None:
        pos = pos or _end(stmt)
        if isinstance(target, ast.Name):
            self._add(Binding(target.id, pos, kind, value, stmt, path, target=target))
        elif isinstance(target, (ast.Tuple, ast.List)):
            elts = target.elts
            vals = value.elts if isinstance(value, (ast.Tuple, ast.List)) and len(value.elts) == len(elts) else None
            starred = any(isinstance(e, ast.Starred) for e in elts)
            for i, elt in enumerate(elts):
                sub = vals[i] if vals is not None and not isinstance(elt, ast.Starred) else None
                if sub is None and vals is None and value is not None and not starred and isinstance(elt, ast.Name) and kind == "assign":
                    self._add(Binding(elt.id, pos, "other", None, stmt, path, target=elt, unpack=(value, i)))
                    continue
                self._targets(elt, sub, stmt, path, kind if sub is not None else "other", pos)
        elif isinstance(target, ast.Starred):
            self._targets(target.value, None, stmt, path, "other", pos)

    def _stmt(self, stmt: ast.stmt, path: Path) -> None:
        add = self._add
        if isinstance(stmt, ast.Assign):
            for t in stmt.targets:
                self._targets(t, stmt.value, stmt, path)
        elif isinstance(stmt, ast.AnnAssign) and stmt.value is not None:
            self._targets(stmt.target, stmt.value, stmt, path)
        elif isinstance(stmt, ast.AugAssign) and isinstance(stmt.target, ast.Name):
            add(Binding(stmt.target.id, _end(stmt), "aug", stmt.value, stmt, path, stmt.op, stmt.target))
        elif isinstance(stmt, (ast.Import, ast.ImportFrom)):
            for alias in stmt.names:
                name = alias.asname or alias.name.split(".")[0]
                add(Binding(name, _end(stmt), "import", alias, stmt, path))
        elif isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef)):
            add(Binding(stmt.name, _end(stmt), "def", stmt, stmt, path))
            return  # its body is a scope of its own
        elif isinstance(stmt, ast.ClassDef):
            add(Binding(stmt.name, _end(stmt), "class", stmt, stmt, path))
            return
        elif isinstance(stmt, (ast.Global, ast.Nonlocal)):
            self._globals.update(stmt.names)
        # Walrus targets anywhere in the statement's own expressions (a full walk, so only
        # in files that contain ``:=`` at all).
        if self.module.cache.get("walrus", True) and not isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            for sub in _own_expressions(stmt):
                for n in ast.walk(sub):
                    if isinstance(n, ast.NamedExpr) and isinstance(n.target, ast.Name):
                        add(Binding(n.target.id, _end(n), "assign", n.value, stmt, path, target=n.target))
        # Nested blocks: each block is a branch of this statement.
        if isinstance(stmt, (ast.For, ast.AsyncFor)):
            self._targets(stmt.target, None, stmt, path + ((id(stmt), 0),), "loop", _end(stmt.target))
        if isinstance(stmt, (ast.With, ast.AsyncWith)):
            for item in stmt.items:
                if item.optional_vars is not None:
                    self._targets(item.optional_vars, None, stmt, path, "other", _end(item.optional_vars))
            for s in stmt.body:  # a with-body always runs: same block
                self._stmt(s, path)
            return
        if isinstance(stmt, ast.ExceptHandler) and stmt.name:
            add(Binding(stmt.name, (stmt.lineno, stmt.col_offset), "other", None, stmt, path))
        for i, fld in enumerate(_BLOCK_FIELDS):
            for s in getattr(stmt, fld, None) or ():
                self._stmt(s, path + ((id(stmt), i),))
        if isinstance(stmt, getattr(ast, "Match", ())):
            for i, case in enumerate(stmt.cases):
                for s in case.body:
                    self._stmt(s, path + ((id(stmt), 10 + i),))

    # -- querying -----------------------------------------------------------------
    def lookup(self, name: str, pos: Pos | None, path: Path = ()) -> Binding | Ambiguous | None:
        """The binding of ``name`` that reaches a use at ``pos`` (None: position-agnostic)."""
        if name in self._globals_of() and self.parent is not None:
            return self.module.lookup(name, None)
        if isinstance(self.node, ast.ClassDef) and pos is None:
            # class bodies are not visible from methods
            return self.parent.lookup(name, None) if self.parent else None
        found = self.bindings().get(name)
        if found:
            if pos is None:
                last = found[-1]
                if any(b.path for b in found) and len(found) > 1:
                    return AMBIGUOUS
                return last
            before = [b for b in found if b.pos <= pos]
            if not before:
                # used before any assignment here: a loop-carried or global value
                return AMBIGUOUS if self.is_function else None
            last = before[-1]
            if not _is_prefix(last.path, path):
                return AMBIGUOUS
            return last
        parent = self.parent
        while parent is not None and isinstance(parent.node, ast.ClassDef):
            parent = parent.parent
        if parent is None:
            return None
        return parent.lookup(name, None)

    def _globals_of(self) -> set[str]:
        self.bindings()
        return self._globals

    def loads(self, name: str) -> Iterator[ast.Name]:
        """Every load of ``name`` inside this scope (nested scopes excluded)."""
        key = ("loads", name)
        if key not in self.cache:
            self.cache[key] = [n for n in _walk_scope(self.node) if isinstance(n, ast.Name) and n.id == name and isinstance(n.ctx, ast.Load)]
        return iter(self.cache[key])

    def calls(self) -> list[ast.Call]:
        if "calls" not in self.cache:
            self.cache["calls"] = [n for n in _walk_scope(self.node) if isinstance(n, ast.Call)]
        return self.cache["calls"]


def _own_expressions(stmt: ast.stmt) -> Iterator[ast.AST]:
    for fld, value in ast.iter_fields(stmt):
        if fld in _BLOCK_FIELDS or fld == "cases":
            continue
        if isinstance(value, ast.AST):
            yield value
        elif isinstance(value, list):
            for v in value:
                if isinstance(v, ast.expr):
                    yield v


def _walk_scope(node: ast.AST) -> Iterator[ast.AST]:
    """Walk a scope's body without entering nested functions, lambdas or classes."""
    stack = list(node.body) if not isinstance(node, ast.Lambda) else [node.body]
    while stack:
        n = stack.pop()
        yield n
        for child in ast.iter_child_nodes(n):
            if isinstance(child, SCOPE_NODES):
                continue
            stack.append(child)


def statements_with_paths(node: ast.AST, path: Path = ()) -> Iterator[tuple[ast.stmt, Path]]:
    """Every statement of a scope's body (nested scopes excluded) with its block path,
    computed the same way as binding paths."""
    body = getattr(node, "body", None)
    if not isinstance(body, list):
        return
    for stmt in body:
        yield from _stmt_paths(stmt, path)


def _stmt_paths(stmt: ast.stmt, path: Path) -> Iterator[tuple[ast.stmt, Path]]:
    yield stmt, path
    if isinstance(stmt, SCOPE_NODES):
        return
    for sub, sub_path in child_blocks(stmt, path):
        for s in sub:
            yield from _stmt_paths(s, sub_path)


def child_blocks(stmt: ast.AST, path: Path) -> Iterator[tuple[list, Path]]:
    """The statement lists nested in ``stmt`` with the block path each one runs under."""
    if isinstance(stmt, (ast.With, ast.AsyncWith)):
        yield stmt.body, path
        return
    for i, fld in enumerate(_BLOCK_FIELDS):
        sub = getattr(stmt, fld, None)
        if sub and isinstance(sub, list):
            yield sub, path + ((id(stmt), i),)
    if isinstance(stmt, getattr(ast, "Match", ())):
        for i, case in enumerate(stmt.cases):
            yield case.body, path + ((id(stmt), 10 + i),)


def scope_for(node: ast.AST, parent: Scope) -> Scope:
    registry = parent.module.cache.setdefault("scopes", {})
    s = registry.get(id(node))
    if s is None:
        s = registry[id(node)] = Scope(node, parent)
    return s
