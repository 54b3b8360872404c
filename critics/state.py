"""The state simulator every critic shares: read conditions in a state, apply a step.

A state is a pair: a set of ground atoms (tuples) and a dict from fluent keys to
exact numbers. ``holds`` and ``value`` read ground formulas and expressions made
by :mod:`plansieve.critics.grounding`; ``apply`` changes a state in place by
PDDL semantics — every condition (of ``when`` effects too) and every right-hand
side is read in the state before the step, deletes go before adds, and numeric
effects land together.
"""

from __future__ import annotations

import operator
from dataclasses import dataclass, field
from fractions import Fraction

from plansieve.critics.grounding import Calc, GroundAction
from plansieve.critics.model import And, Atom, Compare, Equal, Not, Or, Timed, Truth


class Undefined(Exception):
    """A fluent was read before it had a value."""

    def __init__(self, key: tuple) -> None:
        super().__init__(key)
        self.key = key


class DivisionByZero(Exception):
    def __init__(self, calc: Calc) -> None:
        super().__init__(calc)
        self.calc = calc


class EffectClash(Exception):
    """One step changes a fluent twice and the changes do not simply add up."""

    def __init__(self, key: tuple, ops: list[str]) -> None:
        super().__init__(key)
        self.key = key
        self.ops = ops


@dataclass(slots=True)
class State:
    atoms: set = field(default_factory=set)
    fluents: dict = field(default_factory=dict)

    def copy(self) -> "State":
        return State(set(self.atoms), dict(self.fluents))


_COMPARE = {"<": operator.lt, "<=": operator.le, "=": operator.eq, ">=": operator.ge,
            ">": operator.gt}


def value(e, fluents: dict):
    """The exact value of a ground expression; raises Undefined or DivisionByZero."""
    t = type(e)
    if t is tuple:
        try:
            return fluents[e]
        except KeyError:
            raise Undefined(e) from None
    if t is int or t is Fraction:
        return e
    if t is Calc:
        vals = [value(a, fluents) for a in e.args]
        op = e.op
        if op == "+":
            return sum(vals)
        if op == "*":
            out = 1
            for v in vals:
                out *= v
            return out
        if op == "-":
            if len(vals) == 1:
                return -vals[0]
            out = vals[0]
            for v in vals[1:]:
                out -= v
            return out
        if op == "/":
            out = vals[0]
            for v in vals[1:]:
                if v == 0:
                    raise DivisionByZero(e)
                out = Fraction(out) / v
            return out
        raise ValueError(f"unknown operator {op!r}")
    raise TypeError(f"cannot evaluate {e!r} in a state")


def holds(f, atoms: set, fluents: dict) -> bool:
    """Whether a ground formula holds; raises Undefined or DivisionByZero from comparisons."""
    t = type(f)
    if t is Atom:
        return (f.predicate, *f.args) in atoms
    if t is Not:
        return not holds(f.body, atoms, fluents)
    if t is And:
        return all(holds(p, atoms, fluents) for p in f.parts)
    if t is Or:
        return any(holds(p, atoms, fluents) for p in f.parts)
    if t is Compare:
        return _COMPARE[f.op](value(f.left, fluents), value(f.right, fluents))
    if t is Truth:
        return f.value
    if t is Equal:
        return f.left == f.right
    if t is Timed:
        return holds(f.body, atoms, fluents)
    raise TypeError(f"cannot evaluate {t.__name__} in a state")


def applicable(ga: GroundAction, state: State) -> bool:
    """The precondition test; the STRIPS core first, the rest only if needed."""
    atoms = state.atoms
    if not (ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms)):
        return False
    return all(holds(f, atoms, state.fluents) for f in ga.pre_other)


_ADDITIVE = frozenset({"increase", "decrease"})

_UPDATE = {
    "assign": lambda old, v: v,
    "increase": lambda old, v: old + v,
    "decrease": lambda old, v: old - v,
    "scale-up": lambda old, v: old * v,
    "scale-down": lambda old, v: Fraction(old) / v,
}


def apply(ga: GroundAction, state: State) -> list[Exception]:
    """Apply ``ga``'s effects to ``state`` in place, preconditions unchecked.

    Returns the numeric troubles met (Undefined, DivisionByZero, EffectClash); an
    effect that cannot be computed is skipped, the rest still happen.
    """
    atoms = state.atoms
    if ga.plain:
        atoms -= ga.dels
        atoms |= ga.adds
        return []
    fluents = state.fluents
    troubles: list[Exception] = []
    if not ga.conditional and _distinct_keys(ga.numeric):
        return _apply_simple(ga, atoms, fluents, troubles)
    adds, dels, numeric = ga.adds, ga.dels, list(ga.numeric)
    if ga.conditional:
        adds, dels = set(adds), set(dels)
        for c in ga.conditional:
            try:
                fire = holds(c.condition, atoms, fluents)
            except (Undefined, DivisionByZero) as exc:
                troubles.append(exc)
                fire = False
            if fire:
                adds |= c.adds
                dels |= c.dels
                numeric.extend(c.numeric)
    ops: dict = {}
    for op, key, _ in numeric:
        ops.setdefault(key, []).append(op)
    # Additive changes (increase, decrease) to one fluent combine; any other mix has no
    # order-free meaning (PDDL2.1, Fox & Long 2003, treats it as ill-defined).
    clashing = {k for k, o in ops.items() if len(o) > 1 and not _ADDITIVE.issuperset(o)}
    troubles.extend(EffectClash(k, ops[k]) for k in clashing)
    updates: dict = {}
    for op, key, rhs in numeric:
        if key in clashing:
            continue
        try:
            v = value(rhs, fluents)
            if op == "assign":
                new = v
            else:
                # several additive effects on one fluent: each reads the old state, deltas add up
                if key in updates:
                    old = updates[key]
                elif key in fluents:
                    old = fluents[key]
                else:
                    raise Undefined(key)
                if op == "scale-down" and v == 0:
                    raise DivisionByZero(Calc("/", (key, rhs)))
                new = _UPDATE[op](old, v)
            updates[key] = new
        except (Undefined, DivisionByZero) as exc:
            troubles.append(exc)
    atoms -= dels
    atoms |= adds
    for key, v in updates.items():
        if type(v) is Fraction and v.denominator == 1:
            v = v.numerator
        fluents[key] = v
    return troubles


def _distinct_keys(numeric: tuple) -> bool:
    if len(numeric) < 2:
        return True
    return len({key for _, key, _ in numeric}) == len(numeric)


def _apply_simple(ga: GroundAction, atoms: set, fluents: dict, troubles: list) -> list:
    """``apply`` for the common numeric step: no ``when``, each fluent changed once.

    Nothing can clash or combine, so each change is computed from the state before
    the step and then stored — the same result as the general path, with less work.
    """
    updates = []
    for op, key, rhs in ga.numeric:
        try:
            t = type(rhs)
            v = rhs if t is int or t is Fraction else value(rhs, fluents)
            if op == "assign":
                new = v
            else:
                old = fluents.get(key)
                if old is None:
                    raise Undefined(key)
                if op == "increase":
                    new = old + v
                elif op == "decrease":
                    new = old - v
                elif op == "scale-down" and v == 0:
                    raise DivisionByZero(Calc("/", (key, rhs)))
                else:
                    new = _UPDATE[op](old, v)
            if type(new) is Fraction and new.denominator == 1:
                new = new.numerator
            updates.append((key, new))
        except (Undefined, DivisionByZero) as exc:
            troubles.append(exc)
    atoms -= ga.dels
    atoms |= ga.adds
    for key, new in updates:
        fluents[key] = new
    return troubles
