"""Statistics family: a variance, an entropy, a likelihood and a norm written by the
textbook formula, which cancels, meets log(0), underflows or overflows in floating point.

The shapes (squares, means, sums of squares, calling a function the file may not import)
live in ``_stats_shapes``, the x * log(x) term and its guards in ``_stats_guards``; this
module holds the four rule declarations and their rewrites."""
from __future__ import annotations

import ast
import re

from ..values import facts, origins, ranges
from ..analyse import Context, Hit
from ..values.bindings import Ref
from ..values.names import OpCall, normalise
from ..registry import rule
from ..rewrite import func_prefix, module_alias, paren, simple
from ._shared import lines_note, log_softmax_text, names_stable
from ._stats_guards import (
    XLogX,
    expression_guard,
    filtered,
    needs_parens,
    positive,
    statement_guard,
    xlogx_parts,
)
from ._stats_shapes import (
    count_matches,
    evident_int,
    exact_integers,
    function_text,
    imported_frameworks,
    moments,
    nan_aware,
    plain_reduction,
    scaled,
    square_terms,
    sum_of_squares,
)

# numpy.finfo(np.float64).eps: each of mean(x**2) and mean(x)**2 is rounded to about this
# fraction of its size, so their difference keeps no digit once the spread falls below
# about sqrt(eps) = 1.5e-8 times the mean.
_EPS64 = "2.2e-16"
_LOGS = ("log", "log2", "log10")
_VAR_HINT = (
    "var(x) of the framework: numpy.var (ddof=0 by default), torch.var(x, correction=0), "
    "tf.math.reduce_variance, statistics.pvariance; or the two-pass mean((x - mean(x))**2)"
)


def _called(word: str, call: ast.Call) -> bool:
    """The called name contains ``word``: a cheap test before resolving what it calls
    (the prefilter already asked for ``word(`` in the file)."""
    f = call.func
    return word in (f.attr if isinstance(f, ast.Attribute) else f.id if isinstance(f, ast.Name) else "")


# ---------------------------------------------------------------------------------------
# variance-cancellation
# ---------------------------------------------------------------------------------------
@rule(
    "variance-cancellation",
    family="statistics",
    severity="warning",
    summary="mean(x**2) - mean(x)**2: catastrophic cancellation, can return a negative variance; use var(x)",
    fix="auto",
    nodes=(ast.BinOp, ast.AugAssign),
    triggers=(r"mean\s*\(", r"fmean\s*\(", r"nanmean\s*\(", r"reduce_mean\s*\(", r"average\s*\(",
              r"sum\s*\(", r"fsum\s*\(", r"nansum\s*\(", r"reduce_sum\s*\("),
)
def variance_cancellation(ctx: Context):
    node = ctx.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub):
        left, right = ctx.ref(node.left), ctx.ref(node.right)
    elif isinstance(node, ast.AugAssign) and isinstance(node.op, ast.Sub) and isinstance(node.target, ast.Name):
        left, right = ctx.ref(node.target), ctx.ref(node.value)
    else:
        return
    mo = moments(left, right)
    if mo is None:
        return
    msg = (
        f"E[x**2] - E[x]**2{lines_note(ctx, mo.second.ref.node, mo.first.ref.node)} cancels catastrophically: each term "
        f"is rounded to about {_EPS64} of mean(x)**2, so once the mean is large against the spread no correct digit "
        "is left and the result can be negative (data around 1e8 with a spread of 1 in float64); use var(x)"
    )
    fix = _variance_fix(ctx, mo)
    yield Hit(node, msg, fix=fix, suggestion=None if fix else _VAR_HINT)


