"""Run options as one frozen value."""
from __future__ import annotations

import os
from dataclasses import dataclass


@dataclass(frozen=True)
class Config:
    rules: frozenset[str] | None = None  # None: every rule
    skip: frozenset[str] = frozenset()
    exclude: tuple[str, ...] = ()
    include_review: bool = False
    jobs: int | None = None  # None: one per CPU
    changed_since: str | None = None

    def enabled(self) -> frozenset[str]:
        from .registry import known_ids

        ids = known_ids() if self.rules is None else set(self.rules)
        return frozenset(ids - set(self.skip))


class ConfigError(Exception):
    """A configuration that cannot be used; the message names the key and the file."""


_KEYS = {"rules": list, "skip": list, "exclude": list, "include-review": bool}


def find_pyproject(start: str) -> str | None:
    """The nearest pyproject.toml upward from ``start`` that has a [tool.nanproof] table."""
    here = os.path.abspath(start if os.path.isdir(start) else os.path.dirname(start) or ".")
    while True:
        candidate = os.path.join(here, "pyproject.toml")
        # Parse only files that mention the tool: a broken pyproject.toml of some
        # enclosing project that does not configure us must not stop the run.
        if os.path.isfile(candidate) and "nanproof" in _read(candidate) and _table(candidate) is not None:
            return candidate
        parent = os.path.dirname(here)
        if parent == here:
            return None
        here = parent


def _read(path: str) -> str:
    try:
        with open(path, encoding="utf-8") as fh:
            return fh.read()
    except (OSError, UnicodeDecodeError) as e:
        raise ConfigError(f"{path}: cannot read: {e}") from None


def _table(path: str) -> dict | None:
    """The file's [tool.nanproof] table, or None when it has none."""
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]
    try:
        data = tomllib.loads(_read(path))
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(f"{path}: not valid TOML: {e}") from None
    tool = data.get("tool", {})
    table = tool.get("nanproof") if isinstance(tool, dict) else None
    if table is not None and not isinstance(table, dict):
        raise ConfigError(f"{path}: [tool.nanproof] must be a table")
    return table


def load_table(path: str) -> dict:
    """The settings in ``path``: its [tool.nanproof] table. A file that has none is an
    error, since it was named on purpose."""
    table = _table(path)
    if table is None:
        raise ConfigError(f"{path}: no [tool.nanproof] table; put the settings under [tool.nanproof]")
    return table


def check_rule_ids(ids, where: str) -> None:
    from .registry import known_ids

    known = known_ids()
    unknown = sorted(set(ids) - known)
    if unknown:
        raise ConfigError(f"{where}: unknown rule id {', '.join(map(repr, unknown))}; known ids: {', '.join(sorted(known))}")


def _anchor(pattern: str, base: str) -> str:
    """A pattern with a slash is a path from the configuration file's folder (made
    absolute here, a leading slash included); one without is matched against every
    file and folder name."""
    pattern = pattern.rstrip("/")
    return os.path.normpath(os.path.join(base, pattern.lstrip("/"))) if "/" in pattern else pattern


def from_table(table: dict, path: str) -> dict:
    """Validate a [tool.nanproof] table into keyword arguments for ``Config``."""
    out: dict = {}
    for k, v in table.items():
        if k not in _KEYS:
            raise ConfigError(f"{path}: unknown key {k!r} in [tool.nanproof]; accepted keys: {', '.join(_KEYS)}")
        want = _KEYS[k]
        if not isinstance(v, want) or (want is list and not all(isinstance(x, str) for x in v)):
            kind = "a list of strings" if want is list else "true or false"
            raise ConfigError(f"{path}: [tool.nanproof] {k} must be {kind}, got {v!r}")
        if k == "rules" and not v:
            raise ConfigError(f"{path}: [tool.nanproof] rules is empty, which would run nothing; leave it out to run every rule")
        if k in ("rules", "skip"):
            check_rule_ids(v, f"{path}: [tool.nanproof] {k}")
        out[k.replace("-", "_")] = v
    base = os.path.dirname(os.path.abspath(path))
    out["exclude"] = tuple(_anchor(p, base) for p in out.get("exclude", ()))
    for k in ("rules", "skip"):
        if k in out:
            out[k] = frozenset(out[k])
    return out


def build(paths: list[str], config_file: str | None, **cli) -> Config:
    """Configuration from the file (``--config``, else the nearest pyproject.toml upward
    from the first PATH with a [tool.nanproof] table), then the command line on top:
    ``rules`` replace the file's (and run even if the file skips them), ``skip`` adds to
    the file's, other options replace the file's value when given (None or False: not
    given). Raises ConfigError."""
    path = config_file or find_pyproject(paths[0] if paths and paths[0] != "-" else ".")
    values = from_table(load_table(path), path) if path else {}
    if cli.get("rules"):
        check_rule_ids(cli["rules"], "--rule")
        values["rules"] = frozenset(cli["rules"])
        values["skip"] = values.get("skip", frozenset()) - values["rules"]
    if cli.get("skip"):
        check_rule_ids(cli["skip"], "--skip")
        values["skip"] = values.get("skip", frozenset()) | frozenset(cli["skip"])
    for k in ("include_review", "jobs", "changed_since"):
        if cli.get(k) is not None and cli.get(k) is not False:
            values[k] = cli[k]
    if cli.get("exclude"):
        values["exclude"] = tuple(values.get("exclude", ())) + tuple(cli["exclude"])
    return Config(**values)
