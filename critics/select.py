"""Which critics a task calls for: the plan simulator always, the others when there is
something for them to check."""

from __future__ import annotations

from plansieve.critics.model import Task
from plansieve.critics.protocol import Critic

CRITIC_NAMES = ("plan-simulator", "resource-counter", "deadline-checker")


def has_time(task: Task) -> bool:
    """Durative actions, timed literals, trajectory constraints, deadlines or a clock."""
    d, p, lim = task.domain, task.problem, task.limits
    if d.durative_actions or p.timed_literals or d.constraints is not None \
            or p.constraints is not None:
        return True
    return lim is not None and bool(lim.deadline or lim.time.makespan is not None
                                    or lim.time.clock is not None)


def critics_for(task: Task, *, keep_going: bool = False,
                names: list[str] | None = None) -> list[Critic]:
    """The critics named (in chain order), or by default those ``task`` calls for."""
    from plansieve.critics.deadlines import DeadlineChecker
    from plansieve.critics.resources import ResourceCounter, resources_of
    from plansieve.critics.simulator import PlanSimulator

    if names is None:
        names = ["plan-simulator"]
        lim, d, p = task.limits, task.domain, task.problem
        if (lim is not None and lim.resource) or (
                (d.constraints is not None or p.constraints is not None) and resources_of(task)):
            names.append("resource-counter")
        if has_time(task):
            names.append("deadline-checker")
    made = {"plan-simulator": lambda: PlanSimulator(keep_going=keep_going),
            "resource-counter": ResourceCounter, "deadline-checker": DeadlineChecker}
    return [made[n]() for n in names]
