"""What the softmax-family rules report, and what they must leave alone."""
import pytest

from conftest import findings, ids

# -- softmax-unshifted ------------------------------------------------------------------
UNSHIFTED = {
    "numpy_alias_one_expression": """
        import numpy as np
        def probs(z):
            return np.exp(z) / np.sum(np.exp(z), axis=-1, keepdims=True)
    """,
    "plain_import_numpy": """
        import numpy
        def probs(z):
            e = numpy.exp(z)
            return e / numpy.sum(e)
    """,
    "from_import_exp": """
        from numpy import exp
        def probs(z):
            e = exp(z)
            return e / e.sum()
    """,
    "cupy": """
        import cupy as cp
        def probs(z):
            e = cp.exp(z)
            return e / cp.sum(e, axis=1, keepdims=True)
    """,
    "torch_methods": """
        import torch
        def probs(z):
            e = z.exp()
            return e / e.sum(dim=-1, keepdim=True)
    """,
    "torch_functions": """
        import torch
        def probs(z):
            return torch.exp(z) / torch.sum(torch.exp(z), dim=1, keepdim=True)
    """,
    "jax_from_import": """
        from jax import numpy as jnp
        def probs(z):
            e = jnp.exp(z)
            return e / jnp.sum(e, axis=-1, keepdims=True)
    """,
    "tensorflow": """
        import tensorflow as tf
        def probs(z):
            e = tf.exp(z)
            return e / tf.reduce_sum(e, axis=-1, keepdims=True)
    """,
    "tf_math_and_tf1_keep_dims": """
        import tensorflow as tf
        def probs(z):
            e = tf.math.exp(z)
            return e / tf.reduce_sum(e, axis=1, keep_dims=True)
    """,
    "temperature": """
        import numpy as np
        def probs(z, temperature):
            e = np.exp(z / temperature)
            return e / e.sum(axis=-1, keepdims=True)
    """,
    "augmented_division": """
        import numpy as np
        def probs(z):
            e = np.exp(z)
            e /= e.sum(axis=1, keepdims=True)
            return e
    """,
    "masked": """
        import torch
        def probs(z, mask):
            e = torch.exp(z) * mask
            return e / e.sum(dim=-1, keepdim=True)
    """,
    "module_level_script": """
        import numpy as np
        logits = np.random.randn(8, 3) * 50
        weights = np.exp(logits)
        weights = weights / weights.sum(axis=1, keepdims=True)
    """,
    "max_taken_of_other_values": """
        import numpy as np
        def probs(z, other):
            e = np.exp(z - other.max())
            return e / e.sum()
    """.replace("other.max()", "np.mean(z)"),
}


@pytest.mark.parametrize("src", UNSHIFTED.values(), ids=UNSHIFTED.keys())
def test_flags_softmax_without_max_shift(src):
    assert "softmax-unshifted" in ids(src)


def test_split_softmax_points_at_division_and_names_the_exp_line():
    (f,) = [f for f in findings("""
        import numpy as np
        def probs(z):
            e = np.exp(z)
            total = e.sum()
            return e / total
    """) if f.rule == "softmax-unshifted"]
    assert f.span.line == 6
    assert "line 4" in f.message and "5" in f.message


