"""What the statistics-family rules report, and what they must leave alone."""
import pytest

from conftest import findings, ids


def only(src: str, rule: str):
    (f,) = [f for f in findings(src) if f.rule == rule]
    return f


# -- variance-cancellation ---------------------------------------------------------------
VARIANCE = {
    "numpy_alias_one_expression": """
        import numpy as np
        def var(x):
            return np.mean(x**2) - np.mean(x)**2
    """,
    "plain_import_numpy_products": """
        import numpy
        def var(x):
            return numpy.mean(x * x) - numpy.mean(x) * numpy.mean(x)
    """,
    "from_import_mean": """
        from numpy import mean, square
        def var(x):
            return mean(square(x)) - square(mean(x))
    """,
    "numpy_methods_over_statements": """
        import numpy as np
        def var(x):
            m = x.mean(axis=0)
            ex2 = (x**2).mean(axis=0)
            return ex2 - m**2
    """,
    "named_mean_squared_by_product": """
        import numpy as np
        def var(x):
            m = np.mean(x, axis=1, keepdims=True)
            return np.mean(x * x, axis=1, keepdims=True) - m * m
    """,
    "cupy": """
        import cupy as cp
        def var(x):
            return cp.mean(x**2) - cp.mean(x)**2
    """,
    "nanmean": """
        import numpy as np
        def var(x):
            return np.nanmean(x**2) - np.nanmean(x)**2
    """,
    "average_without_weights": """
        import numpy as np
        def var(x):
            return np.average(x**2) - np.average(x)**2
    """,
    "average_with_the_same_weights": """
        import numpy as np
        def var(x, w):
            return np.average(x**2, weights=w) - np.average(x, weights=w)**2
    """,
    "torch_functions_with_dim": """
        import torch
        def var(x):
            return torch.mean(x**2, dim=1, keepdim=True) - torch.mean(x, dim=1, keepdim=True)**2
    """,
    "torch_methods_and_pow": """
        import torch
        def var(x):
            mu = x.mean(0)
            return x.pow(2).mean(0) - mu.pow(2)
    """,
    "batchnorm_style_running_moments": """
        import torch
        class Norm(torch.nn.Module):
            def forward(self, h):
                mean = h.mean(dim=0)
                var = (h * h).mean(dim=0) - mean**2
                return (h - mean) / torch.sqrt(var + 1e-5)
    """,
    "jax_from_import": """
        from jax import numpy as jnp
        def var(x):
            return jnp.mean(x**2, axis=-1) - jnp.mean(x, axis=-1)**2
    """,
    "tensorflow": """
        import tensorflow as tf
        def var(x):
            return tf.reduce_mean(tf.square(x), axis=0) - tf.square(tf.reduce_mean(x, axis=0))
    """,
    "tensorflow_math_tf1_reduction_indices": """
        import tensorflow as tf
        def var(x):
            return tf.math.reduce_mean(x * x, reduction_indices=[1]) - tf.math.reduce_mean(x, reduction_indices=[1]) ** 2
    """,
    "statistics_module_on_lists": """
        import statistics
        def var(xs):
            return statistics.mean(v * v for v in xs) - statistics.mean(xs) ** 2
    """,
    "builtin_sums_over_len": """
        def var(xs):
            n = len(xs)
            return sum(v**2 for v in xs) / n - (sum(xs) / n) ** 2
    """,
    "math_fsum_inside_sqrt": """
        import math
        def std(xs):
            return math.sqrt(math.fsum([v * v for v in xs]) / len(xs) - (math.fsum(xs) / len(xs)) ** 2)
    """,
    "numpy_sums_over_size": """
        import numpy as np
        def var(x):
            return np.sum(x**2) / x.size - (np.sum(x) / x.size) ** 2
    """,
    "sums_over_the_same_unknown_count": """
        import numpy as np
        def var(x, n):
            s, s2 = np.sum(x), np.sum(x**2)
            return s2 / n - (s / n) ** 2
    """,
    "mean_and_sum_over_shape": """
        import numpy as np
        def var(x):
            return np.sum(x**2, axis=0) / x.shape[0] - np.mean(x, axis=0) ** 2
    """,
    "augmented_subtraction": """
        import numpy as np
        def var(x):
            v = np.mean(x**2)
            v -= np.mean(x)**2
            return v
    """,
}


@pytest.mark.parametrize("src", VARIANCE.values(), ids=VARIANCE.keys())
def test_flags_variance_by_moments(src):
    assert "variance-cancellation" in ids(src)


