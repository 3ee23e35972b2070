"""The softmax-family rewrites, proven numerically: equal to the original on ordinary
inputs; finite and equal to an outside reference where the original fails."""
import numpy as np
import pytest
import scipy.special

from harness import both, fixed, load

try:
    import torch
except ImportError:  # pragma: no cover - CI installs the CPU build
    torch = None

ORDINARY = np.random.default_rng(7).normal(size=(4, 6))
# exp overflows past ln(finfo(float64).max) = 709.78 (IEEE 754 binary64)
EXTREME = np.array([[1000.0, 0.0, -5.0], [800.0, 799.0, 10.0]])
assert np.log(np.finfo(np.float64).max) < 800




def test_shifted_softmax_matches_scipy_and_survives_large_logits():
    src = """
        import numpy as np
        def probs(z):
            e = np.exp(z)
            return e / e.sum(axis=1, keepdims=True)
    """
    old, new = both(src, "softmax-unshifted", "probs")
    # reference: scipy.special.softmax
    np.testing.assert_allclose(new(ORDINARY), old(ORDINARY), rtol=1e-13)
    np.testing.assert_allclose(new(ORDINARY), scipy.special.softmax(ORDINARY, axis=1), rtol=1e-13)
    with np.errstate(all="ignore"):
        assert not np.isfinite(old(EXTREME)).all()
    assert np.isfinite(new(EXTREME)).all()
    np.testing.assert_allclose(new(EXTREME), scipy.special.softmax(EXTREME, axis=1), rtol=1e-13)


def test_shifted_softmax_in_float32_passes_the_float32_limit():
    src = """
        import numpy as np
        def probs(z):
            return np.exp(z) / np.sum(np.exp(z), axis=-1, keepdims=True)
    """
    old, new = both(src, "softmax-unshifted", "probs")
    # 89 > ln(finfo(float32).max) = 88.72 (IEEE 754 binary32)
    z = np.array([89.0, 1.0, 0.0], dtype=np.float32)
    assert np.log(np.finfo(np.float32).max) < 89
    with np.errstate(all="ignore"):
        assert np.isnan(old(z)).any()
    out = new(z)
    assert out.dtype == np.float32
    np.testing.assert_allclose(out, scipy.special.softmax(z.astype(np.float64)), rtol=1e-6)


@pytest.mark.skipif(torch is None, reason="needs torch")
def test_shifted_torch_softmax_matches_torch_softmax():
    src = """
        import torch
        def probs(z):
            e = z.exp()
            return e / e.sum(dim=-1, keepdim=True)
    """
    old, new = both(src, "softmax-unshifted", "probs")
    z = torch.tensor(ORDINARY)
    torch.testing.assert_close(new(z), old(z))
    big = torch.tensor(EXTREME, dtype=torch.float32)
    assert torch.isnan(old(big)).any()
    # reference: torch.softmax
    torch.testing.assert_close(new(big), torch.softmax(big, dim=-1))


def test_keepdims_fix_normalises_rows_as_intended():
    src = """
        import numpy as np
        def normalise(counts):
            return counts / counts.sum(axis=1)
    """
    new = load(fixed(src, "normalize-missing-keepdims"), "normalise")
    square = np.arange(1.0, 10.0).reshape(3, 3)
    # worked example: each row of the result sums to 1
    np.testing.assert_allclose(new(square).sum(axis=1), np.ones(3))
    old = load(src, "normalise")
    assert not np.allclose(old(square).sum(axis=1), 1.0)  # the original silently divides columns


@pytest.mark.skipif(torch is None, reason="needs torch")
def test_log_softmax_rewrite_is_finite_where_log_of_softmax_is_minus_inf():
    src = """
        import torch
        import torch.nn.functional as F
        def logp(x):
            return torch.log(F.softmax(x, dim=1))
    """
    old, new = both(src, "log-of-softmax", "logp")
    x = torch.tensor(ORDINARY)
    torch.testing.assert_close(new(x), old(x))
    far = torch.tensor([[0.0, -200.0, 5.0]], dtype=torch.float32)  # trails by more than 104
    assert torch.isinf(old(far)).any()
    # reference: scipy.special.log_softmax
    np.testing.assert_allclose(new(far).numpy(), scipy.special.log_softmax(far.double().numpy(), axis=1), rtol=1e-6)