STABLE = {
    "shift_in_place": """
        import numpy as np
        def probs(z):
            z = z - z.max(axis=-1, keepdims=True)
            e = np.exp(z)
            return e / e.sum(axis=-1, keepdims=True)
    """,
    "augmented_shift_torch_values": """
        import torch
        def probs(z):
            z -= z.max(dim=-1, keepdim=True)[0]
            e = torch.exp(z)
            return e / e.sum(dim=-1, keepdim=True)
    """,
    "shift_by_named_max": """
        import numpy as np
        def probs(z):
            m = np.max(z, axis=1)[:, None]
            e = np.exp(z - m)
            return e / e.sum(axis=1, keepdims=True)
    """,
    "global_max": """
        import jax.numpy as jnp
        def probs(z):
            e = jnp.exp(z - jnp.max(z))
            return e / jnp.sum(e)
    """,
    "tf_reduce_max": """
        import tensorflow as tf
        def probs(z):
            e = tf.exp(z - tf.reduce_max(z, axis=-1, keepdims=True))
            return e / tf.reduce_sum(e, axis=-1, keepdims=True)
    """,
    "energy_with_min_added": """
        import numpy as np
        def boltzmann(energy, kT):
            w = np.exp(-(energy - energy.min()) / kT)
            return w / w.sum()
    """,
    "exp_of_log_softmax": """
        import torch
        import torch.nn.functional as F
        def probs(z):
            e = torch.exp(F.log_softmax(z, dim=-1))
            return e / e.sum(dim=-1, keepdim=True)
    """,
    "exp_of_negative_square": """
        import numpy as np
        def kernel_weights(d):
            w = np.exp(-d ** 2)
            return w / w.sum()
    """,
    "exp_of_clipped": """
        import numpy as np
        def probs(z):
            e = np.exp(np.clip(z, -50, 50))
            return e / e.sum()
    """,
    "shift_by_unknown_value": """
        import numpy as np
        def probs(z, offset):
            e = np.exp(z - offset)
            return e / e.sum()
    """,
    "framework_softmax": """
        import torch
        def probs(z):
            return torch.softmax(z, dim=-1)
    """,
    "user_defined_exp": """
        def exp(v):
            return v
        def probs(z):
            e = exp(z)
            return e / sum(e)
    """,
    "small_literal_inputs": """
        import numpy as np
        z = np.array([1.0, 2.0, 3.0])
        p = np.exp(z) / np.sum(np.exp(z))
    """,
    "in_a_string_and_comment": '''
        DOC = "p = np.exp(z) / np.sum(np.exp(z))"
        # p = np.exp(z) / np.sum(np.exp(z))
    ''',
    "suppressed": """
        import numpy as np
        def probs(z):
            return np.exp(z) / np.sum(np.exp(z))  # nanproof: allow[softmax-unshifted]
    """,
    "suppressed_file_wide": """
        # nanproof: allow-file[softmax-unshifted]
        import numpy as np
        def probs(z):
            return np.exp(z) / np.sum(np.exp(z))
    """,
    "shift_in_one_branch_only_is_unsure": """
        import numpy as np
        def probs(z, stable):
            if stable:
                z = z - z.max()
            e = np.exp(z)
            return e / e.sum()
    """,
}


@pytest.mark.parametrize("src", STABLE.values(), ids=STABLE.keys())
def test_ignores_shifted_bounded_or_unrelated_softmax(src):
    assert "softmax-unshifted" not in ids(src)


def test_suppression_on_first_line_covers_a_multiline_statement():
    assert ids("""
        import numpy as np
        def probs(z):
            return (np.exp(z)  # nanproof: allow
                    / np.sum(np.exp(z)))
    """) == []


def test_fix_inserts_shift_with_the_files_alias_and_axis():
    (f,) = findings("""
        import numpy as np
        def probs(z):
            return np.exp(z) / np.sum(np.exp(z), axis=1, keepdims=True)
    """)
    assert f.fix.kind == "auto"
    assert [e.text for e in f.fix.edits] == ["z - np.max(z, axis=1, keepdims=True)"] * 2


def test_fix_of_torch_method_softmax_uses_amax_with_dim():
    (f,) = findings("""
        def probs(z):
            e = z.exp()
            return e / e.sum(dim=-1, keepdim=True)
    """)
    assert f.fix.edits[0].text == "(z - z.amax(dim=-1, keepdim=True))"


def test_fix_is_review_when_exp_values_are_used_elsewhere():
    (f,) = findings("""
        import numpy as np
        def probs(z):
            e = np.exp(z)
            p = e / e.sum()
            return p, e
    """)
    assert f.fix.kind == "review"


# -- normalize-missing-keepdims ---------------------------------------------------------
@pytest.mark.parametrize("src", [
    """
    import numpy as np
    def normalise(counts):
        return counts / counts.sum(axis=1)
    """,
    """
    import torch
    def normalise(w):
        return w / w.sum(1)
    """,
    """
    import numpy as np
    def normalise():
        a = np.random.rand(5, 5)
        return a / np.sum(a, axis=-1)
    """,
    """
    import tensorflow as tf
    def normalise(w):
        return w / tf.reduce_sum(w, axis=1)
    """,
])
def test_flags_inner_axis_reduction_without_keepdims(src):
    assert "normalize-missing-keepdims" in ids(src)


