"""Which files a run looks at."""
from __future__ import annotations

import fnmatch
import os
from pathlib import PurePosixPath

from .model import Problem

SKIP_DIRS = frozenset({"__pycache__", "build", "dist", "node_modules", "site-packages"})
SUFFIXES = (".py", ".pyi")


def _excluded(path: str, patterns: tuple[str, ...]) -> bool:
    p = PurePosixPath(path.replace(os.sep, "/"))
    for pat in patterns:
        if os.path.isabs(pat):  # anchored at the configuration file's folder
            if fnmatch.fnmatch(os.path.abspath(path), pat):
                return True
        elif fnmatch.fnmatch(str(p), pat) or p.match(pat) or any(fnmatch.fnmatch(part, pat) for part in p.parts):
            return True
    return False


def _is_venv(dirpath: str) -> bool:
    """A virtual environment (pyvenv.cfg) or a conda environment (conda-meta/), told by
    its contents, not its name: the standard library has a package called ``venv``."""
    return os.path.isfile(os.path.join(dirpath, "pyvenv.cfg")) or os.path.isdir(os.path.join(dirpath, "conda-meta"))


def discover(paths: list[str], exclude: tuple[str, ...] = ()) -> tuple[list[str], list[Problem]]:
    """Expand PATHs into files. A file named explicitly is always scanned; folders are
    walked for ``*.py``/``*.pyi``, skipping hidden folders, virtual environments, build
    output and what ``exclude`` matches. ``-`` stands for standard input."""
    files: list[str] = []
    problems: list[Problem] = []
    for given in paths:
        if given == "-" or os.path.isfile(given):
            files.append(given)
            continue
        if not os.path.isdir(given):
            problems.append(Problem(given, "no such file or folder"))
            continue
        for dirpath, dirnames, filenames in os.walk(given, onerror=lambda e: problems.append(Problem(e.filename or given, f"cannot read folder: {e.strerror}"))):
            keep = []
            for d in sorted(dirnames):
                full = os.path.join(dirpath, d)
                if d.startswith(".") or d in SKIP_DIRS or _is_venv(full) or _excluded(full, exclude):
                    continue
                keep.append(d)
            dirnames[:] = keep
            for f in sorted(filenames):
                full = os.path.join(dirpath, f)
                # a named pipe or socket called x.py would block the reader forever; a
                # broken link is kept so that it is reported
                if f.endswith(SUFFIXES) and (os.path.isfile(full) or os.path.islink(full)) and not _excluded(full, exclude):
                    files.append(full)
    seen: set[str] = set()
    unique = [f for f in files if not (f in seen or seen.add(f))]
    return unique, problems
