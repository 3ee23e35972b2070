"""Rule pages: ``rules/<id>.md`` in the source tree, ``nanproof/pages/`` in a wheel.

A page is Markdown. Fenced code blocks tagged ``python flagged``, ``python clean``,
``python fixed`` and ``python failing`` are examples that the test-suite executes:
every flagged block must be reported with the page's rule, no clean or fixed block may
be, and a failing block runs under NumPy and asserts that the naive form fails where the
rewrite matches the reference.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

_BLOCK = re.compile(r"^```python[ \t]+(\w+)[ \t]*\n(.*?)^```[ \t]*$", re.M | re.S)
BLOCK_TAGS = ("flagged", "clean", "fixed", "failing")


def pages_dir() -> Path:
    here = Path(__file__).resolve().parent
    packaged = here / "pages"
    if packaged.is_dir():
        return packaged
    return here.parents[1] / "rules"  # running from a source checkout


def page_text(rule_id: str) -> str:
    path = pages_dir() / f"{rule_id}.md"
    try:
        return path.read_text(encoding="utf-8")
    except OSError:
        return f"# {rule_id}\n\n(no page found at {path})\n"


@dataclass(frozen=True)
class Example:
    tag: str
    code: str
    line: int  # line of the opening fence in the page, for error messages


def examples(text: str) -> list[Example]:
    out = []
    for m in _BLOCK.finditer(text):
        out.append(Example(m.group(1), m.group(2), text.count("\n", 0, m.start()) + 1))
    return out
