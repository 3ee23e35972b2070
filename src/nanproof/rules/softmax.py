"""Softmax family: softmax, log-softmax, log-sum-exp, log-add-exp and their Jacobian."""
from __future__ import annotations

import ast
from dataclasses import replace

from .. import facts
from ..analyse import Context, Hit
from ..facts import ManualSoftmax, Origin, Reduction
from ..flow import Ref
from ..names import OpCall, normalise, qualname
from ..registry import rule
from ..rewrite import add_keyword, func_prefix, import_edit, module_alias, operand, paren, simple

# ln of the largest finite float (IEEE 754; numpy.finfo(t).max): where exp overflows.
OVERFLOW = "88.72 in float32 (709.78 in float64, 11.09 in float16)"
# ln of half the smallest subnormal (IEEE 754; numpy.finfo(t).smallest_subnormal):
# a probability whose logit trails the largest by more rounds to 0.
UNDERFLOW = "about 104 in float32 (745 in float64)"

_DIV = (ast.BinOp, ast.AugAssign)


def _lines(ctx: Context, *nodes: ast.AST) -> str:
    here = getattr(ctx.stmt, "lineno", 0)
    others = sorted({n.lineno for n in nodes if getattr(n, "lineno", here) != here})
    return f" (from line {', '.join(map(str, others))})" if others else ""


def _division(ctx: Context) -> tuple[Ref, Ref, Ref] | None:
    """(division, numerator, denominator) for ``a / b`` and ``a /= b``."""
    node = ctx.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div):
        return ctx.ref(), ctx.ref(node.left), ctx.ref(node.right)
    if isinstance(node, ast.AugAssign) and isinstance(node.op, ast.Div) and isinstance(node.target, ast.Name):
        return ctx.ref(), ctx.ref(node.target), ctx.ref(node.value)
    return None


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


def _softmax_fix(ctx: Context, sm: ManualSoftmax, num_ref: Ref):
    exps = [sm.numerator.exp]
    den_term = facts.exp_term(sm.denominator.operand)
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
    parts = _division(ctx)
    if parts is None:
        return
    div, num, den = parts
    sm = facts.softmax_parts(div, num, den)
    if sm is None or facts.exp_is_safe(sm.numerator.arg):
        return
    mask = ""
    if sm.numerator.masked:
        mask = "; the mask is applied after exp, so shift by the max over the kept entries to also avoid 0/0"
    msg = (
        f"softmax without a max shift{_lines(ctx, sm.numerator.exp.node, sm.denominator.ref.node)}: exp overflows "
        f"once a logit exceeds {OVERFLOW}, and inf/inf is nan{mask}"
    )
    fix = _softmax_fix(ctx, sm, num)
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
    parts = _division(ctx)
    if parts is None:
        return
    _, num, den = parts
    red = facts.reduction(den, "sum", "max", "mean", "norm")
    if red is None or red.keepdims or red.axis is None or not _inner_axis(red):
        return
    t = facts.exp_term(num)
    if not (facts.same(red.operand, num) or (t is not None and facts.same(red.operand, t.exp))):
        return
    torch_style = red.call.framework == "torch" or (red.call.is_method and any(k.arg == "dim" for k in red.call.call.keywords))
    if red.call.is_method and not torch_style and red.call.keyword("axis") is None:
        torch_style = True  # x.sum(1): positional axis on a tensor method
    kw = "keepdim=True" if torch_style else "keepdims=True"
    call = red.call.call
    new = add_keyword(ctx.text(call), kw)
    fix = ctx.fix("auto", [ctx.edit(call, new)], at=call) if new else None
    msg = (
        f"{red.op} over axis {ctx.text(red.axis)} drops that axis, so the division broadcasts it against the wrong "
        f"one{_lines(ctx, call)}: a shape error, or silently wrong values for a square matrix; pass {kw}"
    )
    yield Hit(ctx.node, msg, fix=fix)