def _variance_fix(ctx: Context, mo):
    data = mo.data
    if isinstance(ctx.node, ast.AugAssign):
        return None  # ``v -= m**2``: the fix engine rewrites expressions, not statements
    if not names_stable(ctx, data.node, data) or not all(plain_reduction(m.red) for m in (mo.first, mo.second)):
        return None
    exact = True
    for m in (mo.second, mo.first):
        if m.count is not None:
            match = count_matches(m.count, data, m.red)
            if match is False:
                return None
            exact = exact and match is True
    # Write var() in the style of a mean call where there is one, else of the sum.
    style = next((m for m in (mo.first, mo.second) if m.count is None), mo.first)
    got = _var_text(ctx, style.red, data)
    if got is None:
        return None
    kind, text, extra = got
    return ctx.fix(kind if exact else "review", [ctx.edit(ctx.node, text), *extra])


def _axis_words(torch: bool, axis: str | None, keep: bool) -> list[str]:
    out = [f"{'dim' if torch else 'axis'}={axis}"] if axis is not None else []
    return out + ([f"{'keepdim' if torch else 'keepdims'}=True"] if keep else [])


def _var_text(ctx: Context, red: facts.Reduction, data: Ref):
    """(fix kind, code, extra edits) of the population variance written like ``red``."""
    oc = red.call
    x = ctx.text(data.node)
    axis = ctx.text(red.axis) if red.axis is not None else None
    nan = nan_aware(oc)
    qual = normalise(oc.qual) if oc.qual else ""
    fw = _method_framework(ctx, red) if oc.is_method else oc.framework
    if fw == "torch" and not nan:  # torch.var defaults to the unbiased estimate (correction=1)
        words = _axis_words(True, axis, red.keepdims) + ["correction=0"]
        if oc.is_method:
            return "auto", f"{paren(x, data.node)}.var({', '.join(words)})", []
        torch = func_prefix(oc, ctx.text) or module_alias(ctx.ref(), "torch")
        return ("auto", f"{torch}.var({', '.join([x, *words])})", []) if torch else None
    if fw in ("numpy", "jax") and not qual.startswith("keras"):
        words = _axis_words(False, axis, red.keepdims)
        if oc.is_method:  # ddof=0 written out: a pandas object's var() defaults to ddof=1
            return None if nan else ("auto", f"{paren(x, data.node)}.var({', '.join([*words, 'ddof=0'])})", [])
        module = oc.qual.rsplit(".", 1)[0]
        got = function_text(ctx, module, "nanvar" if nan else "var")
        return (("review" if got[1] else "auto"), f"{got[0]}({', '.join([x, *words])})", got[1]) if got else None
    if fw == "tf":
        prefix = func_prefix(oc, ctx.text)
        if prefix is None:
            return None
        # review: reduce_mean of an integer tensor divides in integers; reduce_variance refuses them
        name = "var" if (oc.qual or "").startswith("keras") else "reduce_variance" if prefix.endswith("math") else "math.reduce_variance"
        return "review", f"{prefix}.{name}({', '.join([x, *_axis_words(False, axis, red.keepdims)])})", []
    if fw in ("math", "builtins") and axis is None:
        got = function_text(ctx, "statistics", "pvariance")
        if got is None:
            return None
        kind = "auto" if qual.startswith("statistics.") and not got[1] else "review"
        return kind, f"{got[0]}({x})", got[1]
    return None


def _method_framework(ctx: Context, red: facts.Reduction) -> str | None:
    """A ``x.mean()`` method call is PyTorch or NumPy-like: by its keywords, else by what
    the file imports; None when it cannot be told."""
    words = {k.arg for k in red.call.call.keywords}
    fws = imported_frameworks(ctx)
    torch, numpyish = "torch" in fws, bool(fws & {"numpy", "jax"})
    if words & {"dim", "keepdim"}:
        return "torch"
    if torch != numpyish:
        return "torch" if torch else "numpy"
    return None


# ---------------------------------------------------------------------------------------
# xlogx-nan
# ---------------------------------------------------------------------------------------
_AUTODIFF = ("torch", "jax", "tf", "method")


