"""What a call really calls: import-aware resolution of names to framework functions.

``qualname`` turns ``np.exp`` into ``numpy.exp`` by following the file's imports
(``import numpy as np``, ``from jax import numpy as jnp``, ``from scipy.special import
softmax``, ``import torch.nn.functional as F``, ``exp = np.exp``). ``op_of`` maps such a
name, or a tensor method such as ``x.exp()``, to a framework-neutral operation name.
A user's own function called ``exp`` resolves to itself, never to NumPy's.
"""
from __future__ import annotations

import ast
from dataclasses import dataclass
from functools import lru_cache

from .bindings import AMBIGUOUS, Binding, Ref

# Framework of a fully qualified module prefix; longest prefix wins.
_FRAMEWORKS = {
    "numpy": "numpy",
    "cupy": "numpy",
    "autograd.numpy": "numpy",
    "jax.numpy": "jax",
    "jax.nn": "jax",
    "jax.scipy.special": "jax",
    "jax.lax": "jax",
    "jax": "jax",
    "torch": "torch",
    "tensorflow": "tf",
    "keras": "tf",
    "scipy.special": "scipy",
    "scipy.misc": "scipy",
    "scipy": "scipy",
    "math": "math",
    "statistics": "math",  # the standard library's statistics of lists: scalars, like math
    "builtins": "builtins",
}

# Spellings that mean the same module.
_ALIASES = (
    ("tensorflow.compat.v1.", "tensorflow."),
    ("tensorflow.compat.v2.", "tensorflow."),
    ("tensorflow.math.", "tensorflow."),
    ("tensorflow.keras.", "keras."),
    ("torch.special.", "torch."),
    ("torch.nn.functional.", "torch.F."),
    ("torch.linalg.", "torch."),
    ("scipy.misc.", "scipy.special."),
    ("numpy.linalg.", "numpy."),
    ("cupy.", "numpy."),
    ("autograd.numpy.", "numpy."),
    ("jax.numpy.", "numpy."),
    ("jax.scipy.special.", "scipy.special."),
    ("jax.nn.", "nn."),
    ("keras.ops.", "numpy."),
    ("keras.activations.", "nn."),
    ("tensorflow.nn.", "nn."),
    ("tensorflow.linalg.", "tensorflow."),
    ("tensorflow.experimental.numpy.", "numpy."),
)

