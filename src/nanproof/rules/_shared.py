"""Helpers the rule modules share: the float limits quoted in messages, how a finding
names earlier lines, whether a name means the same at two places, the argument of a
natural log, and the log-softmax rewrite used by several rules."""
from __future__ import annotations

import ast

from ..values import facts, origins
from ..analyse import Context
from ..values.bindings import Ref
from ..values.names import normalise, qualname
from ..values.origins import Origin
from ..rewrite import func_prefix, import_edit, module_alias, operand, simple

# ln of the largest finite float (IEEE 754; numpy.finfo(t).max): where exp overflows.
OVERFLOW = "88.72 in float32 (709.78 in float64, 11.09 in float16)"
# ln of half the smallest subnormal (IEEE 754; numpy.finfo(t).smallest_subnormal):
# a probability whose logit trails the largest by more rounds to 0.
UNDERFLOW = "about 104 in float32 (745 in float64)"

def lines_note(ctx: Context, *nodes: ast.AST) -> str:
    here = getattr(ctx.stmt, "lineno", 0)
    others = sorted({n.lineno for n in nodes if getattr(n, "lineno", here) != here})
    return f" (from line {', '.join(map(str, others))})" if others else ""


_DIVIDES = {"div", "divide", "true_divide", "truediv", "realdiv"}


def division(ctx: Context) -> tuple[Ref, Ref, Ref] | None:
    """(division, numerator, denominator) for ``a / b``, ``a /= b`` and the division
    functions and methods (``np.divide(a, b)``, ``torch.div(a, b)``, ``a.div(b)``)."""
    node = ctx.node
    if isinstance(node, ast.Call):
        f = node.func
        if (f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else "") not in _DIVIDES:
            return None
    parts = facts.div_parts(ctx.ref()) if isinstance(node, (ast.BinOp, ast.Call)) else None
    if parts is not None:
        return ctx.ref(), *parts
    if isinstance(node, ast.AugAssign) and isinstance(node.op, ast.Div) and isinstance(node.target, ast.Name):
        return ctx.ref(), ctx.ref(node.target), ctx.ref(node.value)
    return None

def _parents(root: ast.AST) -> dict[int, ast.AST]:
    return {id(c): n for n in ast.walk(root) for c in ast.iter_child_nodes(n)}


def _compared(node: ast.AST, parents: dict[int, ast.AST]) -> bool:
    """``node`` (or ``abs(node)``) is an operand of a comparison and nothing else."""
    up = parents.get(id(node))
    if isinstance(up, ast.Call) and isinstance(up.func, (ast.Name, ast.Attribute)) and \
            getattr(up.func, "id", getattr(up.func, "attr", "")) in ("abs", "fabs", "absolute") and len(up.args) == 1:
        node, up = up, parents.get(id(up))
    return isinstance(up, ast.Compare)


def only_compared(ctx: Context) -> bool:
    """The value of ``ctx.node`` only decides a comparison (``abs(exp(x) - 1) > tol``,
    or a name bound to it and read only in comparisons): a threshold test does not need
    the digits a cancellation loses."""
    stmt = ctx.stmt
    if _compared(ctx.node, _parents(stmt)):
        return True
    if not (isinstance(stmt, ast.Assign) and stmt.value is ctx.node and len(stmt.targets) == 1 and isinstance(stmt.targets[0], ast.Name)):
        return False
    name = stmt.targets[0].id
    b = ctx.scope.lookup(name, (stmt.end_lineno, stmt.end_col_offset), ctx.path)
    if b is None or b is facts.AMBIGUOUS or b.stmt is not stmt:
        return False
    uses = [n for n in ctx.scope.loads(name) if ctx.scope.lookup(name, (n.lineno, n.col_offset), b.path) in (b, facts.AMBIGUOUS)]
    if not uses:
        return False
    body = ctx.scope.node
    parents = ctx.scope.cache.get("parents")
    if parents is None:
        parents = ctx.scope.cache["parents"] = _parents(body)
    return all(_compared(n, parents) for n in uses)


def used_elsewhere(ref: Ref, within: ast.AST) -> bool:
    """Is the value held in the name ``ref`` also read outside ``within``?"""
    b = facts.binding_of(ref)
    if b is None or b is facts.AMBIGUOUS:
        return False
    inside = {id(n) for n in ast.walk(within)}
    for load in ref.scope.loads(b.name):
        if id(load) not in inside and ref.scope.lookup(b.name, (load.lineno, load.col_offset), b.path) in (b, facts.AMBIGUOUS):
            return True
    return False


def log_argument(ctx: Context, node: ast.AST | None = None) -> Ref | None:
    oc = facts.op_of(ctx.ref(node))
    if oc is None or oc.op != "log" or oc.subject is None:
        return None
    if not oc.is_method and len(oc.call.args) != 1:
        return None
    return ctx.ref(node).child(oc.subject)


def names_stable(ctx: Context, node: ast.AST, src: Ref) -> bool:
    """Every name in ``node`` (written at ``src``) means the same at the current node."""
    for n in ast.walk(node):
        if isinstance(n, ast.Name):
            there = src.scope.lookup(n.id, (n.lineno, n.col_offset), src.path)
            here = ctx.scope.lookup(n.id, (ctx.node.lineno, ctx.node.col_offset), ctx.path)
            if src.scope is not ctx.scope or there is not here or there is facts.AMBIGUOUS:
                return False
    return True


