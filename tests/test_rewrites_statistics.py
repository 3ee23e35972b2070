"""The statistics-family rewrites, proven numerically: equal to the original on ordinary
inputs; finite and equal to an outside reference where the original fails; and, where
the claim is accuracy, error in ulps against mpmath at 50 digits before and after."""
import ast
import math
import statistics
import textwrap

import mpmath
import numpy as np
import pytest
import scipy.linalg
import scipy.special

import test_rules_statistics as cases
from harness import both, fixed, load
from nanproof.fix import fix_bytes

try:
    import torch
except ImportError:  # pragma: no cover - CI installs the CPU build
    torch = None

needs_torch = pytest.mark.skipif(torch is None, reason="needs torch")
mpmath.mp.dps = 50




def ulp_error(got, exact) -> float:
    """|got - exact| in units in the last place of the float64 nearest to ``exact``."""
    if not math.isfinite(float(got)):
        return math.inf
    return float(abs(mpmath.mpf(float(got)) - exact) / mpmath.mpf(float(np.spacing(abs(float(exact))))))


# ---------------------------------------------------------------------------------------
# variance-cancellation
# ---------------------------------------------------------------------------------------
def two_pass_variance(x) -> float:
    """Reference: population variance with math.fsum (correctly rounded sums), two passes."""
    values = [float(v) for v in np.ravel(x)]
    m = math.fsum(values) / len(values)
    return math.fsum((v - m) ** 2 for v in values) / len(values)


def mp_variance(x):
    """Reference at 50 digits: the population variance of the float64 values as given."""
    values = [mpmath.mpf(float(v)) for v in np.ravel(x)]
    m = mpmath.fsum(values) / len(values)
    return mpmath.fsum((v - m) ** 2 for v in values) / len(values)


# Data around 1e8 with a spread of 1: mean(x**2) is about 1e16, where float64 values are
# 2 apart (numpy.spacing(1e16) == 2), so the naive difference is a multiple of 2 (or 0).
FAR = [1e8 + np.random.default_rng(seed).standard_normal(1000) for seed in range(8)]
ORDINARY = np.random.default_rng(11).standard_normal((5, 40)) * 3 + 2


def test_numpy_var_matches_two_pass_reference_where_moments_cancel():
    src = """
        import numpy as np
        def variance(x):
            return np.mean(x**2) - np.mean(x)**2
    """
    old, new = both(src, "variance-cancellation", "variance")
    np.testing.assert_allclose(new(ORDINARY), old(ORDINARY), rtol=1e-12)
    naive = [old(x) for x in FAR]
    assert min(naive) < 0  # a negative variance
    for x, bad in zip(FAR, naive):
        ref = two_pass_variance(x)
        assert abs(bad - ref) > 0.4 * ref  # no correct digit
        assert new(x) == pytest.approx(ref, rel=1e-9)  # reference: math.fsum two-pass
        assert new(x) == pytest.approx(np.var(x), rel=1e-12)  # reference: numpy.var
        assert new(x) == pytest.approx(statistics.pvariance(x.tolist()), rel=1e-9)  # reference: statistics


def test_variance_error_in_ulps_against_mpmath_over_growing_offsets():
    src = """
        import numpy as np
        def variance(x):
            m = x.mean()
            return (x**2).mean() - m**2
    """
    old, new = both(src, "variance-cancellation", "variance")
    rng = np.random.default_rng(5)
    before, after = {}, {}
    for offset in (0.0, 1e2, 1e4, 1e6, 1e8):
        x = offset + rng.standard_normal(500)
        exact = mp_variance(x)  # reference: mpmath at 50 digits
        before[offset], after[offset] = ulp_error(old(x), exact), ulp_error(new(x), exact)
    # measured: before grows from 0.05 ulp (offset 0) to 5e15 ulps (offset 1e8); after stays below 1
    assert before[0.0] < 4 and before[1e4] > 1e6 and before[1e8] > 1e14, before
    assert max(after.values()) <= 4, after


def test_variance_over_an_axis_keeps_the_shape():
    src = """
        import numpy as np
        def variance(x):
            m = np.mean(x, axis=1, keepdims=True)
            return np.mean(x * x, axis=1, keepdims=True) - m * m
    """
    old, new = both(src, "variance-cancellation", "variance")
    np.testing.assert_allclose(new(ORDINARY), old(ORDINARY), rtol=1e-11)
    rows = np.stack(FAR[:3])
    got = new(rows)
    assert got.shape == (3, 1)
    np.testing.assert_allclose(got[:, 0], [two_pass_variance(r) for r in rows], rtol=1e-9)


