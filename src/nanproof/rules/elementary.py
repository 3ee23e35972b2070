"""Elementary family: log1p, expm1, the logistic sigmoid, softplus and log/exp round trips
written out by hand.

Each stays quiet where its pattern does no harm (see ``nanproof.ranges``): ``log(1 + n)``
and ``exp(n) - 1`` for an evident integer n (1 + n is exact; exp(n) - 1 cannot cancel) or
a constant that is not tiny, and exps that a clip, a mask or a branch condition keeps
finite, as in the stable sigmoid and softplus.
"""
from __future__ import annotations

import ast

from ..values import facts, origins, ranges
from ..analyse import Context, Hit
from ..values.bindings import Ref
from ..values.names import OpCall, normalise
from ..registry import rule
from ..rewrite import import_edit, paren, reachable, simple
from ._shared import OVERFLOW, lines_note, names_stable, only_compared, used_elsewhere

# Half an ulp of 1.0 (numpy.finfo(t).eps / 2, IEEE 754): the digits of x below it are
# rounded away in 1 + x.
ROUNDS_AWAY = "1.1e-16 in float64 (6e-8 in float32)"
# exp overflows past ln(numpy.finfo(numpy.float64).max); math.exp raises there instead.
MATH_OVERFLOW = "709.78, where math.exp raises OverflowError"
_GRADIENT_NOTE = "; where() keeps the value but not the gradient: backward still runs through the overflowing branch and gives nan"


def _one(node: ast.expr) -> bool:
    return facts._const(node) == 1


def _unary(ref: Ref, *ops: str) -> tuple[OpCall, Ref] | None:
    """The operation and argument of a one-argument call: ``np.log(u)``, ``u.log()``."""
    oc = facts.op_of(ref)
    if oc is None or oc.op not in ops or oc.subject is None:
        return None
    if not oc.is_method and len(oc.call.args) > 1:
        return None
    return oc, ref.child(oc.subject)


def _one_plus(ref: Ref) -> tuple[Ref, bool] | None:
    """``1 + x`` / ``x + 1`` -> (x, False); ``1 - x`` -> (x, True)."""
    ref = facts.strip(ref)
    n = ref.node
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Add):
        if _one(n.left):
            return ref.child(n.right), False
        if _one(n.right):
            return ref.child(n.left), False
    if isinstance(n, ast.BinOp) and isinstance(n.op, ast.Sub) and _one(n.left):
        return ref.child(n.right), True
    return None


def _library(oc: OpCall) -> str | None:
    """Which framework's rewrite applies: numpy, torch, jax, tf or math (None: CuPy,
    autograd, Keras ops and the like, which get a suggestion only)."""
    if oc.is_method:  # ndarray, JAX and TF arrays have no .exp(): a torch tensor
        return "torch"
    q = oc.qual or ""
    if normalise(q).startswith("tensorflow."):
        return "tf"
    for lib in ("numpy", "torch", "jax", "math"):
        if q.startswith(lib + "."):
            return lib
    return None


def _has_gradients(oc: OpCall) -> bool:
    """Autodiff frameworks differentiate both branches of a where()."""
    return _library(oc) in ("torch", "jax", "tf") or (_library(oc) is None and not (oc.qual or "").startswith("cupy."))


def _direct(*refs: Ref) -> bool:
    """Each value is reached through names only, with no cast, ``.detach()`` or
    ``stop_gradient`` on the way, which a rewrite of the whole would drop."""
    return all(facts.deref(r).node is facts.strip(r).node for r in refs)


def _movable(ctx: Context, node: ast.AST, src: Ref) -> bool:
    """``node`` (found through ``src``) may be written at the finding: it lies in the
    finding's statement, or it is free of calls and means the same there."""
    if any(n is node for n in ast.walk(ctx.stmt)):
        return True
    return simple(node) and names_stable(ctx, node, src)


