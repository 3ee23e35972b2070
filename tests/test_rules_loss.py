"""What the loss-family rules report (bce-from-sigmoid, log-of-sigmoid, log-epsilon-guard),
what they must leave alone, and which rule speaks when patterns overlap."""
import pytest

from conftest import findings, ids

BCE, LOS, GUARD = "bce-from-sigmoid", "log-of-sigmoid", "log-epsilon-guard"


def only(src, rule):
    """The findings of ``rule`` in ``src``."""
    return [f for f in findings(src) if f.rule == rule]


# -- bce-from-sigmoid: framework losses --------------------------------------------------
BCE_API = {
    "torch_F_one_expression": """
        import torch
        import torch.nn.functional as F
        def loss(x, t):
            return F.binary_cross_entropy(torch.sigmoid(x), t)
    """,
    "torch_two_statements_full_path": """
        import torch
        def loss(x, t):
            s = torch.sigmoid(x)
            return torch.nn.functional.binary_cross_entropy(s, t, reduction="sum")
    """,
    "torch_from_import_and_tensor_method": """
        from torch.nn.functional import binary_cross_entropy
        def loss(x, t):
            return binary_cross_entropy(x.sigmoid(), target=t)
    """,
    "torch_special_expit_clamped": """
        import torch
        import torch.nn.functional as F
        def loss(x, t, eps=1e-7):
            p = torch.special.expit(x).clamp(eps, 1 - eps)
            return F.binary_cross_entropy(p, t)
    """,
    "BCELoss_inline": """
        import torch
        import torch.nn as nn
        def loss(x, t):
            return nn.BCELoss()(torch.sigmoid(x), t)
    """,
    "BCELoss_criterion_object": """
        import torch
        from torch import nn
        def train(model, batches):
            crit = nn.BCELoss()
            for x, t in batches:
                p = torch.sigmoid(model(x))
                loss = crit(p, t)
                loss.backward()
    """,
    "criterion_and_model_at_module_level": """
        import torch
        from torch import nn
        model = nn.Sequential(nn.Linear(8, 1), nn.Sigmoid())
        criterion = nn.BCELoss()
        for x, t in loader:
            out = model(x)
            loss = criterion(out, t)
    """,
    "criterion_on_self_sigmoid_module_on_self": """
        import torch
        from torch import nn
        class Net(nn.Module):
            def __init__(self):
                super().__init__()
                self.fc = nn.Linear(4, 1)
                self.out = nn.Sigmoid()
                self.loss_fn = nn.BCELoss()
            def forward(self, x):
                return self.out(self.fc(x))
            def training_step(self, x, t):
                pred = self.forward(x)
                return self.loss_fn(pred, t)
    """,
    "hand_written_sigmoid_into_torch_loss": """
        import torch
        import torch.nn.functional as F
        def loss(x, t):
            p = 1 / (1 + torch.exp(-x))
            return F.binary_cross_entropy(p, t)
    """,
    "keras_function": """
        import tensorflow as tf
        def loss(x, t):
            return tf.keras.losses.binary_crossentropy(t, tf.sigmoid(x))
    """,
    "keras_class_inline_from_logits_false": """
        import tensorflow as tf
        def loss(x, t):
            return tf.keras.losses.BinaryCrossentropy(from_logits=False)(t, tf.math.sigmoid(x))
    """,
    "keras_loss_object_from_keras_import": """
        import tensorflow as tf
        from tensorflow import keras
        bce = keras.losses.BinaryCrossentropy(label_smoothing=0.1)
        def step(x, t):
            p = tf.nn.sigmoid(x)
            return bce(t, p)
    """,
    "keras_backend": """
        import tensorflow as tf
        from tensorflow.keras import backend as K
        def loss(x, t):
            return K.binary_crossentropy(t, tf.sigmoid(x))
    """,
}


@pytest.mark.parametrize("name", BCE_API)
def test_flags_framework_bce_of_sigmoid(name):
    assert BCE in ids(BCE_API[name])


