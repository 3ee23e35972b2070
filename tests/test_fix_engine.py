"""The fix engine (``nanproof.fix``) driven by test-double rules registered only inside
a test, so that every kind of rewrite, good and broken, can be fed to it: formatting and
encoding survive byte for byte outside the rewritten span, the safety net refuses what
it must, writes are atomic and careful, nested findings settle, a second run changes
nothing. The last tests run the real softmax rules end to end against scipy.special."""
from __future__ import annotations

import ast
import codecs
import os
import stat
import textwrap
import time

import pytest

from fixdoubles import frob_call, rewriting, rules  # noqa: F401  (rules is a fixture)
from nanproof import fix as fixmod
from nanproof.analyse import Hit
from nanproof.config import Config
from nanproof.fix import MAX_ROUNDS, fix_bytes, fix_paths
from nanproof.model import Edit, Fix, Span
from nanproof.pages import examples, pages_dir


def _file(tmp_path, text: str | bytes, name="m.py"):
    path = tmp_path / name
    path.write_bytes(text if isinstance(text, bytes) else textwrap.dedent(text).encode())
    return path


# ---------------------------------------------------------------------------------------
# Formatting and encodings survive outside the rewritten span
# ---------------------------------------------------------------------------------------
FORMATTED = b"""\
'''Module docstring.'''
import math  # kept


def f(a, b):
    # a comment line

    total = (
        frob(a)   # first term
        + math.log(b)  # second
    )
    s = 'single'; t = "double"
    return total,  s, t
"""


def test_comments_blank_lines_and_parenthesised_continuations_survive(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, FORMATTED)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == FORMATTED.replace(b"frob(a)", b"unfrob(a)", 1)
    assert [f.rule for c in result.changes for f in c.fixed] == ["frob-good"]
    assert result.exit_code == 0 and result.left.findings == ()


PRESERVED = {
    # name: (source bytes, bytes after `frob(A)` became `unfrob(A)`)
    "crlf": (b"x = 1\r\n\r\ny = frob(x)  # note\r\nz = 2\r\n", b"x = 1\r\n\r\ny = unfrob(x)  # note\r\nz = 2\r\n"),
    # Code points, not bytes, place the edit after "é" and "λ" on the same line.
    "utf8-bom": (
        codecs.BOM_UTF8 + "s = 'é'; λ = 2; y = frob(λ)  # ünïcode\n".encode(),
        codecs.BOM_UTF8 + "s = 'é'; λ = 2; y = unfrob(λ)  # ünïcode\n".encode(),
    ),
    # PEP 263 coding declaration; 0xE9 is "é" in ISO 8859-1.
    "latin-1-cookie": (
        b"# -*- coding: latin-1 -*-\nname = '\xe9t\xe9'  # \xe9\ny = frob(name)\n",
        b"# -*- coding: latin-1 -*-\nname = '\xe9t\xe9'  # \xe9\ny = unfrob(name)\n",
    ),
    "no-final-newline": (b"y = frob(x)", b"y = unfrob(x)"),
    # Python counts no line break at a form feed (str.splitlines would).
    "tabs-and-form-feed": (b"if x:\n\ty = frob(x)\n\x0c\nz = frob(y)\n", b"if x:\n\ty = unfrob(x)\n\x0c\nz = unfrob(y)\n"),
    "parenthesised-node": (b"y = 2 * ( frob(x) ) # (c)\n", b"y = 2 * ( unfrob(x) ) # (c)\n"),
}


@pytest.mark.parametrize("source, expected", PRESERVED.values(), ids=PRESERVED.keys())
def test_encoding_newlines_and_layout_survive_byte_for_byte(tmp_path, rules, source, expected):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == expected and result.exit_code == 0


def test_parentheses_around_the_rewritten_node_stay(tmp_path, rules):
    config = rules("frob-sum", rewriting(lambda a: f"{a} + 1"))
    path = _file(tmp_path, b"y = 2 * ( frob(x) )\n")
    fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = 2 * ( x + 1 )\n"


# ---------------------------------------------------------------------------------------
# The safety net: the file is left untouched, with a problem that says why
# ---------------------------------------------------------------------------------------
def _half_span(ctx):
    """Covers `frob(x) +` of `frob(x) + 1`: half an expression."""
    s = ctx.analysis.span(ctx.node)
    return Edit(Span(s.line, s.column, s.end_line, s.end_column + 2), "unfrob(x)")