def log_softmax_text(ctx: Context, o: Origin, src: Ref) -> tuple[str, list] | None:
    """``log_softmax`` code for the softmax ``o`` and the extra edits it needs (an import),
    or None when no rewrite can be written safely."""
    if o.how == "framework" and o.call is not None:
        call = o.call.call
        if not names_stable(ctx, call, src):
            return None
        func = call.func
        args = ctx.text(call)[len(ctx.text(func)):]
        if isinstance(func, ast.Attribute) and func.attr == "softmax":
            if o.call.qual is not None and normalise(o.call.qual).startswith("keras."):
                return None
            return f"{ctx.text(func.value)}.log_softmax{args}", []
        if isinstance(func, ast.Name) and o.call.qual:
            module = o.call.qual.rsplit(".", 1)[0]
            b = ctx.scope.lookup("log_softmax", (ctx.node.lineno, ctx.node.col_offset), ctx.path)
            if b is None:
                return f"log_softmax{args}", [import_edit(ctx.analysis.tree, f"from {module} import log_softmax")]
            if b is not facts.AMBIGUOUS and b.kind == "import" and isinstance(b.stmt, ast.ImportFrom) and b.stmt.module == module:
                return f"log_softmax{args}", []
            return None  # the name means something else here
        return None
    if o.how == "hand-written" and o.logits is not None:
        logits = _unshifted(o.logits)
        if simple(logits.node) and names_stable(ctx, logits.node, logits):
            return _hand_written_log_softmax(ctx, o, src, logits)
    return None


def _unshifted(ref: Ref) -> Ref:
    """``u`` of ``u - max(u)``: log_softmax does its own shift."""
    node = ref.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub):
        m = facts.max_operand(ref.child(node.right))
        if m is not None and facts.same(m, ref.child(node.left)):
            return ref.child(node.left)
    return ref


def _hand_written_log_softmax(ctx: Context, o: Origin, src: Ref, logits: Ref) -> tuple[str, list] | None:
    """In the framework of the softmax's own ``exp``: ``torch.log_softmax(u, dim=a)``,
    ``jax.nn.log_softmax(u, axis=a)``, NumPy ``u - np.logaddexp.reduce(u, axis=a, keepdims=True)``."""
    ms = origins.manual_softmax(src)
    exp = facts.op_of(ms.numerator.exp) if ms is not None else None
    if exp is None:
        return None
    u = ctx.text(logits.node)
    axis = ctx.text(o.axis) if o.axis is not None else None
    prefix = func_prefix(exp, ctx.text)
    if exp.framework == "torch" or exp.is_method:
        torch = prefix if exp.framework == "torch" else module_alias(ctx.ref(), "torch")
        return (f"{torch}.log_softmax({u}, dim={axis})", []) if torch and axis is not None else None
    if exp.framework == "jax":
        jax = module_alias(ctx.ref(), "jax")
        return (f"{jax}.nn.log_softmax({u}{', axis=' + axis if axis else ''})", []) if jax else None
    if exp.framework == "numpy":
        np_ = prefix or module_alias(ctx.ref(), "numpy", "cupy")
        keep = ", keepdims=True" if axis is not None else ""
        return (f"{operand(u, logits.node)} - {np_}.logaddexp.reduce({u}, axis={axis}{keep})", []) if np_ else None
    return None


def log_of_softmax_fix(ctx: Context, o: Origin, src: Ref, at: ast.AST):
    got = log_softmax_text(ctx, o, src)
    if got is None:
        return None
    text, extra = got
    kind = "auto" if o.how == "framework" and not extra else "review"
    return ctx.fix(kind, [ctx.edit(at, text), *extra], at=at)


_HOW_WORDS = {"framework": "a softmax", "hand-written": "a hand-written softmax", "helper": "a helper that returns a softmax",
              "module": "a softmax module", "layer": "a layer with a softmax activation",
              "param": "a softmax passed in as a parameter", "instance": "the output of a model that returns a softmax"}


def origin_words(o: Origin) -> str:
    """How a probability came to be, with where it was made when that is elsewhere."""
    return _HOW_WORDS[o.how].replace("softmax", o.kind) + o.provenance


# -- framework loss calls ------------------------------------------------------------
def loss_qual(ref: Ref) -> str | None:
    """The normalised name of a loss function or class (Keras spellings folded)."""
    q = qualname(ref) if isinstance(ref.node, (ast.Name, ast.Attribute)) else None
    for _ in range(3):  # tensorflow.compat.v1.keras.losses -> tensorflow.keras.losses -> keras.losses
        q = normalise(q) if q else q
    return q


def passed_arg(call: ast.Call, pos: int, *names: str) -> ast.expr | None:
    for kw in call.keywords:
        if kw.arg in names:
            return kw.value
    if any(isinstance(a, ast.Starred) for a in call.args[: pos + 1]):
        return None
    return call.args[pos] if pos < len(call.args) else None


def from_logits_off(call: ast.Call, pos: int) -> bool:
    """``from_logits`` is not passed, or passed as False (Keras)."""
    if any(kw.arg is None for kw in call.keywords):
        return False  # **kwargs may hold it
    v = passed_arg(call, pos, "from_logits")
    return v is None or (isinstance(v, ast.Constant) and v.value is False)
