"""Run critics on one plan, no loop: the call an agent back end makes to gate a plan."""

from __future__ import annotations

from collections.abc import Sequence

from pydantic import BaseModel, ConfigDict

from plansieve.critics.model import Task
from plansieve.critics.plan import Plan
from plansieve.critics.protocol import Critic
from plansieve.critics.simulator import PlanSimulator
from plansieve.critics.verdict import Verdict


class CheckResult(BaseModel):
    """Every critic's verdict; ``passed`` only when every sound critic passed.

    Advisory (unsound) critics add findings but neither block nor accept.
    """

    model_config = ConfigDict(frozen=True)

    passed: bool
    verdicts: list[Verdict]

    @property
    def findings(self):
        return [f for v in self.verdicts for f in v.findings]


def check(task: Task, plan: Plan, critics: Sequence[Critic] | None = None, *,
          keep_going: bool = False) -> CheckResult:
    """Judge ``plan`` with ``critics`` (default: the plan simulator)."""
    chosen = list(critics) if critics is not None else [PlanSimulator(keep_going=keep_going)]
    verdicts = [c.check(task, plan) for c in chosen]
    sound = [v for v in verdicts if v.sound]
    return CheckResult(passed=bool(sound) and all(v.passed for v in sound), verdicts=verdicts)