def test_criterion_used_on_a_line_without_trigger_words_is_found_from_its_construction():
    # the use line holds no log/loss word: the prefilter drops it, the constructor leads there
    fs = only(BCE_API["criterion_and_model_at_module_level"], BCE)
    assert [(f.span.line, f.span.column) for f in fs] == [(8, 12)]


def test_bce_points_at_the_loss_call_and_names_the_sigmoid_line():
    (f,) = only(BCE_API["torch_two_statements_full_path"], BCE)
    assert (f.span.line, f.span.column, f.span.end_line) == (5, 12, 5)
    assert "from line 4" in f.message


BCE_API_CLEAN = {
    "with_logits_function": """
        import torch.nn.functional as F
        def loss(x, t):
            return F.binary_cross_entropy_with_logits(x, t)
    """,
    "with_logits_module": """
        import torch.nn as nn
        crit = nn.BCEWithLogitsLoss(pos_weight=None)
        def loss(x, t):
            return crit(x, t)
    """,
    "probabilities_are_data": """
        import torch.nn.functional as F
        def loss(p, t):
            return F.binary_cross_entropy(p, t)
    """,
    "keras_from_logits_true_even_on_a_sigmoid": """
        import tensorflow as tf
        def loss(x, t):
            return tf.keras.losses.binary_crossentropy(t, tf.sigmoid(x), from_logits=True)
    """,
    "keras_class_from_logits_positional": """
        import tensorflow as tf
        def loss(x, t):
            return tf.keras.losses.BinaryCrossentropy(True)(t, tf.sigmoid(x))
    """,
    # Keras keeps the logits of its own sigmoid activations for its cross-entropy.
    "keras_layer_activation_with_keras_loss": """
        import tensorflow as tf
        model = tf.keras.Sequential([tf.keras.layers.Dense(1, activation="sigmoid")])
        def loss(x, t):
            return tf.keras.losses.binary_crossentropy(t, model(x))
    """,
    "user_function_named_like_the_loss": """
        import torch
        def binary_cross_entropy(p, t):
            return (p - t) ** 2
        def loss(x, t):
            return binary_cross_entropy(torch.sigmoid(x), t)
    """,
    "loss_object_rebound_in_a_branch": """
        import torch
        from torch import nn
        def loss(x, t, soft):
            crit = nn.BCELoss()
            if soft:
                crit = nn.MSELoss()
            return crit(torch.sigmoid(x), t)
    """,
}


@pytest.mark.parametrize("name", BCE_API_CLEAN)
def test_ignores_stable_or_unrelated_bce(name):
    assert BCE not in ids(BCE_API_CLEAN[name])