@rule(
    "xlogx-nan",
    family="statistics",
    severity="warning",
    summary="p * log(p) and p * log(p / q) (entropy, KL): nan at p = 0 where the limit is 0; use xlogy / entr / rel_entr",
    fix="auto",
    nodes=(ast.BinOp,),
    triggers=(r"log(?:2|10)?\s*\(",),
    overrides=("log-of-softmax",),
)
def xlogx_nan(ctx: Context):
    node = ctx.node
    if not isinstance(node.op, ast.Mult):
        return
    x = xlogx_parts(ctx, node)
    if x is None or positive(x.p) or filtered(x.p) or evident_int(x.p) or ranges.integral(x.p) or statement_guard(ctx, x.p):
        return
    if facts.op(x.p, *_LOGS) is not None:
        return  # log(n) * log(log(n)): an asymptotic formula of logs, not an entropy term
    guard = expression_guard(ctx, x)
    if guard is not None and (guard.how == "branch" or guard.framework not in _AUTODIFF):
        return  # a Python branch keeps both value and gradient; NumPy needs only the value
    what = "p * log(p / q)" if x.q is not None else "p * log(p)"
    where = lines_note(ctx, x.log.node)
    if x.oc.framework == "math":
        msg = f"{what}{where} raises ValueError (math domain error) at p = 0, where the limit of the term is 0"
    elif guard is not None:
        msg = (
            f"{what}{where} under a {guard.word} guard: the value is fixed but not the gradient, because the backward "
            "pass still evaluates the unguarded term, and 0 * log(0) feeds nan into every gradient"
        )
    else:
        msg = f"{what}{where} is nan at p = 0 (0 * log(0) = 0 * -inf), where the limit of the term is 0"
    fix, hint = _xlogx_fix(ctx, x, guard)
    yield Hit(node, msg, fix=fix, suggestion=None if fix else hint, covers=(x.log.node,))


def _xlogx_fix(ctx: Context, x: XLogX, guard):
    origin = origins.origin(x.p) if x.q is None and x.oc.op == "log" else None
    if origin is not None and origin.kind == "softmax":
        got = log_softmax_text(ctx, origin, facts.strip(x.p))
        if got is not None:  # log_softmax keeps value and gradient finite
            kind = "auto" if origin.how == "framework" and not got[1] else "review"
            return ctx.fix(kind, [ctx.edit(x.log.node, got[0]), *got[1]]), None
    hint = "xlogy(p, p) / rel_entr(p, q) (scipy.special, torch.xlogy, jax.scipy.special), or scipy.special.entr(p) = -p * log(p)"
    if x.oc.framework == "math" and simple(x.p.node) and guard is None:
        return ctx.fix("review", [ctx.edit(ctx.node, f"({ctx.text(ctx.node)} if {ctx.text(x.p.node)} != 0 else 0.0)")]), None
    if x.oc.op not in ("log", "log1p"):
        base = x.oc.op[3:]
        return None, f"xlogy(p, p) / log({base}) (scipy.special, torch.xlogy, jax.scipy.special), or -entr(p) / log({base})"
    if not simple(x.p.node) or (x.q is not None and not names_stable(ctx, x.q.node, x.q)):
        return None, hint
    if guard is not None:
        fix = _where_fix(ctx, x, guard) if guard.word == "where()" else None
        return fix, "take the log of where(p > 0, p, 1) inside the guard (a second where), or log_softmax of the logits"
    got = _xlogy_text(ctx, x)
    if got is None:
        return None, hint
    kind, text, extra, difference = got
    if x.negated:
        text = f"-({text})" if difference else f"-{text}"
    elif difference and needs_parens(ctx, ctx.node):
        text = f"({text})"
    return ctx.fix(kind, [ctx.edit(ctx.node, text), *extra]), None