def test_variance_points_at_the_subtraction_and_names_earlier_lines():
    f = only("""
        import numpy as np
        def var(x):
            m = np.mean(x)
            ex2 = np.mean(x**2)
            return ex2 - m**2
    """, "variance-cancellation")
    assert (f.span.line, f.span.column, f.span.end_column) == (6, 12, 22)
    assert "line 4, 5" in f.message


VARIANCE_QUIET = {
    "framework_variances": """
        import numpy as np, torch, statistics
        def var(x, t, xs):
            return np.var(x), torch.var(t, correction=0), statistics.pvariance(xs)
    """,
    "two_pass": """
        import numpy as np
        def var(x):
            return np.mean((x - np.mean(x))**2)
    """,
    "means_of_different_data": """
        import numpy as np
        def cov_like(x, y):
            return np.mean(x**2) - np.mean(y)**2
    """,
    "difference_of_squares_is_not_a_variance": """
        import numpy as np
        def f(a, b):
            return a**2 - b**2
    """,
    "means_over_different_axes": """
        import numpy as np
        def f(x):
            return np.mean(x**2, axis=0) - np.mean(x, axis=1)**2
    """,
    "weights_on_one_side_only": """
        import numpy as np
        def f(x, w):
            return np.average(x**2, weights=w) - np.average(x)**2
    """,
    "mean_not_squared": """
        import numpy as np
        def f(x):
            return np.mean(x**2) - np.mean(x)
    """,
    "third_moment": """
        import numpy as np
        def f(x):
            return np.mean(x**3) - np.mean(x)**3
    """,
    "sums_over_different_counts": """
        import numpy as np
        def f(x, n, k):
            return np.sum(x**2) / n - (np.sum(x) / k) ** 2
    """,
    "already_centred_data": """
        import numpy as np
        def f(x):
            z = x - x.mean(axis=0)
            return np.mean(z**2, axis=0) - np.mean(z, axis=0)**2
    """,
    "small_integer_literals": """
        import numpy as np
        x = np.array([1, 2, 3, 4])
        spread = np.mean(np.array([1, 2, 3, 4])**2) - np.mean(np.array([1, 2, 3, 4]))**2
        steps = sum(v**2 for v in range(10)) / 10 - (sum(range(10)) / 10) ** 2
    """,
    "user_function_called_mean": """
        def mean(v):
            return v
        def f(x):
            return mean(x**2) - mean(x)**2
    """,
    "formula_in_string_and_comment": """
        import numpy as np
        # var = np.mean(x**2) - np.mean(x)**2
        doc = "np.mean(x**2) - np.mean(x)**2"
    """,
    "suppressed": """
        import numpy as np
        def var(x):
            return np.mean(x**2) - np.mean(x)**2  # nanproof: allow[variance-cancellation]
    """,
}


@pytest.mark.parametrize("src", VARIANCE_QUIET.values(), ids=VARIANCE_QUIET.keys())
def test_ignores_stable_or_unrelated_moments(src):
    assert "variance-cancellation" not in ids(src)


@pytest.mark.parametrize("src, kind, text", [
    (VARIANCE["numpy_alias_one_expression"], "auto", "np.var(x)"),
    (VARIANCE["named_mean_squared_by_product"], "auto", "np.var(x, axis=1, keepdims=True)"),
    (VARIANCE["nanmean"], "auto", "np.nanvar(x)"),
    # torch.var is unbiased by default: the equal rewrite says correction=0
    (VARIANCE["torch_functions_with_dim"], "auto", "torch.var(x, dim=1, keepdim=True, correction=0)"),
    (VARIANCE["torch_methods_and_pow"], "auto", "x.var(dim=0, correction=0)"),
    # ddof=0 written out: right for ndarrays and for pandas objects (whose default is 1)
    (VARIANCE["numpy_methods_over_statements"], "auto", "x.var(axis=0, ddof=0)"),
    (VARIANCE["jax_from_import"], "auto", "jnp.var(x, axis=-1)"),
    (VARIANCE["statistics_module_on_lists"], "auto", "statistics.pvariance(xs)"),
    (VARIANCE["numpy_sums_over_size"], "auto", "np.var(x)"),
    (VARIANCE["mean_and_sum_over_shape"], "auto", "np.var(x, axis=0)"),
    (VARIANCE["tensorflow"], "review", "tf.math.reduce_variance(x, axis=0)"),
])
def test_variance_fix_writes_the_population_variance_of_the_framework(src, kind, text):
    f = only(src, "variance-cancellation")
    assert f.fix is not None and f.fix.kind == kind
    assert any(e.text == text for e in f.fix.edits), f.fix.edits


