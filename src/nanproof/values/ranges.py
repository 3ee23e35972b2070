"""What is known about the range of a value: evidently an integer, a harmless constant,
or bounded by a branch condition, a boolean mask or a clip upstream.

Rules ask these questions to stay quiet where a textbook pattern does no harm:
``log(1 + n)`` for an integer count, ``1 / (1 + exp(-x))`` under ``if x >= 0:``,
``exp(-x[pos])`` with ``pos = x >= 0``. Every answer leans towards "not known".
"""
from __future__ import annotations

import ast
import math
import operator
import re

from .facts import MAX_DEPTH, _const, binding_of, bounded_above, nonneg, op, same, strip
from .bindings import AMBIGUOUS, Ref, statements_with_paths
from .names import normalise, qualname

# sqrt(numpy.finfo(numpy.float64).eps): a constant c below this keeps fewer than half of
# its digits in 1 + c (IEEE 754 binary64), so log(1 + c) and exp(c) - 1 lose them too.
HALF_DIGITS = 2.0**-26

# ---------------------------------------------------------------------------------------
# Integers and constants
# ---------------------------------------------------------------------------------------
_INT_CALLS = {
    "builtins.len", "builtins.int", "builtins.ord", "math.floor", "math.ceil", "math.trunc", "math.factorial",
    "math.comb", "math.perm", "math.isqrt", "math.gcd", "math.lcm", "numpy.bincount", "numpy.count_nonzero",
    "numpy.argmax", "numpy.argmin", "numpy.argsort", "numpy.random.randint", "numpy.random.binomial",
    "numpy.random.poisson", "torch.bincount", "torch.count_nonzero", "torch.argmax", "torch.argmin",
    "torch.argsort", "torch.randint",
}
_INT_METHODS = {"count", "index", "numel", "nelement", "bit_length", "argmax", "argmin", "argsort", "dim", "size"}
_INT_ATTRS = {"ndim", "size", "itemsize", "nbytes"}
_INT_OPS = (ast.Add, ast.Sub, ast.Mult, ast.FloorDiv, ast.Mod)
_RANGES = {"builtins.range", "numpy.arange", "torch.arange"}


def _qual(ref: Ref, func: ast.expr) -> str | None:
    q = qualname(ref.child(func)) if isinstance(func, (ast.Name, ast.Attribute)) else None
    return normalise(q) if q else None


def _int_range(ref: Ref, call: ast.Call) -> bool:
    """``range(n)`` / ``np.arange(n)`` / ``torch.arange(a, b)`` without float arguments."""
    if _qual(ref, call.func) not in _RANGES or any(k.arg == "dtype" for k in call.keywords):
        return False
    return not any(isinstance(_const(a), float) for a in call.args)


def _iterates_ints(ref: Ref, it: ast.expr, target: ast.expr, bound: ast.AST) -> bool:
    """The loop ``for target in it`` binds ``bound`` to integers: a range, or the index
    of an ``enumerate``."""
    if not isinstance(it, ast.Call):
        return False
    if target is bound:
        return _int_range(ref, it)
    return _qual(ref, it.func) == "builtins.enumerate" and isinstance(target, ast.Tuple) and target.elts[0] is bound


def _comprehension_variable(ref: Ref) -> bool | None:
    """For a name bound by an enclosing comprehension: whether it runs over integers
    (None when no comprehension binds it; ``flow`` does not see comprehension targets)."""
    name = ref.node
    found = None
    for comp in ref.scope.cache.setdefault("comprehensions", _comprehensions(ref.scope.node)):
        if not _encloses(comp, name):
            continue
        for gen in comp.generators:
            for t in ast.walk(gen.target):
                if isinstance(t, ast.Name) and t.id == name.id:
                    found = _iterates_ints(ref, gen.iter, gen.target, t)  # innermost wins
    return found


