"""The rule pages under rules/ are executable documentation, and these tests execute them.

- Every registered rule has a page; every page names a rule of the catalogue
  (../shared/spec/rules.md) and has the sections `nanproof explain` promises.
- Each ``python flagged`` block is reported with the page's rule, no ``python clean`` or
  ``python fixed`` block is, and the page's suppression comment silences the flagged ones.
- Each ``python failing`` block runs under NumPy: the naive form breaks as the page's
  ``<!-- expect: ... -->`` marker says, the rewrite agrees with an outside reference
  (scipy.special, numpy, math.fsum, mpmath), and the prose states what naive returns.
- Every number in a page's prose is a figure computed here from IEEE 754 limits read
  through numpy.finfo (or measured on the library it describes), and the limits
  themselves are checked against what numpy, scipy and torch really do at them.
"""
from __future__ import annotations

import ast
import math
import re
import warnings
from decimal import Decimal
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
import scipy.special
from click.testing import CliRunner

from nanproof.api import scan_source
from nanproof.cli import cli
from nanproof.pages import examples

REPO = Path(__file__).resolve().parents[1]
PAGES = sorted((REPO / "rules").glob("*.md"))
PAGE_IDS = [p.stem for p in PAGES]
CATALOGUE = REPO.parent / "shared" / "spec" / "rules.md"
SECTIONS = ("## Why it fails", "## Failing input", "## Rewrite", "## Fix kind", "## Examples", "## Suppression")
MIN_BLOCKS = {"flagged": 2, "clean": 2, "fixed": 1, "failing": 1}
ALLOWED_IMPORTS = {"numpy", "scipy", "math", "mpmath"}
# "Far more than rounding": 1e-3 relative is ~10^4 float32 ulps and ~10^12 float64 ulps.
FAR_MORE_THAN_ROUNDING = 1e-3
F16, F32, F64 = np.float16, np.float32, np.float64


def page_text(rule_id: str) -> str:
    return (REPO / "rules" / f"{rule_id}.md").read_text(encoding="utf-8")


def section(text: str, heading: str) -> str:
    """The body under ``heading`` up to the next second-level heading."""
    start = text.index(heading + "\n") + len(heading) + 1
    nxt = re.search(r"^## ", text[start:], re.M)
    return text[start : start + nxt.start()] if nxt else text[start:]


@lru_cache(maxsize=None)
def registered() -> dict:
    from nanproof.registry import all_rules

    return {r.id: r for r in all_rules()}


def require_registered(rule_id: str) -> None:
    if rule_id not in registered():
        pytest.skip(f"{rule_id} is not registered yet; its analyzer is being written in parallel")


def catalogue_rows() -> dict[str, str]:
    """Rule id -> its table row in the catalogue, or skip when the spec is not beside the repo."""
    if not CATALOGUE.exists():
        pytest.skip(f"no catalogue at {CATALOGUE}")
    rows = re.findall(r"^\| `([a-z0-9-]+)` \|(.*)$", CATALOGUE.read_text(encoding="utf-8"), re.M)
    assert rows, "no rule rows found in the catalogue table"
    return dict(rows)


def blocks(*tags: str) -> list:
    """One pytest param per tagged block, with ids such as ``softmax-unshifted:flagged2``."""
    out = []
    for path in PAGES:
        seen: dict[str, int] = {}
        for ex in examples(path.read_text(encoding="utf-8")):
            if ex.tag in tags:
                seen[ex.tag] = seen.get(ex.tag, 0) + 1
                out.append(pytest.param(path.stem, ex, id=f"{path.stem}:{ex.tag}{seen[ex.tag]}"))
    return out


# ---------------------------------------------------------------------------------------
# Stated numbers: a figure written with k digits stands for the value rounded to them
# ---------------------------------------------------------------------------------------
NUMBER = re.compile(r"(?<![\w.])-?(?:nan|inf|\d+(?:\.\d+)?(?:e[-+]?\d+)?)(?!\w)(?!\.\d)")
FIGURE = re.compile(r"(?<![\w.])-?\d+(?:\.\d+)?(?:e[-+]?\d+)?(?!\w)(?!\.\d)")  # prose says nan in words


