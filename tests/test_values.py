"""The value analysis: values followed through parameters, methods, instances of
scanned classes, returned tuples, shape-only operations, array-module fallbacks and
across files; joins that stay quiet when any call site is unknown.

The snippets are invented scenarios (a bird-song classifier, a greenhouse controller,
a ferry-route planner); the numerical claims they lean on are in the rule pages."""
import textwrap

import pytest

from conftest import findings, ids
from nanproof.api import scan
from nanproof.config import Config


def tree(tmp_path, files: dict[str, str]):
    for rel, src in files.items():
        p = tmp_path / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(textwrap.dedent(src))
    return scan([str(tmp_path)], Config(jobs=1))


# -- parameters take the join of their call sites --------------------------------------
def test_a_softmax_passed_in_makes_the_log_inside_a_log_of_a_softmax():
    fs = findings("""
        import torch
        def song_nll(p, y):
            return -torch.log(p[range(len(y)), y]).mean()
        def step(calls, y, head):
            p = torch.softmax(head(calls), dim=-1)
            return song_nll(p, y)
    """)
    assert [f.rule for f in fs] == ["cross-entropy-from-probs"]
    assert "passed in as a parameter" in fs[0].message and "passed at line 7" in fs[0].message


def test_a_parameter_is_quiet_when_one_call_site_passes_something_else():
    assert ids("""
        import torch
        def song_nll(p, y):
            return -torch.log(p[range(len(y)), y]).mean()
        def step(calls, y, head):
            return song_nll(torch.softmax(head(calls), dim=-1), y)
        def calibrated(q, y):
            return song_nll(q, y)
    """) == []


def test_a_parameter_is_quiet_when_the_function_escapes_as_a_value():
    assert ids("""
        import torch
        def song_nll(p, y):
            return -torch.log(p).mean()
        def step(calls, y, head):
            return song_nll(torch.softmax(head(calls), dim=-1), y)
        LOSSES = {"nll": song_nll}
    """) == []


def test_a_parameter_with_no_call_site_stays_unknown():
    assert ids("""
        import numpy as np
        def song_nll(p, y):
            return -np.log(p[np.arange(len(y)), y]).mean()
    """) == []


def test_a_default_left_in_place_is_not_the_softmax():
    assert ids("""
        import torch
        def score(x, p=None):
            return torch.log(p)
        def run(x):
            return score(x)
    """) == []


def test_a_method_parameter_joins_its_self_calls():
    fs = findings("""
        import numpy as np
        class Greenhouse:
            def _loss(self, probs, y):
                return -np.mean(np.log(probs[np.arange(len(y)), y]))
            def fit(self, x, y, w):
                z = x @ w
                z = z - z.max(axis=1, keepdims=True)
                e = np.exp(z)
                probs = e / e.sum(axis=1, keepdims=True)
                return self._loss(probs, y)
    """)
    assert [f.rule for f in fs] == ["cross-entropy-from-probs"]


def test_a_sigmoid_passed_by_keyword_is_followed():
    assert ids("""
        import torch
        def bce(target, prob):
            return -(target * torch.log(prob) + (1 - target) * torch.log(1 - prob)).mean()
        def step(x, t, net):
            return bce(t, prob=torch.sigmoid(net(x)))
    """) == ["bce-from-sigmoid"]


# -- instances of scanned classes, methods, tuples -------------------------------------
def test_a_model_whose_forward_returns_a_softmax_and_the_log_of_its_output():
    fs = findings("""
        import torch
        import torch.nn as nn
        class SongNet(nn.Module):
            def __init__(self):
                super().__init__()
                self.fc = nn.Linear(16, 5)
            def forward(self, x):
                return torch.softmax(self.fc(x), dim=-1)
        class Trainer:
            def __init__(self):
                self.net = SongNet()
            def loss(self, x, y):
                probs = self.net(x)
                return -torch.log(probs.gather(1, y[:, None])).mean()
    """)
    assert [f.rule for f in fs] == ["cross-entropy-from-probs"]
    assert "SongNet.forward" in fs[0].message


def test_a_flax_module_called_through_apply():
    assert ids("""
        import jax
        import jax.numpy as jnp
        import flax.linen as nn
        class Head(nn.Module):
            @nn.compact
            def __call__(self, x):
                return jax.nn.softmax(nn.Dense(4)(x))
        def loss(params, x, y):
            model = Head()
            p = model.apply(params, x)
            return -jnp.log(p).mean()
    """) == ["log-of-softmax"]


def test_a_keras_layer_call_method():
    assert ids("""
        import tensorflow as tf
        class Gate(tf.keras.layers.Layer):
            def call(self, x):
                return tf.sigmoid(x)
        def loss(x):
            g = Gate()
            return tf.math.log(g(x))
    """) == ["log-of-sigmoid"]


def test_an_instance_method_of_a_scanned_class():
    assert ids("""
        import numpy as np
        class Router:
            def probs(self, z):
                e = np.exp(z - z.max())
                return e / e.sum()
        def cost(z):
            r = Router()
            return np.log(r.probs(z))
    """) == ["log-of-softmax"]


def test_a_tuple_returned_by_a_builder_is_unpacked_item_by_item():
    assert ids("""
        import tensorflow as tf
        class Agent:
            def _build(self, x):
                logits = tf.layers.dense(x, 4)
                return logits, tf.nn.softmax(logits)
            def loss(self, x):
                logits, probs = self._build(x)
                return -tf.reduce_sum(tf.log(probs))
    """) == ["log-of-softmax"]


def test_the_logits_item_of_a_returned_tuple_is_not_a_probability():
    assert ids("""
        import tensorflow as tf
        class Agent:
            def _build(self, x):
                logits = tf.layers.dense(x, 4)
                return logits, tf.nn.softmax(logits)
            def loss(self, x):
                logits, probs = self._build(x)
                return tf.log(logits)
    """) == []