# Operation name -> normalised qualified names (after _ALIASES) that perform it.
_OPS: dict[str, tuple[str, ...]] = {
    "exp": ("numpy.exp", "math.exp", "torch.exp", "tensorflow.exp", "jax.lax.exp"),
    "log": ("numpy.log", "math.log", "torch.log", "tensorflow.log"),
    "log1p": ("numpy.log1p", "math.log1p", "torch.log1p", "tensorflow.log1p"),
    "expm1": ("numpy.expm1", "math.expm1", "torch.expm1", "tensorflow.expm1"),
    "sum": ("numpy.sum", "numpy.nansum", "torch.sum", "torch.nansum", "tensorflow.reduce_sum", "builtins.sum", "math.fsum"),
    "mean": ("numpy.mean", "numpy.average", "numpy.nanmean", "torch.mean", "tensorflow.reduce_mean", "statistics.mean", "statistics.fmean"),
    "max": ("numpy.max", "numpy.amax", "numpy.nanmax", "torch.max", "torch.amax", "tensorflow.reduce_max", "builtins.max"),
    "min": ("numpy.min", "numpy.amin", "numpy.nanmin", "torch.min", "torch.amin", "tensorflow.reduce_min", "builtins.min"),
    "prod": ("numpy.prod", "torch.prod", "tensorflow.reduce_prod", "math.prod"),
    "abs": ("numpy.abs", "numpy.absolute", "numpy.fabs", "torch.abs", "tensorflow.abs", "builtins.abs", "math.fabs"),
    "square": ("numpy.square", "torch.square", "tensorflow.square", "jax.lax.square"),
    "sqrt": ("numpy.sqrt", "math.sqrt", "torch.sqrt", "tensorflow.sqrt"),
    "softmax": ("scipy.special.softmax", "torch.softmax", "torch.F.softmax", "nn.softmax", "numpy.softmax"),
    "log_softmax": ("scipy.special.log_softmax", "torch.log_softmax", "torch.F.log_softmax", "nn.log_softmax", "numpy.log_softmax"),
    "softmin": ("torch.F.softmin",),
    "logsumexp": ("scipy.special.logsumexp", "torch.logsumexp", "nn.logsumexp", "tensorflow.reduce_logsumexp", "numpy.logsumexp"),
    "sigmoid": ("scipy.special.expit", "torch.sigmoid", "torch.expit", "torch.F.sigmoid", "nn.sigmoid", "tensorflow.sigmoid", "numpy.sigmoid"),
    "log_sigmoid": ("scipy.special.log_expit", "torch.F.logsigmoid", "nn.log_sigmoid", "tensorflow.log_sigmoid", "numpy.log_sigmoid"),
    "softplus": ("torch.F.softplus", "nn.softplus", "tensorflow.softplus", "numpy.softplus"),
    "relu": ("torch.relu", "torch.F.relu", "nn.relu", "numpy.relu"),
    "logaddexp": ("numpy.logaddexp", "torch.logaddexp", "numpy.logaddexp"),
    "divide": ("numpy.divide", "numpy.true_divide", "torch.div", "torch.divide", "torch.true_divide",
               "tensorflow.divide", "tensorflow.truediv", "tensorflow.realdiv", "tensorflow.div"),
    "clip": ("numpy.clip", "torch.clamp", "torch.clip", "tensorflow.clip_by_value"),
    "minimum": ("numpy.minimum", "numpy.fmin", "torch.minimum", "torch.fmin", "tensorflow.minimum"),
    "maximum": ("numpy.maximum", "numpy.fmax", "torch.maximum", "torch.fmax", "tensorflow.maximum"),
    "where": ("numpy.where", "torch.where", "tensorflow.where"),
    "diag": ("numpy.diag", "numpy.diagflat", "torch.diag", "torch.diagflat", "torch.diag_embed", "tensorflow.diag", "tensorflow.tensor_diag"),
    "outer": ("numpy.outer", "torch.outer", "torch.ger"),
    "einsum": ("numpy.einsum", "torch.einsum", "tensorflow.einsum"),
    "eye": ("numpy.eye", "numpy.identity", "torch.eye", "tensorflow.eye"),
    "matmul": ("numpy.dot", "numpy.matmul", "torch.matmul", "torch.mm", "torch.mv", "torch.bmm", "torch.dot", "tensorflow.matmul", "tensorflow.matvec"),
    "nll_loss": ("torch.F.nll_loss",),
    "jacobian": ("torch.autograd.functional.jacobian", "torch.func.jacrev", "torch.func.jacfwd", "functorch.jacrev", "functorch.jacfwd", "jax.jacobian", "jax.jacfwd", "jax.jacrev"),
    "stop_gradient": ("jax.lax.stop_gradient", "tensorflow.stop_gradient"),
    "asarray": ("numpy.asarray", "numpy.array", "torch.as_tensor", "torch.tensor", "tensorflow.convert_to_tensor", "tensorflow.constant"),
    "expand_dims": ("numpy.expand_dims", "torch.unsqueeze", "tensorflow.expand_dims"),
    "norm": ("numpy.norm", "torch.norm", "torch.vector_norm", "tensorflow.norm"),
    "var": ("numpy.var", "numpy.nanvar", "torch.var", "tensorflow.reduce_variance", "statistics.pvariance", "statistics.variance"),
    "neg": ("numpy.negative", "torch.neg", "torch.negative", "tensorflow.negative"),
    # uniform draws in [0, 1)
    "rand": ("numpy.random.rand", "numpy.random.random", "numpy.random.random_sample", "torch.rand", "torch.rand_like"),
    "xlogy": ("scipy.special.xlogy", "torch.xlogy", "scipy.special.entr", "scipy.special.rel_entr"),
    "hypot": ("numpy.hypot", "math.hypot", "torch.hypot"),
    # statistics family: entropy in bits / digits, squares written as powers, nan cleanup
    "log2": ("numpy.log2", "math.log2", "torch.log2"),
    "log10": ("numpy.log10", "math.log10", "torch.log10"),
    "power": ("numpy.power", "numpy.float_power", "torch.pow", "torch.float_power", "tensorflow.pow", "math.pow", "builtins.pow"),
    "nan_to_num": ("numpy.nan_to_num", "torch.nan_to_num"),
}
OP_BY_NAME: dict[str, str] = {q: op for op, names in _OPS.items() for q in names}

