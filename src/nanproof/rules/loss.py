"""Loss family: binary cross-entropy of sigmoid outputs, logs of sigmoids, and logs of
probabilities behind an epsilon guard. (Cross-entropy of softmax probabilities shares
its patterns with the softmax rules and is declared in softmax.py.)"""
from __future__ import annotations

import ast
from dataclasses import dataclass

from ..values import facts, origins
from ..analyse import Context, Hit
from ..values.bindings import scope_for
from ..values.bindings import Ref, statements_with_paths
from ..model import Edit, Span
from ..registry import rule
from ..rewrite import import_edit
from ._logprob import Prob, log_prob, logits_of, logsigmoid_fix, movable, words
from ._shared import (
    from_logits_off,
    lines_note,
    log_softmax_text,
    loss_qual,
    passed_arg,
)

# Where the sigmoid saturates, measured with scipy.special.expit and torch.sigmoid:
# 1 - sigmoid(x) rounds to 0 from SATURATES on, sigmoid(x) is 0 below UNDERFLOWS.
SATURATES = "16.6 in float32 (36.7 in float64)"
UNDERFLOWS = "-88.7 in float32 (-709.8 in float64)"


_LOG_SPACE = ("log space: F.logsigmoid(x), jax.nn.log_sigmoid(x), tf.math.log_sigmoid(x), scipy.special.log_expit(x), "
              "NumPy -np.logaddexp(0, -x); log(1 - sigmoid(x)) is logsigmoid(-x)")


def _log_fix_hit(ctx: Context, p: Prob, msg: str, exact: bool, suggestion: str) -> Hit:
    got = logsigmoid_fix(ctx, p, ctx.ref(), exact)
    fix = ctx.fix(got[2], [got[0], *got[1]]) if got else None
    return Hit(ctx.node, msg, fix=fix, suggestion=None if fix else suggestion)


# ---------------------------------------------------------------------------------------
# log-of-sigmoid
# ---------------------------------------------------------------------------------------
def _sigmoid_failure(p: Prob) -> str:
    if p.complement:
        return (f"1 - sigmoid(x) rounds to 0 once x exceeds {SATURATES}, so the log is -inf with a nan gradient, "
                "and it loses accuracy to cancellation well before")
    return f"sigmoid(x) underflows to 0 once x falls below {UNDERFLOWS}, so the log is -inf with a nan gradient"


