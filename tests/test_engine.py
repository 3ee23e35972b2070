"""The pipeline around the rules: discovery, reading, parsing, parallel runs, positions,
name resolution and data flow."""
import os

from conftest import findings, ids
from nanproof.api import scan
from nanproof.config import Config
from nanproof.discover import discover

UNSTABLE = "import numpy as np\ndef probs(z):\n    return np.exp(z) / np.sum(np.exp(z))\n"


def test_discovery_skips_hidden_virtualenv_and_build_folders_but_not_explicit_files(tmp_path):
    for rel in ("pkg/a.py", ".hidden/b.py", "venv/c.py", "build/d.py", "pkg/__pycache__/e.py", "env2/f.py", "pkg/g.pyi", "pkg/h.txt"):
        p = tmp_path / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text("x = 1\n")
    (tmp_path / "env2" / "pyvenv.cfg").write_text("home = /usr\n")
    (tmp_path / "venv" / "pyvenv.cfg").write_text("home = /usr\n")
    files, problems = discover([str(tmp_path), str(tmp_path / ".hidden" / "b.py")])
    rel = sorted(os.path.relpath(f, tmp_path) for f in files)
    assert rel == [".hidden/b.py", "pkg/a.py", "pkg/g.pyi"]
    assert problems == []


def test_a_missing_path_is_a_problem_and_the_rest_is_scanned(tmp_path):
    (tmp_path / "ok.py").write_text(UNSTABLE)
    result = scan([str(tmp_path / "ok.py"), str(tmp_path / "nope.py")], Config(jobs=1))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"]
    assert [p.path for p in result.problems] == [str(tmp_path / "nope.py")]
    assert result.exit_code == 3


def test_bad_files_become_one_line_problems_while_others_are_analysed(tmp_path):
    (tmp_path / "good.py").write_text(UNSTABLE)
    (tmp_path / "py2.py").write_text('print "hello"\n')
    (tmp_path / "binary.py").write_bytes(b"\x00\x01\x02exp(")
    (tmp_path / "latin.py").write_bytes(b"# -*- coding: utf-8 -*-\nx = '\xe9'\n")
    (tmp_path / "broken.py").write_text("def f(:\n    np.exp(x)\n")
    result = scan([str(tmp_path)], Config(jobs=1))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"]
    messages = {os.path.basename(p.path): p.message for p in result.problems}
    assert set(messages) == {"py2.py", "binary.py", "latin.py", "broken.py"}
    assert "Python 2" in messages["py2.py"]
    assert all("\n" not in m for m in messages.values())


def test_utf8_bom_and_latin1_cookie_files_are_read(tmp_path):
    (tmp_path / "bom.py").write_bytes(b"\xef\xbb\xbf" + UNSTABLE.encode())
    (tmp_path / "latin.py").write_bytes(b"# -*- coding: latin-1 -*-\n# caf\xe9\n" + UNSTABLE.encode())
    result = scan([str(tmp_path)], Config(jobs=1))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"] * 2
    assert result.problems == ()


def test_columns_count_code_points_not_bytes():
    (f,) = findings("import numpy as np\ndef probs(z):\n    s = 'é'; return np.exp(z) / np.sum(np.exp(z))\n")
    line = "    s = 'é'; return np.exp(z) / np.sum(np.exp(z))"
    assert f.span.column == line.index("np.exp") + 1
    assert f.span.end_column == len(line) + 1


def test_parallel_run_gives_the_same_findings_in_the_same_order(tmp_path):
    for i in range(12):
        (tmp_path / f"m{i:02d}.py").write_text(UNSTABLE + ("\n" * i) + "def lse(x):\n    return np.log(np.sum(np.exp(x)))\n")
    one = scan([str(tmp_path)], Config(jobs=1))
    two = scan([str(tmp_path)], Config(jobs=2))
    assert one == two and len(one.findings) == 24


