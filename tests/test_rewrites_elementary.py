"""The elementary-family rewrites, proven numerically through the fix engine: equal to
the original on ordinary inputs; finite and accurate where the original overflows or
cancels, measured in ulps against mpmath at 50 digits and against outside references."""
import math

import mpmath
import numpy as np
import pytest
import scipy.special

import harness
from harness import load

try:
    import torch
    import torch.nn.functional as F
except ImportError:  # pragma: no cover - CI installs the CPU build
    torch = None

needs_torch = pytest.mark.skipif(torch is None, reason="needs torch")
F64_EXP_MAX = math.log(float(np.finfo(np.float64).max))  # 709.78 (IEEE 754 binary64)
F32_EXP_MAX = math.log(float(np.finfo(np.float32).max))  # 88.72 (IEEE 754 binary32)
# small magnitudes from 1e-20 to 0.1, both signs: where 1 + x and exp(x) - 1 cancel
SMALL = np.concatenate([np.logspace(-20, -1, 120), -np.logspace(-20, -1, 120)])


def fixed(src: str, rule: str, kind: str = "auto") -> str:
    """The source after ``nanproof fix`` (``--include-review`` for a review fix); the
    rule's findings all offered a fix of ``kind``."""
    return harness.fixed(src, rule, include_review=kind == "review", kind=kind)


def both(src, rule, name, kind="auto"):
    return load(src, name), load(fixed(src, rule, kind), name)


def ulp_errors(values, inputs, exact, dtype=np.float64) -> np.ndarray:
    """|value - exact(x)| in units of the last place of exact(x) in ``dtype``, with the
    exact value from mpmath at 50 digits; inf where the value is not finite."""
    out = []
    with mpmath.workdps(50):
        for v, x in zip(np.ravel(values), np.ravel(inputs)):
            e = exact(mpmath.mpf(float(x)))
            if not np.isfinite(v):
                out.append(np.inf)
                continue
            out.append(float(abs(mpmath.mpf(float(v)) - e) / float(np.spacing(dtype(abs(float(e)))))))
    return np.array(out)


def quietly(f, *args):
    with np.errstate(all="ignore"):
        return f(*args)


# -- log1p-manual -----------------------------------------------------------------------
def test_log1p_rewrite_keeps_small_rates_that_log_of_one_plus_drops():
    src = """
        import numpy as np
        def growth(rate):
            return np.log(1 + rate)
    """
    old, new = both(src, "log1p-manual", "growth")
    ordinary = np.linspace(-0.9, 10.0, 60)
    np.testing.assert_allclose(new(ordinary), old(ordinary), rtol=1e-13)
    # log(1 + 1e-17) is 0.0 in float64 (1 + 1e-17 rounds to 1); reference: math.log1p
    assert old(np.array([1e-17]))[0] == 0.0
    assert new(np.array([1e-17]))[0] == math.log1p(1e-17) == 1e-17
    before = ulp_errors(old(SMALL), SMALL, lambda t: mpmath.log(1 + t))
    after = ulp_errors(new(SMALL), SMALL, lambda t: mpmath.log(1 + t))
    assert before.max() > 1e15 and after.max() <= 1.0, (before.max(), after.max())


def test_log1p_of_minus_p_matches_mpmath_for_tiny_probabilities():
    src = """
        import numpy as np
        def log_survival(p):
            return np.log(1 - p)
    """
    old, new = both(src, "log1p-manual", "log_survival")
    p = np.logspace(-20, -0.5, 100)
    # reference: numpy.log1p of the negated probability
    np.testing.assert_allclose(new(p), np.log1p(-p), rtol=0, atol=0)
    np.testing.assert_allclose(new(p[-10:]), old(p[-10:]), rtol=1e-12)
    exact = lambda t: mpmath.log(1 - t)  # noqa: E731
    assert ulp_errors(old(p), p, exact).max() > 1e15
    assert ulp_errors(new(p), p, exact).max() <= 1.0


def test_math_log1p_rewrite_with_an_existing_math_import():
    src = """
        import math
        def growth(rate: float):
            return math.log(1 + rate)
    """
    old, new = both(src, "log1p-manual", "growth")
    assert new(0.5) == pytest.approx(old(0.5), rel=1e-15)
    xs = [1e-18, 3e-12, 1e-8, 0.25]
    # reference: mpmath at 50 digits
    assert ulp_errors([new(x) for x in xs], xs, lambda t: mpmath.log(1 + t)).max() <= 1.0
    assert ulp_errors([old(x) for x in xs], xs, lambda t: mpmath.log(1 + t)).max() > 1e6


