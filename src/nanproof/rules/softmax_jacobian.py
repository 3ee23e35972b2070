"""softmax-jacobian-dense: the n-by-n softmax Jacobian built to multiply a vector."""
from __future__ import annotations

import ast

from ..values import facts, origins
from ..analyse import Context, Hit
from ..values.bindings import Ref
from ..values.names import OpCall, normalise, qualname
from ..registry import rule
from ..rewrite import func_prefix, paren, simple
from ._shared import lines_note


# ---------------------------------------------------------------------------------------
# softmax-jacobian-dense
# ---------------------------------------------------------------------------------------
def _expanded(ref: Ref, axis_last: bool) -> Ref | None:
    """``y[:, None]`` / ``y.unsqueeze(-1)`` / ``y.reshape(-1, 1)`` (column) or
    ``y[None, :]`` / ``y.unsqueeze(-2)`` / ``y.reshape(1, -1)`` (row): returns y."""
    ref = facts.strip(ref)
    node = ref.node
    if isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Tuple) and len(node.slice.elts) == 2:
        a, b = node.slice.elts
        col = isinstance(a, ast.Slice) and facts._is_newaxis(b)
        row = facts._is_newaxis(a) and isinstance(b, ast.Slice)
        if (col and axis_last) or (row and not axis_last):
            return ref.child(node.value)
        return None
    if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
        attr, args = node.func.attr, node.args
        consts = [facts._const(a) for a in args]
        if attr == "unsqueeze" and len(args) == 1:
            if consts[0] in ((-1, 1) if axis_last else (-2, 0)):
                return ref.child(node.func.value)
        if attr in ("reshape", "view") and len(args) == 2:
            if (consts[1] == 1) if axis_last else (consts[0] == 1):
                return ref.child(node.func.value)
    return None


def outer_of(ref: Ref) -> Ref | None:
    """The vector y of an explicit outer product y y^T."""
    ref = facts.strip(ref)
    node = ref.node
    oc = facts.op_of(ref)
    if oc is not None and oc.op == "outer" and len(oc.call.args) == 2:
        a, b = ref.child(oc.call.args[0]), ref.child(oc.call.args[1])
        return a if facts.same(a, b) else None
    if oc is not None and oc.op == "einsum" and len(oc.call.args) == 3:
        spec = oc.call.args[0]
        if isinstance(spec, ast.Constant) and isinstance(spec.value, str):
            s = spec.value.replace(" ", "")
            ins, _, out = s.partition("->")
            parts = ins.split(",")
            if len(parts) == 2 and len(out) == len(parts[0]) + 1 and parts[0][:-1] == parts[1][:-1] and out == parts[0] + parts[1][-1]:
                a, b = ref.child(oc.call.args[1]), ref.child(oc.call.args[2])
                return a if facts.same(a, b) else None
        return None
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.MatMult)):
        col, row = _expanded(ref.child(node.left), True), _expanded(ref.child(node.right), False)
        if col is not None and row is not None and facts.same(col, row):
            return col
    if oc is not None and oc.op == "matmul" and len(oc.call.args) == 2:
        col, row = _expanded(ref.child(oc.call.args[0]), True), _expanded(ref.child(oc.call.args[1]), False)
        if col is not None and row is not None and facts.same(col, row):
            return col
    return None


def diag_of(ref: Ref) -> Ref | None:
    """The vector y of ``diag(y)``, ``diag_embed(y)``, ``eye(n) * y``."""
    ref = facts.strip(ref)
    node = ref.node
    oc = facts.op_of(ref)
    if oc is not None and oc.op == "diag" and oc.subject is not None:
        return ref.child(oc.subject)
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mult):
        for a, b in ((node.left, node.right), (node.right, node.left)):
            e = facts.op_of(facts.strip(ref.child(a)))
            if e is not None and e.op == "eye":
                return ref.child(b)
    return None



def _products(ctx: Context, name: str, b) -> list[tuple[ast.AST, ast.AST]] | None:
    """Each use of the Jacobian held in ``name`` as (product node, vector node); None
    when some use is not a product with a vector (the matrix is needed for itself)."""
    out = []
    for load in ctx.scope.loads(name):
        if ctx.scope.lookup(name, (load.lineno, load.col_offset), ()) is not b:
            continue
        product = _product_around(ctx, load)
        if product is None:
            return None
        out.append(product)
    return out


def _product_around(ctx: Context, load: ast.Name):
    for node in ast.walk(ctx.scope.node) if False else _scope_nodes(ctx):
        if isinstance(node, ast.BinOp) and isinstance(node.op, ast.MatMult):
            for j, g in ((node.left, node.right), (node.right, node.left)):
                if j is load or (isinstance(j, ast.Attribute) and j.attr in ("T", "mT") and j.value is load):
                    return node, g
        if isinstance(node, ast.Call):
            oc = facts.op_of(ctx.ref(node))
            if oc is not None and oc.op == "matmul":
                args = [oc.receiver, *oc.call.args] if oc.is_method else list(oc.call.args)
                if len(args) == 2 and (args[0] is load or args[1] is load):
                    return node, args[1] if args[0] is load else args[0]
    return None