# ---------------------------------------------------------------------------------------
# Naming framework functions in the file's own style
# ---------------------------------------------------------------------------------------
def _named(ctx: Context, qual: str) -> tuple[str, list] | None:
    """Code naming ``qual`` through the file's imports, else the bare name with a new
    ``from module import name`` line when that name is free; None otherwise."""
    got = reachable(ctx.ref(), qual)
    if got:
        return got, []
    module, name = qual.rsplit(".", 1)
    if ctx.scope.lookup(name, None) is None:
        return name, [import_edit(ctx.analysis.tree, f"from {module} import {name}")]
    return None


def _sibling(ctx: Context, oc: OpCall, name: str) -> tuple[str, list] | None:
    """The function ``name`` of the module ``oc`` calls into: ``np.exp`` -> ``np.expm1``,
    ``tf.exp`` -> ``tf.math.expm1`` (TF2 keeps expm1 and log1p in tf.math only; ``tf.log``
    is TF1, where ``tf.log1p`` exists too)."""
    if oc.is_method or not oc.qual:
        return None
    module = oc.qual.rsplit(".", 1)[0]
    tf_math = normalise(oc.qual).startswith("tensorflow.") and oc.op != "log"
    func = oc.call.func
    if isinstance(func, ast.Attribute):
        base = ctx.text(func)[: -len(func.attr)]
        return base + ("math." if tf_math and not base.endswith("math.") else "") + name, []
    if tf_math and not module.endswith(".math"):
        module += ".math"
    return _named(ctx, f"{module}.{name}")


def _renamed(ctx: Context, oc: OpCall, name: str) -> tuple[str, list] | None:
    """The call ``oc`` with its function renamed: ``np.exp(x)`` -> ``np.expm1(x)``."""
    call, func = ctx.text(oc.call), ctx.text(oc.call.func)
    if not call.startswith(func):
        return None
    if oc.is_method:
        return func[: -len(oc.call.func.attr)] + name + call[len(func):], []
    got = _sibling(ctx, oc, name)
    return (got[0] + call[len(func):], got[1]) if got else None


def _fix(ctx: Context, edits: list, extra: list, kind: str = "auto"):
    return ctx.fix("review" if extra else kind, [*edits, *extra])


# ---------------------------------------------------------------------------------------
# log1p-manual
# ---------------------------------------------------------------------------------------
def _log1p_fix(ctx: Context, oc: OpCall, arg: Ref, x: Ref, negated: bool):
    if not (_direct(arg) and _movable(ctx, x.node, x)):
        return None
    text = ctx.text(x.node)
    if negated:
        text = f"-{paren(text, x.node)}"
    # ``y = 1 + x`` also used elsewhere: those uses keep the rounded sum, this one not
    kind = "review" if isinstance(arg.node, ast.Name) and used_elsewhere(arg, ctx.node) else "auto"
    if oc.is_method:
        recv = f"({text})" if negated else paren(text, x.node)
        return ctx.fix(kind, [ctx.edit(oc.call, f"{recv}.log1p{ctx.text(oc.call)[len(ctx.text(oc.call.func)):]}")])
    got = _sibling(ctx, oc, "log1p")
    return _fix(ctx, [ctx.edit(oc.call.func, got[0]), ctx.edit(arg.node, text)], got[1], kind) if got else None


@rule(
    "log1p-manual",
    family="elementary",
    severity="warning",
    summary="log(1 + x) written out: 1 + x rounds away the digits of a small x; use log1p(x)",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(",),
)
def log1p_manual(ctx: Context):
    got = _unary(ctx.ref(), "log")
    parts = _one_plus(got[1]) if got else None
    if parts is None:
        return
    oc, arg = got
    x, negated = parts
    # log(1 + exp(u)) is softplus-manual's (or the stable softplus); log(1 - exp(u)) is
    # better cured by expm1-manual's log(-expm1(u)) near 0, so both are left to them.
    if facts.op(x, "exp") is not None or ranges.harmless_term(x):
        return
    sign, cure = ("-", "log1p(-x)") if negated else ("+", "log1p(x)")
    msg = (
        f"log(1 {sign} x){lines_note(ctx, facts.strip(arg).node)}: 1 {sign} x rounds first and drops the digits of x "
        f"below {ROUNDS_AWAY}, so log(1 + 1e-17) is 0.0 where log1p gives 1e-17; use {cure}"
    )
    fix = _log1p_fix(ctx, oc, arg, x, negated)
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else cure)