# Tensor / ndarray methods that mean an operation. Zero-argument-only ones are marked so
# that ``logger.log(level, msg)`` never reads as a logarithm.
METHODS = {
    "exp": "exp", "log": "log", "log1p": "log1p", "expm1": "expm1", "sum": "sum", "nansum": "sum",
    "mean": "mean", "max": "max", "amax": "max", "min": "min", "amin": "min", "prod": "prod",
    "abs": "abs", "square": "square", "sqrt": "sqrt", "softmax": "softmax", "log_softmax": "log_softmax",
    "logsumexp": "logsumexp", "sigmoid": "sigmoid", "clamp": "clip", "clip": "clip", "clamp_min": "clip",
    "clamp_max": "clip", "logaddexp": "logaddexp", "relu": "relu", "unsqueeze": "expand_dims",
    "detach": "identity", "float": "identity", "double": "identity", "half": "identity",
    "astype": "identity", "type": "identity", "to": "identity", "contiguous": "identity",
    "clone": "identity", "cpu": "identity", "cuda": "identity", "numpy": "identity", "copy": "identity",
    "neg": "neg", "negative": "neg", "random": "rand", "rand": "rand", "random_sample": "rand", "matmul": "matmul", "dot": "matmul", "mm": "matmul", "mv": "matmul", "norm": "norm", "var": "var",
    "log2": "log2", "log10": "log10", "pow": "power", "nan_to_num": "nan_to_num",
    "div": "divide", "divide": "divide", "true_divide": "divide",
}
NO_ARG_METHODS = {"neg", "negative", "exp", "log", "log2", "log10", "log1p", "expm1", "sigmoid", "abs", "square", "sqrt", "relu",
                  "detach", "float", "double", "half", "contiguous", "clone", "cpu", "numpy"}


@lru_cache(maxsize=4096)
def normalise(qual: str) -> str:
    for old, new in _ALIASES:
        if qual.startswith(old):
            return new + qual[len(old):]
    return qual


@lru_cache(maxsize=4096)
def framework_of(qual: str) -> str | None:
    best = None
    for prefix, fw in _FRAMEWORKS.items():
        if qual == prefix or qual.startswith(prefix + "."):
            if best is None or len(prefix) > len(best[0]):
                best = (prefix, fw)
    return best[1] if best else None


def _import_target(b: Binding) -> str | None:
    alias = b.value
    stmt = b.stmt
    if isinstance(stmt, ast.Import):
        # ``import a.b.c`` binds ``a``; ``import a.b.c as x`` binds x to a.b.c
        return alias.name if alias.asname else alias.name.split(".")[0]
    if isinstance(stmt, ast.ImportFrom):
        mod = stmt.module or ""
        if stmt.level:
            return "." * stmt.level + mod + "." + alias.name if mod else "." * stmt.level + alias.name
        return f"{mod}.{alias.name}" if mod else alias.name
    return None


def qualname(ref: Ref, depth: int = 0) -> str | None:
    """Dotted name of a Name/Attribute chain, following imports and simple aliases.

    Returns ``"<local>.NAME"`` for a function or class defined in the file, and
    ``"builtins.NAME"`` for an unbound name. None when it cannot be told.
    """
    node = ref.node
    if depth > 8:
        return None
    if isinstance(node, ast.Attribute):
        base = qualname(ref.child(node.value), depth + 1)
        return f"{base}.{node.attr}" if base else None
    if not isinstance(node, ast.Name):
        return None
    b = ref.scope.lookup(node.id, ref.pos, ref.path)
    if b is None:
        return f"builtins.{node.id}"
    if b is AMBIGUOUS:
        return _one_module(ref, node.id, depth)
    if b.kind == "import":
        return _import_target(b)
    if b.kind in ("def", "class"):
        return f"<local>.{node.id}"
    if b.kind == "assign" and isinstance(b.value, (ast.Name, ast.Attribute)):
        return qualname(Ref(b.value, ref.scope, b.path), depth + 1)
    if b.kind == "assign" and isinstance(b.value, ast.IfExp):  # xp = cupy if gpu else numpy
        return _same_module([Ref(b.value.body, ref.scope, b.path), Ref(b.value.orelse, ref.scope, b.path)], depth)
    return None


def _same_module(refs: list[Ref], depth: int) -> str | None:
    """One array module under the aliases (``cupy`` and ``numpy`` are one API): the name
    that spells it without an alias, else the first in order."""
    quals = []
    for r in refs:
        q = qualname(r, depth + 1) if isinstance(r.node, (ast.Name, ast.Attribute)) else None
        if q is None or framework_of(q) is None:
            return None
        quals.append(q)
    if len({normalise(q + ".") for q in quals}) != 1:
        return None
    plain = [q for q in quals if normalise(q + ".") == q + "."]
    return plain[0] if plain else quals[0]