@pytest.mark.parametrize("src", [
    "import numpy as np\ndef f(a):\n    return a / a.sum(axis=1, keepdims=True)\n",
    "import numpy as np\ndef f(a):\n    return a / a.sum(axis=1)[:, None]\n",
    "import numpy as np\ndef f(a):\n    return a / a.sum(axis=1).reshape(-1, 1)\n",
    "import numpy as np\ndef f(a):\n    return a / a.sum(axis=0)\n",
    "import numpy as np\ndef f(a):\n    return a / a.sum(axis=-1)\n",
    "import tensorflow as tf\ndef f(a):\n    return a / tf.reduce_sum(a, axis=1, keep_dims=True)\n",
    "import numpy as np\ndef f(a, b):\n    return a / b.sum(axis=1)\n",
])
def test_ignores_reductions_that_broadcast_correctly_or_have_unknown_rank(src):
    assert "normalize-missing-keepdims" not in ids(src)


def test_keepdims_fix_uses_keepdim_for_torch_and_keeps_the_call():
    (f,) = findings("import torch\ndef f(w):\n    return w / w.sum(1)\n")
    assert f.fix.kind == "auto" and f.fix.edits[0].text == "w.sum(1, keepdim=True)"


# -- log-of-softmax ----------------------------------------------------------------------
@pytest.mark.parametrize("src", [
    "import torch\nimport torch.nn.functional as F\ndef f(x):\n    return torch.log(F.softmax(x, dim=1))\n",
    "from torch.nn import functional as F\ndef f(x):\n    return F.softmax(x, dim=-1).log()\n",
    "import numpy as np\nfrom scipy.special import softmax\ndef f(x):\n    return np.log(softmax(x, axis=1))\n",
    "import jax\nimport jax.numpy as jnp\ndef f(x):\n    p = jax.nn.softmax(x)\n    return jnp.log(p)\n",
    "import tensorflow as tf\ndef f(x):\n    p = tf.nn.softmax(x)\n    return tf.log(p)\n",
    # hand-written softmax
    "import numpy as np\ndef f(z):\n    e = np.exp(z - z.max())\n    p = e / e.sum()\n    return np.log(p)\n",
    # a helper of the same module
    "import numpy as np\ndef softmax(z):\n    e = np.exp(z - z.max())\n    return e / e.sum()\ndef f(z):\n    return np.log(softmax(z))\n",
    # a module held on self
    "import torch\nclass Net(torch.nn.Module):\n    def __init__(self):\n        super().__init__()\n        self.act = torch.nn.Softmax(dim=1)\n    def forward(self, h):\n        return torch.log(self.act(h))\n",
    # an activation handed to a layer
    "import tensorflow as tf\ndef f(h):\n    out = tf.keras.layers.Dense(10, activation='softmax')(h)\n    return tf.math.log(out)\n",
])
def test_flags_log_of_softmax_in_any_spelling(src):
    assert "log-of-softmax" in ids(src)


@pytest.mark.parametrize("src", [
    "import torch.nn.functional as F\ndef f(x):\n    return F.log_softmax(x, dim=1)\n",
    "import numpy as np\nfrom scipy.special import softmax\ndef f(x):\n    return np.log(softmax(x) + 1e-12)\n",
    "import logging\nlog = logging.getLogger(__name__)\ndef f(x):\n    log.info('softmax %s', x)\n",
    "import math\ndef f(n):\n    return math.log(n, 2)\n",
    "import numpy as np\ndef f(x):\n    return np.log(np.abs(x))\n",
])
def test_ignores_log_softmax_and_lookalikes(src):
    assert "log-of-softmax" not in ids(src)


def test_log_of_softmax_fix_keeps_alias_and_dim():
    (f,) = findings("import torch\nimport torch.nn.functional as F\ndef f(x):\n    return torch.log(F.softmax(x, dim=1))\n")
    assert f.fix.kind == "auto" and f.fix.edits[0].text == "F.log_softmax(x, dim=1)"


def test_log_of_from_imported_softmax_adds_an_import_for_review():
    (f,) = findings("import numpy as np\nfrom scipy.special import softmax\ndef f(x):\n    return np.log(softmax(x, axis=1))\n")
    assert f.fix.kind == "review"
    assert any(e.text == "from scipy.special import log_softmax\n" for e in f.fix.edits)