def agrees(stated: str, value: float) -> bool:
    """True when ``value`` rounds to ``stated`` (nan, +-inf and zero must match exactly)."""
    value = float(value)
    if stated.lstrip("-") in ("nan", "inf"):
        return str(value) == stated
    d = Decimal(stated)
    if d == 0:
        return value == 0.0
    half_unit = Decimal(5) * Decimal(10) ** (d.as_tuple().exponent - 1)
    return math.isfinite(value) and abs(Decimal(value) - d) <= half_unit


def stated_values_agree(stated: str, actual) -> bool:
    tokens = NUMBER.findall(stated)
    values = np.ravel(np.asarray(actual, dtype=np.float64))
    return len(tokens) == len(values) and all(agrees(t, v) for t, v in zip(tokens, values))


def prose(text: str) -> str:
    """Page text without code (fenced or inline), HTML comments and the standard's name."""
    text = re.sub(r"^```.*?^```", "", text, flags=re.M | re.S)
    text = re.sub(r"<!--.*?-->", "", text, flags=re.S)
    text = re.sub(r"`[^`\n]*`", "", text)
    return text.replace("IEEE 754", "")


# ---------------------------------------------------------------------------------------
# IEEE 754 limits (binary16/32/64, read through numpy.finfo) behind the pages' figures
# ---------------------------------------------------------------------------------------
def exp_overflow(dt) -> float:
    """exp(x) is inf above ln(max finite)."""
    return math.log(float(np.finfo(dt).max))


def exp_zero_below(dt) -> float:
    """exp(x) rounds to 0 below ln(half the smallest subnormal) (round to nearest even)."""
    return math.log(float(np.finfo(dt).smallest_subnormal)) - math.log(2)


def sigmoid_one_above(dt) -> float:
    """1 + exp(-x) rounds to 1, so sigmoid(x) to exactly 1, once exp(-x) <= eps/2."""
    return math.log(2 / float(np.finfo(dt).eps))


def torch_bce_cap() -> float:
    """The loss PyTorch's binary_cross_entropy reports for a probability of exactly 1
    against a target of 0 (it clamps the log; measured on torch itself)."""
    torch = pytest.importorskip("torch")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return float(torch.nn.functional.binary_cross_entropy(torch.tensor([1.0]), torch.tensor([0.0])))


def finfo(dt, name: str) -> float:
    return float(getattr(np.finfo(dt), name))


# Page -> the figures its prose may (and must) state, in the order of no importance.
FIGURES = {
    "softmax-unshifted": lambda: [exp_overflow(F32), exp_overflow(F64), exp_overflow(F16)],
    "normalize-missing-keepdims": lambda: [],
    "log-of-softmax": lambda: [-exp_zero_below(F64), -exp_zero_below(F32), finfo(F64, "smallest_subnormal"), finfo(F32, "smallest_subnormal")],
    "logsumexp-unshifted": lambda: [exp_overflow(F64), exp_overflow(F32), exp_zero_below(F64), exp_zero_below(F32)],
    "logaddexp-manual": lambda: [exp_overflow(F64), exp_zero_below(F64)],
    "softmax-jacobian-dense": lambda: [finfo(F64, "tiny"), math.sqrt(finfo(F64, "tiny")), finfo(F16, "tiny"), math.sqrt(finfo(F16, "tiny"))],
    "cross-entropy-from-probs": lambda: [-exp_zero_below(F64), -exp_zero_below(F32)],
    "bce-from-sigmoid": lambda: [sigmoid_one_above(F64), sigmoid_one_above(F32), torch_bce_cap()],
    "log-of-sigmoid": lambda: [-exp_overflow(F64), -exp_overflow(F32), sigmoid_one_above(F64), sigmoid_one_above(F32)],
    "log-epsilon-guard": lambda: [math.log(1e-8)],
    "log1p-manual": lambda: [finfo(F64, "eps"), finfo(F64, "eps") / 2],
    "expm1-manual": lambda: [finfo(F64, "eps"), finfo(F64, "eps") / 2],
    "sigmoid-manual": lambda: [exp_overflow(F64), exp_overflow(F32)],
    "softplus-manual": lambda: [exp_overflow(F64), exp_overflow(F32)],
    "log-exp-roundtrip": lambda: [exp_overflow(F64), exp_zero_below(F64)],
    "variance-cancellation": lambda: [finfo(F64, "eps")],
    "xlogx-nan": lambda: [],
    "log-of-product": lambda: [finfo(F64, "smallest_subnormal"), finfo(F32, "smallest_subnormal")],
    "norm-overflow": lambda: [math.sqrt(finfo(F64, "max")), math.sqrt(finfo(F32, "max"))],
    "softmax-implicit-dim": lambda: [],
}


