"""What the elementary-family rules report, and what they must leave alone."""
import pytest

from conftest import findings, ids

ELEMENTARY = {"log1p-manual", "expm1-manual", "sigmoid-manual", "softplus-manual", "log-exp-roundtrip"}


def ours(src):
    return [r for r in ids(src) if r in ELEMENTARY]


def only(src, rule):
    """The findings of ``rule`` in ``src``, asserting no other elementary rule fired."""
    got = [f for f in findings(src) if f.rule in ELEMENTARY]
    assert {f.rule for f in got} <= {rule}, [f.rule for f in got]
    return [f for f in got if f.rule == rule]


# -- log1p-manual -----------------------------------------------------------------------
LOG1P = {
    "numpy_alias": """
        import numpy as np
        def growth(rate):
            return np.log(1 + rate)
    """,
    "one_added_on_the_right": """
        import numpy as np
        def growth(rate):
            return np.log(rate + 1.0)
    """,
    "one_minus": """
        import numpy as np
        def survival(p):
            return np.log(1 - p)
    """,
    "plain_import_numpy": """
        import numpy
        def growth(rate):
            return numpy.log(1.0 + rate)
    """,
    "from_import_log": """
        from numpy import log
        def growth(rate):
            return log(1 + rate)
    """,
    "cupy": """
        import cupy as cp
        def growth(rate):
            return cp.log(1 + rate)
    """,
    "math_scalar": """
        import math
        def growth(rate: float):
            return math.log(1 + rate)
    """,
    "torch_function": """
        import torch
        def growth(rate):
            return torch.log(1 + rate)
    """,
    "torch_method": """
        import torch
        def growth(rate):
            return (1 + rate).log()
    """,
    "jax_from_import": """
        from jax import numpy as jnp
        def growth(rate):
            return jnp.log(1 + rate)
    """,
    "tensorflow_math": """
        import tensorflow as tf
        def growth(rate):
            return tf.math.log(1 + rate)
    """,
    "tensorflow1_log": """
        import tensorflow as tf
        def keep(p):
            return tf.log(1 - p)
    """,
    "over_two_statements": """
        import numpy as np
        def growth(rate):
            factor = 1 + rate
            return np.log(factor)
    """,
    "tiny_named_constant": """
        import math
        TICK = 1e-12
        def drift():
            return math.log(1 + TICK)
    """,
    "float_arange": """
        import numpy as np
        def grid():
            return np.log(1 + np.arange(0, 1, 0.001))
    """,
}


@pytest.mark.parametrize("src", LOG1P.values(), ids=LOG1P.keys())
def test_flags_log_of_one_plus_x_written_by_hand(src):
    assert len(only(src, "log1p-manual")) == 1


def test_log1p_finding_points_at_the_log_and_names_the_earlier_line():
    (f,) = only(LOG1P["over_two_statements"], "log1p-manual")
    assert (f.span.line, f.span.column) == (5, 12)
    assert "(from line 4)" in f.message


def test_log1p_rewrites_in_the_files_own_spelling():
    fixes = {name: only(src, "log1p-manual")[0].fix for name, src in LOG1P.items()}
    assert (fixes["numpy_alias"].kind, fixes["numpy_alias"].replacement) == ("auto", "np.log1p(rate)")
    assert fixes["one_minus"].replacement == "np.log1p(-p)"
    assert fixes["torch_method"].replacement == "rate.log1p()"
    assert fixes["tensorflow_math"].replacement == "tf.math.log1p(rate)"
    assert fixes["tensorflow1_log"].replacement == "tf.log1p(-p)"  # TF1 spelling kept
    assert fixes["math_scalar"].replacement == "math.log1p(rate)"
    # a new import line makes the fix a review one
    assert fixes["from_import_log"].kind == "review"
    assert any(e.text == "from numpy import log1p\n" for e in fixes["from_import_log"].edits)


def test_log1p_of_a_negated_sum_keeps_the_parentheses():
    (f,) = only("""
        import numpy as np
        def f(a, b):
            return np.log(1 - (a + b))
    """, "log1p-manual")
    assert f.fix.replacement == "np.log1p(-(a + b))"


