"""Shapes the statistics rules look for: squares, means and counts, integers by
construction, sums of squares; and how to call a function the file may not import yet.
Answers lean towards silence, as in ``facts``."""
from __future__ import annotations

import ast
from dataclasses import dataclass

from ..values import facts
from ..analyse import Context
from ..values.bindings import AMBIGUOUS, Ref
from ..model import Edit
from ..values.names import OpCall, _import_target, framework_of, qualname
from ..rewrite import import_edit, module_alias


# ---------------------------------------------------------------------------------------
# Squares
# ---------------------------------------------------------------------------------------
def _is_two(node: ast.AST | None) -> bool:
    return node is not None and facts._const(node) == 2


def square_base(ref: Ref) -> Ref | None:
    """x of ``x**2``, ``x * x``, ``square(x)``, ``power(x, 2)``, ``x.pow(2)``."""
    ref = facts.strip(ref)
    node = ref.node
    if isinstance(node, ast.BinOp):
        if isinstance(node.op, ast.Pow) and _is_two(node.right):
            return ref.child(node.left)
        if isinstance(node.op, ast.Mult) and facts.same(ref.child(node.left), ref.child(node.right)):
            return ref.child(node.left)
        return None
    oc = facts.op_of(ref)
    if oc is not None and oc.subject is not None:
        if oc.op == "square" or (oc.op == "power" and _is_two(oc.arg(0, "exponent", "y", "x2"))):
            return ref.child(oc.subject)
    return None


def _squares_loop_variable(elt: ast.AST, name: str) -> bool:
    """``v**2`` / ``v * v`` of the comprehension variable itself (not followed further:
    the variable may shadow a name of the enclosing function)."""
    def is_v(e: ast.AST) -> bool:
        return isinstance(e, ast.Name) and e.id == name

    if not isinstance(elt, ast.BinOp):
        return False
    return (isinstance(elt.op, ast.Pow) and is_v(elt.left) and _is_two(elt.right)) or (
        isinstance(elt.op, ast.Mult) and is_v(elt.left) and is_v(elt.right)
    )


def squared_data(ref: Ref) -> Ref | None:
    """The values squared elementwise: x of ``x**2``, xs of ``(v**2 for v in xs)``."""
    base = square_base(ref)
    if base is not None:
        return base
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, (ast.GeneratorExp, ast.ListComp)) and len(n.generators) == 1:
        g = n.generators[0]
        if isinstance(g.target, ast.Name) and not g.ifs and not g.is_async and _squares_loop_variable(n.elt, g.target.id):
            return s.child(g.iter)
    return None


# ---------------------------------------------------------------------------------------
# Means, counts and the two moments of a variance
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Mean:
    data: Ref  # what is averaged
    red: facts.Reduction  # the mean, or the sum of sum(...) / n
    count: Ref | None  # the n of sum(...) / n
    ref: Ref  # the whole expression


def mean_of(ref: Ref) -> Mean | None:
    s = facts.strip(ref)
    red = facts.reduction(s, "mean")
    if red is not None:
        return Mean(red.operand, red, None, s)
    if isinstance(s.node, ast.BinOp) and isinstance(s.node.op, ast.Div):
        red = facts.reduction(s.child(s.node.left), "sum")
        if red is not None:
            return Mean(red.operand, red, s.child(s.node.right), s)
    return None


@dataclass(frozen=True)
class Moments:
    data: Ref  # x
    second: Mean  # E[x**2]
    first: Mean  # E[x]


def moments(left: Ref, right: Ref) -> Moments | None:
    """``E[x**2] - E[x]**2`` with both means over the same x, axis and weights."""
    second = mean_of(left)
    data = squared_data(second.data) if second is not None else None
    base = square_base(right) if data is not None else None
    first = mean_of(base) if base is not None else None
    if first is None or not facts.same(first.data, data) or not _same_reduction(second, first, data):
        return None
    if _centered(data) or _small_int_data(data):
        return None
    return Moments(data, second, first)


