"""Run options as one frozen value."""
from __future__ import annotations

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
    import os

    here = os.path.abspath(start if os.path.isdir(start) else os.path.dirname(start) or ".")
    while True:
        candidate = os.path.join(here, "pyproject.toml")
        if os.path.isfile(candidate) and "[tool.nanproof" in _read(candidate):
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


def load_table(path: str) -> dict:
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]
    try:
        data = tomllib.loads(_read(path))
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(f"{path}: not valid TOML: {e}") from None
    table = data.get("tool", {}).get("nanproof", {}) if path.endswith("pyproject.toml") else data.get("tool", {}).get("nanproof", data)
    if not isinstance(table, dict):
        raise ConfigError(f"{path}: [tool.nanproof] must be a table")
    return table


def check_rule_ids(ids, where: str) -> None:
    from .registry import known_ids

    known = known_ids()
    unknown = sorted(set(ids) - known)
    if unknown:
        raise ConfigError(f"{where}: unknown rule id {', '.join(map(repr, unknown))}; known ids: {', '.join(sorted(known))}")


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
        if k in ("rules", "skip"):
            check_rule_ids(v, f"{path}: [tool.nanproof] {k}")
        out[k.replace("-", "_")] = frozenset(v) if k in ("rules", "skip") else tuple(v) if k == "exclude" else v
    return out


def build(paths: list[str], config_file: str | None, **cli) -> Config:
    """Configuration from the file (``--config`` or the nearest pyproject.toml), then the
    command line on top. Raises ConfigError."""
    path = config_file or find_pyproject(paths[0] if paths and paths[0] != "-" else ".")
    values = from_table(load_table(path), path) if path else {}
    for k in ("rules", "skip"):
        if cli.get(k):
            check_rule_ids(cli[k], f"--{k[:-1] if k == 'rules' else k}")
            values[k] = frozenset(cli[k])
    for k in ("include_review", "jobs", "changed_since"):
        if cli.get(k) is not None and cli.get(k) is not False:
            values[k] = cli[k]
    if cli.get("exclude"):
        values["exclude"] = tuple(values.get("exclude", ())) + tuple(cli["exclude"])
    return Config(**values)