# -- bce-from-sigmoid: written out -------------------------------------------------------
BCE_WRITTEN = {
    "torch_one_expression_mean": """
        import torch
        def loss(x, t):
            s = torch.sigmoid(x)
            return -(t * torch.log(s) + (1 - t) * torch.log(1 - s)).mean()
    """,
    "numpy_hand_written_sigmoid_np_mean": """
        import numpy as np
        def loss(w, X, y):
            p = 1 / (1 + np.exp(-X @ w))
            return -np.mean(y * np.log(p) + (1 - y) * np.log(1 - p))
    """,
    "numpy_plain_import_terms_in_statements": """
        import numpy
        def loss(z, y):
            p = 1.0 / (1.0 + numpy.exp(-z))
            pos = y * numpy.log(p)
            neg = (1 - y) * numpy.log(1 - p)
            return -numpy.sum(pos + neg) / len(y)
    """,
    "from_numpy_import_with_expit": """
        from numpy import log, mean
        from scipy.special import expit
        def loss(z, y):
            s = expit(z)
            return mean(-y * log(s) - (1 - y) * log(1 - s))
    """,
    "augmented_assignment": """
        import torch
        def loss(x, t):
            s = x.sigmoid()
            ll = t * s.log()
            ll += (1 - t) * (1 - s).log()
            return -ll.sum()
    """,
    "separate_sums": """
        import numpy as np
        from scipy.special import expit
        def loss(z, y):
            s = expit(z)
            return -np.sum(y * np.log(s)) - np.sum((1 - y) * np.log(1 - s))
    """,
    "epsilon_guarded_terms": """
        import numpy as np
        EPS = 1e-12
        def loss(z, y):
            p = 1 / (1 + np.exp(-z))
            return -np.mean(y * np.log(p + EPS) + (1 - y) * np.log(1 - p + EPS))
    """,
    "clipped_probability": """
        import numpy as np
        def sigmoid(z):
            return 1 / (1 + np.exp(-z))
        def loss(z, y):
            p = np.clip(sigmoid(z), 1e-7, 1 - 1e-7)
            return -np.mean(y * np.log(p) + (1 - y) * np.log(1 - p))
    """,
    "jax": """
        import jax
        from jax import numpy as jnp
        def loss(x, y):
            s = jax.nn.sigmoid(x)
            return -jnp.mean(y * jnp.log(s) + (1 - y) * jnp.log(1 - s))
    """,
    "tensorflow_tf1_log": """
        import tensorflow as tf
        def loss(x, y):
            s = tf.sigmoid(x)
            return -tf.reduce_mean(y * tf.log(s) + (1 - y) * tf.log(1 - s))
    """,
    "math_scalars": """
        import math
        def loss(x, y):
            s = 1 / (1 + math.exp(-x))
            return -(y * math.log(s) + (1 - y) * math.log(1 - s))
    """,
    "sigmoid_module_in_forward": """
        import torch
        from torch import nn
        class Head(nn.Module):
            def __init__(self):
                super().__init__()
                self.fc = nn.Linear(4, 1)
                self.act = nn.Sigmoid()
            def loss(self, x, t):
                s = self.act(self.fc(x))
                return -(t * torch.log(s) + (1 - t) * torch.log(1 - s)).mean()
    """,
    "focal_loss": """
        import torch
        def focal(x, t, gamma=2.0):
            p = torch.sigmoid(x)
            return -(t * (1 - p) ** gamma * torch.log(p) + (1 - t) * p ** gamma * torch.log(1 - p)).mean()
    """,
}


@pytest.mark.parametrize("name", BCE_WRITTEN)
def test_flags_written_out_bce_of_sigmoid_once(name):
    got = ids(BCE_WRITTEN[name])
    assert got.count(BCE) == 1, got
    # one finding per problem: nothing else about the logs inside the loss
    assert not {LOS, GUARD, "log1p-manual"} & set(got), got


def test_written_out_bce_points_at_the_join_and_names_the_term_lines():
    (f,) = only(BCE_WRITTEN["numpy_plain_import_terms_in_statements"], BCE)
    assert (f.span.line, f.span.column) == (7, 23)  # the ``pos + neg`` that completes the loss
    assert "from line 4, 5, 6" in f.message


BCE_WRITTEN_CLEAN = {
    "probabilities_are_parameters": """
        import numpy as np
        def loss(p, y):
            return -np.mean(y * np.log(p) + (1 - y) * np.log(1 - p))
    """,
    "two_different_sigmoids": """
        import torch
        def odd(a, b, t):
            return t * torch.log(torch.sigmoid(a)) + (1 - t) * torch.log(1 - torch.sigmoid(b))
    """,
    "stable_with_logits_formula": """
        import numpy as np
        def loss(x, y):
            return np.mean(np.logaddexp(0, x) - y * x)
    """,
    "logsigmoid_terms": """
        import torch.nn.functional as F
        def loss(x, t):
            return -(t * F.logsigmoid(x) + (1 - t) * F.logsigmoid(-x)).mean()
    """,
    "in_a_docstring_and_a_comment": '''
        import torch
        def loss(x, t):
            """-(t * torch.log(torch.sigmoid(x)) + (1 - t) * torch.log(1 - torch.sigmoid(x)))"""
            # F.binary_cross_entropy(torch.sigmoid(x), t)
            return x
    ''',
    "suppressed": """
        import torch
        def loss(x, t):
            s = torch.sigmoid(x)
            return -(t * torch.log(s) + (1 - t) * torch.log(1 - s)).mean()  # nanproof: allow[bce-from-sigmoid]
    """,
}


