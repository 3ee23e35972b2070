"""Scan results shared by the report tests: a real scan of a small legacy tree, and
findings built by hand for what the rules do not produce (review fixes, suggestions,
multi-line spans, awkward paths)."""
from __future__ import annotations

from pathlib import Path

from cliutil import LOGSUMEXP, SOFTMAX, write

from nanproof.api import scan
from nanproof.config import Config
from nanproof.model import Edit, Finding, Fix, Problem, ScanResult, Span

# Invented scenario: an old project with findings in two folders, a clean file and a
# file that is not valid Python 3.
LEGACY = {
    "legacy/io/probs.py": SOFTMAX,
    "legacy/train/lse.py": LOGSUMEXP,
    "legacy/train/both.py": SOFTMAX + LOGSUMEXP.replace("import numpy as np\n", ""),
    "legacy/clean.py": "x = 1\n",
    "legacy/broken.py": "def f(:\n",
}


def scan_legacy(tmp_path: Path, monkeypatch) -> ScanResult:
    """Scan LEGACY written below TMP_PATH, from TMP_PATH (paths stay relative)."""
    monkeypatch.chdir(tmp_path)
    write(tmp_path, LEGACY)
    return scan(["legacy"], Config(jobs=1))


def constructed(rule_a: str, rule_b: str) -> ScanResult:
    """A review fix with two edits (one an insertion), a multi-line span with only a
    suggestion, a path with a space and a non-ASCII letter, and one problem."""
    review = Fix("review", "torch.log_softmax(z, dim=-1)", (
        Edit(Span(3, 5, 3, 40), "torch.log_softmax(z, dim=-1)"),
        Edit(Span(1, 1, 1, 1), "import torch\n"),
    ))
    return ScanResult(3, (
        Finding(rule_a, "warning", "src/a b/modèle.py", Span(3, 5, 3, 40), "m1", fix=review),
        Finding(rule_b, "note", "src/c.py", Span(7, 9, 9, 2), "m2", suggestion="use logsumexp"),
    ), (Problem("src/bad.py", "not valid Python 3: invalid syntax (line 1)"),))