# Integer and constant arguments: 1 + n is exact for an integer n, so log(1 + n) loses
# nothing; a constant loses something only when it is tiny (below 2**-26).
HARMLESS = {
    "len": """
        import math
        def entropy_bound(words):
            return math.log(1 + len(words))
    """,
    "range_loop_counter": """
        import math
        def schedule(n):
            out = []
            for step in range(n):
                out.append(math.log(1 + step))
            return out
    """,
    "enumerate_index": """
        import math
        def discounts(items):
            return [w / math.log(2 + i) + math.log(i + 1) for i, w in enumerate(items)]
    """,
    "comprehension_over_range": """
        import math
        def table(n):
            return [math.log(1 + k) for k in range(n)]
    """,
    "arange": """
        import numpy as np
        def harmonic_weights(n):
            return np.log(1 + np.arange(n))
    """,
    "annotated_int": """
        import math
        def depth_cost(n: int):
            return math.log(1 + n)
    """,
    "shape_entry": """
        import numpy as np
        def size_penalty(x):
            return np.log(1 + x.shape[0])
    """,
    "count_through_a_name": """
        import math
        def idf(docs, term):
            df = sum(1 for d in docs if term in d)
            n = len(docs)
            return math.log(n + 1)
    """,
    "bincount": """
        import numpy as np
        def log_counts(labels):
            counts = np.bincount(labels)
            return np.log(1 + counts)
    """,
    "int_literal": """
        import math
        LEVELS = 3
        def cost():
            return math.log(1 + LEVELS)
    """,
    "ordinary_constant": """
        import numpy as np
        def yearly():
            return np.log(1 + 0.05)
    """,
    "integer_arithmetic": """
        import math
        def width(i, items):
            n = len(items)
            return math.log(1 + n // 2 + 0) + math.log(2 * n + 1)
    """,
}


@pytest.mark.parametrize("src", HARMLESS.values(), ids=HARMLESS.keys())
def test_ignores_log_of_one_plus_integer_or_ordinary_constant(src):
    assert ours(src) == []


def test_flags_log_of_one_plus_a_tiny_literal():
    assert ours("""
        import numpy as np
        def f():
            return np.log(1 + 1e-17)
    """) == ["log1p-manual"]


def test_flags_log_of_one_plus_a_loop_value_that_is_not_an_index():
    assert ours("""
        import math
        def f(rates):
            return [math.log(1 + r) for r in rates]
    """) == ["log1p-manual"]


def test_flags_log_of_one_plus_a_fraction_of_loop_counters():
    assert ours("""
        import math
        def f(n):
            return [math.log(1 + t / n) for t in range(n)]
    """) == ["log1p-manual"]


LOG1P_CLEAN = {
    "log1p_itself": """
        import numpy as np
        def f(x):
            return np.log1p(x) + np.log1p(-x)
    """,
    "math_log_with_base": """
        import math
        def bits(n):
            return math.log(1 + n, 2)
    """,
    "log2": """
        import numpy as np
        def bits(x):
            return np.log2(1 + x)
    """,
    "user_defined_log": """
        def log(x):
            return x
        def f(x):
            return log(1 + x)
    """,
    "logger_log": """
        import logging
        logger = logging.getLogger(__name__)
        def f(level):
            logger.log(1 + level, "message")
            logging.log(1 + level, "message")
    """,
    "strings_and_comments": """
        import numpy as np
        def f(x):
            \"\"\"Returns np.log(1 + x) for small x.\"\"\"
            # np.log(1 + x) loses digits
            return "np.log(1 + x)"
    """,
    "log_of_two_plus": """
        import numpy as np
        def f(x):
            return np.log(2 + x)
    """,
    "suppressed": """
        import numpy as np
        def f(x):
            return np.log(1 + x)  # nanproof: allow[log1p-manual]
    """,
}


@pytest.mark.parametrize("src", LOG1P_CLEAN.values(), ids=LOG1P_CLEAN.keys())
def test_ignores_log1p_look_alikes_and_suppressed_lines(src):
    assert ours(src) == []


def test_log_of_one_plus_exp_is_softplus_not_log1p():
    src = """
        import numpy as np
        def f(x):
            return np.log(1 + np.exp(x))
    """
    assert ours(src) == ["softplus-manual"]


