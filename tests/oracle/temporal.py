"""The ``unified_planning`` library's time-triggered plan validator, as a temporal oracle.

Test- and bench-only. Like reference.py, nothing from ``plansieve`` is imported
here: the library reads the PDDL files itself and judges timed plans with its own
simulator (``TimeTriggeredPlanValidator``, version 1.3.0, read from its source
in ``unified_planning/engines/plan_validator.py``).

What that validator does, as far as our comparison cares:

- Happenings are grouped by exact time. All effects at one time are applied
  together to the state before that time; two effects of different actions on
  one fact at one time ("Double effect") make the plan invalid, even when both
  set the same value. Additive numeric changes combine.
- Point conditions (``at start``, ``at end``, an instantaneous action's
  precondition) are read in the state before their time, with nothing at that
  time applied. ``over all`` conditions are read in the state at the start time
  (after everything at that time) and at every time strictly inside the interval.
- Duration bounds are read in the state before the start.
- Timed initial literals are applied at their times, every one of them, and the
  goal is read in the state after the last happening — a literal stamped after
  the plan's last action included.
- It has no separation rule: interfering happenings at one time are judged by the
  rules above, not rejected.

A plan is a list of ``(time, action, args, duration)`` with exact times; the
duration is None for an instantaneous action.
"""

from __future__ import annotations

import itertools
import warnings
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Sequence

import unified_planning.shortcuts as ups
from unified_planning.engines import TimeTriggeredPlanValidator, ValidationResultStatus
from unified_planning.exceptions import UPException
from unified_planning.io import PDDLReader
from unified_planning.model import DurativeAction
from oracle.reference import state_facts
from unified_planning.model.walkers import StateEvaluator
from unified_planning.plans import ActionInstance, TimeTriggeredPlan

ups.get_environment().credits_stream = None

TimedStep = tuple[Fraction, str, tuple[str, ...], "Fraction | None"]


@dataclass(frozen=True)
class TimedVerdict:
    valid: bool
    reason: str
    # The last state of the run as (true atoms, numbers); None when the oracle raised.
    final: tuple | None = None


class TemporalReference:
    """One problem as the library reads it, with its validator."""

    def __init__(self, domain_path: Path | str, problem_path: Path | str) -> None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            self.problem = PDDLReader().parse_problem(str(domain_path), str(problem_path))
        self.actions = {a.name.lower(): a for a in self.problem.actions}
        self.objects = {o.name.lower(): o for o in self.problem.all_objects}
        self.goalless = self.problem.clone()
        self.goalless.clear_goals()
        self.validator = TimeTriggeredPlanValidator()
        self._candidates: list | None = None
        self._variants: dict[tuple, object] = {}

    def supported(self) -> bool:
        return TimeTriggeredPlanValidator.supports(self.problem.kind)

    def _plan(self, steps: Sequence[TimedStep]) -> TimeTriggeredPlan:
        out = []
        for t, name, args, d in steps:
            ai = ActionInstance(self.actions[name], [self.objects[a] for a in args])
            out.append((Fraction(t), ai, None if d is None else Fraction(d)))
        return TimeTriggeredPlan(out)

    def validate(self, steps: Sequence[TimedStep], *, goals: bool = True,
                 goal_facts: tuple | None = None) -> TimedVerdict:
        """Judge a timed plan; ``goals=False`` ignores the goal, ``goal_facts`` replaces it."""
        problem = self.problem if goals else self.goalless
        if goal_facts is not None:
            problem = self._variant(goal_facts)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                result = self.validator.validate(problem, self._plan(steps))
            except UPException as e:
                return TimedVerdict(False, f"oracle raised {type(e).__name__}: {e}")
        reason = "; ".join(m.message for m in (result.log_messages or [])) or (
            str(result.reason.name) if result.reason is not None else result.status.name)
        final = None
        if result.trace:
            final = self.facts(result.trace[max(result.trace)])
        return TimedVerdict(result.status == ValidationResultStatus.VALID, reason, final)

    def _variant(self, goal_facts: tuple):
        """The problem with its goal replaced by the conjunction of ``goal_facts`` (atoms)."""
        got = self._variants.get(goal_facts)
        if got is None:
            p = self.problem.clone()
            p.clear_goals()
            em = p.environment.expression_manager
            fluents = {f.name.lower(): f for f in p.fluents}
            for name, *args in goal_facts:
                p.add_goal(em.FluentExp(fluents[name], [self.objects[a] for a in args]))
            got = self._variants[goal_facts] = p
        return got

    def facts(self, state) -> tuple[frozenset, dict]:
        atoms, numbers = state_facts(self.problem, state)
        return frozenset(atoms), numbers

    # -- what a scheduler may try ----------------------------------------------

    @property
    def candidates(self) -> list[tuple[str, tuple[str, ...]]]:
        """Every typed ground step, in a fixed order."""
        if self._candidates is None:
            out = []
            for a in sorted(self.problem.actions, key=lambda a: a.name):
                pools = [sorted(self.problem.objects(p.type), key=lambda o: o.name)
                         for p in a.parameters]
                for combo in itertools.product(*pools):
                    out.append((a.name.lower(), tuple(o.name.lower() for o in combo)))
            self._candidates = out
        return self._candidates

    def is_durative(self, name: str) -> bool:
        return isinstance(self.actions[name], DurativeAction)

    def duration_bounds(self, name: str, args: tuple[str, ...]):
        """(lower, upper, lower open, upper open) of a durative step, read in the initial
        state (the domains used here put only static fluents in durations)."""
        a = self.actions[name]
        sub = dict(zip(a.parameters, [self.problem.environment.expression_manager.ObjectExp(
            self.objects[x]) for x in args]))
        se = StateEvaluator(self.problem)
        from unified_planning.model import UPState
        state = UPState(self.problem.explicit_initial_values, self.problem)
        lo = se.evaluate(a.duration.lower.substitute(sub), state=state).constant_value()
        hi = se.evaluate(a.duration.upper.substitute(sub), state=state).constant_value()
        return (Fraction(lo), Fraction(hi), a.duration.is_left_open(),
                a.duration.is_right_open())