def _comprehensions(node: ast.AST) -> list:
    kinds = (ast.ListComp, ast.SetComp, ast.GeneratorExp, ast.DictComp)
    found = [n for n in ast.walk(node) if isinstance(n, kinds)]
    return sorted(found, key=lambda n: (n.lineno, n.col_offset))


def _encloses(outer: ast.AST, inner: ast.AST) -> bool:
    a = (outer.lineno, outer.col_offset), (outer.end_lineno, outer.end_col_offset)
    b = (getattr(inner, "lineno", 0), getattr(inner, "col_offset", 0))
    return a[0] <= b <= a[1]


# Names that hold counts by convention (common practice in numerical Python: n, k,
# n_samples, num_classes, steps, epoch): an unannotated parameter or attribute so named
# is taken as an integer, so that ``log(n + 1)`` is not reported.
_COUNT_NAME = re.compile(r"^(?:[nmkNMK]|n_\w+|num_?\w*|\w*_count|counts?|n?samples|steps|epochs?|iters?|iterations?|length|len_\w+|size)$")


def _names_shape(node: ast.AST) -> bool:
    """``x.shape``, ``event_shape``, ``batch_shape[1:]``: a tuple of sizes."""
    if isinstance(node, ast.Subscript):
        node = node.value
    word = node.attr if isinstance(node, ast.Attribute) else node.id if isinstance(node, ast.Name) else ""
    return word == "shape" or word.endswith("_shape")


def integral(ref: Ref, depth: int = 0) -> bool:
    """Evidently an integer (or an integer array): an int literal, ``len()``, a count, an
    index of ``range`` / ``enumerate``, ``np.arange(n)``, a parameter annotated ``int``,
    ``x.shape[0]``, or integer arithmetic of those."""
    if depth > MAX_DEPTH:
        return False
    if isinstance(ref.node, ast.Name) and (comp := _comprehension_variable(ref)) is not None:
        return comp
    ref = strip(ref)
    node = ref.node
    if isinstance(node, ast.Constant):
        return isinstance(node.value, int)
    if isinstance(node, ast.Name):
        b = binding_of(ref)
        if b is None or b is AMBIGUOUS:
            return False
        if isinstance(b.stmt, (ast.For, ast.AsyncFor)) and b.kind in ("loop", "other"):  # tuple targets are "other"
            return _iterates_ints(ref, b.stmt.iter, b.stmt.target, b.target)
        if b.kind == "other" and isinstance(b.stmt, ast.Assign) and _names_shape(b.stmt.value):
            return True  # (n, d) = x.shape
        ann = getattr(b.target, "annotation", None) if b.kind == "param" else None
        if ann is None and b.kind in ("param", "other"):
            return bool(_COUNT_NAME.match(node.id))
        return isinstance(ann, ast.Name) and ann.id == "int"
    if isinstance(node, ast.BinOp):
        l, r = ref.child(node.left), ref.child(node.right)
        if isinstance(node.op, ast.Pow):
            c = _const(node.right)
            return isinstance(c, int) and c >= 0 and integral(l, depth + 1)
        return isinstance(node.op, _INT_OPS) and integral(l, depth + 1) and integral(r, depth + 1)
    if isinstance(node, ast.UnaryOp):
        return isinstance(node.op, (ast.USub, ast.UAdd, ast.Invert)) and integral(ref.child(node.operand), depth + 1)
    if isinstance(node, ast.Subscript):  # x.shape[0], counts[k]
        v = node.value
        return (isinstance(v, ast.Attribute) and v.attr == "shape") or integral(ref.child(v), depth + 1)
    if isinstance(node, ast.Attribute):
        return node.attr in _INT_ATTRS or bool(_COUNT_NAME.match(node.attr))
    if isinstance(node, ast.Call):
        q = _qual(ref, node.func)
        if q in _INT_CALLS or _int_range(ref, node):
            return True
        if q == "builtins.round":
            return len(node.args) == 1 and not node.keywords
        if q == "math.prod" and node.args:  # a product of shape entries or of integers
            arg = strip(ref.child(node.args[0]))
            return _names_shape(arg.node) or integral(arg, depth + 1)
        f = node.func
        return q is None and isinstance(f, ast.Attribute) and f.attr in _INT_METHODS
    return False