def _xlogy_text(ctx: Context, x: XLogX):
    """(kind, code, extra edits, is it a difference) of xlogy(p, p) or its
    relative-entropy counterpart."""
    p = ctx.text(x.p.node)
    q = ctx.text(x.q.node) if x.q is not None else None
    oc = x.oc
    if x.one_plus is not None:
        return _xlog1py_text(ctx, x, p)
    if oc.framework in ("torch", "method", "tf"):
        if oc.framework == "tf":
            tf = module_alias(ctx.ref(), "tensorflow")
            call = f"{tf}.math.xlogy" if tf else None
        else:
            torch = module_alias(ctx.ref(), "torch")
            call = f"{torch}.xlogy" if torch else None
        if call is None:
            return None
        text = f"{call}({p}, {p})" if q is None else f"{call}({p}, {p}) - {call}({p}, {q})"
        return "auto", text, [], q is not None
    if oc.framework in ("numpy", "jax") and not (oc.qual or "").startswith("cupy"):
        module = "jax.scipy.special" if oc.framework == "jax" else "scipy.special"
        got = function_text(ctx, module, "xlogy" if q is None else "rel_entr")
        if got is None:
            return None
        args = f"{p}, {p}" if q is None else f"{p}, {q}"
        return ("review" if got[1] else "auto"), f"{got[0]}({args})", got[1], False
    return None


def _xlog1py_text(ctx: Context, x: XLogX, p: str):
    """``(1 - q) * log(1 - q)`` -> ``xlog1py(1 - q, -q)``: zero at q = 1 and, through
    log1p, accurate for small q (what log1p-manual asks of the log alone)."""
    y, minus = x.one_plus
    if not names_stable(ctx, y.node, y):
        return None
    u = f"-{paren(ctx.text(y.node), y.node)}" if minus else ctx.text(y.node)
    fw = x.oc.framework
    if fw in ("torch", "method", "tf"):
        alias = module_alias(ctx.ref(), "tensorflow" if fw == "tf" else "torch")
        call = f"{alias}.math.xlog1py" if fw == "tf" else f"{alias}.special.xlog1py"
        return ("auto", f"{call}({p}, {u})", [], False) if alias else None
    if fw in ("numpy", "jax") and not (x.oc.qual or "").startswith("cupy"):
        got = function_text(ctx, "jax.scipy.special" if fw == "jax" else "scipy.special", "xlog1py")
        return (("review" if got[1] else "auto"), f"{got[0]}({p}, {u})", got[1], False) if got else None
    return None


def _where_fix(ctx: Context, x: XLogX, guard):
    """Inside ``where(c, p * log(p), 0)``: take the log of ``where(c, p, 1)`` so that the
    branch where() discards has a finite gradient too (the "double where")."""
    call = guard.node
    if not any(n is x.log.node for n in ast.walk(call)):
        return None  # the log sits in another statement: rewriting it there changes other uses
    arg = x.oc.subject
    a = ctx.text(arg)
    one = "1"
    if guard.call.framework == "tf":
        tf = func_prefix(guard.call, ctx.text)
        if tf is None:
            return None
        one = f"{tf}.ones_like({a})"
    where, cond = ctx.text(call.func), ctx.text(call.args[0])
    inner = f"{where}({cond}, {a}, {one})" if guard.branch == 1 else f"{where}({cond}, {one}, {a})"
    return ctx.fix("review", [ctx.edit(arg, inner)])


# ---------------------------------------------------------------------------------------
# log-of-product
# ---------------------------------------------------------------------------------------
_REDUCE_WORDS = ("axis", "dim", "keepdims", "keepdim", "keep_dims", "reduction_indices")


@rule(
    "log-of-product",
    family="statistics",
    severity="warning",
    summary="log(prod(p)): the product underflows to 0 (or overflows) for long sequences; use sum(log(p))",
    fix="auto",
    nodes=(ast.Call,),
    triggers=(r"log(?:2|10)?\s*\(", r"prod\s*\(", r"reduce_prod\s*\("),
)
def log_of_product(ctx: Context):
    if not _called("log", ctx.node):
        return
    oc = facts.op_of(ctx.ref())
    if oc is None or oc.op not in _LOGS or oc.subject is None or (not oc.is_method and len(oc.call.args) != 1):
        return
    prod = facts.strip(ctx.ref(oc.subject))
    pc = facts.op_of(prod)
    if pc is None or pc.op != "prod" or pc.subject is None:
        return
    data = prod.child(pc.subject)
    if exact_integers(data, pc):
        return
    msg = (
        f"log of a product{lines_note(ctx, prod.node)}: the product underflows to 0 and the log to -inf once it falls "
        "below the smallest subnormal (4.9e-324 in float64, 1.4e-45 in float32; 1000 probabilities of 0.01 "
        "multiply to 1e-2000), or overflows to inf; sum the logs instead (here -4605.17)"
    )
    fix = _product_fix(ctx, oc, pc, prod, data)
    yield Hit(ctx.node, msg, fix=fix, suggestion=None if fix else "sum(log(p)) along the same axis")


