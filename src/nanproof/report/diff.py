"""What ``nanproof fix`` changed: a unified diff that ``git apply`` and ``patch -p1``
accept, and a few lines saying which files were (or would be) fixed."""
from __future__ import annotations

import difflib
import io
import os
from collections import Counter

from ..fix import WARNING, FixResult

_NO_EOL = b"\\ No newline at end of file\n"


def patch_path(path: str) -> str:
    """The path a diff header shows: as given, relative paths tidied (``./a.py`` is
    ``a.py``), absolute ones made relative when they lie below the current folder."""
    if os.path.isabs(path):
        rel = os.path.relpath(path)
        path = path if rel.startswith(os.pardir) else rel
    return os.path.normpath(path).replace(os.sep, "/").lstrip("/") if path != "-" else path


def _lines(data: bytes) -> list[bytes]:
    # Lines end at b"\n" only, as diff and patch count them; "\r\n" keeps its "\r".
    return io.BytesIO(data).readlines()


def unified(result: FixResult, context: int = 3) -> bytes:
    """One unified diff for every changed file, in the files' own bytes (encoding, BOM
    and line endings as on disk, so the patch applies to them byte for byte)."""
    out: list[bytes] = []
    for change in result.changes:
        name = os.fsencode(patch_path(change.path))
        rows = difflib.diff_bytes(
            difflib.unified_diff, _lines(change.before), _lines(change.after), b"a/" + name, b"b/" + name, n=context
        )
        for i, row in enumerate(rows):
            if i < 2 and any(c.isspace() for c in name.decode("utf-8", "replace")):
                # A tab ends a name with spaces in it, as GNU diff writes the header
                # (its date follows the tab); patch would stop at the first space.
                row = row[:-1] + b"\t\n"
            out.append(row)
            if i > 1 and not row.endswith(b"\n"):
                out.append(b"\n" + _NO_EOL)
    return b"".join(out)


def summary(result: FixResult) -> str:
    """``fixed a.py: 2 findings (softmax-unshifted 2)`` per file, then the warning once;
    empty when nothing changed."""
    if not result.changes:
        return ""
    verb = "fixed" if result.written else "would fix"
    lines = []
    for change in result.changes:
        rules = Counter(f.rule for f in change.fixed)
        what = ", ".join(f"{rule} {n}" for rule, n in sorted(rules.items()))
        count = len(change.fixed)
        name = "standard input" if change.path == "-" else change.path
        lines.append(f"{verb} {name}: {count} finding{'s' if count != 1 else ''} ({what})")
    lines.append(WARNING)
    return "\n".join(lines) + "\n"
