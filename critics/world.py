"""A task compiled once for fast checking: objects, ground actions, goal, hints.

Critics share it so that a plan's steps are resolved and grounded the same way
everywhere. It caches ground actions per distinct step, so checking many plans
against one task (the loop, a sweep) grounds each step once.
"""

from __future__ import annotations

import difflib

from plansieve.critics.grounding import (
    TRUE, GroundAction, Template, Universe, compile_schema, conjuncts, exact, ground_action,
    ground_formula,
)
from plansieve.critics.hints import HintIndex
from plansieve.critics.model import (
    Action, And, DurativeAction, Preference, Task, Timed, TimedEffect,
)
from plansieve.critics.plan import PlanStep
from plansieve.critics.state import State
from plansieve.critics.verdict import ActionUnknown, ArgumentType, ArityMismatch, ObjectUnknown


def _durative_halves(da: DurativeAction) -> tuple[Action, Action]:
    """A durative action read sequentially: its start half, then its end half.

    The start half needs the ``at start`` conditions and has the ``at start``
    effects; the end half needs ``over all`` and ``at end`` conditions and has the
    ``at end`` effects. Durations, overlap and timed literals are for a temporal critic.
    """
    parts = da.condition.parts if isinstance(da.condition, And) else (
        (da.condition,) if da.condition is not None else ())
    # preferences are soft: they never decide whether a step can run
    start_c = [p.body for p in parts if isinstance(p, Timed) and p.when == "start"
               and not isinstance(p.body, Preference)]
    end_c = [p.body for p in parts if isinstance(p, Timed) and p.when in ("all", "end")
             and not isinstance(p.body, Preference)]
    start_e = tuple(e.effect for e in da.effects if isinstance(e, TimedEffect) and e.when == "start")
    end_e = tuple(e.effect for e in da.effects if isinstance(e, TimedEffect) and e.when == "end")
    return (Action(da.name, da.params, And(tuple(start_c)), start_e, da.loc),
            Action(da.name, da.params, And(tuple(end_c)), end_e, da.loc))


class World:
    def __init__(self, task: Task) -> None:
        self.task = task
        self.universe = Universe(task)
        self.hints = HintIndex(task.domain)
        # action name -> its schema(s), each compiled once: one for an action, two halves
        # for a durative action read sequentially
        parts: dict[str, tuple[Action, ...]] = {
            name: (a,) for name, a in task.domain.actions.items()}
        for name, da in task.domain.durative_actions.items():
            parts[name] = _durative_halves(da)
        self._schemas: dict[str, tuple[tuple[Action, Template], ...]] = {
            name: tuple((h, compile_schema(h)) for h in hs) for name, hs in parts.items()}
        self._params = {name: hs[0].params for name, hs in parts.items()}
        # per action, the objects each parameter admits (for the quick type check)
        self._admits = {name: tuple(self.universe.of_types_set(p.types) for p in params)
                        for name, params in self._params.items()}
        # (action, args) -> tuple of GroundActions, or the list of findings that stop the step
        self.cache: dict[tuple, tuple[GroundAction, ...] | list] = {}
        goal = task.problem.goal
        self.goal = conjuncts(ground_formula(goal, {}, self.universe) if goal is not None else TRUE)
        self._init_fluents = {k: exact(v) for k, v in task.problem.init_fluents.items()}
        # Under :action-costs, (total-cost) is only increased and read by the metric, so a
        # problem that leaves it out starts it at 0 rather than failing the first step.
        if "total-cost" in task.domain.functions:
            self._init_fluents.setdefault(("total-cost",), 0)

    def initial_state(self) -> State:
        return State(set(self.task.problem.init), dict(self._init_fluents))

    def resolve(self, step: PlanStep):
        """The ground action(s) a step names, or the findings that say why it names none.

        Returns a tuple of GroundActions (two for a durative action read
        sequentially) or a list of findings without a step number (see ``located``).
        Cached per (action, args) in ``cache``.
        """
        key = (step.action, step.args)
        got = self.cache.get(key)
        if got is None:
            got = self.cache[key] = self._resolve(step)
        return got

    @staticmethod
    def located(findings: list, number: int, step: PlanStep) -> list:
        """Copies of cached step findings that name the step they are about."""
        text = step.call()
        return [f.model_copy(update={"step": number, "step_text": text}) for f in findings]

    def _resolve(self, step: PlanStep):
        halves = self._schemas.get(step.action)
        call = step.call()
        if halves is None:
            similar = difflib.get_close_matches(step.action, list(self._schemas), n=3)
            also = f"; did you mean {', '.join(similar)}?" if similar else ""
            return [ActionUnknown(action=step.action, similar=similar,
                                  message=f"{call}: the domain has no action called "
                                          f"'{step.action}'{also}")]
        params = self._params[step.action]
        if len(params) != len(step.args):
            return [ArityMismatch(action=step.action, expected=len(params), given=len(step.args),
                                  message=f"{call}: '{step.action}' takes {len(params)} "
                                          f"argument(s), the step gives {len(step.args)}")]
        u = self.universe
        if all(arg in ok for ok, arg in zip(self._admits[step.action], step.args)):
            return tuple([ground_action(h, step.args, u, t) for h, t in halves])
        problems = []  # from here on the step is wrong; explain each argument
        for i, (p, arg) in enumerate(zip(params, step.args), 1):
            if arg not in u.objects:
                problems.append(ObjectUnknown(
                    object=arg, position=i,
                    message=f"{call}: argument {i} '{arg}' is not an object of this problem"))
            elif not u.fits(arg, p.types):
                actual = list(u.objects[arg]) or ["object"]
                problems.append(ArgumentType(
                    object=arg, position=i, parameter=p.name, expected=list(p.types),
                    actual=actual,
                    message=f"{call}: argument {i} '{arg}' is of type {' or '.join(actual)}, "
                            f"but {p.name} of '{step.action}' must be "
                            f"{' or '.join(p.types)}"))
        return problems
