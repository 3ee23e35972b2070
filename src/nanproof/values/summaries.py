"""Function summaries: what a function returns, computed once per function and cached on
its scope, and the table of helpers other scanned modules export."""
from __future__ import annotations

import ast

from .bindings import Ref, scope_for, statements_with_paths


# ---------------------------------------------------------------------------------------
# Following helpers: what a function returns
# ---------------------------------------------------------------------------------------
def function_summary(fn_and_owner, depth: int = 0) -> str | None:
    """The kind of value (softmax, sigmoid, ...) every ``return`` of a function gives."""
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
    kinds = {(o.kind if (o := origin(v, depth + 1)) else None) for v in values}
    result = kinds.pop() if len(kinds) == 1 else None
    scope.cache["returns"] = result
    return result


def project_summary(callee: Ref, binding, qual: str | None = None) -> str | None:
    """The kind a function imported from another scanned module returns."""
    analysis = callee.scope.module.cache["analysis"]
    if not analysis.project:
        return None
    if binding is not None:
        stmt = binding.stmt
        if not isinstance(stmt, ast.ImportFrom):
            return None
        name = binding.value.name
        module = stmt.module or ""
        level = stmt.level
    elif qual is not None and "." in qual:
        module, name = qual.rsplit(".", 1)
        level = 0
    else:
        return None
    parts = tuple(p for p in module.split(".") if p)
    if level:
        base = module_parts(analysis.path)[:-1]
        base = base[: len(base) - (level - 1)] if level > 1 else base
        wanted = [base + parts]
    else:
        wanted = None
    for (mod_parts, fname), kind in analysis.project.items():
        if fname != name:
            continue
        if mod_parts and mod_parts[-1] == "__init__":
            mod_parts = mod_parts[:-1]
        if wanted is not None:
            if mod_parts in wanted:
                return kind
        elif parts and mod_parts[-len(parts):] == parts:
            return kind
    return None


def module_parts(path: str) -> tuple[str, ...]:
    p = path.replace("\\", "/")
    for suffix in (".pyi", ".py"):
        if p.endswith(suffix):
            p = p[: -len(suffix)]
    return tuple(x for x in p.split("/") if x not in ("", "."))