_NAMED_CONSTANTS = {"math.pi": math.pi, "math.e": math.e, "math.tau": math.tau, "numpy.pi": math.pi, "numpy.e": math.e, "torch.pi": math.pi}
_ARITHMETIC = {ast.Add: operator.add, ast.Sub: operator.sub, ast.Mult: operator.mul, ast.Div: operator.truediv, ast.Pow: operator.pow}


def param_default(ref: Ref) -> float | None:
    """The numeric default of the parameter a name refers to (``smoothing=0.1``)."""
    b = binding_of(ref) if isinstance(ref.node, ast.Name) else None
    if b is None or b is AMBIGUOUS or b.kind != "param" or b.owner is None:
        return None
    a = getattr(b.owner.node, "args", None)
    if a is None:
        return None
    positional = [*a.posonlyargs, *a.args]
    pairs = list(zip(positional[len(positional) - len(a.defaults):], a.defaults)) + list(zip(a.kwonlyargs, a.kw_defaults))
    for arg, default in pairs:
        if arg is b.target and default is not None:
            return _const(default)
    return None


def constant(ref: Ref, depth: int = 0, defaults: bool = False) -> float | None:
    """The value of a constant expression: number literals, ``math.pi`` / ``np.e``, and
    arithmetic of them, directly or through names assigned once. With ``defaults``, a
    parameter counts as its numeric default (a configuration value such as
    ``smoothing=0.1``)."""
    ref = strip(ref)
    node = ref.node
    c = _const(node)
    if c is not None or depth > MAX_DEPTH:
        return c
    if isinstance(node, (ast.Name, ast.Attribute)):
        v = _NAMED_CONSTANTS.get(_qual(ref, node) or "")
        return param_default(ref) if v is None and defaults else v
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        v = constant(ref.child(node.operand), depth + 1, defaults)
        return None if v is None else (-v if isinstance(node.op, ast.USub) else v)
    if isinstance(node, ast.BinOp) and type(node.op) in _ARITHMETIC:
        a, b = constant(ref.child(node.left), depth + 1, defaults), constant(ref.child(node.right), depth + 1, defaults)
        try:
            v = _ARITHMETIC[type(node.op)](a, b) if a is not None and b is not None else None
        except (ArithmeticError, ValueError):
            return None
        return v if isinstance(v, (int, float)) else None
    return None


def harmless_term(ref: Ref) -> bool:
    """``1 + x`` loses nothing worth a finding: x is an integer (1 + n is exact), or a
    constant not below HALF_DIGITS in magnitude."""
    c = constant(ref, defaults=True)
    if c is not None:
        return c == 0 or abs(c) >= HALF_DIGITS
    return integral(ref)


# ---------------------------------------------------------------------------------------
# Bounds from guards: clips, masks, branch conditions
# ---------------------------------------------------------------------------------------
# A bound the code states (a clip, a branch condition) counts as the author's guard when
# it keeps exp finite in float64: ln(numpy.finfo(numpy.float64).max) = 709.78 (IEEE 754).
LIMIT = 709.78