def _its_line(ctx):
    """Deletes the whole line holding the call, even inside a list display."""
    return Edit(Span(ctx.node.lineno, 1, ctx.node.lineno + 1, 1), "")


def _editing(edit_of):
    def check(ctx):
        if frob_call(ctx.node):
            edit = edit_of(ctx)
            yield Hit(ctx.node, "frob", Fix("auto", edit.text, (edit,)))

    return check


def _overlapping(ctx):
    """Two edits of one fix: the whole call, and its argument inside it."""
    yield Hit(ctx.node, "frob", ctx.fix("auto", [ctx.edit(ctx.node, "unfrob(y)"), ctx.edit(ctx.node.args[0], "z")]))


REFUSALS = [
    # (test double, source, what the problem says)
    (rewriting(lambda a: f"unfrob({a}"), b"y = frob(x)\n", "is not an expression"),
    # `await` parses anywhere but compiles only inside an async function.
    (rewriting(lambda a: f"await {a}"), b"y = frob(x)\n", "does not compile"),
    # `2 * x + 1` would silently mean (2 * x) + 1.
    (rewriting(lambda a: f"{a} + 1"), b"y = 2 * frob(x)\n", "parentheses needed"),
    (rewriting(lambda a: f"frob(({a}))"), b"y = frob(x)\n", "frob-double still flags the rewritten code"),
    # Each round wraps the call again, so a new finding appears inside every rewrite.
    (rewriting(lambda a: f"wrap(frob({a}))"), b"y = frob(x)\n", f"did not settle after {MAX_ROUNDS} rounds"),
    (_editing(_half_span), b"y = frob(x) + 1\n", "does not cover exactly one expression"),
    (_editing(_its_line), b"v = [\n    frob(x),\n    2,\n]\n", "would change code outside the edited expressions"),
    (lambda ctx: _overlapping(ctx) if frob_call(ctx.node) else (), b"y = frob(x)\n", "two edits overlap"),
]


@pytest.mark.parametrize(
    "check, source, reason",
    REFUSALS,
    ids=["not-an-expression", "does-not-compile", "needs-parentheses", "still-flagged", "never-settles", "half-span", "line-cut", "overlap"],
)
def test_unsafe_rewrite_leaves_the_file_untouched_with_a_problem(tmp_path, rules, check, source, reason):
    config = rules("frob-double", check)
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == source, "a refused fix must leave the file as it was"
    assert result.exit_code == 3 and result.changes == ()
    [problem] = result.left.problems
    assert problem.path == str(path) and problem.message.startswith("not fixed, left unchanged: ")
    assert reason in problem.message
    # What is left is still reported: the finding was not fixed.
    assert [f.rule for f in result.left.findings] == ["frob-double"]


def test_keyword_inserted_inside_a_call_is_applied_with_the_call(tmp_path, rules):
    def check(ctx):  # `frob(x)` -> `frob(x, safe=True)`: an insertion before the `)`
        if frob_call(ctx.node) and not ctx.node.keywords:
            arg = ctx.node.args[0]
            s = ctx.analysis.span(arg)
            insert = Edit(Span(s.end_line, s.end_column, s.end_line, s.end_column), ", safe=True")
            yield Hit(ctx.node, "frob", ctx.fix("auto", [ctx.edit(arg, "abs(x)"), insert]))

    config = rules("frob-keyword", check)
    path = _file(tmp_path, b"y = (frob(x  # the input\n         ) )\n")
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = (frob(abs(x), safe=True  # the input\n         ) )\n"
    assert result.exit_code == 0


# ---------------------------------------------------------------------------------------
# Whole-line edits: imports inserted once, statements deleted
# ---------------------------------------------------------------------------------------
def test_identical_import_insertions_from_several_findings_are_applied_once(tmp_path, rules):
    check = rewriting(lambda a: f"unfrob({a})", kind="review", with_import="from frobkit import unfrob")
    config = rules("frob-import", check, kind="review")
    source = b'"""Doc."""\nimport os\n\n\ndef f(a, b):\n    return frob(a) + frob(b)\n'
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config, include_review=True)
    assert path.read_bytes() == (
        b'"""Doc."""\nimport os\nfrom frobkit import unfrob\n\n\ndef f(a, b):\n    return unfrob(a) + unfrob(b)\n'
    )
    assert len(result.changes[0].fixed) == 2


def test_added_import_lands_below_a_shebang_and_coding_declaration(tmp_path, rules):
    # PEP 263: the declaration works on line 1 or 2 only; with no import and no
    # docstring in the file, the import goes right above the first statement.
    check = rewriting(lambda a: f"unfrob({a})", kind="review", with_import="from frobkit import unfrob")
    config = rules("frob-import", check, kind="review")
    source = b"#!/usr/bin/env python\n# -*- coding: latin-1 -*-\ny = frob('\xe9')\n"
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config, include_review=True)
    assert result.exit_code == 0
    assert path.read_bytes() == b"#!/usr/bin/env python\n# -*- coding: latin-1 -*-\nfrom frobkit import unfrob\ny = unfrob('\xe9')\n"