def test_logsumexp_rewrite_matches_scipy_where_the_naive_form_overflows_or_underflows():
    src = """
        import numpy as np
        def lse(x):
            return np.log(np.sum(np.exp(x), axis=1))
    """
    old, new = both(src, "logsumexp-unshifted", "lse")
    np.testing.assert_allclose(new(ORDINARY), old(ORDINARY), rtol=1e-13)
    for x in (EXTREME, -EXTREME - 800):
        with np.errstate(all="ignore"):
            assert not np.isfinite(old(x)).all()
        # reference: scipy.special.logsumexp
        np.testing.assert_allclose(new(x), scipy.special.logsumexp(x, axis=1), rtol=1e-13)


@pytest.mark.skipif(torch is None, reason="needs torch")
def test_torch_logsumexp_rewrite_keeps_keepdim():
    src = """
        import torch
        def lse(x):
            return torch.log(torch.exp(x).sum(dim=-1, keepdim=True))
    """
    old, new = both(src, "logsumexp-unshifted", "lse")
    x = torch.tensor(ORDINARY)
    torch.testing.assert_close(new(x), old(x))
    big = torch.tensor(EXTREME)
    assert new(big).shape == old(big).shape
    np.testing.assert_allclose(new(big).numpy(), scipy.special.logsumexp(EXTREME, axis=-1, keepdims=True), rtol=1e-12)


def test_logaddexp_rewrite_matches_numpy_logaddexp():
    src = """
        import numpy as np
        def lae(a, b):
            return np.log(np.exp(a) + np.exp(b))
    """
    old, new = both(src, "logaddexp-manual", "lae")
    a, b = ORDINARY[0], ORDINARY[1]
    np.testing.assert_allclose(new(a, b), old(a, b), rtol=1e-13)
    with np.errstate(all="ignore"):
        assert not np.isfinite(old(np.array([1000.0]), np.array([999.0]))).all()
    # reference: the exact identity log(e^1000 + e^999) = 1000 + log1p(e^-1) (worked example)
    np.testing.assert_allclose(new(np.array([1000.0]), np.array([999.0])), [1000 + np.log1p(np.exp(-1.0))], rtol=1e-15)


def test_cross_entropy_rewrite_gives_finite_loss_for_confident_wrong_logits():
    src = """
        import torch
        import torch.nn.functional as F
        def loss(x, y):
            return F.nll_loss(torch.log(F.softmax(x, dim=1)), y)
    """
    if torch is None:
        pytest.skip("needs torch")
    old, new = both(src, "cross-entropy-from-probs", "loss")
    x, y = torch.tensor(ORDINARY), torch.tensor([0, 1, 2, 3])
    torch.testing.assert_close(new(x, y), old(x, y))
    far = torch.tensor([[0.0, 300.0]], dtype=torch.float32)
    assert torch.isinf(old(far, torch.tensor([0])))
    # reference: torch.nn.functional.cross_entropy on the logits
    torch.testing.assert_close(new(far, torch.tensor([0])), F_ce(far, torch.tensor([0])))


def F_ce(x, y):
    return torch.nn.functional.cross_entropy(x, y)


# -- the dense Jacobian and its vector-Jacobian product --------------------------------
JAC_SRC = """
    import numpy as np
    def backward(s, g):
        J = np.diag(s) - np.outer(s, s)
        return J @ g
"""


def _softmax(z):
    return scipy.special.softmax(z, axis=-1)


def _central_difference_vjp(z, g, h=1e-6):
    # reference: central finite differences of scipy.special.softmax, g^T dsoftmax/dz
    out = np.zeros_like(z)
    for k in range(z.size):
        dz = np.zeros_like(z)
        dz[k] = h
        out[k] = g @ (_softmax(z + dz) - _softmax(z - dz)) / (2 * h)
    return out


