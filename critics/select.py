"""Which critics a task calls for: the plan simulator always, the others when there is
something for them to check."""

from __future__ import annotations

from plansieve.critics.model import Task
from plansieve.critics.protocol import Critic
from plansieve.critics.simulator import PlanSimulator

CRITIC_NAMES = ("plan-simulator", "resource-counter", "deadline-checker")


def critics_for(task: Task, *, keep_going: bool = False,
                names: list[str] | None = None) -> list[Critic]:
    """The critics named (in chain order), or by default those ``task`` calls for."""
    made = {"plan-simulator": lambda: PlanSimulator(keep_going=keep_going)}
    if names is None:
        names = ["plan-simulator"]
    return [made[n]() for n in names]