def test_ignores_the_stable_softplus_with_log_or_log1p():
    assert ours("""
        import numpy as np
        def a(x):
            return np.log1p(np.exp(-np.abs(x))) + np.maximum(x, 0)
        def b(x):
            return np.log(1 + np.exp(-np.abs(x))) + np.maximum(x, 0)
    """) == []


def test_log_of_one_minus_exp_is_left_to_expm1():
    # log(-expm1(x)) is the accurate form near 0; log1p(-exp(x)) would be the wrong cure there
    assert ours("""
        import numpy as np
        def f(x):
            return np.log(1 - np.exp(x))
    """) == ["expm1-manual"]


def test_log_of_one_minus_sigmoid_is_log_of_sigmoid_not_log1p():
    from nanproof.registry import known_ids

    if "log-of-sigmoid" not in known_ids():
        pytest.skip("log-of-sigmoid is not registered yet")
    got = ids("""
        import torch
        def f(x):
            return torch.log(1 - torch.sigmoid(x))
    """)
    assert "log-of-sigmoid" in got and "log1p-manual" not in got


def test_log_of_one_minus_p_inside_a_bce_is_bce_not_log1p():
    from nanproof.registry import known_ids

    if "bce-from-sigmoid" not in known_ids():
        pytest.skip("bce-from-sigmoid is not registered yet")
    got = ids("""
        import torch
        def loss(x, y):
            p = torch.sigmoid(x)
            return -(y * torch.log(p) + (1 - y) * torch.log(1 - p)).mean()
    """)
    assert "bce-from-sigmoid" in got and "log1p-manual" not in got


# -- expm1-manual -----------------------------------------------------------------------
EXPM1 = {
    "elu_numpy_where": """
        import numpy as np
        def elu(x, alpha=1.0):
            return np.where(x > 0, x, alpha * (np.exp(x) - 1))
    """,
    "selu": """
        import numpy as np
        def selu(x, alpha=1.6733, scale=1.0507):
            return scale * np.where(x > 0, x, alpha * (np.exp(x) - 1))
    """,
    "plain_import_numpy": """
        import numpy
        def rel_change(log_ratio):
            return numpy.exp(log_ratio) - 1
    """,
    "from_math_import_exp": """
        from math import exp
        def elu(x, alpha=1.0):
            return x if x > 0 else alpha * (exp(x) - 1)
    """,
    "math_module": """
        import math
        def rel_change(log_ratio):
            return math.exp(log_ratio) - 1.0
    """,
    "torch_function": """
        import torch
        def elu(x, alpha=1.0):
            return torch.where(x > 0, x, alpha * (torch.exp(x) - 1))
    """,
    "torch_method": """
        import torch
        def elu(x, alpha=1.0):
            return torch.where(x > 0, x, alpha * (x.exp() - 1))
    """,
    "jax": """
        from jax import numpy as jnp
        def elu(x):
            return jnp.where(x > 0, x, jnp.exp(x) - 1)
    """,
    "tensorflow": """
        import tensorflow as tf
        def elu(x):
            return tf.where(x > 0, x, tf.exp(x) - 1)
    """,
    "one_minus_exp": """
        import numpy as np
        def failure_prob(rate, t):
            return 1 - np.exp(-rate * t)
    """,
    "over_two_statements": """
        import numpy as np
        def rel_change(log_ratio):
            growth = np.exp(log_ratio)
            return growth - 1
    """,
    "augmented_assignment": """
        import numpy as np
        def rel_change(log_ratio):
            growth = np.exp(log_ratio)
            growth -= 1
            return growth
    """,
}


@pytest.mark.parametrize("src", EXPM1.values(), ids=EXPM1.keys())
def test_flags_exp_minus_one_written_by_hand(src):
    assert len(only(src, "expm1-manual")) == 1