def test_variance_fix_is_review_when_len_counts_only_the_first_axis():
    f = only("""
        import numpy as np
        def var(x):
            return np.sum(x**2) / len(x) - (np.sum(x) / len(x)) ** 2
    """, "variance-cancellation")
    assert f.fix.kind == "review"


def test_variance_of_lists_adds_the_statistics_import_for_review():
    f = only(VARIANCE["builtin_sums_over_len"], "variance-cancellation")
    assert f.fix.kind == "review"
    assert {e.text for e in f.fix.edits} == {"pvariance(xs)", "from statistics import pvariance\n"}


@pytest.mark.parametrize("src", [
    VARIANCE["sums_over_the_same_unknown_count"],
    VARIANCE["average_with_the_same_weights"],
    # both torch and numpy imported: x.var() is biased for one and unbiased for the other
    "import numpy as np\nimport torch\ndef v(x):\n    return (x**2).mean() - x.mean()**2\n",
])
def test_variance_without_a_safe_rewrite_suggests_code(src):
    f = only(src, "variance-cancellation")
    assert f.fix is None and "var" in f.suggestion


# -- xlogx-nan ---------------------------------------------------------------------------
XLOGX = {
    "numpy_entropy": """
        import numpy as np
        def entropy(p):
            return -np.sum(p * np.log(p))
    """,
    "plain_import_numpy_reversed_order": """
        import numpy
        def entropy(p):
            return -numpy.sum(numpy.log(p) * p, axis=-1)
    """,
    "from_import_log_and_negated_factor": """
        from numpy import log
        def entropy(p):
            return (-p * log(p)).sum()
    """,
    "log_held_in_a_name": """
        import numpy as np
        def entropy(p):
            logp = np.log(p)
            return -(p * logp).sum(axis=1)
    """,
    "binary_entropy_term": """
        import numpy as np
        def h(q):
            return -(q * np.log(q) + (1 - q) * np.log(1 - q))
    """,
    "entropy_in_bits": """
        import numpy as np
        def bits(p):
            return -np.sum(p * np.log2(p))
    """,
    "kl_ratio": """
        import numpy as np
        def kl(p, q):
            return np.sum(p * np.log(p / q))
    """,
    "kl_difference_of_logs": """
        import numpy as np
        def kl(p, q):
            return np.sum(p * (np.log(p) - np.log(q)))
    """,
    "math_scalars_in_a_comprehension": """
        import math
        def entropy(ps):
            return -sum(p * math.log(p) for p in ps)
    """,
    "math_log_base_two": """
        import math
        def bits(ps):
            return -sum(p * math.log(p, 2) for p in ps)
    """,
    "torch_function": """
        import torch
        def entropy(p):
            return -(p * torch.log(p)).sum(dim=-1)
    """,
    "torch_method": """
        import torch
        def kl(p, q):
            return (p * (p / q).log()).sum()
    """,
    "torch_where_guard_keeps_nan_gradient": """
        import torch
        def entropy(p):
            return -torch.where(p > 0, p * torch.log(p), torch.zeros_like(p)).sum()
    """,
    "torch_nansum_keeps_nan_gradient": """
        import torch
        def entropy(p):
            return -torch.nansum(p * torch.log(p))
    """,
    "jax_where_guard_keeps_nan_gradient": """
        import jax.numpy as jnp
        def entropy(p):
            return -jnp.sum(jnp.where(p == 0, 0.0, p * jnp.log(p)))
    """,
    "tensorflow": """
        import tensorflow as tf
        def entropy(p):
            return -tf.reduce_sum(p * tf.math.log(p), axis=-1)
    """,
    "tf1_log": """
        import tensorflow as tf
        def entropy(p):
            return -tf.reduce_sum(p * tf.log(p), 1)
    """,
    "read_before_it_is_zeroed": """
        import numpy as np
        def entropy(p):
            h = p * np.log(p)
            total = h.sum()
            h[p == 0] = 0
            return -total
    """,
    "torch_masked_fill_after_keeps_nan_gradient": """
        import torch
        def stirling(target):
            term = target * torch.log(target) - target
            return term.masked_fill(target <= 1, 0)
    """,
    "softmax_probabilities": """
        import torch.nn.functional as F
        def entropy(logits):
            p = F.softmax(logits, dim=-1)
            return -(p * p.log()).sum(-1)
    """,
    "softmax_module_on_self": """
        import torch
        from torch import nn
        class Policy(nn.Module):
            def __init__(self):
                super().__init__()
                self.act = nn.Softmax(dim=-1)
            def entropy(self, h):
                p = self.act(h)
                return -(p * torch.log(p)).sum(-1)
    """,
    "softmax_from_a_helper": """
        import numpy as np
        def softmax(z):
            e = np.exp(z - z.max())
            return e / e.sum()
        def entropy(z):
            p = softmax(z)
            return -np.sum(p * np.log(p))
    """,
}


