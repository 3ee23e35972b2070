"""Test doubles for ``nanproof fix``: rules registered only for the length of one test
(the registry is restored afterwards), flagging calls ``frob(ARG)`` and rewriting them
however the test needs, well or deliberately badly."""
from __future__ import annotations

import ast

import pytest

from nanproof import registry
from nanproof.analyse import Hit
from nanproof.config import Config
from nanproof.registry import Rule
from nanproof.rewrite import import_edit


def frob_call(node) -> bool:
    return isinstance(node.func, ast.Name) and node.func.id == "frob" and len(node.args) == 1


def double_rule(rule_id: str, check, nodes=(ast.Call,), kind="auto", trigger=r"frob\s*\(") -> Rule:
    return Rule(rule_id, "elementary", "warning", "test double", kind, nodes, check, (), (trigger,))


def rewriting(rewrite, kind="auto", with_import=None):
    """A check flagging ``frob(ARG)`` and replacing the call by ``rewrite(ARG text)``."""

    def check(ctx):
        if frob_call(ctx.node):
            more = [import_edit(ctx.analysis.tree, with_import)] if with_import else []
            text = rewrite(ctx.text(ctx.node.args[0]))
            yield Hit(ctx.node, "frob is unstable", ctx.fix(kind, [ctx.edit(ctx.node, text), *more]))

    return check


@pytest.fixture
def rules(monkeypatch):
    """Register test-double rules for one test; the registry is restored afterwards.
    Returns a function (rule_id, check, ...) -> a Config that runs only the doubles."""
    registry.known_ids()  # load the real rules first, so the doubles are only added
    ids = set()

    def add(rule_id, check, **kw) -> Config:
        monkeypatch.setitem(registry._REGISTRY, rule_id, double_rule(rule_id, check, **kw))
        ids.add(rule_id)
        return Config(rules=frozenset(ids), jobs=1)

    return add