def test_expm1_rewrites_in_the_files_own_spelling():
    fixes = {name: only(src, "expm1-manual")[0].fix for name, src in EXPM1.items()}
    assert (fixes["elu_numpy_where"].kind, fixes["elu_numpy_where"].replacement) == ("auto", "np.expm1(x)")
    assert fixes["torch_method"].replacement == "x.expm1()"
    assert fixes["tensorflow"].replacement == "tf.math.expm1(x)"  # TF2 has no tf.expm1
    assert fixes["one_minus_exp"].replacement == "-np.expm1(-rate * t)"
    assert fixes["over_two_statements"].replacement == "np.expm1(log_ratio)"
    assert fixes["from_math_import_exp"].kind == "review"  # adds `from math import expm1`
    assert fixes["augmented_assignment"] is None


def test_expm1_finding_points_at_the_subtraction():
    (f,) = only(EXPM1["elu_numpy_where"], "expm1-manual")
    assert (f.span.line, f.span.column, f.span.end_column) == (4, 40, 53)


EXPM1_CLEAN = {
    "integer_argument": """
        import math
        def f(n):
            return [math.exp(k) - 1 for k in range(n)]
    """,
    "ordinary_constant": """
        import math
        E_MINUS_ONE = math.exp(1) - 1
    """,
    "expm1_itself": """
        import numpy as np
        def elu(x):
            return np.where(x > 0, x, np.expm1(x))
    """,
    "not_one": """
        import numpy as np
        def f(x):
            return np.exp(x) - 2
    """,
    "user_defined_exp": """
        def exp(x):
            return x
        def f(x):
            return exp(x) - 1
    """,
    "in_a_string": """
        FORMULA = "np.exp(x) - 1"
    """,
    "suppressed": """
        import numpy as np
        def f(x):
            return np.exp(x) - 1  # nanproof: allow[expm1-manual]
    """,
}


@pytest.mark.parametrize("src", EXPM1_CLEAN.values(), ids=EXPM1_CLEAN.keys())
def test_ignores_expm1_look_alikes_integers_and_suppressed_lines(src):
    assert ours(src) == []


def test_flags_exp_of_a_tiny_constant_minus_one():
    assert ours("""
        import math
        def f():
            return math.exp(1e-10) - 1
    """) == ["expm1-manual"]


def test_exp_of_log_minus_one_is_the_round_trip():
    assert ours("""
        import numpy as np
        def f(x):
            return np.exp(np.log(x)) - 1
    """) == ["log-exp-roundtrip"]


# -- sigmoid-manual ---------------------------------------------------------------------
SIGMOID = {
    "numpy_reciprocal": ("warning", """
        import numpy as np
        def sigmoid(z):
            return 1 / (1 + np.exp(-z))
    """),
    "numpy_float_literals": ("warning", """
        import numpy
        def sigmoid(z):
            return 1.0 / (1.0 + numpy.exp(-z))
    """),
    "numpy_ratio": ("error", """
        import numpy as np
        def sigmoid(z):
            return np.exp(z) / (1 + np.exp(z))
    """),
    "numpy_ratio_one_last": ("error", """
        import numpy as np
        def sigmoid(z):
            return np.exp(z) / (np.exp(z) + 1)
    """),
    "from_numpy_import_exp": ("warning", """
        from numpy import exp
        def sigmoid(z):
            return 1 / (1 + exp(-z))
    """),
    "math_raises": ("error", """
        import math
        def sigmoid(z):
            return 1 / (1 + math.exp(-z))
    """),
    "from_math_import_exp": ("error", """
        from math import exp
        def sigmoid(z):
            return 1 / (1 + exp(-z))
    """),
    "torch_function": ("warning", """
        import torch
        def gate(h):
            return 1 / (1 + torch.exp(-h))
    """),
    "torch_method": ("warning", """
        import torch
        def gate(h):
            return 1 / (1 + (-h).exp())
    """),
    "jax": ("warning", """
        import jax
        from jax import numpy as jnp
        def gate(h):
            return 1 / (1 + jnp.exp(-h))
    """),
    "tensorflow": ("error", """
        import tensorflow as tf
        def gate(h):
            return tf.exp(h) / (1 + tf.exp(h))
    """),
    "over_two_statements": ("warning", """
        import numpy as np
        def forward(W, x, b):
            e = np.exp(-(W @ x + b))
            return 1 / (1 + e)
    """),
    "in_a_module_forward": ("warning", """
        import torch
        class Gate(torch.nn.Module):
            def forward(self, x):
                return 1 / (1 + torch.exp(-self.proj(x)))
    """),
}