@pytest.mark.parametrize("name", BCE_WRITTEN_CLEAN)
def test_ignores_written_out_look_alikes(name):
    assert BCE not in ids(BCE_WRITTEN_CLEAN[name])


def test_unweighted_sum_of_two_logs_is_two_logs_of_sigmoid_not_a_bce():
    got = ids("""
        import torch
        def f(x):
            s = torch.sigmoid(x)
            return torch.log(s) + torch.log(1 - s)
    """)
    assert got == [LOS, LOS]


# -- log-of-sigmoid ----------------------------------------------------------------------
LOG_SIGMOID = {
    "torch_function": """
        import torch
        def f(x):
            return torch.log(torch.sigmoid(x))
    """,
    "torch_methods": """
        import torch
        def f(x):
            return x.sigmoid().log()
    """,
    "torch_F_sigmoid_two_statements": """
        import torch
        import torch.nn.functional as F
        def f(x):
            s = F.sigmoid(x)
            return torch.log(s)
    """,
    "torch_special_expit": """
        import torch
        def f(x):
            return torch.special.expit(x).log()
    """,
    "torch_complement_method": """
        import torch
        def f(x):
            return (1 - torch.sigmoid(x)).log()
    """,
    "torch_log1p_of_minus_sigmoid": """
        import torch
        def f(x):
            return torch.log1p(-torch.sigmoid(x))
    """,
    "numpy_hand_written": """
        import numpy as np
        def f(z):
            return np.log(1 / (1 + np.exp(-z)))
    """,
    "numpy_exp_over_one_plus_exp": """
        import numpy as np
        def f(z):
            e = np.exp(z)
            return np.log(e / (1 + e))
    """,
    "scipy_expit_from_import": """
        import numpy as np
        from scipy.special import expit
        def f(z):
            return np.log(expit(z))
    """,
    "scipy_module_complement": """
        import numpy as np
        import scipy.special
        def f(z):
            return np.log(1.0 - scipy.special.expit(z))
    """,
    "cupy": """
        import cupy as cp
        def f(z):
            s = 1 / (1 + cp.exp(-z))
            return cp.log(s)
    """,
    "math_scalar": """
        import math
        def f(z):
            return math.log(1 / (1 + math.exp(-z)))
    """,
    "jax_nn": """
        import jax
        import jax.numpy as jnp
        def f(x):
            return jnp.log(jax.nn.sigmoid(x))
    """,
    "jax_from_import_nn": """
        from jax import nn
        from jax import numpy as jnp
        def f(x):
            return jnp.log(1 - nn.sigmoid(x))
    """,
    "jax_scipy_expit": """
        import jax.numpy as jnp
        from jax.scipy.special import expit
        def f(x):
            return jnp.log(expit(x))
    """,
    "tensorflow": """
        import tensorflow as tf
        def f(x):
            return tf.math.log(tf.math.sigmoid(x))
    """,
    "tensorflow_tf1_log": """
        import tensorflow as tf
        def f(x):
            return tf.log(1. - tf.nn.sigmoid(x))
    """,
    "helper_returning_a_sigmoid": """
        import numpy as np
        def sigmoid(z):
            return 1 / (1 + np.exp(-z))
        def f(z):
            return np.log(sigmoid(z))
    """,
    "sigmoid_module_on_self": """
        import torch
        from torch import nn
        class Gate(nn.Module):
            def __init__(self):
                super().__init__()
                self.fc = nn.Linear(3, 1)
                self.squash = nn.Sigmoid()
            def forward(self, x):
                return torch.log(self.squash(self.fc(x)))
    """,
    "keras_layer_activation": """
        import tensorflow as tf
        model = tf.keras.Sequential([tf.keras.layers.Dense(1, activation="sigmoid")])
        def f(x):
            return tf.math.log(model(x))
    """,
}


