"""Where the nan of x * log(x) is kept out: the term itself (``p * log(p)``,
``p * log(p / q)``), and the guards around it: positive or filtered values, Python
branches, ``where`` / ``nansum`` / ``nan_to_num``. Answers lean towards silence."""
from __future__ import annotations

import ast
from dataclasses import dataclass

from ..values import facts
from ..analyse import Context
from ..values.bindings import _BLOCK_FIELDS, AMBIGUOUS, Ref, statements_with_paths
from ..values.names import OpCall, qualname
from ..values.ranges import constant
from ._stats_shapes import nan_aware


# ---------------------------------------------------------------------------------------
# Where a node sits in its statement
# ---------------------------------------------------------------------------------------
def _parents(ctx: Context) -> dict[int, ast.AST]:
    key = ("parents", id(ctx.stmt))
    cache = ctx.scope.cache
    if key not in cache:
        cache[key] = {id(c): n for n in ast.walk(ctx.stmt) for c in ast.iter_child_nodes(n)}
    return cache[key]


def _ancestors(ctx: Context, node: ast.AST):
    """(child, parent) pairs from ``node`` up to its statement."""
    parents = _parents(ctx)
    while id(node) in parents:
        parent = parents[id(node)]
        yield node, parent
        node = parent


def needs_parens(ctx: Context, node: ast.AST) -> bool:
    """Would a difference put in place of ``node`` need parentheses? Not as a statement's
    value, an argument, or where the source already wraps the node in them."""
    parent = _parents(ctx).get(id(node))
    if isinstance(parent, (ast.stmt, ast.keyword)) or (isinstance(parent, ast.Call) and node in parent.args):
        return False
    if node.lineno == node.end_lineno:
        line = ctx.analysis.lines[node.lineno - 1].encode()
        before, after = line[: node.col_offset].rstrip(), line[node.end_col_offset :].lstrip()
        return not (before.endswith(b"(") and after.startswith(b")"))
    return True


def _statement(ctx: Context, sid: int) -> ast.stmt | None:
    cache = ctx.scope.cache
    if "statements_by_id" not in cache:
        cache["statements_by_id"] = {id(s): s for s, _ in statements_with_paths(ctx.scope.node)}
    return cache["statements_by_id"].get(sid)


# ---------------------------------------------------------------------------------------
# x * log(x) and its guards
# ---------------------------------------------------------------------------------------
_LOGS = ("log", "log2", "log10")


@dataclass(frozen=True)
class XLogX:
    p: Ref  # the factor, sign removed
    log: Ref  # the log call
    oc: OpCall  # its operation
    q: Ref | None  # the q of p * log(p / q) or p * (log(p) - log(q))
    negated: bool  # an odd number of unary minus signs on the factors
    one_plus: tuple[Ref, bool] | None = None  # (y, minus) when p is 1 - y or 1 + y


def one_plus(p: Ref) -> tuple[Ref, bool] | None:
    """(y, True) for ``1 - y``, (y, False) for ``1 + y`` / ``y + 1``."""
    s = facts.strip(p)
    n = s.node
    if isinstance(n, ast.BinOp) and isinstance(n.op, (ast.Add, ast.Sub)):
        if facts._const(n.left) == 1:
            return s.child(n.right), isinstance(n.op, ast.Sub)
        if isinstance(n.op, ast.Add) and facts._const(n.right) == 1:
            return s.child(n.left), False
    return None


def _is_log1p_of(p: Ref, u: Ref) -> bool:
    """log1p(u) is log(p): ``(1 - q) * log1p(-q)``, ``(1 + u) * log1p(u)``."""
    got = one_plus(p)
    if got is None:
        return False
    y, minus = got
    if not minus:
        return facts.same(u, y)
    us = facts.strip(u)
    return isinstance(us.node, ast.UnaryOp) and isinstance(us.node.op, ast.USub) and facts.same(us.child(us.node.operand), y)


def _unsign(ref: Ref) -> tuple[Ref, bool]:
    """``p`` of ``-p`` or ``-1 * p`` (other factors would be lost by the rewrite)."""
    inner, factor = facts.unscaled(ref)
    if factor in (1.0, -1.0):
        return inner, factor < 0
    return ref, False