def _cmp_bounds(cond: Ref, truth: bool, target: Ref, depth: int = 0) -> list[tuple[str, float]]:
    """Bounds ("lo"/"hi", c) that ``cond`` being ``truth`` puts on ``target``."""
    cond = strip(cond)
    node = cond.node
    if depth > 4:
        return []
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.Not, ast.Invert)):
        return _cmp_bounds(cond.child(node.operand), not truth, target, depth + 1)
    if isinstance(node, ast.Call) and node.args and _qual(cond, node.func) in ("numpy.logical_not", "torch.logical_not"):
        return _cmp_bounds(cond.child(node.args[0]), not truth, target, depth + 1)
    parts = None
    if truth and isinstance(node, ast.BoolOp) and isinstance(node.op, ast.And):
        parts = node.values
    elif truth and isinstance(node, ast.BinOp) and isinstance(node.op, ast.BitAnd):
        parts = [node.left, node.right]
    if parts is not None:
        return [b for p in parts for b in _cmp_bounds(cond.child(p), True, target, depth + 1)]
    if not (isinstance(node, ast.Compare) and len(node.ops) == 1):
        return []
    left, cmp, right = node.left, node.ops[0], node.comparators[0]
    if not isinstance(cmp, (ast.Gt, ast.GtE, ast.Lt, ast.LtE)):
        return []
    if same(cond.child(left), target):
        other, above = right, isinstance(cmp, (ast.Gt, ast.GtE))
    elif same(cond.child(right), target):
        other, above = left, isinstance(cmp, (ast.Lt, ast.LtE))
    else:
        return []
    # A threshold the source does not spell out (``x > threshold``) is still a guard
    # the author wrote on purpose: it counts as a bound of 0.
    c = constant(cond.child(other))
    return [("lo" if above == truth else "hi", 0.0 if c is None else c)]


def conditions(at: Ref, stmt: ast.stmt, lazy_only: bool) -> list[tuple[Ref, bool]]:
    """Conditions known to hold (cond, truth) where ``at`` is evaluated: enclosing ``if``
    and ``while`` tests, ``if ...: return`` before the statement, the branch of a
    conditional expression, and (unless ``lazy_only``) the branch of ``where(c, a, b)``,
    which evaluates both branches: fine for values, not for gradients."""
    scope = at.scope
    by_id = scope.cache.get("stmt_paths")
    if by_id is None:
        by_id = scope.cache["stmt_paths"] = {id(s): (s, p) for s, p in statements_with_paths(scope.node)}
    out = []
    for i, (sid, block) in enumerate(at.path):
        s = by_id.get(sid, (None,))[0]
        if (isinstance(s, ast.If) and block in (0, 1)) or (isinstance(s, ast.While) and block == 0):
            out.append((Ref(s.test, scope, at.path[:i]), block == 0))
    parent = by_id.get(at.path[-1][0], (None,))[0] if at.path else scope.node
    for sibling in _block_of(parent, at.path[-1][1] if at.path else 0):
        if sibling is stmt:
            break
        if isinstance(sibling, ast.If) and not sibling.orelse and _exits(sibling.body):
            out.append((Ref(sibling.test, scope, at.path), False))
    for n in ast.walk(stmt):
        if isinstance(n, ast.IfExp):
            for branch, truth in ((n.body, True), (n.orelse, False)):
                if _contains(branch, at.node):
                    out.append((at.child(n.test), truth))
        elif not lazy_only and isinstance(n, ast.Call) and len(n.args) == 3 and op(at.child(n), "where"):
            for branch, truth in ((n.args[1], True), (n.args[2], False)):
                if _contains(branch, at.node):
                    out.append((at.child(n.args[0]), truth))
    return out


def _block_of(parent: ast.AST | None, block: int) -> list:
    """The statement list numbered ``block`` (as in ``flow`` paths) of ``parent``; empty
    for a lambda, whose body is an expression."""
    if parent is None:
        return []
    if block >= 10:
        return parent.cases[block - 10].body
    found = getattr(parent, ("body", "orelse", "finalbody", "handlers")[block], None)
    return found if isinstance(found, list) else []


def _exits(body: list) -> bool:
    return bool(body) and isinstance(body[-1], (ast.Return, ast.Raise, ast.Continue, ast.Break))


def _contains(outer: ast.AST, node: ast.AST) -> bool:
    return any(n is node for n in ast.walk(outer))


