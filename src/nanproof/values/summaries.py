"""Summaries across function boundaries, each computed once per function and cached on
the function's scope:

- what a function returns (one kind for every ``return``, or one kind per item when
  every ``return`` is a tuple of the same length: ``return logits, probs``);
- what calling an instance of a class gives (``forward`` for PyTorch modules,
  ``__call__`` for Flax and plain callables, ``call`` for Keras layers);
- what a parameter holds: the join of what every call site in the scanned tree passes
  in. A call site that passes something else, passes nothing (the default), or hides
  the argument in ``*args``, and a function used as a value (``map(f, xs)``), make the
  join unknown: the rules stay quiet.

Across files the same questions go through the project table that ``api.scan`` builds
from every file's ``exports`` (what its functions and classes return) and ``passes``
(what its calls hand to functions of other scanned modules).
"""
from __future__ import annotations

import ast
import bisect
import re
from dataclasses import dataclass

from .bindings import AMBIGUOUS, Ref, Scope, SCOPE_NODES, _own_expressions, scope_for, statements_with_paths

# Methods that run when an instance is called, by framework habit.
CALL_METHODS = ("forward", "__call__", "call")
# Work caps: call sites followed per parameter, and parameter joins per file.
MAX_SITES = 24
MAX_PARAM_JOINS = 400


@dataclass(frozen=True)
class Returned:
    """What a function gives back: ``kind`` when every return agrees, ``items`` per
    position of a returned tuple; ``path``/``line`` of the producing expression."""

    kind: str | None
    items: tuple[str | None, ...] | None
    path: str
    line: int


def _analysis(scope: Scope):
    return scope.module.cache["analysis"]


# ---------------------------------------------------------------------------------------
# What a function returns
# ---------------------------------------------------------------------------------------
def function_returned(fn_and_owner, depth: int = 0) -> Returned | None:
    from .origins import origin

    fn, owner = fn_and_owner
    if owner is None:
        return None
    scope = scope_for(fn, owner)
    if "returns" in scope.cache:
        return scope.cache["returns"]
    scope.cache["returns"] = None  # recursion guard
    if isinstance(fn, ast.Lambda):
        values = [Ref(fn.body, scope, ())]
    else:
        values = [Ref(s.value, scope, p) for s, p in statements_with_paths(fn) if isinstance(s, ast.Return) and s.value is not None]
    result = None
    if values:
        origins_ = [origin(v, depth + 1) for v in values]
        kinds = {o.kind if o else None for o in origins_}
        kind = kinds.pop() if len(kinds) == 1 else None
        items = None
        if all(isinstance(v.node, ast.Tuple) for v in values) and len({len(v.node.elts) for v in values}) == 1:
            cols = []
            for i in range(len(values[0].node.elts)):
                ks = {o.kind if (o := origin(v.child(v.node.elts[i]), depth + 1)) else None for v in values}
                cols.append(ks.pop() if len(ks) == 1 else None)
            items = tuple(cols) if any(cols) else None
        if kind is not None or items is not None:
            line = next((o.line for o in origins_ if o), values[0].node.lineno)
            result = Returned(kind, items, _analysis(scope).path, line)
    scope.cache["returns"] = result
    return result


def function_summary(fn_and_owner, depth: int = 0) -> str | None:
    """The kind of value (softmax, sigmoid, ...) every ``return`` of a function gives."""
    r = function_returned(fn_and_owner, depth)
    return r.kind if r else None


def method_of(cls: ast.ClassDef, name: str) -> ast.FunctionDef | ast.AsyncFunctionDef | None:
    for item in cls.body:
        if isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef)) and item.name == name:
            return item
    return None


def instance_returned(cls: ast.ClassDef, owner: Scope, depth: int = 0) -> Returned | None:
    """What calling an instance of ``cls`` gives (its forward / __call__ / call)."""
    cscope = scope_for(cls, owner)
    for name in CALL_METHODS:
        m = method_of(cls, name)
        if m is not None:
            return function_returned((m, cscope), depth + 1)
    return None


def local_class(ref: Ref) -> tuple[ast.ClassDef, Scope] | None:
    """The class a name refers to, when the file defines it."""
    if not isinstance(ref.node, ast.Name):
        return None
    b = ref.scope.lookup(ref.node.id, ref.pos, ref.path)
    if b is None or b is AMBIGUOUS or b.kind != "class":
        return None
    return b.value, b.owner


