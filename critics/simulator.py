"""The plan simulator critic: run the plan from the initial state, check the goal.

Every step's precondition is read in the state before it; a failing step ends
the run, or — with ``keep_going`` — is applied anyway so that one pass reports
every problem it can find. Steps that name no real action are skipped in that
mode. The goal is checked in the final state, one finding per unmet part.

Untimed plans run in the order written; a durative action is read sequentially,
its start half (``at start`` conditions and effects) then its end half (``over
all`` and ``at end`` conditions, ``at end`` effects). Timed plans run as their
happenings in time order (:mod:`plansieve.critics.happenings`): starts (``at
start`` conditions), ends (``at end`` conditions), instantaneous steps and the
problem's timed initial literals up to the plan's end, each read in the state
just before it. What this critic does not judge in a timed plan — ``over all``
conditions, duration constraints, interference between close happenings,
trajectory constraints and deadlines — is the deadline checker's job, so a pass
here means only that every happening applies in that order and the goal holds
when the plan ends.
"""

from __future__ import annotations

import time

from plansieve.critics.explain import (
    failed_preconditions, false_condition, numeric_findings, unmet_goals,
)
from plansieve.critics.happenings import (
    binder_of, exact_time, missing_duration, runs_timed, schedule, usable,
)
from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.state import apply
from plansieve.critics.verdict import Verdict
from plansieve.critics.world import World

# Kept under their old names for callers that imported them from here.
_false_condition = false_condition
_numeric_findings = numeric_findings


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
        if runs_timed(plan):
            findings, checked = self._run_timed(world, plan)
        else:
            findings, checked = self._run_sequential(world, plan)
        return Verdict(critic=self.name, version=self.version, sound=self.sound,
                       passed=not findings, findings=findings, steps_checked=checked,
                       seconds=time.perf_counter() - started)

    def _run_sequential(self, world: World, plan: Plan) -> tuple[list, int]:
        state = world.initial_state()
        atoms = state.atoms
        cache = world.cache
        keep_going = self.keep_going
        binder = binder_of(world)
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
                if binder.needs(ga):
                    if step.duration is None or not usable(step.duration):
                        findings.append(missing_duration(world, number, step, reads=True))
                        if not keep_going:
                            stopped = True
                        break  # the rest of this step cannot be computed
                    ga = binder.bind(ga, exact_time(step.duration))
                problems = failed_preconditions(world, ga, state, number, text)
                if problems and not keep_going:
                    findings.extend(problems)
                    stopped = True
                    break
                troubles = apply(ga, state)
                if troubles:
                    problems += numeric_findings(troubles, number, text, "effect")
                findings.extend(problems)
                if problems and not keep_going:
                    stopped = True
                    break
            if stopped:
                break
        if not stopped:
            findings.extend(unmet_goals(world, state))
        return findings, checked

    def _run_timed(self, world: World, plan: Plan) -> tuple[list, int]:
        """Apply the happenings of a timed plan in time order (see the module docstring)."""
        sched = schedule(world, plan)
        keep_going = self.keep_going
        findings: list = []
        if sched.problems:
            if not keep_going:
                first = min(p.step for p in sched.problems)
                return [p for p in sched.problems if p.step == first], first
            findings.extend(sched.problems)
        state = world.initial_state()
        atoms = state.atoms
        seen: set[int] = set()
        steps = plan.steps
        end = sched.end
        for h in sched.happenings:
            if h.time > end:
                break  # only timed literals are left, stamped after the plan ends
            ga = h.action
            number = h.step
            if number is not None:
                seen.add(number)
            if ga.plain and ga.pre_pos <= atoms and ga.pre_neg.isdisjoint(atoms):
                atoms -= ga.dels
                atoms |= ga.adds
                continue
            when = float(h.time)
            text = steps[number - 1].call() if number is not None else ga.schema.name
            part = h.part if h.part in ("start", "end") else None
            problems = failed_preconditions(world, ga, state, number, text, time=when,
                                            part=part)
            if problems and not keep_going:
                return findings + problems, len(seen)
            troubles = apply(ga, state)
            if troubles:
                problems += numeric_findings(troubles, number, text, "effect", time=when)
            findings.extend(problems)
            if problems and not keep_going:
                return findings, len(seen)
        findings.extend(unmet_goals(world, state, time=float(end)))
        return findings, len(plan.steps)
