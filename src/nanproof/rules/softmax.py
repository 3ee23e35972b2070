"""Softmax family: softmax, log-softmax, log-sum-exp and log-add-exp written by hand, a
missing keepdims, and PyTorch softmax without dim."""
from __future__ import annotations

import ast
from dataclasses import replace

from ..values import facts, origins
from ..analyse import Context, Hit
from ..values.facts import Reduction
from ..values.bindings import Ref
from ..values.names import OpCall, normalise, qualname
from ..values.origins import ManualSoftmax
from ..registry import rule
from ..rewrite import add_keyword, func_prefix, module_alias, operand, paren, simple
from ._shared import (
    OVERFLOW,
    UNDERFLOW,
    division,
    lines_note,
    log_argument,
    log_of_softmax_fix,
    names_stable,
    origin_words,
    used_elsewhere,
)

_DIV = (ast.BinOp, ast.AugAssign, ast.Call)


# ---------------------------------------------------------------------------------------
# softmax-unshifted
# ---------------------------------------------------------------------------------------
def _torch_style(oc: OpCall, red: Reduction | None) -> bool:
    if oc.framework == "torch":
        return True
    if oc.is_method:  # ndarray has no .exp(): a tensor
        return True
    return red is not None and red.call.framework == "torch"


def max_text(ctx: Context, exp: OpCall, red: Reduction | None, arg: ast.expr) -> str | None:
    """``np.max(z, axis=1, keepdims=True)`` in the style of the ``exp`` call."""
    axis = ctx.text(red.axis) if red is not None and red.axis is not None else None
    u = ctx.text(arg)
    prefix = func_prefix(exp, ctx.text)
    if _torch_style(exp, red):
        kw = f"dim={axis}, keepdim=True" if axis is not None else ""
        return f"{prefix}.amax({u}, {kw})" if prefix and kw else f"{paren(u, arg)}.amax({kw})" if kw else f"{paren(u, arg)}.max()"
    kw = f", axis={axis}, keepdims=True" if axis is not None else ""
    if exp.framework == "tf":
        return f"{prefix}.reduce_max({u}{kw})" if prefix else None
    if exp.framework == "math":
        return None
    if prefix:
        return f"{prefix}.max({u}{kw})"
    return f"{paren(u, arg)}.max({kw[2:]})"


def _shift_edit(ctx: Context, exp_ref: Ref, red: Reduction):
    """Edit of one ``exp(u)`` call into ``exp(u - max(u))``."""
    oc = facts.op_of(exp_ref)
    if oc is None or oc.op != "exp" or oc.subject is None or not simple(oc.subject):
        return None
    m = max_text(ctx, oc, red, oc.subject)
    if m is None:
        return None
    u = ctx.text(oc.subject)
    if oc.is_method:
        return oc.subject, f"({u} - {m})"
    return oc.subject, f"{operand(u, oc.subject)} - {m}"


def _softmax_fix(ctx: Context, sm: ManualSoftmax, num_ref: Ref):
    exps = [sm.numerator.exp]
    den_term = origins.exp_term(sm.denominator.operand)
    if den_term is not None and den_term.exp.node is not sm.numerator.exp.node:
        exps.append(den_term.exp)
    edits = []
    for e in exps:
        got = _shift_edit(ctx, e, sm.denominator)
        if got is None:
            return None
        edits.append(ctx.edit(*got))
    kind = "review" if used_elsewhere(num_ref, ctx.stmt) else "auto"
    return ctx.fix(kind, edits)


def _reweighting(num: Ref) -> bool:
    """``w *= exp(-a * y * h); w /= w.sum()`` (or ``w = w * exp(...)``): a multiplicative
    update of weights that existed before, renormalised; not a softmax of logits."""
    if not isinstance(num.node, ast.Name):
        return False
    value = facts.strip(num).node
    return isinstance(value, ast.BinOp) and isinstance(value.op, ast.Mult) and any(
        isinstance(side, ast.Name) and side.id == num.node.id for side in (value.left, value.right))


@rule(
    "softmax-unshifted",
    family="softmax",
    severity="error",
    summary="exp(x) / sum(exp(x)) without subtracting the max first: overflows to inf/inf = nan",
    fix="auto",
    nodes=_DIV,
    triggers=(r"exp\s*\(",),
)
def softmax_unshifted(ctx: Context):
    parts = division(ctx)
    if parts is None:
        return
    div, num, den = parts
    sm = origins.softmax_parts(div, num, den)
    if sm is None or facts.exp_is_safe(sm.numerator.arg) or _reweighting(num):
        return
    mask = ""
    if sm.numerator.masked:
        mask = "; the mask is applied after exp, so shift by the max over the kept entries to also avoid 0/0"
    msg = (
        f"softmax without a max shift{lines_note(ctx, sm.numerator.exp.node, sm.denominator.ref.node)}: exp overflows "
        f"once a logit exceeds {OVERFLOW}, and inf/inf is nan{mask}"
    )
    if sm.denominator.call is None:  # ea / (ea + eb)
        yield Hit(ctx.node, msg, suggestion="subtract max(a, b) from both exponents, or write it as sigmoid(a - b)")
        return
    fix = _softmax_fix(ctx, sm, num)
    if fix is not None and facts.unguard(den).node is not facts.strip(den).node:
        # e / (sum(e) + eps): the shift scales the sum but not the epsilon
        fix = replace(fix, kind="review")
        msg += "; the epsilon added to the sum does not prevent it (after the shift it weighs differently: review)"
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "subtract the max along the summed axis before exp, or call the framework softmax")

