"""[tool.nanproof] configuration: validation errors, where the file is found, how the
command line combines with it, and exclude patterns. The expected behaviour is the
contract in interface.md (keys rules/skip/exclude/include-review; an unknown key or rule
id exits 2 naming it; --config FILE; the nearest pyproject.toml upward)."""
from __future__ import annotations

from pathlib import Path

import pytest

from cliutil import CLEAN, LOGSUMEXP, SOFTMAX, found, run, write
from nanproof.config import ConfigError, build


def _project(root: Path, table: str, files: dict[str, str] | None = None) -> Path:
    write(root, {"pyproject.toml": f"[project]\nname = 'demo'\n\n[tool.nanproof]\n{table}\n", **(files or {})})
    return root


def _rules(root: Path, *extra: str) -> list[str]:
    result = run("scan", str(root), "--format", "json", *extra)
    assert result.exit_code in (0, 1), result.output
    return sorted(rule for _, _, rule in found(result))


BOTH = {"m.py": SOFTMAX + LOGSUMEXP.replace("import numpy as np\n", "")}


# -- errors: exit 2 with one message naming the key, the file and what is accepted ---------
@pytest.mark.parametrize(
    "table, expected",
    [
        ("ruels = ['softmax-unshifted']", ["'ruels'", "accepted keys: rules, skip, exclude, include-review"]),
        ("skip = ['softmax-unshiftd']", ["[tool.nanproof] skip", "'softmax-unshiftd'", "known ids:", "softmax-unshifted"]),
        ("rules = 'softmax-unshifted'", ["[tool.nanproof] rules must be a list of strings", "'softmax-unshifted'"]),
        ("exclude = [1, 2]", ["[tool.nanproof] exclude must be a list of strings"]),
        ("include-review = 'yes'", ["[tool.nanproof] include-review must be true or false"]),
        ("rules = []", ["rules is empty"]),
        ("rules = [", ["not valid TOML"]),
    ],
    ids=["unknown-key", "unknown-rule", "rules-not-list", "exclude-not-strings", "bool", "empty-rules", "bad-toml"],
)
def test_bad_configuration_exits_2_naming_key_and_file(tmp_path, table, expected):
    _project(tmp_path, table, {"m.py": SOFTMAX})
    result = run("scan", str(tmp_path / "m.py"))
    assert result.exit_code == 2, result.output
    assert str(tmp_path / "pyproject.toml") in result.stderr
    for text in expected:
        assert text in result.stderr
    assert result.stdout == ""  # no report from a run that could not start


def test_explicit_config_without_the_table_is_an_error(tmp_path):
    write(tmp_path, {"pyproject.toml": "[tool.other]\nx = 1\n", "m.py": SOFTMAX})
    result = run("scan", str(tmp_path / "m.py"), "--config", str(tmp_path / "pyproject.toml"))
    assert result.exit_code == 2
    assert "no [tool.nanproof] table" in result.stderr


def test_config_file_with_another_name(tmp_path):
    write(tmp_path, {"ci.toml": "[tool.nanproof]\nskip = ['softmax-unshifted']\n", **BOTH})
    assert _rules(tmp_path) == ["logsumexp-unshifted", "softmax-unshifted"]
    assert _rules(tmp_path, "--config", str(tmp_path / "ci.toml")) == ["logsumexp-unshifted"]


def test_missing_config_file_exits_2(tmp_path):
    write(tmp_path, {"m.py": CLEAN})
    assert run("scan", str(tmp_path), "--config", str(tmp_path / "nope.toml")).exit_code == 2


def test_unknown_rule_on_the_command_line_exits_2(tmp_path):
    write(tmp_path, {"m.py": CLEAN})
    result = run("scan", str(tmp_path), "--rule", "no-such-rule")
    assert result.exit_code == 2
    assert "--rule" in result.stderr and "'no-such-rule'" in result.stderr