def test_helper_imported_from_another_scanned_module_is_followed(tmp_path):
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "helpers.py").write_text("import numpy as np\ndef to_probs(z):\n    e = np.exp(z - z.max())\n    return e / e.sum()\n")
    (pkg / "train.py").write_text("import numpy as np\nfrom .helpers import to_probs\ndef nll(z, y):\n    return -np.log(to_probs(z)[y])\n")
    (pkg / "other.py").write_text("import numpy as np\nfrom pkg.helpers import to_probs\ndef lp(z):\n    return np.log(to_probs(z))\n")
    result = scan([str(tmp_path)], Config(jobs=1))
    assert sorted((os.path.basename(f.path), f.rule) for f in result.findings) == [("other.py", "log-of-softmax"), ("train.py", "cross-entropy-from-probs")]


def test_very_deep_expressions_do_not_crash_the_run(tmp_path):
    deep = "import numpy as np\nx = " + " + ".join(["np.exp(1)"] * 3000) + "\n"
    (tmp_path / "deep.py").write_text(deep)
    (tmp_path / "ok.py").write_text(UNSTABLE)
    result = scan([str(tmp_path)], Config(jobs=1))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"]


def test_names_resolve_through_every_import_style():
    for header, exp, total in [
        ("import numpy as np", "np.exp", "np.sum"),
        ("import numpy", "numpy.exp", "numpy.sum"),
        ("from numpy import exp, sum as total", "exp", "total"),
        ("import jax.numpy as jnp", "jnp.exp", "jnp.sum"),
        ("from jax import numpy as jnp", "jnp.exp", "jnp.sum"),
        ("import torch", "torch.exp", "torch.sum"),
        ("import tensorflow as tf", "tf.math.exp", "tf.reduce_sum"),
        ("import tensorflow.compat.v1 as tf", "tf.exp", "tf.reduce_sum"),
    ]:
        src = f"{header}\ndef probs(z):\n    e = {exp}(z)\n    return e / {total}(e)\n"
        assert ids(src) == ["softmax-unshifted"], header


def test_a_local_function_named_like_a_framework_one_is_not_the_framework_one():
    assert ids("def exp(v):\n    return v\ndef log(v):\n    return v\ndef f(z):\n    return log(sum(exp(z)))\n") == []


def test_reassignment_after_a_shift_is_followed_in_order():
    # the shift is undone by a later assignment: the softmax is unshifted again
    src = "import numpy as np\ndef f(z, w):\n    z = z - z.max()\n    z = w * 1e3\n    e = np.exp(z)\n    return e / e.sum()\n"
    assert ids(src) == ["softmax-unshifted"]


def test_a_package_named_venv_is_scanned_but_a_real_environment_is_not(tmp_path):
    (tmp_path / "venv").mkdir()
    (tmp_path / "venv" / "builder.py").write_text(UNSTABLE)
    (tmp_path / "env").mkdir()
    (tmp_path / "env" / "pyvenv.cfg").write_text("home = /usr/bin\n")
    (tmp_path / "env" / "lib.py").write_text(UNSTABLE)
    (tmp_path / "conda").mkdir()
    (tmp_path / "conda" / "conda-meta").mkdir()
    (tmp_path / "conda" / "x.py").write_text(UNSTABLE)
    files, _ = discover([str(tmp_path)])
    assert [os.path.relpath(f, tmp_path) for f in files] == [os.path.join("venv", "builder.py")]


def test_global_statement_at_module_level_does_not_loop():
    assert ids("import numpy as np\nglobal cache\ncache = None\ndef f(z):\n    global cache\n    return np.log(np.sum(np.exp(z)))\n") == ["logsumexp-unshifted"]


def test_exp_of_negated_uniform_draws_is_bounded():
    assert ids("import numpy as np\nrng = np.random.default_rng(0)\ny = np.random.rand(10)\nw = np.exp(-y)\np = w / w.sum()\nq = np.exp(-rng.random(5))\nr = q / q.sum()\n") == []


