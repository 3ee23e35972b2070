"""Where probabilities come from: ``exp`` terms, hand-written softmax and sigmoid, the
framework functions, and across boundaries (helpers that return them, modules held on
``self``, activations handed to layers). Built on the questions ``facts`` answers."""
from __future__ import annotations

import ast
from dataclasses import dataclass

from dataclasses import replace

from .bindings import Ref
from .facts import AMBIGUOUS, Reduction, _const, binding_of, div_parts, reduction, same, strip, unguard
from .names import OpCall, framework_of, normalise, op_of, qualname
from .summaries import (
    function_returned,
    instance_returned,
    local_class,
    method_of,
    param_origin,
    project_returned,
)


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


def _two_terms(division: Ref, num: ExpTerm, num_ref: Ref, den_ref: Ref) -> "ManualSoftmax | None":
    den = strip(den_ref)
    node = den.node
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Add)) or num.masked:
        return None
    a, b = den.child(node.left), den.child(node.right)
    ta, tb = exp_term(a), exp_term(b)
    if ta is None or tb is None or ta.masked or tb.masked:
        return None
    if not any(same(num.arg, t.arg) for t in (ta, tb)) or same(ta.arg, tb.arg):
        return None
    return ManualSoftmax(division, num, Reduction("sum", den, None, True, None, den))


@dataclass(frozen=True)
class ManualSoftmax:
    division: Ref
    numerator: ExpTerm
    denominator: Reduction


def manual_softmax(ref: Ref) -> ManualSoftmax | None:
    """``e / sum(e)`` with ``e = exp(u)`` (shifted or not)."""
    ref = strip(ref)
    parts = div_parts(ref)
    return softmax_parts(ref, *parts) if parts is not None else None


def softmax_parts(division: Ref, num_ref: Ref, den_ref: Ref) -> ManualSoftmax | None:
    """The numerator is an exp term and the denominator sums the same exp values (an
    epsilon added to the sum or a floor under it changes nothing: still unshifted).
    Two terms written out, ``ea / (ea + eb)``, are a softmax over two entries: its
    denominator is a ``Reduction`` with no call."""
    num = exp_term(num_ref)
    if num is None:
        return None
    den_ref = unguard(den_ref)
    red = reduction(den_ref, "sum")
    if red is None:
        return _two_terms(division, num, num_ref, den_ref)
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
    how: str  # framework | hand-written | helper | module | layer | param
    line: int  # where the producing expression is
    logits: Ref | None = None
    axis: ast.expr | None = None
    call: OpCall | None = None
    where: str = ""  # the producing expression when it is in another function: "line 41 of model.py"
    via: tuple[str, ...] = ()  # how the value got here: "passed at train.py:88", ...

    @property
    def provenance(self) -> str:
        """`` (the softmax of line 41 of model.py, passed at train.py:88)`` or empty."""
        parts = ([f"the {self.kind} of {self.where}"] if self.where else []) + list(self.via)
        return f" ({', '.join(parts)})" if parts else ""


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


# Operations that move or select entries and keep what each entry is.
SHAPE_METHODS = frozenset({"view", "reshape", "squeeze", "unsqueeze", "transpose", "permute", "flatten", "ravel",
                           "gather", "index_select", "take_along_dim", "expand", "expand_as", "view_as", "reshape_as",
                           "swapaxes", "movedim", "narrow", "select"})
SHAPE_FUNCS = frozenset({"numpy.reshape", "numpy.squeeze", "numpy.transpose", "numpy.take_along_axis", "numpy.take",
                         "numpy.ravel", "numpy.expand_dims", "torch.gather", "torch.squeeze", "torch.unsqueeze",
                         "torch.flatten", "torch.transpose", "torch.take_along_dim", "torch.index_select",
                         "tensorflow.reshape", "tensorflow.squeeze", "tensorflow.gather", "tensorflow.gather_nd",
                         "tensorflow.transpose", "tensorflow.expand_dims", "tensorflow.batch_gather"})


def _shaped(o: Origin | None) -> Origin | None:
    """The same kind of value, moved or selected: no rewrite may reuse its logits."""
    return replace(o, logits=None, call=None) if o is not None else None


def _where(ref: Ref, path: str, line: int) -> str:
    here = ref.scope.module.cache["analysis"].path
    return f"line {line}" if path == here else f"line {line} of {path}"