@rule(
    "log-of-sigmoid",
    family="loss",
    severity="error",
    summary="log(sigmoid(x)) or log(1 - sigmoid(x)): -inf once the sigmoid saturates; use logsigmoid",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(", r"log1p\s*\("),
    overrides=("log1p-manual",),
)
def log_of_sigmoid(ctx: Context):
    p = log_prob(ctx.ref())
    if p is None or p.origin.kind != "sigmoid" or p.guarded:
        return
    what = "log(1 - s)" if p.complement else "log(s)"
    msg = f"{what} of {words(p.origin)}{lines_note(ctx, p.src.node)}: {_sigmoid_failure(p)}; compute it in log space"
    yield _log_fix_hit(ctx, p, msg, True, _LOG_SPACE)


# ---------------------------------------------------------------------------------------
# log-epsilon-guard
# ---------------------------------------------------------------------------------------
@rule(
    "log-epsilon-guard",
    family="loss",
    severity="warning",
    summary="log(p + eps) or log(clip(p, eps, 1 - eps)) of a softmax or sigmoid: the epsilon caps the loss and stalls its gradient",
    fix="review",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(", r"log1p\s*\("),
    overrides=("log-of-softmax", "log-of-sigmoid", "log1p-manual"),
)
def log_epsilon_guard(ctx: Context):
    p = log_prob(ctx.ref())
    if p is None or not p.guarded:
        return
    o = p.origin
    space = "log_softmax" if o.kind == "softmax" else "logsigmoid(-x)" if p.complement else "logsigmoid"
    msg = (
        f"log of {'1 - ' if p.complement else ''}{words(o)} behind an epsilon guard{lines_note(ctx, p.src.node)}: where the "
        "probability falls to about eps or below, the log sticks near log(eps) (-18.4 for 1e-8), so the loss saturates "
        f"and its gradient vanishes for confidently wrong predictions, and the epsilon biases every term; use {space} "
        "(the rewrite drops the epsilon, so values change where p is near eps)"
    )
    if o.kind == "sigmoid":
        yield _log_fix_hit(ctx, p, msg, False, _LOG_SPACE) if o.how == "framework" else Hit(ctx.node, msg, suggestion=_LOG_SPACE)
        return
    got = log_softmax_text(ctx, o, p.src) if o.how == "framework" else None
    fix = ctx.fix("review", [ctx.edit(ctx.node, got[0]), *got[1]]) if got else None
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "log_softmax of the logits (F.log_softmax, jax.nn.log_softmax, tf.nn.log_softmax, scipy.special.log_softmax)")


# ---------------------------------------------------------------------------------------
# bce-from-sigmoid: framework losses on probabilities
# ---------------------------------------------------------------------------------------
# Loss functions and classes that take probabilities, with the style of their arguments.
_BCE_FUNCS = {"torch.F.binary_cross_entropy": "torch", "keras.losses.binary_crossentropy": "keras",
              "keras.backend.binary_crossentropy": "keras", "tensorflow.losses.binary_crossentropy": "keras",
              "numpy.binary_crossentropy": "keras"}  # the last: keras.ops after normalise
_BCE_CLASSES = {"torch.nn.BCELoss": "torch", "torch.nn.modules.loss.BCELoss": "torch",
                "keras.losses.BinaryCrossentropy": "keras", "tensorflow.losses.BinaryCrossentropy": "keras"}


def _ctor_style(ref: Ref) -> str | None:
    """The style of a probability loss object built at ``ref`` (``nn.BCELoss()``,
    ``BinaryCrossentropy()`` without from_logits), else None."""
    node = ref.node
    if not isinstance(node, ast.Call):
        return None
    style = _BCE_CLASSES.get(loss_qual(ref.child(node.func)) or "")
    return None if style == "keras" and not from_logits_off(node, 0) else style


def _mentions_bce(ctx: Context) -> bool:
    """The file names a binary cross-entropy loss at all (cheap, once per file)."""
    cache = ctx.analysis.module.cache
    if "mentions_bce" not in cache:
        cache["mentions_bce"] = any(w in ctx.analysis.text for w in ("binary_cross", "BCELoss", "BinaryCrossentropy"))
    return cache["mentions_bce"]


@dataclass(frozen=True)
class BCECall:
    style: str  # torch | keras
    prob: ast.expr  # the probability argument
    ctor: Ref | None  # the loss object's constructor, for BCELoss()(p, t) and crit(p, t)


def bce_call(ref: Ref) -> BCECall | None:
    """A framework binary cross-entropy that takes probabilities, called at ``ref``."""
    call = ref.node
    style = _BCE_FUNCS.get(loss_qual(ref.child(call.func)) or "")
    if style is not None:
        if style == "keras" and not from_logits_off(call, 2):
            return None
        prob = passed_arg(call, 0, "input") if style == "torch" else passed_arg(call, 1, "y_pred", "output")
        return BCECall(style, prob, None) if prob is not None else None
    ctor = facts.strip(ref.child(call.func))
    if isinstance(ctor.node, ast.Attribute):
        v = origins.self_attribute(ctor)
        ctor = facts.strip(v) if v is not None else ctor
    style = _ctor_style(ctor)
    if style is None:
        return None
    prob = passed_arg(call, 0, "input") if style == "torch" else passed_arg(call, 1, "y_pred")
    return BCECall(style, prob, ctor) if prob is not None else None


def _from_logits_edit(ctx: Context, call: ast.Call, pos: int):
    v = passed_arg(call, pos, "from_logits")
    if v is not None:
        return ctx.edit(v, "True")
    last = max([*call.args, *(k.value for k in call.keywords)], key=lambda n: (n.end_lineno, n.end_col_offset), default=None)
    end = ctx.analysis.span(last if last is not None else call)
    col = end.end_column if last is not None else end.end_column - 1  # just inside ``()``
    return Edit(Span(end.end_line, col, end.end_line, col), ", from_logits=True" if last is not None else "from_logits=True")


def _api_fix(ctx: Context, api: BCECall, p: Prob):
    """The with-logits form, when the logits are at hand and the loss is built here."""
    call = ctx.node
    inline = api.ctor is not None and api.ctor.node is call.func
    x = logits_of(p)
    if x is None or (api.ctor is not None and not inline) or not movable(ctx, x, ctx.ref(api.prob)):
        return None
    edits = [ctx.edit(api.prob, ctx.text(x.node))]
    if api.style == "keras":
        edits.append(_from_logits_edit(ctx, api.ctor.node, 0) if inline else _from_logits_edit(ctx, call, 2))
        return ctx.fix("review", edits)
    target = api.ctor.node.func if inline else call.func
    name = "BCEWithLogitsLoss" if inline else "binary_cross_entropy_with_logits"
    if isinstance(target, ast.Attribute):
        edits.append(ctx.edit(target, f"{ctx.text(target.value)}.{name}"))
    elif ctx.scope.lookup(name, None) is None:
        edits += [ctx.edit(target, name), import_edit(ctx.analysis.tree, f"from torch.nn{'' if inline else '.functional'} import {name}")]
    else:
        return None
    return ctx.fix("review", edits)


_KERAS_CLIP = ("Keras clips the probability to [1e-7, 1 - 1e-7] when it runs eagerly, so each term stops near 16.1 "
               "and its gradient is zero past |x| of about 16")
_TORCH_CLAMP = (f"once 1 - sigmoid(x) rounds to 0 (x above {SATURATES}) or sigmoid(x) underflows (x below {UNDERFLOWS}) "
                "PyTorch clamps the log at -100, so the loss is wrong and its gradient vanishes for confidently wrong predictions")


def _api_hit(ctx: Context, api: BCECall) -> Hit | None:
    pref = ctx.ref(api.prob)
    inner = facts.unguard(pref)
    o = origins.origin(inner)
    if o is None or o.kind != "sigmoid":
        return None
    p = Prob(o, inner, False, inner.node is not facts.strip(pref).node)
    if api.style == "keras" and o.how in ("module", "layer"):
        return None  # Keras keeps the logits of its own sigmoid activations for this loss (from memory of keras.activations.sigmoid)
    what = "BCELoss" if api.style == "torch" and api.ctor is not None else "binary cross-entropy"
    better = "binary_cross_entropy_with_logits / BCEWithLogitsLoss" if api.style == "torch" else "from_logits=True"
    why = _TORCH_CLAMP if api.style == "torch" else _KERAS_CLIP
    msg = f"{what} of {words(o)}{lines_note(ctx, inner.node)}: {why}; pass the logits with {better}"
    fix = _api_fix(ctx, api, p)
    return Hit(ctx.node, msg, fix=fix, suggestion=None if fix else f"pass the logits instead of the sigmoid, with {better}")


def _calls_in(stmt: ast.stmt):
    for child in ast.iter_child_nodes(stmt):
        if isinstance(child, ast.expr):
            for n in ast.walk(child):
                if isinstance(n, ast.Call):
                    yield n


def _criterion_uses(ctx: Context):
    """Contexts at the calls of the loss object built at ``ctx.node`` (``crit =
    nn.BCELoss()`` in this scope or functions defined in it, ``self.crit = ...`` in the
    methods of the class): such calls may sit on lines the prefilter did not keep."""
    stmt = ctx.stmt
    if not (isinstance(stmt, ast.Assign) and stmt.value is ctx.node and len(stmt.targets) == 1):
        return
    t = stmt.targets[0]
    if isinstance(t, ast.Name):
        b = ctx.scope.lookup(t.id, (stmt.end_lineno, stmt.end_col_offset), ctx.path)
        defs = [s for s, _ in statements_with_paths(ctx.scope.node) if isinstance(s, (ast.FunctionDef, ast.AsyncFunctionDef))]
        scopes = [ctx.scope, *(scope_for(d, ctx.scope) for d in defs)]

        def wanted(call: ast.Call, scope, path) -> bool:
            f = call.func
            return isinstance(f, ast.Name) and f.id == t.id and scope.lookup(t.id, (f.lineno, f.col_offset), path) is b
    elif isinstance(t, ast.Attribute) and ctx.scope.parent is not None and isinstance(ctx.scope.parent.node, ast.ClassDef):
        cls = ctx.scope.parent
        scopes = [scope_for(m, cls) for m in cls.node.body if isinstance(m, (ast.FunctionDef, ast.AsyncFunctionDef))]

        def wanted(call: ast.Call, scope, path) -> bool:
            f = call.func
            if not (isinstance(f, ast.Attribute) and f.attr == t.attr):
                return False
            v = origins.self_attribute(Ref(f, scope, path))
            return v is not None and v.node is ctx.node
    else:
        return
    for scope in scopes:
        for s, path in statements_with_paths(scope.node):
            for call in _calls_in(s):
                if wanted(call, scope, path):
                    yield Context(ctx.analysis, call, scope, path, s)


# ---------------------------------------------------------------------------------------
# bce-from-sigmoid: written out, -(t * log(s) + (1 - t) * log(1 - s))
# ---------------------------------------------------------------------------------------
def _log_factors(ref: Ref, weighted: bool = False, depth: int = 0) -> list[tuple[Ref, bool]]:
    """The logs in one loss term (``w * log(q)``, ``-log(q)``, ``mean(w * log(q))``), each
    with whether a weight multiplies it."""
    ref = facts.strip(ref)
    node = ref.node
    oc = facts.op_of(ref)
    if depth > 6:
        return []
    if oc is not None:
        if oc.op in ("log", "log1p"):
            return [(ref, weighted)]
        if oc.op in ("sum", "mean") and oc.subject is not None:
            return _log_factors(ref.child(oc.subject), weighted, depth + 1)
        return []
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        return _log_factors(ref.child(node.operand), weighted, depth + 1)
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.Div)):
        out = _log_factors(ref.child(node.left), True, depth + 1)
        return out + _log_factors(ref.child(node.right), True, depth + 1) if isinstance(node.op, ast.Mult) else out
    return []


def _bce_terms(ctx: Context):
    """(log of s, its Prob, log of 1 - s, its Prob) when the node joins the two terms of a
    binary cross-entropy of the same sigmoid output s."""
    node = ctx.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Add, ast.Sub)):
        left, right = ctx.ref(node.left), ctx.ref(node.right)
    elif isinstance(node, ast.AugAssign) and isinstance(node.op, (ast.Add, ast.Sub)) and isinstance(node.target, ast.Name):
        left, right = ctx.ref(node.target), ctx.ref(node.value)
    else:
        return None
    rf = _log_factors(right)
    lf = _log_factors(left) if rf else []
    for a, wa in lf:  # both terms weighted (t and 1 - t): 2 * log(s) + log(1 - s) is no cross-entropy
        pa = log_prob(a) if wa else None
        if pa is None or pa.origin.kind != "sigmoid":
            continue
        for b, wb in rf:
            pb = log_prob(b) if wb else None
            if pb is not None and pb.origin.kind == "sigmoid" and pb.complement != pa.complement and facts.same(pa.src, pb.src):
                return (a, pa, b, pb) if pb.complement else (b, pb, a, pa)
    return None


