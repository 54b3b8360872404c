"""The critic protocol: anything with a name, a version, a soundness flag and ``check``."""

from __future__ import annotations

from typing import Protocol, runtime_checkable

from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.verdict import Verdict


@runtime_checkable
class Critic(Protocol):
    """Judges a plan against a task.

    A sound critic never passes a plan that breaks what it checks; only sound
    critics may accept a plan in the loop. ``check`` is synchronous and pure:
    the same task and plan give the same verdict (apart from ``seconds``).
    """

    name: str
    version: str
    sound: bool

    def check(self, task: Task, plan: Plan) -> Verdict: ...