def shape_operand(ref: Ref) -> Ref | None:
    node = ref.node
    if isinstance(node, ast.Attribute) and node.attr in ("T", "mT"):
        return ref.child(node.value)
    if isinstance(node, ast.Subscript):
        return ref.child(node.value)
    if not isinstance(node, ast.Call):
        return None
    f = node.func
    q = qualname(ref.child(f)) if isinstance(f, (ast.Name, ast.Attribute)) else None
    if q is not None and framework_of(q):
        return ref.child(node.args[0]) if normalise(q) in SHAPE_FUNCS and node.args else None
    if isinstance(f, ast.Attribute) and f.attr in SHAPE_METHODS and q is None:
        return ref.child(f.value)
    return None


def _returned_at(ret, ref: Ref, index: int | None, how: str, name: str) -> Origin | None:
    """An origin for the value a call returns, from a summary (kind, items, path, line)."""
    if ret is None:
        return None
    kind, items, path, line = ret
    if index is not None:
        kind = items[index] if items is not None and index < len(items) else None
    if kind is None:
        return None
    node = ref.node
    logits = ref.child(node.args[0]) if isinstance(node, ast.Call) and node.args and index is None else None
    return Origin(kind, how, node.lineno, logits, where=_where(ref, path, line), via=(f"returned by {name}()",))


def _unpacked(ref: Ref, b, depth: int) -> Origin | None:
    """``logits, probs = self._build_net()``: item ``i`` of what the call returns."""
    value, index = b.unpack
    return call_origin(Ref(value, b.owner, b.path), depth, index)


def _origin(ref: Ref, depth: int) -> Origin | None:
    node = ref.node
    line = getattr(node, "lineno", 0)
    if isinstance(node, ast.Name):
        b = binding_of(ref)
        if b is None or b is AMBIGUOUS:
            return None
        if b.kind == "param":
            return param_origin(ref, b, depth)
        if b.unpack is not None:
            return _unpacked(ref, b, depth)
        return None
    if isinstance(node, ast.Subscript) and isinstance(node.slice, ast.Constant) and isinstance(node.slice.value, int):
        o = call_origin(ref.child(node.value), depth, node.slice.value)
        if o is not None:
            return o
    inner = shape_operand(ref)
    if inner is not None:
        return _shaped(origin(inner, depth + 1))
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
        return call_origin(ref, depth, None)
    return None


def call_origin(ref: Ref, depth: int, index: int | None) -> Origin | None:
    """What a call gives (item ``index`` of it, for a returned tuple): a module or
    layer called on a value, a helper, a method of an instance of a scanned class."""
    node = strip(ref).node if index is not None else ref.node
    if not isinstance(node, ast.Call) or depth > 6:
        return None
    ref = ref.child(node) if index is None else strip(ref)
    line = node.lineno
    callee = ref.child(node.func)
    built = _built_layer_kind(ref) if index is None else None
    if built is not None:
        return Origin(built, "layer", line)
    inst = _instance_call(callee, depth) if index is None else None
    if inst is not None:
        return _returned_at(inst[0], ref, None, "instance", inst[1])
    if index is None:
        mk = module_kind(callee, depth + 1)
        if mk is not None:
            return Origin(mk, "module", line, ref.child(node.args[0]) if node.args else None)
    f = node.func
    if isinstance(f, ast.Attribute):
        # ``model.predict(x)`` of a Keras model whose last layer is an activation
        if index is None and f.attr in ("predict", "predict_on_batch", "__call__"):
            mk = module_kind(ref.child(f.value), depth + 1)
            if mk is not None:
                return Origin(mk, "layer", line)
        got = _instance_method(ref.child(f.value), f.attr, depth)
        if got is not None:
            return _returned_at(got[0], ref, index, "helper", got[1])
    ret = returned(callee, depth + 1)
    if ret is not None:
        name = f.id if isinstance(f, ast.Name) else f.attr if isinstance(f, ast.Attribute) else "helper"
        return _returned_at(ret, ref, index, "helper", name)
    return None


# Functional layer builders of TensorFlow 1 that apply their activation to the output:
# name -> position of the activation argument after the input.
_LAYER_BUILDERS = {"dense": 2, "fully_connected": 2}


def _built_layer_kind(ref: Ref) -> str | None:
    """``tf.layers.dense(h, n, tf.nn.softmax)`` / ``activation=`` /
    ``slim.fully_connected(h, n, activation_fn=tf.sigmoid)``: the activation's kind."""
    node = ref.node
    f = node.func
    if not isinstance(f, (ast.Name, ast.Attribute)):
        return None
    last = f.attr if isinstance(f, ast.Attribute) else f.id
    if last not in _LAYER_BUILDERS:
        return None
    q = qualname(ref.child(f))
    if q is None or framework_of(q) != "tf" or ".layers." not in q and ".slim." not in q:
        return None
    act = next((k.value for k in node.keywords if k.arg in ("activation", "activation_fn")), None)
    pos = _LAYER_BUILDERS[last]
    if act is None and len(node.args) > pos and not any(isinstance(a, ast.Starred) for a in node.args):
        act = node.args[pos]
    return _activation_kind(act, ref) if act is not None else None


