"""The hooks in .pre-commit-hooks.yaml, run by the real pre-commit framework.

`pre-commit try-repo REPO HOOK --files ...` installs REPO the way a user's
`.pre-commit-config.yaml` would (a fresh virtual environment, `pip install .` from PyPI)
and runs the hook. REPO is a `git clone` of this project, so what is tested is the
committed state, as a user pinning a `rev` would get it, whatever is uncommitted in the
work tree. Slow: the first run builds the environment (network to PyPI); the rest of the
session reuses it through one PRE_COMMIT_HOME.
"""
from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

from cliutil import CLEAN, GIT_ENV, SOFTMAX, git, new_repo

ROOT = Path(__file__).resolve().parents[1]
pytestmark = [
    pytest.mark.slow,
    pytest.mark.skipif(importlib.util.find_spec("pre_commit") is None, reason="pre-commit is not installed (pip install -e '.[test]')"),
]


@pytest.fixture(scope="session")
def hooks_repo(tmp_path_factory) -> Path:
    if not (ROOT / ".git").exists():
        pytest.skip("the project is not a git checkout; pre-commit installs hooks from git repositories")
    clone = tmp_path_factory.mktemp("hooks") / "nanproof"
    done = subprocess.run(["git", "clone", "--quiet", str(ROOT), str(clone)], env=GIT_ENV, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    return clone


@pytest.fixture(scope="session")
def precommit_home(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("pre-commit-home")


def _try_repo(hooks_repo: Path, home: Path, project: Path, hook: str, *files: str) -> subprocess.CompletedProcess:
    env = {**GIT_ENV, "PRE_COMMIT_HOME": str(home), "NO_COLOR": "1"}
    cmd = [sys.executable, "-m", "pre_commit", "try-repo", str(hooks_repo), hook, "--color", "never", "--files", *files]
    done = subprocess.run(cmd, cwd=project, env=env, capture_output=True, text=True, timeout=600)
    # pre-commit's own failures (installing the hook, a bad manifest) exit 3 and say
    # "An unexpected error"; a hook that fails exits 1.
    assert "An unexpected error" not in done.stdout + done.stderr, done.stdout + done.stderr
    return done


def test_scan_hook_fails_on_unstable_code(hooks_repo, precommit_home, tmp_path):
    project = new_repo(tmp_path / "proj", {"file.py": SOFTMAX, "other.py": SOFTMAX, "notes.txt": SOFTMAX})
    done = _try_repo(hooks_repo, precommit_home, project, "nanproof", "file.py", "notes.txt")
    assert done.returncode == 1, done.stdout
    assert "- hook id: nanproof" in done.stdout
    assert "file.py:3:12: error:" in done.stdout and "[softmax-unshifted]" in done.stdout
    # Only the files pre-commit passes are scanned (not the whole folder), and only
    # Python ones.
    assert "other.py" not in done.stdout and "notes.txt:" not in done.stdout


def test_scan_hook_checks_stubs(hooks_repo, precommit_home, tmp_path):
    stub = "import numpy as np\nz = np.zeros(3)\nvalue = np.exp(z) / np.sum(np.exp(z))\n"
    project = new_repo(tmp_path / "proj", {"api.pyi": stub})
    done = _try_repo(hooks_repo, precommit_home, project, "nanproof", "api.pyi")
    assert done.returncode == 1, done.stdout
    assert "api.pyi:3:9: error:" in done.stdout


def test_scan_hook_passes_clean_code(hooks_repo, precommit_home, tmp_path):
    project = new_repo(tmp_path / "proj", {"file.py": CLEAN})
    done = _try_repo(hooks_repo, precommit_home, project, "nanproof", "file.py")
    assert done.returncode == 0, done.stdout
    assert "Passed" in done.stdout


def _has_fix_command(repo: Path) -> bool:
    """Whether the cloned project's command line has `fix` yet (it is being built)."""
    probe = "import sys; sys.path.insert(0, sys.argv[1]); from nanproof.cli import cli; print('fix' in cli.commands)"
    done = subprocess.run([sys.executable, "-c", probe, str(repo / "src")], capture_output=True, text=True)
    return done.stdout.strip() == "True"


def test_fix_hook_rewrites_and_fails_then_passes(hooks_repo, precommit_home, tmp_path):
    if not _has_fix_command(hooks_repo):
        pytest.skip("the committed project has no `nanproof fix` command yet")
    project = new_repo(tmp_path / "proj", {"file.py": SOFTMAX})
    done = _try_repo(hooks_repo, precommit_home, project, "nanproof-fix", "file.py")
    # pre-commit fails a hook that modifies files (it compares the tree before and after).
    assert done.returncode == 1, done.stdout
    assert git(project, "diff", "--name-only").split() == ["file.py"]
    rewritten = (project / "file.py").read_text()
    assert "np.max(" in rewritten
    # The rewrite is stable: reference scipy.special.softmax, on logits whose plain
    # exp overflows in float64 (exp(1000) > DBL_MAX ~ 1.8e308, IEEE 754 binary64).
    np = pytest.importorskip("numpy")
    special = pytest.importorskip("scipy.special")
    scope: dict = {}
    exec(compile(rewritten, "file.py", "exec"), scope)
    z = np.array([1000.0, 999.0, -5.0])
    np.testing.assert_allclose(scope["f"](z), special.softmax(z), rtol=1e-14)
    again = _try_repo(hooks_repo, precommit_home, project, "nanproof-fix", "file.py")
    assert again.returncode == 0, again.stdout  # nothing left to fix or report