@pytest.mark.parametrize("sev, src", SIGMOID.values(), ids=SIGMOID.keys())
def test_flags_hand_written_sigmoid_with_severity_by_form(sev, src):
    (f,) = only(src, "sigmoid-manual")
    assert f.severity == sev


def test_sigmoid_rewrites_to_the_framework_sigmoid():
    fixes = {name: only(src, "sigmoid-manual")[0].fix for name, (_, src) in SIGMOID.items()}
    assert (fixes["torch_function"].kind, fixes["torch_function"].replacement) == ("auto", "torch.sigmoid(h)")
    assert fixes["torch_method"].replacement == "torch.sigmoid(h)"
    assert (fixes["jax"].kind, fixes["jax"].replacement) == ("auto", "jax.nn.sigmoid(h)")
    assert (fixes["tensorflow"].kind, fixes["tensorflow"].replacement) == ("auto", "tf.math.sigmoid(h)")
    assert fixes["in_a_module_forward"].replacement == "torch.sigmoid(self.proj(x))"
    # NumPy has no sigmoid: scipy.special.expit, imported, for review
    assert fixes["numpy_reciprocal"].kind == "review"
    assert any(e.text == "from scipy.special import expit\n" for e in fixes["numpy_reciprocal"].edits)
    assert fixes["over_two_statements"].replacement.endswith("expit(W @ x + b)")
    # math: the two-branch form, no import
    assert fixes["math_raises"].kind == "auto"
    assert fixes["math_raises"].replacement == "(1 / (1 + math.exp(-z)) if z >= 0 else math.exp(z) / (1 + math.exp(z)))"


def test_sigmoid_fix_is_auto_when_scipy_special_is_imported():
    for imp, call in (("from scipy.special import expit", "expit(z)"), ("import scipy.special", "scipy.special.expit(z)"),
                      ("from scipy import special", "special.expit(z)")):
        (f,) = only(f"""
            import numpy as np
            {imp}
            def sigmoid(z):
                return 1 / (1 + np.exp(-z))
        """, "sigmoid-manual")
        assert (f.fix.kind, f.fix.replacement) == ("auto", call)


def test_torch_method_sigmoid_without_torch_import_uses_the_tensor_method():
    (f,) = only("""
        def gate(h):
            return 1 / (1 + (-h).exp())
    """, "sigmoid-manual")
    assert f.fix.replacement == "h.sigmoid()"


SIGMOID_CLEAN = {
    "tanh_form": """
        import numpy as np
        def sigmoid(z):
            return 0.5 * (1 + np.tanh(0.5 * z))
    """,
    "numpy_where_stable": """
        import numpy as np
        def sigmoid(z):
            return np.where(z >= 0, 1 / (1 + np.exp(-z)), np.exp(z) / (1 + np.exp(z)))
    """,
    "scalar_if_else": """
        import math
        def sigmoid(z):
            if z >= 0:
                return 1 / (1 + math.exp(-z))
            else:
                e = math.exp(z)
                return e / (1 + e)
    """,
    "scalar_early_return": """
        import math
        def sigmoid(z):
            if z < 0:
                e = math.exp(z)
                return e / (1 + e)
            return 1 / (1 + math.exp(-z))
    """,
    "conditional_expression": """
        import math
        def sigmoid(z):
            return 1 / (1 + math.exp(-z)) if 0 <= z else math.exp(z) / (1 + math.exp(z))
    """,
    "boolean_masks": """
        import numpy as np
        def sigmoid(z):
            out = np.empty_like(z)
            pos = z >= 0
            out[pos] = 1 / (1 + np.exp(-z[pos]))
            e = np.exp(z[~pos])
            out[~pos] = e / (1 + e)
            return out
    """,
    "exp_of_minus_abs": """
        import numpy as np
        def sigmoid(z):
            e = np.exp(-np.abs(z))
            return np.where(z >= 0, 1 / (1 + e), e / (1 + e))
    """,
    "clipped_argument": """
        import numpy as np
        def sigmoid(z):
            return 1 / (1 + np.exp(-np.clip(z, -500, 500)))
    """,
    "framework_functions": """
        import torch
        from scipy.special import expit
        def gates(z, h):
            return expit(z), torch.sigmoid(h), h.sigmoid()
    """,
    "user_defined_exp": """
        def exp(x):
            return x
        def f(z):
            return 1 / (1 + exp(-z))
    """,
    "not_a_sigmoid": """
        import numpy as np
        def f(z):
            return 1 / (2 + np.exp(-z)) + np.exp(z) / (1 + np.exp(2 * z))
    """,
    "in_comments_and_strings": """
        # sigmoid = 1 / (1 + np.exp(-z))
        DOC = "np.exp(z) / (1 + np.exp(z))"
    """,
    "suppressed": """
        import numpy as np
        def sigmoid(z):
            return 1 / (1 + np.exp(-z))  # nanproof: allow[sigmoid-manual]
    """,
}


