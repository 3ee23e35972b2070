"""Meaning behind the shapes: questions the rules ask about an expression.

Every function takes a ``Ref`` (a node and the scope it lives in) and follows names to
their assigned values through ``flow``. Answers are conservative in the direction of
silence: where a value cannot be told (a parameter, an ambiguous assignment), ``guarded``
says yes and the pattern helpers say no.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass

from .bindings import AMBIGUOUS, Ref, Scope
from .names import OpCall, framework_of, normalise, op_of, qualname

MAX_DEPTH = 12
# ln(largest finite float32), the smallest overflow threshold of exp among the float
# types in common use for training (IEEE 754 binary32; numpy.finfo(np.float32).max).
EXP_OVERFLOW_F32 = 88.72


class Unknown(ast.expr):
    """Stands for a value that cannot be told (more than one assignment reaches it)."""

    _fields = ()


# ---------------------------------------------------------------------------------------
# Following names
# ---------------------------------------------------------------------------------------
def _aug_node(scope: Scope, b) -> ast.BinOp:
    key = ("aug", id(b))
    node = scope.cache.get(key)
    if node is None:
        left = ast.Name(id=b.name, ctx=ast.Load())
        ast.copy_location(left, b.target)
        left.end_lineno, left.end_col_offset = b.target.end_lineno, b.target.end_col_offset
        node = ast.BinOp(left=left, op=b.op, right=b.value)
        ast.copy_location(node, b.stmt)
        node.end_lineno, node.end_col_offset = b.stmt.end_lineno, b.stmt.end_col_offset
        node._np_aug = b.stmt  # the augmented assignment this value stands for
        scope.cache[key] = node
    return node


def binding_of(ref: Ref):
    if isinstance(ref.node, ast.Name):
        return ref.scope.lookup(ref.node.id, ref.pos, ref.path)
    return None


def deref(ref: Ref) -> Ref:
    """Follow a name to the expression assigned to it (one or more steps)."""
    for _ in range(MAX_DEPTH):
        node = ref.node
        if not isinstance(node, ast.Name):
            return ref
        b = ref.scope.lookup(node.id, ref.pos, ref.path)
        if b is AMBIGUOUS:
            return Ref(Unknown(), ref.scope, ref.path)
        if b is None or b.value is None:
            return ref
        if b.kind == "assign":
            ref = Ref(b.value, ref.scope, b.path)
        elif b.kind == "aug":
            return Ref(_aug_node(ref.scope, b), ref.scope, b.path)
        else:
            return ref
    return ref


_IDENTITY_FUNCS = {"stop_gradient", "asarray"}


def strip(ref: Ref) -> Ref:
    """``deref`` plus transparent wrappers: casts, ``.detach()``, ``stop_gradient``."""
    for _ in range(MAX_DEPTH):
        ref = deref(ref)
        node = ref.node
        if isinstance(node, ast.Call):
            oc = op_of(ref)
            if oc is not None and (oc.op == "identity" or (oc.op in _IDENTITY_FUNCS and len(node.args) == 1)):
                ref = ref.child(oc.subject)
                continue
            if isinstance(node.func, ast.Name) and node.func.id == "float" and len(node.args) == 1:
                ref = ref.child(node.args[0])
                continue
            if isinstance(node.func, ast.Attribute) and node.func.attr == "item" and not node.args:
                ref = ref.child(node.func.value)
                continue
        return ref
    return ref


def div_parts(ref: Ref) -> tuple[Ref, Ref] | None:
    """(numerator, denominator) of ``a / b``, ``np.divide(a, b)``, ``torch.div(a, b)``,
    ``a.div(b)``, ``tf.divide(a, b)``."""
    node = ref.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div):
        return ref.child(node.left), ref.child(node.right)
    if isinstance(node, ast.Call) and not any(isinstance(a, ast.Starred) for a in node.args):
        oc = op_of(ref)
        if oc is None or oc.op != "divide" or any(k.arg in ("rounding_mode", "out", "where") for k in node.keywords):
            return None
        if oc.is_method and len(node.args) == 1:
            return ref.child(oc.receiver), ref.child(node.args[0])
        if not oc.is_method and len(node.args) == 2:
            return ref.child(node.args[0]), ref.child(node.args[1])
    return None


def unscaled(ref: Ref) -> tuple[Ref, float]:
    """``x`` and the factor of ``-x``, ``-1 * x``, ``0.5 * x``, ``x * c``, ``x / c``
    (numeric constants only)."""
    factor = 1.0
    for _ in range(6):
        n = ref.node
        if isinstance(n, ast.UnaryOp) and isinstance(n.op, ast.USub):
            ref, factor = ref.child(n.operand), -factor
            continue
        if isinstance(n, ast.BinOp) and isinstance(n.op, (ast.Mult, ast.Div)):
            c_right = _const(n.right)
            c_left = _const(n.left) if isinstance(n.op, ast.Mult) else None
            if c_left is not None and c_left != 0:
                ref, factor = ref.child(n.right), factor * c_left
                continue
            if c_right is not None and c_right != 0:
                ref, factor = ref.child(n.left), factor * (c_right if isinstance(n.op, ast.Mult) else 1 / c_right)
                continue
        break
    return ref, factor


def op(ref: Ref, *names: str) -> OpCall | None:
    oc = op_of(strip(ref))
    return oc if oc is not None and (not names or oc.op in names) else None


# ---------------------------------------------------------------------------------------
# Same value
# ---------------------------------------------------------------------------------------
def key(ref: Ref, depth: int = 0):
    """A hashable description of the value: equal keys mean the same expression of the
    same inputs (after following names)."""
    if depth > MAX_DEPTH:
        return object()
    ref = strip(ref)
    node = ref.node
    if isinstance(node, Unknown):
        return object()
    if isinstance(node, ast.Name):
        b = binding_of(ref)
        return ("name", node.id, id(b) if b is not None and b is not AMBIGUOUS else None)
    if isinstance(node, ast.Constant):
        return ("const", repr(node.value))
    if isinstance(node, ast.Call) and _draws(ref):
        return ("draw", id(node))  # each draw is a value of its own; names bound to it share it
    if isinstance(node, ast.Attribute):
        q = qualname(ref)
        if q is not None and framework_of(q):
            return ("qual", normalise(q))
    parts: list = [type(node).__name__]
    for fld, value in ast.iter_fields(node):
        if fld in ("ctx", "type_comment", "kind"):
            continue
        if isinstance(value, ast.AST):
            parts.append(key(ref.child(value), depth + 1) if isinstance(value, ast.expr) else type(value).__name__)
        elif isinstance(value, list):
            parts.append(tuple(key(ref.child(v), depth + 1) if isinstance(v, ast.expr) else (v.arg, key(ref.child(v.value), depth + 1)) if isinstance(v, ast.keyword) else repr(v) for v in value))
        else:
            parts.append(repr(value))
    return tuple(parts)


# Calls that return a new random value each time (JAX's keyed draws are pure: not here).
_DRAWS = ("numpy.random.", "torch.rand", "torch.normal", "torch.bernoulli", "torch.multinomial", "torch.poisson",
          "tensorflow.random.", "random.", "builtins.random")


def _draws(ref: Ref) -> bool:
    f = ref.node.func
    if isinstance(f, ast.Attribute) and f.attr in ("uniform_", "normal_", "random_", "bernoulli_", "exponential_"):
        return True
    q = qualname(ref.child(f)) if isinstance(f, (ast.Name, ast.Attribute)) else None
    if q is None:
        return False
    q = normalise(q)
    return q.startswith(_DRAWS) or ".random." in q and not q.startswith("jax.")


def same(a: Ref, b: Ref) -> bool:
    return key(a) == key(b)


# ---------------------------------------------------------------------------------------
# Reductions
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Reduction:
    op: str
    operand: Ref
    axis: ast.expr | None
    keepdims: bool  # keepdims=True, or re-expanded afterwards (s[:, None], reshape(-1, 1))
    call: OpCall | None  # None: terms added up one by one (``ea + eb``)
    ref: Ref  # the reduction call itself

    @property
    def axis_value(self):
        """The axis as a Python value when it is a literal (int or tuple), else None."""
        try:
            return ast.literal_eval(self.axis) if self.axis is not None else None
        except (ValueError, SyntaxError, TypeError):
            return None


def _is_newaxis(node: ast.expr) -> bool:
    if isinstance(node, ast.Constant) and node.value is None:
        return True
    return isinstance(node, ast.Attribute) and node.attr == "newaxis"


def _peel_broadcast(ref: Ref) -> tuple[Ref, bool]:
    """``s[:, None]``, ``s.reshape(-1, 1)``, ``s.unsqueeze(1)``, ``expand_dims(s, 1)``,
    ``m.values`` / ``m[0]`` of a torch max: the reduction inside, and whether it was
    re-expanded for broadcasting."""
    expanded = False
    for _ in range(4):
        ref = strip(ref)
        node = ref.node
        if isinstance(node, ast.Subscript):
            idx = node.slice
            elts = idx.elts if isinstance(idx, ast.Tuple) else [idx]
            if any(_is_newaxis(e) for e in elts):
                ref, expanded = ref.child(node.value), True
                continue
            if isinstance(idx, ast.Constant) and idx.value == 0:  # torch.max(x, dim)[0]
                ref = ref.child(node.value)
                continue
            return ref, expanded
        if isinstance(node, ast.Attribute) and node.attr == "values":
            ref = ref.child(node.value)
            continue
        if isinstance(node, ast.Call):
            f = node.func
            if isinstance(f, ast.Attribute) and f.attr in ("reshape", "view") and len(node.args) >= 2:
                last = node.args[-1]
                if isinstance(last, ast.Constant) and last.value == 1:
                    ref, expanded = ref.child(f.value), True
                    continue
            oc = op_of(ref)
            if oc is not None and oc.op == "expand_dims" and oc.subject is not None:
                ref, expanded = ref.child(oc.subject), True
                continue
        return ref, expanded
    return ref, expanded


def _true(node: ast.expr | None) -> bool:
    return isinstance(node, ast.Constant) and node.value is True


def reduction(ref: Ref, *ops: str) -> Reduction | None:
    inner, expanded = _peel_broadcast(ref)
    oc = op_of(inner)
    if oc is None or oc.op not in ops or oc.subject is None:
        return None
    if oc.framework == "builtins" and oc.op in ("sum", "max", "min") and len(oc.call.args) != 1:
        return None
    torchish = oc.framework == "torch" or oc.is_method
    axis = oc.arg(0, "axis", "dim", "reduction_indices", "axes")
    keep = oc.keyword("keepdims", "keepdim", "keep_dims")
    if keep is None and torchish:
        keep = oc.arg(1)
    return Reduction(oc.op, inner.child(oc.subject), axis, expanded or _true(keep), oc, inner)


def max_operand(ref: Ref) -> Ref | None:
    r = reduction(ref, "max")
    return r.operand if r is not None else None


# ---------------------------------------------------------------------------------------
# Signs and bounds
# ---------------------------------------------------------------------------------------
_NONNEG_OPS = {"abs", "square", "exp", "sqrt", "softmax", "sigmoid", "softplus", "relu", "norm", "rand"}
_NONPOS_OPS = {"log_softmax", "log_sigmoid"}


def _const(node: ast.expr):
    try:
        v = ast.literal_eval(node)
    except (ValueError, SyntaxError, TypeError, MemoryError, RecursionError):
        return None
    return v if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def _const_max(node: ast.expr):
    """Largest number in a literal number or (nested) list/tuple of numbers."""
    try:
        v = ast.literal_eval(node)
    except (ValueError, SyntaxError, TypeError, MemoryError, RecursionError):
        return None
    flat, stack = [], [v]
    while stack:
        x = stack.pop()
        if isinstance(x, (list, tuple)):
            stack.extend(x)
        elif isinstance(x, (int, float)) and not isinstance(x, bool):
            flat.append(x)
        else:
            return None
    return max(flat) if flat else None


def _even_power(node: ast.BinOp) -> bool:
    c = _const(node.right)
    return isinstance(node.op, ast.Pow) and c is not None and c == int(c) and int(c) % 2 == 0


def nonneg(ref: Ref, depth: int = 0) -> bool:
    if depth > MAX_DEPTH:
        return False
    ref = strip(ref)
    node = ref.node
    c = _const(node) if isinstance(node, (ast.Constant, ast.UnaryOp)) else None
    if c is not None:
        return c >= 0
    if isinstance(node, ast.BinOp):
        if _even_power(node):
            return True
        l, r = ref.child(node.left), ref.child(node.right)
        if isinstance(node.op, (ast.Add, ast.Mult, ast.Div)):
            if isinstance(node.op, ast.Mult) and same(l, r):
                return True
            return nonneg(l, depth + 1) and nonneg(r, depth + 1)
        if isinstance(node.op, ast.Sub):  # x - min(x)
            rr = reduction(r, "min")
            return rr is not None and same(rr.operand, l)
        return False
    oc = op_of(ref)
    if oc is not None:
        if oc.op in _NONNEG_OPS:
            return True
        if oc.op == "neg" and oc.subject is not None:
            return nonpos(ref.child(oc.subject), depth + 1)
        if oc.op in ("sum", "mean", "max") and oc.subject is not None:
            return nonneg(ref.child(oc.subject), depth + 1)
    return False


def _sign_test(ref: Ref, cond: ast.expr) -> tuple[Ref, bool] | None:
    """(x, True) for ``x > 0`` / ``x >= 0`` / ``0 < x``; (x, False) for ``x < 0`` / ``x <= 0``."""
    if not (isinstance(cond, ast.Compare) and len(cond.ops) == 1):
        return None
    left, op_, right = cond.left, cond.ops[0], cond.comparators[0]
    if _const(right) == 0:
        x, positive = left, isinstance(op_, (ast.Gt, ast.GtE))
    elif _const(left) == 0:
        x, positive = right, isinstance(op_, (ast.Lt, ast.LtE))
    else:
        return None
    if not isinstance(op_, (ast.Gt, ast.GtE, ast.Lt, ast.LtE)):
        return None
    return ref.child(x), positive


def _where_nonpos(ref: Ref, cond: ast.expr, a: ast.expr, b: ast.expr, depth: int) -> bool:
    """``where(x > 0, -x, x)`` (and the mirrored forms) is -|x|; otherwise both branches
    must be non-positive."""
    test = _sign_test(ref, cond)
    ra, rb = ref.child(a), ref.child(b)

    def branch(r: Ref, x_positive: bool) -> bool:
        if nonpos(r, depth + 1):
            return True
        if test is None:
            return False
        x, _ = test
        n = strip(r).node
        if x_positive:  # here x >= 0: -x is <= 0
            return isinstance(n, ast.UnaryOp) and isinstance(n.op, ast.USub) and same(r.child(n.operand), x)
        return same(r, x)  # here x <= 0

    if test is None:
        return nonpos(ra, depth + 1) and nonpos(rb, depth + 1)
    pos = test[1]
    return branch(ra, pos) and branch(rb, not pos)


def nonpos(ref: Ref, depth: int = 0) -> bool:
    if depth > MAX_DEPTH:
        return False
    ref = strip(ref)
    node = ref.node
    c = _const(node) if isinstance(node, (ast.Constant, ast.UnaryOp)) else None
    if c is not None:
        return c <= 0
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        return nonneg(ref.child(node.operand), depth + 1)
    if isinstance(node, ast.BinOp):
        l, r = ref.child(node.left), ref.child(node.right)
        if isinstance(node.op, ast.Add):
            return nonpos(l, depth + 1) and nonpos(r, depth + 1)
        if isinstance(node.op, ast.Sub):
            if nonpos(l, depth + 1) and nonneg(r, depth + 1):
                return True
            m = max_operand(r)
            if m is not None and same(m, l):  # x - max(x)
                return True
            lr = reduction(l, "min")  # min(x) - x
            if lr is not None and same(lr.operand, r):
                return True
            return _below_elementwise_max(l, r)
        if isinstance(node.op, (ast.Mult, ast.Div)):
            (sl, kl), (sr, kr) = _factor_sign(l, depth + 1), _factor_sign(r, depth + 1)
            return sl * sr < 0 and (kl or kr)
        return False
    oc = op_of(ref)
    if oc is not None:
        if oc.op in _NONPOS_OPS:
            return True
        if oc.op == "neg" and oc.subject is not None:
            return nonneg(ref.child(oc.subject), depth + 1)
        if oc.op == "where" and len(oc.call.args) == 3:
            return _where_nonpos(ref, *oc.call.args, depth=depth)
        if oc.op == "log":  # log of a probability
            from .origins import kind_of  # origins builds on this module

            return kind_of(ref.child(oc.subject)) in ("softmax", "sigmoid") if oc.subject is not None else False
    return False


def _pairwise(ref: Ref, op_name: str) -> list[Ref] | None:
    """The two arguments of ``maximum(a, b)`` / ``max(a, b)`` (or the minimum)."""
    oc = op_of(strip(ref))
    builtin = {"maximum": "max", "minimum": "min"}[op_name]
    if oc is None or len(oc.call.args) != 2 or not (oc.op == op_name or (oc.framework == "builtins" and oc.op == builtin)):
        return None
    return [ref.child(a) for a in oc.call.args]


def _below_elementwise_max(l: Ref, r: Ref) -> bool:
    """``a - maximum(a, b)`` and ``minimum(a, b) - maximum(a, b)`` are at most 0: the
    shift of a two-term log-add-exp."""
    top = _pairwise(r, "maximum")
    if top is None:
        return False
    low = _pairwise(l, "minimum")
    if low is not None:
        return {key(x) for x in low} == {key(x) for x in top}
    return any(same(l, x) for x in top)


def _factor_sign(ref: Ref, depth: int) -> tuple[int, bool]:
    """(sign, known) of a factor. A factor of unknown sign is assumed positive (a
    temperature, a scale, an inverse temperature): ``(x - x.max()) / T`` and
    ``-beta * (E - E.min())`` stay bounded. A product counts as signed only when at
    least one factor's sign is known, so ``-beta * E`` is not taken as bounded."""
    if nonneg(ref, depth):
        return 1, True
    if nonpos(ref, depth):
        return -1, True
    node = strip(ref).node
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        sign, known = _factor_sign(ref.child(node.operand), depth + 1)
        return -sign, known
    return 1, False