# ---------------------------------------------------------------------------------------
# expm1-manual
# ---------------------------------------------------------------------------------------
def _minus_one(ctx: Context) -> tuple[Ref, bool] | None:
    """``e - 1`` -> (e, False), ``1 - e`` -> (e, True), ``e -= 1`` -> (e, False)."""
    node = ctx.node
    if isinstance(node, ast.AugAssign) and isinstance(node.op, ast.Sub) and _one(node.value) and isinstance(node.target, ast.Name):
        return ctx.ref(node.target), False
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub):
        if _one(node.right):
            return ctx.ref(node.left), False
        if _one(node.left):
            return ctx.ref(node.right), True
    return None


def _scaled_minus(ctx: Context) -> tuple[Ref, Ref] | None:
    """``a * exp(x) - a`` (or ``exp(x) * a - a``): (the exp, the factor a)."""
    node = ctx.node
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub)):
        return None
    left = node.left
    if not (isinstance(left, ast.BinOp) and isinstance(left.op, ast.Mult)):
        return None
    for e, a in ((left.right, left.left), (left.left, left.right)):
        if facts.same(ctx.ref(a), ctx.ref(node.right)) and facts.op(ctx.ref(e), "exp") is not None:
            return ctx.ref(e), ctx.ref(a)
    return None


@rule(
    "expm1-manual",
    family="elementary",
    severity="warning",
    summary="exp(x) - 1 written out: cancels for small x; use expm1(x)",
    fix="auto",
    nodes=(ast.BinOp, ast.AugAssign),
    triggers=(r"exp\s*\(",),
)
def expm1_manual(ctx: Context):
    parts = _minus_one(ctx)
    scale = None
    if parts is None and (sm := _scaled_minus(ctx)) is not None:
        parts, scale = (sm[0], False), sm[1]
    exp = facts.strip(parts[0]) if parts else None
    got = _unary(exp, "exp") if exp else None
    if got is None:
        return
    oc, u = got
    # exp(n) - 1 for an integer n cannot cancel; exp(log(x)) - 1 is the round trip's.
    if ranges.harmless_term(u) or facts.op(u, "log") is not None or only_compared(ctx):
        return
    negated = parts[1]
    form, cure = ("1 - exp(x)", "-expm1(x)") if negated else ("exp(x) - 1", "expm1(x)")
    if scale is not None:
        form, cure = "a * exp(x) - a", "a * expm1(x)"
    msg = (
        f"{form}{lines_note(ctx, exp.node)} cancels when x is small: exp(1e-10) - 1 keeps only about half of its "
        f"16 digits in float64, and the difference is 0.0 once |x| is below {ROUNDS_AWAY}; use {cure}"
    )
    fix = None
    if isinstance(ctx.node, ast.BinOp) and _direct(parts[0]) and _movable(ctx, u.node, u) and (code := _renamed(ctx, oc, "expm1")):
        factor = f"{paren(ctx.text(scale.node), scale.node)} * " if scale is not None else ""
        if scale is None or simple(scale.node):
            fix = _fix(ctx, [ctx.edit(ctx.node, ("-" if negated else "") + factor + code[0])], code[1])
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else cure)


# ---------------------------------------------------------------------------------------
# sigmoid-manual
# ---------------------------------------------------------------------------------------
def _sigmoid_code(ctx: Context, oc: OpCall, t: Ref) -> tuple[str, list] | None:
    """The framework sigmoid of ``t``: scipy.special.expit for NumPy, torch.sigmoid,
    jax.nn.sigmoid, tf.math.sigmoid; for math scalars the two-branch stable form."""
    x, lib = ctx.text(t.node), _library(oc)
    qual = {"numpy": "scipy.special.expit", "torch": "torch.sigmoid", "jax": "jax.nn.sigmoid", "tf": "tensorflow.math.sigmoid"}.get(lib)
    if lib in ("numpy", "jax") and (got := _named(ctx, qual)):
        return f"{got[0]}({x})", got[1]
    if lib in ("torch", "tf") and (got := reachable(ctx.ref(), qual)):
        return f"{got}({x})", []
    if lib == "torch" and oc.is_method:
        return f"{paren(x, t.node)}.sigmoid()", []
    if lib == "math" and simple(t.node):
        e, neg = ctx.text(oc.call.func), paren(x, t.node)
        return f"(1 / (1 + {e}(-{neg})) if {x} >= 0 else {e}({x}) / (1 + {e}({x})))", []
    return None