def nan_aware(oc: OpCall) -> bool:
    """np.nanmean, np.nansum, x.nansum(): a reduction that skips nan entries."""
    name = oc.call.func.attr if oc.is_method else (oc.qual or "").rsplit(".", 1)[-1]
    return name.startswith("nan")


def _weights(red: facts.Reduction) -> ast.AST | None:
    oc = red.call
    return oc.arg(1, "weights") if (oc.qual or "").endswith("average") else oc.keyword("weights")


def _same_node(a: Ref, an: ast.AST | None, b: Ref, bn: ast.AST | None) -> bool:
    if an is None or bn is None:
        return an is None and bn is None
    return facts.same(a.child(an), b.child(bn))


def _same_reduction(a: Mean, b: Mean, data: Ref) -> bool:
    ra, rb = a.red, b.red
    if ra.keepdims != rb.keepdims or nan_aware(ra.call) != nan_aware(rb.call):
        return False
    if not _same_node(ra.ref, ra.axis, rb.ref, rb.axis) or not _same_node(ra.ref, _weights(ra), rb.ref, _weights(rb)):
        return False
    if a.count is not None and b.count is not None:
        return facts.same(a.count, b.count)
    counted = a if a.count is not None else b if b.count is not None else None
    return counted is None or count_matches(counted.count, data, counted.red) is not False


def _count(ref: Ref, data: Ref) -> tuple[str, int | None] | None:
    """How ``ref`` counts ``data``: ("all", None) for x.size / np.size(x) / x.numel(),
    ("axis", k) for x.shape[k] / x.size(k), ("axis", 0) for len(x)."""
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, ast.Attribute) and n.attr == "size" and facts.same(s.child(n.value), data):
        return "all", None
    if isinstance(n, ast.Subscript) and isinstance(n.value, ast.Attribute) and n.value.attr == "shape":
        k = facts._const(n.slice)
        return ("axis", int(k)) if isinstance(k, int) and facts.same(s.child(n.value.value), data) else None
    if not isinstance(n, ast.Call):
        return None
    f = n.func
    if isinstance(f, ast.Attribute) and f.attr in ("numel", "nelement", "size") and facts.same(s.child(f.value), data):
        k = facts._const(n.args[0]) if len(n.args) == 1 else None
        if f.attr != "size" and not n.args:
            return "all", None
        return ("axis", int(k)) if isinstance(k, int) else None
    q = qualname(s.child(f)) if isinstance(f, (ast.Name, ast.Attribute)) else None
    if q and len(n.args) == 1 and facts.same(s.child(n.args[0]), data):
        if q == "builtins.len":
            return "axis", 0
        if framework_of(q) in ("numpy", "tf") and q.rsplit(".", 1)[-1] == "size":
            return "all", None
    return None


def count_matches(count: Ref, data: Ref, red: facts.Reduction) -> bool | None:
    """Is ``count`` the number of terms ``red`` sums? True, False, or None when only for
    1-D data (``len(x)`` against a sum over every element of an array)."""
    kind = _count(count, data)
    if kind is None:
        return False
    if red.axis is None:
        if kind[0] == "all" or red.call.framework in ("builtins", "math"):
            return True
        return None if kind == ("axis", 0) else False
    return kind[0] == "axis" and red.axis_value == kind[1]


_AXIS_WORDS = {"axis", "dim", "keepdims", "keepdim", "keep_dims", "reduction_indices"}


def plain_reduction(red: facts.Reduction) -> bool:
    """Only the operand, an axis and keepdims: no dtype, out, where or weights."""
    oc = red.call
    if any(k.arg not in _AXIS_WORDS for k in oc.call.keywords):
        return False
    extra = len(oc.call.args) - (0 if oc.is_method else 1)
    return extra <= (2 if oc.framework == "torch" or oc.is_method else 1)


def _centered(data: Ref) -> bool:
    """x - mean(x): the mean is already removed, nothing large is left to cancel."""
    s = facts.strip(data)
    n = s.node
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Sub):
        m = mean_of(s.child(n.right))
        return m is not None and facts.same(m.data, s.child(n.left))
    return False