# ---------------------------------------------------------------------------------------
# log-of-softmax and cross-entropy-from-probs
# ---------------------------------------------------------------------------------------
def log_argument(ctx: Context, node: ast.AST | None = None) -> Ref | None:
    oc = facts.op_of(ctx.ref(node))
    if oc is None or oc.op != "log" or oc.subject is None:
        return None
    if not oc.is_method and len(oc.call.args) != 1:
        return None
    return ctx.ref(node).child(oc.subject)


def _names_stable(ctx: Context, node: ast.AST, src: Ref) -> bool:
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
        if not _names_stable(ctx, call, src):
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
        if simple(logits.node) and _names_stable(ctx, logits.node, logits):
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
    ms = facts.manual_softmax(src)
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


def _log_of_softmax_fix(ctx: Context, o: Origin, src: Ref, at: ast.AST):
    got = log_softmax_text(ctx, o, src)
    if got is None:
        return None
    text, extra = got
    kind = "auto" if o.how == "framework" and not extra else "review"
    return ctx.fix(kind, [ctx.edit(at, text), *extra], at=at)


def _origin_words(o: Origin) -> str:
    return {"framework": "a softmax", "hand-written": "a hand-written softmax", "helper": "a helper that returns a softmax",
            "module": "a softmax module", "layer": "a layer with a softmax activation"}[o.how]


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
    o = facts.origin(arg)
    if o is None or o.kind != "softmax":
        return
    src = facts.strip(arg)
    fix = _log_of_softmax_fix(ctx, o, src, ctx.node)
    msg = (
        f"log of {_origin_words(o)}{_lines(ctx, src.node)} is -inf (and its gradient nan) once a probability "
        f"underflows to 0, when a logit trails the largest by {UNDERFLOW}; use log_softmax"
    )
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "compute log_softmax of the logits instead of log of the probabilities")


def gathered(ref: Ref) -> Ref | None:
    """``p[range(n), y]``, ``p[i, y[i]]``, ``p.gather(1, y)``, ``take_along_axis(p, y, 1)``:
    the array ``p`` that per-sample class probabilities are picked from."""
    ref = facts.strip(ref)
    node = ref.node
    if isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Tuple) and len(node.slice.elts) == 2:
        first, second = node.slice.elts
        if isinstance(second, (ast.Name, ast.Subscript, ast.Call, ast.Attribute)) and not isinstance(first, ast.Constant):
            return ref.child(node.value)
        return None
    if isinstance(node, ast.Subscript) and isinstance(node.slice, (ast.Name, ast.Subscript, ast.Attribute)):
        return ref.child(node.value)  # p[y]: the probability of one sample's label
    if isinstance(node, ast.Call):
        f = node.func
        if isinstance(f, ast.Attribute) and f.attr == "gather" and node.args:
            q = qualname(ref.child(f.value))
            return ref.child(node.args[0]) if q and q.split(".")[0] in ("torch", "tensorflow") else ref.child(f.value)
        if isinstance(f, (ast.Attribute, ast.Name)) and (f.attr if isinstance(f, ast.Attribute) else f.id) == "take_along_axis" and node.args:
            return ref.child(node.args[0])
    return None


def _nll_log(ctx: Context, ref: Ref):
    """If ``ref`` is ``log(P)`` (directly or through a name) with P a softmax: (log node, P origin)."""
    log_ref = facts.strip(ref)
    arg = log_argument(ctx, log_ref.node) if log_ref.scope is ctx.scope else None
    if arg is None:
        return None
    o = facts.origin(facts.unguard(arg))  # also log(p + eps), log(clip(p, eps, 1 - eps))
    return (log_ref, o) if o is not None and o.kind == "softmax" else None


_CE = "negative log-likelihood of softmax probabilities"