def test_log1p_review_fix_adds_the_import_it_needs():
    src = """
        from numpy import log
        def growth(rate):
            return log(1 + rate)
    """
    text = fixed(src, "log1p-manual", "review")
    assert "from numpy import log1p" in text
    new = load(text, "growth")
    # reference: math.log1p
    assert new(2e-17) == math.log1p(2e-17)


@needs_torch
def test_torch_log1p_method_in_float32():
    src = """
        import torch
        def growth(rate):
            return (1 + rate).log()
    """
    old, new = both(src, "log1p-manual", "growth")
    x = torch.linspace(-0.5, 4.0, 40)
    torch.testing.assert_close(new(x), old(x))
    tiny = torch.tensor([1e-9, -1e-9], dtype=torch.float32)
    assert (old(tiny) == 0).all()  # 1 +- 1e-9 rounds to 1 in float32
    # reference: numpy.log1p in float64
    np.testing.assert_allclose(new(tiny).numpy(), np.log1p(tiny.double().numpy()), rtol=1e-6)


# -- expm1-manual -----------------------------------------------------------------------
ELU = """
    import numpy as np
    def elu(x, alpha=1.0):
        return np.where(x > 0, x, alpha * (np.exp(x) - 1))
"""
ELU_DISTRIBUTED = ELU.replace("alpha * (np.exp(x) - 1)", "alpha * np.exp(x) - alpha")


@needs_torch
@pytest.mark.parametrize("src", [ELU, ELU_DISTRIBUTED], ids=["factored", "distributed"])
def test_elu_rewrite_matches_torch_elu_and_keeps_small_negative_inputs(src):
    old, new = both(src, "expm1-manual", "elu")
    x = np.linspace(-6.0, 3.0, 91)
    # reference: torch.nn.functional.elu
    expected = F.elu(torch.tensor(x)).numpy()
    np.testing.assert_allclose(new(x), expected, rtol=1e-14)
    np.testing.assert_allclose(old(x), expected, rtol=1e-12)
    small = -np.logspace(-20, -1, 120)
    before = ulp_errors(old(small), small, mpmath.expm1)
    after = ulp_errors(new(small), small, mpmath.expm1)
    assert before.max() > 1e15 and after.max() <= 1.0, (before.max(), after.max())


def test_exp_of_small_x_minus_one_loses_half_its_digits_and_expm1_keeps_them():
    src = """
        import numpy as np
        def rel_change(log_ratio):
            return np.exp(log_ratio) - 1
    """
    old, new = both(src, "expm1-manual", "rel_change")
    # the page's example: exp(1e-10) - 1 keeps about 8 of 16 digits; reference: math.expm1
    rel = abs(old(1e-10) - math.expm1(1e-10)) / math.expm1(1e-10)
    assert 1e-9 < rel < 1e-7
    assert new(1e-10) == math.expm1(1e-10)
    before = ulp_errors(old(SMALL), SMALL, mpmath.expm1)
    after = ulp_errors(new(SMALL), SMALL, mpmath.expm1)
    assert before.max() > 1e15 and after.max() <= 1.0


def test_one_minus_exp_becomes_minus_expm1():
    src = """
        import numpy as np
        def failure_prob(rate, t):
            return 1 - np.exp(-rate * t)
    """
    old, new = both(src, "expm1-manual", "failure_prob")
    rates = np.logspace(-15, 1, 80)
    np.testing.assert_allclose(new(rates[-20:], 2.0), old(rates[-20:], 2.0), rtol=1e-13)
    # reference: mpmath, -expm1(-2 r) at 50 digits
    exact = lambda r: -mpmath.expm1(-2 * r)  # noqa: E731
    assert ulp_errors(new(rates, 2.0), rates, exact).max() <= 1.0
    assert ulp_errors(old(rates, 2.0), rates, exact).max() > 1e6


def test_scalar_elu_with_from_math_import_exp_gets_a_review_fix_with_import():
    src = """
        from math import exp
        def elu(x, alpha=1.0):
            return x if x > 0 else alpha * (exp(x) - 1)
    """
    text = fixed(src, "expm1-manual", "review")
    assert "from math import expm1" in text
    new = load(text, "elu")
    # reference: math.expm1
    assert [new(x) for x in (-1e-12, -0.5, 2.0)] == [math.expm1(-1e-12), math.expm1(-0.5), 2.0]


@needs_torch
def test_torch_expm1_method_in_float32():
    src = """
        import torch
        def elu(x, alpha=1.0):
            return torch.where(x > 0, x, alpha * (x.exp() - 1))
    """
    old, new = both(src, "expm1-manual", "elu")
    x = torch.linspace(-5, 2, 50)
    torch.testing.assert_close(new(x), old(x))
    tiny = torch.tensor([-1e-8, -2e-9])
    assert (old(tiny) == 0).all()  # exp(-1e-8) rounds to 1 in float32
    # reference: torch.nn.functional.elu in float64
    np.testing.assert_allclose(new(tiny).numpy(), F.elu(tiny.double()).numpy(), rtol=1e-6)


