"""What a log is taken of, and a log of a sigmoid rewritten in log space.

``log_prob`` reads the argument of ``log(...)`` / ``log1p(-q)``: a softmax or sigmoid
output p or its complement 1 - p, seen through epsilon guards. ``logsigmoid_fix`` writes
``log(sigmoid(x))`` and ``log(1 - sigmoid(x))`` as the framework's log-sigmoid (or
NumPy's ``-logaddexp(0, -x)``) with the file's own names.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass, replace

from ..values import facts, origins
from ..analyse import Context
from ..values.bindings import Ref
from ..values.names import framework_of, normalise, qualname
from ..values.origins import Origin
from ..rewrite import atomic, func_prefix, import_edit, module_alias, paren, simple
from ._shared import names_stable, origin_words


@dataclass(frozen=True)
class Prob:
    """What a log is taken of: a softmax or sigmoid output p, or 1 - p."""

    origin: Origin
    src: Ref  # the producing expression, guards and names stripped
    complement: bool  # log(1 - p)
    guarded: bool  # an epsilon guard sits between the log and p


def _peeled(ref: Ref) -> tuple[Ref, bool]:
    inner = facts.unguard(ref)
    return inner, inner.node is not facts.strip(ref).node


def _prob(arg: Ref, negated_arg: bool = False) -> Prob | None:
    """Read the argument of a log (``negated_arg``: the q of ``log1p(-q)``)."""
    inner, guarded = _peeled(arg)
    comp = None
    if negated_arg:
        comp = inner
    elif isinstance(inner.node, ast.BinOp) and isinstance(inner.node.op, ast.Sub):
        one, eps_on_one = _peeled(inner.child(inner.node.left))  # 1 - q, 1 + eps - q
        if facts._const(one.node) == 1:
            comp, guarded = inner.child(inner.node.right), guarded or eps_on_one
    if comp is not None:
        inner, g = _peeled(comp)
        guarded = guarded or g
    o = origins.origin(inner)
    if o is None or o.kind not in ("sigmoid", "softmax") or (comp is not None and o.kind != "sigmoid"):
        return None
    return Prob(o, inner, comp is not None, guarded)


def log_prob(ref: Ref) -> Prob | None:
    """``log(...)`` or ``log1p(-q)`` of a softmax/sigmoid output, read through guards."""
    oc = facts.op_of(ref)
    if oc is None or oc.subject is None or (not oc.is_method and len(oc.call.args) != 1):
        return None
    arg = ref.child(oc.subject)
    if oc.op == "log":
        return _prob(arg)
    s = facts.strip(arg)
    if oc.op == "log1p" and isinstance(s.node, ast.UnaryOp) and isinstance(s.node.op, ast.USub):
        return _prob(s.child(s.node.operand), negated_arg=True)
    return None


def words(o: Origin) -> str:
    return origin_words(o)


def _at(ctx: Context, ref: Ref) -> Context:
    """The context as seen from another node of the same file (a log statements earlier)."""
    return replace(ctx, node=ref.node, scope=ref.scope, path=ref.path)


# ---------------------------------------------------------------------------------------
# log(sigmoid(x)) in log space, in the style of the file
# ---------------------------------------------------------------------------------------
def _neg(text: str, node: ast.AST) -> str:
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub) and isinstance(node.operand, (ast.Name, ast.Attribute, ast.Subscript, ast.Call)):
        return text[1:].lstrip()  # -(-z) is z exactly
    return f"-{paren(text, node)}"


def _imported(ctx: Context, module: str, name: str, arg: str):
    if ctx.scope.lookup(name, None) is not None:
        return None  # the name means something else here
    return f"{name}({arg})", [import_edit(ctx.analysis.tree, f"from {module} import {name}")]


def _torch_logsigmoid(ctx: Context, oc, arg: str):
    """``F.logsigmoid(arg)`` with the file's names: (text, extra edits) or None."""
    f = oc.call.func if oc is not None and not oc.is_method else None
    if isinstance(f, ast.Attribute) and normalise(oc.qual or "").startswith("torch.F."):
        return f"{ctx.text(f.value)}.logsigmoid({arg})", []
    F = module_alias(ctx.ref(), "torch.nn.functional")
    if F:
        return f"{F}.logsigmoid({arg})", []
    torch = module_alias(ctx.ref(), "torch")
    if torch:  # ``import torch`` loads torch.nn.functional too
        return f"{torch}.nn.functional.logsigmoid({arg})", []
    return _imported(ctx, "torch.nn.functional", "logsigmoid", arg)