_WITH_LOGITS = ("the with-logits form on the logits x: F.binary_cross_entropy_with_logits(x, t), "
                "tf.nn.sigmoid_cross_entropy_with_logits(labels=t, logits=x), or elementwise softplus(x) - t * x "
                "(NumPy: np.logaddexp(0, x) - t * x)")


def _written_hit(ctx: Context, terms) -> Hit:
    a, pa, b, pb = terms
    guarded = pa.guarded or pb.guarded
    why = (
        "the epsilon guards only cap each term near -log(eps) and zero the gradient of confidently wrong predictions"
        if guarded
        else f"log(1 - s) is -inf once x exceeds {SATURATES} and log(s) once x falls below {UNDERFLOWS}, an inf loss with nan gradients"
    )
    msg = f"binary cross-entropy of {words(pa.origin)} written out{lines_note(ctx, a.node, b.node, pa.src.node)}: {why}; use the with-logits form"
    got = [logsigmoid_fix(ctx, p, r, not p.guarded) for r, p in ((a, pa), (b, pb))]
    fix = None
    if all(got):
        edits = list(dict.fromkeys(e for g in got for e in (g[0], *g[1])))
        fix = ctx.fix("auto" if all(g[2] == "auto" for g in got) else "review", edits)
    return Hit(ctx.node, msg, fix=fix, suggestion=_WITH_LOGITS, covers=(a.node, b.node))


@rule(
    "bce-from-sigmoid",
    family="loss",
    severity="error",
    summary="binary cross-entropy of sigmoid probabilities: -inf or clamped loss and vanishing gradients; pass the logits",
    fix="review",
    nodes=(ast.Call, ast.BinOp, ast.AugAssign),
    triggers=(r"log\s*\(", r"log1p\s*\(", r"binary_cross_?entropy\s*\(", r"BCELoss\s*\(", r"BinaryCrossentropy\s*\("),
    # xlogx-nan: s * log(s) + (1 - s) * log(1 - s), the entropy of a sigmoid, is this pattern too
    overrides=("log-of-sigmoid", "log1p-manual", "log-epsilon-guard", "xlogx-nan"),
)
def bce_from_sigmoid(ctx: Context):
    if not isinstance(ctx.node, ast.Call):
        terms = _bce_terms(ctx)
        if terms is not None:
            yield _written_hit(ctx, terms)
        return
    if not _mentions_bce(ctx):
        return
    for site in (ctx, *(_criterion_uses(ctx) if _ctor_style(ctx.ref()) else ())):
        api = bce_call(site.ref())
        hit = _api_hit(site, api) if api is not None else None
        if hit is not None:
            yield hit
