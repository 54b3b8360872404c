"""Which action schemas could make a failed condition true.

For a missing atom: the schemas that add it; for an atom that should be absent:
the schemas that delete it; for a numeric comparison: the schemas whose numeric
effects move a fluent in it the helpful way. Each hint binds the schema
parameters the condition fixes and leaves the rest as ``?name``.
"""

from __future__ import annotations

from plansieve.critics import render
from plansieve.critics.grounding import Calc
from plansieve.critics.model import (
    Add, And, Assign, Atom, Compare, Delete, Domain, ForallEffect, Not, Or, TimedEffect, When,
)
from plansieve.critics.verdict import Hint

_DIRECTION = {"increase": 1, "decrease": -1, "scale-up": 1, "scale-down": -1, "assign": 0}


def _walk(effects):
    for e in effects:
        if isinstance(e, (When, ForallEffect)):
            yield from _walk(e.effects)
        elif isinstance(e, TimedEffect):
            yield from _walk((e.effect,))
        else:
            yield e


class HintIndex:
    """Built once per domain; answers in time proportional to the schemas that match.

    Answers are remembered per ground atom or fluent (a loop asks about the same
    failing conditions round after round); callers get a fresh list each time.
    """

    _MEMO_LIMIT = 4096

    def __init__(self, domain: Domain) -> None:
        self._memo: dict[tuple, list[Hint]] = {}
        self.adders: dict[str, list] = {}
        self.deleters: dict[str, list] = {}
        self.changers: dict[str, list] = {}
        schemas = list(domain.actions.values()) + list(domain.durative_actions.values())
        for schema in schemas:
            for e in _walk(schema.effects):
                if isinstance(e, Add):
                    self.adders.setdefault(e.atom.predicate, []).append((schema, e))
                elif isinstance(e, Delete):
                    self.deleters.setdefault(e.atom.predicate, []).append((schema, e))
                elif isinstance(e, Assign):
                    self.changers.setdefault(e.fluent.function, []).append((schema, e))

    @staticmethod
    def _bind(schema, pattern: tuple[str, ...], ground: tuple[str, ...]) -> list[str] | None:
        params = {p.name for p in schema.params}
        bound: dict[str, str] = {}
        for pat, val in zip(pattern, ground):
            if pat.startswith("?"):
                if pat in params:
                    if bound.setdefault(pat, val) != val:
                        return None
            elif pat != val:
                return None
        return [bound.get(p.name, p.name) for p in schema.params]

    def _from(self, table, name: str, args: tuple[str, ...], target, ok=lambda e: True):
        out = []
        for schema, e in table.get(name, ()):
            pattern = target(e)
            if len(pattern) != len(args) or not ok(e):
                continue
            bound = self._bind(schema, pattern, args)
            if bound is not None:
                out.append(Hint(action=schema.name, args=bound, effect=render.effect(e)))
        return out

    def _remembered(self, memo_key: tuple, compute) -> list[Hint]:
        got = self._memo.get(memo_key)
        if got is None:
            if len(self._memo) >= self._MEMO_LIMIT:
                self._memo.clear()
            got = self._memo[memo_key] = compute()
        return list(got)

    def for_atom(self, key: tuple, want_true: bool) -> list[Hint]:
        table = self.adders if want_true else self.deleters
        return self._remembered(("atom", key, want_true), lambda: self._from(
            table, key[0], tuple(key[1:]), lambda e: e.atom.args))

    def for_fluent(self, key: tuple, direction: int) -> list[Hint]:
        def helps(e: Assign) -> bool:
            d = _DIRECTION[e.op]
            return direction == 0 or d == 0 or d == direction
        return self._remembered(("fluent", key, direction), lambda: self._from(
            self.changers, key[0], tuple(key[1:]), lambda e: e.fluent.args, helps))

    def for_condition(self, f, want_true: bool = True) -> list[Hint]:
        """Hints for a ground formula that came out false (or true, under a ``not``)."""
        hints: list[Hint] = []
        if isinstance(f, Atom):
            hints = self.for_atom(f.key, want_true)
        elif isinstance(f, Not):
            hints = self.for_condition(f.body, not want_true)
        elif isinstance(f, (And, Or)):
            for p in f.parts:
                hints.extend(self.for_condition(p, want_true))
        elif isinstance(f, Compare):
            up = 1 if f.op in (">", ">=") else (-1 if f.op in ("<", "<=") else 0)
            if not want_true:
                up = -up
            for key, sign in _fluents(f.left, 1):
                hints.extend(self.for_fluent(key, up * sign))
            for key, sign in _fluents(f.right, -1):
                hints.extend(self.for_fluent(key, up * sign))
        seen, unique = set(), []
        for h in hints:
            k = (h.action, tuple(h.args))  # one hint per call, naming its first helpful effect
            if k not in seen:
                seen.add(k)
                unique.append(h)
        return unique


def _fluents(e, sign: int):
    """Fluent keys in a ground expression with the sign they enter it (0: unknown)."""
    if type(e) is tuple:
        yield e, sign
    elif type(e) is Calc:
        for i, a in enumerate(e.args):
            if e.op == "+":
                yield from _fluents(a, sign)
            elif e.op == "-":
                yield from _fluents(a, -sign if (i > 0 or len(e.args) == 1) else sign)
            else:
                yield from _fluents(a, 0)