# ---------------------------------------------------------------------------------------
# Across files: the project table
# ---------------------------------------------------------------------------------------
def module_parts(path: str) -> tuple[str, ...]:
    p = path.replace("\\", "/")
    for suffix in (".pyi", ".py"):
        if p.endswith(suffix):
            p = p[: -len(suffix)]
    return tuple(x for x in p.split("/") if x not in ("", "."))


def import_spec(path: str, module: str, level: int) -> tuple[str, tuple[str, ...]]:
    """How an import names a module of the tree: ("exact", parts) for a relative import
    resolved against ``path``, ("suffix", parts) for an absolute one (the scanned tree's
    root is not known, so the module's trailing parts must match)."""
    parts = tuple(p for p in module.split(".") if p)
    if level:
        base = module_parts(path)[:-1]
        base = base[: len(base) - (level - 1)] if level > 1 else base
        return "exact", base + parts
    return "suffix", parts


def spec_matches(spec: tuple[str, tuple[str, ...]], mod_parts: tuple[str, ...]) -> bool:
    if mod_parts and mod_parts[-1] == "__init__":
        mod_parts = mod_parts[:-1]
    mode, parts = spec
    if mode == "exact":
        return mod_parts == parts
    return bool(parts) and mod_parts[-len(parts):] == parts


def spec_of(callee: Ref, binding, qual: str | None) -> tuple[tuple[str, tuple[str, ...]], str] | None:
    path = _analysis(callee.scope).path
    if binding is not None:
        stmt = binding.stmt
        if not isinstance(stmt, ast.ImportFrom):
            return None
        return import_spec(path, stmt.module or "", stmt.level), binding.value.name
    if qual is not None and "." in qual:
        module, name = qual.rsplit(".", 1)
        return import_spec(path, module, 0), name
    return None


def project_lookup(scope: Scope, spec, name: str, what: str = "function") -> tuple | None:
    """(kind, items, path, line) for ``name`` of the module ``spec`` names, from the table."""
    table = _analysis(scope).project.get("returns")
    for mod_parts, w, value in table.get(name, ()) if table else ():
        if w == what and spec_matches(spec, mod_parts):
            return value
    return None


def project_returned(callee: Ref, binding, qual: str | None = None, what: str = "function", member: str = "") -> tuple | None:
    """(kind, items, path, line) of a function (or, with ``what="instance"``, of calling
    an instance of a class; with ``member``, of that class's method) imported from
    another scanned module."""
    got = spec_of(callee, binding, qual)
    if got is None:
        return None
    spec, name = got
    return project_lookup(callee.scope, spec, f"{name}.{member}" if member else name, what)


def project_summary(callee: Ref, binding, qual: str | None = None) -> str | None:
    """The kind a function imported from another scanned module returns."""
    got = project_returned(callee, binding, qual)
    return got[0] if got else None


# ---------------------------------------------------------------------------------------
# Call sites, and what a parameter holds
# ---------------------------------------------------------------------------------------
def calls_on_lines(module: Scope, lines: list[int], names: set[str]) -> list[Ref]:
    """Calls ``NAME(...)`` / ``x.NAME(...)`` for NAME in ``names`` inside the statements
    that span one of ``lines`` (sorted), each with its scope and block path."""
    out: list[Ref] = []
    if not lines:
        return out

    def spans(stmt: ast.stmt) -> bool:
        i = bisect.bisect_left(lines, stmt.lineno)
        return i < len(lines) and lines[i] <= (stmt.end_lineno or stmt.lineno)

    def visit(scope: Scope) -> None:
        for stmt, path in statements_with_paths(scope.node):
            if not spans(stmt):
                continue
            if isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
                visit(scope_for(stmt, scope))
                continue
            for expr in _own_expressions(stmt):
                stack = [expr]
                while stack:
                    n = stack.pop()
                    if isinstance(n, ast.Call):
                        f = n.func
                        name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else None
                        if name in names:
                            out.append(Ref(n, scope, path))
                    for child in ast.iter_child_nodes(n):
                        if not isinstance(child, SCOPE_NODES):
                            stack.append(child)

    visit(module)
    return out