def _log_call(ref: Ref) -> tuple[Ref, OpCall, Ref] | None:
    s = facts.strip(ref)
    oc = facts.op_of(s) or _math_log_base(s)
    if oc is None or oc.op not in (*_LOGS, "log1p", "log_base") or oc.subject is None:
        return None
    if not oc.is_method and len(oc.call.args) != (2 if oc.op == "log_base" else 1):
        return None
    return s, oc, s.child(oc.subject)


def _math_log_base(ref: Ref) -> OpCall | None:
    """``math.log(p, 2)``: not a natural log (``names`` leaves it out for that reason), but
    ``p * math.log(p, 2)`` still raises at p = 0."""
    n = ref.node
    if isinstance(n, ast.Call) and len(n.args) == 2 and not n.keywords and isinstance(n.func, (ast.Name, ast.Attribute)):
        if qualname(ref.child(n.func)) == "math.log":
            return OpCall("log_base", "math", n, "math.log", None)
    return None


def _log_term(p: Ref, other: Ref) -> tuple[Ref, OpCall, Ref | None] | None:
    got = _log_call(other)
    if got is not None:
        log, oc, arg = got
        if oc.op == "log1p":
            return (log, oc, None) if _is_log1p_of(p, arg) else None
        if facts.same(p, arg):
            return log, oc, None
        a = facts.strip(arg)
        if isinstance(a.node, ast.BinOp) and isinstance(a.node.op, ast.Div) and facts.same(p, a.child(a.node.left)):
            return log, oc, a.child(a.node.right)
        return None
    d = facts.strip(other)
    if isinstance(d.node, ast.BinOp) and isinstance(d.node.op, ast.Sub):
        first, second = _log_call(d.child(d.node.left)), _log_call(d.child(d.node.right))
        if first and second and first[1].op == second[1].op != "log1p" and facts.same(p, first[2]):
            return first[0], first[1], second[2]
    return None


def xlogx_parts(ctx: Context, node: ast.BinOp) -> XLogX | None:
    """``p * log(p)``, ``p * log(p / q)``, ``p * (log(p) - log(q))`` in either order;
    ``(1 - q) * log1p(-q)`` counts as ``p * log(p)``."""
    for a, b in ((node.left, node.right), (node.right, node.left)):
        p, neg_p = _unsign(ctx.ref(a))
        other, neg_l = _unsign(ctx.ref(b))
        got = _log_term(p, other)
        if got is not None:
            return XLogX(p, got[0], got[1], got[2], neg_p != neg_l, one_plus(p) if got[2] is None else None)
    return None


def positive(ref: Ref, depth: int = 0) -> bool:
    """Evidently above 0: a positive constant, an epsilon, ``clip(p, lo, ...)`` /
    ``maximum(p, lo)`` with such a ``lo``, a non-negative value plus such a constant."""
    if depth > 4:
        return False
    s = facts.strip(ref)
    n = s.node
    c = constant(s, defaults=True)  # 3 / 5, math.e, names bound to constants, 1.0 - smoothing
    if c is not None:
        return c > 0
    if _a_count(s) or (isinstance(n, ast.BinOp) and isinstance(n.op, ast.Div) and _a_count(s.child(n.left))):
        return True  # count / total with count >= 1
    if facts.is_epsilon(s) or facts.unguard(s).node is not n or _counting_from_one(s):
        return True
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Add):
        l, r = s.child(n.left), s.child(n.right)
        return (positive(l, depth + 1) and facts.nonneg(r)) or (positive(r, depth + 1) and facts.nonneg(l))
    oc = facts.op_of(s)
    if oc is not None and oc.op == "clip" and not (isinstance(n.func, ast.Attribute) and n.func.attr == "clamp_max"):
        lo = oc.arg(0, "min", "a_min", "clip_value_min", "min_value")
        return lo is not None and positive(s.child(lo), depth + 1)
    if oc is not None and oc.op == "maximum" and len(n.args) == 2:
        return any(positive(s.child(a), depth + 1) for a in n.args)
    return False