def test_an_edit_above_a_shebang_and_coding_declaration_is_refused(tmp_path, rules):
    def check(ctx):
        if frob_call(ctx.node):
            top = Edit(Span(1, 1, 1, 1), "import frobkit\n")  # a broken rule inserting at line 1
            yield Hit(ctx.node, "frob is unstable", ctx.fix("auto", [ctx.edit(ctx.node, "frobkit.unfrob(x)"), top]))

    config = rules("frob-top", check)
    source = b"#!/usr/bin/env python\n# -*- coding: latin-1 -*-\ny = frob('\xe9')\n"
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == source and result.exit_code == 3
    assert "shebang or coding declaration" in result.left.problems[0].message


def test_review_fixes_wait_for_include_review(tmp_path, rules):
    config = rules("frob-review", rewriting(lambda a: f"unfrob({a})", kind="review"), kind="review")
    path = _file(tmp_path, b"y = frob(x)\n")
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = frob(x)\n"
    assert result.changes == () and result.exit_code == 1
    assert fix_paths([str(path)], Config(rules=config.rules, jobs=1, include_review=True)).exit_code == 0
    assert path.read_bytes() == b"y = unfrob(x)\n"


def test_whole_statement_deletion_keeps_neighbouring_lines(tmp_path, rules):
    def check(ctx):
        call = ctx.node.value
        if isinstance(call, ast.Call) and isinstance(call.func, ast.Name) and call.func.id == "dropme":
            stmt = ctx.node
            yield Hit(stmt, "dropme", Fix("auto", "", (Edit(Span(stmt.lineno, 1, stmt.end_lineno + 1, 1), ""),)))

    config = rules("drop-stmt", check, nodes=(ast.Expr,), trigger=r"dropme\s*\(")
    source = b"def f():\n    a = 1  # keep\n    dropme(\n        a,  # gone with it\n    )\n\n    return a\n"
    path = _file(tmp_path, source)
    fix_paths([str(path)], config)
    assert path.read_bytes() == b"def f():\n    a = 1  # keep\n\n    return a\n"