# ---------------------------------------------------------------------------------------
# Pages and the catalogue
# ---------------------------------------------------------------------------------------
def test_every_registered_rule_has_a_page():
    missing = [rid for rid in registered() if rid not in PAGE_IDS]
    assert not missing, f"rules without a page under rules/: {missing}"


def test_every_catalogued_rule_of_a_shipped_family_has_a_page():
    # A family the catalogue lists before any of its rules is built (its issue still
    # open) has no pages yet; every rule of a family we ship must have one.
    shipped = {r.family for r in registered().values()}
    rows = catalogue_rows()
    family = {rid: row.split("|")[1].strip() for rid, row in rows.items()}
    missing = [rid for rid in rows if family[rid] in shipped and rid not in PAGE_IDS]
    assert not missing, f"catalogue rules without a page: {missing}"


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_page_names_a_known_rule_in_its_title(rule_id):
    assert page_text(rule_id).splitlines()[0] == f"# {rule_id}"
    known = set(registered())
    if CATALOGUE.exists():
        known |= set(catalogue_rows())
    assert rule_id in known, f"rules/{rule_id}.md names no registered or catalogued rule"


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_page_has_every_section_in_order_and_enough_examples(rule_id):
    text = page_text(rule_id)
    positions = [text.find(h + "\n") for h in SECTIONS]
    assert -1 not in positions, f"missing sections: {[h for h, p in zip(SECTIONS, positions) if p < 0]}"
    assert positions == sorted(positions), "sections out of order"
    statement = text.split("\n\n", 2)[1]
    assert statement.strip() and not statement.startswith("#"), "no statement paragraph under the title"
    tags = [ex.tag for ex in examples(text)]
    for tag, least in MIN_BLOCKS.items():
        assert tags.count(tag) >= least, f"needs at least {least} `python {tag}` block(s)"
    assert tags.count("failing") == 1


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_fix_kind_section_agrees_with_catalogue_and_registry(rule_id):
    kinds = set(re.findall(r"\*\*(auto|review|suggestion only)\*\*", section(page_text(rule_id), "## Fix kind")))
    assert kinds, "the Fix kind section names no **auto** / **review** / **suggestion only**"
    if CATALOGUE.exists():
        row = catalogue_rows()[rule_id]
        expected = {k for k in ("auto", "review") if re.search(rf"\b{k}\b", row)}
        assert expected <= kinds, f"the catalogue names {expected} for this rule"
    if rule_id in registered():
        declared = registered()[rule_id].fix or "suggestion only"
        assert declared in kinds, f"the registry declares fix={declared!r}"


def suppression_comment(rule_id: str) -> str:
    found = re.findall(r"#\s*nanproof:\s*allow\[[^\]]*\]", section(page_text(rule_id), "## Suppression"))
    assert found, "the Suppression section shows no `# nanproof: allow[...]` comment"
    assert found[0].endswith(f"[{rule_id}]"), found[0]
    return found[0]


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_suppression_section_names_the_rule(rule_id):
    suppression_comment(rule_id)


# ---------------------------------------------------------------------------------------
# Examples: analysed, never run
# ---------------------------------------------------------------------------------------
def reported(code: str, rule_id: str) -> list:
    result = scan_source(code, path="example.py")
    assert result.problem is None, result.problem.message
    return [f for f in result.findings if f.rule == rule_id]


@pytest.mark.parametrize("rule_id, ex", blocks("flagged", "clean", "fixed"))
def test_example_is_a_valid_module(rule_id, ex):
    tree = ast.parse(ex.code)
    assert any(isinstance(s, (ast.Import, ast.ImportFrom)) for s in tree.body), "examples carry their imports"


@pytest.mark.parametrize("rule_id, ex", blocks("flagged"))
def test_flagged_example_is_reported_with_its_rule(rule_id, ex):
    require_registered(rule_id)
    assert reported(ex.code, rule_id), f"rules/{rule_id}.md line {ex.line}: not reported"


