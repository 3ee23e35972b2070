"""Meaning behind the shapes: questions the rules ask about an expression.

Every function takes a ``Ref`` (a node and the scope it lives in) and follows names to
their assigned values through ``flow``. Answers are conservative in the direction of
silence: where a value cannot be told (a parameter, an ambiguous assignment), ``guarded``
says yes and the pattern helpers say no.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass

from .flow import AMBIGUOUS, Ref, Scope
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
    call: OpCall
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
        if oc.op in ("sum", "mean", "max") and oc.subject is not None:
            return nonneg(ref.child(oc.subject), depth + 1)
    return False


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
            return lr is not None and same(lr.operand, r)
        if isinstance(node.op, (ast.Mult, ast.Div)):
            (sl, kl), (sr, kr) = _factor_sign(l, depth + 1), _factor_sign(r, depth + 1)
            return sl * sr < 0 and (kl or kr)
        return False
    oc = op_of(ref)
    if oc is not None:
        if oc.op in _NONPOS_OPS:
            return True
        if oc.op == "log":  # log of a probability
            return kind_of(ref.child(oc.subject)) in ("softmax", "sigmoid") if oc.subject is not None else False
    return False


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
# exp terms and hand-written softmax
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ExpTerm:
    arg: Ref  # the argument of exp
    exp: Ref  # the exp call
    masked: bool


def exp_term(ref: Ref, depth: int = 0) -> ExpTerm | None:
    """``exp(u)``, possibly masked (``exp(u) * mask``, ``where(m, exp(u), 0)``)."""
    if depth > 3:
        return None
    ref = strip(ref)
    node = ref.node
    oc = op_of(ref)
    if oc is not None:
        if oc.op == "exp" and oc.subject is not None:
            return ExpTerm(ref.child(oc.subject), ref, False)
        if oc.op == "where" and len(oc.call.args) == 3:
            t = exp_term(ref.child(oc.call.args[1]), depth + 1)
            return ExpTerm(t.arg, t.exp, True) if t else None
        return None
    if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr in ("masked_fill", "mul", "multiply"):
        t = exp_term(ref.child(node.func.value), depth + 1)
        return ExpTerm(t.arg, t.exp, True) if t else None
    if isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mult):
        for a, b in ((node.left, node.right), (node.right, node.left)):
            t = exp_term(ref.child(a), depth + 1)
            if t is not None and exp_term(ref.child(b), depth + 1) is None:
                return ExpTerm(t.arg, t.exp, True)
    return None


@dataclass(frozen=True)
class ManualSoftmax:
    division: Ref
    numerator: ExpTerm
    denominator: Reduction


def manual_softmax(ref: Ref) -> ManualSoftmax | None:
    """``e / sum(e)`` with ``e = exp(u)`` (shifted or not)."""
    ref = strip(ref)
    node = ref.node
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div)):
        return None
    return softmax_parts(ref, ref.child(node.left), ref.child(node.right))


def softmax_parts(division: Ref, num_ref: Ref, den_ref: Ref) -> ManualSoftmax | None:
    """The numerator is an exp term and the denominator sums the same exp values."""
    num = exp_term(num_ref)
    if num is None:
        return None
    red = reduction(den_ref, "sum")
    if red is None:
        return None
    if not (same(red.operand, num_ref) or same(red.operand, num.exp)):
        den = exp_term(red.operand)
        if den is None or not same(den.arg, num.arg):
            return None
    return ManualSoftmax(division, num, red)


# ---------------------------------------------------------------------------------------
# What kind of value: softmax / sigmoid / log_softmax outputs, across helpers and modules
# ---------------------------------------------------------------------------------------
_OP_KIND = {"softmax": "softmax", "sigmoid": "sigmoid", "log_softmax": "log_softmax", "log_sigmoid": "log_sigmoid"}
_MODULE_KIND = {"Softmax": "softmax", "Sigmoid": "sigmoid", "LogSoftmax": "log_softmax", "LogSigmoid": "log_sigmoid", "Softmin": None}
_ACTIVATION_KIND = {"softmax": "softmax", "sigmoid": "sigmoid", "log_softmax": "log_softmax"}


@dataclass(frozen=True)
class Origin:
    kind: str  # softmax | sigmoid | log_softmax | log_sigmoid
    how: str  # framework | hand-written | helper | module | layer
    line: int  # where the producing expression is
    logits: Ref | None = None
    axis: ast.expr | None = None
    call: OpCall | None = None


def kind_of(ref: Ref) -> str | None:
    o = origin(ref)
    return o.kind if o else None


def origin(ref: Ref, depth: int = 0) -> Origin | None:
    """Where a probability-like value comes from, if it is the output of a softmax or a
    sigmoid (framework call, hand-written, a helper function, a module or a layer)."""
    if depth > 6:
        return None
    ref = strip(ref)
    node = ref.node
    cache = ref.scope.cache
    ck = ("origin", id(node))
    if ck in cache:
        return cache[ck]
    cache[ck] = None  # recursion guard
    result = _origin(ref, depth)
    cache[ck] = result
    return result


def _origin(ref: Ref, depth: int) -> Origin | None:
    node = ref.node
    line = getattr(node, "lineno", 0)
    oc = op_of(ref)
    if oc is not None:
        kind = _OP_KIND.get(oc.op)
        if kind is None:
            return None
        axis = oc.arg(0, "dim", "axis") if oc.framework in ("torch", "method") else oc.arg(0, "axis", "dim")
        subj = ref.child(oc.subject) if oc.subject is not None else None
        return Origin(kind, "framework", line, subj, axis, oc)
    if isinstance(node, ast.BinOp):
        ms = manual_softmax(ref)
        if ms is not None:
            return Origin("softmax", "hand-written", line, ms.numerator.arg, ms.denominator.axis)
        if manual_sigmoid(ref) is not None:
            return Origin("sigmoid", "hand-written", line, manual_sigmoid(ref))
        return None
    if isinstance(node, ast.Call):
        callee = ref.child(node.func)
        mk = module_kind(callee, depth + 1)
        if mk is not None:
            return Origin(mk, "module", line, ref.child(node.args[0]) if node.args else None)
        # ``model.predict(x)`` of a Keras model whose last layer is an activation
        if isinstance(node.func, ast.Attribute) and node.func.attr in ("predict", "predict_on_batch", "__call__"):
            mk = module_kind(ref.child(node.func.value), depth + 1)
            if mk is not None:
                return Origin(mk, "layer", line)
        rk = returns_kind(callee, depth + 1)
        if rk is not None:
            return Origin(rk, "helper", line, ref.child(node.args[0]) if node.args else None)
    return None


def manual_sigmoid(ref: Ref) -> Ref | None:
    """``1 / (1 + exp(-x))`` or ``exp(x) / (1 + exp(x))``: returns x."""
    ref = strip(ref)
    node = ref.node
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Div)):
        return None
    den = strip(ref.child(node.right))
    dn = den.node
    if not (isinstance(dn, ast.BinOp) and isinstance(dn.op, ast.Add)):
        return None
    for one, e in ((dn.left, dn.right), (dn.right, dn.left)):
        if _const(one) == 1:
            t = exp_term(den.child(e))
            if t is None or t.masked:
                continue
            if _const(node.left) == 1:
                x = negated(strip(t.arg).node)
                return t.arg.child(x) if x is not None else None
            num = exp_term(ref.child(node.left))
            if num is not None and same(num.arg, t.arg):
                return num.arg
    return None


def negated(node: ast.expr) -> ast.expr | None:
    """x for ``-x``; also ``X @ w`` for ``-X @ w`` (Python reads ``(-X) @ w``, which is
    ``-(X @ w)`` exactly), likewise with ``*`` and ``/``. The latter is a new node that
    spans ``X @ w`` in the source, so its text is the logits as written."""
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        return node.operand
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Mult, ast.MatMult, ast.Div))):
        return None
    left = node.left
    if isinstance(left, ast.UnaryOp):
        inner = negated(left)
        # only ``-X`` written tight: in ``-(a + b) * c`` a parenthesis would split the span
        tight = inner is not None and (inner.lineno, inner.col_offset) == (left.lineno, left.col_offset + 1)
        if not (tight and isinstance(inner, (ast.Name, ast.Attribute, ast.Subscript, ast.Call))):
            return None
    else:
        inner = negated(left)
        if inner is None:
            return None
    new = ast.BinOp(left=inner, op=node.op, right=node.right)
    new.lineno, new.col_offset = inner.lineno, inner.col_offset
    new.end_lineno, new.end_col_offset = node.end_lineno, node.end_col_offset
    return new


def _activation_kind(node: ast.expr, ref: Ref) -> str | None:
    if isinstance(node, ast.Constant) and isinstance(node.value, str):
        return _ACTIVATION_KIND.get(node.value)
    q = qualname(ref.child(node)) if isinstance(node, (ast.Name, ast.Attribute)) else None
    if q is not None:
        oc_kind = {"softmax": "softmax", "sigmoid": "sigmoid", "log_softmax": "log_softmax"}
        from .names import OP_BY_NAME

        return oc_kind.get(OP_BY_NAME.get(normalise(q), ""))
    return None


def module_kind(ref: Ref, depth: int = 0) -> str | None:
    """If ``ref`` is a callable layer/module whose output is a softmax or sigmoid:
    ``nn.Softmax(dim=1)``, ``nn.Sequential(..., nn.Sigmoid())``, ``Dense(10,
    activation="softmax")``, ``layers.Activation("softmax")``, ``self.act`` set in
    ``__init__``, a Keras ``Sequential([...])`` model."""
    if depth > 6:
        return None
    ref = strip(ref)
    node = ref.node
    if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name):
        val = self_attribute(ref)
        if val is not None:
            return module_kind(val, depth + 1)
        return None
    if not isinstance(node, ast.Call):
        return None
    q = qualname(ref.child(node.func)) if isinstance(node.func, (ast.Name, ast.Attribute)) else None
    if q is None:
        return None
    fw = framework_of(q)
    last = q.rsplit(".", 1)[-1]
    if fw not in ("torch", "tf"):
        return None
    if last in _MODULE_KIND:
        return _MODULE_KIND[last]
    if last == "Activation" and node.args:
        return _activation_kind(node.args[0], ref)
    for kw in node.keywords:
        if kw.arg == "activation":
            return _activation_kind(kw.value, ref)
    if last == "Sequential":
        items = node.args
        if len(items) == 1 and isinstance(items[0], (ast.List, ast.Tuple)):
            items = items[0].elts
        if items:
            return module_kind(ref.child(items[-1]), depth + 1)
    return None


def self_attribute(ref: Ref) -> Ref | None:
    """The value assigned to ``self.NAME`` in a method of the enclosing class, when there
    is exactly one such assignment."""
    node = ref.node
    if not (isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name)):
        return None
    fscope = ref.scope
    while fscope is not None and not fscope.is_function:
        fscope = fscope.parent
    if fscope is None or fscope.parent is None or not isinstance(fscope.parent.node, ast.ClassDef):
        return None
    args = fscope.node.args.posonlyargs + fscope.node.args.args
    if not args or args[0].arg != node.value.id:
        return None
    cls = fscope.parent
    table = cls.cache.get("self_attrs")
    if table is None:
        table = {}
        from .analyse import scope_for

        for item in cls.node.body:
            if isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef)):
                mscope = scope_for(item, cls)
                for stmt, path in _stmts(item):
                    if isinstance(stmt, (ast.Assign, ast.AnnAssign)) and stmt.value is not None:
                        targets = stmt.targets if isinstance(stmt, ast.Assign) else [stmt.target]
                        for t in targets:
                            if isinstance(t, ast.Attribute) and isinstance(t.value, ast.Name) and t.value.id in ("self", "cls"):
                                table.setdefault(t.attr, []).append(Ref(stmt.value, mscope, path))
        cls.cache["self_attrs"] = table
    found = table.get(node.attr, [])
    return found[0] if len(found) == 1 else None


def _stmts(fn: ast.AST):
    from .flow import statements_with_paths

    return statements_with_paths(fn)


def returns_kind(callee: Ref, depth: int = 0) -> str | None:
    """The kind of value a called function returns: a helper defined in the file (a
    function, a method on ``self``, a lambda) or imported from a scanned module."""
    if depth > 6:
        return None
    from .analyse import function_summary, project_summary

    node = callee.node
    if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "self":
        fn = _method_of_self(callee, node.attr)
        return function_summary(fn, depth + 1) if fn is not None else None
    if isinstance(node, ast.Name):
        b = binding_of(callee)
        if b is None or b is AMBIGUOUS:
            return None
        if b.kind == "def":
            return function_summary((b.value, b.owner), depth + 1)
        if b.kind == "assign" and isinstance(b.value, ast.Lambda):
            return function_summary((b.value, b.owner), depth + 1)
        if b.kind == "import":
            return project_summary(callee, b)
    if isinstance(node, (ast.Name, ast.Attribute)):
        q = qualname(callee)
        if q is not None and not framework_of(q):
            return project_summary(callee, None, q)
    return None


def _method_of_self(ref: Ref, name: str):
    fscope = ref.scope
    while fscope is not None and not fscope.is_function:
        fscope = fscope.parent
    if fscope is None or fscope.parent is None or not isinstance(fscope.parent.node, ast.ClassDef):
        return None
    for item in fscope.parent.node.body:
        if isinstance(item, (ast.FunctionDef, ast.AsyncFunctionDef)) and item.name == name:
            return (item, fscope.parent)
    return None


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