def test_unshifted_softmax_then_log_is_two_findings():
    got = ids("import numpy as np\ndef f(z):\n    p = np.exp(z) / np.exp(z).sum()\n    return np.log(p)\n")
    assert sorted(got) == ["log-of-softmax", "softmax-unshifted"]


# -- logsumexp-unshifted and logaddexp-manual -------------------------------------------
@pytest.mark.parametrize("src", [
    "import numpy as np\ndef f(x):\n    return np.log(np.sum(np.exp(x), axis=1))\n",
    "import torch\ndef f(x):\n    return torch.log(torch.exp(x).sum(dim=-1))\n",
    "def f(x):\n    return x.exp().sum(-1).log()\n",
    "import tensorflow as tf\ndef f(x):\n    return tf.math.log(tf.reduce_sum(tf.exp(x), axis=-1))\n",
    "import math\ndef f(xs):\n    return math.log(sum(math.exp(v) for v in xs))\n",
    "import numpy as np\ndef f(d):\n    s = np.sum(np.exp(-d ** 2))\n    return np.log(s)\n",
])
def test_flags_log_sum_exp_without_shift(src):
    assert "logsumexp-unshifted" in ids(src)


@pytest.mark.parametrize("src", [
    "import numpy as np\ndef f(x):\n    m = x.max()\n    return m + np.log(np.sum(np.exp(x - m)))\n",
    "import torch\ndef f(x):\n    return torch.logsumexp(x, dim=-1)\n",
    "import numpy as np\ndef f(x):\n    return np.log(np.sum(x))\n",
])
def test_ignores_shifted_or_framework_log_sum_exp(src):
    assert "logsumexp-unshifted" not in ids(src)


def test_logaddexp_flagged_and_fixed_with_alias():
    (f,) = findings("import numpy as np\ndef f(a, b):\n    return np.log(np.exp(a) + np.exp(b))\n")
    assert f.rule == "logaddexp-manual" and f.fix.edits[0].text == "np.logaddexp(a, b)"


def test_logaddexp_quiet_when_both_terms_are_shifted():
    assert ids("import numpy as np\ndef f(a, b):\n    m = np.maximum(a, b)\n    return m + np.log(np.exp(a - m) + np.exp(b - m))\n") == []


# -- cross-entropy-from-probs ----------------------------------------------------------
@pytest.mark.parametrize("src", [
    "import torch\nimport torch.nn.functional as F\ndef f(x, y):\n    return F.nll_loss(torch.log(F.softmax(x, dim=1)), y)\n",
    "import torch\nimport torch.nn.functional as F\ndef f(x, y):\n    p = F.softmax(x, dim=1)\n    lp = torch.log(p)\n    return F.nll_loss(lp, y)\n",
    "import torch\nimport torch.nn as nn\ndef f(x, y):\n    crit = nn.NLLLoss()\n    return crit(torch.log(torch.softmax(x, 1)), y)\n",
    "import numpy as np\ndef f(z, t):\n    e = np.exp(z - z.max(axis=1, keepdims=True))\n    p = e / e.sum(axis=1, keepdims=True)\n    return -np.sum(t * np.log(p)) / len(t)\n",
    "import numpy as np\ndef f(z, y):\n    e = np.exp(z - z.max(axis=1, keepdims=True))\n    p = e / e.sum(axis=1, keepdims=True)\n    return -np.log(p[range(len(y)), y]).mean()\n",
    "import tensorflow as tf\ndef f(x, t):\n    p = tf.nn.softmax(x)\n    return -tf.reduce_mean(tf.reduce_sum(t * tf.math.log(p), axis=1))\n",
])
def test_flags_likelihood_of_softmax_probabilities(src):
    got = ids(src)
    assert "cross-entropy-from-probs" in got and "log-of-softmax" not in got


def test_entropy_of_softmax_is_not_a_cross_entropy():
    got = ids("import torch\ndef f(x):\n    p = torch.softmax(x, -1)\n    return -(p * torch.log(p)).sum(-1)\n")
    assert "cross-entropy-from-probs" not in got


def test_ignores_cross_entropy_on_logits():
    assert ids("import torch.nn.functional as F\ndef f(x, y):\n    return F.cross_entropy(x, y) + F.nll_loss(F.log_softmax(x, 1), y)\n") == []