# Integer data up to this size: squares and sums stay exact integers in float64 and the
# spread of distinct integers is at least about 1/n, so the rounding of mean(x**2) (at
# most 2**24 here) costs a few bits, not the result.
_SMALL_INT = 2**12


def _small_int_data(data: Ref) -> bool:
    """Integer literals or a literal range of small integers, evident in the source."""
    s = facts.strip(data)
    n = s.node
    if isinstance(n, (ast.List, ast.Tuple)):
        vals = [facts._const(e) for e in n.elts]
        return bool(vals) and all(type(v) is int and abs(v) <= _SMALL_INT for v in vals)
    if isinstance(n, ast.Call) and isinstance(n.func, (ast.Name, ast.Attribute)):
        q = qualname(s.child(n.func)) or ""
        if q in ("builtins.range", "numpy.arange") and n.args and not n.keywords:
            vals = [facts._const(a) for a in n.args]
            return all(type(v) is int and abs(v) <= _SMALL_INT for v in vals)
    return False


# ---------------------------------------------------------------------------------------
# Integers by construction
# ---------------------------------------------------------------------------------------
def _is_range(ref: Ref) -> bool:
    n = ref.node
    return isinstance(n, ast.Call) and isinstance(n.func, ast.Name) and qualname(ref.child(n.func)) == "builtins.range"


def evident_int(ref: Ref, depth: int = 0) -> bool:
    """A Python int by construction: an int literal, a loop variable over range(...),
    len(...), or arithmetic of those."""
    if depth > 6:
        return False
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, ast.Constant):
        return type(n.value) is int
    if isinstance(n, ast.Name):
        b = facts.binding_of(s)
        return b not in (None, AMBIGUOUS) and b.kind == "loop" and isinstance(b.stmt, ast.For) and _is_range(s.child(b.stmt.iter))
    if isinstance(n, ast.Call) and isinstance(n.func, ast.Name):
        return qualname(s.child(n.func)) in ("builtins.len", "builtins.int")
    if isinstance(n, ast.UnaryOp):
        return evident_int(s.child(n.operand), depth + 1)
    if isinstance(n, ast.BinOp) and isinstance(n.op, (ast.Add, ast.Sub, ast.Mult, ast.FloorDiv, ast.Mod)):
        return evident_int(s.child(n.left), depth + 1) and evident_int(s.child(n.right), depth + 1)
    return False


_SHAPE_WORDS = ("shape", "size", "sizes", "dims")


def _names_sizes(n: ast.AST) -> bool:
    if isinstance(n, ast.Subscript):
        n = n.value
    word = n.attr if isinstance(n, ast.Attribute) else n.id if isinstance(n, ast.Name) else ""
    return word.lower().endswith(_SHAPE_WORDS)


def exact_integers(data: Ref, prod: OpCall) -> bool:
    """Products that cannot underflow: a shape (``x.shape``, ``x.size()``, a name that
    says it holds sizes), or Python integers multiplied by math.prod (arbitrary
    precision)."""
    s = facts.strip(data)
    if _names_sizes(data.node) or _names_sizes(s.node):  # x.shape, kernel_size, full_out_shape
        return True
    n = s.node
    if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute) and n.func.attr == "size" and not n.args:
        return True
    if prod.framework != "math":
        return False
    if _is_range(s):
        return True
    if isinstance(n, (ast.List, ast.Tuple)):
        return all(evident_int(s.child(e)) for e in n.elts)
    if isinstance(n, (ast.GeneratorExp, ast.ListComp)):
        return evident_int(s.child(n.elt))
    return False


# ---------------------------------------------------------------------------------------
# Calling a function the file may not import yet
# ---------------------------------------------------------------------------------------
def imported_frameworks(ctx: Context) -> set[str]:
    cache = ctx.analysis.module.cache
    if "frameworks" not in cache:
        found = set()
        for n in ast.walk(ctx.analysis.tree):
            if isinstance(n, ast.Import):
                found |= {framework_of(a.name) for a in n.names}
            elif isinstance(n, ast.ImportFrom) and not n.level and n.module:
                found |= {framework_of(f"{n.module}.{a.name}") for a in n.names}
        cache["frameworks"] = found - {None}
    return cache["frameworks"]


