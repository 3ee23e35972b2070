import textwrap

import pytest

from nanproof.api import scan_source


def findings(src: str, path: str = "example.py"):
    return scan_source(textwrap.dedent(src), path=path).findings


def ids(src: str) -> list[str]:
    """Rule ids reported for a dedented snippet, in report order."""
    return [f.rule for f in findings(src)]


@pytest.fixture
def scan_ids():
    return ids