# -- softmax-jacobian-dense ------------------------------------------------------------
@pytest.mark.parametrize("src", [
    "import numpy as np\ndef back(s, g):\n    J = np.diag(s) - np.outer(s, s)\n    return J @ g\n",
    "import torch\ndef backward(ctx, g):\n    y, = ctx.saved_tensors\n    J = torch.diag_embed(y) - y.unsqueeze(-1) * y.unsqueeze(-2)\n    return (J @ g.unsqueeze(-1)).squeeze(-1)\n",
    "import numpy as np\ndef back(s, g):\n    J = np.diag(s) - np.einsum('i,j->ij', s, s)\n    return np.dot(J, g)\n",
    "import numpy as np\ndef grad_softmax(s, g):\n    J = np.eye(len(s)) * s - s[:, None] * s[None, :]\n    return g @ J\n",
    "import numpy as np\ndef jac(z):\n    e = np.exp(z - z.max())\n    y = e / e.sum()\n    return np.diag(y) - np.outer(y, y)\n",
    "import numpy as np\ndef back(y, g):\n    n = len(y)\n    J = np.zeros((n, n))\n    for i in range(n):\n        for j in range(n):\n            J[i, j] = y[i] * ((i == j) - y[j])\n    return J @ g\n",
    "import torch\nimport torch.nn.functional as F\ndef f(x):\n    return torch.autograd.functional.jacobian(lambda v: F.softmax(v, dim=-1), x)\n",
    "import jax\ndef f(x):\n    return jax.jacobian(jax.nn.softmax)(x)\n",
])
def test_flags_dense_softmax_jacobian(src):
    assert "softmax-jacobian-dense" in ids(src)


@pytest.mark.parametrize("src", [
    "import numpy as np\ndef back(y, g):\n    return y * (g - np.sum(y * g, axis=-1, keepdims=True))\n",
    "import numpy as np\ndef cov(p):\n    return np.diag(p) - np.outer(p, p)\n",
    "import numpy as np\ndef f(a, b, g):\n    J = np.diag(a) - np.outer(b, b)\n    return J @ g\n",
    "import jax\ndef f(x):\n    return jax.jacobian(jax.numpy.tanh)(x)\n",
])
def test_ignores_vjp_covariance_and_unrelated_matrices(src):
    assert "softmax-jacobian-dense" not in ids(src)


def test_jacobian_used_only_in_a_product_is_fixed_automatically():
    (f,) = findings("import numpy as np\ndef back(s, g):\n    J = np.diag(s) - np.outer(s, s)\n    return J @ g\n")
    assert f.fix.kind == "auto"
    assert f.fix.edits[0].text == "s * (g - np.sum(s * g, axis=-1, keepdims=True))"


# -- softmax-implicit-dim --------------------------------------------------------------
@pytest.mark.parametrize("src", [
    "import torch.nn.functional as F\ndef f(x):\n    return F.softmax(x)\n",
    "from torch.nn.functional import log_softmax\ndef f(x):\n    return log_softmax(x)\n",
    "import torch.nn as nn\nact = nn.Softmax()\n",
    "from torch import nn\nact = nn.LogSoftmax()\n",
])
def test_flags_softmax_without_dim(src):
    assert "softmax-implicit-dim" in ids(src)


@pytest.mark.parametrize("src", [
    "import torch.nn.functional as F\ndef f(x):\n    return F.softmax(x, 1)\n",
    "import torch.nn as nn\nact = nn.Softmax(dim=-1)\n",
    "from scipy.special import softmax\ndef f(x):\n    return softmax(x)\n",
    "import jax\ndef f(x):\n    return jax.nn.softmax(x)\n",
])
def test_ignores_softmax_with_dim_or_of_other_frameworks(src):
    assert "softmax-implicit-dim" not in ids(src)


def test_flags_element_loop_with_diagonal_branch():
    src = """
        import numpy as np
        def softmax_grad(y, g):
            n = y.shape[0]
            J = np.empty((n, n))
            for i in range(n):
                for j in range(n):
                    if i == j:
                        J[i, j] = y[i] * (1 - y[j])
                    else:
                        J[i, j] = -y[i] * y[j]
            return J.dot(g)
    """
    assert ids(src).count("softmax-jacobian-dense") == 2


