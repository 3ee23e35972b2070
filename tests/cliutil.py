"""Helpers for the tests that drive the command line and git: run a command, read
the JSON report, build a throwaway git repository."""
from __future__ import annotations

import json
import os
import subprocess
from pathlib import Path

from click.testing import CliRunner

from nanproof.cli import cli

# The two patterns the softmax rules flag (tests/test_rules_softmax.py pins them down).
SOFTMAX = "import numpy as np\ndef f(z):\n    return np.exp(z) / np.sum(np.exp(z))\n"
LOGSUMEXP = "import numpy as np\ndef g(x):\n    return np.log(np.sum(np.exp(x)))\n"
CLEAN = "import numpy as np\ndef h(x):\n    return np.sqrt(x * x + 1.0)\n"

# git without the user's or the machine's configuration, so a global diff.noprefix,
# a commit signing key or a default branch name cannot change what the tests see.
GIT_ENV = {
    **os.environ,
    "GIT_CONFIG_GLOBAL": os.devnull,
    "GIT_CONFIG_NOSYSTEM": "1",
    "GIT_AUTHOR_NAME": "Test",
    "GIT_AUTHOR_EMAIL": "test@example.invalid",
    "GIT_COMMITTER_NAME": "Test",
    "GIT_COMMITTER_EMAIL": "test@example.invalid",
}


def run(*args: str, input: str | None = None):
    """``nanproof ARGS`` in-process; the result has exit_code, stdout and stderr."""
    return CliRunner().invoke(cli, list(args), input=input)


def report(result) -> dict:
    """The JSON report a ``--format json`` run printed."""
    return json.loads(result.stdout)


def found(result) -> list[tuple[str, int, str]]:
    """(path, line, rule) of each finding in a ``--format json`` run."""
    return [(f["path"], f["line"], f["rule"]) for f in report(result)["findings"]]


def git(repo: Path, *args: str) -> str:
    done = subprocess.run(["git", *args], cwd=repo, env=GIT_ENV, capture_output=True, text=True)
    assert done.returncode == 0, f"git {' '.join(args)}: {done.stderr}"
    return done.stdout


def new_repo(path: Path, files: dict[str, str]) -> Path:
    """A git repository at PATH whose first commit holds FILES (name -> text)."""
    path.mkdir(parents=True, exist_ok=True)
    git(path, "init", "-q")
    write(path, files)
    git(path, "add", "--", *files)
    git(path, "commit", "-q", "-m", "first")
    return path


def write(folder: Path, files: dict[str, str]) -> None:
    for name, text in files.items():
        (folder / name).parent.mkdir(parents=True, exist_ok=True)
        (folder / name).write_text(text, encoding="utf-8")