def _picked_fix(ctx: Context, o: Origin, picked: Ref, at: ast.AST):
    """``log(p[rows, labels])`` -> ``log_softmax(...)[rows, labels]``: the rewrite keeps
    the indexing; a gather call gets no rewrite."""
    sub = facts.strip(picked).node
    if not isinstance(sub, ast.Subscript) or not _names_stable(ctx, sub.slice, picked):
        return None
    got = log_softmax_text(ctx, o, facts.strip(picked.child(sub.value)))
    if got is None:
        return None
    text, extra = got
    kind = "auto" if o.how == "framework" and not extra else "review"
    return ctx.fix(kind, [ctx.edit(at, f"{text}[{ctx.text(sub.slice)}]"), *extra], at=at)


def _ce_hit(ctx: Context, log_ref: Ref, o: Origin, suggestion: str):
    arg = log_argument(ctx, log_ref.node)
    src = facts.unguard(arg)
    guarded = src.node is not facts.strip(arg).node
    # A log of gathered entries (p[range(n), y]) has no whole-log rewrite; dropping an
    # epsilon guard changes the values, so that rewrite needs a review.
    fix = _log_of_softmax_fix(ctx, o, src, log_ref.node) if facts.origin(src) is not None else _picked_fix(ctx, o, src, log_ref.node)
    if fix is not None and guarded:
        fix = replace(fix, kind="review")
    eps = "; an epsilon guard only caps it near -log(eps) and stalls the gradient" if guarded else ""
    msg = (
        f"{_CE}{_lines(ctx, log_ref.node)}: log of {_origin_words(o)} is -inf once a probability underflows "
        f"when a logit trails the largest by {UNDERFLOW}, giving an inf loss and nan gradients{eps}; compute the loss on logits"
    )
    return Hit(ctx.node, msg, fix=fix, suggestion=suggestion, covers=(log_ref.node,))


@rule(
    "cross-entropy-from-probs",
    family="loss",
    severity="error",
    summary="negative log-likelihood computed from softmax probabilities: use cross-entropy on logits",
    fix="auto",
    nodes=(ast.Call, ast.BinOp, ast.Subscript),
    triggers=(r"log\s*\(", r"nll_loss\s*\(", r"NLLLoss\s*\("),
    overrides=("log-of-softmax", "log-epsilon-guard"),
)
def cross_entropy_from_probs(ctx: Context):
    node = ctx.node
    if isinstance(node, ast.Call):
        arg = log_argument(ctx)
        if arg is not None:  # log(p[range(n), y]) with p a softmax
            p = gathered(facts.unguard(arg))
            o = facts.origin(p) if p is not None else None
            if o is not None and o.kind == "softmax":
                yield _ce_hit(ctx, ctx.ref(), o, "cross-entropy on the logits (e.g. F.cross_entropy(logits, y)), or gather from log_softmax")
            return
        if _is_nll(ctx, node) and node.args:
            got = _nll_log(ctx, ctx.ref(node.args[0]))
            if got:
                yield _ce_hit(ctx, got[0], got[1], "F.cross_entropy(logits, target) on the logits")
        return
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mult):
        for a, b in ((node.left, node.right), (node.right, node.left)):
            got = _nll_log(ctx, ctx.ref(a))
            if got and not _is_same_probs(ctx, b, got[0]):
                yield _ce_hit(ctx, got[0], got[1], "cross-entropy on the logits, or log_softmax in place of log(softmax)")
                return
    if isinstance(node, ast.Subscript):  # log(p)[range(n), y]
        got = _nll_log(ctx, ctx.ref(node.value))
        if got and gathered(ctx.ref()) is not None:
            yield _ce_hit(ctx, got[0], got[1], "cross-entropy on the logits, or index log_softmax")