def test_sums_over_size_become_numpy_var():
    src = """
        import numpy as np
        def variance(x):
            return np.sum(x**2) / x.size - (np.sum(x) / x.size) ** 2
    """
    old, new = both(src, "variance-cancellation", "variance")
    assert new(ORDINARY) == pytest.approx(old(ORDINARY), rel=1e-12)
    assert new(FAR[0]) == pytest.approx(two_pass_variance(FAR[0]), rel=1e-9)  # reference: math.fsum


def test_statistics_means_become_pvariance():
    src = """
        import statistics
        def variance(xs):
            return statistics.mean(v * v for v in xs) - statistics.mean(xs) ** 2
    """
    old, new = both(src, "variance-cancellation", "variance")
    xs = [1.5, 2.0, 4.25, 7.0]
    assert new(xs) == pytest.approx(old(xs), rel=1e-15)
    far = [1e8 - 1.0, 1e8, 1e8 + 1.0]
    assert old(far) == 0.0  # the mean of squares rounds to 1e16 exactly
    assert new(far) == pytest.approx(two_pass_variance(far), rel=1e-15) == 2 / 3  # reference: math.fsum


def test_builtin_sums_of_lists_become_pvariance_with_an_import_for_review():
    src = """
        def variance(xs):
            n = len(xs)
            return sum(v**2 for v in xs) / n - (sum(xs) / n) ** 2
    """
    out = fixed(src, "variance-cancellation", include_review=True)
    assert "from statistics import pvariance" in out
    old, new = load(src, "variance"), load(out, "variance")
    xs = [0.5, 1.25, 3.0]
    assert new(xs) == pytest.approx(old(xs), rel=1e-14)
    far = list(FAR[1])
    assert new(far) == pytest.approx(two_pass_variance(far), rel=1e-12)  # reference: math.fsum
    assert abs(old(far) - two_pass_variance(far)) > 0.4


@needs_torch
def test_torch_var_with_correction_zero_is_the_population_variance():
    src = """
        import torch
        def variance(x):
            return torch.mean(x**2, dim=1) - torch.mean(x, dim=1)**2
    """
    old, new = both(src, "variance-cancellation", "variance")
    t = torch.tensor(ORDINARY)
    torch.testing.assert_close(new(t), old(t))
    # reference: numpy.var (ddof=0); torch.var without correction=0 would divide by n - 1
    np.testing.assert_allclose(new(t).numpy(), np.var(ORDINARY, axis=1), rtol=1e-12)
    assert not np.allclose(torch.var(t, dim=1).numpy(), np.var(ORDINARY, axis=1), rtol=1e-6)
    rows = torch.tensor(np.stack(FAR[:4]))
    assert (old(rows) <= 0).any() or (abs(old(rows) - 1) > 0.4).all()
    # measured: torch.var agrees with the math.fsum two-pass reference to about 6e-9 here
    np.testing.assert_allclose(new(rows).numpy(), [two_pass_variance(r) for r in FAR[:4]], rtol=1e-7)


@needs_torch
def test_torch_method_variance_in_float32():
    src = """
        import torch
        def variance(x):
            m = x.mean(-1, keepdim=True)
            return x.pow(2).mean(-1, keepdim=True) - m.pow(2)
    """
    old, new = both(src, "variance-cancellation", "variance")
    # float32 data around 1e4 with a spread of 1: mean(x**2) ~ 1e8, spacing 8 in float32
    data = 1e4 + np.random.default_rng(2).standard_normal((3, 1000))
    t = torch.tensor(data, dtype=torch.float32)
    got, bad = new(t), old(t)
    assert got.dtype == torch.float32 and got.shape == (3, 1)
    ref = [two_pass_variance(r) for r in t.double().numpy()]  # reference: math.fsum on the float32 data
    np.testing.assert_allclose(got[:, 0].numpy(), ref, rtol=1e-4)
    assert (np.abs(bad[:, 0].numpy() - ref) > 0.4 * np.array(ref)).all()


# ---------------------------------------------------------------------------------------
# xlogx-nan
# ---------------------------------------------------------------------------------------
P_ZERO = np.array([[0.0, 0.25, 0.75], [0.5, 0.5, 0.0]])
P_POS = np.array([[0.2, 0.3, 0.5], [0.6, 0.3, 0.1]])
Q = np.array([[0.1, 0.6, 0.3], [0.25, 0.25, 0.5]])