# -- sigmoid-manual ---------------------------------------------------------------------
def sigmoid_exact(t):
    return 1 / (1 + mpmath.exp(-t))


def test_ratio_sigmoid_is_nan_past_709_78_and_expit_is_not():
    src = """
        import numpy as np
        def sigmoid(z):
            return np.exp(z) / (1 + np.exp(z))
    """
    old, new = both(src, "sigmoid-manual", "sigmoid", kind="review")
    ordinary = np.linspace(-30, 30, 61)
    np.testing.assert_allclose(new(ordinary), old(ordinary), rtol=1e-14)
    assert np.isfinite(quietly(old, np.array([F64_EXP_MAX - 0.01])))[0]
    assert np.isnan(quietly(old, np.array([710.0])))[0]  # inf / inf
    # reference: mpmath at 50 digits, over the float64 normal range of the result
    xs = np.linspace(-700, 740, 400)
    assert np.isinf(ulp_errors(quietly(old, xs), xs, sigmoid_exact)).any()
    assert ulp_errors(new(xs), xs, sigmoid_exact).max() <= 2.0


def test_reciprocal_sigmoid_overflows_in_exp_and_expit_does_not():
    src = """
        import numpy as np
        from scipy.special import expit
        def sigmoid(z):
            return 1 / (1 + np.exp(-z))
    """
    old, new = both(src, "sigmoid-manual", "sigmoid")  # auto: expit is already imported
    ordinary = np.linspace(-30, 30, 61)
    np.testing.assert_allclose(new(ordinary), old(ordinary), rtol=1e-14)
    with np.errstate(over="raise"):
        with pytest.raises(FloatingPointError):
            old(np.array([-710.0]))
        new(np.array([-710.0]))
    # reference: scipy.special.expit is the rewrite; mpmath checks it
    xs = np.linspace(-700, 740, 400)
    assert ulp_errors(new(xs), xs, sigmoid_exact).max() <= 2.0


def test_math_sigmoid_rewrite_never_raises_and_matches_expit():
    src = """
        import math
        def sigmoid(z):
            return 1 / (1 + math.exp(-z))
    """
    old, new = both(src, "sigmoid-manual", "sigmoid")
    for z in (-30.0, -1.0, 0.0, 0.5, 30.0):
        assert new(z) == pytest.approx(old(z), rel=1e-15)
    with pytest.raises(OverflowError):
        old(-710.0)
    xs = np.linspace(-800, 800, 401)
    got = np.array([new(float(z)) for z in xs])
    assert np.isfinite(got).all() and ((got >= 0) & (got <= 1)).all()
    # references: scipy.special.expit and mpmath at 50 digits, where the result is a
    # normal float64 (below x = -708 expit returns 0 and the rewrite a subnormal)
    normal = np.abs(xs) <= 700
    np.testing.assert_allclose(got[normal], scipy.special.expit(xs[normal]), rtol=1e-15)
    assert ulp_errors(got[normal], xs[normal], sigmoid_exact).max() <= 2.0


@needs_torch
def test_torch_sigmoid_rewrite_has_a_finite_gradient_where_the_hand_written_one_is_nan():
    src = """
        import torch
        def gate(h):
            return 1 / (1 + torch.exp(-h))
    """
    old, new = both(src, "sigmoid-manual", "gate")
    h = torch.linspace(-20, 20, 41)
    torch.testing.assert_close(new(h), old(h))
    # exp(89) overflows in float32 (89 > 88.72): 1/inf is 0, but backward gives 0 * inf
    x_old = torch.tensor([-89.0, 3.0], requires_grad=True)
    old(x_old).sum().backward()
    assert torch.isnan(x_old.grad[0])
    x_new = torch.tensor([-89.0, 3.0], requires_grad=True)
    new(x_new).sum().backward()
    # reference: scipy.special.expit, s * (1 - s), in float64
    s = scipy.special.expit(np.array([-89.0, 3.0]))
    # (torch.sigmoid(-89) itself rounds to 0 in float32: compare above the normal range)
    np.testing.assert_allclose(x_new.grad.numpy(), s * (1 - s), rtol=1e-5, atol=float(np.finfo(np.float32).tiny))


# -- softplus-manual --------------------------------------------------------------------
def softplus_exact(t):
    return mpmath.log(1 + mpmath.exp(t))


