"""Where probabilities come from: ``exp`` terms, hand-written softmax and sigmoid, the
framework functions, and across boundaries (helpers that return them, modules held on
``self``, activations handed to layers). Built on the questions ``facts`` answers."""
from __future__ import annotations

import ast
from dataclasses import dataclass

from .facts import AMBIGUOUS, Reduction, _const, binding_of, reduction, same, strip
from .bindings import Ref
from .names import OpCall, framework_of, normalise, op_of, qualname


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
    if isinstance(node, ast.Attribute):  # self.probs, set once in some method
        value = self_attribute(ref)
        return origin(value, depth + 1) if value is not None else None
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
        from .bindings import scope_for

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
    from .bindings import statements_with_paths

    return statements_with_paths(fn)


def returns_kind(callee: Ref, depth: int = 0) -> str | None:
    """The kind of value a called function returns: a helper defined in the file (a
    function, a method on ``self``, a lambda) or imported from a scanned module."""
    if depth > 6:
        return None
    from .summaries import function_summary, project_summary

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