def bounded_above(ref: Ref, depth: int = 0) -> bool:
    """``exp`` of this value cannot overflow (it is at most a small constant)."""
    if depth > MAX_DEPTH:
        return True
    ref = strip(ref)
    node = ref.node
    if isinstance(node, Unknown):
        return True
    cm = _const_max(node) if isinstance(node, (ast.Constant, ast.UnaryOp, ast.List, ast.Tuple)) else None
    if cm is not None:
        return cm < EXP_OVERFLOW_F32
    if nonpos(ref, depth + 1):
        return True
    if isinstance(node, ast.BinOp):
        l, r = ref.child(node.left), ref.child(node.right)
        if isinstance(node.op, ast.Sub):
            if (oc := op(r, "logsumexp")) is not None and oc.subject is not None and same(ref.child(oc.subject), l):
                return True
            return bounded_above(l, depth + 1) and nonneg(r, depth + 1)
        if isinstance(node.op, ast.Add):
            return bounded_above(l, depth + 1) and bounded_above(r, depth + 1)
        if isinstance(node.op, (ast.Mult, ast.Div)):
            return nonpos(ref, depth + 1)
        return False
    if isinstance(node, ast.Call):
        oc = op_of(ref)
        if oc is None:
            return False
        if oc.op == "clip":
            hi = oc.keyword("max", "a_max", "clip_value_max", "max_value")
            if hi is None and oc.call.func and isinstance(oc.call.func, ast.Attribute) and oc.call.func.attr == "clamp_max":
                hi = oc.arg(0)
            if hi is None:
                hi = oc.arg(1)
            return hi is not None and not (isinstance(hi, ast.Constant) and hi.value is None)
        if oc.op == "minimum":
            return any(bounded_above(ref.child(a), depth + 1) for a in oc.call.args)
        if oc.op == "where" and len(oc.call.args) == 3:
            return bounded_above(ref.child(oc.call.args[1]), depth + 1) and bounded_above(ref.child(oc.call.args[2]), depth + 1)
        if oc.op in ("min",) and oc.subject is not None:
            return bounded_above(ref.child(oc.subject), depth + 1)
    return False