# ---------------------------------------------------------------------------------------
# normalize-missing-keepdims
# ---------------------------------------------------------------------------------------
_SHAPE_MAKERS = {"zeros", "ones", "empty", "full", "rand", "randn", "random", "normal", "uniform", "standard_normal", "randint"}


def evident_rank2(ref: Ref, depth: int = 0) -> bool:
    """The value is visibly 2-D or more: built with a 2-D shape, reshaped to two or more
    axes, indexed ``[:, j]``-style, or computed from such a value."""
    if depth > 6:
        return False
    ref = facts.strip(ref)
    node = ref.node
    if isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Tuple):
        return any(isinstance(e, ast.Slice) for e in node.slice.elts) and len(node.slice.elts) >= 2
    if isinstance(node, ast.BinOp):
        return evident_rank2(ref.child(node.left), depth + 1) or evident_rank2(ref.child(node.right), depth + 1)
    if isinstance(node, ast.UnaryOp):
        return evident_rank2(ref.child(node.operand), depth + 1)
    if isinstance(node, ast.Call):
        f = node.func
        name = f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else ""
        if name in ("reshape", "view") and (len(node.args) >= 2 or (node.args and isinstance(node.args[0], ast.Tuple) and len(node.args[0].elts) >= 2)):
            return True
        if name in _SHAPE_MAKERS:
            shape = next((kw.value for kw in node.keywords if kw.arg in ("size", "shape")), None)
            if shape is None and node.args:
                shape = node.args[0] if name not in ("normal", "uniform", "randint") else None
            if isinstance(shape, (ast.Tuple, ast.List)) and len(shape.elts) >= 2:
                return True
            return name in ("rand", "randn") and len(node.args) >= 2
        oc = facts.op_of(ref)
        if oc is not None and oc.op in ("exp", "log", "abs", "square", "sqrt", "identity") and oc.subject is not None:
            return evident_rank2(ref.child(oc.subject), depth + 1)
    return False


def _inner_axis(red: Reduction) -> bool:
    v = red.axis_value
    if isinstance(v, int) and not isinstance(v, bool):
        return v >= 1 or (v < 0 and evident_rank2(red.operand))
    if isinstance(v, tuple) and v:
        return all(isinstance(a, int) for a in v) and (min(v) >= 1 or evident_rank2(red.operand))
    return False


@rule(
    "normalize-missing-keepdims",
    family="softmax",
    severity="error",
    summary="dividing a 2-D array by its reduction over an inner axis without keepdims: wrong broadcast",
    fix="auto",
    nodes=_DIV,
    triggers=(r"sum\s*\(", r"max\s*\(", r"mean\s*\(", r"norm\s*\(", r"reduce_\w+\s*\("),
)
def normalize_missing_keepdims(ctx: Context):
    parts = division(ctx)
    if parts is None:
        return
    _, num, den = parts
    red = facts.reduction(den, "sum", "max", "mean", "norm")
    if red is None or red.keepdims or red.axis is None or not _inner_axis(red):
        return
    t = origins.exp_term(num)
    if not (facts.same(red.operand, num) or (t is not None and facts.same(red.operand, t.exp))):
        return
    torch_style = red.call.framework == "torch" or (red.call.is_method and any(k.arg == "dim" for k in red.call.call.keywords))
    if red.call.is_method and not torch_style and red.call.keyword("axis") is None:
        torch_style = True  # x.sum(1): positional axis on a tensor method
    kw = "keepdim=True" if torch_style else "keepdims=True"
    call = red.call.call
    new = add_keyword(ctx.text(call), kw)
    # a pandas DataFrame has no keepdims: the method may be pandas' when the file uses it
    frame = red.call.is_method and module_alias(ctx.ref(), "pandas") is not None
    fix = ctx.fix("auto", [ctx.edit(call, new)], at=call) if new and not frame else None
    msg = (
        f"{red.op} over axis {ctx.text(red.axis)} drops that axis, so the division broadcasts it against the wrong "
        f"one{lines_note(ctx, call)}: a shape error, or silently wrong values for a square matrix; pass {kw}"
    )
    hint = f"pass {kw} (NumPy, PyTorch), or for a pandas DataFrame divide with .div(..., axis=0)" if frame else None
    yield Hit(ctx.node, msg, fix=fix, suggestion=hint)