def _sigmoid_exp(ctx: Context) -> origins.ExpTerm:
    den = facts.strip(ctx.ref(ctx.node.right))
    other = den.node.right if _one(den.node.left) else den.node.left
    return origins.exp_term(den.child(other))


@rule(
    "sigmoid-manual",
    family="elementary",
    severity="warning",
    summary="hand-written logistic sigmoid: exp(x) / (1 + exp(x)) is nan past x = 709.78 (error); 1 / (1 + exp(-x)) overflows (warning)",
    fix="auto",
    nodes=(ast.BinOp,),
    triggers=(r"exp\s*\(",),
)
def sigmoid_manual(ctx: Context):
    if not (isinstance(ctx.node, ast.BinOp) and isinstance(ctx.node.op, ast.Div)):
        return
    t = origins.manual_sigmoid(ctx.ref())
    if t is None:
        return
    term = _sigmoid_exp(ctx)
    oc = facts.op_of(term.exp)
    grads = _has_gradients(oc)
    if ranges.exp_cannot_overflow(ctx.ref(), ctx.stmt, term.arg, lazy_only=grads):
        return
    note = _GRADIENT_NOTE if grads and ranges.exp_cannot_overflow(ctx.ref(), ctx.stmt, term.arg, lazy_only=False) else ""
    reciprocal, math = _one(ctx.node.left), _library(oc) == "math"
    lines = lines_note(ctx, term.exp.node)
    if reciprocal:
        when = f"x falls below -{MATH_OVERFLOW}" if math else "x falls below -88.72 in float32 (-709.78 in float64): a RuntimeWarning, an inf intermediate and a nan gradient under autograd"
        msg = f"hand-written sigmoid 1 / (1 + exp(-x)){lines}: exp(-x) overflows once {when}{note}; use the framework sigmoid"
    else:
        when = MATH_OVERFLOW if math else f"{OVERFLOW}, and inf / inf is nan"
        msg = f"hand-written sigmoid exp(x) / (1 + exp(x)){lines}: exp(x) overflows once x exceeds {when}{note}; use the framework sigmoid"
    den = facts.strip(ctx.ref(ctx.node.right))
    parts = [ctx.ref(ctx.node.left), ctx.ref(ctx.node.right), den.child(den.node.left), den.child(den.node.right)]
    code = _sigmoid_code(ctx, oc, t) if _direct(*parts) and _movable(ctx, t.node, t) else None
    fix = _fix(ctx, [ctx.edit(ctx.node, code[0])], code[1]) if code else None
    severity = "warning" if reciprocal and not math else "error"
    suggestion = None if fix else "the framework sigmoid: scipy.special.expit, torch.sigmoid, jax.nn.sigmoid, tf.math.sigmoid"
    yield Hit(ctx.node, msg, fix=fix, suggestion=suggestion, severity=severity)


# ---------------------------------------------------------------------------------------
# softplus-manual
# ---------------------------------------------------------------------------------------
def _softplus_code(ctx: Context, ec: OpCall, u: Ref) -> tuple[str, list, str] | None:
    """(code, extra edits, kind) of softplus(u). logaddexp(0, u) and jax.nn.softplus are
    exact; torch's and TF's softplus return u itself above a threshold (20 in torch,
    whatever the dtype), so they are offered for review."""
    x, lib = ctx.text(u.node), _library(ec)
    if lib == "jax" and (got := reachable(ctx.ref(), "jax.nn.softplus")):
        return f"{got}({x})", [], "auto"
    if lib == "numpy" or (ec.qual or "").startswith(("cupy.", "jax.numpy.")):
        got = _sibling(ctx, ec, "logaddexp")
        return (f"{got[0]}(0, {x})", got[1], "auto") if got else None
    qual = {"torch": "torch.nn.functional.softplus", "tf": "tensorflow.math.softplus"}.get(lib)
    if qual and (got := reachable(ctx.ref(), qual)):
        return f"{got}({x})", [], "review"
    if lib == "math" and simple(u.node) and ctx.scope.lookup("max", None) is None and ctx.scope.lookup("abs", None) is None:
        got = _sibling(ctx, ec, "log1p")
        e = ctx.text(ec.call.func)
        return (f"(max({x}, 0.0) + {got[0]}({e}(-abs({x}))))", got[1], "auto") if got else None
    return None