def _bound(ref: Ref, side: str, conds: list[tuple[Ref, bool]], depth: int = 0) -> float | None:
    """The best constant bound on ``ref`` from one side ("lo" or "hi")."""
    if depth > MAX_DEPTH:
        return None
    ref = strip(ref)
    node = ref.node
    found = [c for cond, truth in conds for s, c in _cmp_bounds(cond, truth, ref) if s == side]
    c = _const(node)
    if c is not None:
        found.append(c)
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        inner = _bound(ref.child(node.operand), "hi" if side == "lo" else "lo", conds, depth + 1)
        if inner is not None:
            found.append(-inner)
    if isinstance(node, ast.Subscript):  # x[mask] with mask = x >= 0 (or ~mask)
        found.extend(c for s, c in _cmp_bounds(ref.child(node.slice), True, ref.child(node.value)) if s == side)
    if side == "lo" and nonneg(ref):
        found.append(0.0)
    if side == "hi" and isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub) and _ordered(ref.child(node.left), ref.child(node.right)):
        found.append(0.0)
    if (oc := op(ref, "clip")) is not None:
        c = _const_or_none(_clip_bound(oc, side))
        if c is not None:
            found.append(c)
    if not found:
        return None
    return max(found) if side == "lo" else min(found)


def _pair(ref: Ref, *ops: str) -> list[Ref] | None:
    """The arguments of an elementwise ``maximum(a, b)`` / ``max(a, b)`` (``ops``) or of
    ``where(c, a, b)``."""
    oc = op(ref, *ops)
    if oc is None or oc.is_method or len(oc.call.args) < 2 or oc.call.keywords:
        return None
    if oc.op in ("max", "min") and oc.framework != "builtins":
        return None  # np.max(a, 1) reduces along an axis
    return [ref.child(a) for a in oc.call.args]


def _ordered(small: Ref, big: Ref) -> bool:
    """``small <= big`` by construction: ``a - maximum(a, b)``, ``minimum(a, b) -
    maximum(a, b)``, ``where(a >= b, b, a) - where(a >= b, a, b)``."""
    bigs = _pair(big, "maximum", "max")
    if bigs is not None:
        smalls = _pair(small, "minimum", "min") or [small]
        return all(any(same(s, b) for b in bigs) for s in smalls)
    w_small, w_big = op(small, "where"), op(big, "where")
    if w_small is None or w_big is None or len(w_small.call.args) != 3 or len(w_big.call.args) != 3:
        return False
    c, hi, lo = (big.child(a) for a in w_big.call.args)
    c2, lo2, hi2 = (small.child(a) for a in w_small.call.args)
    cond = strip(c).node
    if not (same(c, c2) and same(hi, hi2) and same(lo, lo2) and isinstance(cond, ast.Compare) and len(cond.ops) == 1):
        return False
    left, right = strip(c).child(cond.left), strip(c).child(cond.comparators[0])
    if isinstance(cond.ops[0], (ast.Gt, ast.GtE)):
        return same(left, hi) and same(right, lo)
    return isinstance(cond.ops[0], (ast.Lt, ast.LtE)) and same(left, lo) and same(right, hi)


def _clip_bound(oc, side: str) -> ast.expr | None:
    """The lower ("lo") or upper ("hi") bound of clip/clamp/clamp_min/clamp_max."""
    method = oc.call.func.attr if isinstance(oc.call.func, ast.Attribute) else ""
    if method in ("clamp_min", "clamp_max"):
        return oc.arg(0) if method == ("clamp_min" if side == "lo" else "clamp_max") else None
    names = ("min", "a_min", "clip_value_min") if side == "lo" else ("max", "a_max", "clip_value_max")
    return oc.keyword(*names) or oc.arg(0 if side == "lo" else 1)


def _const_or_none(node: ast.expr | None) -> float | None:
    return _const(node) if node is not None else None


def exp_cannot_overflow(at: Ref, stmt: ast.stmt, arg: Ref, lazy_only: bool) -> bool:
    """``exp(arg)``, evaluated at ``at``, stays below the float32 overflow threshold:
    bounded above by construction (``-abs(x)``), by a clip, by a mask, or by a branch."""
    if bounded_above(arg):
        return True
    hi = _bound(arg, "hi", conditions(at, stmt, lazy_only))
    return hi is not None and hi < LIMIT