@pytest.mark.parametrize("name", LOG_SIGMOID)
def test_flags_log_of_sigmoid(name):
    assert ids(LOG_SIGMOID[name]).count(LOS) == 1


LOG_SIGMOID_CLEAN = {
    "framework_log_sigmoids": """
        import jax
        import tensorflow as tf
        import torch.nn.functional as F
        from scipy.special import log_expit
        def f(x):
            return F.logsigmoid(x), log_expit(-x), jax.nn.log_sigmoid(x), tf.math.log_sigmoid(x)
    """,
    "numpy_stable_form": """
        import numpy as np
        def f(x):
            return -np.logaddexp(0, -x)
    """,
    "log_of_data": """
        import numpy as np
        from scipy.special import expit
        def f(rate, score):
            return np.log(rate), expit(score)
    """,
    "user_defined_log": """
        import torch
        def log(v):
            return v
        def f(x):
            return log(torch.sigmoid(x))
    """,
    "logger_log": """
        import logging
        import torch
        logger = logging.getLogger(__name__)
        def f(x):
            logger.log(logging.INFO, torch.sigmoid(x))
    """,
    "math_log_with_base": """
        import math
        def f(z):
            return math.log(1 / (1 + math.exp(-z)), 2)
    """,
    "in_a_string": """
        import torch
        CODE = "torch.log(torch.sigmoid(x))"
    """,
    "suppressed": """
        import torch
        def f(x):
            return torch.log(torch.sigmoid(x))  # nanproof: allow[log-of-sigmoid]
    """,
    "sigmoid_rebound_in_a_branch": """
        import torch
        def f(x, train):
            s = torch.sigmoid(x)
            if train:
                s = x
            return torch.log(s)
    """,
}


@pytest.mark.parametrize("name", LOG_SIGMOID_CLEAN)
def test_ignores_stable_or_unrelated_logs(name):
    assert LOS not in ids(LOG_SIGMOID_CLEAN[name])


def test_log_of_one_minus_sigmoid_is_log_of_sigmoid_only():
    got = ids("""
        import numpy as np
        from scipy.special import expit
        def f(z):
            return np.log(1 - expit(z))
    """)
    assert got == [LOS]  # not also log1p-manual


def test_log_of_sigmoid_points_at_the_log_and_names_the_sigmoid_line():
    (f,) = only(LOG_SIGMOID["torch_F_sigmoid_two_statements"], LOS)
    assert (f.span.line, f.span.column, f.span.end_column) == (6, 12, 24)
    assert "from line 5" in f.message and "-88.7" in f.message


def test_fix_kinds_of_log_of_sigmoid():
    def kind(name):
        (f,) = only(LOG_SIGMOID[name], LOS)
        return f.fix.kind if f.fix else None
    assert kind("torch_function") == "auto"  # torch.nn.functional via the torch import
    assert kind("scipy_expit_from_import") == "auto"  # NumPy's logaddexp, no new import
    assert kind("jax_scipy_expit") == "auto"  # -jnp.logaddexp(0, -x) through the jnp import
    assert kind("sigmoid_module_on_self") == "review"  # relies on the module being nn.Sigmoid
    assert kind("helper_returning_a_sigmoid") is None  # the helper's logits cannot be named