def shifted_by_unknown(ref: Ref) -> bool:
    """``x - c`` with ``c`` a value we cannot see (a parameter, a call we do not model):
    it may be the max, so a rule that needs "no shift" must stay quiet."""
    ref = strip(ref)
    node = ref.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Div, ast.Mult)):
        return shifted_by_unknown(ref.child(node.left))
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Sub)):
        return False  # adding an unseen value (log-weights, a bias) is not a shift
    r = strip(ref.child(node.right))
    if isinstance(r.node, ast.Constant) or _const(r.node) is not None:
        return False
    if reduction(r, "mean", "sum", "min") is not None:
        return False
    return True


def exp_is_safe(arg: Ref) -> bool:
    return bounded_above(arg) or shifted_by_unknown(arg)


# ---------------------------------------------------------------------------------------
# Epsilon guards on probabilities: log(p + eps), log(clip(p, eps, 1 - eps))
# ---------------------------------------------------------------------------------------
# A guard constant is small: epsilons in use run from about 1e-15 to 1e-6 (common
# practice); a larger added constant is smoothing or a shift, not a guard.
EPS_MAX = 1e-3
_EPS_WORDS = {"eps", "epsilon", "tiny", "eps_", "_eps"}


def is_epsilon(ref: Ref) -> bool:
    """A small positive guard value: ``1e-8``, a name bound to one, ``eps`` / ``self.eps``
    / ``EPSILON``, ``np.finfo(t).eps`` / ``.tiny``, Keras ``K.epsilon()``."""
    ref = strip(ref)
    node = ref.node
    c = _const(node)
    if c is not None:
        return 0 < c <= EPS_MAX
    if isinstance(node, ast.Call) and not node.args:
        node = node.func  # K.epsilon(), keras.config.epsilon()
    word = node.id if isinstance(node, ast.Name) else node.attr if isinstance(node, ast.Attribute) else ""
    parts = word.lower().strip("_").split("_")
    return bool(word) and any(p.rstrip("0123456789") in _EPS_WORDS for p in parts)