# ---------------------------------------------------------------------------------------
# log-of-softmax
# ---------------------------------------------------------------------------------------
@rule(
    "log-of-softmax",
    family="softmax",
    severity="error",
    summary="log(softmax(x)): -inf once a probability underflows; use log_softmax",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(",),
)
def log_of_softmax(ctx: Context):
    arg = log_argument(ctx)
    if arg is None:
        return
    o = origins.origin(arg)
    if o is None or o.kind != "softmax":
        return
    src = facts.strip(arg)
    fix = log_of_softmax_fix(ctx, o, src, ctx.node)
    msg = (
        f"log of {origin_words(o)}{lines_note(ctx, src.node)} is -inf (and its gradient nan) once a probability "
        f"underflows to 0, when a logit trails the largest by {UNDERFLOW}; use log_softmax"
    )
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "compute log_softmax of the logits instead of log of the probabilities")


# ---------------------------------------------------------------------------------------
# logsumexp-unshifted and logaddexp-manual
# ---------------------------------------------------------------------------------------
def max_shifted(ref: Ref) -> bool:
    ref = facts.strip(ref)
    node = ref.node
    if isinstance(node, facts.Unknown):
        return True
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.Div)):
        return max_shifted(ref.child(node.left)) or max_shifted(ref.child(node.right))
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub):
        m = facts.max_operand(ref.child(node.right))
        return m is not None and facts.same(m, ref.child(node.left))
    return False


def _lse_terms(ref: Ref) -> tuple[Reduction, origins.ExpTerm] | None:
    """The reduction and exp term of ``log(sum(exp(u)))`` or ``log(mean(exp(u)))``."""
    red = facts.reduction(ref, "sum", "mean")
    if red is None:
        return None
    op_node = facts.strip(red.operand).node
    if isinstance(op_node, (ast.GeneratorExp, ast.ListComp)):
        t = origins.exp_term(red.operand.child(op_node.elt))
    else:
        t = origins.exp_term(red.operand)
    if t is None or t.masked:
        return None
    return red, t


def _lse_text(ctx: Context, red: Reduction, t: origins.ExpTerm) -> tuple[str, str] | None:
    """(kind, code) of the framework log-sum-exp for this sum of exps."""
    oc = facts.op_of(t.exp)
    u_node = oc.subject if oc is not None else None
    if u_node is None or not simple(u_node) or not names_stable(ctx, u_node, t.exp):
        return None
    u = ctx.text(u_node)
    axis = ctx.text(red.axis) if red.axis is not None else None
    keep = red.keepdims
    prefix = func_prefix(oc, ctx.text) if oc is not None else None
    fw = oc.framework if oc is not None else None
    if fw == "torch" or oc.is_method:
        torch = prefix if fw == "torch" else module_alias(ctx.ref(), "torch")
        if axis is None:
            return None
        keepkw = ", keepdim=True" if keep else ""
        return ("auto", f"{torch}.logsumexp({u}, dim={axis}{keepkw})") if torch else ("auto", f"{paren(u, u_node)}.logsumexp(dim={axis}{keepkw})")
    if fw == "tf" and prefix:
        return "auto", f"{prefix}.reduce_logsumexp({u}{', axis=' + axis if axis else ''}{', keepdims=True' if keep else ''})"
    if red.call.framework == "builtins":
        if isinstance(facts.strip(red.operand).node, (ast.GeneratorExp, ast.ListComp)):
            return None
        axis = "0"  # built-in sum adds along the first axis of an array
    if fw in ("numpy", "jax"):
        np_ = prefix or module_alias(ctx.ref(), "numpy", "cupy")
        if np_ and fw == "numpy":
            return "auto", f"{np_}.logaddexp.reduce({u}, axis={axis}{', keepdims=True' if keep else ''})"
        jax = module_alias(ctx.ref(), "jax")
        if fw == "jax" and jax:
            return "auto", f"{jax}.nn.logsumexp({u}{', axis=' + axis if axis else ''}{', keepdims=True' if keep else ''})"
    return None