def function_text(ctx: Context, module: str, name: str, qualified: bool = False) -> tuple[str, list[Edit]] | None:
    """How to call ``module.name`` here, and the import line it needs (none, or one; a
    fix that adds one is a review): a from-import of the function, an alias of the module,
    or a new import. ``qualified`` writes ``module.name`` with ``import module`` (for
    names as common as ``norm``)."""
    b = ctx.scope.lookup(name, None)
    if b not in (None, AMBIGUOUS) and b.kind == "import" and _import_target(b) == f"{module}.{name}":
        return name, []
    alias = module_alias(ctx.ref(), module)
    if alias:
        return f"{alias}.{name}", []
    tree = ctx.analysis.tree
    if _imported_whole(ctx, module):
        return f"{module}.{name}", []
    if qualified:
        top = ctx.scope.lookup(module.split(".")[0], None)
        if top is None or (top is not AMBIGUOUS and top.kind == "import" and _import_target(top) == module.split(".")[0]):
            return f"{module}.{name}", [import_edit(tree, f"import {module}")]
        return None
    return (name, [import_edit(tree, f"from {module} import {name}")]) if b is None else None


def _imported_whole(ctx: Context, module: str) -> bool:
    """``import scipy.special`` (no alias) at the top of the file, its top name unshadowed."""
    b = ctx.scope.lookup(module.split(".")[0], None)
    if b in (None, AMBIGUOUS) or b.kind != "import":
        return False
    return any(
        isinstance(n, ast.Import) and any(a.name == module and a.asname is None for a in n.names) for n in ctx.analysis.tree.body
    )


# ---------------------------------------------------------------------------------------
# Sums of squares under a square root
# ---------------------------------------------------------------------------------------
def square_terms(ref: Ref) -> list[Ref] | None:
    """The bases of ``a**2 + b**2 (+ ...)``: two or more, every term a square."""
    s = facts.strip(ref)
    n = s.node
    if not (isinstance(n, ast.BinOp) and isinstance(n.op, ast.Add)):
        return None
    bases: list[Ref] = []
    for side in (n.left, n.right):
        inner = square_terms(s.child(side))
        if inner is None:
            b = square_base(s.child(side))
            if b is None:
                return None
            inner = [b]
        bases.extend(inner)
    return bases


@dataclass(frozen=True)
class Vector:
    data: Ref  # x of sum(x**2) or dot(x, x)
    red: facts.Reduction | None  # the sum, None for a dot product
    call: OpCall | None  # the dot call, for dot products written as calls


def sum_of_squares(ref: Ref) -> Vector | None:
    """``sum(x**2)`` (any axis, or over a comprehension), ``dot(x, x)``, ``x @ x``."""
    red = facts.reduction(ref, "sum")
    if red is not None:
        data = squared_data(red.operand)
        return Vector(data, red, None) if data is not None else None
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.MatMult) and facts.same(s.child(n.left), s.child(n.right)):
        return Vector(s.child(n.left), None, None)
    oc = facts.op_of(s)
    if oc is not None and oc.op == "matmul" and normalise_dot(oc):
        args = [oc.receiver, *oc.call.args] if oc.is_method else list(oc.call.args)
        if len(args) == 2 and facts.same(s.child(args[0]), s.child(args[1])):
            return Vector(s.child(args[0]), None, oc)
    return None


def normalise_dot(oc: OpCall) -> bool:
    """dot products (not matrix products): ``np.dot``, ``torch.dot``, ``x.dot(y)``."""
    if oc.is_method:
        return oc.call.func.attr == "dot"
    return (oc.qual or "").rsplit(".", 1)[-1] in ("dot", "inner", "vdot")


def scaled(ref: Ref) -> bool:
    """``x / m`` with m a max (of abs) of anything: already scaled against overflow."""
    s = facts.strip(ref)
    n = s.node
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Div):
        return facts.reduction(s.child(n.right), "max") is not None
    return False