# -- shape-only operations keep what a value is -------------------------------------------
@pytest.mark.parametrize("shaped", ["p.view(-1)", "p.reshape(-1, 1)", "p.T", "p.squeeze(1)", "p[:, 0]",
                                    "p.transpose(0, 1)", "p.flatten()"])
def test_shape_only_operations_keep_the_softmax(shaped):
    assert ids(f"""
        import torch
        def f(z, y):
            p = torch.softmax(z, dim=1)
            return torch.log({shaped})
    """) == ["log-of-softmax"]


@pytest.mark.parametrize("picked", ["np.take_along_axis(p, y[:, None], axis=1)", "p[np.arange(len(y)), y]"])
def test_gathered_probabilities_are_the_negative_log_likelihood(picked):
    assert ids(f"""
        import numpy as np
        from scipy.special import softmax
        def f(z, y):
            p = softmax(z, axis=1)
            return -np.log({picked}).mean()
    """) == ["cross-entropy-from-probs"]


def test_torch_gather_keeps_the_softmax():
    assert ids("""
        import torch
        def f(z, y):
            p = torch.softmax(z, dim=1)
            return -torch.log(torch.gather(p, 1, y[:, None])).mean()
    """) == ["cross-entropy-from-probs"]


def test_a_sum_of_a_softmax_is_not_a_softmax():
    assert ids("""
        import torch
        def f(z):
            p = torch.softmax(z, dim=1)
            return torch.log(p.sum(1))
    """) == []


# -- array modules bound in several branches ---------------------------------------------
def test_an_import_fallback_between_cupy_and_numpy_resolves_to_both():
    assert ids("""
        try:
            import cupy as xp
        except ImportError:
            import numpy as xp
        def probs(z):
            e = xp.exp(z)
            return e / e.sum()
    """) == ["softmax-unshifted"]


def test_a_module_chosen_by_a_condition_resolves_to_both():
    assert ids("""
        import numpy, cupy
        def lse(z, gpu):
            xp = cupy if gpu else numpy
            return xp.log(xp.sum(xp.exp(z)))
    """) == ["logsumexp-unshifted"]


def test_a_fallback_between_unlike_modules_is_unknown():
    assert ids("""
        try:
            import torch as xp
        except ImportError:
            import numpy as xp
        def probs(z):
            e = xp.exp(z)
            return e / e.sum()
    """) == []


# -- across files ----------------------------------------------------------------------------
def test_a_probability_passed_to_a_function_of_another_module(tmp_path):
    result = tree(tmp_path, {
        "ferry/losses.py": """
            import torch
            def route_nll(p, y):
                return -torch.log(p[torch.arange(len(y)), y]).mean()
        """,
        "ferry/train.py": """
            import torch
            from .losses import route_nll
            def step(x, y, head):
                p = torch.softmax(head(x), dim=-1)
                return route_nll(p, y)
        """,
    })
    [f] = result.findings
    assert f.rule == "cross-entropy-from-probs" and f.path.endswith("losses.py")
    assert "train.py:6" in f.message and "line 5 of" in f.message


def test_a_model_class_of_another_module_and_the_log_of_its_output(tmp_path):
    result = tree(tmp_path, {
        "ferry/model.py": """
            import torch.nn as nn
            import torch.nn.functional as F
            class Planner(nn.Module):
                def __init__(self):
                    super().__init__()
                    self.fc = nn.Linear(8, 3)
                def forward(self, x):
                    return F.softmax(self.fc(x), dim=-1)
        """,
        "ferry/agent.py": """
            import torch
            from ferry.model import Planner
            class Agent:
                def __init__(self):
                    self.pi = Planner()
                def act(self, obs):
                    probs = self.pi(obs)
                    return torch.log(probs)
        """,
    })
    assert [(f.rule, f.path.endswith("agent.py")) for f in result.findings] == [("log-of-softmax", True)]


def test_a_call_from_another_module_that_passes_logits_keeps_the_parameter_unknown(tmp_path):
    result = tree(tmp_path, {
        "ferry/losses.py": """
            import torch
            def route_nll(p, y):
                return -torch.log(p).mean()
            def step(x, y):
                return route_nll(torch.softmax(x, dim=-1), y)
        """,
        "ferry/eval.py": """
            from .losses import route_nll
            def check(scores, y):
                return route_nll(scores, y)
        """,
    })
    assert result.findings == ()


def test_results_do_not_depend_on_the_job_count(tmp_path):
    files = {f"ferry/m{i}.py": f"""
                import torch
                from .losses import route_nll
                def step{i}(x, y):
                    return route_nll(torch.softmax(x, dim=-1), y)
             """ for i in range(6)}
    files["ferry/losses.py"] = """
        import torch
        def route_nll(p, y):
            return -torch.log(p).mean()
    """
    one = tree(tmp_path, files)
    two = scan([str(tmp_path)], Config(jobs=2))
    assert [f.rule for f in one.findings] == ["log-of-softmax"]
    assert one.findings == two.findings


# -- the same value means the same binding -----------------------------------------------------
def test_two_random_draws_are_two_values():
    assert ids("""
        import numpy as np
        def noise(n):
            return np.mean(np.random.uniform(size=n) ** 2) - np.mean(np.random.uniform(size=n)) ** 2
    """) == []


def test_the_same_draw_bound_once_is_one_value():
    assert ids("""
        import numpy as np
        def noise(n):
            u = np.random.uniform(size=n)
            return np.mean(u ** 2) - np.mean(u) ** 2
    """) == ["variance-cancellation"]