@pytest.mark.parametrize("src", XLOGX.values(), ids=XLOGX.keys())
def test_flags_x_log_x_terms(src):
    assert "xlogx-nan" in ids(src)


def test_binary_entropy_is_two_terms_each_flagged():
    assert ids(XLOGX["binary_entropy_term"]).count("xlogx-nan") == 2


def test_one_minus_q_term_is_fixed_with_xlog1py_whichever_fix_lands_first():
    # log1p-manual also reports np.log(1 - q): a second defect (digits of small q lost).
    # xlog1py fixes both; after the log1p fix alone the term is still found.
    f = [f for f in findings(XLOGX["binary_entropy_term"]) if f.rule == "xlogx-nan"][1]
    assert {e.text for e in f.fix.edits} == {"xlog1py(1 - q, -q)", "from scipy.special import xlog1py\n"}
    after_log1p = "import numpy as np\nimport scipy.special\ndef h(q):\n    return -(1 - q) * np.log1p(-q)\n"
    (g,) = findings(after_log1p)
    assert g.rule == "xlogx-nan" and [e.text for e in g.fix.edits] == ["-scipy.special.xlog1py(1 - q, -q)"]
    torch_src = "import torch\ndef h(q):\n    return ((1 - q) * torch.log(1 - q)).sum()\n"
    assert [e.text for e in only(torch_src, "xlogx-nan").fix.edits] == ["torch.special.xlog1py(1 - q, -q)"]


def test_entropy_of_softmax_is_one_xlogx_finding_fixed_through_log_softmax():
    # One finding per problem: not log-of-softmax on the log, not cross-entropy-from-probs.
    got = findings(XLOGX["softmax_probabilities"])
    assert [f.rule for f in got] == ["xlogx-nan"]
    assert got[0].fix.kind == "auto"
    assert [e.text for e in got[0].fix.edits] == ["F.log_softmax(logits, dim=-1)"]


XLOGX_QUIET = {
    "numpy_where_guard": """
        import numpy as np
        def entropy(p):
            return -np.sum(np.where(p > 0, p * np.log(p), 0.0))
    """,
    "numpy_nansum": """
        import numpy as np
        def entropy(p):
            return -np.nansum(p * np.log(p))
    """,
    "conditional_expression": """
        import math
        def term(p):
            return p * math.log(p) if p > 0 else 0.0
    """,
    "filtered_comprehension": """
        import math
        def entropy(ps):
            return -sum(p * math.log(p) for p in ps if p != 0)
    """,
    "if_statement_in_a_loop": """
        import math
        def entropy(ps):
            h = 0.0
            for p in ps:
                if p > 0:
                    h -= p * math.log2(p)
            return h
    """,
    "early_continue": """
        import math
        def entropy(ps):
            h = 0.0
            for p in ps:
                if p == 0:
                    continue
                h -= p * math.log(p)
            return h
    """,
    "zeroed_after_it_is_stored": """
        import numpy as np
        def entropy(p):
            plogp = p * np.log(p)
            plogp[p == 0] = 0.0
            return -plogp.sum(axis=-1)
    """,
    "nan_entries_zeroed_after": """
        import numpy as np
        def entropy(p):
            h = p * np.log(p)
            h[np.isnan(h)] = 0
            return -h.sum()
    """,
    "every_later_read_guarded_in_numpy": """
        import numpy as np
        def entropy(p):
            h = p * np.log(p)
            return -np.where(p > 0, h, 0.0).sum()
    """,
    "boolean_mask": """
        import numpy as np
        def entropy(p):
            p = p[p > 0]
            return -np.sum(p * np.log(p))
    """,
    "epsilon_inside_the_log": """
        import torch
        def entropy(p):
            return -(p * torch.log(p + 1e-12)).sum()
    """,
    "clipped_probabilities": """
        import numpy as np
        def entropy(p, eps=1e-12):
            p = np.clip(p, eps, 1.0)
            return -np.sum(p * np.log(p))
    """,
    "stable_forms": """
        import numpy as np
        import torch
        from scipy.special import xlogy, entr, rel_entr
        def f(p, q, t):
            return np.sum(entr(p)) - np.sum(xlogy(p, p)) + np.sum(rel_entr(p, q)) + torch.xlogy(t, t).sum()
    """,
    "cross_term_is_not_x_log_x": """
        import numpy as np
        def ce(t, q):
            return -np.sum(t * np.log(q))
    """,
    "counts_from_one_and_integers": """
        import math
        import numpy as np
        def f(xs):
            k = np.arange(1, 100)
            return len(xs) * math.log(len(xs)) + np.sum(k * np.log(k))
    """,
    "log_of_a_log": """
        from math import log
        def bound(n):
            return log(n) * log(log(n))
    """,
    "grid_above_zero": """
        import numpy as np
        def f():
            x = np.linspace(0.1, 2.0, 50)
            return x * np.log(x)
    """,
    "user_function_called_log": """
        def log(v):
            return v
        def f(p):
            return p * log(p)
    """,
    "positive_constants": """
        import numpy as np
        c = 2 * np.log(2) + 0.5 * np.log(0.5)
    """,
    "lookalike_logger": """
        import logging
        logger = logging.getLogger()
        def f(p):
            return p * logger.log(10, p)
    """,
    "formula_in_a_string": """
        import numpy as np
        doc = "H = -np.sum(p * np.log(p))"
    """,
    "suppressed": """
        import numpy as np
        def entropy(p):
            return -np.sum(p * np.log(p))  # nanproof: allow[xlogx-nan]
    """,
}


