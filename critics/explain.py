"""Findings that explain why a condition is false in a state, shared by the critics.

The plan simulator and the deadline checker read preconditions and goals the
same way and should say the same thing when one fails: which ground condition,
the values of both sides of a comparison, and the actions that could make it hold.
"""

from __future__ import annotations

from plansieve.critics import render
from plansieve.critics.grounding import GroundAction
from plansieve.critics.model import Compare
from plansieve.critics.state import DivisionByZero, EffectClash, State, Undefined, holds, value
from plansieve.critics.verdict import DivisionByZero as DivisionByZeroFinding
from plansieve.critics.verdict import (
    EffectConflict, FluentUndefined, GoalUnmet, PreconditionFalse,
)
from plansieve.critics.world import World


def failed_preconditions(world: World, ga: GroundAction, state: State, number: int | None,
                         text: str, *, time: float | None = None, part: str | None = None,
                         literal=None) -> list:
    """One finding per false precondition of ``ga`` in ``state`` (empty when it applies).

    ``time`` and ``part`` (start or end of a durative action) locate the finding in
    a timed plan. ``literal(key, positive)``, when given, may explain a false literal
    its own way (say, by the windows that timed literals leave for it): a finding
    it returns replaces the plain one.
    """
    atoms, fluents = state.atoms, state.fluents
    if ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms) and not ga.pre_other:
        return []
    where = {"step": number, "step_text": text, "action": ga.name, "time": time, "part": part}
    out: list = []
    for key in sorted(ga.pre_pos - atoms):
        if literal is not None and (own := literal(key, True)) is not None:
            out.append(own)
            continue
        cond = render.ground_atom(key)
        out.append(PreconditionFalse(
            condition=cond, hints=world.hints.for_atom(key, True),
            message=f"{_at(text, time, part)} needs {cond}, which does not hold", **where))
    for key in sorted(ga.pre_neg & atoms):
        if literal is not None and (own := literal(key, False)) is not None:
            out.append(own)
            continue
        cond = f"(not {render.ground_atom(key)})"
        out.append(PreconditionFalse(
            condition=cond, hints=world.hints.for_atom(key, False),
            message=f"{_at(text, time, part)} needs {render.ground_atom(key)} to be false, "
                    f"but it holds", **where))
    for f in ga.pre_other:
        try:
            if holds(f, atoms, fluents):
                continue
        except (Undefined, DivisionByZero) as exc:
            out.extend(numeric_findings([exc], number, text, "precondition", time=time))
            continue
        out.append(false_condition(world, f, fluents, PreconditionFalse,
                                   _at(text, time, part), **where))
    return out


def _at(text: str, time: float | None, part: str | None) -> str:
    """``(load a b)``, or ``(load a b) at its start (time 4)`` in a timed plan."""
    if time is None:
        return text
    when = f"at its {part}" if part in ("start", "end") else "at"
    return f"{text} {when} (time {render.number(time)})"


def unmet_goals(world: World, state: State, *, time: float | None = None) -> list:
    """One finding per part of the goal that does not hold in ``state``."""
    out: list = []
    for f in world.goal:
        try:
            if holds(f, state.atoms, state.fluents):
                continue
        except (Undefined, DivisionByZero) as exc:
            out.extend(numeric_findings([exc], None, None, "goal", time=time))
            continue
        out.append(false_condition(world, f, state.fluents, GoalUnmet, "the goal", time=time))
    return out


def false_condition(world: World, f, fluents: dict, kind, who: str, **fields):
    """A ``kind`` finding (PreconditionFalse or GoalUnmet) for the false ground formula ``f``."""
    cond = render.formula(f)
    extra: dict = {}
    if isinstance(f, Compare):
        left, right = value(f.left, fluents), value(f.right, fluents)
        extra = {"left_value": float(left), "right_value": float(right)}
        detail = (f"{cond}, but the left side is {render.number(left)} "
                  f"and the right side {render.number(right)}")
    else:
        detail = f"{cond}, which does not hold"
    if kind is GoalUnmet:
        message = f"at the end of the plan the goal needs {detail}"
    else:
        message = f"{who} needs {detail}"
    return kind(condition=cond, hints=world.hints.for_condition(f), message=message,
                **extra, **fields)


def numeric_findings(troubles: list, number: int | None, text: str | None, context: str, *,
                     time: float | None = None) -> list:
    """Findings for numeric troubles met while reading conditions or applying effects."""
    out: list = []
    where = f"{text}: " if text else "goal: "
    for exc in troubles:
        if isinstance(exc, EffectClash):
            fl = render.ground_atom(exc.key)
            out.append(EffectConflict(
                step=number, step_text=text, fluent=fl, effects=exc.ops, time=time,
                message=f"{where}changes {fl} by {' and '.join(exc.ops)} at once; only "
                        f"increases and decreases of one fluent combine in a single step"))
        elif isinstance(exc, Undefined):
            fl = render.ground_atom(exc.key)
            out.append(FluentUndefined(
                step=number, step_text=text, fluent=fl, context=context, time=time,
                message=f"{where}{fl} is read in the {context} but has no value yet"))
        else:
            ex = render.expr(exc.calc)
            out.append(DivisionByZeroFinding(
                step=number, step_text=text, expression=ex, context=context, time=time,
                message=f"{where}{ex} divides by zero in the {context}"))
    return out