def _guard_inner(ref: Ref) -> Ref | None:
    node = ref.node
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Add):
        for a, b in ((node.left, node.right), (node.right, node.left)):
            if is_epsilon(ref.child(b)) and not is_epsilon(ref.child(a)):
                return ref.child(a)
        return None
    oc = op_of(ref)
    if oc is None or oc.subject is None:
        return None
    if oc.op == "clip" and not (isinstance(node.func, ast.Attribute) and node.func.attr == "clamp_max"):
        lo = oc.arg(0, "min", "a_min", "clip_value_min", "min_value")
        return ref.child(oc.subject) if lo is not None and is_epsilon(ref.child(lo)) else None
    if oc.op in ("maximum", "max") and len(node.args) == 2 and not node.keywords and not oc.is_method:
        a, b = node.args
        if is_epsilon(ref.child(b)):
            return ref.child(a)
        return ref.child(b) if is_epsilon(ref.child(a)) else None
    return None


def unguard(ref: Ref) -> Ref:
    """The value under epsilon guards (``p + eps``, ``clip(p, eps, hi)``,
    ``p.clamp(min=eps)``, ``maximum(p, eps)``), stripped; ``strip(ref)`` when unguarded."""
    for _ in range(4):
        ref = strip(ref)
        inner = _guard_inner(ref)
        if inner is None:
            return ref
        ref = inner
    return strip(ref)