def _instance_call(callee: Ref, depth: int):
    """``net(x)`` / ``self.pi(x)`` with ``net`` an instance of a class of the scanned
    tree: (summary of its forward, its name)."""
    if isinstance(callee.node, ast.Name) and binding_of(callee) in (None, AMBIGUOUS):
        return None
    base = strip(callee)
    if isinstance(base.node, ast.Attribute):
        v = self_attribute(base)
        base = strip(v) if v is not None else None
    if base is None or not isinstance(base.node, ast.Call) or not isinstance(base.node.func, ast.Name):
        return None
    return _instance_method(base, "__call__", depth, constructed=True)


def _instance_method(obj: Ref, attr: str, depth: int, constructed: bool = False):
    """``net.act(x)`` / ``self.net.act(x)`` / ``model.apply(params, x)`` with ``net`` an
    instance of a class of the scanned tree: (summary, name) of that method."""
    if isinstance(obj.node, ast.Name) and obj.node.id == "self":
        return None  # self.method(...) is a helper of this class (see ``returned``)
    base = obj if constructed else strip(obj)
    if isinstance(base.node, ast.Attribute):
        v = self_attribute(base)
        base = strip(v) if v is not None else base
    if not isinstance(base.node, ast.Call):
        return None
    cls_ref = base.child(base.node.func)
    calls_instance = attr in ("apply", "forward", "__call__", "predict")
    local = local_class(cls_ref)
    if local is not None:
        cls, owner = local
        if calls_instance:
            r = instance_returned(cls, owner, depth + 1)
        else:
            m = method_of(cls, attr)
            if m is None:
                return None
            from .bindings import scope_for

            r = function_returned((m, scope_for(cls, owner)), depth + 1)
        name = f"{cls.name}.forward" if calls_instance else f"{cls.name}.{attr}"
        return ((r.kind, r.items, r.path, r.line), name) if r is not None else None
    q = qualname(cls_ref) if isinstance(cls_ref.node, (ast.Name, ast.Attribute)) else None
    if q is None or framework_of(q):
        return None
    b = binding_of(cls_ref) if isinstance(cls_ref.node, ast.Name) else None
    b = b if b is not None and b is not AMBIGUOUS and b.kind == "import" else None
    member = "" if calls_instance else attr
    got = project_returned(cls_ref, b, q if b is None else None, "instance" if calls_instance else "function", member)
    cls_name = q.rsplit(".", 1)[-1]
    return (got, f"{cls_name}.{'forward' if calls_instance else attr}") if got is not None else None


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
    if fw is None:  # an instance of a class of the scanned tree: what its forward returns
        local = local_class(ref.child(node.func))
        if local is not None:
            r = instance_returned(local[0], local[1], depth + 1)
            return r.kind if r is not None else None
        b = binding_of(ref.child(node.func)) if isinstance(node.func, ast.Name) else None
        b = b if b is not None and b is not AMBIGUOUS and b.kind == "import" else None
        got = project_returned(ref.child(node.func), b, q if b is None else None, "instance")
        return got[0] if got is not None else None
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


def returned(callee: Ref, depth: int = 0) -> tuple | None:
    """(kind, items, path, line) of what a called function returns: a helper defined in
    the file (a function, a method on ``self``, a lambda) or imported from a scanned
    module."""
    if depth > 6:
        return None
    node = callee.node
    r = None
    if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) and node.value.id == "self":
        fn = _method_of_self(callee, node.attr)
        r = function_returned(fn, depth + 1) if fn is not None else None
    elif isinstance(node, ast.Name):
        b = binding_of(callee)
        if b is None or b is AMBIGUOUS:
            return None
        if b.kind == "def" or (b.kind == "assign" and isinstance(b.value, ast.Lambda)):
            r = function_returned((b.value, b.owner), depth + 1)
        elif b.kind == "import":
            return project_returned(callee, b)
        else:
            return None
    elif isinstance(node, ast.Attribute):
        q = qualname(callee)
        if q is not None and not framework_of(q):
            return project_returned(callee, None, q)
    return (r.kind, r.items, r.path, r.line) if r is not None else None


def returns_kind(callee: Ref, depth: int = 0) -> str | None:
    r = returned(callee, depth)
    return r[0] if r else None


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