def _twin(ctx: Context, o: Origin, arg: str):
    """The log-space twin of a framework sigmoid call, written like the call."""
    oc = o.call
    fw, norm = framework_of(oc.qual or "") or "", normalise(oc.qual or "")
    prefix = func_prefix(oc, ctx.text)
    if oc.is_method or fw == "torch":
        return _torch_logsigmoid(ctx, oc, arg)
    if fw == "scipy" and norm == "scipy.special.expit":
        return (f"{prefix}.log_expit({arg})", []) if prefix else _imported(ctx, "scipy.special", "log_expit", arg)
    if fw == "jax":
        if norm == "nn.sigmoid" and prefix:
            return f"{prefix}.log_sigmoid({arg})", []
        jax = module_alias(ctx.ref(), "jax")
        return (f"{jax}.nn.log_sigmoid({arg})", []) if jax else _imported(ctx, "jax.nn", "log_sigmoid", arg)
    tf = module_alias(ctx.ref(), "tensorflow", "tensorflow.compat.v1")
    if fw == "tf" and tf and not norm.startswith("keras."):
        return f"{tf}.math.log_sigmoid({arg})", []
    return None


def _by_log_call(ctx: Context, log: Ref, x: str, x_node: ast.AST, complement: bool):
    """Log space in the framework of the ``log`` call itself: NumPy ``-logaddexp(0, -x)``,
    math ``min(x, 0) - log1p(exp(-abs(x)))``, PyTorch ``logsigmoid``, TF ``log_sigmoid``."""
    oc = facts.op_of(log)
    if oc is None:
        return None
    a = _neg(x, x_node) if complement else x  # log(1 - sigmoid(x)) = log(sigmoid(-x))
    if oc.is_method or oc.framework == "torch":
        return _torch_logsigmoid(ctx, None, a)
    if oc.framework in ("numpy", "jax"):
        np_ = func_prefix(oc, ctx.text) or module_alias(ctx.ref(), "numpy", "cupy", "jax.numpy")
        return (f"-{np_}.logaddexp(0, {x if complement else _neg(x, x_node)})", []) if np_ else None
    if oc.framework == "tf":
        tf = module_alias(ctx.ref(), "tensorflow", "tensorflow.compat.v1")
        return (f"{tf}.math.log_sigmoid({a})", []) if tf else None
    if oc.framework == "math" and simple(x_node):
        m = func_prefix(oc, ctx.text) or module_alias(ctx.ref(), "math")
        return (f"min({a}, 0) - {m}.log1p({m}.exp(-abs({x})))", []) if m else None
    return None


def logsigmoid_fix(ctx: Context, p: Prob, log: Ref, exact: bool):
    """(edit, extra edits, kind) writing the log call ``log`` of the sigmoid ``p`` in log
    space, or None. ``exact``: nothing but the log changes, so equal in exact arithmetic."""
    o, x = p.origin, logits_of(p)
    if x is None or not movable(ctx, x, log):
        return None
    site = _at(ctx, log)
    xt = ctx.text(x.node)
    got = _twin(site, o, _neg(xt, x.node) if p.complement else xt) if o.how == "framework" else None
    if got is None or got[1]:  # prefer a rewrite needing no import, in the log's framework
        got = _by_log_call(site, log, xt, x.node, p.complement) or got
    if got is None:
        return None
    text, extra = got
    exact = exact and not extra and o.how != "module"
    return ctx.edit(log.node, _fit(log, text)), extra, "auto" if exact else "review"


_BARE_SIGMOID = {"torch.nn.Sigmoid", "torch.nn.modules.activation.Sigmoid"}


def logits_of(p: Prob) -> Ref | None:
    """The logits x of the sigmoid output: of a framework or hand-written sigmoid, or of
    a bare ``nn.Sigmoid()`` module (not a Sequential ending in one) called on x."""
    o, src = p.origin, p.src
    if o.how in ("framework", "hand-written"):
        return o.logits
    if o.how != "module" or o.logits is None or len(src.node.args) != 1:
        return None
    callee = facts.strip(src.child(src.node.func))
    if isinstance(callee.node, ast.Attribute):
        v = origins.self_attribute(callee)
        callee = facts.strip(v) if v is not None else callee
    if isinstance(callee.node, ast.Call) and qualname(callee.child(callee.node.func)) in _BARE_SIGMOID:
        return o.logits
    return None


def movable(ctx: Context, x: Ref, site: Ref) -> bool:
    """The logits may be written at ``site``: they mean the same there, and a call among
    them is moved from inside ``site``, never computed a second time."""
    if not names_stable(_at(ctx, site), x.node, x):
        return False
    return simple(x.node) or any(n is x.node for n in ast.walk(site.node))


def _fit(log: Ref, text: str) -> str:
    """``text`` parenthesised unless it can stand where the log call stood:
    ``-np.logaddexp(...)`` is fine as an operand of ``*``, not as a base of ``**`` or a
    method receiver."""
    expr = ast.parse(text, mode="eval").body
    if atomic(expr):
        return text
    node = log.node
    parent = next((n for n in ast.walk(log.scope.node) if any(c is node for c in ast.iter_child_nodes(n))), None)
    if isinstance(parent, (ast.stmt, ast.keyword, ast.List, ast.Tuple)) or (isinstance(parent, ast.Call) and node is not parent.func):
        return text
    if isinstance(expr, ast.UnaryOp) and isinstance(parent, ast.BinOp) and not (isinstance(parent.op, ast.Pow) and parent.left is node):
        return text
    return f"({text})"