def _product_fix(ctx: Context, oc: OpCall, pc: OpCall, prod: Ref, data: Ref):
    if any(k.arg not in _REDUCE_WORDS for k in pc.call.keywords) or not names_stable(ctx, pc.call, prod):
        return None
    s = ctx.text(data.node)
    log_f = None if oc.is_method else ctx.text(oc.call.func)
    logged = f"{log_f}({s})" if log_f else f"{paren(s, data.node)}.{oc.call.func.attr}()"
    rest = [ctx.text(a) for a in pc.call.args[0 if pc.is_method else 1 :]]
    rest += [f"{k.arg}={ctx.text(k.value)}" for k in pc.call.keywords]
    prefix = func_prefix(pc, ctx.text)
    if pc.is_method or pc.framework in ("numpy", "jax", "torch"):
        if oc.framework not in ("numpy", "jax", "torch", "method") or (log_f is None and not pc.is_method and oc.framework != pc.framework):
            return None
        text = f"{prefix}.sum({', '.join([logged, *rest])})" if prefix else f"{logged}.sum({', '.join(rest)})"
    elif pc.framework == "tf" and oc.framework == "tf" and prefix:
        text = f"{prefix}.reduce_sum({', '.join([logged, *rest])})"
    elif pc.framework == "math" and oc.framework == "math" and log_f and not rest:
        if ctx.scope.lookup("map", None) is not None:
            return None
        m = module_alias(ctx.ref(), "math")
        total = f"{m}.fsum" if m else "sum" if ctx.scope.lookup("sum", None) is None else None
        if total is None:
            return None
        text = f"{total}(map({log_f}, {s}))"
    else:
        return None
    # A log-determinant from a diagonal: entries may be negative, where log(prod) can be
    # finite and the sum of logs is nan.
    d = facts.op_of(facts.strip(data))
    return ctx.fix("review" if d is not None and d.op == "diag" else "auto", [ctx.edit(ctx.node, text)])


# ---------------------------------------------------------------------------------------
# norm-overflow
# ---------------------------------------------------------------------------------------
@rule(
    "norm-overflow",
    family="statistics",
    severity="note",
    summary="sqrt(sum(x**2)) / sqrt(a**2 + b**2): the squares overflow or underflow; use hypot or a scaled norm",
    fix="auto",
    nodes=(ast.Call, ast.BinOp),
    # ``x ** 0.5`` has no trigger of its own (a "0.5" trigger would wake half of numeric
    # code): it is seen where a sum or another trigger brings its statement in.
    triggers=(r"sqrt\s*\(",),
)
def norm_overflow(ctx: Context):
    node = ctx.node
    if isinstance(node, ast.Call):
        if not _called("sqrt", node):
            return
        oc = facts.op_of(ctx.ref())
        if oc is None or oc.op != "sqrt" or oc.subject is None or (not oc.is_method and len(node.args) != 1):
            return
        arg = ctx.ref(oc.subject)
    elif isinstance(node, ast.BinOp) and isinstance(node.op, ast.Pow) and facts._const(node.right) == 0.5:
        oc, arg = None, ctx.ref(node.left)
    else:
        return
    why = (
        "the squares overflow to inf once a magnitude exceeds 1.3e154 in float64 (1.8e19 in float32) and "
        "underflow to 0 below about 1e-162"
    )
    terms = square_terms(arg)
    if terms is not None:
        scalars = oc is not None and oc.framework in ("math", "builtins")
        if scalars and (all(evident_int(t) for t in terms) or all(_offset(t) for t in terms)):
            return  # Python ints, or offsets between points (pixels, grid cells): no 1e154 there
        if any(scaled(t) for t in terms):
            return
        fix = _hypot_fix(ctx, oc, terms)
        msg = f"sqrt of a sum of squares{lines_note(ctx, facts.strip(arg).node)}: {why}; hypot scales instead"
        yield Hit(node, msg, fix=fix, suggestion=None if fix else "hypot(a, b) (numpy.hypot, math.hypot, torch.hypot)")
        return
    vec = sum_of_squares(arg)
    if vec is None or scaled(vec.data):
        return
    msg = (
        f"sqrt of a sum of squares{lines_note(ctx, facts.strip(arg).node)}: {why}; numpy.linalg.norm computes the same "
        "sum and overflows just the same, where scipy.linalg.norm of a 1-D array (scaled BLAS nrm2) does not"
    )
    fix = _vector_fix(ctx, oc, vec)
    hint = (
        "scipy.linalg.norm(x) for a 1-D array; along an axis, numpy.hypot.reduce(x, axis=...) or scale by the "
        "largest magnitude first: m * sqrt(sum((x / m)**2))"
    )
    yield Hit(node, msg, fix=fix, suggestion=None if fix else hint)