@pytest.mark.parametrize("src", XLOGX_QUIET.values(), ids=XLOGX_QUIET.keys())
def test_ignores_guarded_stable_or_unrelated_logs(src):
    assert "xlogx-nan" not in ids(src)


@pytest.mark.parametrize("src, kind, edits", [
    (XLOGX["torch_function"], "auto", {"torch.xlogy(p, p)"}),
    (XLOGX["torch_method"], "auto", {"torch.xlogy(p, p) - torch.xlogy(p, q)"}),  # already in parentheses
    ("import torch\ndef kl(p, q, w):\n    return torch.sum(p * torch.log(p / q) * w)\n", "auto", {"(torch.xlogy(p, p) - torch.xlogy(p, q))"}),
    (XLOGX["tensorflow"], "auto", {"tf.math.xlogy(p, p)"}),
    (XLOGX["from_import_log_and_negated_factor"], "review", {"-xlogy(p, p)", "from scipy.special import xlogy\n"}),
    ("import numpy as np\nfrom scipy import special\ndef h(p):\n    return -np.sum(p * np.log(p))\n", "auto", {"special.xlogy(p, p)"}),
    ("import numpy as np\nimport scipy.special\ndef kl(p, q):\n    return np.sum(p * np.log(p / q))\n", "auto", {"scipy.special.rel_entr(p, q)"}),
    (XLOGX["math_scalars_in_a_comprehension"], "review", {"(p * math.log(p) if p != 0 else 0.0)"}),
    (XLOGX["math_log_base_two"], "review", {"(p * math.log(p, 2) if p != 0 else 0.0)"}),
    # the second where gives the discarded branch a finite gradient
    (XLOGX["torch_where_guard_keeps_nan_gradient"], "review", {"torch.where(p > 0, p, 1)"}),
    (XLOGX["jax_where_guard_keeps_nan_gradient"], "review", {"jnp.where(p == 0, 1, p)"}),
])
def test_xlogx_fix_per_framework(src, kind, edits):
    f = [f for f in findings(src) if f.rule == "xlogx-nan"][0]
    assert f.fix is not None and f.fix.kind == kind
    assert {e.text for e in f.fix.edits} == edits


def test_math_log_at_zero_is_reported_as_an_exception_not_nan():
    f = only(XLOGX["math_scalars_in_a_comprehension"], "xlogx-nan")
    assert "ValueError" in f.message


def test_gradient_guards_say_the_gradient_stays_nan():
    for key in ("torch_where_guard_keeps_nan_gradient", "torch_nansum_keeps_nan_gradient", "torch_masked_fill_after_keeps_nan_gradient"):
        assert "gradient" in only(XLOGX[key], "xlogx-nan").message


def test_entropy_in_bits_suggests_xlogy_over_log_two():
    f = only(XLOGX["entropy_in_bits"], "xlogx-nan")
    assert f.fix is None and "log(2)" in f.suggestion


