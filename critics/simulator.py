"""The plan simulator critic: run the plan from the initial state, check the goal.

Every step's precondition is read in the state before it; a failing step ends
the run, or — with ``keep_going`` — is applied anyway so that one pass reports
every problem it can find. Steps that name no real action are skipped in that
mode. The goal is checked in the final state, one finding per unmet part.

Steps run in the order written. A durative action is read sequentially, its start
half then its end half; durations, overlap and timed literals are for a temporal
critic, so for a timed plan a pass here means only that the sequential reading holds.
"""

from __future__ import annotations

import time

from plansieve.critics import render
from plansieve.critics.grounding import GroundAction
from plansieve.critics.model import Compare, Task
from plansieve.critics.plan import Plan
from plansieve.critics.state import (
    DivisionByZero, EffectClash, State, Undefined, apply, holds, value,
)
from plansieve.critics.verdict import DivisionByZero as DivisionByZeroFinding
from plansieve.critics.verdict import (
    EffectConflict, FluentUndefined, GoalUnmet, PreconditionFalse, Verdict,
)
from plansieve.critics.world import World


class PlanSimulator:
    """Sound critic: a plan passes only if every step is applicable and the goal holds."""

    name = "plan-simulator"
    version = "1.0"
    sound = True

    def __init__(self, keep_going: bool = False) -> None:
        self.keep_going = keep_going
        self._worlds: dict[int, World] = {}

    def world(self, task: Task) -> World:
        """The compiled task, kept while the same Task object is checked again."""
        w = self._worlds.get(id(task))
        if w is None or w.task is not task:
            if len(self._worlds) >= 64:
                self._worlds.clear()
            w = self._worlds[id(task)] = World(task)
        return w

    def check(self, task: Task, plan: Plan) -> Verdict:
        started = time.perf_counter()
        world = self.world(task)
        state = world.initial_state()
        atoms = state.atoms
        cache = world.cache
        keep_going = self.keep_going
        findings: list = []
        checked = 0
        stopped = False
        for number, step in enumerate(plan.steps, 1):
            checked = number
            resolved = cache.get((step.action, step.args)) or world.resolve(step)
            if resolved.__class__ is list:
                findings.extend(world.located(resolved, number, step))
                if not keep_going:
                    stopped = True
                    break
                continue
            for ga in resolved:
                # the plain STRIPS step that applies: (state - dels) | adds, nothing else to do
                if ga.plain and ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms):
                    atoms -= ga.dels
                    atoms |= ga.adds
                    continue
                text = step.call()
                problems = self._failed_conditions(world, ga, state, number, text)
                if problems and not keep_going:
                    findings.extend(problems)
                    stopped = True
                    break
                troubles = apply(ga, state)
                if troubles:
                    problems += _numeric_findings(troubles, number, text, "effect")
                findings.extend(problems)
                if problems and not keep_going:
                    stopped = True
                    break
            if stopped:
                break
        if not stopped:
            findings.extend(self._unmet_goals(world, state))
        return Verdict(critic=self.name, version=self.version, sound=self.sound,
                       passed=not findings, findings=findings, steps_checked=checked,
                       seconds=time.perf_counter() - started)

    @staticmethod
    def _failed_conditions(world: World, ga: GroundAction, state: State, number: int,
                           text: str) -> list:
        atoms, fluents = state.atoms, state.fluents
        if ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms) and not ga.pre_other:
            return []
        out: list = []
        for key in sorted(ga.pre_pos - atoms):
            cond = render.ground_atom(key)
            out.append(PreconditionFalse(
                step=number, step_text=text, action=ga.name, condition=cond,
                hints=world.hints.for_atom(key, True),
                message=f"{text} needs {cond}, which does not hold"))
        for key in sorted(ga.pre_neg & atoms):
            cond = f"(not {render.ground_atom(key)})"
            out.append(PreconditionFalse(
                step=number, step_text=text, action=ga.name, condition=cond,
                hints=world.hints.for_atom(key, False),
                message=f"{text} needs {render.ground_atom(key)} to be false, but it holds"))
        for f in ga.pre_other:
            try:
                if holds(f, atoms, fluents):
                    continue
            except (Undefined, DivisionByZero) as exc:
                out.extend(_numeric_findings([exc], number, text, "precondition"))
                continue
            out.append(_false_condition(world, f, fluents, PreconditionFalse, text,
                                        step=number, step_text=text, action=ga.name))
        return out

    @staticmethod
    def _unmet_goals(world: World, state: State) -> list:
        out: list = []
        for f in world.goal:
            try:
                if holds(f, state.atoms, state.fluents):
                    continue
            except (Undefined, DivisionByZero) as exc:
                out.extend(_numeric_findings([exc], None, None, "goal"))
                continue
            out.append(_false_condition(world, f, state.fluents, GoalUnmet, "the goal"))
        return out


def _false_condition(world: World, f, fluents: dict, kind, who: str, **fields):
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


def _numeric_findings(troubles: list, number: int | None, text: str | None, context: str):
    out: list = []
    where = f"{text}: " if text else "goal: "
    for exc in troubles:
        if isinstance(exc, EffectClash):
            fl = render.ground_atom(exc.key)
            out.append(EffectConflict(
                step=number, step_text=text, fluent=fl, effects=exc.ops,
                message=f"{where}changes {fl} by {' and '.join(exc.ops)} at once; only "
                        f"increases and decreases of one fluent combine in a single step"))
        elif isinstance(exc, Undefined):
            fl = render.ground_atom(exc.key)
            out.append(FluentUndefined(
                step=number, step_text=text, fluent=fl, context=context,
                message=f"{where}{fl} is read in the {context} but has no value yet"))
        else:
            ex = render.expr(exc.calc)
            out.append(DivisionByZeroFinding(
                step=number, step_text=text, expression=ex, context=context,
                message=f"{where}{ex} divides by zero in the {context}"))
    return out