def test_a_named_pipe_called_like_a_module_does_not_block_the_scan(tmp_path):
    os.mkfifo(tmp_path / "pipe.py")
    (tmp_path / "ok.py").write_text(UNSTABLE)
    result = scan([str(tmp_path)], Config(jobs=1))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"]
    explicit = scan([str(tmp_path / "pipe.py")], Config(jobs=1))
    assert explicit.exit_code in (2, 3) or explicit.problems


def test_library_scan_refuses_an_unknown_revision(tmp_path):
    import subprocess

    import pytest

    from nanproof.config import ConfigError

    subprocess.run(["git", "init", "-q", str(tmp_path)], check=True)
    (tmp_path / "a.py").write_text("x = 1\n")
    with pytest.raises(ConfigError):
        scan([str(tmp_path)], Config(jobs=1, changed_since="no-such-revision"))


def test_old_mac_line_endings_are_numbered_like_python_does():
    (f,) = findings(UNSTABLE.replace("\n", "\r"))
    assert f.rule == "softmax-unshifted" and f.span.line == 3


def test_a_helper_is_followed_across_files_whatever_rules_are_selected(tmp_path):
    (tmp_path / "helpers.py").write_text("import numpy as np\ndef soft(z):\n    e = np.exp(z - z.max())\n    return e / e.sum()\n")
    (tmp_path / "use.py").write_text("import numpy as np\nfrom helpers import soft\ndef f(z):\n    return np.log(soft(z))\n")
    result = scan([str(tmp_path)], Config(jobs=1, rules=frozenset({"log-of-softmax"})))
    assert [(os.path.basename(f.path), f.rule) for f in result.findings] == [("use.py", "log-of-softmax")]


def test_an_added_import_goes_below_a_shebang_and_coding_line():
    from nanproof.analyse import parse
    from nanproof.rewrite import import_edit

    tree = parse("m.py", "#!/usr/bin/env python\n# -*- coding: utf-8 -*-\n\nx = 1\n")
    assert import_edit(tree, "import numpy as np").span.line == 4


def test_a_rule_that_raises_makes_a_problem_and_the_other_rules_still_report(monkeypatch):
    import ast as _ast

    from nanproof import registry
    from nanproof.api import scan_source

    def broken(ctx):
        raise ValueError("boom")
        yield  # pragma: no cover

    registry.all_rules()  # load the real rules first
    bad = registry.Rule("broken-rule", "api", "note", "test double", None, (_ast.Call,), broken, (), (r"exp\s*\(",))
    monkeypatch.setitem(registry._REGISTRY, "broken-rule", bad)
    result = scan_source(UNSTABLE, "m.py", Config(rules=frozenset({"broken-rule", "softmax-unshifted"})))
    assert [f.rule for f in result.findings] == ["softmax-unshifted"]
    assert result.problem is not None and "broken-rule" in result.problem.message and "\n" not in result.problem.message


def test_a_trigger_that_does_not_start_with_a_literal_is_refused():
    import ast as _ast

    import pytest

    from nanproof.registry import rule

    with pytest.raises(ValueError, match="literal"):
        rule("x-test", family="api", severity="note", summary="s", fix=None, nodes=(_ast.Call,), triggers=(r"\w*softmax",))


def test_every_rule_module_is_loaded_by_the_registry():
    import pkgutil

    import nanproof.rules
    from nanproof.registry import _RULE_MODULES

    on_disk = {m.name for m in pkgutil.iter_modules(nanproof.rules.__path__) if not m.name.startswith("_")}
    assert on_disk == set(_RULE_MODULES)


def test_names_assigned_inside_a_function_are_not_module_bindings():
    # ``e`` is local to make(): the module-level use is not that exp
    src = "import numpy as np\ndef make(z):\n    e = np.exp(z)\n    return e\np = e / e.sum()\n"
    assert ids(src) == []