def _is_nll(ctx: Context, call: ast.Call) -> bool:
    oc = facts.op_of(ctx.ref(call))
    if oc is not None and oc.op == "nll_loss":
        return True
    f = call.func  # nn.NLLLoss()(lp, t) or crit(lp, t) with crit = nn.NLLLoss()
    target = facts.strip(ctx.ref(f))
    if isinstance(target.node, ast.Attribute):
        v = facts.self_attribute(target)
        target = facts.strip(v) if v is not None else target
    if isinstance(target.node, ast.Call):
        q = qualname(target.child(target.node.func))
        return bool(q) and q.endswith(".NLLLoss") and q.startswith("torch")
    return False


def _is_same_probs(ctx: Context, other: ast.AST, log_ref: Ref) -> bool:
    """``p * log(p)`` is an entropy term, not a likelihood."""
    arg = log_argument(ctx, log_ref.node)
    return arg is not None and facts.same(ctx.ref(other), facts.unguard(arg))


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


def _lse_terms(ref: Ref) -> tuple[Reduction, facts.ExpTerm] | None:
    red = facts.reduction(ref, "sum")
    if red is None:
        return None
    op_node = facts.strip(red.operand).node
    if isinstance(op_node, (ast.GeneratorExp, ast.ListComp)):
        t = facts.exp_term(red.operand.child(op_node.elt))
    else:
        t = facts.exp_term(red.operand)
    if t is None or t.masked:
        return None
    return red, t


def _lse_text(ctx: Context, red: Reduction, t: facts.ExpTerm) -> tuple[str, str] | None:
    """(kind, code) of the framework log-sum-exp for this sum of exps."""
    oc = facts.op_of(t.exp)
    u_node = oc.subject if oc is not None else None
    if u_node is None or not simple(u_node) or not _names_stable(ctx, u_node, t.exp):
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
    code = _lse_text(ctx, red, t)
    fix = ctx.fix(code[0], [ctx.edit(ctx.node, code[1])]) if code else None
    msg = f"log-sum-exp without a max shift{_lines(ctx, t.exp.node, red.ref.node)}: {why}"
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "use the framework logsumexp (torch.logsumexp, scipy.special.logsumexp, jax.nn.logsumexp, tf.reduce_logsumexp)")


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
    ta, tb = facts.exp_term(s.child(s.node.left)), facts.exp_term(s.child(s.node.right))
    if ta is None or tb is None or ta.masked or tb.masked:
        return
    if all(max_shifted(t.arg) or facts.shifted_by_unknown(t.arg) for t in (ta, tb)):
        return
    msg = (
        f"log(exp(a) + exp(b)){_lines(ctx, s.node)} overflows to inf once an argument exceeds {OVERFLOW}, "
        "and gives -inf when both are below about -104 in float32 (-745 in float64)"
    )
    fix = None
    oa, ob = facts.op_of(ta.exp), facts.op_of(tb.exp)
    a, b = oa.subject, ob.subject
    if simple(a) and simple(b) and _names_stable(ctx, a, ta.exp) and _names_stable(ctx, b, tb.exp):
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


_PRODUCT_METHODS = ("dot", "matmul", "mm", "mv")


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
        from ..flow import _walk_scope

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
    o = facts.origin(y)
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
        f"dense softmax Jacobian diag(y) - y y^T{_lines(ctx, facts.strip(left).node)}: O(n^2) memory and time "
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
    o = facts.origin(y)
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
        from ..names import OP_BY_NAME

        if q and OP_BY_NAME.get(normalise(q)) == "softmax":
            return True
        return facts.returns_kind(s) == "softmax"
    if isinstance(node, ast.Lambda):
        from ..analyse import scope_for

        inner = Ref(node.body, scope_for(node, s.scope), ())
        o = facts.origin(inner)
        return o is not None and o.kind == "softmax"
    if isinstance(node, ast.Call):  # functools.partial(F.softmax, dim=-1)
        q = qualname(s.child(node.func)) if isinstance(node.func, (ast.Name, ast.Attribute)) else None
        return bool(q) and q.endswith("partial") and bool(node.args) and _is_softmax_callable(ctx, s.child(node.args[0]))
    return False