def test_numpy_entropy_becomes_xlogy_and_agrees_with_entr():
    src = """
        import numpy as np
        from scipy import special
        def entropy(p):
            return -np.sum(p * np.log(p), axis=-1)
    """
    old, new = both(src, "xlogx-nan", "entropy")
    np.testing.assert_allclose(new(P_POS), old(P_POS), rtol=1e-15)
    with np.errstate(all="ignore"):
        assert np.isnan(old(P_ZERO)).all()
    # references: scipy.special.entr (= -x log x, note the sign) and scipy.special.xlogy
    np.testing.assert_allclose(new(P_ZERO), scipy.special.entr(P_ZERO).sum(-1), rtol=1e-15)
    np.testing.assert_allclose(new(P_ZERO), -scipy.special.xlogy(P_ZERO, P_ZERO).sum(-1), rtol=1e-15)


def test_entropy_without_scipy_gets_the_import_for_review():
    src = """
        import numpy as np
        def entropy(p):
            return (-p * np.log(p)).sum()
    """
    out = fixed(src, "xlogx-nan", include_review=True)
    assert "from scipy.special import xlogy" in out
    new = load(out, "entropy")
    assert new(P_ZERO[0]) == pytest.approx(scipy.special.entr(P_ZERO[0]).sum(), rel=1e-15)  # reference: entr


@pytest.mark.parametrize("kl", ["np.sum(p * np.log(p / q), axis=-1)", "np.sum(p * (np.log(p) - np.log(q)), axis=-1)"])
def test_kl_divergence_becomes_rel_entr(kl):
    src = f"""
        import numpy as np
        import scipy.special
        def kl(p, q):
            return {kl}
    """
    old, new = both(src, "xlogx-nan", "kl")
    np.testing.assert_allclose(new(P_POS, Q), old(P_POS, Q), rtol=1e-13)
    with np.errstate(all="ignore"):
        assert np.isnan(old(P_ZERO, Q)).all()
    np.testing.assert_allclose(new(P_ZERO, Q), scipy.special.rel_entr(P_ZERO, Q).sum(-1), rtol=1e-15)  # reference: rel_entr


def test_binary_entropy_term_through_xlog1py_is_zero_at_one_and_accurate_near_zero():
    src = """
        import numpy as np
        import scipy.special
        def term(q):
            return (1 - q) * np.log(1 - q)
    """
    old, new = both(src, "xlogx-nan", "term")
    q = np.array([1.0, 1e-17, 1e-9, 0.3, 0.999])
    with np.errstate(all="ignore"):
        bad = old(q)
    got = new(q)
    assert np.isnan(bad[0]) and bad[1] == 0.0  # 1 - 1e-17 rounds to 1
    assert got[0] == 0.0 and scipy.special.xlog1py(0.0, -1.0) == 0.0  # reference: scipy.special.xlog1py
    for i in range(1, len(q)):
        exact = (1 - mpmath.mpf(float(q[i]))) * mpmath.log1p(-mpmath.mpf(float(q[i])))  # reference: mpmath, 50 digits
        assert ulp_error(got[i], exact) <= 2, (q[i], got[i])
    assert ulp_error(bad[2], (1 - mpmath.mpf(1e-9)) * mpmath.log1p(-mpmath.mpf(1e-9))) > 1e6


def test_math_entropy_no_longer_raises_at_zero():
    src = """
        import math
        def entropy(ps):
            return -sum(p * math.log(p) for p in ps)
    """
    old, new = both(src, "xlogx-nan", "entropy", include_review=True)
    assert new([0.25, 0.75]) == old([0.25, 0.75])
    with pytest.raises(ValueError):
        old([0.0, 0.25, 0.75])
    assert new([0.0, 0.25, 0.75]) == pytest.approx(scipy.special.entr([0.0, 0.25, 0.75]).sum(), rel=1e-15)  # reference: entr


def test_entropy_in_bits_with_math_log_base_two():
    src = """
        import math
        def bits(ps):
            return -sum(p * math.log(p, 2) for p in ps)
    """
    old, new = both(src, "xlogx-nan", "bits", include_review=True)
    assert new([0.5, 0.5]) == old([0.5, 0.5]) == 1.0
    with pytest.raises(ValueError):
        old([0.0, 0.5, 0.5])
    # reference: scipy.special.entr in nats, divided by ln 2
    assert new([0.0, 0.25, 0.75]) == pytest.approx(scipy.special.entr([0.25, 0.75]).sum() / math.log(2), rel=1e-15)