@pytest.mark.parametrize("src", SIGMOID_CLEAN.values(), ids=SIGMOID_CLEAN.keys())
def test_ignores_stable_sigmoids_look_alikes_and_suppressed_lines(src):
    assert ours(src) == []


def test_flags_torch_where_guard_because_the_gradient_still_overflows():
    got = only("""
        import torch
        def sigmoid(z):
            return torch.where(z >= 0, 1 / (1 + torch.exp(-z)), torch.exp(z) / (1 + torch.exp(z)))
    """, "sigmoid-manual")
    assert len(got) == 2
    assert all("gradient" in f.message and "where()" in f.message for f in got)


def test_sigmoid_finding_points_at_the_division():
    (f,) = only(SIGMOID["numpy_reciprocal"][1], "sigmoid-manual")
    assert (f.span.line, f.span.column, f.span.end_column) == (4, 12, 32)


# -- softplus-manual --------------------------------------------------------------------
SOFTPLUS = {
    "numpy_log": """
        import numpy as np
        def softplus(x):
            return np.log(1 + np.exp(x))
    """,
    "numpy_one_last": """
        import numpy as np
        def softplus(x):
            return np.log(np.exp(x) + 1)
    """,
    "numpy_log1p": """
        import numpy as np
        def softplus(x):
            return np.log1p(np.exp(x))
    """,
    "from_numpy_import": """
        from numpy import exp, log
        def softplus(x):
            return log(1 + exp(x))
    """,
    "math_scalar": """
        import math
        def softplus(x):
            return math.log(1 + math.exp(x))
    """,
    "torch_functions": """
        import torch
        def softplus(x):
            return torch.log1p(torch.exp(x))
    """,
    "torch_methods": """
        import torch
        def softplus(x):
            return x.exp().log1p()
    """,
    "jax": """
        from jax import numpy as jnp
        def softplus(x):
            return jnp.log(1 + jnp.exp(x))
    """,
    "cupy": """
        import cupy as cp
        def softplus(x):
            return cp.log(1 + cp.exp(x))
    """,
    "tensorflow1": """
        import tensorflow as tf
        def softplus(x):
            return tf.log(1 + tf.exp(x))
    """,
    "over_two_statements": """
        import numpy as np
        def softplus(x):
            e = np.exp(x)
            return np.log(1 + e)
    """,
    "negated_argument_in_a_loss": """
        import numpy as np
        def logistic_loss(w, X, y):
            return np.mean(np.log(1 + np.exp(-y * (X @ w))))
    """,
}


@pytest.mark.parametrize("src", SOFTPLUS.values(), ids=SOFTPLUS.keys())
def test_flags_hand_written_softplus_once(src):
    assert len(only(src, "softplus-manual")) == 1


def test_softplus_rewrites_by_framework():
    fixes = {name: only(src, "softplus-manual")[0].fix for name, src in SOFTPLUS.items()}
    assert (fixes["numpy_log"].kind, fixes["numpy_log"].replacement) == ("auto", "np.logaddexp(0, x)")
    assert fixes["negated_argument_in_a_loss"].replacement == "np.logaddexp(0, -y * (X @ w))"
    assert fixes["jax"].replacement == "jnp.logaddexp(0, x)"
    # torch's softplus switches to x above 20 whatever the dtype: not exact, so review
    assert (fixes["torch_functions"].kind, fixes["torch_functions"].replacement) == ("review", "torch.nn.functional.softplus(x)")
    assert fixes["tensorflow1"].kind == "review"
    assert fixes["math_scalar"].replacement == "(max(x, 0.0) + math.log1p(math.exp(-abs(x))))"
    assert (fixes["cupy"].kind, fixes["cupy"].replacement) == ("auto", "cp.logaddexp(0, x)")
    assert fixes["from_numpy_import"].kind == "review"