def _a_count(ref: Ref) -> bool:
    """A count of something that occurs: ``xs.count(v)`` for ``v`` drawn from ``xs`` (or
    ``set(xs)``), or the values of a ``Counter`` (``for w, c in counts.items()``)."""
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute) and n.func.attr == "count" and len(n.args) == 1:
        b = facts.binding_of(s.child(n.args[0]))
        if b is None or b is AMBIGUOUS or b.kind != "loop" or not isinstance(b.stmt, ast.For):
            return False
        it = b.stmt.iter
        if isinstance(it, ast.Call) and isinstance(it.func, ast.Name) and it.func.id == "set" and len(it.args) == 1:
            it = it.args[0]
        return facts.same(s.child(it), s.child(n.func.value))
    b = facts.binding_of(s) if isinstance(n, ast.Name) else None
    if b is None or b is AMBIGUOUS or not isinstance(b.stmt, (ast.For, ast.comprehension)):
        return False
    it = b.stmt.iter
    if not (isinstance(it, ast.Call) and isinstance(it.func, ast.Attribute) and it.func.attr in ("items", "values", "most_common")):
        return False
    target = b.stmt.target
    if it.func.attr in ("items", "most_common") and not (isinstance(target, ast.Tuple) and len(target.elts) == 2 and target.elts[1] is b.target):
        return False
    counter = facts.strip(s.child(it.func.value)).node
    return isinstance(counter, ast.Call) and qualname(s.child(counter.func)) in ("collections.Counter", "builtins.Counter")


def _counting_from_one(ref: Ref) -> bool:
    """``range(1, n)`` / ``np.arange(1, n)`` (a start of at least 1, counting up),
    ``linspace(a, b)`` with both ends above zero, ``logspace``."""
    n = ref.node
    if not (isinstance(n, ast.Call) and isinstance(n.func, (ast.Name, ast.Attribute)) and len(n.args) >= 2):
        return False
    q = qualname(ref.child(n.func))
    start = facts._const(n.args[0])
    if q in ("numpy.linspace", "torch.linspace"):  # both ends above zero
        stop = facts._const(n.args[1])
        return start is not None and stop is not None and start > 0 and stop > 0
    if q == "numpy.logspace":
        return True
    if q not in ("builtins.range", "numpy.arange", "torch.arange"):
        return False
    step = facts._const(n.args[2]) if len(n.args) == 3 else 1
    return start is not None and step is not None and start >= 1 and step > 0


def filtered(ref: Ref) -> bool:
    """Only the non-zero entries: ``p[p > 0]``, ``p[p != 0]``, ``p[np.nonzero(p)]``, or a
    name bound to one of these."""
    s = facts.strip(ref)
    n = s.node
    if not isinstance(n, ast.Subscript):
        return False
    idx = facts.strip(s.child(n.slice))
    if guard_sign(idx, s.child(n.value)) == "pos":
        return True
    f = idx.node.func if isinstance(idx.node, ast.Call) else None
    name = f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else ""
    return name in ("nonzero", "flatnonzero", "argwhere")


def _compare_side(ref: Ref, p: Ref) -> tuple[type, float] | None:
    n = ref.node
    if not (isinstance(n, ast.Compare) and len(n.ops) == 1):
        return None
    mirror = {ast.Gt: ast.Lt, ast.Lt: ast.Gt, ast.GtE: ast.LtE, ast.LtE: ast.GtE, ast.Eq: ast.Eq, ast.NotEq: ast.NotEq}
    op, other = type(n.ops[0]), n.comparators[0]
    if not facts.same(ref.child(n.left), p):
        if not facts.same(ref.child(other), p):
            return None
        op, other = mirror.get(op, ast.Is), n.left
    c = facts._const(other)
    if c is None and facts.is_epsilon(ref.child(other)):
        c = facts.EPS_MAX  # a small positive guard value
    return (op, c) if c is not None else None