@needs_torch
def test_torch_xlogy_fixes_the_value_but_not_the_gradient_at_zero():
    src = """
        import torch
        def entropy(p):
            return -(p * torch.log(p)).sum(dim=-1)
    """
    old, new = both(src, "xlogx-nan", "entropy")
    torch.testing.assert_close(new(torch.tensor(P_POS)), old(torch.tensor(P_POS)))
    p = torch.tensor(P_ZERO, requires_grad=True)
    assert torch.isnan(old(p)).all()
    value = new(p)
    np.testing.assert_allclose(value.detach().numpy(), scipy.special.entr(P_ZERO).sum(-1), rtol=1e-15)  # reference: entr
    value.sum().backward()
    # torch.autograd: d/dp of -p log p is -(log p + 1) where p > 0; at exactly p = 0 the
    # backward of xlogy(p, p) divides 0 by 0 (measured), as the rule's message warns.
    pos = P_ZERO > 0
    np.testing.assert_allclose(p.grad.numpy()[pos], -(np.log(P_ZERO[pos]) + 1), rtol=1e-12)
    assert torch.isnan(p.grad[~torch.tensor(pos)]).all()


@needs_torch
def test_entropy_of_softmax_through_log_softmax_has_finite_gradients():
    src = """
        import torch
        def entropy(z):
            p = torch.softmax(z, dim=-1)
            return -(p * torch.log(p)).sum(dim=-1)
    """
    old, new = both(src, "xlogx-nan", "entropy")
    ordinary = torch.tensor([[0.5, -1.0, 2.0]], dtype=torch.float64)
    torch.testing.assert_close(new(ordinary), old(ordinary))
    # a logit 800 below the largest: its probability underflows to exactly 0 in float64
    z = torch.tensor([[0.0, 800.0, 799.0]], dtype=torch.float64, requires_grad=True)
    assert torch.isnan(old(z)).all()
    h = new(z)
    h.sum().backward()
    lp = scipy.special.log_softmax(z.detach().numpy(), axis=-1)
    p = np.exp(lp)
    ref_h = -(p * lp).sum(-1)  # reference: scipy.special.log_softmax, computed apart
    np.testing.assert_allclose(h.detach().numpy(), ref_h, rtol=1e-12)
    # gradient of H = -sum p log p with p = softmax(z): -p * (log p + H) (closed form)
    np.testing.assert_allclose(z.grad.numpy(), -p * (lp + ref_h[:, None]), rtol=1e-10, atol=1e-300)
    assert torch.isfinite(z.grad).all()


@needs_torch
def test_second_where_gives_the_guarded_entropy_a_finite_gradient():
    src = """
        import torch
        def entropy(p):
            return -torch.where(p > 0, p * torch.log(p), torch.zeros_like(p)).sum()
    """
    old, new = both(src, "xlogx-nan", "entropy", include_review=True)
    p_old = torch.tensor(P_ZERO[0], requires_grad=True)
    old(p_old).backward()
    assert torch.isnan(p_old.grad).any()  # torch.autograd: the where() guard leaks nan
    p = torch.tensor(P_ZERO[0], requires_grad=True)
    value = new(p)
    value.backward()
    assert value.item() == pytest.approx(scipy.special.entr(P_ZERO[0]).sum(), rel=1e-15)  # reference: entr
    pos = P_ZERO[0] > 0
    np.testing.assert_allclose(p.grad.numpy()[pos], -(np.log(P_ZERO[0][pos]) + 1), rtol=1e-12)
    assert (p.grad.numpy()[~pos] == 0).all()


# ---------------------------------------------------------------------------------------
# log-of-product
# ---------------------------------------------------------------------------------------
def test_sum_of_logs_survives_a_thousand_probabilities():
    src = """
        import numpy as np
        def loglik(p):
            return np.log(np.prod(p, axis=-1))
    """
    old, new = both(src, "log-of-product", "loglik")
    short = np.random.default_rng(1).uniform(0.05, 1.0, (3, 20))
    np.testing.assert_allclose(new(short), old(short), rtol=1e-12)
    p = np.full((2, 1000), 0.01)
    with np.errstate(divide="ignore"):
        assert (old(p) == -np.inf).all()  # 0.01**1000 = 1e-2000 underflows to 0
    ref = math.fsum([math.log(0.01)] * 1000)  # reference: math.fsum of math.log
    np.testing.assert_allclose(new(p), [ref, ref], rtol=1e-14)
    assert round(ref, 2) == -4605.17