def _scope_nodes(ctx: Context):
    cache = ctx.scope.cache
    if "all_nodes" not in cache:
        from ..values.bindings import _walk_scope

        cache["all_nodes"] = list(_walk_scope(ctx.scope.node))
    return cache["all_nodes"]


def vjp_text(ctx: Context, y: str, g: str, oc: OpCall | None) -> str | None:
    fw = oc.framework if oc is not None else None
    prefix = func_prefix(oc, ctx.text) if oc is not None else None
    if fw == "torch" or (oc is not None and oc.is_method):
        return f"{y} * ({g} - ({y} * {g}).sum(dim=-1, keepdim=True))"
    if fw == "tf" and prefix:
        return f"{y} * ({g} - {prefix}.reduce_sum({y} * {g}, axis=-1, keepdims=True))"
    if fw in ("numpy", "jax") and prefix:
        return f"{y} * ({g} - {prefix}.sum({y} * {g}, axis=-1, keepdims=True))"
    return None


_VJP = "y * (g - sum(y * g, axis=-1, keepdims=True))"


def _jacobian_fix(ctx: Context, y: Ref, builder: OpCall | None):
    stmt = ctx.stmt
    if not (isinstance(stmt, ast.Assign) and stmt.value is ctx.node and len(stmt.targets) == 1 and isinstance(stmt.targets[0], ast.Name)):
        return None
    if not simple(y.node) or builder is None or builder.op == "diag" and normalise(builder.qual or "").endswith("diag_embed"):
        return None
    name = stmt.targets[0].id
    b = ctx.scope.lookup(name, (stmt.end_lineno, stmt.end_col_offset + 1), ctx.path)
    uses = _products(ctx, name, b) if b not in (None, facts.AMBIGUOUS) else None
    if not uses or any(not simple(g) for _, g in uses):
        return None
    line = ctx.analysis.lines[stmt.lineno - 1]
    if line[: stmt.col_offset].strip() or ctx.analysis.lines[stmt.end_lineno - 1][stmt.end_col_offset:].strip():
        return None  # not alone on its lines
    from ..model import Edit, Span

    edits = []
    for product, g in uses:
        text = vjp_text(ctx, ctx.text(y.node), paren(ctx.text(g), g), builder)
        if text is None:
            return None
        edits.append(ctx.edit(product, text))
    edits.append(Edit(Span(stmt.lineno, 1, stmt.end_lineno + 1, 1), ""))
    return ctx.fix("auto", edits)


def _needs_flag(ctx: Context, y: Ref) -> bool:
    o = origins.origin(y)
    if o is not None and o.kind == "softmax":
        return True
    if _gradient_function(ctx):
        return True
    stmt = ctx.stmt
    if isinstance(stmt, ast.Assign) and len(stmt.targets) == 1 and isinstance(stmt.targets[0], ast.Name):
        b = ctx.scope.lookup(stmt.targets[0].id, (stmt.end_lineno, stmt.end_col_offset + 1), ctx.path)
        return b not in (None, facts.AMBIGUOUS) and bool(_products(ctx, stmt.targets[0].id, b))
    return False


@rule(
    "softmax-jacobian-dense",
    family="softmax",
    severity="warning",
    summary="explicit n-by-n softmax Jacobian diag(y) - y y^T built to multiply a vector: O(n^2) where y * (g - <y, g>) is O(n)",
    fix="auto",
    nodes=(ast.BinOp, ast.AugAssign, ast.Assign, ast.Call),
    triggers=(r"diag\w*\s*\(", r"outer\s*\(", r"einsum\s*\(", r"eye\s*\(", r"jac\w*\s*\(", r"ger\s*\(", r"unsqueeze\s*\(", r"None\s*\]",
              # element loops: y[i] * (d - y[j]) and -y[i] * y[j]
              r"\]\s*\*\s*\(", r"\]\s*\*\s*\w+\s*\["),
)
def softmax_jacobian_dense(ctx: Context):
    node = ctx.node
    if isinstance(node, ast.Call):
        yield from _autodiff_jacobian(ctx)
        return
    if isinstance(node, ast.Assign):
        yield from _loop_jacobian(ctx)
        return
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub):
        left, right = ctx.ref(node.left), ctx.ref(node.right)
    elif isinstance(node, ast.AugAssign) and isinstance(node.op, ast.Sub) and isinstance(node.target, ast.Name):
        left, right = ctx.ref(node.target), ctx.ref(node.value)
    else:
        return
    y = diag_of(left)
    if y is None:
        return
    y2 = outer_of(right)
    if y2 is None or not facts.same(y, y2) or not _needs_flag(ctx, y):
        return
    builder = facts.op_of(facts.strip(left)) or facts.op_of(facts.strip(right))
    fix = _jacobian_fix(ctx, y, builder) if isinstance(node, ast.BinOp) else None
    msg = (
        f"dense softmax Jacobian diag(y) - y y^T{lines_note(ctx, facts.strip(left).node)}: O(n^2) memory and time "
        "(n = 4096 in float64 is 128 MiB), and the products y_i y_j lose digits once two probabilities fall "
        f"below 1.5e-154 (float64) and vanish below 2.2e-162, where the vector-Jacobian product {_VJP} is O(n)"
    )
    yield Hit(node, msg, fix=fix, suggestion=None if fix else _VJP)