# -- log-of-product ----------------------------------------------------------------------
PRODUCT = {
    "numpy": """
        import numpy as np
        def loglik(p):
            return np.log(np.prod(p))
    """,
    "numpy_over_statements_keepdims": """
        import numpy as np
        def loglik(p):
            lik = np.prod(p, axis=1, keepdims=True)
            return np.log(lik)
    """,
    "numpy_method_prod": """
        import numpy
        def loglik(p):
            return numpy.log(p.prod(1))
    """,
    "torch_function": """
        import torch
        def loglik(p):
            return torch.log(torch.prod(p, dim=1))
    """,
    "torch_methods": """
        import torch
        def loglik(p):
            return p.prod(dim=-1).log()
    """,
    "jax": """
        from jax import numpy as jnp
        def loglik(p):
            return jnp.log(jnp.prod(p, axis=0))
    """,
    "tensorflow": """
        import tensorflow as tf
        def loglik(p):
            return tf.math.log(tf.reduce_prod(p, axis=1))
    """,
    "tf1_log": """
        import tensorflow as tf
        def loglik(p):
            return tf.log(tf.reduce_prod(p, 1))
    """,
    "math_scalars": """
        import math
        def loglik(ps):
            return math.log(math.prod(ps))
    """,
    "from_math_import": """
        from math import log, prod
        def loglik(ps):
            return log(prod(p for p in ps))
    """,
    "log10": """
        import numpy as np
        def decades(p):
            return np.log10(np.prod(p))
    """,
}


@pytest.mark.parametrize("src", PRODUCT.values(), ids=PRODUCT.keys())
def test_flags_log_of_product(src):
    assert ids(src) == ["log-of-product"]


@pytest.mark.parametrize("src, text", [
    (PRODUCT["numpy"], "np.sum(np.log(p))"),
    (PRODUCT["numpy_over_statements_keepdims"], "np.sum(np.log(p), axis=1, keepdims=True)"),
    (PRODUCT["numpy_method_prod"], "numpy.log(p).sum(1)"),
    (PRODUCT["torch_function"], "torch.sum(torch.log(p), dim=1)"),
    (PRODUCT["torch_methods"], "p.log().sum(dim=-1)"),
    (PRODUCT["jax"], "jnp.sum(jnp.log(p), axis=0)"),
    (PRODUCT["tensorflow"], "tf.reduce_sum(tf.math.log(p), axis=1)"),
    (PRODUCT["math_scalars"], "math.fsum(map(math.log, ps))"),
    (PRODUCT["from_math_import"], "sum(map(log, (p for p in ps)))"),
])
def test_log_of_product_fix_sums_logs_along_the_same_axis(src, text):
    f = only(src, "log-of-product")
    assert f.fix.kind == "auto" and [e.text for e in f.fix.edits] == [text]


def test_log_of_product_over_statements_points_at_the_log():
    f = only(PRODUCT["numpy_over_statements_keepdims"], "log-of-product")
    assert f.span.line == 5 and "line 4" in f.message


def test_log_determinant_from_a_diagonal_is_only_a_review():
    f = only("import numpy as np\ndef logdet(U):\n    return np.log(np.prod(np.diag(U)))\n", "log-of-product")
    assert f.fix.kind == "review"


PRODUCT_QUIET = {
    "sum_of_logs": """
        import numpy as np
        def loglik(p):
            return np.sum(np.log(p), axis=1)
    """,
    "python_integers_are_exact": """
        import math
        def log_factorial(n):
            return math.log(math.prod(range(1, n + 1)))
    """,
    "product_of_a_shape": """
        import math
        import numpy as np
        def fan(w):
            return math.log(math.prod(w.shape)) + np.log(np.prod(w.shape[1:]))
    """,
    "product_of_named_sizes": """
        import numpy as np
        from math import prod
        def cost(kernel_size, a, b):
            full_out_shape = [n + k - 1 for n, k in zip(a, b)]
            n = prod(full_out_shape)
            return np.log(np.prod(kernel_size)) + 3 * n * np.log(n)
    """,
    "log_with_a_base": """
        import math
        def bits(ps):
            return math.log(math.prod(ps), 2)
    """,
    "formula_in_a_comment": """
        import numpy as np
        # ll = np.log(np.prod(p))
    """,
    "suppressed": """
        import numpy as np
        def loglik(p):
            return np.log(np.prod(p))  # nanproof: allow[log-of-product]
    """,
}