def test_sum_of_logs_error_in_ulps_against_mpmath():
    src = """
        import numpy as np
        def loglik(p):
            return np.log(np.prod(p))
    """
    old, new = both(src, "log-of-product", "loglik")
    rng = np.random.default_rng(9)
    before, after = {}, {}
    for n in (10, 100, 1000, 5000):
        p = rng.uniform(0.01, 1.0, n)
        exact = mpmath.fsum(mpmath.log(mpmath.mpf(float(v))) for v in p)  # reference: mpmath, 50 digits
        with np.errstate(divide="ignore"):
            before[n], after[n] = ulp_error(old(p), exact), ulp_error(new(p), exact)
    # measured: the product is finite and accurate for 10 and 100 terms, then underflows
    assert before[10] < 64 and before[1000] == math.inf and before[5000] == math.inf, before
    assert max(after.values()) <= 8, after


def test_keepdims_and_math_sums_of_logs():
    src = """
        import math
        import numpy as np
        def rows(p):
            lik = np.prod(p, axis=1, keepdims=True)
            return np.log(lik)
        def scalar(ps):
            return math.log(math.prod(ps))
    """
    out = fixed(src, "log-of-product")
    rows, scalar = load(out, "rows"), load(out, "scalar")
    p = np.full((2, 400), 0.05)
    assert rows(p).shape == (2, 1)
    np.testing.assert_allclose(rows(p), 400 * math.log(0.05), rtol=1e-13)  # reference: math.log
    ps = [0.05] * 400
    assert load(src, "scalar")(ps[:10]) == pytest.approx(scalar(ps[:10]), rel=1e-14)
    with pytest.raises(ValueError):
        load(src, "scalar")(ps)  # math.log(0.0): the product underflowed
    assert scalar(ps) == pytest.approx(400 * math.log(0.05), rel=1e-15)  # reference: math.log


@needs_torch
def test_torch_sum_of_logs_keeps_dim():
    src = """
        import torch
        def loglik(p):
            return p.prod(dim=-1).log()
    """
    old, new = both(src, "log-of-product", "loglik")
    p = torch.full((3, 200), 0.1, dtype=torch.float32)
    assert (old(p) == -torch.inf).all()  # 1e-200 underflows in float32
    got = new(p)
    assert got.shape == (3,) and got.dtype == torch.float32
    np.testing.assert_allclose(got.numpy(), 200 * math.log(np.float32(0.1)), rtol=1e-5)  # reference: math.log


# ---------------------------------------------------------------------------------------
# norm-overflow
# ---------------------------------------------------------------------------------------
def mp_norm(*values):
    return mpmath.sqrt(mpmath.fsum(mpmath.mpf(float(v)) ** 2 for v in values))  # 50 digits


def test_hypot_survives_1e200_and_1e_minus_200():
    src = """
        import numpy as np
        def dist(a, b):
            return np.sqrt(a**2 + b**2)
    """
    old, new = both(src, "norm-overflow", "dist")
    a, b = np.array([3.0, 1e200, 1e-200]), np.array([4.0, 1e200, 1e-200])
    with np.errstate(all="ignore"):
        bad = old(a, b)
    assert bad[0] == 5.0 and bad[1] == np.inf and bad[2] == 0.0
    got = new(a, b)
    np.testing.assert_allclose(got, [5.0, math.hypot(1e200, 1e200), math.hypot(1e-200, 1e-200)], rtol=1e-15)  # reference: math.hypot
    assert f"{got[1]:.4g}" == "1.414e+200"


def test_hypot_error_in_ulps_over_magnitudes():
    src = """
        import numpy as np
        def dist(a, b):
            return np.sqrt(a**2 + b**2)
    """
    old, new = both(src, "norm-overflow", "dist")
    rng = np.random.default_rng(4)
    before, after = {}, {}
    for e in (-300, -160, -100, 0, 100, 160, 300):
        worst_b = worst_a = 0.0
        for a, b in rng.uniform(0.5, 1.0, (50, 2)) * 10.0**e:
            exact = mp_norm(a, b)  # reference: mpmath at 50 digits
            with np.errstate(all="ignore"):
                worst_b = max(worst_b, ulp_error(old(a, b), exact))
            worst_a = max(worst_a, ulp_error(new(a, b), exact))
        before[e], after[e] = worst_b, worst_a
    # overflow gives inf; underflow gives 0, 2**52 ulps and more away from the answer
    assert before[0] < 2 and before[160] == math.inf and before[-160] > 1e9 and before[-300] > 2**52, before
    assert max(after.values()) <= 1, after