def _lines_matching(text: str, pattern: re.Pattern) -> list[int]:
    found = [m.start() for m in pattern.finditer(text)]
    if not found:
        return []
    starts = [0] + [m.end() for m in re.finditer("\n", text)]
    return sorted({bisect.bisect_right(starts, pos) for pos in found})


def argument_for(call: ast.Call, index: int | None, name: str) -> ast.expr | None:
    """The argument a call passes for a parameter (by position or keyword); None when it
    is not passed or may hide in ``*args`` / ``**kwargs``."""
    for kw in call.keywords:
        if kw.arg == name:
            return kw.value
    if index is None:
        return None
    for i, a in enumerate(call.args):
        if isinstance(a, ast.Starred):
            return None
        if i == index:
            return a
    return None


def _is_method(fn: ast.AST, owner: Scope) -> bool:
    if not isinstance(owner.node, ast.ClassDef):
        return False
    decos = {d.id if isinstance(d, ast.Name) else getattr(d, "attr", "") for d in fn.decorator_list}
    return "staticmethod" not in decos and "classmethod" not in decos


_DEF = re.compile(r"\bdef\s+([A-Za-z_]\w*)")


def _word_index(module: Scope) -> dict[str, list[tuple[int, str]]]:
    """Every occurrence of a name the file defines a function by, in its text (strings
    and comments included: more uses only means more silence) -> (line, how it is
    written): "call" for ``f(``, "self-call" for ``self.f(``, "attr" for another ``.f``,
    "name" otherwise. One pass per file."""
    index = module.cache.get("words")
    if index is None:
        text = _analysis(module).text
        starts = [0] + [m.end() for m in re.finditer("\n", text)]
        index = {}
        names = sorted(set(_DEF.findall(text)), key=len, reverse=True)
        word = re.compile(r"(\bself\s*\.\s*)?(\.\s*)?\b(" + "|".join(map(re.escape, names)) + r")\b(\s*\()?") if names else None
        for m in word.finditer(text) if word else ():
            self_dot, dot, name, paren = m.groups()
            how = ("self-call" if paren else "attr") if self_dot else "attr" if dot else "call" if paren else "name"
            index.setdefault(name, []).append((bisect.bisect_right(starts, m.start(3)) , how))
        module.cache["words"] = index
    return index


def local_sites(fn: ast.FunctionDef | ast.AsyncFunctionDef, owner: Scope) -> list[Ref] | None:
    """Every call of ``fn`` in its own file (``f(...)``, or ``self.f(...)`` for a method);
    None when the function also escapes as a value or is called in a way not followed."""
    name = fn.name
    method = _is_method(fn, owner)
    key = ("sites", id(fn))
    cache = owner.module.cache
    if key in cache:
        return cache[key]
    cache[key] = None
    text = _analysis(owner).text
    if text.count(name) < 2:  # only the def: no call site here (no index built)
        cache[key] = []
        return []
    uses = _word_index(owner.module).get(name, [])
    # a name used other than in a call (``map(f, xs)``, ``key=f``, ``self.f`` passed on)
    # may be called where we cannot see: unknown.
    uses = [(line, how) for line, how in uses if not (line == fn.lineno and how == "call")]  # the def
    if method:
        if any(how in ("attr", "call") for _, how in uses):
            return None
        call_lines = sorted({line for line, how in uses if how == "self-call"})
    else:
        if any(how in ("name", "attr", "self-call") for _, how in uses):
            return None
        call_lines = sorted({line for line, how in uses if how == "call"})
    sites = []
    for ref in calls_on_lines(owner.module, call_lines, {name}):
        f = ref.node.func
        if method:
            if not (isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name) and f.value.id == "self"):
                continue
            fscope = ref.scope
            while fscope is not None and not isinstance(fscope.node, ast.ClassDef):
                fscope = fscope.parent
            if fscope is not owner:
                return None  # ``self.name`` of another class: not this method for sure
        else:
            if not isinstance(f, ast.Name):
                continue
            b = ref.scope.lookup(name, (f.lineno, f.col_offset), ref.path)
            if b is None or b is AMBIGUOUS or b.kind != "def" or b.value is not fn:
                return None
        sites.append(ref)
    cache[key] = sites
    return sites


