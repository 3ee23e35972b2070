"""cross-entropy-from-probs: a negative log-likelihood taken of softmax probabilities
(loss family; it builds on the softmax origins and the log-softmax rewrite)."""
from __future__ import annotations

import ast
from dataclasses import replace

from ..values import facts, origins
from ..analyse import Context, Hit
from ..values.bindings import Ref
from ..values.names import normalise, qualname
from ..values.origins import Origin
from ..registry import rule
from ._shared import (
    UNDERFLOW,
    from_logits_off,
    lines_note,
    log_argument,
    log_of_softmax_fix,
    log_softmax_text,
    loss_qual,
    names_stable,
    origin_words,
    passed_arg,
)


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
    o = origins.origin(facts.unguard(arg))  # also log(p + eps), log(clip(p, eps, 1 - eps))
    return (log_ref, o) if o is not None and o.kind == "softmax" else None


_CE = "negative log-likelihood of softmax probabilities"


def _picked_fix(ctx: Context, o: Origin, picked: Ref, at: ast.AST):
    """``log(p[rows, labels])`` -> ``log_softmax(...)[rows, labels]``: the rewrite keeps
    the indexing; a gather call gets no rewrite."""
    sub = facts.strip(picked).node
    if not isinstance(sub, ast.Subscript) or not names_stable(ctx, sub.slice, picked):
        return None
    whole = facts.strip(picked.child(sub.value))
    o = origins.origin(whole) or o  # the softmax the entries are picked from
    got = log_softmax_text(ctx, o, whole)
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
    picked = origins.shape_operand(facts.strip(src)) is not None
    fix = _picked_fix(ctx, o, src, log_ref.node) if picked else log_of_softmax_fix(ctx, o, src, log_ref.node)
    if fix is not None and guarded:
        fix = replace(fix, kind="review")
    eps = "; an epsilon guard only caps it near -log(eps) and stalls the gradient" if guarded else ""
    msg = (
        f"{_CE}{lines_note(ctx, log_ref.node)}: log of {origin_words(o)} is -inf once a probability underflows "
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
    triggers=(r"log\s*\(", r"nll_loss\s*\(", r"NLLLoss\s*\(", r"categorical_crossentropy\s*\(",
              r"sparse_categorical_crossentropy\s*\(", r"CategoricalCrossentropy\s*\(", r"SparseCategoricalCrossentropy\s*\("),
    overrides=("log-of-softmax", "log-epsilon-guard"),
)
def cross_entropy_from_probs(ctx: Context):
    node = ctx.node
    if isinstance(node, ast.Call):
        arg = log_argument(ctx)
        if arg is not None:  # log(p[range(n), y]) with p a softmax
            p = gathered(facts.unguard(arg))
            o = origins.origin(p) if p is not None else None
            if o is not None and o.kind == "softmax":
                yield _ce_hit(ctx, ctx.ref(), o, "cross-entropy on the logits (e.g. F.cross_entropy(logits, y)), or gather from log_softmax")
            return
        if _is_nll(ctx, node) and node.args:
            got = _nll_log(ctx, ctx.ref(node.args[0]))
            if got:
                yield _ce_hit(ctx, got[0], got[1], "F.cross_entropy(logits, target) on the logits")
            return
        yield from _keras_probability_loss(ctx, node)
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
        v = origins.self_attribute(target)
        target = facts.strip(v) if v is not None else target
    if isinstance(target.node, ast.Call):
        q = qualname(target.child(target.node.func))
        return bool(q) and q.endswith(".NLLLoss") and q.startswith("torch")
    return False


def _is_same_probs(ctx: Context, other: ast.AST, log_ref: Ref) -> bool:
    """``p * log(p)`` is an entropy term, not a likelihood."""
    arg = log_argument(ctx, log_ref.node)
    return arg is not None and facts.same(facts.unscaled(ctx.ref(other))[0], facts.unguard(arg))


# Keras losses that take probabilities unless from_logits=True: (y_true, y_pred).
_KERAS_CE = {"keras.losses.categorical_crossentropy", "keras.losses.sparse_categorical_crossentropy",
             "keras.backend.categorical_crossentropy", "keras.backend.sparse_categorical_crossentropy",
             "keras.metrics.categorical_crossentropy", "keras.metrics.sparse_categorical_crossentropy"}
_KERAS_CE_CLASSES = {"keras.losses.CategoricalCrossentropy", "keras.losses.SparseCategoricalCrossentropy"}


def _keras_probability_loss(ctx: Context, call: ast.Call):
    """``categorical_crossentropy(t, tf.nn.softmax(x))`` and
    ``CategoricalCrossentropy()(t, p)`` without ``from_logits=True``. A softmax layer or
    activation is left alone: Keras recovers its logits for these losses (from memory of
    the Keras activations; not checked here, TensorFlow is not installed)."""
    q = loss_qual(ctx.ref(call.func))
    if q in _KERAS_CE:
        if not from_logits_off(call, 2):
            return
    else:
        ctor = facts.strip(ctx.ref(call.func))
        if not isinstance(ctor.node, ast.Call) or loss_qual(ctor.child(ctor.node.func)) not in _KERAS_CE_CLASSES:
            return
        if not from_logits_off(ctor.node, 0):
            return
    pred = passed_arg(call, 1, "y_pred", "output")
    o = origins.origin(ctx.ref(pred)) if pred is not None else None
    if o is None or o.kind != "softmax" or o.how in ("module", "layer"):
        return
    if o.call is not None and o.call.qual and normalise(o.call.qual).startswith("nn.") and "keras" in o.call.qual:
        return  # keras.activations.softmax: Keras keeps its logits
    # 1e-7 is Keras's default epsilon (from memory, as for bce-from-sigmoid); -log(1e-7) = 16.1
    msg = (
        f"Keras cross-entropy of softmax probabilities{lines_note(ctx, facts.strip(ctx.ref(pred)).node)}: the loss clips "
        "them to [1e-7, 1 - 1e-7], so a confident wrong prediction costs at most 16.1 and its gradient vanishes; "
        "pass the logits with from_logits=True"
    )
    yield Hit(call, msg, suggestion="the same loss on the logits with from_logits=True")