def test_jacobian_rewrite_equals_explicit_product_and_finite_differences():
    old, new = both(JAC_SRC, "softmax-jacobian-dense", "backward")
    rng = np.random.default_rng(3)
    z, g = rng.normal(size=7), rng.normal(size=7)
    s = _softmax(z)
    np.testing.assert_allclose(new(s, g), old(s, g), rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(new(s, g), _central_difference_vjp(z, g), rtol=1e-6, atol=1e-9)


def test_jacobian_rewrite_handles_batches_row_by_row():
    new = load(fixed(JAC_SRC, "softmax-jacobian-dense"), "backward")
    rng = np.random.default_rng(4)
    z, g = rng.normal(size=(3, 5)), rng.normal(size=(3, 5))
    s = _softmax(z)
    batched = new(s, g)
    for i in range(3):
        np.testing.assert_allclose(batched[i], (np.diag(s[i]) - np.outer(s[i], s[i])) @ g[i], rtol=1e-12, atol=1e-15)


@pytest.mark.skipif(torch is None, reason="needs torch")
def test_jacobian_rewrite_matches_torch_autograd():
    new = load(fixed(JAC_SRC, "softmax-jacobian-dense"), "backward")
    rng = np.random.default_rng(5)
    z = torch.tensor(rng.normal(size=9), requires_grad=True)
    g = torch.tensor(rng.normal(size=9))
    y = torch.softmax(z, dim=-1)
    (ref,) = torch.autograd.grad(y, z, grad_outputs=g)  # reference: torch.autograd
    np.testing.assert_allclose(new(y.detach().numpy(), g.numpy()), ref.numpy(), rtol=1e-12, atol=1e-15)


def test_jacobian_rewrite_needs_no_n_by_n_matrix():
    n = 4096
    # the dense float64 Jacobian alone: n*n*8 bytes = 128 MiB
    assert n * n * np.dtype(np.float64).itemsize == 128 * 2**20
    src = fixed(JAC_SRC, "softmax-jacobian-dense")
    assert "diag" not in src and "outer" not in src
    new = load(src, "backward")
    s = _softmax(np.linspace(-3, 3, n))
    g = np.ones(n)
    tracemalloc = pytest.importorskip("tracemalloc")
    tracemalloc.start()
    out = new(s, g)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 1 * 2**20  # a few vectors of 32 KiB, not 128 MiB
    np.testing.assert_allclose(out, 0, atol=1e-15)  # softmax rows sum to 1: J @ ones = 0


def test_vjp_keeps_relative_accuracy_for_tiny_probabilities():
    # logits spread over hundreds: entries of J @ g for tiny probabilities
    z = np.array([0.0, -300.0, -600.0])
    s, g = _softmax(z), np.array([1.0, 2.0, 3.0])
    new = load(fixed(JAC_SRC, "softmax-jacobian-dense"), "backward")
    import mpmath

    mpmath.mp.dps = 50  # reference: mpmath at 50 digits
    ez = [mpmath.e ** mpmath.mpf(v) for v in z]
    sm = [v / sum(ez) for v in ez]
    dot = sum(a * b for a, b in zip(sm, g))
    ref = [float(sm[i] * (g[i] - dot)) for i in range(3)]
    np.testing.assert_allclose(new(s, g), ref, rtol=1e-12)


@pytest.mark.skipif(torch is None, reason="needs torch")
def test_picked_probabilities_rewrite_keeps_the_label_indexing():
    src = """
        import torch
        def loss(logits, target):
            p = torch.softmax(logits, dim=1)
            return -torch.log(p[torch.arange(len(target)), target]).mean()
    """
    old, new = both(src, "cross-entropy-from-probs", "loss")
    x, y = torch.tensor(ORDINARY), torch.tensor([0, 1, 2, 3])
    torch.testing.assert_close(new(x, y), old(x, y))
    far, label = torch.tensor([[0.0, 300.0]], dtype=torch.float32), torch.tensor([0])
    assert torch.isinf(old(far, label))
    # reference: torch.nn.functional.cross_entropy on the logits
    torch.testing.assert_close(new(far, label), torch.nn.functional.cross_entropy(far, label))


def test_jacobian_message_figures_are_the_float64_limits():
    (f,) = [f for f in __import__("conftest").findings(JAC_SRC) if f.rule == "softmax-jacobian-dense"]
    fi = np.finfo(np.float64)  # IEEE 754 binary64 via numpy.finfo
    # a product of two values below sqrt(smallest normal) is subnormal (fewer digits) ...
    assert f"{np.sqrt(fi.tiny):.1e}" == "1.5e-154" and "1.5e-154" in f.message
    # ... and below sqrt(smallest subnormal) it rounds to zero
    assert f"{np.sqrt(fi.smallest_subnormal):.1e}" == "2.2e-162" and "2.2e-162" in f.message
    y = np.array([1e-163, 1e-163])
    assert np.outer(y, y)[0, 1] == 0.0
    assert "128 MiB" in f.message and 4096 * 4096 * 8 == 128 * 2**20


def test_logsumexp_of_builtin_sum_keeps_the_first_axis_shape():
    src = """
        import numpy as np
        def lse(x):
            return np.log(sum(np.exp(x)))
    """
    old, new = both(src, "logsumexp-unshifted", "lse")
    x = ORDINARY[:2, :3]
    assert new(x).shape == old(x).shape == (3,)
    np.testing.assert_allclose(new(x), old(x), rtol=1e-13)
    # reference: scipy.special.logsumexp along axis 0
    np.testing.assert_allclose(new(EXTREME), scipy.special.logsumexp(EXTREME, axis=0), rtol=1e-13)


def _ulps(got, exact):
    got, exact = np.asarray(got, dtype=np.float64), np.asarray(exact, dtype=np.float64)
    with np.errstate(all="ignore"):
        err = np.abs(got - exact) / np.spacing(np.abs(exact))
    return np.where(np.isfinite(got), err, np.inf)


def test_log_sum_exp_rewrite_error_in_ulps_over_a_sweep_against_mpmath():
    import mpmath

    mpmath.mp.dps = 50  # reference: mpmath at 50 digits
    src = """
        import numpy as np
        def lse(x):
            return np.log(np.sum(np.exp(x), axis=-1))
    """
    old, new = both(src, "logsumexp-unshifted", "lse")
    rng = np.random.default_rng(11)
    rows = np.concatenate([rng.normal(0, s, size=(20, 8)) + c for s in (1, 30, 300) for c in (-800, 0, 800)])
    exact = np.array([float(mpmath.log(mpmath.fsum(mpmath.e ** mpmath.mpf(v) for v in row))) for row in rows])
    with np.errstate(all="ignore"):
        before = _ulps(old(rows), exact)
    after = _ulps(new(rows), exact)
    # the naive form overflows or underflows on the shifted rows; the rewrite stays within a few ulps
    assert np.isinf(before).sum() >= 80
    assert after.max() <= 8, after.max()


def test_log_softmax_rewrite_error_in_ulps_over_a_sweep_against_mpmath():
    if torch is None:
        pytest.skip("needs torch")
    import mpmath

    mpmath.mp.dps = 50  # reference: mpmath at 50 digits
    src = """
        import torch
        import torch.nn.functional as F
        def logp(x):
            return torch.log(F.softmax(x, dim=-1))
    """
    old, new = both(src, "log-of-softmax", "logp")
    rng = np.random.default_rng(12)
    rows = np.concatenate([rng.normal(0, s, size=(30, 6)) for s in (1, 50, 400)])
    exact = []
    for row in rows:
        lse = mpmath.log(mpmath.fsum(mpmath.e ** mpmath.mpf(v) for v in row))
        exact.append([float(mpmath.mpf(v) - lse) for v in row])
    exact = np.array(exact)
    x = torch.tensor(rows)
    before = _ulps(old(x).numpy(), exact)
    after = _ulps(new(x).numpy(), exact)
    assert np.isinf(before).any()  # log(0) = -inf for the far tail
    # the rewrite's error stays small in absolute terms (relative to the row's spread)
    np.testing.assert_allclose(new(x).numpy(), exact, rtol=1e-13, atol=1e-12)
    assert np.median(after) <= 4