@pytest.mark.parametrize("src", PRODUCT_QUIET.values(), ids=PRODUCT_QUIET.keys())
def test_ignores_sums_of_logs_and_exact_products(src):
    assert "log-of-product" not in ids(src)


# -- norm-overflow -----------------------------------------------------------------------
NORM = {
    "numpy_vector": """
        import numpy as np
        def length(x):
            return np.sqrt(np.sum(x**2))
    """,
    "numpy_rows_keepdims": """
        import numpy as np
        def normalise(x):
            return x / np.sqrt(np.sum(np.square(x), axis=1, keepdims=True))
    """,
    "numpy_dot": """
        import numpy
        def length(x):
            return numpy.sqrt(numpy.dot(x, x))
    """,
    "power_one_half": """
        import numpy as np
        def length(x):
            return (x**2).sum() ** 0.5
    """,
    "numpy_pair": """
        import numpy as np
        def dist(x1, y1, x2, y2):
            return np.sqrt((x1 - x2)**2 + (y1 - y2)**2)
    """,
    "pair_over_statements": """
        from numpy import sqrt
        import numpy as np
        def dist(dx, dy):
            d2 = dx * dx + dy * dy
            return sqrt(d2)
    """,
    "math_three_terms": """
        import math
        def length(a, b, c):
            return math.sqrt(a**2 + b**2 + c**2)
    """,
    "math_list": """
        import math
        def length(xs):
            return math.sqrt(sum(v * v for v in xs))
    """,
    "torch_sum_dim": """
        import torch
        def length(x):
            return torch.sqrt(torch.sum(x**2, dim=-1))
    """,
    "torch_pair_method": """
        import torch
        def dist(a, b):
            return (a**2 + b**2).sqrt()
    """,
    "jax": """
        import jax.numpy as jnp
        def dist(a, b):
            return jnp.sqrt(a**2 + b**2)
    """,
    "tensorflow": """
        import tensorflow as tf
        def length(x):
            return tf.sqrt(tf.reduce_sum(tf.square(x), axis=-1))
    """,
}


@pytest.mark.parametrize("src", NORM.values(), ids=NORM.keys())
def test_flags_square_root_of_sum_of_squares(src):
    assert ids(src) == ["norm-overflow"]


def test_norm_overflow_is_a_note():
    assert only(NORM["numpy_pair"], "norm-overflow").severity == "note"


@pytest.mark.parametrize("src, kind, edits", [
    (NORM["numpy_pair"], "auto", {"np.hypot(x1 - x2, y1 - y2)"}),
    (NORM["pair_over_statements"], "auto", {"np.hypot(dx, dy)"}),
    (NORM["math_three_terms"], "auto", {"math.hypot(a, b, c)"}),
    (NORM["math_list"], "auto", {"math.hypot(*xs)"}),
    (NORM["torch_pair_method"], "auto", {"torch.hypot(a, b)"}),
    (NORM["jax"], "auto", {"jnp.hypot(a, b)"}),
    # numpy.linalg.norm would overflow the same: the rewrite is scipy's scaled nrm2
    (NORM["numpy_vector"], "review", {"scipy.linalg.norm(x)", "import scipy.linalg\n"}),
    (NORM["numpy_dot"], "review", {"scipy.linalg.norm(x)", "import scipy.linalg\n"}),
])
def test_norm_fix_uses_hypot_or_a_scaled_norm(src, kind, edits):
    f = only(src, "norm-overflow")
    assert f.fix is not None and f.fix.kind == kind
    assert {e.text for e in f.fix.edits} == edits


@pytest.mark.parametrize("key", ["numpy_rows_keepdims", "torch_sum_dim", "tensorflow", "power_one_half"])
def test_norm_along_an_axis_only_suggests(key):
    f = only(NORM[key], "norm-overflow")
    assert f.fix is None and f.suggestion


def test_scipy_linalg_already_imported_needs_no_new_import():
    f = only("import numpy as np\nimport scipy.linalg\ndef n(x):\n    return np.sqrt(np.sum(x**2))\n", "norm-overflow")
    assert [e.text for e in f.fix.edits] == ["scipy.linalg.norm(x)"]