# -- log-epsilon-guard -------------------------------------------------------------------
GUARDED = {
    "torch_softmax_plus_eps": """
        import torch
        import torch.nn.functional as F
        def f(x):
            p = F.softmax(x, dim=-1)
            return torch.log(p + 1e-8)
    """,
    "torch_clamp_min_keyword": """
        import torch
        def f(x, eps=1e-6):
            return torch.log(torch.softmax(x, dim=1).clamp(min=eps))
    """,
    "torch_clamp_function": """
        import torch
        def f(x):
            return torch.log(torch.clamp(torch.sigmoid(x), min=1e-7))
    """,
    "numpy_clip_two_sided": """
        import numpy as np
        from scipy.special import softmax
        def f(z):
            p = softmax(z, axis=1)
            return np.log(np.clip(p, 1e-12, 1 - 1e-12))
    """,
    "numpy_clip_one_sided_none": """
        import numpy as np
        from scipy.special import expit
        def f(z):
            return np.log(np.clip(expit(z), 1e-12, None))
    """,
    "numpy_maximum_finfo_eps": """
        import numpy as np
        def f(z):
            e = np.exp(z - z.max(axis=1, keepdims=True))
            p = e / e.sum(axis=1, keepdims=True)
            return np.log(np.maximum(p, np.finfo(p.dtype).eps))
    """,
    "complement_plus_eps": """
        import torch
        def f(x):
            s = torch.sigmoid(x)
            return torch.log(1 - s + 1e-7)
    """,
    "self_eps_and_self_module": """
        import torch
        from torch import nn
        class Net(nn.Module):
            def __init__(self):
                super().__init__()
                self.act = nn.Softmax(dim=1)
                self.eps = 1e-9
            def forward(self, h):
                return torch.log(self.act(h) + self.eps)
    """,
    "jax": """
        import jax
        from jax import numpy as jnp
        def f(x):
            return jnp.log(jax.nn.softmax(x, axis=-1) + 1e-9)
    """,
    "tensorflow_clip_by_value": """
        import tensorflow as tf
        def f(x):
            p = tf.nn.softmax(x)
            return tf.math.log(tf.clip_by_value(p, 1e-7, 1.0 - 1e-7))
    """,
    "keras_backend_epsilon": """
        import tensorflow as tf
        from tensorflow.keras import backend as K
        def f(x):
            return tf.math.log(tf.sigmoid(x) + K.epsilon())
    """,
    "entropy_of_a_softmax": """
        import torch
        def entropy(x):
            p = torch.softmax(x, dim=-1)
            return -(p * torch.log(p + 1e-8)).sum(dim=-1)
    """,
}


@pytest.mark.parametrize("name", GUARDED)
def test_flags_log_of_guarded_probability(name):
    got = ids(GUARDED[name])
    assert got.count(GUARD) == 1, got
    assert not {"log-of-softmax", LOS, "cross-entropy-from-probs"} & set(got), got


GUARDED_CLEAN = {
    "probability_is_a_parameter": """
        import numpy as np
        def f(p):
            return np.log(p + 1e-8)
    """,
    "counts_plus_one": """
        import numpy as np
        def f(counts):
            return np.log(counts + 1e-3)
    """,
    "large_constant_is_no_epsilon": """
        import torch
        def f(x):
            return torch.log(torch.softmax(x, dim=-1) + 0.5)
    """,
    "clip_without_epsilon_floor": """
        import numpy as np
        from scipy.special import expit
        def f(z):
            return np.log(np.clip(expit(z), None, 0.99))
    """,
    "log_softmax": """
        import torch.nn.functional as F
        def f(x):
            return F.log_softmax(x, dim=-1)
    """,
    "suppressed": """
        import torch
        def f(x):
            return torch.log(torch.softmax(x, dim=-1) + 1e-8)  # nanproof: allow[log-epsilon-guard]
    """,
}


@pytest.mark.parametrize("name", GUARDED_CLEAN)
def test_ignores_guards_on_values_that_are_not_probabilities_of_a_softmax_or_sigmoid(name):
    assert GUARD not in ids(GUARDED_CLEAN[name])


def test_guarded_likelihood_of_a_softmax_is_cross_entropy_only():
    for src in (
        """
        import torch
        import torch.nn.functional as F
        def f(x, y):
            p = F.softmax(x, dim=1)
            return F.nll_loss(torch.log(p + 1e-9), y)
        """,
        """
        import numpy as np
        from scipy.special import softmax
        def f(z, y):
            p = softmax(z, axis=1)
            return -np.log(p[np.arange(len(y)), y] + 1e-12).mean()
        """,
        """
        import tensorflow as tf
        def f(x, t):
            p = tf.nn.softmax(x)
            return -tf.reduce_sum(t * tf.math.log(p + 1e-7))
        """,
    ):
        assert ids(src) == ["cross-entropy-from-probs"], src