# ---------------------------------------------------------------------------------------
# Several findings: nested, overlapping, side by side
# ---------------------------------------------------------------------------------------
def test_nested_findings_are_fixed_over_rounds(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(frob(frob(x)))  # three deep\nz = frob(1) + frob(2)\n")
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = unfrob(unfrob(unfrob(x)))  # three deep\nz = unfrob(1) + unfrob(2)\n"
    assert len(result.changes[0].fixed) == 5 and result.exit_code == 0


def test_overlapping_fixes_of_two_rules_both_end_up_applied(tmp_path, rules):
    # One rule rewrites the whole call, the other only its argument's call.
    rules("frob-outer", rewriting(lambda a: f"unfrob({a})"))

    def inner(ctx):
        if isinstance(ctx.node.func, ast.Name) and ctx.node.func.id == "g" and ctx.node.args:
            yield Hit(ctx.node, "g", ctx.fix("auto", [ctx.edit(ctx.node, f"h({ctx.text(ctx.node.args[0])})")]))

    config = rules("g-inner", inner, trigger=r"g\s*\(")
    path = _file(tmp_path, b"y = frob(g(x))\n")
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = unfrob(h(x))\n"
    assert sorted(f.rule for f in result.changes[0].fixed) == ["frob-outer", "g-inner"]


def test_second_run_changes_no_byte(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, FORMATTED)
    fix_paths([str(path)], config)
    once = path.read_bytes()
    again = fix_paths([str(path)], config)
    assert again.changes == () and path.read_bytes() == once


# ---------------------------------------------------------------------------------------
# Writing: atomic, careful, never forced
# ---------------------------------------------------------------------------------------
def test_diff_only_writes_nothing(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    result = fix_paths([str(path)], config, diff_only=True)
    assert path.read_bytes() == b"y = frob(x)\n"
    assert not result.written and result.changes[0].after == b"y = unfrob(x)\n"
    assert result.exit_code == 0  # nothing would be left after the diff


def test_read_only_file_is_reported_and_keeps_its_mode(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    path.chmod(0o444)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = frob(x)\n"
    assert stat.S_IMODE(path.stat().st_mode) == 0o444
    assert result.exit_code == 3 and "read-only" in result.left.problems[0].message


def test_file_mode_is_kept(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    path.chmod(0o640)
    fix_paths([str(path)], config)
    assert stat.S_IMODE(path.stat().st_mode) == 0o640 and path.read_bytes() == b"y = unfrob(x)\n"
    assert os.listdir(tmp_path) == ["m.py"], "no temporary file is left behind"


def test_symbolic_link_is_followed_not_replaced(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    target = _file(tmp_path, b"y = frob(x)\n", name="real.py")
    link = tmp_path / "link.py"
    link.symlink_to(target)
    fix_paths([str(link)], config)
    assert link.is_symlink() and target.read_bytes() == b"y = unfrob(x)\n"


def test_hard_linked_file_is_reported_not_split(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    os.link(path, tmp_path / "twin.py.txt")
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = frob(x)\n" and "hard links" in result.left.problems[0].message


def test_owner_is_kept(tmp_path, rules):
    if os.geteuid() != 0:
        pytest.skip("only a superuser can give a file to another owner")
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    os.chown(path, 12345, 23456)
    fix_paths([str(path)], config)
    assert (path.stat().st_uid, path.stat().st_gid) == (12345, 23456) and path.read_bytes() == b"y = unfrob(x)\n"


def test_file_changed_during_the_run_is_not_overwritten(tmp_path, rules, monkeypatch):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    real_settle = fixmod.settle

    def settle_while_someone_edits(*args, **kw):
        done = real_settle(*args, **kw)
        path.write_bytes(b"y = frob(x)  # edited meanwhile\n")  # between read and write
        return done

    monkeypatch.setattr(fixmod, "settle", settle_while_someone_edits)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = frob(x)  # edited meanwhile\n"
    assert result.exit_code == 3 and "changed on disk" in result.left.problems[0].message


def test_file_edited_between_scan_and_fix_is_left_alone(tmp_path, rules, monkeypatch):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    real_scan = fixmod.scan

    def scan_then_edit(*args, **kw):
        found = real_scan(*args, **kw)
        path.write_bytes(b"# a line more\ny = frob(x)\n")  # the findings' lines are off by one now
        return found

    monkeypatch.setattr(fixmod, "scan", scan_then_edit)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"# a line more\ny = frob(x)\n"
    assert "changed on disk after the scan began" in result.left.problems[0].message


def test_file_dated_in_the_future_is_still_fixed(tmp_path, rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")
    future = time.time() + 86400  # as unpacked from an archive made on a fast clock
    os.utime(path, (future, future))
    assert fix_paths([str(path)], config).exit_code == 0 and path.read_bytes() == b"y = unfrob(x)\n"


def test_one_refused_file_does_not_stop_the_others(tmp_path, rules):
    rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    config = rules("frob-sum", rewriting(lambda a: f"{a} + 1"))
    bad = _file(tmp_path, b"y = 2 * frob(x)\n", name="bad.py")
    good = _file(tmp_path, b"y = [frob(x)]\n", name="good.py")
    result = fix_paths([str(tmp_path)], Config(rules=frozenset({"frob-sum"}), jobs=1))
    assert good.read_bytes() == b"y = [x + 1]\n" and bad.read_bytes() == b"y = 2 * frob(x)\n"
    assert [p.path for p in result.left.problems] == [str(bad)] and result.exit_code == 3
    assert config.rules == {"frob-good", "frob-sum"}


def test_rewrite_the_file_encoding_cannot_store_is_refused(tmp_path, rules):
    config = rules("frob-greek", rewriting(lambda a: f"unfrob({a}, 'λ')"))
    source = b"# -*- coding: latin-1 -*-\ny = frob(x)  # \xe9\n"  # ISO 8859-1 has no lambda
    path = _file(tmp_path, source)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == source and "encoding (iso-8859-1) cannot store" in result.left.problems[0].message


def test_an_engine_bug_costs_one_file_not_the_run(tmp_path, rules, monkeypatch):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    path = _file(tmp_path, b"y = frob(x)\n")

    def broken(*_):
        raise ValueError("deliberate")

    monkeypatch.setattr(fixmod, "check_header", broken)
    result = fix_paths([str(path)], config)
    assert path.read_bytes() == b"y = frob(x)\n" and result.exit_code == 3
    assert result.left.problems[0].message == "not fixed, left unchanged: internal error ValueError: deliberate"


def test_standard_input_bytes_are_fixed_in_memory(rules):
    config = rules("frob-good", rewriting(lambda a: f"unfrob({a})"))
    result = fix_bytes(b"y = frob(x)  # c\r\n", config)
    assert result.changes[0].after == b"y = unfrob(x)  # c\r\n" and result.exit_code == 0


# ---------------------------------------------------------------------------------------
# End to end with the real softmax rules, checked against scipy.special
# ---------------------------------------------------------------------------------------
def _run_fixed(path, name: str):
    namespace: dict = {}
    exec(compile(path.read_text(), str(path), "exec"), namespace)  # our own test module
    return namespace[name]


def test_real_softmax_and_logsumexp_fixes_match_scipy_and_survive_large_logits(tmp_path):
    np = pytest.importorskip("numpy")
    special = pytest.importorskip("scipy.special")
    source = (
        "import numpy as np\n\n\n"
        "def probs(z):\n"
        "    # unshifted softmax over the last axis\n"
        "    e = np.exp(z)\n"
        "    return e / np.sum(e, axis=-1, keepdims=True)\n\n\n"
        "def lse(x):\n"
        "    return np.log(np.sum(np.exp(x)))\n"
    )
    path = _file(tmp_path, source.encode())
    result = fix_paths([str(path)], Config(jobs=1))
    assert sorted(f.rule for f in result.changes[0].fixed) == ["logsumexp-unshifted", "softmax-unshifted"]
    assert result.exit_code == 0
    probs, lse = _run_fixed(path, "probs"), _run_fixed(path, "lse")
    # 1000 is far past ln(max float64) = 709.78 (numpy.finfo(float64).max), where the
    # unshifted forms return nan and inf; the references are scipy.special's.
    z = np.array([[1000.0, 999.0, -5.0], [0.5, -0.25, 3.0]])
    np.testing.assert_allclose(probs(z), special.softmax(z, axis=-1), rtol=1e-14)
    x = np.array([1000.0, 1000.0, -3.0])
    np.testing.assert_allclose(lse(x), special.logsumexp(x), rtol=1e-14)
    assert path.read_text() == source.replace("np.exp(z)", "np.exp(z - np.max(z, axis=-1, keepdims=True))").replace(
        "np.log(np.sum(np.exp(x)))", "np.logaddexp.reduce(x, axis=None)"
    )
    assert fix_paths([str(path)], Config(jobs=1)).changes == ()


def _flagged_examples() -> list:
    pages = sorted(pages_dir().glob("*.md"))
    return [
        pytest.param(ex.code, id=f"{page.stem}:line{ex.line}")
        for page in pages
        for ex in examples(page.read_text(encoding="utf-8"))
        if ex.tag == "flagged"
    ]


@pytest.mark.parametrize("code", _flagged_examples())
def test_every_flagged_page_example_is_fixed_cleanly_and_once(code):
    """The real rules' fixes (review ones included) on the rule pages' own examples pass
    the safety net, leave no fixable finding, and a second run changes nothing."""
    result = fix_bytes(code.encode(), Config(jobs=1), include_review=True)
    assert result.left.problems == ()
    assert [f.rule for f in result.left.findings if f.fix is not None] == []
    if result.changes:
        again = fix_bytes(result.changes[0].after, Config(jobs=1), include_review=True)
        assert again.changes == () and again.left.problems == ()