@pytest.mark.parametrize("src", [
    # a Gram matrix of inner products: pairs of rows, not a Jacobian
    """
    import numpy as np
    def gram(rows, w0):
        n = len(rows)
        a = np.zeros((n, n))
        for i in range(n):
            for j in range(i, n):
                a[i, j] = (1 + w0) * np.vdot(rows[i], rows[j])
        return a
    """,
    # a covariance built from counts of pairs
    """
    import numpy as np
    def pair_cov(counts, n):
        m = len(counts)
        cov = np.empty((m, m))
        for j in range(m):
            for k in range(j, m):
                cov[j, k] = n * (counts[j] + 1) * (counts[k] + 1) / 3.0
        return cov
    """,
])
def test_ignores_element_loops_that_are_not_a_softmax_jacobian(src):
    assert "softmax-jacobian-dense" not in ids(src)


def test_adding_an_unseen_value_is_not_a_shift():
    src = """
        import numpy as np
        def mixture_loglik(log_weights, component_logdens):
            joint = log_weights + component_logdens
            return np.log(np.sum(np.exp(joint), axis=1))
    """
    assert ids(src) == ["logsumexp-unshifted"]


def test_hand_written_numpy_softmax_in_a_file_that_also_imports_torch_gets_a_numpy_rewrite():
    (f,) = findings("""
        import numpy as np
        import torch
        def f(z):
            e = np.exp(z - z.max(axis=1, keepdims=True))
            p = e / e.sum(axis=1, keepdims=True)
            return np.log(p)
    """)
    assert f.rule == "log-of-softmax"
    assert f.fix.edits[0].text == "z - np.logaddexp.reduce(z, axis=1, keepdims=True)"


def test_log_softmax_import_is_not_added_when_the_name_is_taken():
    got = findings("""
        import numpy as np
        from scipy.special import softmax
        def f(x):
            log_softmax = 3
            return np.log(softmax(x, axis=1)) + log_softmax
    """)
    assert [(f.rule, f.fix) for f in got] == [("log-of-softmax", None)]


def test_flags_likelihood_of_probabilities_a_method_keeps_on_self():
    src = """
        import numpy as np
        class Net:
            def forward(self, X):
                scores = X @ self.W
                e = np.exp(scores - scores.max(axis=1, keepdims=True))
                self.probs = e / np.sum(e, axis=1, keepdims=True)
                return self.probs

            def loss(self, X, y):
                probs = self.forward(X)
                return -np.log(probs[range(len(y)), y]).mean()
    """
    assert ids(src) == ["cross-entropy-from-probs"]


def test_an_attribute_set_in_two_places_is_not_taken_for_a_softmax():
    src = """
        import numpy as np
        class Net:
            def forward(self, X):
                e = np.exp(X - X.max())
                self.out = e / e.sum()
                return self.out

            def reset(self):
                self.out = np.ones(3)

            def loss(self, y):
                return -np.log(self.out[y])
    """
    assert ids(src) == []


def test_keepdims_fix_is_withheld_where_the_array_may_be_a_pandas_frame():
    (f,) = findings("""
        import pandas as pd
        def shares(df):
            return df / df.sum(axis=1)
    """)
    assert f.rule == "normalize-missing-keepdims" and f.fix is None and ".div(" in f.suggestion


@pytest.mark.parametrize("src", [
    "import tensorflow as tf\ndef f(x, t):\n    return tf.keras.losses.categorical_crossentropy(t, tf.nn.softmax(x))\n",
    "import tensorflow as tf\ndef f(x, y):\n    p = tf.nn.softmax(x, axis=-1)\n    loss = tf.keras.losses.SparseCategoricalCrossentropy()\n    return loss(y, p)\n",
    "from tensorflow import keras\nimport numpy as np\ndef f(z, t):\n    e = np.exp(z - z.max(axis=1, keepdims=True))\n    return keras.losses.categorical_crossentropy(t, e / e.sum(axis=1, keepdims=True))\n",
])
def test_flags_keras_cross_entropy_of_explicit_softmax_probabilities(src):
    assert "cross-entropy-from-probs" in ids(src)


@pytest.mark.parametrize("src", [
    "import tensorflow as tf\ndef f(x, t):\n    return tf.keras.losses.categorical_crossentropy(t, x, from_logits=True)\n",
    "import tensorflow as tf\ndef f(h, t):\n    out = tf.keras.layers.Dense(10, activation='softmax')(h)\n    return tf.keras.losses.categorical_crossentropy(t, out)\n",
    "import tensorflow as tf\ndef f(x, t):\n    return tf.keras.losses.categorical_crossentropy(t, tf.nn.softmax(x), from_logits=False, **{})\n",
])
def test_ignores_keras_losses_on_logits_or_on_softmax_layers(src):
    assert "cross-entropy-from-probs" not in ids(src)