# -- where the configuration comes from ---------------------------------------------------
def test_found_by_walking_up_from_the_scanned_path(tmp_path, monkeypatch):
    _project(tmp_path / "proj", "skip = ['softmax-unshifted']")
    # A nearer pyproject.toml without the table is passed over, and so is a broken one
    # further up that does not mention the tool at all.
    write(tmp_path / "proj", {"pkg/pyproject.toml": "[tool.other]\nkey = 1\n", "pkg/sub/m.py": SOFTMAX + LOGSUMEXP})
    write(tmp_path, {"pyproject.toml": "this is [not toml"})
    monkeypatch.chdir(tmp_path)  # the walk starts at the scanned path, not here
    assert _rules(tmp_path / "proj" / "pkg" / "sub" / "m.py") == ["logsumexp-unshifted"]
    assert _rules(tmp_path / "proj" / "pkg") == ["logsumexp-unshifted"]


def test_without_configuration_every_rule_runs(tmp_path):
    write(tmp_path, BOTH)
    assert _rules(tmp_path) == ["logsumexp-unshifted", "softmax-unshifted"]


# -- the command line on top of the file --------------------------------------------------
def test_command_line_rule_replaces_file_rules(tmp_path):
    _project(tmp_path, "rules = ['logsumexp-unshifted']", BOTH)
    assert _rules(tmp_path) == ["logsumexp-unshifted"]
    assert _rules(tmp_path, "--rule", "softmax-unshifted") == ["softmax-unshifted"]


def test_command_line_rule_runs_even_if_file_skips_it(tmp_path):
    _project(tmp_path, "skip = ['softmax-unshifted', 'logsumexp-unshifted']", BOTH)
    assert _rules(tmp_path) == []
    assert _rules(tmp_path, "--rule", "softmax-unshifted") == ["softmax-unshifted"]


def test_command_line_skip_adds_to_file_skip(tmp_path):
    _project(tmp_path, "skip = ['logsumexp-unshifted']", BOTH)
    assert _rules(tmp_path, "--skip", "softmax-unshifted") == []


def test_include_review_from_file_and_flags(tmp_path):
    cfg = _project(tmp_path, "include-review = true") / "pyproject.toml"
    assert build([str(tmp_path)], str(cfg)).include_review is True
    # A flag left at its default (False or None) does not undo the file's setting.
    assert build([str(tmp_path)], str(cfg), include_review=False).include_review is True
    assert build([str(tmp_path)], None, jobs=3, changed_since="HEAD").jobs == 3


def test_build_raises_config_error(tmp_path):
    cfg = _project(tmp_path, "colour = true") / "pyproject.toml"
    with pytest.raises(ConfigError, match="unknown key 'colour'"):
        build([str(tmp_path)], str(cfg))


# -- exclude -------------------------------------------------------------------------------
EXCLUDE_TREE = {
    "src/generated/a.py": SOFTMAX,
    "src/b_pb2.py": SOFTMAX,
    "src/real.py": SOFTMAX,
    # Same folder names below another folder: a pattern with a slash is anchored at
    # the configuration file's folder, so this one is scanned.
    "lib/src/generated/c.py": SOFTMAX,
}


def _paths(result) -> list[str]:
    return sorted(Path(p).as_posix() for p, _, _ in found(result))


def test_exclude_patterns(tmp_path, monkeypatch):
    _project(tmp_path, "exclude = ['src/generated/', '*_pb2.py']", EXCLUDE_TREE)
    monkeypatch.chdir(tmp_path)
    assert _paths(run("scan", ".", "--format", "json")) == ["lib/src/generated/c.py", "src/real.py"]


def test_exclude_is_relative_to_the_config_folder_not_the_current_one(tmp_path, monkeypatch):
    _project(tmp_path, "exclude = ['src/generated']", EXCLUDE_TREE)
    monkeypatch.chdir(tmp_path / "src")
    assert _paths(run("scan", ".", "--format", "json")) == ["b_pb2.py", "real.py"]
    monkeypatch.chdir(tmp_path / "lib")
    assert _paths(run("scan", ".", "--format", "json")) == ["src/generated/c.py"]


def test_a_file_named_explicitly_is_scanned_even_if_excluded(tmp_path):
    _project(tmp_path, "exclude = ['src/generated']", EXCLUDE_TREE)
    result = run("scan", str(tmp_path / "src" / "generated" / "a.py"), "--format", "json")
    assert [rule for _, _, rule in found(result)] == ["softmax-unshifted"]