def test_numpy_softplus_rewrite_is_logaddexp_and_accurate_everywhere():
    src = """
        import numpy as np
        def softplus(x):
            return np.log(1 + np.exp(x))
    """
    old, new = both(src, "softplus-manual", "softplus")
    ordinary = np.linspace(-5, 30, 36)  # further left the naive form is already off
    np.testing.assert_allclose(new(ordinary), old(ordinary), rtol=1e-13)
    big = np.array([800.0, 1000.0])
    assert np.isinf(quietly(old, big)).all()
    # reference: torch.nn.functional.softplus returns x itself this far out
    if torch is not None:
        np.testing.assert_allclose(new(big), F.softplus(torch.tensor(big)).numpy(), rtol=0)
    xs = np.linspace(-60, 60, 481)
    before = ulp_errors(quietly(old, xs), xs, softplus_exact)
    after = ulp_errors(new(xs), xs, softplus_exact)
    # below x = -37 the naive form returns 0.0 where softplus(x) is exp(x)
    assert old(np.array([-40.0]))[0] == 0.0
    assert before.max() > 1e15 and after.max() <= 2.0, (before.max(), after.max())


def test_math_softplus_rewrite_never_raises():
    src = """
        import math
        def softplus(x):
            return 2 * math.log(1 + math.exp(x))
    """
    old, new = both(src, "softplus-manual", "softplus")
    assert new(1.5) == pytest.approx(old(1.5), rel=1e-15)
    with pytest.raises(OverflowError):
        old(1000.0)
    xs = np.linspace(-60, 60, 241)
    got = np.array([new(float(x)) / 2 for x in xs])
    # references: numpy.logaddexp and mpmath at 50 digits
    np.testing.assert_allclose(got, np.logaddexp(0, xs), rtol=1e-15)
    assert ulp_errors(got, xs, softplus_exact).max() <= 2.0
    assert new(1000.0) == 2000.0


@needs_torch
def test_torch_softplus_review_fix_has_finite_values_and_gradients():
    src = """
        import torch
        def softplus(x):
            return torch.log(1 + torch.exp(x))
    """
    old, new = both(src, "softplus-manual", "softplus", kind="review")
    x = torch.linspace(-15, 15, 31)
    torch.testing.assert_close(new(x), old(x))
    x_old = torch.tensor([100.0], requires_grad=True)
    y = old(x_old)
    y.backward()
    assert torch.isinf(y).all() and torch.isnan(x_old.grad).all()
    x_new = torch.tensor([100.0, -3.0], requires_grad=True)
    new(x_new).sum().backward()
    # reference: the derivative of softplus is scipy.special.expit
    np.testing.assert_allclose(x_new.grad.numpy(), scipy.special.expit([100.0, -3.0]), rtol=1e-6)
    xs = np.linspace(-60, 60, 481).astype(np.float32)
    got = new(torch.tensor(xs)).numpy()
    assert ulp_errors(got, xs, softplus_exact, dtype=np.float32).max() <= 2.0


@needs_torch
def test_torch_softplus_threshold_is_why_the_fix_is_review():
    # F.softplus returns x above 20 in every dtype: in float64 that is off by
    # log1p(exp(-20.5)) = 1.2e-9, far more than an ulp (reference: mpmath).
    x = np.array([20.5])
    got = F.softplus(torch.tensor(x, dtype=torch.float64)).numpy()
    assert ulp_errors(got, x, softplus_exact).max() > 1e5


# -- log-exp-roundtrip ------------------------------------------------------------------
def test_log_of_exp_rewrite_is_x_where_the_round_trip_overflows():
    src = """
        import numpy as np
        def score(x):
            return np.log(np.exp(x))
    """
    old, new = both(src, "log-exp-roundtrip", "score")
    xs = np.linspace(-50, 50, 1001)
    np.testing.assert_allclose(new(xs), old(xs), rtol=1e-14, atol=1e-14)
    far = np.array([800.0, -800.0])
    # worked example: the round trip of 800 is inf (exp overflows) and of -800 is -inf
    assert list(quietly(old, far)) == [np.inf, -np.inf]
    np.testing.assert_array_equal(new(far), far)
    assert ulp_errors(new(xs), xs, lambda t: t).max() == 0.0
    assert ulp_errors(quietly(old, xs), xs, lambda t: t).max() > 0.0


def test_exp_of_log_review_fix_differs_only_for_non_positive_input():
    src = """
        import numpy as np
        def restore(x):
            return np.exp(np.log(x))
    """
    old, new = both(src, "log-exp-roundtrip", "restore", kind="review")
    xs = np.logspace(-300, 300, 61)
    np.testing.assert_allclose(new(xs), old(xs), rtol=1e-12)
    # reference: the identity; the round trip rounds by up to |log x| ulps
    assert ulp_errors(quietly(old, xs), xs, lambda t: t).max() > 1.0
    neg = np.array([-2.0])
    assert np.isnan(quietly(old, neg))[0] and new(neg)[0] == -2.0