def param_origin(ref: Ref, b, depth: int):
    """The origin of a parameter: the join over every call site that passes it."""
    from .origins import Origin, origin

    fn, owner = b.owner.node, b.owner.parent
    if not isinstance(fn, (ast.FunctionDef, ast.AsyncFunctionDef)) or owner is None:
        return None
    analysis = _analysis(owner)
    budget = analysis.module.cache.get("param_joins", 0)
    if budget >= MAX_PARAM_JOINS:
        return None
    analysis.module.cache["param_joins"] = budget + 1
    a = fn.args
    positional = [x.arg for x in (*a.posonlyargs, *a.args)]
    if b.name not in positional and b.name not in [x.arg for x in a.kwonlyargs]:
        return None  # *args / **kwargs
    index = positional.index(b.name) if b.name in positional else None
    method = _is_method(fn, owner)
    if method and index is not None:
        if index == 0:
            return None  # self
        index -= 1
    sites = local_sites(fn, owner)
    if sites is None:
        return None
    if isinstance(owner.node, ast.Module):  # other files' calls may decide it: ask for them
        analysis.module.cache.setdefault("wanted", set()).add(fn.name)
    remote = _remote_passes(owner, fn, method, index, b.name)
    if remote is None or len(sites) + len(remote) == 0 or len(sites) > MAX_SITES:
        return None
    kinds, wheres, via = set(), [], []
    for site in sites:
        arg = argument_for(site.node, index, b.name)
        if arg is None:
            return None
        o = origin(site.child(arg), depth + 1)
        if o is None:
            return None
        kinds.add(o.kind)
        wheres.append(o.where or f"line {o.line}")
        via.append(f"passed at line {site.node.lineno}")
    for kind, where, path, line in remote:
        if kind is None:
            return None
        kinds.add(kind)
        wheres.append(where)
        via.append(f"passed at {path}:{line}")
    if len(kinds) != 1:
        return None
    more = f" and {len(via) - 2} more" if len(via) > 2 else ""
    return Origin(kinds.pop(), "param", ref.node.lineno, where=wheres[0], via=(", ".join(via[:2]) + more,))


def _remote_passes(owner: Scope, fn, method: bool, index: int | None, name: str) -> list | None:
    """What calls in other scanned files pass for this parameter: (kind, where it was
    made, path, line) each; None when one of them cannot be told."""
    if method or not isinstance(owner.node, ast.Module):
        return []
    analysis = _analysis(owner)
    passes = analysis.project.get("passes", {}).get(fn.name)
    if not passes:
        return []
    mine = module_parts(analysis.path)
    out = []
    for spec, args, path, line in passes:
        if not spec_matches(spec, mine):
            continue
        got = [(kind, where) for key, kind, where in args if key == name or (index is not None and key == index)]
        if not got:
            return None  # not passed there: the default, unknown here
        kind, where = got[0]
        if where and " of " not in where:
            where = f"{where} of {path}"
        out.append((kind, where, path, line))
    return out