def guard_sign(ref: Ref, p: Ref) -> str | None:
    """"pos" when the condition holds only where p > 0 (``p > 0``, ``p != 0``, ``p > eps``,
    ``p`` itself); "neg" when it holds wherever p <= 0 (``p == 0``, ``p <= eps``, ``not p``),
    so that its else-branch has p > 0 (p is a probability: never below 0)."""
    n = ref.node
    if isinstance(n, ast.BoolOp):
        found = [guard_sign(ref.child(v), p) for v in n.values]
        want = "pos" if isinstance(n.op, ast.And) else "neg"
        return want if want in found else None
    if isinstance(n, ast.UnaryOp) and isinstance(n.op, ast.Not):
        return {"pos": "neg", "neg": "pos"}.get(guard_sign(ref.child(n.operand), p))
    if facts.same(ref, p):
        return "pos"
    side = _compare_side(ref, p)
    if side is None:
        return None
    op, c = side
    if (op is ast.Gt and c >= 0) or (op is ast.GtE and c > 0) or (op is ast.NotEq and c == 0):
        return "pos"
    if (op is ast.Eq and c == 0) or (op is ast.LtE and c >= 0) or (op is ast.Lt and c > 0):
        return "neg"
    return None


def _block(ctx: Context) -> list:
    if not ctx.path:
        return getattr(ctx.scope.node, "body", [])
    sid, i = ctx.path[-1]
    s = _statement(ctx, sid)
    if s is None:
        return []
    if i >= 10:
        return s.cases[i - 10].body
    block = getattr(s, _BLOCK_FIELDS[i], [])
    return block if isinstance(block, list) else []


_EXITS = (ast.Continue, ast.Return, ast.Break, ast.Raise)


def statement_guard(ctx: Context, p: Ref) -> bool:
    """Inside ``if p > 0:`` (or the else of ``if p == 0:``), or after an early
    ``if p == 0: continue`` / ``return`` in the same block."""
    for sid, block in ctx.path:
        s = _statement(ctx, sid)
        if isinstance(s, (ast.If, ast.While)):
            t = guard_sign(ctx.ref(s.test), p)
            if (block == 0 and t == "pos") or (block == 1 and t == "neg"):
                return True
    body = _block(ctx)
    if not any(s is ctx.stmt for s in body):
        return False
    for s in body:
        if s is ctx.stmt:
            break
        if isinstance(s, ast.If) and not s.orelse and isinstance(s.body[-1], _EXITS) and guard_sign(ctx.ref(s.test), p) == "neg":
            return True
    return False


@dataclass(frozen=True)
class Guard:
    how: str  # "branch": a Python-level condition; "value": where / nansum / zeroing after
    word: str  # for the message
    framework: str = ""  # of the guard, for "value": NumPy needs only the value to be right
    call: OpCall | None = None
    node: ast.Call | None = None
    branch: int = 0  # which argument of where() holds the term


def expression_guard(ctx: Context, x: XLogX) -> Guard | None:
    """A guard inside the statement: ``t if p > 0 else 0``, a comprehension filtered on
    p > 0, ``where(p > 0, t, 0)``, ``nansum(t)``, ``nan_to_num(t)``."""
    for child, parent in _ancestors(ctx, ctx.node):
        if isinstance(parent, ast.IfExp):
            t = guard_sign(ctx.ref(parent.test), x.p)
            if (child is parent.body and t == "pos") or (child is parent.orelse and t == "neg"):
                return Guard("branch", "conditional")
        elif isinstance(parent, (ast.GeneratorExp, ast.ListComp, ast.SetComp, ast.DictComp)):
            if any(guard_sign(ctx.ref(c), x.p) == "pos" for g in parent.generators for c in g.ifs):
                return Guard("branch", "comprehension")
        elif isinstance(parent, ast.Call):
            oc = facts.op_of(ctx.ref(parent))
            if oc is None:
                continue
            if oc.op == "where" and len(parent.args) == 3 and child in parent.args[1:]:
                t = guard_sign(ctx.ref(parent.args[0]), x.p)
                branch = 1 if child is parent.args[1] else 2
                if (branch, t) in ((1, "pos"), (2, "neg")):
                    return Guard("value", "where()", oc.framework, oc, parent, branch)
            if oc.op == "nan_to_num" or (oc.op == "sum" and nan_aware(oc)):
                return Guard("value", "nansum()" if oc.op == "sum" else "nan_to_num()", oc.framework, oc, parent)
    return later_guard(ctx, x)