SOFTPLUS_CLEAN = {
    "stable_numpy": """
        import numpy as np
        def softplus(x):
            return np.maximum(x, 0) + np.log1p(np.exp(-np.abs(x)))
    """,
    "numpy_threshold_where": """
        import numpy as np
        def softplus(x):
            return np.where(x > 20, x, np.log1p(np.exp(x)))
    """,
    "scalar_threshold": """
        import math
        def softplus(x):
            return x if x > 30 else math.log1p(math.exp(x))
    """,
    "framework_functions": """
        import numpy as np
        import torch.nn.functional as F
        def f(x, t):
            return np.logaddexp(0, x), F.softplus(t)
    """,
    "exp_of_negative_square": """
        import numpy as np
        def f(x):
            return np.log(1 + np.exp(-x ** 2))
    """,
    "suppressed": """
        import numpy as np
        def softplus(x):
            return np.log(1 + np.exp(x))  # nanproof: allow[softplus-manual]
    """,
}


@pytest.mark.parametrize("src", SOFTPLUS_CLEAN.values(), ids=SOFTPLUS_CLEAN.keys())
def test_ignores_stable_softplus_and_bounded_arguments(src):
    assert ours(src) == []


def test_flags_torch_threshold_where_because_the_gradient_is_nan():
    (f,) = only("""
        import torch
        def softplus(x):
            return torch.where(x > 20, x, torch.log1p(torch.exp(x)))
    """, "softplus-manual")
    assert "gradient" in f.message


# -- log-exp-roundtrip ------------------------------------------------------------------
ROUNDTRIP = {
    "numpy_log_exp": ("auto", "x", """
        import numpy as np
        def f(x):
            return np.log(np.exp(x))
    """),
    "torch_methods": ("auto", "(a - b)", """
        import torch
        def f(a, b):
            return 2 * (a - b).exp().log()
    """),
    "math_exp_log": ("review", "x", """
        import math
        def f(x):
            return math.exp(math.log(x))
    """),
    "jax": ("auto", "x", """
        from jax import numpy as jnp
        def f(x):
            return jnp.log(jnp.exp(x))
    """),
    "tensorflow": ("review", "x", """
        import tensorflow as tf
        def f(x):
            return tf.exp(tf.math.log(x))
    """),
    "over_two_statements": ("auto", "x", """
        import numpy as np
        def f(x):
            w = np.exp(x)
            return np.log(w)
    """),
}


@pytest.mark.parametrize("kind, text, src", ROUNDTRIP.values(), ids=ROUNDTRIP.keys())
def test_flags_log_exp_round_trips(kind, text, src):
    (f,) = only(src, "log-exp-roundtrip")
    assert (f.fix.kind, f.fix.replacement) == (kind, text)


def test_ignores_round_trip_look_alikes_and_constants():
    assert ours("""
        import math
        import numpy as np
        def f(p, x):
            geometric_mean = np.exp(np.log(p).mean())
            scaled = np.log(np.exp(x) * 2)
            return geometric_mean, scaled, math.log(math.exp(2.0))
    """) == []


def test_softplus_inside_a_lambda_is_analysed_without_error():
    assert ours("""
        import numpy as np
        softplus = lambda x: np.log(1 + np.exp(x))
        gate = lambda z: 1 / (1 + np.exp(-z))
    """) == ["softplus-manual", "sigmoid-manual"]


def test_log1p_fix_is_review_when_the_sum_is_also_used_elsewhere():
    (f,) = only("""
        import numpy as np
        def f(x):
            y = 1 + x
            return np.log(y), y ** 2
    """, "log1p-manual")
    assert (f.fix.kind, f.fix.replacement) == ("review", "np.log1p(x)")


def test_ignores_exp_of_a_named_constant_expression():
    assert ours("""
        import numpy as np
        def f():
            return (np.exp(np.pi / 2) - 1) / 2
    """) == []