def test_math_hypot_of_three_terms_and_of_a_list():
    src = """
        import math
        def length3(a, b, c):
            return math.sqrt(a*a + b*b + c*c)
        def length(xs):
            return math.sqrt(sum(v * v for v in xs))
    """
    out = fixed(src, "norm-overflow")
    l3, ln = load(out, "length3"), load(out, "length")
    assert l3(1.0, 2.0, 2.0) == 3.0 and ln([2.0, 3.0, 6.0]) == 7.0
    assert load(src, "length3")(1e200, 1e200, 1e200) == math.inf  # a*a overflows
    big = [1e200, 2e200, 2e200]
    for got in (l3(*big), ln(big)):
        assert ulp_error(got, mp_norm(*big)) <= 1  # reference: mpmath at 50 digits


@needs_torch
def test_torch_hypot_in_float32():
    src = """
        import torch
        def dist(a, b):
            return (a**2 + b**2).sqrt()
    """
    old, new = both(src, "norm-overflow", "dist")
    a = torch.tensor([3.0, 3e20, 3e-25])
    b = torch.tensor([4.0, 4e20, 4e-25])
    bad, got = old(a, b), new(a, b)
    assert bad[0] == 5 and torch.isinf(bad[1]) and bad[2] == 0
    np.testing.assert_allclose(got.numpy(), np.hypot(a.numpy(), b.numpy()), rtol=1e-6)  # reference: numpy.hypot
    np.testing.assert_allclose(got.numpy(), [5.0, 5e20, 5e-25], rtol=1e-6)


def test_vector_norm_uses_scipy_nrm2_and_numpy_norm_overflows_the_same():
    src = """
        import numpy as np
        def length(x):
            return np.sqrt(np.sum(x**2))
    """
    old, new = both(src, "norm-overflow", "length", include_review=True)
    ordinary = np.random.default_rng(6).standard_normal(300)
    assert new(ordinary) == pytest.approx(old(ordinary), rel=1e-14)
    x = np.array([1e155, 1e155, 3e154])
    with np.errstate(over="ignore"):
        assert old(x) == np.inf
        assert np.linalg.norm(x) == np.inf  # numpy.linalg.norm computes sqrt(dot(x, x)): no cure
    exact = mp_norm(*x)  # reference: mpmath at 50 digits
    assert ulp_error(new(x), exact) <= 1
    assert new(x) == scipy.linalg.norm(x)  # reference: scipy.linalg.norm


def test_vector_norm_error_in_ulps_before_and_after():
    src = """
        import numpy as np
        import scipy.linalg
        def length(x):
            return np.sqrt(np.dot(x, x))
    """
    old, new = both(src, "norm-overflow", "length", include_review=True)
    rng = np.random.default_rng(8)
    before, after = {}, {}
    for e in (-170, 0, 150, 170):
        x = rng.standard_normal(200) * 10.0**e
        exact = mp_norm(*x)  # reference: mpmath at 50 digits
        with np.errstate(all="ignore"):
            before[e] = ulp_error(old(x), exact)
        after[e] = ulp_error(new(x), exact)
    assert before[0] < 4 and before[170] == math.inf and before[-170] > 1e6, before
    assert max(after.values()) <= 1, after


# ---------------------------------------------------------------------------------------
# Every flagged example of the rule tests goes through the fix engine itself
# ---------------------------------------------------------------------------------------
def _flagged_examples() -> list:
    return [
        pytest.param(textwrap.dedent(src), id=f"{group.lower()}-{key}")
        for group in ("VARIANCE", "XLOGX", "PRODUCT", "NORM")
        for key, src in getattr(cases, group).items()
    ]


@pytest.mark.parametrize("src", _flagged_examples())
def test_fix_engine_applies_every_statistics_rewrite_it_is_offered(src):
    ours = {"variance-cancellation", "xlogx-nan", "log-of-product", "norm-overflow"}
    result = fix_bytes(src.encode(), include_review=True, path="example.py")
    assert not result.left.problems, result.left.problems
    if result.changes:
        ast.parse(result.changes[0].after.decode())
    # what is left of ours has no rewrite to offer (a suggestion only)
    assert all(f.fix is None for f in result.left.findings if f.rule in ours)
