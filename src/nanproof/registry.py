"""The rule registry: declaring a rule registers it.

A rule is declared once, in its family module under ``nanproof/rules/``, with the
``@rule(...)`` decorator on its check function. The declaration holds everything the
rest of the tool needs: id, family, severity, one-line summary, fix kind, the node types
the check wants to see, the rules it takes precedence over, and (by convention) the
page ``rules/<id>.md``.
"""
from __future__ import annotations

import ast
import importlib
import re
from dataclasses import dataclass, field
from typing import Callable, Iterator

from .model import FIX_KINDS, SEVERITIES

FAMILIES = ("softmax", "loss", "elementary", "statistics", "api")
# Modules under nanproof/rules/ that declare rules (helpers start with "_"); imported
# on first use.
_RULE_MODULES = ("softmax", "softmax_jacobian", "cross_entropy", "loss", "elementary", "statistics")

_REGISTRY: dict[str, "Rule"] = {}
# A letter, digit or underscore, or an escaped punctuation mark, not made optional.
_LITERAL_START = re.compile(r"(?:[A-Za-z0-9_]|\\[^A-Za-z0-9])(?![?*{])")
_loaded = False


@dataclass(frozen=True)
class Rule:
    id: str
    family: str
    severity: str
    summary: str
    # "auto", "review", or None when the rule only suggests code.
    fix: str | None
    nodes: tuple[type[ast.AST], ...]
    check: Callable[..., Iterator] = field(repr=False, compare=False)
    overrides: tuple[str, ...] = ()
    # Regular-expression fragments (word-bounded at the start) of which one must occur in
    # a file for this rule to have anything to look at; files with none are not analysed.
    triggers: tuple[str, ...] = ()

    def page(self) -> str:
        from .pages import page_text

        return page_text(self.id)


def rule(
    id: str,
    *,
    family: str,
    severity: str,
    summary: str,
    fix: str | None,
    nodes: tuple[type[ast.AST], ...],
    triggers: tuple[str, ...],
    overrides: tuple[str, ...] = (),
) -> Callable:
    """Declare and register a rule; the decorated function is its check."""
    if family not in FAMILIES:
        raise ValueError(f"{id}: unknown family {family!r}")
    if severity not in SEVERITIES:
        raise ValueError(f"{id}: unknown severity {severity!r}")
    if fix is not None and fix not in FIX_KINDS:
        raise ValueError(f"{id}: unknown fix kind {fix!r}")

    for t in triggers:
        if not _LITERAL_START.match(t):
            # the prefilter's alternation is fast only when every branch starts with a
            # literal character (a leading \\w* or optional group made it 5x slower)
            raise ValueError(f"{id}: trigger {t!r} must start with a literal character")

    def register(check: Callable) -> Callable:
        if id in _REGISTRY:
            raise ValueError(f"rule id {id!r} is declared twice")
        _REGISTRY[id] = Rule(id, family, severity, summary, fix, nodes, check, overrides, triggers)
        return check

    return register


def _load() -> None:
    global _loaded
    if not _loaded:
        _loaded = True
        for name in _RULE_MODULES:
            importlib.import_module(f"nanproof.rules.{name}")


def all_rules() -> list[Rule]:
    _load()
    return sorted(_REGISTRY.values(), key=lambda r: (FAMILIES.index(r.family), r.id))


def get(rule_id: str) -> Rule:
    _load()
    return _REGISTRY[rule_id]


def known_ids() -> set[str]:
    _load()
    return set(_REGISTRY)