def test_ignores_softplus_of_a_difference_that_cannot_be_positive():
    assert ours("""
        import numpy as np
        import torch
        def lae(a, b):
            hi, lo = np.maximum(a, b), np.minimum(a, b)
            return hi + np.log1p(np.exp(lo - hi))
        def lae_where(a, b):
            mask = a >= b
            max_ = torch.where(mask, a, b)
            min_ = torch.where(mask, b, a)
            return max_ + torch.log1p(torch.exp(min_ - max_))
        def shifted(x):
            return np.log1p(np.exp(x - np.maximum(x, 0)))
    """) == []


def test_a_where_threshold_without_a_literal_still_guards_numpy_values():
    assert ours("""
        import numpy as np
        def softplus(x, threshold):
            return np.where(x > threshold, x, np.log1p(np.exp(x)))
    """) == []


@pytest.mark.parametrize("src", [
    "import numpy as np\ndef f(n):\n    return np.log(n + 1)\n",
    "import math\ndef f(n_samples, k):\n    return math.log(1 + n_samples) * k\n",
    "import numpy as np\nclass C:\n    def f(self):\n        return np.log(1 + self.num_classes)\n",
])
def test_ignores_log_of_one_plus_a_conventional_count_name(src):
    assert "log1p-manual" not in ids(src)


@pytest.mark.parametrize("src", [
    "import torch\ndef lae(a, b):\n    lo, hi = torch.minimum(a, b), torch.maximum(a, b)\n    return hi + torch.log1p(torch.exp(lo - hi))\n",
    "import numpy as np\ndef lae(a, b):\n    m = np.maximum(a, b)\n    return m + np.log1p(np.exp(b - m))\n",
])
def test_ignores_the_shifted_two_term_log_add_exp(src):
    assert [r for r in ids(src) if r in ("softplus-manual", "log1p-manual")] == []


def test_ignores_log_of_one_plus_a_tensor_size():
    assert "log1p-manual" not in ids("import math\ndef f(x):\n    k = x.size(0)\n    return math.log(k + 1)\n")


@pytest.mark.parametrize("src", [
    "import torch\ndef sp(x):\n    return x.clamp(min=0) + x.abs().neg().exp().log1p()\n",
    "import numpy as np\ndef sp(x):\n    return np.maximum(x, 0) + np.log1p(np.exp(np.negative(np.abs(x))))\n",
])
def test_ignores_the_stable_softplus_written_with_neg(src):
    assert "softplus-manual" not in ids(src)


# -- false alarms seen on real code, and an algebraic variant ----------------------------
def test_exp_minus_one_only_compared_with_a_threshold_is_quiet():
    assert ids("""
        import numpy as np
        def drifted(log_gain):
            r = np.exp(log_gain) - 1
            if abs(r) > 0.2:
                return True
            return np.exp(log_gain) - 1 < -0.5
    """) == []


def test_exp_minus_one_compared_and_also_used_in_arithmetic_is_flagged():
    assert ids("""
        import numpy as np
        def drifted(log_gain):
            r = np.exp(log_gain) - 1
            if abs(r) > 0.2:
                return r * 100
            return 0.0
    """) == ["expm1-manual"]


def test_a_distributed_factor_is_still_exp_minus_one():
    [f] = findings("""
        import numpy as np
        def soft_floor(x, alpha):
            return np.where(x > 0, x, alpha * np.exp(x) - alpha)
    """)
    assert f.rule == "expm1-manual" and f.fix.kind == "auto" and f.fix.edits[0].text == "alpha * np.expm1(x)"


def test_softplus_with_minus_abs_from_a_where_upstream_is_quiet():
    assert ids("""
        import numpy as np
        def smooth_relu(x):
            neg_abs = np.where(x > 0, -x, x)
            return np.log1p(np.exp(neg_abs)) + np.maximum(x, 0)
    """) == []


def test_a_where_that_keeps_positive_values_is_not_minus_abs():
    assert ids("""
        import numpy as np
        def smooth_relu(x):
            v = np.where(x > 0, x, -x)
            return np.log1p(np.exp(v))
    """) == ["softplus-manual"]
