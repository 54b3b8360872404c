"""Durative actions taken apart for temporal checking: start, invariant, end, duration.

PDDL 2.1 (Fox & Long 2003, sec. 5) gives a durative action three kinds of
condition — ``at start`` (read before the start happening), ``over all`` (an
invariant over the open interval between the two ends) and ``at end`` (read
before the end happening) — effects at either end, and constraints on
``?duration`` (``=``, ``<=``, ``>=`` against an expression that may read
fluents; plain ones and ``at start`` ones are read when the action starts,
``at end`` ones when it ends). The plan simulator's sequential reading folds the
invariant into the end; the deadline checker needs them apart, so this module
grounds each part separately, once per distinct step.

Preferences inside a durative condition are soft (PDDL3) and are left out here.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

from plansieve.critics import render
from plansieve.critics.grounding import (
    GroundAction, compile_schema, ground_action, ground_expr,
)
from plansieve.critics.model import (
    Action, And, Arith, DurationConstraint, DurativeAction, FluentRef, Preference, Timed,
    TimedEffect,
)
from plansieve.critics.world import World


@dataclass(frozen=True, slots=True)
class GroundDuration:
    """One ground duration constraint: ``(op ?duration value)``, read at ``when``."""

    op: str  # "=", "<=" or ">="
    value: object  # ground expression
    when: str  # "start" or "end"
    text: str  # as written, e.g. "(<= ?duration (/ (distance a b) (speed v)))"

    def holds(self, d, v) -> bool:
        if self.op == "=":
            return d == v
        if self.op == "<=":
            return d <= v
        return d >= v


@dataclass(frozen=True, slots=True)
class Parts:
    """A ground durative action taken apart."""

    start: GroundAction  # at start conditions, at start effects
    invariant: GroundAction  # over all conditions, no effects
    end: GroundAction  # at end conditions, at end effects
    durations: tuple[GroundDuration, ...]


def _split(da: DurativeAction) -> tuple[Action, Action, Action]:
    parts = da.condition.parts if isinstance(da.condition, And) else (
        (da.condition,) if da.condition is not None else ())
    conds: dict[str, list] = {"start": [], "all": [], "end": []}
    for p in parts:
        if isinstance(p, Timed) and not isinstance(p.body, Preference):
            conds[p.when].append(p.body)
    effects: dict[str, list] = {"start": [], "end": []}
    for e in da.effects:
        if isinstance(e, TimedEffect):
            effects[e.when].append(e.effect)

    def action(when: str, effs: tuple) -> Action:
        return Action(da.name, da.params, And(tuple(conds[when])), effs, da.loc)

    return (action("start", tuple(effects["start"])), action("all", ()),
            action("end", tuple(effects["end"])))


def _ground_duration(c: DurationConstraint, sub: dict) -> GroundDuration:
    value = ground_expr(c.value, sub)
    inner = f"({c.op} ?duration {render.expr(value)})"
    return GroundDuration(c.op, value, c.when or "start",
                          f"(at {c.when} {inner})" if c.when else inner)


def _names_parameter(e) -> bool:
    if isinstance(e, FluentRef):
        return any(a.startswith("?") for a in e.args)
    if isinstance(e, Arith):
        return any(_names_parameter(a) for a in e.args)
    return False


def duration_text(c: DurationConstraint) -> str:
    """A duration constraint as PDDL: ``(<= ?duration (fuel ?v))``, ``(at end (= ?duration 2))``."""
    inner = f"({c.op} ?duration {render.expr(c.value)})"
    return f"(at {c.when} {inner})" if c.when else inner


class DurativeParts:
    """The parts of every durative step of a task, ground once per (action, arguments)."""

    def __init__(self, world: World) -> None:
        self.world = world
        self._schemas: dict[str, tuple] = {}
        self._cache: dict[tuple, Parts] = {}

    def of(self, name: str, args: tuple[str, ...], halves: tuple) -> Parts:
        """The parts of a step, given the two halves the world resolved it to.

        The start part is the world's start half as it is; so is the end part when
        the action has no ``over all`` condition to take out of the end half. Only
        the rest is ground here.
        """
        key = (name, args)
        got = self._cache.get(key)
        if got is None:
            got = self._cache[key] = self._ground(name, args, halves)
        return got

    def _ground(self, name: str, args: tuple[str, ...], halves: tuple) -> Parts:
        da = self.world.task.domain.durative_actions[name]
        compiled = self._schemas.get(name)
        if compiled is None:
            compiled = self._schemas[name] = self._compile(da)
        inv_pair, end_pair, constant = compiled
        u = self.world.universe
        start, end = halves
        if isinstance(inv_pair, GroundAction):
            inv = inv_pair  # no invariant: one empty ground action serves every step
        else:
            inv = ground_action(inv_pair[0], args, u, inv_pair[1])
            end = ground_action(end_pair[0], args, u, end_pair[1])
        if constant is not None:
            durations = constant
        else:
            sub = {p.name: a for p, a in zip(da.params, args)}
            durations = tuple(_ground_duration(c, sub) for c in da.duration)
        return Parts(start, inv, end, durations)

    def _compile(self, da: DurativeAction) -> tuple:
        _, inv, end = _split(da)
        inv_pair = (inv, compile_schema(inv))
        if not inv.precondition.parts:
            inv_pair = ground_action(inv, tuple(p.name for p in da.params), self.world.universe,
                                     inv_pair[1])
        # durations that name no parameter are ground already
        constant = None
        if all(not _names_parameter(c.value) for c in da.duration):
            constant = tuple(_ground_duration(c, {}) for c in da.duration)
        return inv_pair, (end, compile_schema(end)), constant



_PARTS: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def parts_of(world: World) -> DurativeParts:
    """The durative parts of ``world``'s task, kept as long as the world lives."""
    got = _PARTS.get(world)
    if got is None:
        got = _PARTS[world] = DurativeParts(world)
    return got