@rule(
    "logsumexp-unshifted",
    family="softmax",
    severity="error",
    summary="log(sum(exp(x))) without a max shift: overflows to inf, or underflows to log(0) = -inf",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(",),
)
def logsumexp_unshifted(ctx: Context):
    arg = log_argument(ctx)
    if arg is None:
        return
    got = _lse_terms(arg)
    if got is None:
        return
    red, t = got
    if max_shifted(t.arg) or facts.shifted_by_unknown(t.arg):
        return
    bounded = facts.bounded_above(t.arg)
    why = (
        "every term underflows to 0 and the log gives -inf once all arguments fall below about -104 in float32 (-745 in float64)"
        if bounded
        else f"exp overflows to inf once an argument exceeds {OVERFLOW}, and underflow of all terms gives -inf"
    )
    mean = red.op == "mean"
    code = None if mean else _lse_text(ctx, red, t)
    fix = ctx.fix(code[0], [ctx.edit(ctx.node, code[1])]) if code else None
    what = "log-mean-exp" if mean else "log-sum-exp"
    msg = f"{what} without a max shift{lines_note(ctx, t.exp.node, red.ref.node)}: {why}"
    hint = "use the framework logsumexp (torch.logsumexp, scipy.special.logsumexp, jax.nn.logsumexp, tf.reduce_logsumexp)"
    if mean:
        hint += " and subtract log(n), n the number of terms averaged"
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else hint)


@rule(
    "logaddexp-manual",
    family="softmax",
    severity="error",
    summary="log(exp(a) + exp(b)): overflows or underflows; use logaddexp",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(",),
)
def logaddexp_manual(ctx: Context):
    arg = log_argument(ctx)
    if arg is None:
        return
    s = facts.strip(arg)
    if not (isinstance(s.node, ast.BinOp) and isinstance(s.node.op, ast.Add)):
        return
    ta, tb = origins.exp_term(s.child(s.node.left)), origins.exp_term(s.child(s.node.right))
    if ta is None or tb is None or ta.masked or tb.masked:
        return
    if all(max_shifted(t.arg) or facts.shifted_by_unknown(t.arg) for t in (ta, tb)):
        return
    msg = (
        f"log(exp(a) + exp(b)){lines_note(ctx, s.node)} overflows to inf once an argument exceeds {OVERFLOW}, "
        "and gives -inf when both are below about -104 in float32 (-745 in float64)"
    )
    fix = None
    oa, ob = facts.op_of(ta.exp), facts.op_of(tb.exp)
    a, b = oa.subject, ob.subject
    if simple(a) and simple(b) and names_stable(ctx, a, ta.exp) and names_stable(ctx, b, tb.exp):
        prefix = func_prefix(oa, ctx.text)
        if oa.framework in ("numpy", "jax", "torch") and prefix:
            fix = ctx.fix("auto", [ctx.edit(ctx.node, f"{prefix}.logaddexp({ctx.text(a)}, {ctx.text(b)})")])
        elif oa.is_method:
            fix = ctx.fix("auto", [ctx.edit(ctx.node, f"{paren(ctx.text(a), a)}.logaddexp({ctx.text(b)})")])
    if oa.framework == "math":
        hint = "max(a, b) + math.log1p(math.exp(-abs(a - b)))"
    else:
        hint = "logaddexp(a, b) (numpy.logaddexp, torch.logaddexp, jax.numpy.logaddexp)"
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else hint)

# ---------------------------------------------------------------------------------------
# softmax-implicit-dim
# ---------------------------------------------------------------------------------------
_IMPLICIT = {"torch.F.softmax", "torch.F.log_softmax", "torch.F.softmin"}
_MODULES = {"torch.nn.Softmax", "torch.nn.LogSoftmax", "torch.nn.Softmin", "torch.nn.modules.activation.Softmax"}


@rule(
    "softmax-implicit-dim",
    family="api",
    severity="warning",
    summary="PyTorch softmax / log_softmax / softmin without dim: deprecated implicit axis, wrong for 1-D and 3-D inputs",
    fix="review",
    nodes=(ast.Call,),
    triggers=(r"softmax\s*\(", r"log_softmax\s*\(", r"Softmax\s*\(", r"LogSoftmax\s*\(", r"softmin\s*\(", r"Softmin\s*\("),
)
def softmax_implicit_dim(ctx: Context):
    call = ctx.node
    if not isinstance(call.func, (ast.Name, ast.Attribute)):
        return
    q = qualname(ctx.ref(call.func))
    if q is None:
        return
    norm = normalise(q)
    if any(k.arg == "dim" or k.arg is None for k in call.keywords) or any(isinstance(a, ast.Starred) for a in call.args):
        return
    if norm in _IMPLICIT and len(call.args) == 1:
        what = f"{q.rsplit('.', 1)[-1]} called"
    elif q in _MODULES and not call.args:
        what = f"nn.{q.rsplit('.', 1)[-1]} built"
    else:
        return
    new = add_keyword(ctx.text(call), "dim=-1")
    fix = ctx.fix("review", [ctx.edit(call, new)]) if new else None
    msg = (
        f"{what} without dim: PyTorch picks the axis from the input's rank (deprecated), axis 0 for 1-D and 3-D "
        "inputs, which for a batch of sequences normalises across the batch; pass dim= explicitly (the rewrite proposes dim=-1)"
    )
    yield Hit(call, msg, fix=fix)