@pytest.mark.parametrize("rule_id, ex", blocks("clean", "fixed"))
def test_clean_and_fixed_examples_are_not_reported(rule_id, ex):
    require_registered(rule_id)
    found = reported(ex.code, rule_id)
    assert not found, f"rules/{rule_id}.md line {ex.line}: " + "; ".join(f"{f.span.line}:{f.span.column} {f.message}" for f in found)


@pytest.mark.parametrize("rule_id, ex", blocks("flagged"))
def test_suppression_comment_silences_flagged_example(rule_id, ex):
    require_registered(rule_id)
    found = reported(ex.code, rule_id)
    if not found:
        pytest.skip("not reported in the first place (see test_flagged_example_is_reported_with_its_rule)")
    lines = ex.code.splitlines()
    for line in {f.statement_line or f.span.line for f in found}:
        lines[line - 1] += "  " + suppression_comment(rule_id)
    assert not reported("\n".join(lines) + "\n", rule_id)


# ---------------------------------------------------------------------------------------
# Failing inputs: executed with NumPy
# ---------------------------------------------------------------------------------------
def failing_parts(rule_id: str) -> tuple[str, dict, str]:
    """(code, marker options, prose after the block) of the page's failing block."""
    body = section(page_text(rule_id), "## Failing input")
    (ex,) = [e for e in examples(body) if e.tag == "failing"]
    fence = body.index("```python failing")
    marker = re.findall(r"<!--\s*expect:\s*(nonfinite|inaccurate)\s*((?:;\s*\w+=[^\s;]+\s*)*)-->", body[:fence])
    assert len(marker) == 1, "put one <!-- expect: nonfinite|inaccurate --> before the failing block"
    kind, opts = marker[0]
    options = {"expect": kind, **dict(re.findall(r"(\w+)=([^\s;]+)", opts))}
    after = body[body.index("```", fence + 3 + len(ex.code)) + 3 :]
    return ex.code, options, after


@lru_cache(maxsize=None)
def run_failing(rule_id: str) -> dict:
    code = failing_parts(rule_id)[0]
    namespace: dict = {"__name__": f"failing_{rule_id.replace('-', '_')}"}
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scipy and numpy warn about the naive form's overflow
        exec(compile(code, f"rules/{rule_id}.md", "exec"), namespace)
    for name in ("naive", "fixed", "reference"):
        assert name in namespace, f"the failing block defines no `{name}`"
    return namespace


def as_array(value) -> np.ndarray:
    return np.asarray(value, dtype=np.float64)