def _loop_jacobian(ctx: Context):
    """``J[i, j] = y[i] * (delta - y[j])`` (or ``-y[i] * y[j]`` off the diagonal) inside
    ``for i`` / ``for j`` loops, with y a softmax or J used in a product."""
    stmt = ctx.node
    if len(stmt.targets) != 1 or not isinstance(stmt.targets[0], ast.Subscript):
        return
    t = stmt.targets[0]
    idx = t.slice.elts if isinstance(t.slice, ast.Tuple) else None
    matrix = t.value
    if idx is None and isinstance(t.value, ast.Subscript):  # J[i][j]
        idx, matrix = [t.value.slice, t.slice], t.value.value
    if not idx or len(idx) != 2 or not all(isinstance(i, ast.Name) for i in idx) or idx[0].id == idx[1].id:
        return
    i, j = idx[0].id, idx[1].id
    if not {i, j} <= {b.name for b in _loop_vars(ctx)}:
        return
    y = _jacobian_entry(ctx, stmt.value, i, j)
    if y is None:
        return
    o = origins.origin(y)
    used = isinstance(matrix, ast.Name) and any(_product_around(ctx, load) for load in ctx.scope.loads(matrix.id))
    if not (used or (o is not None and o.kind == "softmax") or _gradient_function(ctx)):
        return
    msg = f"element loop building the dense softmax Jacobian: O(n^2) Python-level work and memory where the vector-Jacobian product {_VJP} is O(n)"
    yield Hit(stmt, msg, suggestion=_VJP)


def _element(node: ast.AST, index: str) -> ast.expr | None:
    """``y`` of ``y[index]``."""
    if isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Name) and node.slice.id == index:
        return node.value
    return None


def _jacobian_entry(ctx: Context, value: ast.AST, i: str, j: str) -> Ref | None:
    """y when ``value`` is ``y[i] * (d - y[j])`` or ``-y[i] * y[j]`` (either order)."""
    node = value
    negated = False
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        node, negated = node.operand, True
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mult)):
        return None
    for a, b in ((node.left, node.right), (node.right, node.left)):
        if isinstance(a, ast.UnaryOp) and isinstance(a.op, ast.USub):
            a, negated = a.operand, not negated
        yi = _element(a, i)
        if yi is None:
            continue
        if negated:
            yj = _element(b, j)
        elif isinstance(b, ast.BinOp) and isinstance(b.op, ast.Sub):
            yj = _element(b.right, j)
        else:
            yj = None
        if yj is not None and facts.same(ctx.ref(yi), ctx.ref(yj)):
            return ctx.ref(yi)
    return None


def _gradient_function(ctx: Context) -> bool:
    name = getattr(ctx.scope.node, "name", "")
    return any(w in name for w in ("backward", "grad", "vjp", "jacobian"))


def _loop_vars(ctx: Context):
    for bindings in ctx.scope.bindings().values():
        for b in bindings:
            if b.kind == "loop":
                yield b


def _autodiff_jacobian(ctx: Context):
    oc = facts.op_of(ctx.ref())
    if oc is None or oc.op != "jacobian" or not oc.call.args:
        return
    f = ctx.ref(oc.call.args[0])
    if not _is_softmax_callable(ctx, f):
        return
    msg = f"full Jacobian of a softmax by autodiff: n backward passes and an n-by-n matrix where one vector-Jacobian product (vjp / autograd.grad with grad_outputs) or the closed form {_VJP} costs O(n)"
    yield Hit(ctx.node, msg, suggestion=_VJP)


def _is_softmax_callable(ctx: Context, f: Ref) -> bool:
    s = facts.strip(f)
    node = s.node
    if isinstance(node, (ast.Name, ast.Attribute)):
        q = qualname(s)
        from ..values.names import OP_BY_NAME

        if q and OP_BY_NAME.get(normalise(q)) == "softmax":
            return True
        return origins.returns_kind(s) == "softmax"
    if isinstance(node, ast.Lambda):
        from ..values.bindings import scope_for

        inner = Ref(node.body, scope_for(node, s.scope), ())
        o = origins.origin(inner)
        return o is not None and o.kind == "softmax"
    if isinstance(node, ast.Call):  # functools.partial(F.softmax, dim=-1)
        q = qualname(s.child(node.func)) if isinstance(node.func, (ast.Name, ast.Attribute)) else None
        return bool(q) and q.endswith("partial") and bool(node.args) and _is_softmax_callable(ctx, s.child(node.args[0]))
    return False