# ---------------------------------------------------------------------------------------
# What this file exports and passes on
# ---------------------------------------------------------------------------------------
def file_links(analysis, lines: list[int]) -> tuple[tuple, tuple, tuple]:
    """(exports, imports, passes) of one analysed file for the project table."""
    from .names import framework_of
    from .origins import origin

    exports = []
    imports: list[str] = []
    imported: dict[str, tuple] = {}  # local name -> (spec, name in its module)
    module = analysis.module

    def overlaps(node: ast.AST) -> bool:
        i = bisect.bisect_left(lines, node.lineno)
        return i < len(lines) and lines[i] <= (node.end_lineno or node.lineno)

    for stmt in analysis.tree.body:
        if isinstance(stmt, (ast.FunctionDef, ast.AsyncFunctionDef)) and overlaps(stmt):
            r = function_returned((stmt, module))
            if r is not None:
                exports.append((stmt.name, "function", r.kind, r.items, r.line))
        elif isinstance(stmt, ast.ClassDef) and overlaps(stmt):
            cscope = scope_for(stmt, module)
            r = instance_returned(stmt, module)
            if r is not None:
                exports.append((stmt.name, "instance", r.kind, r.items, r.line))
            for item in stmt.body:
                if isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef)) and item.name not in CALL_METHODS and overlaps(item):
                    r = function_returned((item, cscope))
                    if r is not None:
                        exports.append((f"{stmt.name}.{item.name}", "function", r.kind, r.items, r.line))
        elif isinstance(stmt, ast.ImportFrom) and (stmt.level or not framework_of(stmt.module or "")):
            for a in stmt.names:
                imports.append(a.asname or a.name)
                imported[a.asname or a.name] = (import_spec(analysis.path, stmt.module or "", stmt.level), a.name)
        elif isinstance(stmt, ast.Import):
            imports.extend(a.asname or a.name for a in stmt.names if not framework_of(a.name))
    passes = []
    wanted = analysis.project.get("wanted", set())
    imported = {k: v for k, v in imported.items() if v[1] in wanted}  # what another file asked for
    if imported:
        pattern = re.compile(r"(?<![\w.])(?:" + "|".join(map(re.escape, imported)) + r")\s*\(")
        call_lines = _lines_matching(analysis.text, pattern)
        for site in calls_on_lines(module, call_lines, set(imported))[:200]:
            f = site.node.func
            if not isinstance(f, ast.Name):
                continue
            b = site.scope.lookup(f.id, (f.lineno, f.col_offset), site.path)
            if b is None or b is AMBIGUOUS or b.kind != "import":
                continue
            spec, name = imported[f.id]
            args = []
            for i, a in enumerate(site.node.args):
                if isinstance(a, ast.Starred):
                    break
                args.append((i, *_passed(origin(site.child(a)))))
            for kw in site.node.keywords:
                if kw.arg is not None:
                    args.append((kw.arg, *_passed(origin(site.child(kw.value)))))
            passes.append((name, spec, tuple(args), analysis.path, site.node.lineno))
    exports.extend((name, "wanted", None, None, 0) for name in sorted(module.cache.get("wanted", ())))
    return tuple(exports), tuple(imports), tuple(passes)


def _passed(o) -> tuple:
    """(kind, where it was made) of a value handed to a function of another file."""
    if o is None:
        return None, ""
    return o.kind, o.where or f"line {o.line}"


def _package_key(parts: tuple[str, ...]) -> str:
    parts = parts[:-1] if parts and parts[-1] == "__init__" else parts
    return parts[-1] if parts else ""


def project_table(results) -> dict:
    """The table the later analyses read, indexed by name: what functions and instances
    of classes of each file return, which functions want to know what other files pass
    to them, and what calls pass to functions of other files."""
    returns: dict[str, list] = {}
    heads: dict[str, list] = {}
    by_module: dict[str, list] = {}
    wanted: set[str] = set()
    passes: dict[str, list] = {}
    passes_to: dict[str, list] = {}
    for r in results:
        parts = module_parts(r.path)
        for name, what, kind, items, line in r.exports:
            if what == "wanted":
                wanted.add(name)
                continue
            value = (kind, items, r.path, line)
            returns.setdefault(name, []).append((parts, what, value))
            heads.setdefault(name.split(".")[0], []).append((parts, name, what, value))  # Cls.method under Cls
            by_module.setdefault(_package_key(parts), []).append((parts, name, what, value))
        for name, spec, args, path, line in r.passes:
            passes.setdefault(name, []).append((spec, args, path, line))
            passes_to.setdefault(spec[1][-1] if spec[1] else "", []).append((name, spec, args, path, line))
    return {"returns": returns, "heads": heads, "by_module": by_module, "wanted": wanted, "passes": passes, "passes_to": passes_to}


def relevant(table: dict, result) -> tuple:
    """The part of the project table a file's analysis reads: what the names it imports
    return, which of them want their call sites, and what other files pass to its
    functions. A file is analysed again when this part changes."""
    imports = set(result.imports)
    mine = module_parts(result.path)
    got = []
    for name in imports:
        for parts, full, what, value in table["heads"].get(name, ()):
            if parts != mine:
                got.append((parts, full, what, value))
        for parts, full, what, value in table["by_module"].get(name, ()):
            if parts != mine:
                got.append((parts, full, what, value))
        if name in table["wanted"]:
            got.append(("wanted", name))
    for rec in table["passes_to"].get(_package_key(mine), ()):
        name, spec, args, path, line = rec
        if path != result.path and spec_matches(spec, mine):
            got.append(rec)
    return tuple(sorted(set(got), key=repr))