_OFFSET_NAME = re.compile(r"^(d|delta_?|off(set)?_?)[xyzuvrc]\d?$|^[xyz]_?(diff|delta|off(set)?)$", re.I)


def _offset(ref: Ref) -> bool:
    """A difference of two coordinates (``x1 - x0``) or a name that says it is one (``dx``)."""
    if isinstance(ref.node, ast.Name) and _OFFSET_NAME.match(ref.node.id):
        return True
    n = facts.strip(ref).node
    return isinstance(n, ast.BinOp) and isinstance(n.op, ast.Sub)


def _hypot_fix(ctx: Context, oc: OpCall | None, terms: list[Ref]):
    if oc is None or not all(names_stable(ctx, t.node, t) for t in terms):
        return None
    texts = [ctx.text(t.node) for t in terms]
    if oc.framework == "math":
        got = function_text(ctx, "math", "hypot")
        if got is None:
            return None
        return ctx.fix("review" if got[1] else "auto", [ctx.edit(ctx.node, f"{got[0]}({', '.join(texts)})"), *got[1]])
    if oc.framework in ("numpy", "jax") and not oc.is_method:
        call = f"{func_prefix(oc, ctx.text) or module_alias(ctx.ref(), oc.qual.rsplit('.', 1)[0])}.hypot"
    elif oc.framework in ("torch", "method"):
        torch = module_alias(ctx.ref(), "torch")
        call = f"{torch}.hypot" if torch else None
    else:
        return None
    if call is None or call.startswith("None."):
        return None
    text = texts[0]
    for t in texts[1:]:
        text = f"{call}({text}, {t})"
    return ctx.fix("auto", [ctx.edit(ctx.node, text)])


def _vector_fix(ctx: Context, oc: OpCall | None, vec):
    """scipy.linalg.norm for a NumPy vector summed whole; math.hypot(*xs) for a list."""
    if oc is None or not names_stable(ctx, vec.data.node, vec.data):
        return None
    x = ctx.text(vec.data.node)
    red = vec.red
    if oc.framework == "math" and (red is None or red.call.framework in ("math", "builtins")):
        got = function_text(ctx, "math", "hypot")
        if got is None:
            return None
        return ctx.fix("review" if got[1] else "auto", [ctx.edit(ctx.node, f"{got[0]}(*{x})"), *got[1]])
    numpy_sum = red is not None and red.call.framework == "numpy" and red.axis is None and not red.keepdims and plain_reduction(red)
    numpy_dot = red is None and vec.call is not None and vec.call.framework == "numpy"
    if oc.framework == "numpy" and (numpy_sum or numpy_dot):
        got = function_text(ctx, "scipy.linalg", "norm", qualified=True)
        if got is not None:  # review: a new API, and only a 1-D array gets the scaled nrm2
            return ctx.fix("review", [ctx.edit(ctx.node, f"{got[0]}({x})"), *got[1]])
    return None