def max_relative_error(value, reference) -> float:
    v, r = np.broadcast_arrays(as_array(value), as_array(reference))
    with np.errstate(all="ignore"):
        err = np.where(r == 0, np.where(v == 0, 0.0, np.inf), np.abs(v - r) / np.abs(r))
    return float(np.max(np.where(np.isnan(err), np.inf, err)))


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_failing_block_imports_only_reference_libraries_and_names_its_reference(rule_id):
    code = failing_parts(rule_id)[0]
    for node in ast.walk(ast.parse(code)):
        if isinstance(node, ast.Import):
            roots = {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            roots = {(node.module or "").split(".")[0]}
        else:
            continue
        assert roots <= ALLOWED_IMPORTS, f"imports {roots - ALLOWED_IMPORTS}"
    assert re.search(r"#.*reference.*(scipy|numpy|math\.fsum|mpmath)", code, re.I), "name the reference in a comment"


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_naive_form_fails_as_the_page_says(rule_id):
    expect = failing_parts(rule_id)[1]["expect"]
    ns = run_failing(rule_id)
    naive, reference = as_array(ns["naive"]), as_array(ns["reference"])
    assert np.all(np.isfinite(reference)), "the reference itself is not finite"
    if expect == "nonfinite":
        assert not np.all(np.isfinite(naive)), f"naive is finite: {naive}"
    else:
        assert naive.shape == reference.shape
        assert np.all(np.isfinite(naive)), "marked inaccurate but naive is not finite: mark it nonfinite"
        assert max_relative_error(naive, reference) > FAR_MORE_THAN_ROUNDING, f"naive {naive} is as good as {reference}"


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_rewrite_is_finite_and_matches_the_reference(rule_id):
    options = failing_parts(rule_id)[1]
    ns = run_failing(rule_id)
    fixed, reference = as_array(ns["fixed"]), as_array(ns["reference"])
    assert fixed.shape == reference.shape
    assert np.all(np.isfinite(fixed))
    # atol=0: several references are tiny (1e-162), where any absolute floor would pass anything.
    rtol = float(options.get("rtol", 1e-6))
    assert np.allclose(fixed, reference, rtol=rtol, atol=0.0), f"fixed {fixed} vs reference {reference}"


@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_prose_after_failing_block_states_what_it_returns(rule_id):
    after = failing_parts(rule_id)[2].strip().split("\n\n")[0]
    ns = run_failing(rule_id)
    said = dict(re.findall(r"`(naive|fixed)`\s+returns\s+`([^`]+)`", after))
    assert "naive" in said, "state what `naive` returns right after the block"
    assert len(said) == len(re.findall(r"`(?:naive|fixed)`\s+returns", after)), "give each stated result in backticks"
    for name, stated in said.items():
        assert stated_values_agree(stated, ns[name]), f"page says {name} returns {stated}; it returns {ns[name]}"


# ---------------------------------------------------------------------------------------
# Figures
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_every_figure_in_the_prose_is_a_checked_limit(rule_id):
    figures = FIGURES[rule_id]()
    tokens = FIGURE.findall(prose(page_text(rule_id)))
    unchecked = [t for t in tokens if not any(agrees(t, v) for v in figures)]
    assert not unchecked, f"figures no test computes: {unchecked}"
    unstated = [v for v in figures if not any(agrees(t, v) for t in tokens)]
    assert not unstated, f"figures this test expects on the page: {unstated}"


@pytest.mark.parametrize("dt", [F16, F32, F64])
def test_exp_overflows_just_above_log_of_max_finite(dt):
    with np.errstate(over="ignore"):
        assert np.isfinite(np.exp(dt(exp_overflow(dt) - 0.01)))
        assert np.exp(dt(exp_overflow(dt) + 0.01)) == np.inf


@pytest.mark.parametrize("dt", [F32, F64])
def test_exp_rounds_to_zero_just_below_threshold(dt):
    with np.errstate(under="ignore"):
        assert np.exp(dt(exp_zero_below(dt) + 0.01)) > 0
        assert np.exp(dt(exp_zero_below(dt) - 0.01)) == 0


@pytest.mark.parametrize("dt", [F32, F64])
def test_sigmoid_saturates_at_the_stated_limits(dt):
    # scipy.special.expit as the outside implementation; both limits hold for torch.sigmoid too.
    one, zero = sigmoid_one_above(dt), -exp_overflow(dt)
    assert scipy.special.expit(dt(one - 0.01)) < 1 and scipy.special.expit(dt(one + 0.01)) == 1
    assert scipy.special.expit(dt(zero + 0.01)) > 0 and scipy.special.expit(dt(zero - 0.01)) == 0


@pytest.mark.parametrize("dt", [F32, F64])
def test_torch_sigmoid_saturates_at_the_same_limits(dt):
    torch = pytest.importorskip("torch")
    one, zero = sigmoid_one_above(dt), -exp_overflow(dt)
    sig = torch.sigmoid(torch.tensor([one - 0.01, one + 0.01, zero + 0.01, zero - 0.01], dtype=getattr(torch, dt.__name__)))
    assert sig[0] < 1 and sig[1] == 1 and sig[2] > 0 and sig[3] == 0


def test_tanh_sigmoid_loses_the_left_tail_that_expit_keeps():
    # The sigmoid-manual page prefers expit to the tanh form for this reason.
    x = np.array([-40.0, -38.0])
    assert np.all(0.5 * (1 + np.tanh(0.5 * x)) == 0)
    assert np.all(scipy.special.expit(x) > 0)


def test_math_exp_raises_where_numpy_overflows():
    # The sigmoid-manual page: math.exp raises OverflowError instead of returning inf.
    with pytest.raises(OverflowError):
        math.exp(exp_overflow(F64) + 0.01)


def test_one_plus_half_epsilon_rounds_back_to_one():
    eps = finfo(F64, "eps")
    assert 1.0 + eps / 2 == 1.0 and 1.0 + eps > 1.0
    assert np.exp(eps / 2) == 1.0


@pytest.mark.parametrize("dt", [F16, F64])
def test_products_below_square_root_of_tiny_are_subnormal(dt):
    root = dt(math.sqrt(finfo(dt, "tiny")))
    with np.errstate(under="ignore"):
        assert dt(root * dt(1.01)) * dt(root * dt(1.01)) >= finfo(dt, "tiny")
        assert dt(root * dt(0.99)) * dt(root * dt(0.99)) < finfo(dt, "tiny")


@pytest.mark.parametrize("dt", [F32, F64])
def test_squares_overflow_above_square_root_of_max_and_numpy_norm_with_them(dt):
    big = dt(math.sqrt(finfo(dt, "max")) * 1.01)
    with np.errstate(over="ignore"):
        assert np.isfinite(dt(big / dt(1.03)) ** 2) and np.square(big) == np.inf
        vec = np.array([big, 0], dtype=dt)
        # numpy.linalg.norm overflows here; scipy.linalg.norm (scaled BLAS nrm2) does not.
        assert np.linalg.norm(vec) == np.inf
        assert np.isclose(scipy.linalg.norm(vec), big, rtol=1e-6)


def test_torch_vector_norm_overflows_like_numpy():
    # The norm-overflow page says torch.linalg.vector_norm needs explicit scaling.
    torch = pytest.importorskip("torch")
    big = torch.tensor([3e200, 4e200], dtype=torch.float64)
    assert torch.linalg.vector_norm(big) == float("inf")
    scale = big.abs().amax()
    assert torch.isclose(scale * torch.linalg.vector_norm(big / scale), torch.tensor(5e200, dtype=torch.float64))


def test_torch_implicit_softmax_dim_is_first_for_one_and_three_dims():
    torch = pytest.importorskip("torch")
    for ndim, dim in ((0, 0), (1, 0), (2, 1), (3, 0), (4, 1)):
        x = torch.arange(2.0 ** ndim).reshape((2,) * ndim)
        with pytest.warns(UserWarning, match="[Ii]mplicit dimension"):
            implicit = torch.nn.functional.softmax(x)
        assert torch.allclose(implicit, torch.softmax(x, dim=dim)), ndim


def test_implicit_dim_page_emulates_torch():
    torch = pytest.importorskip("torch")
    ns = run_failing("softmax-implicit-dim")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        implicit = torch.nn.functional.softmax(torch.tensor(ns["scores"]))
    assert np.allclose(ns["naive"], implicit.numpy(), rtol=1e-12, atol=0)


def test_torch_bce_of_saturated_sigmoid_has_no_gradient():
    # The bce-from-sigmoid page: the clamped loss is finite but its gradient vanishes,
    # where the with-logits loss has gradient sigmoid(x) - t, about one.
    torch = pytest.importorskip("torch")
    F = torch.nn.functional
    x = torch.tensor([40.0], dtype=torch.float64, requires_grad=True)
    target = torch.tensor([0.0], dtype=torch.float64)
    F.binary_cross_entropy(torch.sigmoid(x), target).backward()
    assert x.grad.item() == 0.0
    x.grad = None
    F.binary_cross_entropy_with_logits(x, target).backward()
    assert x.grad.item() == pytest.approx(1.0)


def test_where_guard_leaks_nan_into_torch_gradient():
    # The xlogx-nan page says the where() guard fixes the value but not the gradient.
    torch = pytest.importorskip("torch")
    p = torch.tensor([0.5, 0.0], dtype=torch.float64, requires_grad=True)
    value = torch.where(p > 0, p * torch.log(p), torch.zeros_like(p)).sum()
    value.backward()
    assert torch.isfinite(value) and torch.isnan(p.grad[1])


# ---------------------------------------------------------------------------------------
# nanproof explain
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("rule_id", PAGE_IDS)
def test_explain_prints_the_page(rule_id):
    require_registered(rule_id)
    result = CliRunner().invoke(cli, ["explain", rule_id])
    assert result.exit_code == 0, result.output
    assert page_text(rule_id) in result.output


def test_explain_unknown_rule_is_a_usage_error():
    result = CliRunner().invoke(cli, ["explain", "no-such-rule"])
    assert result.exit_code == 2
    assert "no-such-rule" in result.output