def test_guarded_cross_entropy_rewrite_needs_review():
    (f,) = findings("""
        import torch
        import torch.nn.functional as F
        def f(x, y):
            p = F.softmax(x, dim=1)
            return F.nll_loss(torch.log(p.clamp(min=1e-8)), y)
    """)
    assert f.rule == "cross-entropy-from-probs"
    assert f.fix.kind == "review" and f.fix.replacement == "F.log_softmax(x, dim=1)"
    (g,) = findings("""
        import torch
        import torch.nn.functional as F
        def f(x, y):
            p = F.softmax(x, dim=1)
            return -torch.log(p[range(len(y)), y] + 1e-9).mean()
    """)
    assert g.rule == "cross-entropy-from-probs" and g.fix.kind == "review"
    assert g.fix.replacement.endswith("[range(len(y)), y]")  # the picked entries stay picked


def test_guard_fix_is_a_review_and_drops_the_epsilon():
    (f,) = only(GUARDED["torch_softmax_plus_eps"], GUARD)
    assert f.fix.kind == "review" and f.fix.replacement == "F.log_softmax(x, dim=-1)"
    assert "from line 5" in f.message
    (g,) = only(GUARDED["numpy_maximum_finfo_eps"], GUARD)
    assert g.fix is None and "log_softmax" in g.suggestion  # a hand-written producer: suggestion only


def test_entropy_of_a_sigmoid_is_one_finding():
    got = ids("""
        import torch
        def entropy(x):
            s = torch.sigmoid(x)
            return -(s * torch.log(s) + (1 - s) * torch.log(1 - s))
    """)
    assert got == [BCE]  # not also xlogx-nan twice: the log-sigmoid rewrite cures both terms


def test_sigmoid_helper_imported_from_another_scanned_module_is_followed(tmp_path):
    import os

    from nanproof.api import scan
    from nanproof.config import Config

    pkg = tmp_path / "model"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "acts.py").write_text("import numpy as np\ndef squash(z):\n    return 1 / (1 + np.exp(-z))\n")
    (pkg / "train.py").write_text(
        "import numpy as np\nfrom .acts import squash\n"
        "def loss(z, y):\n    p = squash(z)\n    return -np.mean(y * np.log(p + 1e-9) + (1 - y) * np.log(1 - p + 1e-9))\n"
        "def score(z):\n    return np.log(squash(z) + 1e-9)\n"
    )
    result = scan([str(tmp_path)], Config(jobs=1))
    got = sorted((os.path.basename(f.path), f.rule) for f in result.findings if f.rule in (BCE, LOS, GUARD))
    assert got == [("train.py", BCE), ("train.py", GUARD)]


def test_rules_are_listed_with_family_severity_and_fix_kind():
    from nanproof.registry import get

    assert [(get(r).family, get(r).severity, get(r).fix) for r in (BCE, LOS, GUARD)] == [
        ("loss", "error", "review"), ("loss", "error", "auto"), ("loss", "warning", "review")]


# -- TensorFlow 1 layer builders hand their activation on -------------------------------
@pytest.mark.parametrize("layer", ["tf.layers.dense(h, 6, tf.nn.softmax)", "tf.layers.dense(h, 6, activation=tf.nn.softmax)",
                                   "tf.contrib.layers.fully_connected(h, 6, activation_fn=tf.nn.softmax)"])
def test_a_layer_builder_with_a_softmax_activation(layer):
    assert ids(f"""
        import tensorflow as tf
        def kiln_policy(h):
            p = {layer}
            return tf.log(p)
    """) == ["log-of-softmax"]


def test_a_layer_builder_with_another_activation_is_quiet():
    assert ids("""
        import tensorflow as tf
        def kiln_policy(h):
            p = tf.layers.dense(h, 6, tf.nn.relu)
            return tf.log(p)
    """) == []