@rule(
    "softplus-manual",
    family="elementary",
    severity="error",
    summary="log(1 + exp(x)) written out: overflows to inf once x exceeds 88.72 in float32 (709.78 in float64)",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(", r"log1p\s*\("),
    overrides=("log1p-manual",),
)
def softplus_manual(ctx: Context):
    got = _unary(ctx.ref(), "log", "log1p")
    if got is None:
        return
    oc, arg = got
    parts = _one_plus(arg) if oc.op == "log" else (arg, False)
    inner = _unary(facts.strip(parts[0]), "exp") if parts and not parts[1] else None
    if inner is None:
        return
    ec, u = inner
    grads = _has_gradients(ec)
    if ranges.exp_cannot_overflow(ctx.ref(), ctx.stmt, u, lazy_only=grads):
        return
    note = _GRADIENT_NOTE if grads and ranges.exp_cannot_overflow(ctx.ref(), ctx.stmt, u, lazy_only=False) else ""
    form = "log(1 + exp(x))" if oc.op == "log" else "log1p(exp(x))"
    when = MATH_OVERFLOW if _library(ec) == "math" else f"{OVERFLOW}, where softplus(x) is about x"
    tail = ", and returns 0.0 below x = -37 in float64 (-17 in float32) where softplus(x) is exp(x)" if oc.op == "log" else ""
    msg = f"hand-written softplus {form}{lines_note(ctx, facts.strip(arg).node)}: exp(x) overflows once x exceeds {when}{tail}{note}"
    code = _softplus_code(ctx, ec, u) if _direct(arg, parts[0]) and _movable(ctx, u.node, u) else None
    fix = _fix(ctx, [ctx.edit(ctx.node, code[0])], code[1], code[2]) if code else None
    suggestion = None if fix else "np.logaddexp(0, x), F.softplus(x), jax.nn.softplus(x), tf.math.softplus(x)"
    yield Hit(ctx.node, msg, fix=fix, suggestion=suggestion)


# ---------------------------------------------------------------------------------------
# log-exp-roundtrip
# ---------------------------------------------------------------------------------------
@rule(
    "log-exp-roundtrip",
    family="elementary",
    severity="warning",
    summary="log(exp(x)) or exp(log(x)): a round trip that overflows or rounds; write x",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log\s*\(", r"exp\s*\("),
)
def log_exp_roundtrip(ctx: Context):
    got = _unary(ctx.ref(), "log", "exp")
    inner = _unary(facts.strip(got[1]), "exp" if got[0].op == "log" else "log") if got else None
    if inner is None:
        return
    x = inner[1]
    if ranges.constant(x) is not None:
        return  # log(exp(2.0)): a constant, evidently in range
    lines = lines_note(ctx, inner[0].call)
    if got[0].op == "log":
        msg = (
            f"log(exp(x)) is x{lines}, but exp overflows to inf once x exceeds {OVERFLOW}, and underflows to 0 "
            "(so the log is -inf) below about -104 in float32 (-745 in float64); write x"
        )
        kind = "review" if ranges.integral(x) else "auto"  # x would stay an integer
    else:
        msg = f"exp(log(x)) is x only for x > 0{lines}: nan for x < 0 (math.log raises), and the round trip rounds; write x (check the x <= 0 case)"
        kind = "review"
    fix = ctx.fix(kind, [ctx.edit(ctx.node, paren(ctx.text(x.node), x.node))]) if _direct(got[1]) and _movable(ctx, x.node, x) else None
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "x")