def test_keras_cross_entropy_is_found_when_it_is_the_only_rule_run():
    from nanproof.api import scan_source
    from nanproof.config import Config

    src = "import tensorflow as tf\nfrom mylib import probs\ndef f(x, t):\n    return tf.keras.losses.categorical_crossentropy(t, tf.nn.softmax(x))\n"
    got = scan_source(src, "m.py", Config(rules=frozenset({"cross-entropy-from-probs"}))).findings
    assert [f.rule for f in got] == ["cross-entropy-from-probs"]


# -- spellings seen in real code: division functions, guarded sums, two terms, log-mean-exp
@pytest.mark.parametrize("division", [
    "torch.div(e, e.sum(-1, keepdim=True))",
    "e.div(e.sum(dim=-1, keepdim=True))",
    "torch.true_divide(e, e.sum(-1, keepdim=True))",
    "e / (e.sum(-1, keepdim=True) + 1e-8)",
    "e / e.sum(-1, keepdim=True).clamp(min=1e-12)",
])
def test_softmax_division_spellings_torch(division):
    assert ids(f"""
        import torch
        def tide_weights(z):
            e = torch.exp(z)
            return {division}
    """) == ["softmax-unshifted"]


@pytest.mark.parametrize("division", ["np.divide(e, np.sum(e, axis=1, keepdims=True))", "tf_like(e)"])
def test_numpy_divide_is_a_division_and_a_user_function_is_not(division):
    expected = ["softmax-unshifted"] if division.startswith("np.") else []
    assert ids(f"""
        import numpy as np
        def tf_like(v):
            return v
        def tide_weights(z):
            e = np.exp(z)
            return {division}
    """) == expected


def test_tf_divide_is_a_division():
    assert ids("""
        import tensorflow as tf
        def tide_weights(z):
            e = tf.exp(z)
            return tf.divide(e, tf.reduce_sum(e, axis=-1, keepdims=True))
    """) == ["softmax-unshifted"]


def test_a_shifted_softmax_through_torch_div_is_quiet():
    assert ids("""
        import torch
        def tide_weights(z):
            e = torch.exp(z - z.amax(-1, keepdim=True))
            return torch.div(e, e.sum(-1, keepdim=True))
    """) == []


def test_an_epsilon_in_the_denominator_makes_the_shift_a_review_fix():
    [f] = findings("""
        import numpy as np
        def tide_weights(z, eps=1e-8):
            e = np.exp(z)
            return e / (e.sum(axis=-1, keepdims=True) + eps)
    """)
    assert f.rule == "softmax-unshifted" and f.fix.kind == "review" and "epsilon" in f.message


def test_a_two_term_softmax_written_out():
    [f] = findings("""
        import numpy as np
        def share(a, b):
            ea, eb = np.exp(a), np.exp(b)
            return ea / (ea + eb)
    """)
    assert f.rule == "softmax-unshifted" and f.fix is None and "sigmoid(a - b)" in f.suggestion


def test_a_two_term_softmax_of_shifted_scores_is_quiet():
    assert ids("""
        import numpy as np
        def share(a, b):
            m = np.maximum(a, b)
            ea, eb = np.exp(a - m), np.exp(b - m)
            return ea / (ea + eb)
    """) == []


def test_log_mean_exp_is_an_unshifted_log_sum_exp():
    [f] = findings("""
        import numpy as np
        def bound(w):
            return np.log(np.mean(np.exp(w)))
    """)
    assert f.rule == "logsumexp-unshifted" and "log-mean-exp" in f.message and f.fix is None and "log(n)" in f.suggestion


def test_a_multiplicative_weight_update_renormalised_is_not_a_softmax():
    assert ids("""
        import numpy as np
        def reweight(w, y, h, step):
            w *= np.exp(-step * y * h)
            w /= w.sum()
            return w
    """) == []


def test_weights_rebuilt_from_exp_alone_are_a_softmax():
    assert ids("""
        import numpy as np
        def reweight(scores):
            w = np.exp(scores)
            w /= w.sum()
            return w
    """) == ["softmax-unshifted"]