def _one_module(ref: Ref, name: str, depth: int) -> str | None:
    """A name bound in several branches to interchangeable array modules resolves to
    them all: ``try: import cupy as np`` / ``except ImportError: import numpy as np``."""
    scope = ref.scope
    while scope is not None and name not in scope.bindings():
        scope = scope.parent
    found = scope.bindings().get(name, []) if scope is not None else []
    refs = []
    for b in found:
        if b.kind == "import":
            q = _import_target(b)
            if q is None or framework_of(q) is None:
                return None
            refs.append(q)
        elif b.kind == "assign" and isinstance(b.value, (ast.Name, ast.Attribute, ast.IfExp)):
            parts = [b.value.body, b.value.orelse] if isinstance(b.value, ast.IfExp) else [b.value]
            for part in parts:
                q = qualname(Ref(part, scope, b.path), depth + 1) if isinstance(part, (ast.Name, ast.Attribute)) else None
                if q is None or framework_of(q) is None:
                    return None
                refs.append(q)
        else:
            return None
    if not refs or len({normalise(q + ".") for q in refs}) != 1:
        return None
    plain = [q for q in refs if normalise(q + ".") == q + "."]
    return plain[0] if plain else refs[0]


@dataclass(frozen=True)
class OpCall:
    op: str
    framework: str  # numpy | jax | torch | tf | scipy | math | builtins | method
    call: ast.Call
    qual: str | None  # resolved function name (None for methods)
    receiver: ast.expr | None  # for methods

    @property
    def is_method(self) -> bool:
        return self.receiver is not None

    @property
    def subject(self) -> ast.expr | None:
        """The array operated on: the receiver of a method, else the first argument."""
        if self.receiver is not None:
            return self.receiver
        if self.call.args and not isinstance(self.call.args[0], ast.Starred):
            return self.call.args[0]
        for kw in self.call.keywords:
            if kw.arg in ("input", "x", "a", "tensor", "logits", "input_tensor"):
                return kw.value
        return None

    def arg(self, pos: int, *names: str) -> ast.expr | None:
        """Argument by position (counted after the subject for functions) or keyword."""
        for kw in self.call.keywords:
            if kw.arg in names:
                return kw.value
        args = self.call.args if self.receiver is not None else self.call.args[1:]
        if pos < len(args) and not any(isinstance(a, ast.Starred) for a in args[: pos + 1]):
            return args[pos]
        return None

    def keyword(self, *names: str) -> ast.expr | None:
        for kw in self.call.keywords:
            if kw.arg in names:
                return kw.value
        return None


def op_of(ref: Ref) -> OpCall | None:
    """The operation a Call node performs, or None."""
    node = ref.node
    if not isinstance(node, ast.Call):
        return None
    key = ("op_of", id(node))
    cache = ref.scope.cache
    if key in cache:
        return cache[key]
    result = _op_of(ref, node)
    cache[key] = result
    return result


# The last name of every function or method an operation can be spelled with: a call
# ``a.b.zeros(...)`` whose attribute is none of these cannot be an operation, and is
# answered without resolving ``a.b`` (most calls in numerical code).
_LAST_NAMES = frozenset({q.rsplit(".", 1)[-1] for q in OP_BY_NAME} | set(METHODS))


def _op_of(ref: Ref, node: ast.Call) -> OpCall | None:
    func = node.func
    if isinstance(func, ast.Attribute) and func.attr not in _LAST_NAMES:
        return None
    qual = qualname(ref.child(func)) if isinstance(func, (ast.Name, ast.Attribute)) else None
    if qual is not None and not qual.startswith("<local>"):
        norm = normalise(qual)
        op = OP_BY_NAME.get(norm)
        if op is not None:
            if op == "log" and norm == "math.log" and (len(node.args) > 1 or node.keywords):
                return None  # math.log(x, base) is not the natural log
            return OpCall(op, framework_of(qual) or "numpy", node, qual, None)
        if framework_of(qual) not in (None, "builtins") or qual.startswith("builtins."):
            return None  # a framework function we do not model, or an unknown builtin
    if isinstance(func, ast.Attribute) and func.attr in METHODS:
        # a method on a value that is not a module we know: ``x.exp()``
        if qual is not None and framework_of(qual) is not None:
            return None
        if func.attr in NO_ARG_METHODS and func.attr not in ("to", "type", "astype") and (node.args or node.keywords):
            return None
        return OpCall(METHODS[func.attr], "method", node, None, func.value)
    return None