NORM_QUIET = {
    "framework_norms_and_hypot": """
        import numpy as np
        import scipy.linalg
        def f(x, a, b):
            return np.linalg.norm(x) + scipy.linalg.norm(x) + np.hypot(a, b)
    """,
    "scaled_by_the_largest_magnitude": """
        import numpy as np
        def length(x):
            m = np.max(np.abs(x))
            return m * np.sqrt(np.sum((x / m)**2))
    """,
    "added_constant": """
        import numpy as np
        def smooth(a, b):
            return np.sqrt(a**2 + b**2 + 1e-12)
    """,
    "difference_of_squares": """
        import numpy as np
        def leg(c, a):
            return np.sqrt(c**2 - a**2)
    """,
    "single_square": """
        import numpy as np
        def f(a):
            return np.sqrt(a**2)
    """,
    "sum_without_squares": """
        import numpy as np
        def f(x):
            return np.sqrt(np.sum(x))
    """,
    "string": """
        import numpy as np
        doc = "np.sqrt(a**2 + b**2)"
    """,
    "suppressed": """
        import numpy as np
        def f(a, b):
            return np.sqrt(a**2 + b**2)  # nanproof: allow[norm-overflow]
    """,
}


@pytest.mark.parametrize("src", NORM_QUIET.values(), ids=NORM_QUIET.keys())
def test_ignores_stable_norms_and_lookalikes(src):
    assert "norm-overflow" not in ids(src)


def test_python_integer_grid_is_quiet():
    src = """
        import math
        def radius(n):
            out = []
            for i in range(n):
                for j in range(n):
                    out.append(math.sqrt(i * i + j * j))
            return out
    """
    assert ids(src) == []


def test_variance_inside_a_square_root_is_one_finding():
    assert ids("import numpy as np\ndef s(x):\n    return np.sqrt(np.mean(x**2) - np.mean(x)**2)\n") == ["variance-cancellation"]


def test_ignores_entropy_terms_of_positive_constant_fractions():
    # worked example: the entropy of a 3/5 - 2/5 split has no zero probability in it
    assert ids("import numpy as np\nH = -(3 / 5) * np.log(3 / 5) - (2 / 5) * np.log(2 / 5)\n") == []


@pytest.mark.parametrize("src", [
    "import jax.numpy as jnp\nclass T:\n    def f(self):\n        (n,) = self.event_shape\n        return jnp.log(n) * n\n",
    "import math\nimport jax.numpy as jnp\ndef f(event_shape):\n    size = math.prod(event_shape)\n    return size * jnp.log(size)\n",
])
def test_ignores_x_log_x_of_sizes_taken_from_shapes(src):
    assert "xlogx-nan" not in ids(src)


# -- spellings seen in real code: lax.square, a constant factor in front -----------------
def test_lax_square_in_the_moments():
    assert ids("""
        from jax import lax
        def spread(x):
            return lax.square(x).mean() - lax.square(x.mean())
    """) == ["variance-cancellation"]


@pytest.mark.parametrize("term", ["-1 * p * torch.log(p)", "p * torch.log(p) * -1"])
def test_a_minus_one_factor_is_still_an_entropy_term(term):
    assert ids(f"""
        import torch
        def spread(z):
            p = torch.softmax(z, -1)
            return ({term}).sum()
    """) == ["xlogx-nan"]


def test_entropy_of_a_configuration_scalar_is_quiet():
    assert ids("""
        import math
        def smoothing_floor(n_classes, smoothing=0.1):
            confidence = 1.0 - smoothing
            return -(confidence * math.log(confidence))
    """) == []


def test_entropy_of_counts_of_things_that_occur_is_quiet():
    assert ids("""
        import math
        from collections import Counter
        def token_entropy(tokens):
            total = len(tokens)
            h = 0.0
            for tok in set(tokens):
                count = tokens.count(tok)
                p = count / total
                h -= p * math.log(p)
            for _, c in Counter(tokens).items():
                q = c / total
                h -= q * math.log(q)
            return h
    """) == []


def test_entropy_of_bin_counts_that_may_be_zero_is_flagged():
    assert ids("""
        import numpy as np
        def bin_entropy(x, bins):
            p = np.bincount(x, minlength=bins) / len(x)
            return -np.sum(p * np.log(p))
    """) == ["xlogx-nan"]


def test_pixel_offsets_as_python_scalars_are_quiet_but_arrays_are_not():
    assert ids("""
        import math
        import numpy as np
        def reach(x0, y0, x1, y1, dx, dy, pts):
            a = math.sqrt((x1 - x0) ** 2 + (y1 - y0) ** 2)
            b = math.sqrt(dx ** 2 + dy ** 2)
            return a, b, np.sqrt(pts[:, 0] ** 2 + pts[:, 1] ** 2)
    """) == ["norm-overflow"]