# ---------------------------------------------------------------------------------------
# Guards after the term is stored: h = p * log(p); h[p == 0] = 0
# ---------------------------------------------------------------------------------------
def _isnan_of(node: ast.AST, name: str) -> bool:
    """``isnan(h)`` / ``h.isnan()`` / ``~isfinite(h)`` of the name itself."""
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Invert):
        node, want = node.operand, "isfinite"
    else:
        want = "isnan"
    if not isinstance(node, ast.Call):
        return False
    f = node.func
    fname = f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else ""
    arg = node.args[0] if node.args else f.value if isinstance(f, ast.Attribute) else None
    return fname == want and isinstance(arg, ast.Name) and arg.id == name


def _zeroes(ctx: Context, s: ast.stmt, name: str, p: Ref) -> bool:
    """``h[p == 0] = 0`` or ``h[isnan(h)] = 0``."""
    if not (isinstance(s, ast.Assign) and len(s.targets) == 1 and facts._const(s.value) == 0):
        return False
    t = s.targets[0]
    if not (isinstance(t, ast.Subscript) and isinstance(t.value, ast.Name) and t.value.id == name):
        return False
    return guard_sign(ctx.ref(t.slice), p) == "neg" or _isnan_of(t.slice, name)


def _guarded_use(ctx: Context, load: ast.Name, p: Ref, parents: dict) -> Guard | None:
    """``h.masked_fill(p <= 0, 0)``, ``where(p > 0, h, 0)``, ``nansum(h)``, ``nan_to_num(h)``."""
    parent = parents.get(id(load))
    if isinstance(parent, ast.Attribute) and parent.attr == "masked_fill":
        call = parents.get(id(parent))
        ok = isinstance(call, ast.Call) and len(call.args) == 2 and facts._const(call.args[1]) == 0
        return Guard("value", "masked_fill()", "method") if ok and guard_sign(ctx.ref(call.args[0]), p) == "neg" else None
    oc = facts.op_of(ctx.ref(parent)) if isinstance(parent, ast.Call) else None
    if oc is None:
        return None
    if oc.op == "where" and len(parent.args) == 3 and load in parent.args[1:]:
        sign = guard_sign(ctx.ref(parent.args[0]), p)
        return Guard("value", "where()", oc.framework) if sign == ("pos" if load is parent.args[1] else "neg") else None
    if (oc.op == "nan_to_num" or (oc.op == "sum" and nan_aware(oc))) and load in parent.args:
        return Guard("value", "nansum()" if oc.op == "sum" else "nan_to_num()", oc.framework)
    return None


def later_guard(ctx: Context, x: XLogX) -> Guard | None:
    """The term is stored in a name, and the nan is removed before anything else reads it:
    the next statement naming it zeroes the bad entries, or every later read is guarded."""
    stmt = ctx.stmt
    if not (isinstance(stmt, ast.Assign) and len(stmt.targets) == 1 and isinstance(stmt.targets[0], ast.Name)):
        return None
    name = stmt.targets[0].id
    body = _block(ctx)
    at = next((i for i, s in enumerate(body) if s is stmt), None)
    for s in body[at + 1 :] if at is not None else ():
        if any(isinstance(n, ast.Name) and n.id == name for n in ast.walk(s)):
            if _zeroes(ctx, s, name, x.p):
                return Guard("value", "zeroing", x.oc.framework)
            break
    b = ctx.scope.lookup(name, (stmt.end_lineno, stmt.end_col_offset + 1), ctx.path)
    reads = [n for n in ctx.scope.loads(name) if ctx.scope.lookup(name, (n.lineno, n.col_offset), ctx.path) in (b, AMBIGUOUS)]
    cache = ctx.scope.cache
    if "parents" not in cache:
        cache["parents"] = {id(c): n for n in ast.walk(ctx.scope.node) for c in ast.iter_child_nodes(n)}
    guards = [_guarded_use(ctx, n, x.p, cache["parents"]) for n in reads]
    return guards[0] if guards and all(guards) else None
